"""The TOML spin-system file: schema, validation, and writing it back.

The schema is documented by example in ``assets/example_pair.toml`` (every key is annotated there);
this docstring is the reference.  Units follow DEVELOPERS.md: couplings in millitesla, rates in
s^-1 (or lifetimes in microseconds), distances in nanometres, angles in degrees.

Tables and keys
---------------
``[pair]``
    ``name`` (str, required), ``initial_state`` ("singlet" default | "triplet"),
    ``reported_yield`` ("singlet" default | "triplet").
``[radical_a]``, ``[radical_b]`` (both required)
    ``label`` (str, default "A" / "B"); ``g`` (float, default the free-electron value) or
    ``g_tensor`` (3x3, not both); ``[[radical_x.nuclei]]`` (array of tables, may be empty).
``[[radical_x.nuclei]]``
    ``label`` (str, default "nucleus <i>"), ``spin`` (a positive multiple of 1/2, required), and the
    hyperfine tensor in exactly one of three forms:

    - ``hyperfine_mT = [[..], [..], [..]]``: the full real 3x3 tensor (symmetry not required);
    - ``hyperfine_mT = 1.2``: isotropic, ``A = a * I``;
    - ``principal_mT = [a1, a2, a3]`` with an optional ``orientation`` inline table holding either
      ``euler_zyz_deg = [alpha, beta, gamma]`` or ``axes = [[x..], [y..], [z..]]``.

    ``count = n`` (optional, a whole number >= 1, default 1) declares ``n`` magnetically
    equivalent nuclei with this one spin and tensor (a methyl group, say); they are read as ``n``
    nuclei labelled ``"<label> 1" .. "<label> n"`` and the canonical form lists them one by one.
    The fast separable method reduces such groups exactly by total spin
    (:mod:`retina.spin.equivalence`); the other methods treat them as separate nuclei.

    Principal-axis convention (owned here): with ``R`` the (3, 3) matrix whose *columns* are the
    principal axes written in the molecular frame, ``A = R diag(a1, a2, a3) R^T``.  ``axes`` gives
    the principal axes as *rows* (so ``R = axes^T``; rows must be orthonormal within 1e-6).
    ``euler_zyz_deg`` gives ``R = Rotation.from_euler("ZYZ", [alpha, beta, gamma], degrees=True)``
    (intrinsic z-y'-z''; scipy's upper-case sequence).  No orientation means ``R = I``.
``[coupling]`` (optional)
    ``exchange_mT`` (float, default 0; sign convention in :mod:`retina.spin.system`), and either
    ``dipolar_mT`` (3x3) or ``dipolar = { distance_nm = r, direction = [x, y, z] }`` (point dipole,
    ``D = (mu_0 / 4 pi) (g_e mu_B / r^3) (I - 3 n n^T)`` with ``n`` the normalised direction).
``[kinetics]`` (required)
    ``k_singlet_per_s`` and ``k_triplet_per_s`` (both >= 0, not both 0, and the reported channel
    > 0), or ``lifetime_us`` (``k_S = k_T = 1 / lifetime``), not both forms.
``[relaxation]`` (optional)
    ``random_field_per_s`` (one float for both electrons, or ``[k_A, k_B]``), ``st_dephasing_per_s``.

Physical ranges (:data:`LIMITS`; outside them the value is refused, naming the key)
-----------------------------------------------------------------------------------
====================================================  ==========================================
key                                                   accepted range
====================================================  ==========================================
``nuclei[i].spin``                                    1/2 ... 8 (no known nucleus exceeds 7,
                                                      from memory)
``hyperfine_mT``, ``principal_mT``, ``exchange_mT``,  each entry within +/- 1e4 mT (10 T; organic
``dipolar_mT``                                        radicals couple below ~100 mT, common
                                                      practice, no source)
``g``; ``g_tensor`` entries (and its trace / 3)       0.1 ... 20; -20 ... 20 (and 0.1 ... 20)
``dipolar.distance_nm``                               0.1 ... 1000 nm
``dipolar.direction``, ``orientation.axes`` entries   within +/- 1e6 (the direction is normalised)
``orientation.euler_zyz_deg``                         -720 ... 720 degrees
``lifetime_us``                                       1e-6 ... 1e6 us (1 ps to 1 s)
``k_*_per_s``, ``random_field_per_s``,                0 ... 1e13 s^-1
``st_dephasing_per_s``
``name``, ``label`` (strings)                         at most 200 printable characters
``radical_x.nuclei``                                  at most 64 nuclei per radical
the file                                              a regular file of at most 1 MiB
====================================================  ==========================================

Every problem raises one :class:`retina.errors.InputError` naming the file, the dotted key (for
example ``radical_a.nuclei[1].spin``, counting from 0) and what was expected.  Unknown keys are
errors too, with a "did you mean" suggestion.

:func:`dump_system` writes the canonical form (full 3x3 tensors, explicit rates), which
:func:`loads_system` reads back to an equal system (:func:`systems_equal`); the canonical text is
also what provenance records and the cache hashes.
"""

from __future__ import annotations

import difflib
import math
import tomllib
from pathlib import Path
from typing import Any

import numpy as np
import scipy.constants as sc
from scipy.spatial.transform import Rotation

from retina.errors import InputError
from retina.spin.system import Nucleus, Radical, Relaxation, SpinSystem

__all__ = [
    "load_system",
    "loads_system",
    "system_from_document",
    "canonical_document",
    "dump_system",
    "systems_equal",
    "point_dipole_mT",
]

FREE_ELECTRON_G = abs(sc.physical_constants["electron g factor"][0])

LIMITS: dict[str, tuple[float, float, str]] = {
    "spin": (0.5, 8.0, ""),
    "coupling_mT": (-1e4, 1e4, " mT"),
    "g": (0.1, 20.0, ""),
    "g_tensor": (-20.0, 20.0, ""),
    "distance_nm": (0.1, 1e3, " nm"),
    "axes": (-1e6, 1e6, ""),
    "angle_deg": (-720.0, 720.0, " degrees"),
    "lifetime_us": (1e-6, 1e6, " us"),
    "rate_per_s": (0.0, 1e13, " s^-1"),
}
"""Physical range of each kind of key: (lowest, highest, unit); see the module docstring."""
MAX_NUCLEI = 64
"""Most nuclei per radical (a file may describe more than any engine can compute; the memory guard
of :mod:`retina.spin.engine` refuses those with the exact memory figure)."""
MAX_NAME_CHARS = 200
MAX_FILE_BYTES = 1 << 20
"""Spin files larger than 1 MiB are refused before parsing."""

_TOP_KEYS = ("pair", "radical_a", "radical_b", "coupling", "kinetics", "relaxation")
_PAIR_KEYS = ("name", "initial_state", "reported_yield")
_RADICAL_KEYS = ("label", "g", "g_tensor", "nuclei")
_NUCLEUS_KEYS = ("label", "spin", "hyperfine_mT", "principal_mT", "orientation", "count")
_ORIENTATION_KEYS = ("euler_zyz_deg", "axes")
_COUPLING_KEYS = ("exchange_mT", "dipolar_mT", "dipolar")
_DIPOLAR_KEYS = ("distance_nm", "direction")
_KINETICS_KEYS = ("k_singlet_per_s", "k_triplet_per_s", "lifetime_us")
_RELAXATION_KEYS = ("random_field_per_s", "st_dephasing_per_s")
_STATES = ("singlet", "triplet")


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


# ----------------------------------------------------------------------------- validation helpers


class _Ctx:
    """Where we are in the document: the file and the dotted key prefix."""

    def __init__(self, source: str | None):
        self.source = source

    def fail(self, key: str, message: str) -> InputError:
        return InputError(message, source=self.source, key=key)


def _type_name(value: Any) -> str:
    if isinstance(value, bool):
        return f"a boolean ({str(value).lower()})"
    if isinstance(value, (int, float)):
        return f"the number {value!r}"
    if isinstance(value, str):
        return f"the string {value!r}"
    if isinstance(value, list):
        return f"an array of length {len(value)}"
    if isinstance(value, dict):
        return "a table"
    return type(value).__name__


def _check_keys(ctx: _Ctx, table: dict, allowed: tuple[str, ...], prefix: str) -> None:
    for key in table:
        if key not in allowed:
            close = difflib.get_close_matches(key, allowed, n=1, cutoff=0.6)
            close = close or [a for a in allowed if a.startswith(key) or key.startswith(a)][:1]
            hint = f"; did you mean {close[0]!r}?" if close else f"; known keys: {', '.join(allowed)}"
            where = f"{prefix}.{key}" if prefix else key
            raise ctx.fail(where, f"unknown key{hint}")


def _table(ctx: _Ctx, parent: dict, key: str, prefix: str, *, required: bool) -> dict | None:
    where = f"{prefix}.{key}" if prefix else key
    if key not in parent:
        if required:
            raise ctx.fail(where, "missing; expected a table [" + where + "]")
        return None
    value = parent[key]
    if not isinstance(value, dict):
        raise ctx.fail(where, f"expected a table, got {_type_name(value)}")
    return value


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _number(ctx: _Ctx, value: Any, where: str, *, minimum: float | None = None,
            strict: bool = False, what: str = "a number", limit: str | None = None) -> float:
    """A finite number; ``limit`` names a row of :data:`LIMITS` (the physical range of the key)."""
    if not _is_number(value):
        raise ctx.fail(where, f"expected {what}, got {_type_name(value)}")
    try:
        x = float(value)
    except OverflowError:  # an integer beyond the float range
        raise ctx.fail(where, f"expected {what} within the physical range, got an integer of "
                              f"{len(str(abs(value)))} digits") from None
    if not math.isfinite(x):
        raise ctx.fail(where, f"expected a finite number, got {value!r}")
    if minimum is not None:
        if strict and not x > minimum:
            raise ctx.fail(where, f"expected {what} > {minimum:g}, got {value!r}")
        if not strict and x < minimum:
            raise ctx.fail(where, f"expected {what} >= {minimum:g}, got {value!r}")
    if limit is not None:
        lo, hi, unit = LIMITS[limit]
        if not lo <= x <= hi:
            raise ctx.fail(where, f"expected {what} in [{lo:g}, {hi:g}]{unit} (the physical range), got {value!r}")
    return x


def _string(ctx: _Ctx, value: Any, where: str, choices: tuple[str, ...] | None = None) -> str:
    if not isinstance(value, str):
        raise ctx.fail(where, f"expected a string, got {_type_name(value)}")
    if len(value) > MAX_NAME_CHARS:
        raise ctx.fail(where, f"expected at most {MAX_NAME_CHARS} characters, got {len(value)}")
    bad = next((c for c in value if ord(c) < 32 or ord(c) == 127), None)
    if bad is not None:
        raise ctx.fail(where, f"expected printable text, got the control character {bad!r}")
    if choices is not None and value not in choices:
        close = difflib.get_close_matches(value, choices, n=1, cutoff=0.5)
        hint = f" (did you mean {close[0]!r}?)" if close else ""
        raise ctx.fail(where, f"expected one of {', '.join(repr(c) for c in choices)}, got {value!r}{hint}")
    return value


def _vector(ctx: _Ctx, value: Any, where: str, n: int = 3, *, limit: str | None = None,
            what: str = "a number") -> np.ndarray:
    if not isinstance(value, list) or len(value) != n:
        raise ctx.fail(where, f"expected an array of {n} numbers, got {_type_name(value)}")
    return np.array([_number(ctx, v, f"{where}[{i}]", limit=limit, what=what) for i, v in enumerate(value)],
                    dtype=float)


def _matrix(ctx: _Ctx, value: Any, where: str, *, limit: str | None = None, what: str = "a number") -> np.ndarray:
    shape_msg = "expected a 3x3 array of numbers [[a, b, c], [d, e, f], [g, h, i]]"
    if not isinstance(value, list) or len(value) != 3:
        rows = len(value) if isinstance(value, list) else None
        got = f"{rows} rows" if rows is not None else _type_name(value)
        raise ctx.fail(where, f"{shape_msg}, got {got}")
    out = np.empty((3, 3))
    for i, row in enumerate(value):
        if not isinstance(row, list) or len(row) != 3:
            got = f"a row of length {len(row)}" if isinstance(row, list) else _type_name(row)
            raise ctx.fail(f"{where}[{i}]", f"{shape_msg}, got {got}")
        for j, v in enumerate(row):
            out[i, j] = _number(ctx, v, f"{where}[{i}][{j}]", limit=limit, what=what)
    return out


def _readonly(a: np.ndarray) -> np.ndarray:
    a = np.array(a, dtype=float)
    a.flags.writeable = False
    return a


# ----------------------------------------------------------------------------- parsing


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


def system_from_document(doc: dict, source: str | Path | None = None) -> SpinSystem:
    """Validate a parsed spin-system document and build the :class:`SpinSystem`.

    Parameters
    ----------
    doc : dict
        The parsed TOML content (as from ``tomllib``).
    source : str or Path, optional
        File name used in error messages and stored as ``SpinSystem.source``.

    Returns
    -------
    SpinSystem
        Immutable, in SI units (module docstring, ``LIMITS``).

    Raises
    ------
    InputError
        On the first wrong, missing or unknown value, naming the dotted key.
    """
    src = str(source) if source is not None else None
    ctx = _Ctx(src)
    if not isinstance(doc, dict):
        raise ctx.fail("", "expected a TOML document (a table at the top level)")
    _check_keys(ctx, doc, _TOP_KEYS, "")

    pair = _table(ctx, doc, "pair", "", required=True)
    _check_keys(ctx, pair, _PAIR_KEYS, "pair")
    if "name" not in pair:
        raise ctx.fail("pair.name", "missing; expected a name for the radical pair (a string)")
    name = _string(ctx, pair["name"], "pair.name")
    initial = _string(ctx, pair.get("initial_state", "singlet"), "pair.initial_state", _STATES)
    reported = _string(ctx, pair.get("reported_yield", "singlet"), "pair.reported_yield", _STATES)

    rad_a = _radical(ctx, doc, "radical_a", "A")
    rad_b = _radical(ctx, doc, "radical_b", "B")

    exchange, dipolar = 0.0, None
    coupling = _table(ctx, doc, "coupling", "", required=False)
    if coupling is not None:
        _check_keys(ctx, coupling, _COUPLING_KEYS, "coupling")
        if "exchange_mT" in coupling:
            exchange = _number(ctx, coupling["exchange_mT"], "coupling.exchange_mT", limit="coupling_mT",
                               what="a coupling in mT")
        if "dipolar_mT" in coupling and "dipolar" in coupling:
            raise ctx.fail("coupling.dipolar", "give either dipolar_mT or dipolar, not both")
        if "dipolar_mT" in coupling:
            dipolar = _matrix(ctx, coupling["dipolar_mT"], "coupling.dipolar_mT", limit="coupling_mT",
                              what="a coupling in mT")
        elif "dipolar" in coupling:
            dip = _table(ctx, coupling, "dipolar", "coupling", required=True)
            _check_keys(ctx, dip, _DIPOLAR_KEYS, "coupling.dipolar")
            for k in _DIPOLAR_KEYS:
                if k not in dip:
                    raise ctx.fail(f"coupling.dipolar.{k}", "missing; the point dipole needs distance_nm and direction")
            r = _number(ctx, dip["distance_nm"], "coupling.dipolar.distance_nm", what="a distance in nm",
                        limit="distance_nm")
            n = _vector(ctx, dip["direction"], "coupling.dipolar.direction", limit="axes",
                        what="a direction component")
            if not np.max(np.abs(n)) > 0:
                raise ctx.fail("coupling.dipolar.direction", "expected a non-zero direction vector")
            dipolar = point_dipole_mT(r, n)
        if dipolar is not None:
            dipolar = _readonly(dipolar)

    kin = _table(ctx, doc, "kinetics", "", required=True)
    _check_keys(ctx, kin, _KINETICS_KEYS, "kinetics")
    if "lifetime_us" in kin:
        for k in ("k_singlet_per_s", "k_triplet_per_s"):
            if k in kin:
                raise ctx.fail(f"kinetics.{k}", "give either lifetime_us or k_singlet_per_s/k_triplet_per_s, not both")
        tau = _number(ctx, kin["lifetime_us"], "kinetics.lifetime_us", minimum=0.0, strict=True,
                      what="a lifetime in microseconds")
        _number(ctx, tau, "kinetics.lifetime_us", what="a lifetime in microseconds", limit="lifetime_us")
        k_s = k_t = 1.0 / (tau * 1e-6)
    else:
        for k in ("k_singlet_per_s", "k_triplet_per_s"):
            if k not in kin:
                raise ctx.fail(f"kinetics.{k}", "missing; give lifetime_us, or both k_singlet_per_s and k_triplet_per_s")
        k_s = _number(ctx, kin["k_singlet_per_s"], "kinetics.k_singlet_per_s", minimum=0.0, what="a rate in s^-1",
                      limit="rate_per_s")
        k_t = _number(ctx, kin["k_triplet_per_s"], "kinetics.k_triplet_per_s", minimum=0.0, what="a rate in s^-1",
                      limit="rate_per_s")
        reported_key = f"k_{reported}_per_s"
        if (k_s if reported == "singlet" else k_t) == 0.0:
            raise ctx.fail(f"kinetics.{reported_key}",
                           f"expected a rate > 0: the reported {reported} yield would be zero everywhere")

    relaxation = Relaxation()
    rel = _table(ctx, doc, "relaxation", "", required=False)
    if rel is not None:
        _check_keys(ctx, rel, _RELAXATION_KEYS, "relaxation")
        rf = (0.0, 0.0)
        if "random_field_per_s" in rel:
            value = rel["random_field_per_s"]
            if isinstance(value, list):
                vec = _vector(ctx, value, "relaxation.random_field_per_s", n=2)
                for i, v in enumerate(vec):
                    if v < 0:
                        raise ctx.fail(f"relaxation.random_field_per_s[{i}]", f"expected a rate >= 0 in s^-1, got {v:g}")
                    _number(ctx, float(v), f"relaxation.random_field_per_s[{i}]", what="a rate in s^-1",
                            limit="rate_per_s")
                rf = (float(vec[0]), float(vec[1]))
            else:
                k = _number(ctx, value, "relaxation.random_field_per_s", minimum=0.0,
                            what="a rate in s^-1 (or [k_A, k_B])", limit="rate_per_s")
                rf = (k, k)
        std = 0.0
        if "st_dephasing_per_s" in rel:
            std = _number(ctx, rel["st_dephasing_per_s"], "relaxation.st_dephasing_per_s", minimum=0.0,
                          what="a rate in s^-1", limit="rate_per_s")
        relaxation = Relaxation(random_field=rf, st_dephasing=std)

    return SpinSystem(
        name=name,
        radicals=(rad_a, rad_b),
        exchange_mT=exchange,
        dipolar_mT=dipolar,
        k_singlet=k_s,
        k_triplet=k_t,
        relaxation=relaxation,
        initial_state=initial,
        reported_yield=reported,
        source=src,
        document=doc,
    )


def loads_system(text: str, source: str | Path | None = None) -> SpinSystem:
    """Parse TOML text into a :class:`SpinSystem`.

    Parameters
    ----------
    text : str
        The TOML document (schema in the module docstring).
    source : str or Path, optional
        Name used in error messages and stored as ``SpinSystem.source``.

    Returns
    -------
    SpinSystem

    Raises
    ------
    InputError
        When the text is not TOML or any value is wrong.
    """
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"TOML syntax error: {exc}", source=source) from None
    except RecursionError:
        raise InputError("arrays or tables nested too deeply; expected a spin-system TOML file",
                         source=source) from None
    return system_from_document(doc, source)


def read_text_capped(path: Path, max_bytes: int) -> bytes:
    """The bytes of a regular file of at most ``max_bytes``.

    A device such as /dev/zero, a FIFO or a larger file is refused before it is read into memory.

    Parameters
    ----------
    path : Path
        The file.
    max_bytes : int
        Largest size accepted.

    Returns
    -------
    bytes

    Raises
    ------
    InputError
        When the path is neither a regular file nor a folder (a device, a FIFO), or the file is
        too large.
    OSError
        From ``stat`` or ``open`` (a missing or unreadable file; a folder): the caller words it.
    """
    import stat

    st = path.stat()
    if not stat.S_ISREG(st.st_mode) and not stat.S_ISDIR(st.st_mode):
        raise InputError("not a regular file; expected a TOML text file", source=path)
    with path.open("rb") as fh:
        data = fh.read(max_bytes + 1)
    if len(data) > max_bytes:
        raise InputError(f"larger than {max_bytes // 1024} KiB; expected a TOML text file", source=path)
    return data


def load_system(path: str | Path) -> SpinSystem:
    """Read and validate a spin-system TOML file.

    Parameters
    ----------
    path : str or Path
        The file (schema in the module docstring).

    Returns
    -------
    SpinSystem
        With ``source`` set to the file name.

    Raises
    ------
    InputError
        When the file is missing or unreadable, is not TOML, or any value is wrong.
    """
    path = Path(path)
    try:
        text = read_text_capped(path, MAX_FILE_BYTES).decode("utf-8-sig")  # a byte-order mark is not TOML
    except InputError:
        raise
    except FileNotFoundError:
        raise InputError("file not found; expected a spin-system TOML file", source=path) from None
    except IsADirectoryError:
        raise InputError("is a folder; expected a spin-system TOML file", source=path) from None
    except UnicodeDecodeError as exc:
        raise InputError(f"not UTF-8 text (byte {exc.start}); expected a TOML file", source=path) from None
    except OSError as exc:
        raise InputError(f"cannot read: {exc.strerror}", source=path) from None
    return loads_system(text, source=path)


# ----------------------------------------------------------------------------- writing


def _mat(a: np.ndarray) -> list[list[float]]:
    return [[float(x) for x in row] for row in np.asarray(a)]


def canonical_document(system: SpinSystem) -> dict:
    """The canonical document of a system: explicit tensors and rates, no optional forms.

    Loading it back gives a system equal to ``system`` (see :func:`systems_equal`).

    Parameters
    ----------
    system : SpinSystem
        The pair.

    Returns
    -------
    dict
        A TOML-serialisable document in the units of the file format (mT, s^-1).
    """
    doc: dict[str, Any] = {
        "pair": {
            "name": system.name,
            "initial_state": system.initial_state,
            "reported_yield": system.reported_yield,
        }
    }
    for key, rad in zip(("radical_a", "radical_b"), system.radicals):
        table: dict[str, Any] = {"label": rad.label}
        if rad.g_tensor is not None:
            table["g_tensor"] = _mat(rad.g_tensor)
        else:
            table["g"] = float(rad.g)
        table["nuclei"] = [
            {"label": n.label, "spin": float(n.spin), "hyperfine_mT": _mat(n.hyperfine_mT)} for n in rad.nuclei
        ]
        doc[key] = table
    coupling: dict[str, Any] = {"exchange_mT": float(system.exchange_mT)}
    if system.dipolar_mT is not None:
        coupling["dipolar_mT"] = _mat(system.dipolar_mT)
    doc["coupling"] = coupling
    doc["kinetics"] = {"k_singlet_per_s": float(system.k_singlet), "k_triplet_per_s": float(system.k_triplet)}
    rel = system.relaxation
    doc["relaxation"] = {
        "random_field_per_s": [float(rel.random_field[0]), float(rel.random_field[1])],
        "st_dephasing_per_s": float(rel.st_dephasing),
    }
    return doc


def dump_system(system: SpinSystem) -> str:
    """The canonical TOML text of a system (floats written exactly, so it loads back equal).

    Parameters
    ----------
    system : SpinSystem
        The pair.

    Returns
    -------
    str
        TOML text of :func:`canonical_document`.
    """
    import tomli_w

    return tomli_w.dumps(canonical_document(system))


def systems_equal(a: SpinSystem, b: SpinSystem) -> bool:
    """Physical equality of two systems: every field except ``source`` and ``document``, arrays exactly.

    (``SpinSystem.__eq__`` from the dataclass cannot compare the ndarray fields.)

    Parameters
    ----------
    a, b : SpinSystem
        The systems to compare.

    Returns
    -------
    bool
    """
    def arr_eq(x, y) -> bool:
        if x is None or y is None:
            return x is None and y is None
        return bool(np.array_equal(np.asarray(x), np.asarray(y)))

    if (a.name, a.exchange_mT, a.k_singlet, a.k_triplet, a.initial_state, a.reported_yield, a.relaxation) != (
        b.name, b.exchange_mT, b.k_singlet, b.k_triplet, b.initial_state, b.reported_yield, b.relaxation
    ):
        return False
    if not arr_eq(a.dipolar_mT, b.dipolar_mT):
        return False
    for ra, rb in zip(a.radicals, b.radicals):
        if (ra.label, ra.g, len(ra.nuclei)) != (rb.label, rb.g, len(rb.nuclei)) or not arr_eq(ra.g_tensor, rb.g_tensor):
            return False
        for na, nb in zip(ra.nuclei, rb.nuclei):
            if (na.label, na.spin) != (nb.label, nb.spin) or not arr_eq(na.hyperfine_mT, nb.hyperfine_mT):
                return False
    return True
