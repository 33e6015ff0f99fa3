"""The re-exporting fronts (DEVELOPERS.md, "Architecture map"): ``retina.sphere`` and
``retina.spin.io`` were split into packages by job, and each front keeps every public name it had
as one module, as the very object its implementation module defines.  Common practice, no source:
a refactoring must not change a public interface.
"""

import importlib

import pytest

# The public names of the two modules before they were split (their __all__ and the constants
# other modules and tests import), written out so that a lost name fails here.
BEFORE = {
    "retina.sphere": [
        "SphereGrid", "n_coeffs", "degree_from_n", "lm_index", "real_sh", "real_sh_grad", "lebedev",
        "lebedev_orders", "grid_for_degree", "fibonacci", "fit_even", "evaluate", "evaluate_grad", "rotate",
        "funk_hecke", "vmf_moments", "axial_average", "zonal_to_legendre", "normalize", "LEBEDEV_ORDERS",
        "VMF_CLOSED_FORM_FROM",
    ],
    "retina.spin.io": [
        "load_system", "loads_system", "system_from_document", "canonical_document", "dump_system",
        "systems_equal", "point_dipole_mT", "read_text_capped", "FREE_ELECTRON_G", "LIMITS", "MAX_NUCLEI",
        "MAX_NAME_CHARS", "MAX_FILE_BYTES",
    ],
}
PARTS = {
    "retina.sphere": ["harmonics", "grids", "rotation", "zonal"],
    "retina.spin.io": ["keys", "values", "tensors", "reader", "writer"],
}


@pytest.mark.parametrize("front", sorted(BEFORE))
def test_front_keeps_every_public_name(front):
    mod = importlib.import_module(front)
    missing = [n for n in BEFORE[front] if not hasattr(mod, n)]
    assert missing == []
    assert set(mod.__all__) <= set(BEFORE[front])


@pytest.mark.parametrize("front", sorted(PARTS))
def test_front_names_are_the_implementation_objects(front):
    mod = importlib.import_module(front)
    homes = {}
    for part in PARTS[front]:
        sub = importlib.import_module(f"{front}.{part}")
        for name in getattr(sub, "__all__", []):
            assert name not in homes, f"{name} is public in both {homes.get(name)} and {part}"
            homes[name] = part
            assert getattr(mod, name) is getattr(sub, name)
    # every name of the front has exactly one home module
    assert set(BEFORE[front]) <= set(homes)
