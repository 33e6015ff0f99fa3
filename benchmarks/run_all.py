"""Run every ``benchmarks/bench_*.py`` in turn and print their tables.

Run: ``python benchmarks/run_all.py [--check] [--quick]``

Each benchmark runs in its own Python process (so its thread settings and imports stay its own)
with the same flags; its table is printed as it comes.  Every case is timed in exactly one file
(the spin methods all in ``bench_spin.py``), so nothing runs twice.
Exit status: 0, or 1 with ``--check`` when any benchmark exits non-zero (a missed target or a
failure).
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent


def benchmark_files() -> list[Path]:
    """The ``bench_*.py`` files to run, in name order."""
    return sorted(HERE.glob("bench_*.py"))


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--check", action="store_true", help="exit 1 when any benchmark misses a target")
    ap.add_argument("--quick", action="store_true", help="pass --quick to benchmarks that accept it")
    a = ap.parse_args(argv)
    failed = []
    for path in benchmark_files():
        args = [sys.executable, str(path)]
        if a.check:
            args.append("--check")
        if a.quick and "--quick" in path.read_text(encoding="utf-8"):
            args.append("--quick")
        print(f"\n=== {path.name} ===", flush=True)
        t0 = time.perf_counter()
        try:
            status = subprocess.call(args, cwd=HERE.parent)
        except KeyboardInterrupt:
            return 130
        print(f"--- {path.name}: exit {status}, {time.perf_counter() - t0:.1f} s", flush=True)
        if status != 0:
            failed.append(path.name)
    if failed:
        print(f"\nnon-zero exit: {', '.join(failed)}")
    return 1 if (failed and a.check) else 0


if __name__ == "__main__":
    sys.exit(main())
