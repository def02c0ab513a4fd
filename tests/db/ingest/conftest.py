"""Helpers of the ingest tests: small variants of the demo site, a simulated plant.

The variants keep only the demo's west ladder (15 tags) and change the ``[ingest]`` section, so
a simulated day runs in seconds. Every database test uses ``db_engine`` from
``tests/db/conftest.py`` (SQLite and PostgreSQL).
"""
from __future__ import annotations

import copy
import tomllib
from datetime import UTC, datetime

import pytest

from ops_logic.site import Site, demo_site_path, parse_site

START = datetime(2026, 6, 1, tzinfo=UTC)
"""Plant start of the simulated runs (a June day: inside the summer climatology)."""


def west_site(*, poll_seconds: float = 60.0, recommend_seconds: float = 600.0,
              feeds: list[dict] | None = None, keep_raw_days: float = 400.0) -> Site:
    """The demo site with only its west ladder and the given ``[ingest]`` settings."""
    data = tomllib.loads(demo_site_path().read_text(encoding="utf-8"))
    data = copy.deepcopy(data)
    data["fishways"] = [f for f in data["fishways"] if f["id"] == "west"]
    data["ingest"] = {"poll_seconds": poll_seconds, "recommend_seconds": recommend_seconds,
                      "keep_raw_days": keep_raw_days}
    if feeds is not None:
        data["ingest"]["feeds"] = feeds
    return parse_site(data, "<west test site>")


@pytest.fixture
def site60() -> Site:
    """West ladder, polled every 60 s, recommendations every 600 s."""
    return west_site()
