"""Packaging: the wheel's package list matches the source tree, and the viewer installs under its
own import name (common practice, no source: a distribution must ship every subpackage and must not
claim a generic top-level name such as ``gui``)."""

import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def _pyproject():
    return tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]


def test_every_package_folder_is_listed_for_the_wheel():
    st = _pyproject()
    tree = {".".join(p.parent.relative_to(ROOT).parts) for p in (ROOT / "retina").rglob("__init__.py")}
    listed = {p for p in st["packages"] if p.startswith("retina.") or p == "retina"}
    assert listed == tree, f"pyproject.toml [tool.setuptools] packages differ from the tree: " \
                           f"missing {sorted(tree - listed)}, extra {sorted(listed - tree)}"


def test_viewer_folder_is_installed_as_retina_viewer():
    st = _pyproject()
    assert st["package-dir"] == {"retina_viewer": "gui"}
    assert "retina_viewer" in st["packages"] and "gui" not in st["packages"]
    import retina_viewer

    assert Path(retina_viewer.__file__).resolve().parent == ROOT / "gui"
