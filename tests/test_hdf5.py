"""The native HDF5 yield-function file: exact round trip, atomic writes, clear errors."""

from __future__ import annotations

from pathlib import Path

import h5py
import numpy as np
import pytest

from retina import sphere
from retina.errors import InputError
from retina.io import hdf5
from retina.spin.io import dump_system, load_system
from retina.yieldfn import BASIS, YieldFunction

ASSETS = Path(__file__).resolve().parents[1] / "assets"


def sample(L=16, seed=5):
    rng = np.random.default_rng(seed)
    c = rng.normal(size=sphere.n_coeffs(L)) * 1e-3
    c[0] = 0.6
    c[-1] = 1.0 / 3.0  # a value with a long binary expansion
    prov = {
        "kind": "test",
        "spin_system_toml": dump_system(load_system(ASSETS / "example_pair.toml")),
        "field_uT": 50.0,
        "degree": L,
        "flag": True,
        "small": 5e-324,  # the smallest subnormal survives too
        "unicode": "µT – ±",
        "versions": {"numpy": np.__version__, "nested": {"depth": 2}},
    }
    return YieldFunction(c, L, prov, fit_error=2.5e-7)


def test_round_trip_is_bit_identical(tmp_path):
    yf = sample()
    path = yf.save(tmp_path / "yf.h5")
    back = YieldFunction.load(path)
    # common practice, no source: a native format must give back exactly what was written.
    assert np.array_equal(back.coeffs, yf.coeffs)
    assert back.coeffs.tobytes() == yf.coeffs.tobytes()
    assert back.degree == yf.degree and back.fit_error == yf.fit_error
    assert back.provenance == yf.provenance
    assert type(back.provenance["degree"]) is int and type(back.provenance["flag"]) is bool
    assert type(back.provenance["field_uT"]) is float


def test_layout_is_as_documented(tmp_path):
    yf = sample(L=4)
    yf.save(tmp_path / "yf.h5")
    with h5py.File(tmp_path / "yf.h5", "r") as f:
        assert f.attrs["format"] == hdf5.FORMAT and f.attrs["format_version"] == 1
        ds = f["yield_function/coeffs"]
        assert ds.shape == (15,) and ds.dtype == np.dtype("<f8")
        assert ds.attrs["degree"] == 4 and ds.attrs["basis"] == BASIS
        # the long TOML text is a dataset, short strings are attributes
        assert isinstance(f["provenance/spin_system_toml"], h5py.Dataset)
        assert f["provenance"].attrs["kind"] == "test"
        assert f["provenance/versions/nested"].attrs["depth"] == 2


def test_no_overwrite_without_force_and_no_partial_file(tmp_path):
    yf = sample(L=2)
    out = tmp_path / "yf.h5"
    yf.save(out)
    with pytest.raises(InputError, match="exists already"):
        yf.save(out)
    yf.save(out, force=True)
    # a failing write (unsupported provenance type) leaves the old file intact and no temporary file
    bad = YieldFunction(yf.coeffs, 2, {"array": np.zeros(3)})
    before = out.read_bytes()
    with pytest.raises(ValueError, match="provenance entry array"):
        bad.save(out, force=True)
    assert out.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["yf.h5"]
    with pytest.raises(InputError, match="does not exist"):
        yf.save(tmp_path / "missing-folder" / "x.h5")


def test_foreign_files_get_clear_errors(tmp_path):
    other = tmp_path / "other.h5"
    with h5py.File(other, "w") as f:
        f["values"] = np.zeros(10)
    with pytest.raises(InputError) as info:
        YieldFunction.load(other)
    assert str(other) in str(info.value) and "/yield_function/coeffs" in str(info.value)

    text = tmp_path / "notes.h5"
    text.write_text("hello")
    with pytest.raises(InputError, match="not an HDF5 file"):
        YieldFunction.load(text)
    with pytest.raises(InputError, match="not found"):
        YieldFunction.load(tmp_path / "absent.h5")

    wrong_basis = tmp_path / "basis.h5"
    with h5py.File(wrong_basis, "w") as f:
        ds = f.create_dataset("yield_function/coeffs", data=np.zeros(6))
        ds.attrs["degree"] = 2
        ds.attrs["basis"] = "complex-sh"
    with pytest.raises(InputError, match="expected one of real-sh-even-orthonormal-no-cs, got 'complex-sh'"):
        YieldFunction.load(wrong_basis)

    wrong_len = tmp_path / "len.h5"
    with h5py.File(wrong_len, "w") as f:
        ds = f.create_dataset("yield_function/coeffs", data=np.zeros(7))
        ds.attrs["degree"] = 2
        ds.attrs["basis"] = BASIS
    with pytest.raises(InputError, match=r"expected shape \(K,\) with K = 6 \(from /yield_function/coeffs@degree\), got \(7,\)"):
        YieldFunction.load(wrong_len)


# ------------------------------------------------------------------------------ importers

import warnings  # noqa: E402

from retina.io.importers import FitWarning, fit_least_squares, import_table, read_table  # noqa: E402


def _axial_coeffs(a, b, L):
    """Derived: a + b cos^2 t = sqrt(4 pi)(a + b/3) Y_00 + (2/3) b sqrt(4 pi / 5) Y_20."""
    c = np.zeros(sphere.n_coeffs(L))
    c[0] = np.sqrt(4 * np.pi) * (a + b / 3)
    l, m = sphere.lm_index(L)
    c[np.flatnonzero((l == 2) & (m == 0))[0]] = (2 / 3) * b * np.sqrt(4 * np.pi / 5)
    return c


def _dirs(n, seed=11):
    v = np.random.default_rng(seed).normal(size=(n, 3))
    return v / np.linalg.norm(v, axis=1, keepdims=True)


def test_csv_cartesian_and_angles_recover_an_analytic_function(tmp_path):
    a, b = 0.42, -0.06
    d = _dirs(300)
    vals = a + b * d[:, 2] ** 2
    cart = tmp_path / "cart.csv"
    cart.write_text("# from another engine\nx,y,z,value\n" +
                    "\n".join(f"{2 * x:.17g},{2 * y:.17g},{2 * z:.17g},{v:.17g}" for (x, y, z), v in zip(d, vals)))
    yf = import_table(cart, 6)
    # Derived (see _axial_coeffs); least squares on exact data is exact up to rounding.
    np.testing.assert_allclose(yf.coeffs, _axial_coeffs(a, b, 6), atol=1e-12)
    assert yf.provenance["residual_max"] < 1e-12 and yf.provenance["fit_warning"] == ""
    assert yf.provenance["import_points"] == 300 and yf.provenance["import_format"] == "csv (cartesian)"
    theta = np.degrees(np.arccos(d[:, 2]))
    phi = np.degrees(np.arctan2(d[:, 1], d[:, 0]))
    ang = tmp_path / "ang.txt"
    ang.write_text("theta_deg phi_deg value extra\n" +
                   "\n".join(f"{t:.17g} {p:.17g} {v:.17g} 0" for t, p, v in zip(theta, phi, vals)))
    yf2 = import_table(ang, 6)
    np.testing.assert_allclose(yf2.coeffs, _axial_coeffs(a, b, 6), atol=1e-12)


def test_hemisphere_data_suffice_for_an_even_function():
    d = _dirs(400)
    d[d[:, 2] < 0] *= -1
    vals = 0.3 + 0.1 * (d[:, 0] * d[:, 1]) ** 2 + 0.05 * d[:, 2] ** 4
    coeffs, rep = fit_least_squares(d, vals, 8)
    # Derived: even harmonics satisfy Y(-b) = Y(b), so one hemisphere determines them all.
    assert rep.rank == rep.n_coeffs and rep.warning == ""
    full = _dirs(200, seed=3)
    f = 0.3 + 0.1 * (full[:, 0] * full[:, 1]) ** 2 + 0.05 * full[:, 2] ** 4
    np.testing.assert_allclose(sphere.evaluate(coeffs, full), f, atol=1e-12)


def test_residual_and_rank_warning():
    d = _dirs(30)
    vals = 0.5 + 0.1 * d[:, 2] ** 10  # degree 10 fitted with L = 2: a residual remains
    coeffs, rep = fit_least_squares(d, vals, 2)
    resid = sphere.evaluate(coeffs, d) - vals
    # Reference: numpy.linalg.lstsq solves the same problem independently.
    ref = np.linalg.lstsq(sphere.real_sh(2, d), vals, rcond=None)[0]
    np.testing.assert_allclose(coeffs, ref, atol=1e-12)
    assert rep.rms == pytest.approx(np.sqrt(np.mean(resid**2)), rel=1e-12) and rep.rms > 1e-3
    assert rep.max == pytest.approx(np.max(np.abs(resid)), rel=1e-12)
    # Derived: 30 points cannot determine the 45 coefficients of degree 8 (rank <= 30).
    _, rep8 = fit_least_squares(d, vals, 8)
    assert rep8.rank == 30 and "constrain only 30 of the 45" in rep8.warning
    # Derived: points on one great circle (z = 0) leave harmonics vanishing there undetermined.
    ring = np.stack([np.cos(np.linspace(0, np.pi, 50)), np.sin(np.linspace(0, np.pi, 50)), np.zeros(50)], 1)
    _, rep_ring = fit_least_squares(ring, np.ones(50), 4)
    assert rep_ring.rank < rep_ring.n_coeffs and rep_ring.warning


def test_import_warns_and_records_rank_deficiency(tmp_path):
    d = _dirs(20)
    path = tmp_path / "few.npz"
    np.savez(path, directions=d, values=np.ones(20))
    with pytest.warns(FitWarning, match="constrain only 20 of the 45"):
        yf = import_table(path, 8)
    assert "constrain only" in yf.provenance["fit_warning"] and yf.provenance["fit_rank"] == 20


def test_npz_and_generic_hdf5(tmp_path):
    d = _dirs(100)
    vals = 0.2 + 0.03 * d[:, 2] ** 2
    np.savez(tmp_path / "t.npz", directions=d, values=vals)
    with h5py.File(tmp_path / "t.h5", "w") as f:
        f["run1/dirs"] = d
        f["run1/phi"] = vals
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        a = import_table(tmp_path / "t.npz", 4)
        b = import_table(tmp_path / "t.h5", 4, directions_key="run1/dirs", values_key="run1/phi")
    np.testing.assert_allclose(a.coeffs, _axial_coeffs(0.2, 0.03, 4), atol=1e-13)
    assert np.array_equal(a.coeffs, b.coeffs)
    # the imported function saves and loads like any other
    a.save(tmp_path / "imported.h5")
    back = YieldFunction.load(tmp_path / "imported.h5")
    assert np.array_equal(back.coeffs, a.coeffs) and back.provenance == a.provenance


@pytest.mark.parametrize(
    "name, content, pattern, key",
    [
        ("nohead.csv", "0,0,1,0.5\n1,0,0,0.4\n", "no header", None),
        ("cols.csv", "a,b,c\n1,2,3\n", "header has columns a, b, c", None),
        ("num.csv", "x,y,z,value\n0,0,1,0.5\n1,0,0,abc\n", "line 3, column 'value'.*got 'abc'", "value"),
        ("nan.csv", "x,y,z,value\n0,0,1,nan\n", "line 2, column 'value'.*finite", "value"),
        ("zero.csv", "x,y,z,value\n0,0,1,0.5\n0,0,0,0.5\n", "line 3.*zero vector", "x,y,z"),
        ("short.csv", "x,y,z,value\n0,0,1\n", "line 2: 3 cells", None),
        ("empty.csv", "x,y,z,value\n", "no data rows", None),
    ],
)
def test_csv_errors_name_file_line_and_column(tmp_path, name, content, pattern, key):
    path = tmp_path / name
    path.write_text(content)
    with pytest.raises(InputError, match=pattern) as info:
        read_table(path)
    assert str(path) in str(info.value)
    assert info.value.key == key


def test_array_file_errors_name_the_array(tmp_path):
    np.savez(tmp_path / "a.npz", dirs=np.zeros((3, 3)), values=np.ones(3))
    with pytest.raises(InputError, match="no array 'directions'.*dirs") as info:
        read_table(tmp_path / "a.npz")
    assert info.value.key == "directions"
    np.savez(tmp_path / "b.npz", directions=np.ones((3, 2)), values=np.ones(3))
    with pytest.raises(InputError, match=r"shape \(N, 3\)"):
        read_table(tmp_path / "b.npz")
    np.savez(tmp_path / "c.npz", directions=np.ones((3, 3)), values=np.ones(4))
    with pytest.raises(InputError, match=r"expected shape \(3,\)") as info:
        read_table(tmp_path / "c.npz")
    assert info.value.key == "values"
    with h5py.File(tmp_path / "d.h5", "w") as f:
        f["directions"] = np.ones((3, 3))
    with pytest.raises(InputError, match="no dataset 'values'.*directions"):
        read_table(tmp_path / "d.h5")
    (tmp_path / "e.h5").write_text("x,y,z,value\n")
    with pytest.raises(InputError, match="extension says h5"):
        read_table(tmp_path / "e.h5")


def test_csv_with_byte_order_mark_and_semicolons(tmp_path):
    path = tmp_path / "bom.csv"
    d = _dirs(40)
    vals = 0.3 + 0.01 * d[:, 2] ** 2
    path.write_bytes(("\ufeffx;y;z;value\n" + "\n".join(f"{x:.17g};{y:.17g};{z:.17g};{v:.17g}"
                                                         for (x, y, z), v in zip(d, vals))).encode("utf-8"))
    dirs, values, fmt = read_table(path)
    assert fmt == "csv (cartesian)" and np.array_equal(values, vals)
    np.testing.assert_allclose(dirs, d, atol=1e-15)


def test_normal_equations_agree_with_the_svd_driver_and_fall_back_when_ill_conditioned():
    d = _dirs(2000, seed=4)
    vals = 0.3 + 0.05 * d[:, 2] ** 2 + 0.01 * d[:, 0] ** 6
    c_auto, rep = fit_least_squares(d, vals, 8)
    c_svd, rep_svd = fit_least_squares(d, vals, 8, method="svd")
    # Reference: scipy.linalg.lstsq (gelsd) on the same design matrix; the condition estimate from the
    # Gram matrix's eigenvalues equals the ratio of singular values (derived: sv(Y)^2 = eig(Y^T Y)).
    assert rep.solver.startswith("normal") and rep_svd.solver.endswith("gelsd")
    np.testing.assert_allclose(c_auto, c_svd, atol=1e-12)
    assert rep.condition == pytest.approx(rep_svd.condition, rel=1e-6)
    # Derived: points on one great circle leave harmonics vanishing there undetermined, so the
    # Gram matrix is singular and the SVD driver (minimum-norm solution, exact rank) takes over.
    ring = np.stack([np.cos(np.linspace(0, np.pi, 60)), np.sin(np.linspace(0, np.pi, 60)), np.zeros(60)], 1)
    _, rep_ring = fit_least_squares(ring, np.full(60, 0.5), 4)
    assert rep_ring.solver.endswith("gelsd") and rep_ring.rank < rep_ring.n_coeffs
    with pytest.raises(ValueError, match="well-conditioned"):
        fit_least_squares(ring, np.full(60, 0.5), 4, method="normal")


def test_fast_csv_reader_equals_the_line_reader(tmp_path):
    from retina.io import importers

    d = _dirs(500, seed=8)
    vals = 0.4 + 0.02 * d[:, 1] ** 2
    path = tmp_path / "t.csv"
    path.write_text("x, y, z, value\n" + "\n".join(f"{x:.17g}, {y:.17g}, {z:.17g}, {v:.17g}" for (x, y, z), v in zip(d, vals)))
    lines = [(i + 1, ln) for i, ln in enumerate(path.read_text().splitlines())]
    assert len(lines) == 501
    fast = importers._csv_fast(lines, ",", [0, 1, 2, 3], 4)
    slow = importers._csv_slow(path, lines, ",", importers._CART, [0, 1, 2, 3], 4)
    # Reference: Python's float() on each cell (the line reader); both must round identically.
    assert fast is not None and np.array_equal(fast, slow)


def test_import_refuses_a_fit_beyond_the_memory_limit(tmp_path):
    from retina.errors import ResourceError
    from retina.io.importers import fit_bytes

    d = _dirs(200, seed=2)
    np.savez(tmp_path / "t.npz", directions=d, values=0.3 + 0.01 * d[:, 2] ** 2)
    # Derived: 2 float64 copies of the (200, 45) design matrix of degree 8 = 2 * 8 * 200 * 45 bytes.
    assert fit_bytes(200, 8) == 2 * 8 * 200 * 45
    with pytest.raises(ResourceError, match="needs"):
        import_table(tmp_path / "t.npz", 8, max_bytes=fit_bytes(200, 8) - 1)
    assert import_table(tmp_path / "t.npz", 8, max_bytes=fit_bytes(200, 8)).degree == 8


def test_degree_limit_of_yield_files_matches_the_lebedev_rules():
    # The schema's degree cap is the largest degree retina.yieldfn accepts (scipy's Lebedev rules).
    from retina.io.hdf5 import MAX_DEGREE
    from retina.yieldfn import _check_degree

    assert _check_degree(MAX_DEGREE) == MAX_DEGREE
    with pytest.raises(InputError):
        _check_degree(MAX_DEGREE + 2)
