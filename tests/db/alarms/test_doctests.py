"""Run the doctests of the alarm modules of db/ (pyproject's testpaths do not include db/)."""
from __future__ import annotations

import doctest
import importlib

import pytest

MODULES = ["db.alarm.store", "db.alarm.inputs", "db.alarm.history", "db.notify",
           "db.alarm_cli"]


@pytest.mark.parametrize("name", MODULES)
def test_doctests(name):
    module = importlib.import_module(name)
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    assert result.attempted > 0, f"{name} has no doctest examples"
    assert result.failed == 0
