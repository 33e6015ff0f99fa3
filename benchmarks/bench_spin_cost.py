"""How well the engine's cost model predicts the real time and memory, per method.

Run alone: ``python benchmarks/bench_spin_cost.py [--check]``.

For each method (and each Liouville solver) one invented pair (spin-1/2 nuclei with random
anisotropic hyperfine tensors of about 0.5 mT, 50 uT) is timed over a batch of directions after a
warm-up call, and its peak numpy memory is measured with ``tracemalloc``, in the same run as
:func:`retina.spin.engine.estimate_cost` is asked for its prediction.  Target: measured / estimated
time within 1/3..3, and the memory estimate at least the measured peak and at most 4 times it.
BLAS threads are pinned to one.  Exit 0 even when a target is missed; ``--check`` exits 1 on a miss.
"""

from __future__ import annotations

import os

for _v in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMBA_NUM_THREADS"):
    os.environ.setdefault(_v, "1")

import argparse  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import tracemalloc  # noqa: E402

import numpy as np  # noqa: E402

import bench_spin  # noqa: E402  (benchmarks/ is on sys.path when run as a script)


def invented_pair(n_a, n_b, *, exchange_mT=0.0, k_t=1e6, relax=(0.0, 0.0), seed=0):
    from retina.spin.system import Relaxation

    return bench_spin.invented_exchange_pair(n_a, n_b, exchange_mT=exchange_mT, k_t=k_t, seed=seed,
                                          relaxation=Relaxation(relax, 0.0))


CASES = [  # label, pair, method, directions
    ("separable, dim 16x32=512", dict(n_a=3, n_b=4), "separable", 100),
    ("fast-separable, dim 128x128", dict(n_a=6, n_b=6), "fast-separable", 20),
    ("sampled, dim 8x8", dict(n_a=2, n_b=2), "sampled", 3),
    ("sampled, dim 256x256 (split tail)", dict(n_a=7, n_b=7), "sampled", 2),
    ("hilbert, dim 128", dict(n_a=3, n_b=2, exchange_mT=0.02), "hilbert", 60),
    ("liouville eig, dim 64", dict(n_a=2, n_b=2, exchange_mT=0.02, k_t=3e6), "liouville", 40),
    ("liouville krylov, dim 64", dict(n_a=2, n_b=2, exchange_mT=0.02, k_t=3e6, relax=(1e5, 1e5)), "liouville", 20),
    ("liouville sparse LU, dim 16", dict(n_a=1, n_b=1, exchange_mT=0.02, k_t=0.0, relax=(1e5, 1e5)), "liouville", 10),
]


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--check", action="store_true", help="exit 1 when a target is missed")
    ap.add_argument("--quick", action="store_true", help="accepted for run_all.py; this benchmark is always quick")
    args = ap.parse_args(argv)
    from retina.spin import engine, liouville

    rng = np.random.default_rng(1)
    missed = False
    print(f"{'benchmark':<44}{'measured':>11}{'estimate':>11}{'ratio':>8}{'target':>12}  status")
    for label, kw, method, n in CASES:
        system = invented_pair(**kw)
        dirs = rng.normal(size=(n, 3))
        engine.compute_yields(system, 50.0, dirs[:1], method=method)  # warm-up (numba, caches)
        cost = engine.estimate_cost(system, n, method)
        t0 = time.perf_counter()
        engine.compute_yields(system, 50.0, dirs, method=method)
        seconds = time.perf_counter() - t0
        tracemalloc.start()
        engine.compute_yields(system, 50.0, dirs[: min(n, 10)], method=method)
        peak = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
        mem_cost = engine.estimate_cost(system, min(n, 10), method)
        solver = f" ({liouville.solver_for(system)})" if method == "liouville" else ""
        r_t = seconds / cost.seconds
        ok_t = 1 / 3 <= r_t <= 3
        r_m = mem_cost.bytes / peak
        ok_m = 1 <= r_m <= 4
        missed |= not (ok_t and ok_m)
        print(f"{label + ' time':<44}{seconds:>9.3f} s{cost.seconds:>9.3f} s{r_t:>8.2f}{'1/3..3':>12}  "
              f"{'pass' if ok_t else 'MISS'}")
        print(f"{label + ' memory':<44}{peak / 2**20:>8.1f} MB{mem_cost.bytes / 2**20:>8.1f} MB{r_m:>8.2f}"
              f"{'1..4':>12}  {'pass' if ok_m else 'MISS'}")
        print(f"    method {method}{solver}, {n} directions timed, {min(n, 10)} for the memory peak")
    return 1 if (missed and args.check) else 0


if __name__ == "__main__":
    sys.exit(main())
