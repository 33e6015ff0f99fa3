"""Tests for retina.eye.geometry: placement, pinhole optics, frames, solid angles, mirror."""

import math

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.spatial import SphericalVoronoi

from retina.errors import InputError
from retina.eye.geometry import (Eye, build_receptors, cap_points, default_eyes, local_frames,
                                 optical_axis)


@pytest.mark.parametrize("extent", [30.0, 90.0, 135.0, 180.0])
@pytest.mark.parametrize("density", ["uniform", "central"])
def test_solid_angles_sum_to_cap_area(extent, density):
    # Derived: a spherical cap of angular radius rho has area 2 pi (1 - cos rho).
    e = Eye(extent_deg=extent, n_receptors=500, density=density)
    _, w = cap_points(e)
    assert np.all(w > 0)
    assert w.sum() == pytest.approx(2 * math.pi * (1 - math.cos(math.radians(extent))), rel=1e-12)


@pytest.mark.parametrize("density", ["uniform", "central"])
def test_solid_angles_match_voronoi_on_full_sphere(density):
    # Reference: scipy.spatial.SphericalVoronoi cell areas.  Tolerance: a Fibonacci spiral's cells
    # are near-equal-area but not exactly the ring areas; rms 1 %, worst (near the pole) 7 %
    # (common practice, no source: measured spread of spiral cells).
    e = Eye(extent_deg=180.0, n_receptors=2000, density=density, central_ratio=4.0,
            central_width_deg=30.0)
    p, w = cap_points(e)
    a = SphericalVoronoi(p).calculate_areas()
    r = a / w - 1
    assert np.sqrt(np.mean(r ** 2)) < 0.01
    assert np.abs(r).max() < 0.07


def test_solid_angles_match_voronoi_inside_a_cap():
    # Reference: scipy.spatial.SphericalVoronoi; interior cells (more than 5 degrees from the rim,
    # whose Voronoi cells run off the cap) of a 60-degree cap.
    e = Eye(extent_deg=60.0, n_receptors=2000)
    p, w = cap_points(e)
    a = SphericalVoronoi(p).calculate_areas()
    inner = np.degrees(np.arccos(p[:, 2])) < 55.0
    r = a[inner] / w[inner] - 1
    assert np.sqrt(np.mean(r ** 2)) < 0.015 and np.abs(r).max() < 0.07


def test_central_density_profile():
    # Derived: with areal density w(t) = 1 + (c - 1) exp(-t^2 / 2 s^2), the fraction of receptors
    # within polar angle T is int_0^T w sin / int_0^rho w sin (Reference: scipy.integrate.quad).
    e = Eye(extent_deg=90.0, n_receptors=4000, density="central", central_ratio=5.0,
            central_width_deg=15.0)
    p, w = cap_points(e)
    t = np.arccos(p[:, 2])
    s = math.radians(15.0)
    dens = lambda x: (1 + 4 * math.exp(-x * x / (2 * s * s))) * math.sin(x)  # noqa: E731
    total = quad(dens, 0, math.pi / 2)[0]
    for T in (0.1, 0.3, 0.6, 1.2):
        expect = quad(dens, 0, T)[0] / total
        assert np.mean(t < T) == pytest.approx(expect, abs=1.5 / 4000)
    # Derived: ring area per receptor ~ 1 / density, so the centre-to-rim weight ratio ~ 1/ratio.
    ratio = w[-1] / w[0]
    assert ratio == pytest.approx((1 + 4) / (1 + 4 * math.exp(-(math.pi / 2) ** 2 / (2 * s * s))),
                                  rel=0.02)


def test_pinhole_optics_and_extent():
    eye = Eye(side="right", azimuth_deg=70.0, elevation_deg=15.0, extent_deg=80.0,
              n_receptors=800, radius_mm=2.5, centre_mm=(1.0, 4.0, -0.5))
    r = build_receptors(eye)
    o = optical_axis(70.0, 15.0)
    # Derived (pinhole): visual direction d = -u, u the unit position on the eye sphere.
    np.testing.assert_allclose(r.visual_dirs, -r.axes, atol=0)
    np.testing.assert_allclose(r.positions, np.array([1.0, 4.0, -0.5]) + 2.5 * r.axes, atol=1e-14)
    ang = np.degrees(np.arccos(np.clip(r.visual_dirs @ o, -1, 1)))
    assert ang.max() <= 80.0 + 1e-9 and ang.max() > 78.0
    assert np.all(r.eye_index == 1)
    # Derived: optical axis at azimuth 70 (right of the beak), elevation 15 (up = -z).
    assert o[1] > 0 and o[2] < 0


def test_local_frames():
    r = build_receptors(default_eyes(300))
    F = r.frames
    # Derived: orthonormal, right-handed, z along the receptor axis.
    np.testing.assert_allclose(np.einsum("nji,njk->nik", F, F), np.broadcast_to(np.eye(3), F.shape),
                               atol=1e-13)
    np.testing.assert_allclose(np.linalg.det(F), 1.0, atol=1e-13)
    np.testing.assert_allclose(F[:, :, 2], r.axes, atol=1e-15)
    # x is the dorsal direction (0, 0, -1) projected normal to the axis: coplanar with it and
    # the axis, and pointing dorsally.
    x = F[:, :, 0]
    dorsal = np.array([0.0, 0.0, -1.0])
    np.testing.assert_allclose(np.einsum("ni,ni->n", x, np.cross(r.axes, dorsal)), 0.0,
                               atol=1e-13)
    assert np.all(x @ dorsal > 0)
    # Fallback at the singular point: an axis along the dorsal-ventral line uses the forward axis.
    Fs = local_frames(np.array([[0.0, 0.0, 1.0], [0.0, 0.0, -1.0]]))
    np.testing.assert_allclose(Fs[:, :, 0], [[1, 0, 0], [1, 0, 0]], atol=1e-15)
    np.testing.assert_allclose(np.linalg.det(Fs), 1.0)


def test_default_eyes_are_mirror_images():
    # Derived: the left eye is the right eye reflected in the x-z plane (y -> -y), receptor by
    # receptor.
    left, right = default_eyes(400)
    r = build_receptors((left, right))
    L, R = r.select(0), r.select(1)
    assert len(L) == len(R) == 400
    M = np.array([1.0, -1.0, 1.0])
    np.testing.assert_allclose(r.axes[L], r.axes[R] * M, atol=1e-14)
    np.testing.assert_allclose(r.positions[L], r.positions[R] * M, atol=1e-13)
    np.testing.assert_allclose(r.solid_angle[L], r.solid_angle[R])
    assert left.azimuth_deg == -right.azimuth_deg
    # Derived (head frame y = right): the left eye looks to the bird's left, the right eye to its right.
    assert r.visual_dirs[L].mean(axis=0)[1] < -0.3 and r.visual_dirs[R].mean(axis=0)[1] > 0.3
    assert left.side == "left" and np.all(r.eye_index[L] == 0)


def test_bad_eyes():
    with pytest.raises(InputError) as e:
        Eye(extent_deg=0.0)
    assert e.value.key == "eye.extent_deg"
    with pytest.raises(InputError):
        Eye(side="up")
    with pytest.raises(InputError):
        Eye(n_receptors=0)
    with pytest.raises(InputError):
        Eye(density="gaussian")
    with pytest.raises(InputError) as e:
        Eye(centre_mm=(1.0, "x", 0.0))
    assert e.value.key == "eye.centre_mm"
    # eye centres default to the eye's own side of the midline
    assert Eye(side="left").centre_mm[1] < 0 < Eye(side="right").centre_mm[1]
    with pytest.raises(InputError, match="one left and one right"):
        build_receptors((Eye(side="right"), Eye(side="right")))
