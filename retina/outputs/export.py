"""The key numbers of a run as plain rows, for CSV and JSON (``retina export``).

One row per number: ``group``, ``name``, ``value`` (float), ``units``, and up to two coordinates
``coord``/``coord_value`` and ``coord2``/``coord2_value`` (empty when the number has none).  The
rows hold the yield function's summary, the field, the modulation depth per heading, the scan's
mean depth and pattern change, the bounds and decoding errors per photon level, the disorder
sweep per concentration (and light level) and the trial statistics per light level.  Units follow
:data:`retina.results.DIMENSIONS`.
"""

from __future__ import annotations

import csv
import io
import json

import numpy as np

__all__ = ["key_number_rows", "rows_to_csv", "rows_to_json", "COLUMNS"]

COLUMNS = ("group", "name", "value", "units", "coord", "coord_value", "coord2", "coord2_value")


def _row(group, name, value, units, coord="", cv="", coord2="", cv2=""):
    return {"group": group, "name": name, "value": float(value), "units": units, "coord": coord,
            "coord_value": cv if cv == "" or isinstance(cv, str) else float(cv), "coord2": coord2,
            "coord2_value": cv2 if cv2 == "" or isinstance(cv2, str) else float(cv2)}


def key_number_rows(res) -> list[dict]:
    """The key numbers of a run (module docstring).

    Parameters
    ----------
    res : retina.results.Results

    Returns
    -------
    list of dict
        Keys :data:`COLUMNS`.
    """
    g = res.groups
    rows = []
    y = g["yield_function"]
    for k in ("mean", "max", "min", "relative", "fit_error"):
        rows.append(_row("yield_function", k, y[k], "1"))
    rows.append(_row("yield_function", "degree", y["degree"], "1"))
    f = g["field"]
    for k, u in (("F_uT", "uT"), ("I_deg", "deg"), ("D_deg", "deg")):
        rows.append(_row("field", k, f[k], u))
    if "patterns" in g:
        p = g["patterns"]
        rows += [_row("patterns", "depth", d, "1", "headings_deg", h) for h, d in zip(p["headings_deg"], p["depth"])]
    if "scan" in g:
        s = g["scan"]
        rows.append(_row("scan", "depth_mean", np.mean(s["depth"]), "1"))
        rows.append(_row("scan", "change_per_degree_mean", np.mean(s["change_per_degree"]), "deg^-1"))
    if "precision" in g:
        p = g["precision"]
        for k in ("bound_single_deg", "bound_scan_deg", "bound_single_compare_deg", "bound_scan_compare_deg",
                  "decoded_single_rms_deg", "decoded_scan_rms_deg", "decoded_single_rms_se_deg",
                  "decoded_scan_rms_se_deg"):
            if k in p:
                rows += [_row("precision", k, v, "deg", "photons", ph) for ph, v in zip(p["photons"], p[k])]
    if "disorder" in g:
        d = g["disorder"]
        rows += [_row("disorder", "depth", v, "1", "kappas", k) for k, v in zip(d["kappas"], d["depth"])]
        for i, ph in enumerate(d["light_photons"]):
            rows += [_row("disorder", "bound_deg", v, "deg", "light_photons", ph, "kappas", k)
                     for k, v in zip(d["kappas"], d["bound_deg"][i])]
    if "trials" in g:
        for name, lv in g["trials"]["levels"].items():
            for k, u in (("photons", "photons per receptor"), ("mean_deg", "deg"), ("r", "1"), ("rayleigh_p", "1"),
                         ("v_u", "1"), ("v_p", "1"), ("r_axial", "1"), ("rayleigh_p_axial", "1")):
                rows.append(_row("trials", k, lv[k], u, "light_level", str(name)))
    return rows


def rows_to_csv(rows: list[dict]) -> str:
    """CSV text of key-number rows.

    Parameters
    ----------
    rows : list of dict
        From :func:`key_number_rows`.

    Returns
    -------
    str
        A header line (:data:`COLUMNS`), then one line per row; numbers at full precision (repr).
    """
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=COLUMNS, lineterminator="\n")
    w.writeheader()
    for r in rows:
        w.writerow({k: (repr(v) if isinstance(v, float) else v) for k, v in r.items()})
    return buf.getvalue()


def rows_to_json(rows: list[dict], provenance: dict | None = None) -> str:
    """JSON text of key-number rows.

    Parameters
    ----------
    rows : list of dict
        From :func:`key_number_rows`.
    provenance : dict, optional
        The run's provenance; its name, seed, date, field, ordering and stages are kept.

    Returns
    -------
    str
        ``{"format": "retina-compass key numbers", "provenance": {...}, "rows": [...]}``;
        non-finite values as null.
    """
    def clean(v):
        return None if isinstance(v, float) and not np.isfinite(v) else v

    prov = {k: v for k, v in (provenance or {}).items() if k in ("scenario_name", "seed", "date_utc", "quick",
                                                                "field", "ordering", "stages")}
    return json.dumps({"format": "retina-compass key numbers", "provenance": prov,
                       "rows": [{k: clean(v) for k, v in r.items()} for r in rows]}, indent=1, default=str)
