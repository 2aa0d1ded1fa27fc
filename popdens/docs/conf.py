"""Sphinx configuration of the popdens documentation site.

Build (from the repository root, with the ``docs`` extra installed)::

    python -m sphinx -W --keep-going -b html popdens/docs build/docs

The API pages are written from the numpydoc docstrings; the gallery scripts in ``examples/`` are
run during the build and their figures shown beside their code.  Generated files go to
``generated/`` (not tracked).
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
# the source tree being documented comes first on the path (not a previously installed copy)
sys.path.insert(0, str(ROOT))
# examples draw with the non-interactive backend
os.environ.setdefault("MPLBACKEND", "Agg")

import popdens  # noqa: E402

project = "popdens"
author = "the popdens developers"
copyright = "the popdens developers"
version = release = popdens.__version__

extensions = [
    "sphinx.ext.autodoc",
    "sphinx.ext.mathjax",
    "numpydoc",
    "sphinx_gallery.gen_gallery",
]

exclude_patterns = ["_build", "examples"]
templates_path: list[str] = []
root_doc = "index"
language = "en"
nitpicky = False

# --- autodoc / numpydoc --------------------------------------------------------------------------
autodoc_default_options = {"members": True, "member-order": "bysource"}
autodoc_typehints = "none"          # the numpydoc "Parameters" sections carry types and units
autoclass_content = "class"
numpydoc_show_class_members = False
numpydoc_show_inherited_class_members = False
numpydoc_class_members_toctree = False
numpydoc_attributes_as_param_list = True
numpydoc_xref_param_type = False
# numpydoc checks run on every documented object during the build; with ``-W`` a failure stops it.
# Chosen to catch docstrings that render wrongly or mislead (not to demand every optional section):
#   GL03 double blank lines, GL05/GL06 bad or unknown section headers, GL07 sections out of order,
#   GL09 deprecation warning misplaced, GL10 a bad reST directive;
#   PR02 a documented parameter the signature lacks, PR03 parameters out of order, PR04 no type,
#   PR05/PR06 type spellings, PR07 no description, PR09 description without a full stop,
#   PR10 "x:y" instead of "x : y";
#   RT02 a Returns line that is not a type, RT03 no return description, RT04/RT05 capital and full stop;
#   SS02/SS03 summary capital and full stop, YD01 generators without Yields.
numpydoc_validation_checks = {"GL03", "GL05", "GL06", "GL07", "GL09", "GL10",
                              "PR02", "PR03", "PR04", "PR05", "PR06", "PR07", "PR09", "PR10",
                              "RT02", "RT03", "RT04", "RT05", "SS02", "SS03", "YD01"}

# --- gallery ----------------------------------------------------------------------------------------
sphinx_gallery_conf = {
    "examples_dirs": ["examples"],
    "gallery_dirs": ["generated/gallery"],
    "filename_pattern": r"/plot_",
    "download_all_examples": False,
    "remove_config_comments": True,
    "within_subsection_order": "FileNameSortKey",
    "matplotlib_animations": False,
    "show_memory": False,
    "min_reported_time": 1,
    "abort_on_example_error": True,
    "plot_gallery": "True",
    "reset_modules": ("matplotlib",),
    # show printed output only, not the repr of a block's last expression (e.g. a Legend object)
    "capture_repr": (),
}

# --- HTML ----------------------------------------------------------------------------------------------
html_theme = "alabaster"
html_title = f"popdens {release}"
html_static_path: list[str] = []
html_show_sourcelink = False
html_theme_options = {"description": "population-density predictions for noisy spiking neurons",
                      "page_width": "1100px", "sidebar_width": "240px"}
