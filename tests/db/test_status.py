"""The stored fishway status (db/status/store.py, migration 0004): what the ingest judges
once per cycle comes back whole from the dashboard's fast read, on SQLite and PostgreSQL.

The judging itself (db/status/judge.py) is tested through the overview in
tests/dashboard/test_overview.py against the raw readings; here: storage and reading.
"""
from __future__ import annotations

from datetime import UTC, datetime, timedelta

import pytest
import sqlalchemy as sa

from db.alarms import record_alarm_event
from db.readings import store_batch
from db.site_sync import sync_site
from db.status import compute_status, read_status, update_status
from db.status.cache import clear_caches
from db.status.store import store_status
from ops_logic.site import load_site
from simulator.history import generate_history
from simulator.plant import Plant

END = datetime(2026, 7, 15, 12, 0, tzinfo=UTC)


@pytest.fixture
def site():
    return load_site()


@pytest.fixture
def seeded(db_engine, site):
    """20 minutes of simulated 60-second readings of the demo site."""
    ids = sync_site(db_engine, site)
    start = END - timedelta(minutes=20)
    plant = Plant(site, start=start, seed=3)
    for batch in generate_history(plant, list(ids), start, END, step_s=60.0):
        store_batch(db_engine, [(ids[r.tag], r.ts, r.value, 1 if r.source_ok else 9)
                                for r in batch])
    clear_caches()  # each backend's database is a new one
    return db_engine


def _comparable(s):
    return s._replace(name=s.id, profile=None, age_s=None)


def test_a_stored_status_reads_back_whole(seeded, site):
    now = END + timedelta(seconds=20)
    judged = update_status(site, seeded, now)
    read = read_status(seeded, site.site.name)
    assert [s.id for s in read.statuses] == [f.id for f in site.fishways]
    assert [_comparable(s) for s in read.statuses] == [_comparable(s) for s in judged]
    for got, want in zip(read.statuses, judged, strict=True):
        assert got.computed_ms == int(now.timestamp() * 1000)
        assert got.age_s == pytest.approx(want.age_s, abs=1e-3)  # as judged: 20 s
        assert got.metrics and all(m.text for m in got.metrics)  # display texts stored
        assert got.profile is None and got.alarms is None
    assert set(read.db_ids) == {f.id for f in site.fishways}
    assert read.alarm_rows == []  # no alarm rows at all: "no alarm data"


def test_a_new_status_replaces_the_old_rows(seeded, site):
    update_status(site, seeded, END + timedelta(seconds=20))
    later = END + timedelta(minutes=5)  # the readings have gone stale by now
    judged = update_status(site, seeded, later)
    with seeded.connect() as conn:
        n_status = conn.execute(sa.text("SELECT count(*) FROM fishway_status")).scalar()
        n_metrics = conn.execute(sa.text(
            "SELECT count(*) FROM fishway_status_metrics")).scalar()
    assert n_status == 2 and n_metrics == sum(len(s.metrics) for s in judged)
    read = read_status(seeded, site.site.name)
    assert all(s.state == "no_data" and s.stale for s in read.statuses)


def test_store_keeps_other_fishways_and_fewer_metrics_leave_no_rows(seeded, site):
    statuses = compute_status(site, seeded, END + timedelta(seconds=20))
    with seeded.connect() as conn:
        fw = dict(conn.execute(sa.text("SELECT name, id FROM fishways")).all())
    store_status(seeded, fw, statuses)
    east = statuses[0]
    store_status(seeded, fw, [east._replace(metrics=east.metrics[:3])])
    read = {s.id: s for s in read_status(seeded, site.site.name).statuses}
    assert [m.key for m in read["east"].metrics] == [m.key for m in east.metrics[:3]]
    assert len(read["west"].metrics) == len(statuses[1].metrics)  # untouched


def test_alarm_counts_are_read_live_beside_the_status(seeded, site):
    update_status(site, seeded, END + timedelta(seconds=20))
    fw = read_status(seeded, site.site.name).db_ids["east"]
    record_alarm_event(seeded, "east.do_low", END, kind="raised", state="unacknowledged",
                       priority="high", rule="do_low", fishway_id=fw, value=4.2,
                       message="dissolved oxygen low")
    rows = read_status(seeded, site.site.name).alarm_rows
    assert rows == [(fw, "high", "unacknowledged", 1)]


def test_statuses_of_another_site_are_left_out(seeded, site):
    update_status(site, seeded, END + timedelta(seconds=20))
    assert read_status(seeded, "Some other site").statuses == ()
