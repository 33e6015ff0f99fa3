"""The table every spin benchmark prints: rows of dicts with name, measured, reference, ratio,
target, passed and note."""

from __future__ import annotations


def print_rows(rows) -> bool:
    """Print the rows; return True when any target was missed."""
    print(f"{'benchmark':48s} {'measured':>16s} {'reference':>16s} {'ratio':>8s} {'target':>9s}  status")
    missed = False
    for r in rows:
        ok = bool(r["passed"])
        missed |= not ok
        print(f"{r['name']:48s} {r['measured']:>16s} {r['reference']:>16s} {r['ratio']:>8s} "
              f"{r['target']:>9s}  {'pass' if ok else 'MISS'}")
        if r.get("note"):
            print(f"    {r['note']}")
    return missed
