"""Review checks of the spin engine: Krylov convergence handling, field-inversion symmetry with every
term the engine accepts, and the engine's memory model.

References: :mod:`tests._dynamics` (dense ``numpy.linalg.solve`` of a Liouvillian rebuilt from
``numpy.kron``, independent of ``retina.spin.operators``) and derivations written beside the checks.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.constants as sc

from retina.errors import ResourceError
from retina.spin import engine, liouville, memory
from retina.spin.system import Nucleus, Radical, Relaxation, SpinSystem
from tests._dynamics import liouville_solve_yields

G_E = abs(sc.physical_constants["electron g factor"][0])


def _tensor(rng, scale, iso, symmetric=True):
    a = rng.normal(size=(3, 3)) * scale
    if symmetric:
        a = (a + a.T) / 2
    return a + iso * np.eye(3)


def rich_system(seed, spins_a=(0.5, 1.0), spins_b=(0.5,), *, k_s=3e6, k_t=5e5,
                relaxation=Relaxation((2e5, 7e5), 3e5), start="singlet", report="singlet"):
    """Anisotropic, non-symmetric g tensors on both radicals, non-symmetric hyperfine tensors,
    exchange, a dipolar tensor, unequal rates and relaxation: every term the engine accepts."""
    rng = np.random.default_rng(seed)

    def radical(label, spins):
        nuclei = tuple(Nucleus(f"{label}{i}", s, _tensor(rng, 0.4, rng.normal(), symmetric=False))
                       for i, s in enumerate(spins))
        return Radical(label, g_tensor=G_E * np.eye(3) + _tensor(rng, 0.004, 0.0, symmetric=False),
                       nuclei=nuclei)

    dip = _tensor(rng, 0.2, 0.0)
    dip -= np.eye(3) * np.trace(dip) / 3
    return SpinSystem("rich", (radical("A", spins_a), radical("B", spins_b)), exchange_mT=0.1,
                      dipolar_mT=dip, k_singlet=k_s, k_triplet=k_t, relaxation=relaxation,
                      initial_state=start, reported_yield=report)


def unit(rng, n):
    d = rng.normal(size=(n, 3))
    return d / np.linalg.norm(d, axis=1)[:, None]


# ----------------------------------------------------------------------------- Krylov solver


def test_krylov_restarts_instead_of_falling_back(monkeypatch):
    # A GMRES cycle far too short to converge
    # (10 steps) must be restarted from its last iterate until the backward error is at rounding
    # level, not handed to the O(d^4) sparse LU.
    # Reference: dense numpy.linalg.solve of the independently built Liouvillian (tests._dynamics).
    system = rich_system(1, (0.5,), (1.0,), relaxation=Relaxation((3e7, 1e7), 2e6))
    dirs = unit(np.random.default_rng(2), 3)
    monkeypatch.setattr(liouville, "_KRYLOV_MAXITER", 10)
    monkeypatch.setattr(liouville, "_KRYLOV_RESTARTS", 100)

    def no_fallback(*a, **k):
        raise AssertionError("sparse fallback used")

    monkeypatch.setattr(liouville, "_sparse_solve", no_fallback)
    got = liouville.yields(system, 50.0, dirs, solver="krylov")
    ref = liouville_solve_yields(system, 50.0, dirs)
    # tolerance: a direct solve of this d = 24 system agrees with the reference to ~1e-14
    np.testing.assert_allclose(got, ref, atol=1e-12, rtol=0)


def test_krylov_never_returns_an_unconverged_answer(monkeypatch):
    # One GMRES step and no restart cannot converge: the direction must be redone exactly (sparse
    # LU), never returned as is.  Reference: dense numpy.linalg.solve (tests._dynamics).
    system = rich_system(3, (0.5,), (1.0,))
    dirs = unit(np.random.default_rng(4), 2)
    monkeypatch.setattr(liouville, "_KRYLOV_MAXITER", 1)
    monkeypatch.setattr(liouville, "_KRYLOV_RESTARTS", 0)
    got = liouville.yields(system, 50.0, dirs, solver="krylov")
    np.testing.assert_allclose(got, liouville_solve_yields(system, 50.0, dirs), atol=1e-12, rtol=0)


def test_krylov_refuses_a_sparse_fallback_that_cannot_fit(monkeypatch):
    # Common practice, no source: refuse before allocating rather than die in the LU factorisation.
    system = rich_system(5, (0.5,), (1.0,))
    monkeypatch.setattr(liouville, "_KRYLOV_MAXITER", 1)
    monkeypatch.setattr(liouville, "_KRYLOV_RESTARTS", 0)
    monkeypatch.setattr(memory, "available_bytes", lambda: 2**20)
    with pytest.raises(ResourceError, match="did not converge.*GiB"):
        liouville.yields(system, 50.0, unit(np.random.default_rng(6), 1), solver="krylov")


@pytest.mark.parametrize("seed, k_s, k_t, relax", [
    (7, 1e7, 1e5, Relaxation((1e4, 1e4), 0.0)),        # rates 100:1
    (8, 1e6, 2e6, Relaxation((1e9, 1e9), 0.0)),        # relaxation 1000 x k
    (9, 1e4, 1.5e4, Relaxation((1e2, 0.0), 1e2)),      # slow pair
])
def test_krylov_matches_dense_solve_for_stiff_rates(seed, k_s, k_t, relax):
    # Reference: dense numpy.linalg.solve of the full (d^2, d^2) Liouvillian (tests._dynamics).
    # Tolerance 1e-11: both are backward stable; the slow pair's Liouvillian has a condition number
    # near 1e4 (hyperfine over rate), so rounding alone reaches ~1e-12.
    system = rich_system(seed, (0.5,), (1.0,), k_s=k_s, k_t=k_t, relaxation=relax)  # d = 24
    dirs = unit(np.random.default_rng(seed), 2)
    got = liouville.yields(system, 50.0, dirs, solver="krylov")
    np.testing.assert_allclose(got, liouville_solve_yields(system, 50.0, dirs), atol=1e-11, rtol=0)


# ----------------------------------------------------------------------------- engine memory model


def _peak_bytes(fn):
    import tracemalloc

    tracemalloc.start()
    try:
        fn()
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


@pytest.mark.parametrize("spins_a, spins_b, kw, n", [
    ((0.5,), (1.0, 1.0, 0.5, 0.5), {}, 120),                                  # separable, d_B = 72
    ((0.5, 0.5), (1.0, 0.5, 0.5), {"k_t": 2e6, "relax": Relaxation((1e5, 1e5), 0.0)}, 2),  # krylov, d = 96
])
def test_memory_estimate_bounds_the_measured_peak(spins_a, spins_b, kw, n):
    # Reference: tracemalloc (Python standard library) measures every numpy allocation.  The
    # estimate must not be below the peak (it guards against running out of memory) and not far
    # above it (a factor 4, or it refuses pairs that would fit).  Common practice, no source.
    rng = np.random.default_rng(11)

    def radical(label, spins):
        return Radical(label, nuclei=tuple(Nucleus(f"{label}{i}", s, _tensor(rng, 0.3, 0.4))
                                           for i, s in enumerate(spins)))

    relax = kw.get("relax", Relaxation())
    system = SpinSystem("mem", (radical("A", spins_a), radical("B", spins_b)), k_singlet=1e6,
                        k_triplet=kw.get("k_t", 1e6), relaxation=relax)
    dirs = unit(rng, n)
    engine.compute_yields(system, 50.0, dirs[:1])  # warm caches (operators, numba) outside the peak
    cost = engine.estimate_cost(system, n)
    peak = _peak_bytes(lambda: engine.compute_yields(system, 50.0, dirs))
    assert peak <= cost.bytes <= 4 * peak, (cost.method, peak, cost.bytes)


def test_resource_hint_is_actionable_for_the_chosen_solver():
    # Common practice, no source: the refusal names something the user can change.  A pair with
    # both rates > 0 and relaxation must not be told to "give both rates > 0".
    rng = np.random.default_rng(12)
    nuclei = tuple(Nucleus(f"H{i}", 0.5, 0.3 * np.eye(3)) for i in range(4))
    system = SpinSystem("big", (Radical("A", nuclei=nuclei), Radical("B", nuclei=nuclei)), exchange_mT=0.1,
                        k_singlet=1e6, k_triplet=2e6, relaxation=Relaxation((1e5, 1e5), 0.0))
    with pytest.raises(ResourceError) as err:
        engine.compute_yields(system, 50.0, unit(rng, 3), max_bytes=2**20)
    assert "both rates > 0" not in str(err.value) and "--max-memory-gb" in str(err.value)
    uncoupled = SpinSystem("big", system.radicals, k_singlet=1e6, k_triplet=1e6)
    with pytest.raises(ResourceError, match="method='separable'"):
        engine.compute_yields(uncoupled, 50.0, unit(rng, 3), method="hilbert", max_bytes=2**20)


# ----------------------------------------------------------------------------- inversion symmetry


@pytest.mark.parametrize("start, report", [("singlet", "singlet"), ("singlet", "triplet"),
                                           ("triplet", "singlet"), ("triplet", "triplet")])
def test_yield_is_even_in_the_field_for_every_term_the_engine_accepts(start, report):
    # Derived (time reversal, YieldFunction.from_system docstring): Phi(B) = Phi(-B) exactly, with
    # non-symmetric anisotropic g and hyperfine tensors, exchange, dipolar, unequal rates and
    # relaxation, for all four start/yield pairs.  Reference values: dense numpy.linalg.solve.
    system = rich_system(21, (0.5,), (1.0,), start=start, report=report)
    dirs = unit(np.random.default_rng(22), 4)
    for field in (50.0, 2000.0):  # at 2 mT the g anisotropy (4e-3) shifts precessions by ~1 %
        plus = engine.compute_yields(system, field, dirs)
        minus = engine.compute_yields(system, field, -dirs)
        np.testing.assert_allclose(minus, plus, atol=1e-12, rtol=0)
        np.testing.assert_allclose(plus, liouville_solve_yields(system, field, dirs), atol=1e-12, rtol=0)


@pytest.mark.parametrize("start, report", [("singlet", "singlet"), ("singlet", "triplet"),
                                           ("triplet", "singlet"), ("triplet", "triplet")])
def test_separable_with_anisotropic_g_on_both_radicals(start, report):
    # Reference: dense numpy.linalg.solve of the independently built Liouvillian (tests._dynamics).
    # Non-symmetric g tensors on both radicals probe the transpose in B . g . S; at 2 mT the
    # g anisotropy changes the yield by far more than the tolerance (checked below).
    from retina.spin import separable

    base = rich_system(23, (0.5,), (1.0,), k_s=1e6, k_t=1e6, relaxation=Relaxation(),
                       start=start, report=report)
    system = SpinSystem("sep", base.radicals, k_singlet=1e6, k_triplet=1e6, initial_state=start,
                        reported_yield=report)
    transposed = SpinSystem("sep-T", tuple(Radical(r.label, g_tensor=r.g_matrix.T, nuclei=r.nuclei)
                                           for r in system.radicals),
                            k_singlet=1e6, k_triplet=1e6, initial_state=start, reported_yield=report)
    dirs = unit(np.random.default_rng(24), 3)
    got = separable.yields(system, 2000.0, dirs)
    np.testing.assert_allclose(got, liouville_solve_yields(system, 2000.0, dirs), atol=1e-12, rtol=0)
    assert np.max(np.abs(separable.yields(transposed, 2000.0, dirs) - got)) > 1e-6  # the check can fail
