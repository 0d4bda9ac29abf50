"""Sphinx configuration of the netprobe documentation (``make docs``)."""

import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE / "_ext"))
sys.path.insert(0, str(HERE.parent))

import netprobe  # noqa: E402

project = "netprobe"
author = "the netprobe developers"
copyright = "the netprobe developers"
version = release = netprobe.__version__

extensions = [
    "sphinx.ext.autodoc",
    "sphinx.ext.mathjax",
    "numpydoc",
    "netprobe_reference",
]

exclude_patterns = ["_build"]
html_theme = "alabaster"
html_static_path = []
# HTML for reading on a machine without network access: no external math renderer is fetched by tests.

autodoc_member_order = "bysource"
autodoc_typehints = "none"  # numpydoc sections carry the types
autodoc_default_options = {"exclude-members": "__init__"}
numpydoc_show_class_members = False
numpydoc_show_inherited_class_members = False
numpydoc_class_members_toctree = False
numpydoc_attributes_as_param_list = True
numpydoc_xref_param_type = False
numpydoc_validation_checks = set()
suppress_warnings = []
