"""Sphinx configuration of broodline's documentation.

Build: ``sphinx-build -W -b html docs docs/_build/html`` (offline; warnings are
errors, so a broken cross-reference fails). The reference tables (config keys,
commands, JSON keys) are generated from the code by ``_ext/broodline_docs.py``;
the figures are made by ``make_figures.py`` and committed in ``images/``.
"""

import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))  # the worktree's sim and analysis, installed or not
sys.path.insert(0, str(HERE / "_ext"))

import tomllib  # noqa: E402

project = "broodline"
author = "the broodline developers"
copyright = "the broodline developers"
release = version = tomllib.loads((HERE.parent / "pyproject.toml").read_text())["project"]["version"]

extensions = [
    "myst_parser",
    "sphinx.ext.autodoc",
    "sphinx.ext.mathjax",
    "numpydoc",
    "broodline_docs",
]
source_suffix = {".md": "markdown", ".rst": "restructuredtext"}
exclude_patterns = ["_build", "_ext", "README.md"]
myst_enable_extensions = ["dollarmath"]
myst_heading_anchors = 3

autodoc_default_options = {"members": False}
autodoc_typehints = "none"  # numpydoc's Parameters sections carry the types
numpydoc_show_class_members = False
numpydoc_class_members_toctree = False

html_theme = "alabaster"
html_static_path = []
html_title = f"broodline {release}"
# the build never fetches anything: mathjax is linked, not downloaded, and no intersphinx
