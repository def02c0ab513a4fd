"""Run the doctests of the db package (pyproject's testpaths do not include db/)."""
from __future__ import annotations

import doctest
import importlib

import pytest

MODULES = ["db.engine", "db.types", "db.arrays", "db.migrate", "db.partitions", "db.readings",
           "db.rollups", "db.trends", "db.retention", "db.catalog", "db.history", "db.alarms",
           "db.feed_health", "db.status.model", "db.status.judge", "db.status.store",
           "db.in_force"]


@pytest.mark.parametrize("name", MODULES)
def test_doctests(name):
    module = importlib.import_module(name)
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    assert result.attempted > 0, f"{name} has no doctest examples"
    assert result.failed == 0
