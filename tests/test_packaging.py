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


def test_bundled_files_are_byte_identical_to_assets():
    # assets/ is the source; retina/data/ holds the copies shipped in the wheel.
    from retina.data import BUNDLED, bundled_path

    for name in BUNDLED:
        assert bundled_path(name).read_bytes() == (ROOT / "assets" / name).read_bytes(), \
            f"retina/data/{name} differs from assets/{name}: copy assets/{name} over it"
    listed = {p.name for p in (ROOT / "retina" / "data").glob("*.toml")}
    assert listed == set(BUNDLED)


def test_bundled_demo_scenario_loads_with_its_pair():
    from retina.data import demo_scenario_path
    from retina.scenario import load_scenario

    sc = load_scenario(demo_scenario_path())
    kind, path = sc.yield_source
    assert kind == "system" and path.is_file() and path.parent == demo_scenario_path().parent


def test_unknown_bundled_name_is_an_input_error():
    import pytest

    from retina.data import bundled_path
    from retina.errors import InputError

    with pytest.raises(InputError, match="expected one of"):
        bundled_path("nothing.toml")


def test_developers_module_map_matches_the_tree_one_to_one():
    # DEVELOPERS.md, "Architecture map": one row per Python file of retina/ and gui/.
    import re

    text = (ROOT / "DEVELOPERS.md").read_text()
    section = text[text.index("## Architecture map"):text.index("## Conventions")]
    listed = re.findall(r"^\| `([^`]+\.py)` \|", section, flags=re.M)
    tree = sorted(str(p.relative_to(ROOT)) for d in ("retina", "gui") for p in (ROOT / d).rglob("*.py"))
    dup = sorted({p for p in listed if listed.count(p) > 1})
    assert not dup, f"listed twice in DEVELOPERS.md: {dup}"
    assert sorted(listed) == tree, (f"DEVELOPERS.md module map: missing {sorted(set(tree) - set(listed))}, "
                                    f"not in the tree {sorted(set(listed) - set(tree))}")
