"""The spin-system file's key tables and physical ranges (the reference is :mod:`retina.spin.io`).

The names of the keys each table accepts, the accepted physical range of each kind of value
(:data:`LIMITS`, in the file's units: mT, s^-1, us, nm, degrees) and the size caps.
"""

from __future__ import annotations

import scipy.constants as sc

__all__ = ["FREE_ELECTRON_G", "LIMITS", "MAX_NUCLEI", "MAX_NAME_CHARS", "MAX_FILE_BYTES"]

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
