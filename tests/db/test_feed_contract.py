"""The Feed contract (db/feeds/base.py), run the same way against every feed implementation.

Each feed comes with a *harness* that knows how to put values into its source, break the
source and mend it. The checks below use only the harness and the Feed interface.

Adding a feed (the hook for the simulated plant's author): write a harness class with the
attributes and methods of :class:`Harness` and add it to :data:`FEED_HARNESSES` under a
short name; every test here then runs against it. A source that picks its own values (a
simulated plant) returns ``None`` from ``publish`` and the value checks are limited to
finiteness. A feed whose readings must be acknowledged after storage exposes
``commit()`` (the CSV drop folder does); the checks call it when present.

The values published are SI values in the tags' units; the reference is the value the
harness wrote into the source (no published table is involved).
"""
from __future__ import annotations

import importlib.util
import math
import os
import sys
import time
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Protocol

import pytest

from db.feeds.base import Feed, FeedError, FeedReading
from db.feeds.csvdrop import CsvDropFeed
from db.feeds.opcua import Backoff, OpcUaFeed
from ops_logic.tags import TagDef


def _load_opcua_test_module():
    name = "fishway_tests_opcua_feed"
    if name not in sys.modules:
        path = Path(__file__).with_name("test_opcua_feed.py")
        spec = importlib.util.spec_from_file_location(name, path)
        module = importlib.util.module_from_spec(spec)
        sys.modules[name] = module
        spec.loader.exec_module(module)
    return sys.modules[name]


OpcUaTestServer = _load_opcua_test_module().OpcUaTestServer

TAGS = [
    TagDef("c.forebay_level", "c", "water_level", "m", "forebay", "src", "ns=2;i=1000", 10.0),
    TagDef("c.P01.level", "c", "water_level", "m", "pool", "src", "ns=2;i=1001", 10.0,
           pool_id="P01"),
    TagDef("c.water_temp", "c", "temperature", "degC", "water_temp", "src", "ns=2;i=1002", 10.0),
]
UNKNOWN = TagDef("c.ghost", "c", "water_level", "m", "pool", "src", "ns=2;i=4242", 10.0)
RECOVERY_S = 10.0  # longest a feed may take to read again once its source is back


class Harness(Protocol):
    feed: Feed
    tags: list[TagDef]

    def publish(self, values: dict[str, float], ts: datetime) -> dict[str, float] | None:
        """Make the source hold ``values`` (SI) stamped ``ts``; return what to expect."""

    def unknown_case(self) -> tuple[list[TagDef], str]:
        """Set the source up with an item the catalogue does not know or the other way
        round; return the tags to read with and the name that must be reported."""

    def break_source(self) -> None: ...

    def restore_source(self) -> None: ...

    def close(self) -> None: ...


class CsvDropHarness:
    """The drop folder; values arrive as files (written as .tmp, renamed, made old)."""

    def __init__(self, tmp_path: Path, request) -> None:
        self.folder = tmp_path / "drop"
        self.folder.mkdir()
        self.feed = CsvDropFeed("logger", self.folder)
        self.tags = TAGS
        self._n = 0

    def _drop(self, lines: list[str]) -> None:
        self._n += 1
        tmp = self.folder / f"cycle{self._n:04d}.tmp"
        tmp.write_text("time,tag,value\n" + "".join(f"{x}\n" for x in lines), encoding="utf-8")
        final = tmp.with_suffix(".csv")
        os.replace(tmp, final)
        old = time.time() - 10  # settled
        os.utime(final, (old, old))

    def publish(self, values, ts):
        self._drop([f"{ts.isoformat()},{name},{value!r}" for name, value in values.items()])
        return values

    def unknown_case(self):
        self._drop([f"{datetime.now(UTC).isoformat()},{TAGS[0].name},1.0",
                    f"{datetime.now(UTC).isoformat()},{UNKNOWN.name},2.0"])
        return self.tags, UNKNOWN.name

    def break_source(self):
        self.folder.rename(self.folder.with_name("drop.away"))

    def restore_source(self):
        self.folder.with_name("drop.away").rename(self.folder)

    def close(self):
        self.feed.close()


@pytest.fixture(scope="module")
def _opcua_server():
    srv = OpcUaTestServer([1000, 1001, 1002]).start()
    yield srv
    srv.stop()


class OpcUaHarness:
    """An asyncua test server with the tags' nodes; broken by stopping it."""

    def __init__(self, tmp_path: Path, request) -> None:
        self.server = request.getfixturevalue("_opcua_server")
        if self.server._loop is None:  # a previous test left it stopped
            self.server.start()
        self.feed = OpcUaFeed("plc", self.server.endpoint, timeout_s=1.0,
                              backoff=Backoff(0.2, 2.0, 1.0))
        self.tags = TAGS
        self._ids = {t.name: int(t.address.split("i=")[1]) for t in TAGS}

    def publish(self, values, ts):
        self.server.write({self._ids[k]: v for k, v in values.items()}, ts)
        return values

    def unknown_case(self):
        return [*self.tags, UNKNOWN], UNKNOWN.name

    def break_source(self):
        self.server.stop()

    def restore_source(self):
        self.server.start()

    def close(self):
        self.feed.close()


#: Feed implementations under contract test: name → harness class(tmp_path, request).
FEED_HARNESSES: dict[str, type] = {"csvdrop": CsvDropHarness, "opcua": OpcUaHarness}


@pytest.fixture(params=list(FEED_HARNESSES))
def harness(request, tmp_path):
    h = FEED_HARNESSES[request.param](tmp_path, request)
    yield h
    h.close()


def _acknowledge(feed: Feed) -> None:
    commit = getattr(feed, "commit", None)
    if callable(commit):
        commit()


def _values(k: float) -> dict[str, float]:
    return {"c.forebay_level": 77.5 + k, "c.P01.level": 77.2 + k, "c.water_temp": 11.25 + k}


def _now_ms() -> datetime:
    now = datetime.now(UTC)
    return now.replace(microsecond=now.microsecond // 1000 * 1000)


def _check_readings(readings: list[FeedReading], tags: list[TagDef],
                    expected: dict[str, float] | None, ts: datetime) -> None:
    assert sorted(r.tag for r in readings) == sorted(t.name for t in tags)  # one per tag
    for r in readings:
        assert isinstance(r, FeedReading)
        assert r.ts.tzinfo is not None and r.ts.utcoffset() == timedelta(0)
        assert r.source_ok and math.isfinite(r.value)
        if expected is not None:
            assert r.value == pytest.approx(expected[r.tag], rel=1e-12)
            assert r.ts == ts


def test_read_returns_one_reading_per_tag_in_si_with_aware_utc_times(harness):
    ts = _now_ms() - timedelta(seconds=30)
    expected = harness.publish(_values(0.0), ts)
    readings = harness.feed.read(harness.tags, datetime.now(UTC))
    _acknowledge(harness.feed)
    _check_readings(readings, harness.tags, expected, ts)


def test_unknown_address_is_reported_not_dropped_silently(harness):
    tags, unknown = harness.unknown_case()
    readings = harness.feed.read(tags, datetime.now(UTC))
    _acknowledge(harness.feed)
    assert not [r for r in readings if r.tag == unknown and r.source_ok]
    problems = getattr(harness.feed, "problems", ())
    assert any(unknown in p for p in problems), problems


def test_failure_raises_feed_error_and_a_later_read_recovers(harness):
    harness.break_source()
    start = time.monotonic()
    with pytest.raises(FeedError):
        harness.feed.read(harness.tags, datetime.now(UTC))
    assert time.monotonic() - start < 5.0  # promptly, no long hang
    harness.restore_source()
    ts = _now_ms() - timedelta(seconds=20)
    expected = harness.publish(_values(1.0), ts)
    deadline = time.monotonic() + RECOVERY_S
    while True:
        try:
            readings = harness.feed.read(harness.tags, datetime.now(UTC))
            break
        except FeedError:
            assert time.monotonic() < deadline, "the feed did not recover"
            time.sleep(0.05)
    _acknowledge(harness.feed)
    _check_readings(readings, harness.tags, expected, ts)


def test_close_then_read_reconnects(harness):
    harness.publish(_values(2.0), _now_ms() - timedelta(seconds=15))
    harness.feed.read(harness.tags, datetime.now(UTC))
    _acknowledge(harness.feed)
    harness.feed.close()
    ts = _now_ms() - timedelta(seconds=10)
    expected = harness.publish(_values(3.0), ts)
    readings = harness.feed.read(harness.tags, datetime.now(UTC))
    _acknowledge(harness.feed)
    _check_readings(readings, harness.tags, expected, ts)


def test_history_is_kept_readings_or_nothing(harness):
    # later than anything the other tests published (they stamp 10 s or more in the past)
    t1 = _now_ms() - timedelta(seconds=2)
    t2 = t1 + timedelta(seconds=1)
    harness.publish(_values(4.0), t1)
    harness.publish(_values(5.0), t2)
    got = harness.feed.history(harness.tags, t1, t2)
    if not harness.feed.supports_history:
        assert got == []
        return
    assert sorted((r.tag, r.ts) for r in got) == sorted(
        (t.name, ts) for t in harness.tags for ts in (t1, t2))
    for r in got:
        assert r.value == pytest.approx(_values(4.0 if r.ts == t1 else 5.0)[r.tag], rel=1e-12)
