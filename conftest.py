"""Doctests: the examples in the package's docstrings and in README.md.

They name model files as ``models/...``, so each runs from the repository root.
"""

from pathlib import Path

import pytest
from _pytest.doctest import DoctestItem

ROOT = Path(__file__).resolve().parent

# running crn/__main__.py is running the command line
collect_ignore = ["crn/__main__.py"]


@pytest.fixture(autouse=True)
def _examples_run_from_the_repository_root(request, monkeypatch):
    if isinstance(request.node, DoctestItem):
        monkeypatch.chdir(ROOT)
