"""Writing a spin system back: the canonical document and TOML text, and physical equality.

The canonical form has full 3x3 tensors and explicit rates; :func:`retina.spin.io.reader.loads_system`
reads it back to an equal system (:func:`systems_equal`).  Its text is what provenance records and
the cache hashes.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from retina.spin.system import SpinSystem

__all__ = ["canonical_document", "dump_system", "systems_equal"]


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
