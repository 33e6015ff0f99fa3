"""Compare two results files dataset by dataset (every dataset and attribute of every group).

Run: ``python benchmarks/diff_results.py OLD/results.h5 NEW/results.h5 [--all]``

For each numeric dataset: identical, or the largest absolute and relative difference; strings and
attributes are compared as text.  Datasets of seed-dependent Monte Carlo numbers (decoding
errors, trials) are listed as such: they may change when the random draws change, within their
Monte Carlo error; for the precision stage's rms decoding errors the difference is also given in
units of the combined standard error ``sqrt(se_old^2 + se_new^2)`` that the file reports.
Everything else must agree to rounding (flagged beyond relative 1e-9 and absolute 1e-13).  Made to check a speed change
against the code before it (``bench_demo.py --keep DIR`` keeps both demo folders).
"""

from __future__ import annotations

import argparse
import re
import sys

import numpy as np

#: Datasets whose values come from random draws (path patterns).
MONTE_CARLO = (r"^trials/", r"^precision/decoded_", r"trial_r$", r"trial_mean_deg$", r"rayleigh_p$",
               r"(^|/)v_p$", r"^rf_sweep/(control_r|trial_perp_r)$")
ROUNDING_REL = 1e-9
ROUNDING_ABS = 1e-13     # differences of nearly equal numbers (a linearisation error of 1e-10, say)


def _items(path):
    import h5py

    out = {}
    with h5py.File(path, "r") as f:
        def visit(name, obj):
            for k, v in obj.attrs.items():
                if k not in ("DIMENSION_LIST", "REFERENCE_LIST"):      # dimension-scale references
                    out[f"{name}@{k}"] = v
            if isinstance(obj, h5py.Dataset):
                out[name] = obj[()]
        f.visititems(visit)
        for k, v in f.attrs.items():
            out[f"@{k}"] = v
    return out


def _diff(a, b):
    """(status, max abs, max rel) of two values."""
    if np.asarray(a).dtype.kind == "V" or "DIMENSION_LIST" in str(type(a)):
        return "same", np.nan, np.nan          # HDF5 object references (dimension scales): not data
    if isinstance(a, (bytes, str)) or isinstance(b, (bytes, str)) or np.asarray(a).dtype.kind in "OSU":
        return ("same" if str(a) == str(b) else "text differs"), np.nan, np.nan
    a, b = np.asarray(a, float), np.asarray(b, float)
    if a.shape != b.shape:
        return f"shape {a.shape} -> {b.shape}", np.nan, np.nan
    if np.array_equal(a, b, equal_nan=True):
        return "identical", 0.0, 0.0
    both = np.isfinite(a) & np.isfinite(b)
    if not np.array_equal(np.isfinite(a), np.isfinite(b)) or not np.array_equal(a[~both], b[~both], equal_nan=True):
        return "non-finite entries differ", np.nan, np.nan
    d = np.abs(a[both] - b[both])
    scale = np.maximum(np.abs(a[both]), np.abs(b[both]))
    rel = np.where(scale > 0, d / np.where(scale > 0, scale, 1.0), 0.0)
    return "differs", float(d.max()), float(rel.max())


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("old")
    ap.add_argument("new")
    ap.add_argument("--all", action="store_true", help="also list identical datasets")
    a = ap.parse_args(argv)
    old, new = _items(a.old), _items(a.new)
    skip = re.compile(r"@(date|created|time|elapsed|host|version|git|command)", re.I)
    bad = 0
    for key in sorted(set(old) | set(new)):
        if key not in old or key not in new:
            print(f"{key:60s} only in {'new' if key in new else 'old'}")
            continue
        status, dabs, drel = _diff(old[key], new[key])
        mc = any(re.search(p, key.split("@")[0]) for p in MONTE_CARLO)
        if status == "identical" or status == "same":
            if a.all:
                print(f"{key:60s} {status}")
            continue
        note = ""
        if key.startswith("precision/decoded_") and key.endswith("_rms_deg"):
            se = np.hypot(np.asarray(old[key.replace("_rms_deg", "_rms_se_deg")], float),
                          np.asarray(new[key.replace("_rms_deg", "_rms_se_deg")], float))
            z = np.abs(np.asarray(new[key], float) - np.asarray(old[key], float)) / se
            note = f"; |diff| / combined s.e.: max {z.max():.2f}, mean {z.mean():.2f}"
        beyond = not (drel <= ROUNDING_REL or dabs <= ROUNDING_ABS)
        kind = "Monte Carlo" if mc else ("ROUNDING?" if beyond and not skip.search(key) else "")
        if kind == "ROUNDING?":
            bad += 1
        print(f"{key:60s} {status:10s} abs {dabs:.3g} rel {drel:.3g} {kind}{note}")
    print(f"{len(set(old) & set(new))} items compared; {bad} non-Monte-Carlo item(s) beyond rounding "
          f"(relative {ROUNDING_REL:g}, absolute {ROUNDING_ABS:g})")
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
