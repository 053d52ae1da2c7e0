"""Sphinx configuration of massfit's documentation site.

Build: ``pip install ".[docs]"`` then ``python -m sphinx -W -b html docs docs/_build/html``
(``.ci/run`` does this as its third step). The tutorials are the notebooks of
``notebooks/``, copied into ``docs/tutorials/`` and executed during the build.
"""

import os
import shutil
import sys
from pathlib import Path

DOCS = Path(__file__).resolve().parent
ROOT = DOCS.parent
# The checkout's massfit, also when it is not the installed one.
sys.path.insert(0, str(ROOT))
os.environ["PYTHONPATH"] = os.pathsep.join(
    [str(ROOT)] + [p for p in os.environ.get("PYTHONPATH", "").split(os.pathsep) if p])
os.environ.pop("MPLBACKEND", None)  # the notebook kernels draw inline

import massfit  # noqa: E402

project = "massfit"
author = "massfit developers"
copyright = "massfit developers (BSD 3-Clause)"
release = massfit.__version__
version = release

extensions = [
    "myst_nb",
    "sphinx.ext.autodoc",
    "sphinx.ext.napoleon",
    "sphinx.ext.mathjax",
    "sphinx.ext.viewcode",
]
exclude_patterns = ["_build", "Thumbs.db", ".DS_Store", "**.ipynb_checkpoints"]
html_theme = "furo"
html_title = f"massfit {release}"

# MyST: $...$ maths, ::: fences, anchors on headings for cross-page links.
myst_enable_extensions = ["dollarmath", "colon_fence"]
myst_heading_anchors = 3

# The docstrings are numpydoc style.
napoleon_google_docstring = False
napoleon_numpy_docstring = True
napoleon_use_rtype = False
autodoc_member_order = "bysource"
autodoc_typehints = "description"

# ----------------------------------------------------------------- tutorials
# Each notebook in notebooks/ becomes a tutorial page, executed afresh at every build.
# MASSFIT_DOCS_QUICK=1 runs them with short chains (MASSFIT_NOTEBOOK_QUICK=1, unconverged):
# the pages then say so in their output.
TUTORIALS = DOCS / "tutorials"
for _path in sorted((ROOT / "notebooks").glob("*.ipynb")):
    shutil.copyfile(_path, TUTORIALS / _path.name)
if os.environ.get("MASSFIT_DOCS_QUICK") == "1":
    os.environ["MASSFIT_NOTEBOOK_QUICK"] = "1"
nb_execution_mode = "force"
nb_execution_timeout = 1800
nb_execution_raise_on_error = True  # a notebook that fails fails the build
nb_execution_show_tb = True
nb_merge_streams = True
