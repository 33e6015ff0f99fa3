"""Spin-engine benchmarks (issue 2): one table for every spin method.

Run: ``python benchmarks/bench_spin.py [--check] [--quick]``

Rows
----
1. Separable-radicals method vs the exact eigen method (``retina.spin.hilbert``) on an invented
   pair with nuclei on both radicals, Hilbert dimension 18 x 48 = 864.  Target: >= 100x faster
   per direction.  Both are timed in this run; the slow exact method on a few directions only, and
   every time is reported per direction as the best of several repeats (the machine is shared;
   interference only adds time).  Numba compilation is excluded (one warm-up call each).
2. Agreement of the two on the common directions.  Target: max |difference| <= 1e-10.
3. The exact-method rows of ``benchmarks/bench_spin_exact.py`` (its ``rows(quick)``), printed in
   the same table (``benchmarks/_rows.py``).

The invented radical pair (two spin-1 nuclei on A; one spin-1 and three spin-1/2 nuclei on B,
random anisotropic hyperfine tensors of about 0.5 mT, lifetime 1 us, 50 uT) is for timing only.
BLAS runs on one thread (set before numpy loads).
Exit 0 even when a target is missed (the miss is printed); ``--check`` exits 1 on a miss.
"""

from __future__ import annotations

import os

# BLAS threads pinned to one before numpy loads, as in bench_spin_exact.py (imported below, too
# late to set them itself): threaded BLAS on a shared, loaded machine turns timings into noise.
for _v in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMBA_NUM_THREADS"):
    os.environ.setdefault(_v, "1")

import argparse  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

import bench_spin_exact  # noqa: E402  (benchmarks/ is on sys.path when run as a script)
from _rows import print_rows  # noqa: E402

HERE = Path(__file__).resolve().parent


def invented_pair(seed: int = 0, *, n_protons_b: int = 3):
    """An invented pair with nuclei on both radicals (dimension 18 x 48 = 864 by default)."""
    from retina.spin.system import Nucleus, Radical, SpinSystem

    rng = np.random.default_rng(seed)

    def sym(scale=0.5):
        a = rng.normal(size=(3, 3)) * scale
        return (a + a.T) / 2

    ra = Radical("A", nuclei=(Nucleus("N1", 1.0, sym()), Nucleus("N2", 1.0, sym())))
    rb = Radical("B", nuclei=(Nucleus("N3", 1.0, sym()),)
                 + tuple(Nucleus(f"H{i}", 0.5, sym()) for i in range(n_protons_b)))
    return SpinSystem("invented benchmark pair", (ra, rb), k_singlet=1e6, k_triplet=1e6)


def _exact_yields():
    """The exact eigen method of the package, or a dense numpy fallback when it is missing."""
    try:
        from retina.spin import hilbert

        return hilbert.yields, "retina.spin.hilbert"
    except ImportError:  # pragma: no cover - only before the exact method exists
        sys.path.insert(0, str(HERE.parent / "tests"))
        import _dynamics

        return _dynamics.dense_eigen_yields, "dense numpy eigen sum (tests/_dynamics.py)"


def bench_separable(quick: bool) -> list[dict]:
    from retina.spin import separable

    exact, exact_name = _exact_yields()
    system = invented_pair()
    rng = np.random.default_rng(1)
    n_fast, n_slow = (40, 2) if quick else (200, 4)
    dirs = rng.normal(size=(n_fast, 3))
    dirs /= np.linalg.norm(dirs, axis=1)[:, None]

    # Warm-up (not timed): numba compilation of both kernels on a tiny pair.
    small = invented_pair(n_protons_b=0)
    separable.yields(small, 50.0, dirs[:1])
    exact(small, 50.0, dirs[:1])

    # The machine is shared: each time is the best of several repeats (noise only adds time).
    t_fast = np.inf
    for _ in range(3):
        t0 = time.perf_counter()
        fast = separable.yields(system, 50.0, dirs)
        t_fast = min(t_fast, (time.perf_counter() - t0) / n_fast)
    slow = np.empty(n_slow)
    t_slow = np.inf
    for i in range(n_slow):  # one direction per call: the best call is the per-direction time
        t0 = time.perf_counter()
        slow[i] = exact(system, 50.0, dirs[i:i + 1])[0]
        t_slow = min(t_slow, time.perf_counter() - t0)
    agree = float(np.max(np.abs(fast[:n_slow] - slow)))
    ratio = t_slow / t_fast
    d_a, d_b = (r.dimension for r in system.radicals)
    return [
        dict(name=f"separable vs exact eigen, dim {d_a}x{d_b}={system.dimension}",
             measured=f"{t_fast * 1e3:.2f} ms/dir", reference=f"{t_slow * 1e3:.1f} ms/dir",
             ratio=f"{ratio:.0f}x", target=">= 100x", passed=ratio >= 100.0,
             note=f"reference {exact_name}; separable: best of 3 runs over {n_fast} directions; "
                  f"exact: best of {n_slow} single-direction calls"),
        dict(name="separable vs exact eigen, agreement",
             measured=f"{agree:.1e}", reference="exact eigen", ratio="-", target="<= 1e-10",
             passed=agree <= 1e-10,
             note=f"max |Phi_sep - Phi_exact| over {n_slow} directions"),
    ]


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--check", action="store_true", help="exit 1 when a target is missed")
    ap.add_argument("--quick", action="store_true", help="fewer directions (smoke test)")
    a = ap.parse_args(argv)

    missed = print_rows(bench_separable(a.quick) + bench_spin_exact.rows(a.quick))
    return 1 if (missed and a.check) else 0


if __name__ == "__main__":
    sys.exit(main())
