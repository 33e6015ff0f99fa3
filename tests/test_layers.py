"""The import contract (DEVELOPERS.md, "Layers"): the core never imports Qt, vispy or pyplot; a lower
layer never imports a higher one; the viewer uses the core only through its public modules.

The contract itself is written for import-linter in pyproject.toml ([tool.importlinter]); these
tests run it, so CI's pytest checks it.  Common practice, no source: a numerical core must run
headless, and a layered package must have no upward imports.
"""

import ast
import pkgutil
import subprocess
import sys
import tomllib
from pathlib import Path

import retina

ROOT = Path(__file__).resolve().parent.parent
LINT = Path(sys.executable).parent / "lint-imports"


def _lint(config: Path):
    return subprocess.run([str(LINT), "--no-cache", "--no-logo", str(config)], capture_output=True, text=True,
                          cwd=ROOT, timeout=300)


def test_core_imports_no_gui_toolkit_and_no_pyplot():
    names = [m.name for m in pkgutil.walk_packages(retina.__path__, "retina.")]
    code = (
        "import importlib, sys\n"
        f"for n in {names!r}:\n"
        "    importlib.import_module(n)\n"
        "bad = sorted(m for m in sys.modules if m.split('.')[0] in ('PyQt6', 'PyQt5', 'PySide6', 'vispy')\n"
        "             or m == 'matplotlib.pyplot')\n"
        "print(','.join(bad))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert out.returncode == 0, f"a core module failed to import:\n{out.stderr[-2000:]}"
    assert out.stdout.strip() == "", f"retina/ pulled in GUI modules or pyplot: {out.stdout.strip()}"


def _imports_pyplot(node) -> bool:
    if isinstance(node, ast.Import):
        return any(a.name == "matplotlib.pyplot" or a.name.startswith("matplotlib.pyplot.") for a in node.names)
    if isinstance(node, ast.ImportFrom):
        mod = node.module or ""
        return mod.startswith("matplotlib.pyplot") or (mod == "matplotlib" and any(a.name == "pyplot"
                                                                                     for a in node.names))
    return False


def test_core_source_never_imports_pyplot():
    # import-linter cannot forbid a submodule of an external package, and a function may import
    # pyplot lazily (never run by the import test above), so every import statement is checked.
    hits = [f"{p.relative_to(ROOT)}:{n.lineno}" for p in (ROOT / "retina").rglob("*.py")
            for n in ast.walk(ast.parse(p.read_text())) if _imports_pyplot(n)]
    assert hits == []
    assert _imports_pyplot(ast.parse("def f():\n    import matplotlib.pyplot as plt\n").body[0].body[0])


def test_import_contract_is_kept():
    out = _lint(ROOT / "pyproject.toml")
    assert out.returncode == 0, out.stdout[-4000:] + out.stderr[-2000:]
    assert "4 kept, 0 broken" in out.stdout


def test_import_contract_would_catch_an_upward_import(tmp_path):
    # The same machinery on a contract that the tree breaks on purpose (the CLI imports errors, so
    # errors placed above cli is an upward import): a broken contract must fail the check.
    cfg = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["importlinter"]
    bad = tmp_path / "bad.toml"
    bad.write_text(
        "[tool.importlinter]\n"
        f"root_packages = {cfg['root_packages']!r}\n".replace("'", '"')
        + "[[tool.importlinter.contracts]]\n"
        'name = "reversed"\ntype = "layers"\nlayers = ["retina.errors", "retina.cli"]\n')
    out = _lint(bad)
    assert out.returncode != 0 and "BROKEN" in out.stdout
