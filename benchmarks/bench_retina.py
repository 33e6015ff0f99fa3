"""Benchmark the receptor-pattern model (retina.eye.pattern) on one core.

Run alone: ``python benchmarks/bench_retina.py`` (``--check`` exits 1 when a target is missed,
``--quick`` uses 10x fewer receptors for a smoke run; its rates are not the targets' setting).

Cases (every reference is measured in the same run, on the same machine, single-threaded):

1. ensemble, 2 eyes x 20,000 receptors, degree 16, a non-axial ordering (a tilted aligned molecule
   under vMF cone disorder): poses per second of ``RetinaModel.yields`` in batches of 100 poses.
   Reference: straightforward evaluation, per pose, of the receptor response at the field
   direction rotated into every receptor frame (harmonics at N directions per pose).
   Also the axially symmetric case (free rotation; Legendre path) and ``yields_and_grad``.
2. finite molecules, 100 per receptor, same receptors: the one-off build, then poses per second.
   Reference: direct per-molecule evaluation (``yields_bruteforce``), measured on a subset of
   receptors and scaled linearly to the full count.
3. ensemble averaging vs molecule sampling at the same accuracy: the molecule count per receptor
   whose rms error (vs the exact ensemble) reaches 1e-3 of the yield function's anisotropy
   (max - min) is found from a pilot run; then the time of the sampled path (build with that many
   molecules + evaluation) is compared with the ensemble path (ordering average + rotation into
   the receptor frames + evaluation) on the same receptors and poses.  The accuracy is relative to
   the anisotropy because the anisotropy is the compass signal (the mean yield carries no heading
   information).  An absolute yield accuracy of 1e-3 (here about 4 % of the anisotropy, a loose
   setting) is printed for information, without a target.
"""

from __future__ import annotations

import os

for _v in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMBA_NUM_THREADS"):
    os.environ[_v] = "1"

import argparse  # noqa: E402
import math  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402
from scipy.spatial.transform import Rotation  # noqa: E402

from retina import sphere  # noqa: E402
from retina.eye.field import Field  # noqa: E402
from retina.eye.geometry import build_receptors, default_eyes  # noqa: E402
from retina.eye.ordering import Aligned, Composite, Cone, FreeRotation  # noqa: E402
from retina.eye.pattern import RetinaModel  # noqa: E402
from retina.eye.pose import head_field, pose_rotation  # noqa: E402

L = 16


def invented_yield(L: int = L, seed: int = 2026) -> np.ndarray:
    """An invented, non-axial, smooth even yield function of degree L (mean 0.3, a few per cent
    anisotropy), as harmonic coefficients."""
    rng = np.random.default_rng(seed)
    l, _ = sphere.lm_index(L)
    c = rng.normal(size=sphere.n_coeffs(L)) * 0.01 * np.exp(-l / 4.0)
    c[0] = 0.3 * math.sqrt(4 * math.pi)
    return c


def anisotropy(c: np.ndarray) -> float:
    g = sphere.lebedev(131)
    v = sphere.evaluate(c, g.points)
    return float(v.max() - v.min())


def best_of(fn, repeat=3):
    t = []
    out = None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        t.append(time.perf_counter() - t0)
    return min(t), out


def poses(n: int, seed: int = 0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    R = pose_rotation(rng.uniform(0, 360, n), rng.uniform(-30, 30, n), rng.uniform(-20, 20, n))
    return head_field(R, Field(48.0, 65.0, 3.0).vector)


def reference_per_pose(response: np.ndarray, receptors, b: np.ndarray) -> np.ndarray:
    """Straightforward evaluation: rotate b into every receptor frame, evaluate the response."""
    inv = receptors.rotations.inv()
    out = np.empty((len(b), len(receptors)))
    for p in range(len(b)):
        out[p] = sphere.evaluate(response, inv.apply(b[p]))
    return out


def row(name, value, unit, ref, ref_unit, ratio, target, ok):
    print(f"{name:<52} {value:>12.4g} {unit:<10} {ref:>12.4g} {ref_unit:<10} {ratio:>9.3g} "
          f"{target:<14} {'ok' if ok else 'MISSED'}")
    return ok


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--check", action="store_true", help="exit 1 when a target is missed")
    ap.add_argument("--quick", action="store_true", help="10x fewer receptors (smoke run)")
    args = ap.parse_args(argv)
    n_eye = 2000 if args.quick else 20000
    rec = build_receptors(default_eyes(n_eye))
    N = len(rec)
    f = invented_yield()
    delta = anisotropy(f)
    order = Composite(Cone(kappa=10.0), Aligned.tilted(30.0, 20.0, 10.0))
    print(f"bench_retina: {N} receptors (2 eyes), degree {L}, single thread; yield anisotropy "
          f"{delta:.4g}")
    print(f"{'case':<52} {'measured':>12} {'':<10} {'reference':>12} {'':<10} {'ratio':>9} "
          f"{'target':<14}")
    ok = True

    # ---- 1. ensemble ---------------------------------------------------------------------------
    t_build, model = best_of(lambda: RetinaModel(f, rec, order), repeat=1)
    assert not model.axial
    B = poses(100)
    model.yields(B[:2])
    t_fast, y_fast = best_of(lambda: model.yields(B))
    nref = 5
    t_ref, y_ref = best_of(lambda: reference_per_pose(model.response, rec, B[:nref]), repeat=1)
    err = np.abs(y_fast[:nref] - y_ref).max()
    rate, rate_ref = len(B) / t_fast, nref / t_ref
    ok &= row("ensemble non-axial: poses/s (yields)", rate, "poses/s", rate_ref, "poses/s",
              rate / rate_ref, ">= 1000 /s", rate >= 1000 or args.quick)
    t_g, _ = best_of(lambda: model.yields_and_grad(B[:50]))
    row("ensemble non-axial: poses/s (yields_and_grad)", 50 / t_g, "poses/s", rate_ref, "poses/s",
        50 / t_g / rate_ref, "(info)", True)
    print(f"    build {t_build:.2f} s; max |fast - reference| = {err:.2e}")
    axial = RetinaModel(f, rec, Composite(Cone(kappa=10.0), FreeRotation(30.0, 10.0)))
    assert axial.axial
    axial.yields(B[:2])
    t_ax, _ = best_of(lambda: axial.yields(B))
    ok &= row("ensemble axial (Legendre): poses/s", len(B) / t_ax, "poses/s", rate_ref, "poses/s",
              len(B) / t_ax / rate_ref, ">= 1000 /s", len(B) / t_ax >= 1000 or args.quick)

    # ---- 2. finite molecules -------------------------------------------------------------------
    n_mol = 100
    t0 = time.perf_counter()
    mol = RetinaModel(f, rec, order, mode="molecules", n_molecules=n_mol, seed=1)
    t_mbuild = time.perf_counter() - t0
    mol.yields(B[:2])
    t_m, _ = best_of(lambda: mol.yields(B))
    sub = build_receptors(default_eyes(100))
    msub = RetinaModel(f, sub, order, mode="molecules", n_molecules=n_mol, seed=1)
    t_bf, _ = best_of(lambda: msub.yields_bruteforce(B[:2]), repeat=1)
    rate_bf = 2 / (t_bf * N / len(sub))
    ok &= row(f"molecules ({n_mol}/receptor): poses/s", len(B) / t_m, "poses/s", rate_bf, "poses/s",
              len(B) / t_m / rate_bf, ">= 20 /s", len(B) / t_m >= 20 or args.quick)
    print(f"    one-off build of {N * n_mol} molecule rotations: {t_mbuild:.1f} s; reference = "
          f"direct per-molecule evaluation on {len(sub)} receptors scaled x{N / len(sub):.0f}")

    # ---- 3. ensemble vs sampling at the same accuracy ------------------------------------------
    sub = build_receptors(default_eyes(500))
    P = 20
    Bs = poses(P, seed=3)

    def ensemble_path():
        _cone_cache_clear()  # cold: the cone quadrature rule is part of the cost
        return RetinaModel(f, sub, order).yields(Bs)

    t_ens, y_ens = best_of(ensemble_path)
    n_pilot = 64
    pilot = RetinaModel(f, sub, order, mode="molecules", n_molecules=n_pilot, seed=7).yields(Bs)
    sigma = float(np.sqrt(np.mean((pilot - y_ens) ** 2)) * math.sqrt(n_pilot))
    for label, eps, target in (("1e-3 of anisotropy", 1e-3 * delta, True),
                               ("1e-3 absolute", 1e-3, False)):
        n_req = max(1, math.ceil((sigma / eps) ** 2))
        # time with the required count on a slice of receptors if it is large, scaled linearly
        frac = 1.0
        s_rec = sub
        while len(s_rec) * n_req > 2_000_000 and len(s_rec) > 8:
            keep = max(4, len(s_rec) // 4)
            s_rec = build_receptors(default_eyes(keep))
            frac = len(s_rec) / len(sub)
        t0 = time.perf_counter()
        q = RetinaModel(f, s_rec, order, mode="molecules", n_molecules=n_req, seed=11).yields(Bs)
        t_smp = (time.perf_counter() - t0) / frac
        got = float(np.sqrt(np.mean((q - RetinaModel(f, s_rec, order).yields(Bs)) ** 2)))
        r = t_smp / t_ens
        good = row(f"ensemble vs sampling at {label}: speed-up", r, "x", t_smp, "s sampled", r,
                   ">= 100 x" if target else "(info)", r >= 100 or args.quick or not target)
        ok &= good
        print(f"    sigma per molecule {sigma:.3g}; {n_req} molecules/receptor reach rms "
              f"{got:.3g} (target {eps:.3g}); ensemble {t_ens * 1e3:.1f} ms; sampled timed on "
              f"{len(s_rec)} of {len(sub)} receptors, scaled")
    print("all targets met" if ok else "some targets MISSED")
    return 0 if (ok or not args.check) else 1


def _cone_cache_clear():
    """Time the ensemble path cold: clear the cached cone quadrature rules."""
    from retina.eye import order_rules

    order_rules.cone_rule.cache_clear()
    order_rules.vmf_cos_rule.cache_clear()


if __name__ == "__main__":
    sys.exit(main())
