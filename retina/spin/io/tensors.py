"""The spin-system file's tensors: nuclei (hyperfine tensor, principal axes, orientation, equivalent
groups), radicals (g value or g tensor) and the point-dipole coupling.

The principal-axis convention is stated in :mod:`retina.spin.io`; the point dipole uses CODATA
constants from :mod:`scipy.constants`.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import scipy.constants as sc
from scipy.spatial.transform import Rotation

from retina.spin.io.keys import (_NUCLEUS_KEYS, _ORIENTATION_KEYS, _RADICAL_KEYS, FREE_ELECTRON_G, LIMITS,
                                 MAX_NUCLEI)
from retina.spin.io.values import (_check_keys, _Ctx, _is_number, _matrix, _number, _readonly, _string, _table,
                                   _type_name, _vector)
from retina.spin.system import Nucleus, Radical

__all__ = ["point_dipole_mT"]


def point_dipole_mT(distance_nm: float, direction) -> np.ndarray:
    """Point-dipole electron-electron coupling tensor.

    Parameters
    ----------
    distance_nm : float
        Inter-electron distance r, nanometres (> 0).
    direction : array_like, shape (3,)
        Direction of the inter-electron vector in the molecular frame (normalised here).

    Returns
    -------
    ndarray, shape (3, 3)
        ``D = (mu_0 / 4 pi) (g_e mu_B / r^3) (I - 3 n n^T)`` in millitesla (CODATA constants).
    """
    n = np.asarray(direction, dtype=float)
    n = n / np.max(np.abs(n))  # first to order 1, so the norm cannot overflow or underflow
    n = n / np.linalg.norm(n)
    r = float(distance_nm) * 1e-9
    d_tesla = sc.mu_0 / (4 * math.pi) * FREE_ELECTRON_G * sc.physical_constants["Bohr magneton"][0] / r**3
    return 1e3 * d_tesla * (np.eye(3) - 3.0 * np.outer(n, n))


def _nucleus(ctx: _Ctx, table: Any, where: str, index: int) -> Nucleus:
    if not isinstance(table, dict):
        raise ctx.fail(where, f"expected a table [[...nuclei]], got {_type_name(table)}")
    _check_keys(ctx, table, _NUCLEUS_KEYS, where)
    label = _string(ctx, table["label"], f"{where}.label") if "label" in table else f"nucleus {index + 1}"
    if "spin" not in table:
        raise ctx.fail(f"{where}.spin", "missing; expected the nuclear spin quantum number (1/2, 1, 3/2, ...)")
    spin = _number(ctx, table["spin"], f"{where}.spin", what="a positive multiple of 1/2")
    if spin > LIMITS["spin"][1]:
        raise ctx.fail(f"{where}.spin", f"expected a nuclear spin of at most {LIMITS['spin'][1]:g} "
                                        f"(the physical range), got {table['spin']!r}")
    twice = round(2 * spin)
    if spin <= 0 or abs(2 * spin - twice) > 1e-9:
        raise ctx.fail(f"{where}.spin", f"expected a positive multiple of 1/2 (0.5, 1, 1.5, ...), got {table['spin']!r}")
    spin = twice / 2

    has_full, has_principal = "hyperfine_mT" in table, "principal_mT" in table
    if has_full and has_principal:
        raise ctx.fail(f"{where}.principal_mT", "give either hyperfine_mT or principal_mT, not both")
    if not has_full and not has_principal:
        raise ctx.fail(f"{where}.hyperfine_mT",
                       "missing; expected hyperfine_mT (a number or a 3x3 array) or principal_mT = [a, b, c]")
    if "orientation" in table and not has_principal:
        raise ctx.fail(f"{where}.orientation", "orientation goes with principal_mT, not with hyperfine_mT")
    if has_full:
        value = table["hyperfine_mT"]
        if _is_number(value):
            tensor = _number(ctx, value, f"{where}.hyperfine_mT", limit="coupling_mT",
                             what="a coupling in mT") * np.eye(3)
        else:
            tensor = _matrix(ctx, value, f"{where}.hyperfine_mT", limit="coupling_mT", what="a coupling in mT")
    else:
        principal = _vector(ctx, table["principal_mT"], f"{where}.principal_mT", limit="coupling_mT",
                            what="a coupling in mT")
        rot = np.eye(3)
        if "orientation" in table:
            rot = _orientation(ctx, table["orientation"], f"{where}.orientation")
        tensor = rot @ np.diag(principal) @ rot.T
    return Nucleus(label=label, spin=spin, hyperfine_mT=_readonly(tensor))


def _nuclei(ctx: _Ctx, table: Any, where: str, index: int) -> tuple[Nucleus, ...]:
    """One ``[[...nuclei]]`` entry: ``count`` (default 1) equivalent nuclei sharing spin and tensor."""
    count = 1
    if isinstance(table, dict) and "count" in table:
        raw = table["count"]
        if isinstance(raw, bool) or not isinstance(raw, int) or not 1 <= raw <= MAX_NUCLEI:
            raise ctx.fail(f"{where}.count", f"expected a whole number of equivalent nuclei from 1 to "
                                             f"{MAX_NUCLEI}, got {raw!r}")
        count = raw
        table = {key: val for key, val in table.items() if key != "count"}
    nuc = _nucleus(ctx, table, where, index)
    if count == 1:
        return (nuc,)
    return tuple(Nucleus(label=f"{nuc.label} {i + 1}", spin=nuc.spin, hyperfine_mT=nuc.hyperfine_mT)
                 for i in range(count))


def _orientation(ctx: _Ctx, value: Any, where: str) -> np.ndarray:
    if not isinstance(value, dict):
        raise ctx.fail(where, f"expected an inline table {{ euler_zyz_deg = [a, b, g] }} or "
                              f"{{ axes = [[..], [..], [..]] }}, got {_type_name(value)}")
    _check_keys(ctx, value, _ORIENTATION_KEYS, where)
    if len(value) != 1:
        raise ctx.fail(where, "expected exactly one of euler_zyz_deg or axes")
    if "euler_zyz_deg" in value:
        angles = _vector(ctx, value["euler_zyz_deg"], f"{where}.euler_zyz_deg", limit="angle_deg",
                         what="an angle in degrees")
        return Rotation.from_euler("ZYZ", angles, degrees=True).as_matrix()
    axes = _matrix(ctx, value["axes"], f"{where}.axes", limit="axes", what="an axis component")
    err = np.max(np.abs(axes @ axes.T - np.eye(3)))
    if err > 1e-6:
        raise ctx.fail(f"{where}.axes", f"expected orthonormal rows (unit length, mutually perpendicular); "
                                        f"|axes axes^T - I| reaches {err:.3g}")
    return axes.T


def _radical(ctx: _Ctx, doc: dict, key: str, default_label: str) -> Radical:
    table = _table(ctx, doc, key, "", required=True)
    _check_keys(ctx, table, _RADICAL_KEYS, key)
    label = _string(ctx, table["label"], f"{key}.label") if "label" in table else default_label
    if "g" in table and "g_tensor" in table:
        raise ctx.fail(f"{key}.g_tensor", "give either g or g_tensor, not both")
    g, g_tensor = FREE_ELECTRON_G, None
    if "g" in table:
        g = _number(ctx, table["g"], f"{key}.g", minimum=0.0, strict=True, what="a g value", limit="g")
    if "g_tensor" in table:
        g_tensor = _readonly(_matrix(ctx, table["g_tensor"], f"{key}.g_tensor", limit="g_tensor",
                                     what="a g-tensor component"))
        g = float(np.trace(g_tensor) / 3.0)
        if not LIMITS["g"][0] <= g <= LIMITS["g"][1]:
            raise ctx.fail(f"{key}.g_tensor", f"expected an isotropic part (trace / 3) in "
                                              f"[{LIMITS['g'][0]:g}, {LIMITS['g'][1]:g}], got {g:g}")
    nuclei_raw = table.get("nuclei", [])
    if not isinstance(nuclei_raw, list):
        raise ctx.fail(f"{key}.nuclei", f"expected an array of tables [[{key}.nuclei]], got {_type_name(nuclei_raw)}")
    if len(nuclei_raw) > MAX_NUCLEI:
        raise ctx.fail(f"{key}.nuclei", f"expected at most {MAX_NUCLEI} nuclei, got {len(nuclei_raw)}")
    nuclei = tuple(n for i, t in enumerate(nuclei_raw) for n in _nuclei(ctx, t, f"{key}.nuclei[{i}]", i))
    if len(nuclei) > MAX_NUCLEI:
        raise ctx.fail(f"{key}.nuclei", f"expected at most {MAX_NUCLEI} nuclei (counting each count = n "
                                        f"entry n times), got {len(nuclei)}")
    return Radical(label=label, g=g, g_tensor=g_tensor, nuclei=nuclei)
