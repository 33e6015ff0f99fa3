"""Benchmark one point: the demo's precision stage and the whole ``retina demo``.

Run: ``python benchmarks/bench_demo.py [--check] [--quick]``

1. The precision stage of the bundled demo scenario (2 x 2000 receptors, 10 photon levels,
   120 decodes of one pose and of a 37-pose head scan per level).  Reference, same run: the old
   path, every count drawn as its own Poisson variate (``retina.signal.noise.sample_counts``),
   where the new path draws dim rows as a Poisson total split among the receptors
   (``sample_counts_split``; same law, see its docstring) in blocks on numba's thread count (both
   cores here).  Both with one BLAS thread for the decoding products.
2. ``retina demo`` end to end (yield function from the cache, figures, report), new path against
   the old path, same run (skipped with ``--quick``).  Target: the demo <= 20 s.

The yield function is computed once into a temporary cache before the timings.  Exit 0 even when
a target is missed; ``--check`` exits 1 on a miss.  Run it on a quiet machine: the demo uses both
cores where BLAS allows.
"""

from __future__ import annotations

import argparse
import contextlib
import os
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent


@contextlib.contextmanager
def old_sampler():
    """The old path: ``sample_counts`` for every count."""
    from retina.signal import noise

    new = noise.sample_counts_split
    noise.sample_counts_split = lambda lam, rng=None, threads=1: noise.sample_counts(lam, rng)
    try:
        yield
    finally:
        noise.sample_counts_split = new


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--check", action="store_true")
    ap.add_argument("--quick", action="store_true", help="the precision stage only")
    a = ap.parse_args(argv)
    sys.path.insert(0, str(HERE))
    from _rows import print_rows

    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        os.environ["RETINA_CACHE"] = str(Path(tmp) / "cache")
        from threadpoolctl import threadpool_limits

        from retina.build import build_all
        from retina.scenario import load_scenario
        from retina.stages.precision import compute_precision

        sc = load_scenario(ROOT / "assets" / "demo_scenario.toml")
        b = build_all(sc)          # computes and caches the yield function
        t = {}
        with threadpool_limits(1):
            compute_precision(sc.replace(readout={"photons": [10.0], "decode_repeats": 2}), b.model, b.field)  # warm
            for name, ctx in (("old", old_sampler), ("new", contextlib.nullcontext)):
                with ctx():
                    t0 = time.perf_counter()
                    compute_precision(sc, b.model, b.field)
                    t[name] = time.perf_counter() - t0
        r = t["old"] / t["new"]
        rows.append({"name": "demo precision stage (1 BLAS thread)", "measured": f"{t['new']:.1f} s",
                     "reference": f"{t['old']:.1f} s", "ratio": f"{r:.2f}x", "target": "faster",
                     "passed": r > 1.0, "note": "reference: every count an independent Poisson draw (old path)"})
        if not a.quick:
            from retina.cli import main as cli

            d = {}
            for name, ctx in (("old", old_sampler), ("new", contextlib.nullcontext)):
                with ctx():
                    t0 = time.perf_counter()
                    rc = cli(["demo", "-o", str(Path(tmp) / f"demo-{name}"), "-q"])
                    d[name] = time.perf_counter() - t0
                    assert rc == 0
            rows.append({"name": "retina demo, end to end", "measured": f"{d['new']:.1f} s",
                         "reference": f"{d['old']:.1f} s", "ratio": f"{d['old'] / d['new']:.2f}x",
                         "target": "<= 20 s", "passed": d["new"] <= 20.0,
                         "note": "yield function from the cache in both; figures and report included"})
    rows[-1]["note"] = rows[-1].get("note", "") + f"; load average {os.getloadavg()[0]:.1f} on 2 cores"
    missed = print_rows(rows)
    return 1 if (a.check and missed) else 0


if __name__ == "__main__":
    sys.exit(main())
