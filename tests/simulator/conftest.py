"""Shared fixtures of the simulator tests: the demo site, a start time, a calm scenario."""
from __future__ import annotations

from datetime import UTC, datetime

import pytest

from ops_logic.site import load_site
from simulator.scenario import Scenario


@pytest.fixture(scope="session")
def site():
    return load_site(None)


@pytest.fixture
def start():
    """A spring start at local midnight of the demo site (UTC-8)."""
    return datetime(2026, 5, 1, 8, 0, tzinfo=UTC)


@pytest.fixture
def calm():
    """The base plant without unscheduled forebay drops."""
    return Scenario(random_forebay_drops_per_day=0.0)
