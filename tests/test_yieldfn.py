"""YieldFunction: fitting, evaluation, gradient, rotation, extremes, from_system and the cache."""

from __future__ import annotations

import datetime as dt
import sys
import tomllib
import types

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

import retina
import retina.spin
from retina import sphere
from retina.errors import InputError
from retina.spin.io import loads_system, systems_equal
from retina.yieldfn import YieldFunction, canonical_axis

RNG = np.random.default_rng(20261201)

PAIR = """
[pair]
name = "axial test pair"
[radical_a]
[[radical_a.nuclei]]
label = "N"
spin = 1
principal_mT = [-0.1, -0.1, 1.6]
[radical_b]
[kinetics]
lifetime_us = 1.0
"""


def random_dirs(n, rng=RNG):
    v = rng.normal(size=(n, 3))
    return v / np.linalg.norm(v, axis=1, keepdims=True)


def axial(a, b, u):
    """f(n) = a + b (n.u)^2 and its exact coefficients.

    Derived: (n.z)^2 = 1/3 + (2/3) P_2(cos t), Y_00 = 1/sqrt(4 pi), Y_20 = sqrt(5/(4 pi)) P_2, so for
    u = z: c_00 = sqrt(4 pi) (a + b/3), c_20 = (2/3) b sqrt(4 pi / 5), all others zero.
    """
    u = np.asarray(u, float) / np.linalg.norm(u)
    return lambda n: a + b * (np.asarray(n) @ u) ** 2


def random_function(L, rng=RNG):
    c = rng.normal(size=sphere.n_coeffs(L))
    c[0] += 10.0
    return YieldFunction(c, L)


# ------------------------------------------------------------------------------- fit and values


def test_from_values_recovers_a_plus_b_cos2_exactly():
    a, b = 0.31, 0.07
    grid = sphere.grid_for_degree(8)
    yf = YieldFunction.from_values(axial(a, b, [0, 0, 1])(grid.points), grid, 8, {"kind": "test"})
    expected = np.zeros(sphere.n_coeffs(8))
    expected[0] = np.sqrt(4 * np.pi) * (a + b / 3)
    l, m = sphere.lm_index(8)
    expected[np.flatnonzero((l == 2) & (m == 0))[0]] = (2 / 3) * b * np.sqrt(4 * np.pi / 5)
    # Derived (see axial): exact up to quadrature rounding.
    np.testing.assert_allclose(yf.coeffs, expected, atol=1e-14)
    # Derived: the mean of (n.z)^2 over the sphere is 1/3.
    assert yf.mean == pytest.approx(a + b / 3, abs=1e-15)
    assert yf.fit_error < 1e-14
    assert yf.provenance["kind"] == "test" and yf.provenance["grid_points"] == len(grid)
    d = random_dirs(50)
    np.testing.assert_allclose(yf(d), axial(a, b, [0, 0, 1])(d), atol=1e-14)
    assert yf(d.reshape(5, 10, 3)).shape == (5, 10)
    assert not yf.coeffs.flags.writeable


def test_gradient_analytic_and_against_finite_differences():
    a, b = 0.3, 0.05
    u = np.array([0.3, -0.5, 0.8]) / np.linalg.norm([0.3, -0.5, 0.8])
    grid = sphere.grid_for_degree(4)
    yf = YieldFunction.from_values(axial(a, b, u)(grid.points), grid, 4)
    n = random_dirs(40)
    # Derived: grad_ambient (a + b (n.u)^2) = 2 b (n.u) u; tangential part = 2 b (n.u) (u - (n.u) n).
    nu = n @ u
    expected = 2 * b * nu[:, None] * (u[None, :] - nu[:, None] * n)
    np.testing.assert_allclose(yf.gradient(n), expected, atol=1e-13)
    # Independent method: central differences along a tangent great circle, for a random degree-10 function.
    f = random_function(10)
    t = np.cross(n, random_dirs(40))
    t /= np.linalg.norm(t, axis=1, keepdims=True)
    h = 1e-5
    plus = np.cos(h) * n + np.sin(h) * t
    minus = np.cos(h) * n - np.sin(h) * t
    fd = (f(plus) - f(minus)) / (2 * h)
    # tolerance: O(h^2 f''') ~ 1e-10 times the function scale, plus rounding 1e-11 / h
    np.testing.assert_allclose(np.einsum("nd,nd->n", f.gradient(n), t), fd, atol=1e-6)
    np.testing.assert_allclose(np.einsum("nd,nd->n", f.gradient(n), n), 0.0, atol=1e-12)


def test_rotation_equals_evaluation_at_inverse_rotated_points():
    f = random_function(12)
    rot = Rotation.from_euler("ZYX", [40.0, -25.0, 110.0], degrees=True)
    g = f.rotate(rot)
    b = random_dirs(60)
    # Derived: active rotation (R f)(b) = f(R^-1 b) (DEVELOPERS.md, Rotations).
    np.testing.assert_allclose(g(b), f(rot.inv().apply(b)), atol=1e-11)
    assert "rotations" in g.provenance and g.degree == 12
    # Derived: rotating the axial function a + b (n.z)^2 by R gives a + b (n . R z)^2.
    grid = sphere.grid_for_degree(4)
    ax = YieldFunction.from_values(axial(0.2, 0.1, [0, 0, 1])(grid.points), grid, 4)
    np.testing.assert_allclose(ax.rotate(rot)(b), axial(0.2, 0.1, rot.apply([0, 0, 1]))(b), atol=1e-14)
    with pytest.raises(ValueError, match="one scipy Rotation"):
        f.rotate(Rotation.random(3, random_state=1))


def test_anisotropy_finds_known_extremes():
    a, b, c = 0.25, 0.08, 0.03
    u = np.array([0.2, 0.9, -0.4]) / np.linalg.norm([0.2, 0.9, -0.4])
    w = np.cross(u, [0.0, 0.0, 1.0])
    w /= np.linalg.norm(w)
    fun = lambda n: a + b * (n @ u) ** 2 + c * (n @ w) ** 2  # noqa: E731
    grid = sphere.grid_for_degree(4)
    yf = YieldFunction.from_values(fun(grid.points), grid, 4)
    an = yf.anisotropy()
    # Derived: max a + b at +-u, min a at +-(u x w), mean a + (b + c)/3.
    assert an.max == pytest.approx(a + b, abs=1e-12)
    assert an.min == pytest.approx(a, abs=1e-12)
    assert an.mean == pytest.approx(a + (b + c) / 3, abs=1e-14)
    assert an.delta == pytest.approx(b, abs=1e-12)
    assert an.relative == pytest.approx(b / (a + (b + c) / 3), rel=1e-10)
    # tolerance: near an extremum f - f* ~ b theta^2, so 1e-12 in f allows ~1e-6 rad in direction
    assert np.linalg.norm(an.argmax - canonical_axis(u)) < 1e-5
    assert np.linalg.norm(an.argmin - canonical_axis(np.cross(u, w))) < 1e-5
    assert an.argmax[2] > 0


def test_anisotropy_against_brute_force_search():
    f = random_function(10, np.random.default_rng(3))
    an = f.anisotropy()
    d = random_dirs(200_000, np.random.default_rng(4))
    v = f(d)
    # Independent method: plain random search; the refined values must be at least as extreme,
    # and close (a random point lands within ~0.005 rad of the optimum).
    assert an.max >= v.max() - 1e-12 and an.max - v.max() < 1e-3 * (v.max() - v.min())
    assert an.min <= v.min() + 1e-12 and v.min() - an.min < 1e-3 * (v.max() - v.min())
    assert f(an.argmax[None])[0] == pytest.approx(an.max, abs=1e-14)


def test_degree_two_extremes_in_closed_form():
    # Degree 2: the extremes are the extreme eigenvalues of the quadratic form b^T M b
    # (derived in YieldFunction._quadratic_form).  Checked against a known form and against the
    # general search (lattice + L-BFGS-B, forced with n_search) as an independent method.
    a, b, c = 0.25, 0.08, 0.03
    u = np.array([0.2, 0.9, -0.4]) / np.linalg.norm([0.2, 0.9, -0.4])
    w = np.cross(u, [0.0, 0.0, 1.0])
    w /= np.linalg.norm(w)
    fun = lambda n: a + b * (n @ u) ** 2 + c * (n @ w) ** 2  # noqa: E731
    grid = sphere.grid_for_degree(2)
    yf = YieldFunction.from_values(fun(grid.points), grid, 2)
    M = yf._quadratic_form()
    # Derived: M = a I + b u u^T + c w w^T
    np.testing.assert_allclose(M, a * np.eye(3) + b * np.outer(u, u) + c * np.outer(w, w), atol=1e-14)
    an = yf.anisotropy()
    assert an.max == pytest.approx(a + b, abs=1e-14) and an.min == pytest.approx(a, abs=1e-14)
    assert np.linalg.norm(an.argmax - canonical_axis(u)) < 1e-12
    assert np.linalg.norm(an.argmin - canonical_axis(np.cross(u, w))) < 1e-12
    for seed in range(5):
        f = random_function(2, np.random.default_rng(seed))
        exact, searched = f.anisotropy(), f.anisotropy(n_search=2000)
        assert exact.max == pytest.approx(searched.max, abs=1e-12)
        assert exact.min == pytest.approx(searched.min, abs=1e-12)
        assert abs(exact.argmax @ searched.argmax) == pytest.approx(1.0, abs=1e-9)


def test_constructor_checks():
    with pytest.raises(ValueError, match="needs 15 coefficients"):
        YieldFunction(np.zeros(6), 4)
    with pytest.raises(ValueError, match="finite"):
        YieldFunction(np.full(6, np.nan), 2)


# ------------------------------------------------------------------------------- from_system


class FakeEngine:
    """Stands in for retina.spin.engine: evaluates a known function and counts calls."""

    def __init__(self, fun):
        self.fun = fun
        self.calls = []

    def install(self, monkeypatch):
        mod = types.ModuleType("retina.spin.engine")
        mod.choose_method = lambda system: "fake-exact"
        mod.compute_yields = self.compute_yields
        monkeypatch.setitem(sys.modules, "retina.spin.engine", mod)
        monkeypatch.setattr(retina.spin, "engine", mod, raising=False)
        return self

    def compute_yields(self, system, field_uT, directions, *, method="auto", progress=None, max_bytes=None):
        self.calls.append((field_uT, np.array(directions), method))
        if progress is not None:
            progress(len(directions), len(directions))
        return self.fun(np.asarray(directions))


@pytest.fixture
def system():
    return loads_system(PAIR, source="pair.toml")


def test_from_system_uses_a_hemisphere_and_measures_no_error_for_a_band_limited_function(monkeypatch, system):
    fun = lambda n: 0.3 + 0.05 * n[:, 2] ** 2 - 0.02 * (n[:, 0] * n[:, 1]) ** 2  # degree 4  # noqa: E731
    eng = FakeEngine(fun).install(monkeypatch)
    seen = []
    yf = YieldFunction.from_system(system, 50.0, degree=8, progress=lambda d, t: seen.append((d, t)))
    assert len(eng.calls) == 1
    field, dirs, method = eng.calls[0]
    grid = sphere.grid_for_degree(8)
    assert field == 50.0 and method == "fake-exact"
    h = len(grid) // 2
    c = h // 2                                  # default check directions: half the fit's, >= 16
    assert c == 27 and yf.provenance["check_points"] == c
    assert dirs.shape == (h + c + 3, 3)
    assert np.all(dirs[: h + c, 2] > -1e-12)  # one hemisphere only, plus 3 antipodal checks
    np.testing.assert_array_equal(dirs[h + c:], -dirs[h:h + 3])
    assert seen[-1] == (dirs.shape[0], dirs.shape[0])
    # Derived: a degree-4 function is fitted exactly at L = 8, so the error at the check points is rounding.
    assert yf.fit_error < 1e-14 and yf.provenance["truncation_error_rms"] < 1e-14
    d = random_dirs(30)
    np.testing.assert_allclose(yf(d), fun(d), atol=1e-14)
    p = yf.provenance
    assert p["method"] == "fake-exact" and p["degree"] == 8 and p["grid"] == grid.name
    assert p["computed_points"] == len(grid) // 2 and p["check_points"] == c
    assert set(p["versions"]) == {"numpy", "scipy", "numba", "h5py", "retina"}
    assert dt.datetime.fromisoformat(p["date_utc"]).tzinfo is not None
    assert systems_equal(loads_system(p["spin_system_toml"]), system)
    assert tomllib.loads(p["spin_system_document_toml"]) == system.document
    assert (p["reported_yield"], p["initial_state"]) == ("singlet", "singlet")


def test_an_engine_that_breaks_inversion_symmetry_is_refused(monkeypatch, system):
    # Derived (YieldFunction.from_system docstring): Phi(b) = Phi(-b) for every accepted system, so
    # a difference between b and -b is an engine fault and must not be hidden by the hemisphere fit.
    FakeEngine(lambda n: 0.3 + 0.01 * n[:, 2] ** 2 + 1e-6 * n[:, 0]).install(monkeypatch)
    with pytest.raises(RuntimeError, match=r"Phi\(b\) = Phi\(-b\)"):
        YieldFunction.from_system(system, 50.0, degree=4)
    FakeEngine(lambda n: 0.3 + 0.01 * n[:, 2] ** 2).install(monkeypatch)
    yf = YieldFunction.from_system(system, 50.0, degree=4)
    assert yf.provenance["antipodal_points"] == 3 and yf.provenance["antipodal_difference_max"] < 1e-15


def test_truncation_error_is_reported_for_a_function_beyond_the_degree(monkeypatch, system):
    u = np.array([0.3, 0.4, 0.866])
    u /= np.linalg.norm(u)
    fun = lambda n: 0.2 + 0.1 * (n @ u) ** 18  # degree 18  # noqa: E731
    FakeEngine(fun).install(monkeypatch)
    yf = YieldFunction.from_system(system, 50.0, degree=6)
    d = random_dirs(20_000)
    true_max = np.max(np.abs(yf(d) - fun(d)))
    # Independent check: the error seen on 200 check points is a lower estimate of the true maximum
    # over the sphere (sampled densely here) and of the same size.
    assert 0.5 * true_max < yf.fit_error <= 1.01 * true_max
    assert yf.provenance["truncation_error_rms"] <= yf.fit_error


def test_cache_second_call_does_not_recompute(monkeypatch, system, tmp_path):
    eng = FakeEngine(lambda n: 0.4 + 0.01 * n[:, 0] ** 2).install(monkeypatch)
    first = YieldFunction.from_system(system, 47.0, degree=4, cache=True, cache_dir=tmp_path)
    second = YieldFunction.from_system(system, 47.0, degree=4, cache=True, cache_dir=tmp_path)
    # common practice, no source: a cache hit returns the stored result without calling the engine.
    assert len(eng.calls) == 1
    assert second.from_cache and not first.from_cache
    assert np.array_equal(first.coeffs, second.coeffs) and first.provenance == second.provenance
    YieldFunction.from_system(system, 48.0, degree=4, cache=True, cache_dir=tmp_path)  # other field: miss
    YieldFunction.from_system(system, 47.0, degree=6, cache=True, cache_dir=tmp_path)  # other degree: miss
    assert len(eng.calls) == 3
    # a damaged entry counts as a miss and is replaced
    entry = tmp_path / f"{first.provenance['input_hash']}.h5"
    entry.write_bytes(b"not hdf5")
    YieldFunction.from_system(system, 47.0, degree=4, cache=True, cache_dir=tmp_path)
    assert len(eng.calls) == 4
    YieldFunction.from_system(system, 47.0, degree=4, cache=True, cache_dir=tmp_path)
    assert len(eng.calls) == 4
    # a readable entry whose coefficients were altered (they no longer match their stored
    # content_hash) is a miss too, not a silently wrong hit; common practice, no source
    import h5py

    with h5py.File(entry, "a") as f:
        f["yield_function/coeffs"][1] += 1e-3
    again = YieldFunction.from_system(system, 47.0, degree=4, cache=True, cache_dir=tmp_path)
    assert len(eng.calls) == 5 and not again.from_cache
    assert np.array_equal(again.coeffs, first.coeffs)
    # a folder where the entry should be: the result is still computed and returned, with a warning
    entry.unlink()
    entry.mkdir()
    with pytest.warns(UserWarning, match="cache"):
        blocked = YieldFunction.from_system(system, 47.0, degree=4, cache=True, cache_dir=tmp_path)
    assert np.array_equal(blocked.coeffs, first.coeffs)
    entry.rmdir()
    # the environment variable chooses the default folder
    monkeypatch.setenv("RETINA_CACHE", str(tmp_path / "env"))
    YieldFunction.from_system(system, 47.0, degree=4, cache=True)
    assert len(list((tmp_path / "env").glob("*.h5"))) == 1


def test_from_system_rejects_bad_arguments(monkeypatch, system):
    FakeEngine(lambda n: np.ones(len(n))).install(monkeypatch)
    with pytest.raises(InputError, match="field strength > 0"):
        YieldFunction.from_system(system, -5.0)
    with pytest.raises(InputError, match="even degree"):
        YieldFunction.from_system(system, 50.0, degree=7)
    with pytest.raises(InputError, match="even degree"):
        YieldFunction.from_system(system, 50.0, degree=200)


# ------------------------------------------------------------------------------- with a real spin method


class HilbertEngine(FakeEngine):
    """Routes the engine calls to the exact eigen method (retina.spin.hilbert), whatever lands in engine."""

    def __init__(self):
        from retina.spin import hilbert

        super().__init__(None)
        self.hilbert = hilbert

    def compute_yields(self, system, field_uT, directions, *, method="auto", progress=None, max_bytes=None):
        self.calls.append((field_uT, np.array(directions), method))
        return self.hilbert.yields(system, field_uT, directions, progress=progress)


def test_hilbert_yields_are_even_so_one_hemisphere_suffices(system):
    from retina.spin import hilbert

    d = random_dirs(12)
    # Common practice, no source (a fact of the trade): a radical-pair yield is unchanged when the
    # field is reversed (Phi(b) = Phi(-b)), which from_system relies on.
    np.testing.assert_allclose(hilbert.yields(system, 50.0, -d), hilbert.yields(system, 50.0, d), atol=1e-12)


def test_from_system_with_the_eigen_method_matches_direct_evaluation(monkeypatch, system):
    HilbertEngine().install(monkeypatch)
    yf = YieldFunction.from_system(system, 50.0, degree=10)
    d = random_dirs(40)
    direct = HilbertEngine().hilbert.yields(system, 50.0, d)
    err = np.max(np.abs(yf(d) - direct))
    # Independent check: direct evaluation at new random directions agrees with the fit to within
    # the truncation error measured at the check points (a factor 3 allows for sampling).
    assert err <= 3 * yf.fit_error + 1e-12
    assert yf.fit_error < 1e-2 * yf.anisotropy().delta
    l, m = sphere.lm_index(10)
    # Derived: one axial hyperfine tensor (axis z) and isotropic g make H covariant under rotations
    # about z, so Phi depends on b_z only: every m != 0 coefficient vanishes, except for aliasing of
    # the truncated degrees > L on the (octahedral, not axial) Lebedev grid into m = +-4, +-8 terms,
    # which is of the size of the truncation error.
    assert np.max(np.abs(yf.coeffs[m != 0])) < yf.fit_error + 1e-14
    an = yf.anisotropy()
    assert an.delta > 1e-3 and 0.0 < an.min < an.max < 1.0
    # The extremes of an axial function lie on the axis or on the equator.
    for v in (an.argmax, an.argmin):
        assert abs(v[2]) > 1 - 1e-6 or abs(v[2]) < 1e-6


def test_isotropic_pair_gives_a_constant_yield(monkeypatch):
    HilbertEngine().install(monkeypatch)
    iso = loads_system(PAIR.replace("principal_mT = [-0.1, -0.1, 1.6]", "hyperfine_mT = 0.8"))
    yf = YieldFunction.from_system(iso, 50.0, degree=6)
    # Derived: with only isotropic couplings the Hamiltonian's spectrum and singlet overlaps do not
    # depend on the field direction, so every l > 0 coefficient vanishes.
    assert np.max(np.abs(yf.coeffs[1:])) < 1e-12 and yf.anisotropy().delta < 1e-11


# ------------------------------------------------------------------------------- with the real engine


def test_real_engine_axial_pair_gives_an_axially_symmetric_yield(system):
    pytest.importorskip("retina.spin.engine")
    yf = YieldFunction.from_system(system, 50.0, degree=8)
    l, m = sphere.lm_index(8)
    # Derived: with one axial hyperfine tensor (symmetry axis z) and isotropic g, H commutes with
    # rotations about z applied to field and spins together, so Phi depends on b_z only: m != 0 vanish
    # up to aliasing of the truncated degrees on the Lebedev grid (of the size of the truncation error).
    assert np.max(np.abs(yf.coeffs[m != 0])) < yf.fit_error + 1e-14
    assert yf.fit_error < 1e-6
    # Derived: a field along the axis of the hyperfine tensor and one perpendicular to it give
    # different yields; the function is not constant.
    an = yf.anisotropy()
    assert an.delta > 1e-4
    assert 0.0 < an.min and an.max < 1.0
    # The extremes of an axial function lie on the axis or on the equator.
    for v in (an.argmax, an.argmin):
        assert abs(v[2]) > 1 - 1e-6 or abs(v[2]) < 1e-6


def test_engine_methods_give_the_same_yield_function(system):
    pytest.importorskip("retina.spin.engine")
    fits = {m: YieldFunction.from_system(system, 50.0, degree=6, method=m) for m in ("separable", "hilbert", "liouville")}
    # Independent methods: the separable, eigen and Liouville-space methods solve the same problem
    # by different algebra; their fits must agree to rounding (1e-10 allows for eigensolver noise).
    for m in ("hilbert", "liouville"):
        np.testing.assert_allclose(fits[m].coeffs, fits["separable"].coeffs, atol=1e-10)
        assert fits[m].provenance["method"] == m


def test_cache_key_of_the_sampled_method_names_its_control_variate(monkeypatch, system):
    # common practice, no source: a cache key covers everything that changes the stored numbers;
    # the sampled estimator with and without its control variate returns different numbers.
    from retina import cache
    from retina.spin import sampling
    key = cache.cache_key(system, 47.0, 8, "sampled", check_points=27)
    exact = cache.cache_key(system, 47.0, 8, "eigen", check_points=27)
    monkeypatch.setattr(sampling, "DEFAULT_CONTROL", "none")
    assert cache.cache_key(system, 47.0, 8, "sampled", check_points=27) != key
    assert cache.cache_key(system, 47.0, 8, "eigen", check_points=27) == exact


def test_cache_folder_follows_retina_cache_then_xdg_cache_home(monkeypatch, tmp_path):
    # Source: XDG Base Directory Specification 0.8 ($XDG_CACHE_HOME, default $HOME/.cache; a
    # relative path in it is invalid and ignored).  RETINA_CACHE overrides both.
    from retina.cache import default_cache_dir

    monkeypatch.setenv("RETINA_CACHE", str(tmp_path / "mine"))
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "xdg"))
    assert default_cache_dir() == tmp_path / "mine"
    monkeypatch.delenv("RETINA_CACHE")
    assert default_cache_dir() == tmp_path / "xdg" / "retina-compass"
    monkeypatch.setenv("XDG_CACHE_HOME", "relative/cache")
    monkeypatch.setenv("HOME", str(tmp_path / "home"))
    assert default_cache_dir() == tmp_path / "home" / ".cache" / "retina-compass"
    monkeypatch.delenv("XDG_CACHE_HOME")
    assert default_cache_dir() == tmp_path / "home" / ".cache" / "retina-compass"
