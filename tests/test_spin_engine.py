"""Tests of retina.spin.engine: method choice, cost estimate, memory refusal, dispatch."""

from __future__ import annotations

import dataclasses
import sys

import numpy as np
import pytest
import scipy.sparse.linalg as spla

from retina.errors import InputError, ResourceError
from retina.spin import engine, hilbert, liouville
from retina.spin import operators as ops
from retina.spin.system import Nucleus, Radical, Relaxation, SpinSystem


def make(nuclei_a=(0.5,), nuclei_b=(1.0,), *, exchange=0.0, k_t=1e6, relax=Relaxation(), seed=0):
    rng = np.random.default_rng(seed)

    def t():
        a = rng.normal(size=(3, 3)) * 0.3
        return (a + a.T) / 2 + 0.6 * np.eye(3)

    ra = Radical("A", nuclei=tuple(Nucleus(f"a{i}", s, t()) for i, s in enumerate(nuclei_a)))
    rb = Radical("B", nuclei=tuple(Nucleus(f"b{i}", s, t()) for i, s in enumerate(nuclei_b)))
    return SpinSystem("test", (ra, rb), exchange_mT=exchange, k_singlet=1e6, k_triplet=k_t, relaxation=relax)


def dirs(n, seed=1):
    d = np.random.default_rng(seed).normal(size=(n, 3))
    return d / np.linalg.norm(d, axis=1)[:, None]


def test_choose_method():
    # common practice, no source: the cheapest method whose assumptions hold.
    assert engine.choose_method(make()) == "separable"
    assert engine.choose_method(make(exchange=0.1)) == "hilbert"
    assert engine.choose_method(make(k_t=2e6)) == "liouville"
    assert engine.choose_method(make(relax=Relaxation((1e5, 0.0), 0.0))) == "liouville"


def test_choose_method_without_separable_module(monkeypatch):
    # A None entry in sys.modules makes the import fail (Python import system semantics).
    monkeypatch.setitem(sys.modules, "retina.spin.separable", None)
    assert engine.choose_method(make()) == "hilbert"
    got = engine.compute_yields(make(), 50.0, dirs(3), method="separable")  # falls back to hilbert
    np.testing.assert_allclose(got, hilbert.yields(make(), 50.0, dirs(3)), atol=1e-14)


def test_auto_dispatch_matches_methods():
    system = make(exchange=0.05)
    np.testing.assert_allclose(engine.compute_yields(system, 47.0, dirs(4)), hilbert.yields(system, 47.0, dirs(4)),
                               atol=1e-14)
    uneq = make(k_t=3e6)
    np.testing.assert_allclose(engine.compute_yields(uneq, 47.0, dirs(4)), liouville.yields(uneq, 47.0, dirs(4)),
                               atol=1e-14)


def test_separable_agrees_with_exact_methods():
    pytest.importorskip("retina.spin.separable")
    system = make((0.5, 1.0), (0.5,))
    d = dirs(6)
    sep = engine.compute_yields(system, 50.0, d, method="separable")
    # Reference: the exact eigen method (a different algorithm over the full pair space).
    np.testing.assert_allclose(sep, engine.compute_yields(system, 50.0, d, method="hilbert"), atol=1e-10)
    np.testing.assert_allclose(sep, engine.compute_yields(system, 50.0, d, method="liouville"), atol=1e-10)


def test_resource_error_before_allocating():
    system = make((0.5, 0.5), (0.5,), exchange=0.1)
    with pytest.raises(ResourceError, match=r"needs about .* GiB .*method='hilbert'.*use fewer nuclei"):
        engine.compute_yields(system, 50.0, dirs(5), max_bytes=1000)
    relaxed = dataclasses.replace(system, relaxation=Relaxation((1e5, 1e5), 0.0))
    with pytest.raises(ResourceError, match="GMRES"):
        engine.compute_yields(relaxed, 50.0, dirs(5), max_bytes=10_000)
    one_rate = dataclasses.replace(relaxed, k_triplet=0.0)
    with pytest.raises(ResourceError, match="LU factorisations"):
        engine.compute_yields(one_rate, 50.0, dirs(5), max_bytes=10_000)


def test_default_memory_limit_refuses_huge_liouville():
    # 10 spin-1/2 nuclei: d = 4096, the LU of the (d^2, d^2) Liouvillian would need ~ 0.75 d^4 entries.
    huge = make(tuple([0.5] * 5), tuple([0.5] * 5), relax=Relaxation((1e5, 0.0), 0.0), k_t=0.0)
    assert huge.dimension == 4096
    with pytest.raises(ResourceError, match="GiB"):
        engine.compute_yields(huge, 50.0, dirs(1))


def test_input_errors():
    with pytest.raises(InputError, match="method"):
        engine.compute_yields(make(), 50.0, dirs(2), method="magic")
    with pytest.raises(InputError, match="method"):
        engine.estimate_cost(make(), 2, "magic")
    with pytest.raises(InputError, match="equal recombination rates"):
        engine.compute_yields(make(k_t=3e6), 50.0, dirs(2), method="hilbert")


def test_estimate_cost_fields_and_scaling():
    small, big = make((0.5,), ()), make((0.5, 0.5), (0.5, 0.5), exchange=0.1)
    for method in engine.METHODS:
        c = engine.estimate_cost(small, 100, method)
        assert c.method == method and c.seconds > 0 and c.bytes > 0 and c.note
    # Derived: eigh work grows as d^3, so 8x the dimension costs far more time and memory (beyond
    # the fixed per-direction overhead of the model, measured on small pairs).
    cs, cb = engine.estimate_cost(small, 100, "hilbert"), engine.estimate_cost(big, 100, "hilbert")
    fixed = 100 * engine._PER_DIRECTION
    assert cb.seconds - fixed > 50 * (cs.seconds - fixed) and cb.bytes > cs.bytes
    assert engine.estimate_cost(small, 200, "hilbert").seconds == pytest.approx(2 * cs.seconds)
    assert engine.estimate_cost(big, 10).method == "hilbert"


def test_sparse_memory_estimate_bounds_actual_factor():
    # Reference: scipy.sparse.linalg.splu of the actual Liouvillian; the estimate must cover the
    # stored factors (complex values + int32 indices, 20 bytes an entry).
    system = make((0.5,), (0.5,), exchange=0.05, relax=Relaxation((1e5, 1e5), 1e4), k_t=0.0)  # LU path
    l0, lb, _ = ops.liouvillian_parts(system)
    lu = spla.splu((l0 + 3e-5 * lb[0] + 4e-5 * lb[2]).tocsc())
    stored = 20 * (lu.L.nnz + lu.U.nnz)
    est = engine.estimate_cost(system, 1, "liouville")
    assert est.bytes >= stored
    assert est.bytes < 50 * stored  # and stays an estimate, not a wild bound


def test_progress_reaches_total():
    calls = []
    engine.compute_yields(make(exchange=0.1), 50.0, dirs(7), progress=lambda d, t: calls.append((d, t)))
    assert calls and calls[-1] == (7, 7)


def test_available_bytes_is_positive():
    assert engine.available_bytes() > 0
