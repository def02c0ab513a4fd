"""Run the doctests of the db.ingest package (pyproject's testpaths do not include db/)."""
from __future__ import annotations

import doctest
import importlib

import pytest

MODULES = ["db.ingest.live_qc", "db.ingest.qc_config", "db.ingest.schedule", "db.ingest.store",
           "db.ingest.upkeep"]


@pytest.mark.parametrize("name", MODULES)
def test_doctests(name):
    module = importlib.import_module(name)
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    assert result.attempted > 0, f"{name} has no doctest examples"
    assert result.failed == 0
