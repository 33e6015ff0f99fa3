"""numpydoc docstrings (DEVELOPERS.md, "Conventions"): every public function of the core's modules,
and every public method of their public classes, documents its parameters and what it returns.
Checked with numpydoc's own validator (common practice, no source).  Every module of ``retina/`` is
listed (a test checks); the methods of a few modules other work is changing wait in
:data:`METHODS_NOT_YET`.  The viewer's modules (``gui/``, imported as ``retina_viewer``) are checked
the same way (:data:`GUI_CHECKED`): importing them needs PyQt6 and vispy but no display (no Qt
application is made), so these tests skip, with the reason, where the viewer extra is missing, and
fail in CI, which installs it (as tests/test_gui.py does)."""

import importlib
import importlib.util
import inspect
import os
from pathlib import Path

import pytest
from numpydoc.validate import validate

import retina

CHECKED = ["retina.pipeline", "retina.build", "retina.stages", "retina.stages._common", "retina.stages.patterns",
           "retina.stages.scan", "retina.stages.precision", "retina.stages.disorder", "retina.stages.trials",
           "retina.results", "retina.outputs", "retina.outputs.figures", "retina.outputs.text",
           "retina.outputs.report", "retina.progress", "retina.data", "retina.commands._common",
           "retina.spin.memory", "retina.sweep.schema", "retina.sweep.points", "retina.sweep.outputs", "retina.sweep.run",
           "retina.sweep.store", "retina.sweep.figures", "retina.outputs.export", "retina.sphere.harmonics",
           "retina.sphere.grids", "retina.sphere.rotation", "retina.sphere.zonal",
           "retina.readout.circstats", "retina.readout.fisher", "retina.spin.operators", "retina.spin._rf_common",
           "retina.spin.rf_method", "retina.spin.rf_yieldfn", "retina.eye.order_samplers", "retina.eye.order_cases",
           "retina.eye.order_laws", "retina.eye.order_rules", "retina.eye.field", "retina.eye.geometry",
           "retina.eye.pose", "retina.eye.pattern", "retina.readout.scans", "retina.signal.noise", "retina.signal.poisson",
           "retina.spin.io.reader", "retina.spin.io.writer", "retina.spin.io.tensors",
           "retina.spin.io.values", "retina.spin.io.keys", "retina.spin.hilbert", "retina.spin.liouville",
           "retina.spin.separable",
           "retina.spin.broadband", "retina.io.atomic", "retina.io.hdf5", "retina.io.importers",
           "retina.io.schema", "retina.readout.decode", "retina.readout.trials", "retina.scenario", "retina.keytable",
           "retina.signal.light", "retina.spin.rf_floquet", "retina.spin.system", "retina.stages.memory",
           "retina.yieldfn", "retina.cache", "retina.figures._base", "retina.figures.curves",
           "retina.figures.sphere_maps", "retina.figures.trials", "retina.figures.visual_fields", "retina.cli",
           "retina.commands._types", "retina.commands._spin_args", "retina.commands.yields",
           "retina.commands.patterns", "retina.commands.scan", "retina.commands.precision", "retina.commands.trials",
           "retina.commands.report", "retina.commands.demo", "retina.commands.sweep", "retina.commands.export",
           "retina.commands.rf", "retina.commands.view", "retina.figures.marks", "retina.figures.order",
           "retina.spin.rf_separable", "retina.stages.order", "retina.sweep", "retina.spin.engine",
           "retina.spin.equivalence", "retina.spin.fast_separable", "retina.spin.sampling", "retina.spin.sampling_cost", "retina.spin.sampling_result",
           "retina.spin.sampling_states",
           "retina.spin._spectral", "retina.spin._propagation", "retina.spin._random_states", "retina.spin._fused", "retina.stages.rf", "retina.stages.rf_sweep", "retina.figures.rf",
           "retina", "retina.__main__", "retina.errors", "retina.commands", "retina.eye", "retina.eye.ordering",
           "retina.figures", "retina.io", "retina.readout", "retina.signal", "retina.sphere", "retina.spin",
           "retina.spin.io", "retina.spin.rf"]

METHODS_NOT_YET: list[str] = []
"""Checked modules whose public class methods are not checked yet (none now; a module being
reworked may wait here for its methods' sections)."""


GUI_CHECKED = ["retina_viewer", "retina_viewer.__main__", "retina_viewer.canvas", "retina_viewer.deferred",
               "retina_viewer.display", "retina_viewer.glyphs", "retina_viewer.panels",
               "retina_viewer.screenshots", "retina_viewer.state", "retina_viewer.views",
               "retina_viewer.window", "retina_viewer.workers"]
"""The viewer's modules (every ``gui/*.py``; a test checks)."""

GUI_DIR = Path(__file__).resolve().parent.parent / "gui"


def _need_viewer():
    """Skip without PyQt6 or vispy on a developer machine; fail in CI, which installs them."""
    if importlib.util.find_spec("PyQt6") is None or importlib.util.find_spec("vispy") is None:
        reason = "PyQt6 or vispy not installed (pip install 'retina-compass[viewer]')"
        if os.environ.get("CI", "").lower() == "true":
            pytest.fail(f"the viewer's docstrings cannot be checked in CI: {reason}")
        pytest.skip(reason)


def _public_functions(name):
    mod = importlib.import_module(name)
    for attr, obj in vars(mod).items():
        if not attr.startswith("_") and inspect.isfunction(obj) and obj.__module__ == name:
            yield f"{name}.{attr}"


def _public_methods(cls):
    """Names of the public methods defined in the body of ``cls`` (plain, static and class methods).

    Properties, inherited methods and callables stored as attributes (a dataclass field whose default
    is a lambda) are not methods of the class and are skipped."""
    for attr, obj in vars(cls).items():
        if attr.startswith("_"):
            continue
        func = obj.__func__ if isinstance(obj, (staticmethod, classmethod)) else obj
        if inspect.isfunction(func) and func.__qualname__ == f"{cls.__qualname__}.{attr}":
            yield attr


def _documented_by(cls, attr):
    """The dotted name whose docstring documents method ``attr`` of ``cls``.

    An override without a docstring of its own is documented by the nearest base class's method that
    has one, as the API docs show it (Sphinx's ``autodoc_inherit_docstrings``, on by default), provided
    it takes the same parameters; otherwise the method itself is validated (GL08)."""
    own = vars(cls)[attr]
    own = own.__func__ if isinstance(own, (staticmethod, classmethod)) else own
    if own.__doc__:
        return f"{cls.__module__}.{cls.__qualname__}.{attr}"
    for base in cls.__mro__[1:]:
        doc_obj = vars(base).get(attr)
        doc_obj = doc_obj.__func__ if isinstance(doc_obj, (staticmethod, classmethod)) else doc_obj
        if inspect.isfunction(doc_obj) and doc_obj.__doc__:
            if list(inspect.signature(doc_obj).parameters) == list(inspect.signature(own).parameters):
                return f"{base.__module__}.{base.__qualname__}.{attr}"
            break
    return f"{cls.__module__}.{cls.__qualname__}.{attr}"


def _public_class_methods(name):
    mod = importlib.import_module(name)
    for attr, obj in vars(mod).items():
        if not attr.startswith("_") and inspect.isclass(obj) and obj.__module__ == name:
            for method in _public_methods(obj):
                yield _documented_by(obj, method)


def _missing_sections(names):
    bad = {}
    for qual in names:
        codes = [code for code, _ in validate(qual)["errors"] if code in ("GL08", "PR01", "RT01")]
        if codes:
            bad[qual] = codes
    return bad


def test_every_core_module_is_checked():
    root = Path(retina.__file__).parent
    names = set()
    for path in root.rglob("*.py"):
        parts = path.relative_to(root.parent).with_suffix("").parts
        names.add(".".join(parts[:-1] if parts[-1] == "__init__" else parts))
    missing = sorted(names - set(CHECKED))
    assert not missing, f"add these modules to CHECKED in tests/test_docstrings.py (with their docstrings): {missing}"
    assert len(CHECKED) == len(set(CHECKED))
    assert set(METHODS_NOT_YET) <= set(CHECKED)


@pytest.mark.parametrize("name", CHECKED)
def test_public_functions_document_parameters_and_returns(name):
    bad = _missing_sections(_public_functions(name))
    assert not bad, f"missing docstring sections (GL08 none, PR01 parameters, RT01 returns): {bad}"


@pytest.mark.parametrize("name", [n for n in CHECKED if n not in METHODS_NOT_YET])
def test_public_methods_document_parameters_and_returns(name):
    bad = _missing_sections(_public_class_methods(name))
    assert not bad, f"missing docstring sections (GL08 none, PR01 parameters, RT01 returns): {bad}"


def test_every_viewer_module_is_checked():
    names = {"retina_viewer" if p.stem == "__init__" else f"retina_viewer.{p.stem}"
             for p in GUI_DIR.glob("*.py")}
    missing = sorted(names - set(GUI_CHECKED))
    assert not missing, ("add these modules to GUI_CHECKED in tests/test_docstrings.py (with their "
                         f"docstrings): {missing}")
    assert len(GUI_CHECKED) == len(set(GUI_CHECKED))


@pytest.mark.parametrize("name", GUI_CHECKED)
def test_viewer_functions_and_methods_document_parameters_and_returns(name):
    _need_viewer()
    mod = importlib.import_module(name)
    where = Path(mod.__file__).resolve().parent
    assert where == GUI_DIR, f"{name} is imported from {where}, not this tree's gui/ (pip install -e .)"
    bad = _missing_sections(list(_public_functions(name)) + list(_public_class_methods(name)))
    assert not bad, f"missing docstring sections (GL08 none, PR01 parameters, RT01 returns): {bad}"


class ExampleBase:
    """For the checker's own test below."""

    def run(self, x):
        """A documented method.

        Parameters
        ----------
        x : float
            A number.

        Returns
        -------
        float
            ``x``.
        """
        return x


class ExampleInherits(ExampleBase):
    """Overrides ``run`` with the same parameters and no docstring: documented by the base's."""

    def run(self, x):
        return 2 * x


class ExampleDiffers(ExampleBase):
    """Overrides ``run`` with other parameters and no docstring: undocumented."""

    def run(self, x, y):
        return x + y


class ExampleBare:
    """A method with a summary line only."""

    def run(self, x):
        """No sections."""
        return x

    @property
    def size(self):
        return 1


def test_method_check_flags_methods_without_sections():
    # the checker itself: it must see a method lacking sections, an override whose parameters differ
    # from the documented base method, and accept an override documented by its base (common
    # practice, no source: what Sphinx autodoc renders with autodoc_inherit_docstrings)
    bad = _missing_sections(_public_class_methods(__name__))
    assert bad == {f"{__name__}.ExampleDiffers.run": ["GL08"], f"{__name__}.ExampleBare.run": ["PR01", "RT01"]}
