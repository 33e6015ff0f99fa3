"""Sphinx configuration of the retina-compass API documentation.

Build: ``python -m sphinx -W --keep-going -b html docs docs/_build/html`` (warnings are errors; CI
runs it after the tests, see .ci/run).  The gallery runs the scripts in ``docs/examples/``; the
package's figures are plain ``matplotlib.figure.Figure`` objects that never touch pyplot, so a
small scraper below collects them from each example's variables.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
os.environ.setdefault("MPLBACKEND", "Agg")

import retina  # noqa: E402

project = "retina-compass"
author = "the retina-compass developers"
copyright = "2026, the retina-compass developers"
release = version = retina.__version__

extensions = [
    "sphinx.ext.autodoc",
    "sphinx.ext.mathjax",
    "sphinx.ext.viewcode",
    "numpydoc",
    "sphinx_gallery.gen_gallery",
]

exclude_patterns = ["_build", "examples"]
html_theme = "alabaster"
html_static_path: list[str] = []
autodoc_default_options = {"members": True, "show-inheritance": False}
autodoc_member_order = "bysource"
numpydoc_show_class_members = False
numpydoc_class_members_toctree = False
numpydoc_validation_checks: set[str] = set()
# the gallery configuration holds the scraper function, which Sphinx cannot pickle into its cache
suppress_warnings = ["config.cache"]


def _retina_figures(block, block_vars, gallery_conf):
    """Image scraper: save every new ``matplotlib.figure.Figure`` an example block left in its
    variables (the package never registers figures with pyplot)."""
    from matplotlib.figure import Figure
    from sphinx_gallery.scrapers import figure_rst

    seen = _SEEN.setdefault(block_vars["src_file"], set())
    paths = []
    for obj in list(block_vars["example_globals"].values()):
        if isinstance(obj, Figure) and id(obj) not in seen:
            seen.add(id(obj))
            path = next(block_vars["image_path_iterator"])
            obj.savefig(path, dpi=90)
            paths.append(path)
    return figure_rst(paths, gallery_conf["src_dir"])


_SEEN: dict = {}

sphinx_gallery_conf = {
    "examples_dirs": "examples",
    "gallery_dirs": "gallery",
    "filename_pattern": r"/plot_",
    "image_scrapers": (_retina_figures,),
    "download_all_examples": False,
    "remove_config_comments": True,
    "within_subsection_order": "FileNameSortKey",
}
