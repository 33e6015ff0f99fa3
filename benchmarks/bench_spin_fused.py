"""The sampled method's fused propagation across fields (issue 12): speed-up against field by field.

Run: ``python benchmarks/bench_spin_fused.py [--quick] [--sizes 12,16,20] [--widths 2,4,8] [--single W]``

On the invented axial pairs of ``bench_spin_large.py`` (12, 16 and 20 nuclei: two axial nitrogens
and 4, 6 or 8 protons per radical), a few field directions, each with its opposite (the default
control), 4 + 8 random states, nucleus-axis basis, split tail, one process: ``sampled_yields`` with
``block_width=1`` (field by field, the reference) and with wider blocks, timed alternately in the
same run (best of two at 12 and 16 nuclei, one run at 20); the speed-up is the reference's time
over the fused time, and the largest difference of the yields is printed beside it (the two must
agree to the Chebyshev truncation).  Also the load average.  Numba compilation is excluded (a
warm-up on a small pair first).

With ``--single W`` a second table times ``precision="single"`` against double at block width ``W``
(the same draws) and prints the bias of single precision: the largest difference of the yields and
the difference of the anisotropy (largest minus smallest yield over the directions, from the same
two directions as the double run), beside the anisotropy's standard error.
"""

from __future__ import annotations

import argparse
import os
import sys
import time

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

from bench_spin_large import axial_pair, _dirs  # noqa: E402
from retina.spin import sampling  # noqa: E402


def _time(system, dirs, width, precision="double"):
    t0 = time.perf_counter()
    res = sampling.sampled_yields(system, 50.0, dirs, n_states=(4, 8), seed=3, block_width=width,
                                  precision=precision, tail_split=3.0)
    return time.perf_counter() - t0, res


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--quick", action="store_true", help="12 and 16 nuclei only, one repeat")
    ap.add_argument("--sizes", default="12,16,20", help="numbers of nuclei (12, 16, 20)")
    ap.add_argument("--widths", default="2,4,8", help="fields per block to time against 1")
    ap.add_argument("--single", type=int, default=0, help="also time single precision at this block width")
    args = ap.parse_args(argv)
    sizes = [int(s) for s in args.sizes.split(",")]
    if args.quick:
        sizes = [s for s in sizes if s < 20]
    widths = [int(w) for w in args.widths.split(",") if w]
    # compile the kernels outside the timings
    sampling.sampled_yields(axial_pair(1), 50.0, _dirs(2), n_states=(4, 4), block_width=2, precision="single")
    sampling.sampled_yields(axial_pair(1), 50.0, _dirs(2), n_states=(4, 4), block_width=2)
    sampling.sampled_yields(axial_pair(1), 50.0, _dirs(2), n_states=(4, 4), block_width=1)
    print(f"load average at start: {os.getloadavg()}")
    print("| nuclei | dims | directions (x2 fields) | field by field s | width | fused s | speed-up | max |diff| |")
    print("|---|---|---|---|---|---|---|---|")
    for n_nuc in sizes:
        system = axial_pair((n_nuc - 4) // 2)
        n_dir = 4 if n_nuc < 20 else 2
        repeats = 1 if (args.quick or n_nuc >= 20) else 2
        dirs = _dirs(n_dir)
        dims = "x".join(str(r.dimension) for r in system.radicals)
        for width in widths:
            ref, fused = np.inf, np.inf
            for _ in range(repeats):       # alternate, so load changes hit both
                t_r, r_ref = _time(system, dirs, 1)
                t_f, r_f = _time(system, dirs, width)
                ref, fused = min(ref, t_r), min(fused, t_f)
            diff = float(np.max(np.abs(r_f.mean - r_ref.mean)))
            print(f"| {n_nuc} | {dims} | {n_dir} | {ref:.2f} | {width} | {fused:.2f} | {ref / fused:.2f}x | "
                  f"{diff:.1e} |  (load {os.getloadavg()[0]:.2f})", flush=True)
    if args.single:
        _single_table(sizes, args.single)
    return 0


def _single_table(sizes, width):
    print(f"\nsingle against double precision, block width {width}")
    print("| nuclei | directions | double s | single s | speed-up | max |yield diff| | anisotropy diff | its s.e. |")
    print("|---|---|---|---|---|---|---|---|")
    for n_nuc in sizes:
        system = axial_pair((n_nuc - 4) // 2)
        n_dir = 4 if n_nuc < 20 else 2
        dirs = _dirs(n_dir)
        t_d, r_d = _time(system, dirs, width)
        t_s, r_s = _time(system, dirs, width, "single")
        hi, lo = int(np.argmax(r_d.mean)), int(np.argmin(r_d.mean))
        w = np.zeros(n_dir)
        w[hi], w[lo] = 1.0, -1.0
        d_aniso = float(w @ r_s.mean - w @ r_d.mean)
        print(f"| {n_nuc} | {n_dir} | {t_d:.2f} | {t_s:.2f} | {t_d / t_s:.2f}x | "
              f"{float(np.max(np.abs(r_s.mean - r_d.mean))):.1e} | {d_aniso:.1e} | {r_d.standard_error_of(w):.1e} |"
              f"  (load {os.getloadavg()[0]:.2f})", flush=True)


if __name__ == "__main__":
    raise SystemExit(main())
