"""The core never imports Qt or vispy (DEVELOPERS.md, "Layers"); importing it stays light."""

import subprocess
import sys
import pkgutil

import retina


def test_core_imports_no_gui_toolkit():
    # Common practice, no source: a numerical core must run headless, without a display stack.
    names = [m.name for m in pkgutil.walk_packages(retina.__path__, "retina.")]
    code = (
        "import importlib, sys\n"
        f"for n in {names!r}:\n"
        "    importlib.import_module(n)\n"
        "bad = sorted(m for m in sys.modules if m.split('.')[0] in ('PyQt6', 'PyQt5', 'PySide6', 'vispy'))\n"
        "print(','.join(bad))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert out.returncode == 0, f"a core module failed to import:\n{out.stderr[-2000:]}"
    assert out.stdout.strip() == "", f"retina/ pulled in GUI modules: {out.stdout.strip()}"
