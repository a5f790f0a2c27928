"""MkDocs hook: add the example notebooks (kept in notebooks/, outside docs/) to the site.

The notebooks are written by notebooks/_build.py and committed without outputs; mkdocs-jupyter
executes them while the site is built (``execute: true`` in mkdocs.yml), so the site shows the
figures of the code as it is.  This hook runs before mkdocs-jupyter's own file scan.
"""

from __future__ import annotations

import glob
import os

from mkdocs.plugins import event_priority
from mkdocs.structure.files import File, Files

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


@event_priority(100)
def on_files(files: Files, config) -> Files:
    for path in sorted(glob.glob(os.path.join(ROOT, "notebooks", "*.ipynb"))):
        rel = os.path.relpath(path, ROOT).replace(os.sep, "/")
        files.append(
            File(rel, src_dir=ROOT, dest_dir=config["site_dir"], use_directory_urls=config["use_directory_urls"])
        )
    return files
