"""Figure builders on small synthetic inputs: files written, not blank, metadata, projections."""

from __future__ import annotations

import os
import stat

import numpy as np
import pytest
from PIL import Image
from scipy import integrate, stats

from retina import figures as F
from retina.errors import InputError
from retina.figures.curves import CHANCE_RMS_DEG, _angle_to_kappa, _kappa_to_angle
from retina.figures.sphere_maps import lambert_upper
from retina.figures.visual_fields import head_lonlat


def not_blank(png, min_colours=64, min_std=20.0):
    """Pixel statistics of a written PNG: many distinct colours and real contrast."""
    im = Image.open(png).convert("RGB")
    a = np.asarray(im)
    colours = np.unique(a.reshape(-1, 3), axis=0).shape[0]
    assert colours > min_colours, f"{png}: only {colours} colours"
    assert a.std() > min_std, f"{png}: standard deviation {a.std():.1f}"
    return im


def check_files(stem, title_part):
    png, svg = stem.with_suffix(".png"), stem.with_suffix(".svg")
    im = not_blank(png)
    assert title_part in im.info.get("Title", "")
    assert len(im.info.get("Description", "")) > 40  # the caption with units and parameters
    text = svg.read_text()
    assert "<svg" in text and title_part in text
    return im


# --- synthetic inputs -------------------------------------------------------------------------------

def synthetic_yield(d):
    # An even function with a known maximum along +z and minima on the equator at phi = +/-45 deg.
    return 0.3 + 0.02 * (1.5 * d[:, 2] ** 2 - 0.5) + 0.004 * (d[:, 0] ** 2 - d[:, 1] ** 2) ** 2


@pytest.fixture(scope="module")
def retina_points():
    rng = np.random.default_rng(3)

    def cap(az, n):
        a = np.radians(az)
        axis = np.array([np.cos(a), np.sin(a), 0.0])
        v = rng.normal(size=(6 * n, 3))
        v /= np.linalg.norm(v, axis=1, keepdims=True)
        return v[v @ axis > np.cos(np.radians(80))][:n]

    vis = np.vstack([cap(-60, 200), cap(60, 200)])
    eye = np.r_[np.zeros(200, int), np.ones(200, int)]
    return vis, eye


def b_head_for(yaw_deg, inc_deg=66.0):
    # Derived: world field (cos I, 0, sin I) in NED; the head turned by yaw about z (down) sees
    # R_z(-yaw) applied to it.
    y, i = np.radians(yaw_deg), np.radians(inc_deg)
    return np.stack([np.cos(y) * np.cos(i), -np.sin(y) * np.cos(i), np.full_like(y, np.sin(i))], axis=-1)


# --- projections and helper maths ---------------------------------------------------------------------

def test_lambert_map_is_equal_area():
    # Derived: on the Lambert azimuthal equal-area map of a hemisphere, the fraction of the disc within
    # polar angle t0 equals the fraction of the hemisphere's area, (1 - cos t0) / 1.
    X, Y, dirs = lambert_upper(801)
    inside = np.isfinite(dirs[..., 0])
    theta = np.arccos(np.clip(dirs[inside][:, 2], -1, 1))
    for t0 in np.radians([20.0, 45.0, 70.0]):
        frac = np.mean(theta < t0)
        assert frac == pytest.approx(1 - np.cos(t0), abs=5e-3)  # pixelisation of the disc edge
    assert np.allclose(np.linalg.norm(dirs[inside], axis=1), 1.0)


def test_head_lonlat_follows_the_head_frame():
    # Derived from the head frame (x beak, y right, z down): beak at (0, 0), right at azimuth +90,
    # straight up at elevation +90.
    lon, lat = head_lonlat(np.array([[1.0, 0, 0], [0, 1.0, 0], [0, 0, -1.0], [1.0, -1.0, 0]]))
    assert np.allclose(np.degrees(lon[:2]), [0, 90]) and np.isclose(np.degrees(lat[2]), 90)
    assert np.isclose(np.degrees(lon[3]), -45) and np.isclose(lat[3], 0)


def test_vmf_typical_tilt_against_quadrature():
    # Reference: scipy.integrate.quad of the von Mises-Fisher density exp(k cos t) sin t.
    for k in (0.5, 3.0, 20.0, 200.0):
        num = integrate.quad(lambda t: np.cos(t) * np.exp(k * (np.cos(t) - 1)) * np.sin(t), 0, np.pi)[0]
        den = integrate.quad(lambda t: np.exp(k * (np.cos(t) - 1)) * np.sin(t), 0, np.pi)[0]
        assert _kappa_to_angle(k) == pytest.approx(np.degrees(np.arccos(num / den)), rel=1e-6)
        assert _angle_to_kappa(_kappa_to_angle(k)) == pytest.approx(k, rel=1e-6)


def test_chance_level_is_the_rms_of_a_uniform_heading():
    # Reference: scipy.integrate.quad of x^2 over (-180, 180) / 360.
    ms = integrate.quad(lambda x: x * x, -180, 180)[0] / 360
    assert CHANCE_RMS_DEG == pytest.approx(np.sqrt(ms), rel=1e-12)


# --- every builder writes a non-blank figure with metadata ---------------------------------------------

def test_yield_sphere(tmp_path):
    fig = F.yield_sphere(synthetic_yield, params="synthetic test function", path=tmp_path / "y", dpi=80)
    check_files(tmp_path / "y", "Reaction yield")
    # Derived from the formula: largest yield along the z axis, smallest along the equatorial
    # diagonals (x^2 = y^2, where the quartic term vanishes); the figure reports axes canonically.
    amax, amin = fig.retina_extremes
    assert np.allclose(amax, [0, 0, 1], atol=1e-2)
    assert abs(amin[2]) < 1e-2 and abs(abs(amin[0]) - abs(amin[1])) < 2e-2
    assert "Largest yield along (+0.00, +0.00, +1.00)" in fig.retina_caption


def test_modulation_fields(tmp_path, retina_points):
    vis, eye = retina_points
    heads = np.array([0.0, 45.0, 90.0, 135.0])
    B = b_head_for(heads)
    mod = np.array([0.03 * ((vis @ b) ** 2 - 1 / 3) for b in B])
    fig = F.modulation_fields(vis, eye, mod, heads, B, params="synthetic", path=tmp_path / "m", dpi=80)
    im = check_files(tmp_path / "m", "Modulation over the visual fields")
    assert len([a for a in fig.axes if a.name == "mollweide"]) == 4
    # The diverging scale is centred at zero: colour limits symmetric.
    arts = [c for a in fig.axes if a.name == "mollweide" for c in a.collections if c.get_array() is not None]
    lo, hi = arts[0].get_clim()
    assert lo == pytest.approx(-hi)
    assert im.size[0] > im.size[1]


def test_scan_filmstrip_and_animation(tmp_path, retina_points):
    vis, eye = retina_points
    yaw = np.linspace(-60, 60, 13)
    B = b_head_for(yaw)
    mod = np.array([0.03 * ((vis @ b) ** 2 - 1 / 3) for b in B])
    old = os.umask(0o022)
    try:
        F.scan_filmstrip(vis, eye, mod, yaw, B, n_frames=6, path=tmp_path / "s", dpi=80)
        gif = F.scan_animation(vis, eye, mod, yaw, B, tmp_path / "scan", fps=5, dpi=50)
    finally:
        os.umask(old)
    check_files(tmp_path / "s", "Head scan film strip")
    assert gif.name == "scan.gif"
    # the GIF goes through the same atomic writer as the other figures: mode 0666 & ~umask
    # (common practice, no source)
    assert stat.S_IMODE(gif.stat().st_mode) == stat.S_IMODE((tmp_path / "s.png").stat().st_mode) == 0o644
    im = Image.open(gif)
    assert im.n_frames == yaw.size
    im.seek(yaw.size // 2)
    not_blank_frame = np.asarray(im.convert("RGB"))
    assert np.unique(not_blank_frame.reshape(-1, 3), axis=0).shape[0] > 32
    assert not list(tmp_path.glob(".*part")) and not list(tmp_path.glob(".scan.*"))  # no temporaries left


def test_animation_blitting_matches_full_redraws(retina_points):
    # The GIF's frames redraw only what changes (the colour meshes, the artists above them, the
    # marks and the title) onto a saved background.  Reference: the same frames drawn in full by
    # matplotlib's Agg canvas, one complete draw per frame; blitting draws the same artists in
    # the same order, so the pixels agree exactly.
    from retina.figures.visual_fields import scan_frames

    vis, eye = retina_points
    yaw = np.linspace(-60, 60, 5)
    B = b_head_for(yaw)
    mod = np.array([0.03 * ((vis @ b) ** 2 - 1 / 3) for b in B])
    fast = scan_frames(vis, eye, mod, yaw, B, dpi=50)
    full = scan_frames(vis, eye, mod, yaw, B, dpi=50, blit=False)
    assert len(fast) == len(full) == yaw.size
    for a, b in zip(fast, full):
        assert a.shape == b.shape and np.array_equal(a, b)
    assert not np.array_equal(fast[0], fast[-1])        # the frames do change


def test_animation_palette_is_shared_and_keeps_white():
    # One palette for every frame (no colour flicker), pure white kept exactly, and each pixel
    # mapped to a near colour: 255 octree colours for 360 colours of smooth ramps leave every
    # pixel within a few levels per channel (12 of 255 allowed; common practice, no source).
    from retina.figures.visual_fields import _palette_frames

    x = np.linspace(0.0, 1.0, 120)
    frames = []
    for k in range(3):
        f = np.full((40, 120, 3), 255, np.uint8)
        ramp = np.stack([200 * x, 60 + 100 * x * (k + 1) / 3, 220 - 200 * x], axis=1)
        f[10:30] = np.round(ramp).astype(np.uint8)[None]
        frames.append(f)
    ims = _palette_frames(frames)
    assert len({tuple(im.getpalette()) for im in ims}) == 1
    for im, f in zip(ims, frames):
        a = np.asarray(im.convert("RGB")).astype(int)
        assert (a[:10] == 255).all()
        assert np.abs(a - f).max() <= 12


def test_precision_and_disorder(tmp_path):
    n = np.logspace(0, 5, 11)
    F.precision_curves(n, {"single pose": 30 / np.sqrt(n), "scan": 10 / np.sqrt(n)},
                       decoded_deg={"single pose": np.minimum(35 / np.sqrt(n), 100)},
                       light_levels={"dim": 30.0, "bright": 3000.0}, path=tmp_path / "p", dpi=80)
    check_files(tmp_path / "p", "Heading precision")
    k = np.array([0.5, 2.0, 10.0, 50.0])
    d = 0.05 * k / (k + 5)
    F.disorder_tolerance(k, d, {"dim": 3 / d, "bright": 0.3 / d}, path=tmp_path / "d", dpi=80)
    check_files(tmp_path / "d", "Tolerance to molecular disorder")


def test_trial_histograms_mean_vector(tmp_path):
    rng = np.random.default_rng(11)
    data = {"dim": np.degrees(rng.vonmises(np.radians(200), 2.0, 60)) % 360,
            "bright": np.degrees(rng.vonmises(np.radians(200), 20.0, 60)) % 360}
    fig = F.trial_histograms(data, 200.0, path=tmp_path / "t", dpi=80)
    check_files(tmp_path / "t", "Simulated orientation trials")
    # Reference: scipy.stats.circmean gives the same mean direction as the caption reports.
    for lab, ang in data.items():
        mu = np.degrees(stats.circmean(np.radians(ang)))
        assert f"{lab}: n = 60, mean {mu:.1f} deg" in fig.retina_caption


def _tight_reference(fig, path, dpi):
    # matplotlib's own tight save: a layout draw, then a draw shifted by the box's corner
    fig.savefig(path, format="png", dpi=dpi, bbox_inches="tight", pad_inches=0.03)
    return np.asarray(Image.open(path).convert("RGB")).astype(int)


def test_png_from_one_draw_matches_matplotlib_tight_save(tmp_path):
    # save_figure crops the PNG out of one full Agg draw (with a margin around the figure, so the
    # x label below the figure's edge is in it) and reuses that box for the SVG.  Reference:
    # matplotlib's savefig(bbox_inches="tight"), whose box starts at a fraction of a pixel: same
    # size within a pixel; and matplotlib's savefig with that box moved to whole pixels: the same
    # pixels exactly.
    from matplotlib.transforms import Bbox

    from retina.figures._base import _render_tight_png, new_figure, style

    with style():
        fig = new_figure(3.5, 2.4)
        ax = fig.add_subplot()
        x = np.linspace(0, 10, 200)
        ax.plot(x, np.sin(x))
        ax.set_xlabel("x label")
        ax.set_title("a title")
    F.save_figure(fig, tmp_path / "one", formats=("png", "svg"), dpi=150)
    ours = np.asarray(Image.open(tmp_path / "one.png").convert("RGB")).astype(int)
    ref = _tight_reference(fig, tmp_path / "ref.png", 150)
    assert abs(ours.shape[0] - ref.shape[0]) <= 1 and abs(ours.shape[1] - ref.shape[1]) <= 1
    h, w = min(ours.shape[0], ref.shape[0]), min(ours.shape[1], ref.shape[1])
    d = np.abs(ours[:h, :w] - ref[:h, :w]).max(axis=2)
    assert (d > 64).mean() < 0.03 and d.mean() < 2.0            # only antialiased edges differ
    _, box = _render_tight_png(fig, 150)
    snapped = Bbox.from_bounds(round(box.x0 * 150) / 150, round(box.y0 * 150) / 150, ours.shape[1] / 150,
                               ours.shape[0] / 150)
    fig.savefig(tmp_path / "snapped.png", format="png", dpi=150, bbox_inches=snapped, pad_inches=0)
    assert np.array_equal(ours, np.asarray(Image.open(tmp_path / "snapped.png").convert("RGB")).astype(int))
    assert Image.open(tmp_path / "one.png").info["Software"] == "retina-compass"
    assert abs(Image.open(tmp_path / "one.png").info["dpi"][0] - 150) < 0.5
    svg = (tmp_path / "one.svg").read_text()
    assert "<svg" in svg


@pytest.mark.parametrize("x", [1.3, 3.0])
def test_png_of_a_figure_with_an_artist_outside_it_keeps_the_artist(tmp_path, x):
    # A text placed beyond the figure's right edge: within the drawing margin (x = 1.3 figure
    # widths) it is cropped from the one draw; beyond it (x = 3) there is nothing to crop and the
    # PNG is saved the usual way.  Reference: matplotlib's tight save, same size within a pixel.
    from retina.figures._base import new_figure, style

    with style():
        fig = new_figure(2.0, 1.5)
        ax = fig.add_subplot()
        ax.plot([0, 1], [0, 1])
        fig.text(x, 0.5, "outside")
    F.save_figure(fig, tmp_path / "out", formats=("png",), dpi=100)
    ours = np.asarray(Image.open(tmp_path / "out.png").convert("RGB"))
    assert ours.shape[1] > (x - 1) * 2.0 * 100 + 2.0 * 100 + 10    # wider than the figure: the text is in
    ref = _tight_reference(fig, tmp_path / "ref.png", 100)
    assert abs(ours.shape[0] - ref.shape[0]) <= 1 and abs(ours.shape[1] - ref.shape[1]) <= 1


def test_log_axes_are_labelled_in_plain_text_with_the_same_ticks(tmp_path):
    # The log-axis labels are plain text with Unicode superscripts instead of mathtext.
    # Reference: matplotlib's own LogFormatterSciNotation labels the same ticks; the text is the
    # same number written with superscripts (10^-3 -> 10⁻³, 2x10^-3 -> 2×10⁻³, common practice,
    # no source).
    from matplotlib.ticker import LogFormatterSciNotation

    from retina.figures._base import plain_log_labels, power_label

    assert power_label(1e-3) == "10\N{SUPERSCRIPT MINUS}\N{SUPERSCRIPT THREE}"
    assert power_label(100.0) == "10\N{SUPERSCRIPT TWO}" and power_label(1.0) == "10\N{SUPERSCRIPT ZERO}"
    assert power_label(-1e-5) == "\N{MINUS SIGN}10\N{SUPERSCRIPT MINUS}\N{SUPERSCRIPT FIVE}"
    assert power_label(0.0) == "0"
    assert power_label(2e-3) == "2\N{MULTIPLICATION SIGN}10\N{SUPERSCRIPT MINUS}\N{SUPERSCRIPT THREE}"
    fig = F.precision_curves([1.0, 10.0, 100.0, 1e4], {"a": [30.0, 10.0, 3.0, 0.3]})
    ax = fig.axes[0]
    fmt = ax.yaxis.get_major_formatter()
    assert isinstance(fmt, LogFormatterSciNotation) and type(fmt) is not LogFormatterSciNotation
    ref = LogFormatterSciNotation()
    ref.axis = ax.xaxis
    for axis in (ax.xaxis, ax.yaxis):
        ref.axis = axis
        locs = axis.get_majorticklocs()
        ref.set_locs(locs)
        axis.get_major_formatter().set_locs(locs)
        for v in locs:
            theirs = ref(v)
            mine = axis.get_major_formatter()(v)
            assert bool(theirs) == bool(mine)
            if theirs:
                e = int(round(np.log10(v)))
                assert theirs == f"$\\mathdefault{{10^{{{e}}}}}$" and mine == power_label(v)
    # no mathtext left in the saved figure's log-axis labels
    F.save_figure(fig, tmp_path / "p", formats=("svg",))
    svg = (tmp_path / "p.svg").read_text()
    assert "10\N{SUPERSCRIPT TWO}" in svg and "mathdefault" not in svg
    assert plain_log_labels(fig) is fig


def test_pdf_metadata_and_errors(tmp_path):
    fig = F.precision_curves([1.0, 10.0], {"a": [10.0, 3.0]})
    paths = F.save_figure(fig, tmp_path / "x.png", formats=("pdf",))
    assert paths == [tmp_path / "x.pdf"] and paths[0].read_bytes()[:4] == b"%PDF"
    assert b"Heading precision" in paths[0].read_bytes()
    with pytest.raises(InputError, match="figure format"):
        F.save_figure(fig, tmp_path / "x", formats=("jpg",))
    with pytest.raises(InputError, match="does not exist"):
        F.save_figure(fig, tmp_path / "missing" / "x")
    with pytest.raises(InputError, match="expected 2 values"):
        F.precision_curves([1.0, 10.0], {"a": [1.0, 2.0, 3.0]})
    with pytest.raises(InputError, match="modulation of shape"):
        F.modulation_fields(np.ones((5, 3)), np.zeros(5, int), np.zeros((2, 4)), [0, 1], np.ones((2, 3)))


def test_figures_never_load_pyplot_or_a_gui_toolkit(tmp_path):
    # common practice, no source: building Figure objects directly keeps the core free of GUI backends.
    import subprocess
    import sys

    code = ("import sys, numpy as np; from retina import figures as F; "
            "F.precision_curves([1.0, 10.0], {'a': [3.0, 1.0]}, path=sys.argv[1], formats=('png',), dpi=50); "
            "bad = [m for m in sys.modules if m == 'matplotlib.pyplot' or m.startswith(('PyQt', 'PySide', 'tkinter'))]; "
            "print(bad); sys.exit(1 if bad else 0)")
    r = subprocess.run([sys.executable, "-c", code, str(tmp_path / "p")], capture_output=True, text=True)
    assert r.returncode == 0, r.stdout + r.stderr
    assert (tmp_path / "p.png").is_file()


def test_heading_panels_put_the_left_eye_and_the_field_where_physics_says(tmp_path, retina_points):
    vis, eye = retina_points
    heads = np.array([0.0, 90.0])
    B = b_head_for(heads)
    mod = np.array([0.03 * ((vis @ b) ** 2 - 1 / 3) for b in B])
    fig = F.modulation_fields(vis, eye, mod, heads, B, params="synthetic")
    axes = [a for a in fig.axes if a.name == "mollweide"]
    # Derived: facing east (yaw 90) in the northern hemisphere the field's north component points to
    # the bird's left (head -y), so B (filled marker) lies at negative azimuth, drawn left of the beak;
    # -B points up and to the right.  Matplotlib's Mollweide axes put positive longitude on the right.
    filled = [ln for ln in axes[1].lines if ln.get_marker() == "o" and ln.get_markerfacecolor() in ("k", (0, 0, 0, 1))]
    opened = [ln for ln in axes[1].lines if ln.get_marker() == "o" and ln.get_markerfacecolor() in ("w", (1, 1, 1, 1))]
    assert filled[0].get_xdata()[0] < 0 and filled[0].get_ydata()[0] < 0
    assert opened[0].get_xdata()[0] > 0 and opened[0].get_ydata()[0] > 0
    # The eyes are labelled on their own sides (left eye at negative azimuth).
    labels = {t.get_text(): t.get_position()[0] for t in axes[0].texts}
    assert labels["left eye"] < 0 < labels["right eye"]
    # Yaw is counted from geographic north (retina.eye.pose), and the caption says so.
    assert "geographic north" in fig.retina_caption and "magnetic north" not in fig.retina_caption


def test_uninformative_bounds_are_shaded_and_explained(tmp_path):
    from retina.readout.fisher import INFORMATIVE_BOUND_DEG

    n = np.logspace(0, 5, 6)
    fig = F.precision_curves(n, {"single pose": 450 / np.sqrt(n)})
    ax = fig.axes[0]
    # A grey band (axhspan patch) starts at the threshold above which the bound is not informative.
    spans = [p for p in ax.patches if np.isclose(p.get_bbox().y0, INFORMATIVE_BOUND_DEG)]
    assert spans, "no shaded band at the informative-bound threshold"
    assert "not informative" in fig.retina_caption
    assert "geographic north" in F.trial_histograms({"a": np.array([10.0, 20.0, 30.0])}, 20.0).retina_caption
