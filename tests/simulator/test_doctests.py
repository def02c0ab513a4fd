"""Run the doctests of the simulator package (pyproject's testpaths do not include it)."""
from __future__ import annotations

import doctest
import importlib

import pytest

MODULES = ["simulator.noise", "simulator.scenario", "simulator.environment",
           "simulator.actuators", "simulator.faults", "simulator.plant", "simulator.history",
           "simulator.feed", "simulator.opcua_server", "simulator.link", "simulator.steady"]


@pytest.mark.parametrize("name", MODULES)
def test_doctests(name):
    module = importlib.import_module(name)
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    assert result.attempted > 0, f"{name} has no doctest examples"
    assert result.failed == 0
