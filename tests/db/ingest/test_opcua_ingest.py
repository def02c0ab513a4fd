"""End to end over OPC UA on loopback (SQLite and PostgreSQL): the simulator's OPC UA server
(``simulator.opcua_server.run_server_in_thread``) behind a cuttable TCP link
(``simulator.link.FaultyLink``), the OPC UA client feed, the ingest service in real time.

References: the server's own history (OPC UA Part 11 HistoryRead, read directly from the
server, not through the link) for "no gap, no duplicate"; ``ops_logic.qc.run_qc`` over each
stored series for the flags (the live QC must give the whole-series flags); the server's
``BadSensorFailure`` status for a dropout must be stored MISSING (QARTOD flag 9).
"""
from __future__ import annotations

import time
from dataclasses import replace
from datetime import UTC, datetime, timedelta

import numpy as np
import pytest

from db.feed_health import feed_health_frame
from db.feeds.opcua import Backoff, OpcUaFeed
from db.ingest.service import IngestService
from db.readings import readings_frame
from db.site_sync import sync_site
from ops_logic.qc import run_qc
from simulator.link import FaultyLink, free_port
from simulator.opcua_server import run_server_in_thread
from simulator.plant import Plant
from simulator.scenario import Scenario

from .conftest import west_site

STEP_S = 0.5  # the server publishes (and historizes) every 0.5 s; the ingest polls as often
DROPOUT = "west.P20.level"


@pytest.fixture(scope="module")
def server():
    port = free_port()
    site = west_site(poll_seconds=STEP_S, recommend_seconds=60.0)
    now = datetime.now(UTC).replace(microsecond=0)
    plant = Plant(site, start=now - timedelta(minutes=5), profile_interval_s=60.0,
                  scenario=Scenario(random_forebay_drops_per_day=0.0))
    plant.advance_to(now)
    handle = run_server_in_thread(site, f"opc.tcp://127.0.0.1:{port}", plant=plant,
                                  update_s=STEP_S)
    direct = OpcUaFeed("direct", f"opc.tcp://127.0.0.1:{port}", timeout_s=5.0)
    yield port, plant, direct
    direct.close()
    handle.stop()


def poll_until_ok(service, limit_s=8.0):
    deadline = time.monotonic() + limit_s
    while True:
        report = service.poll_once(datetime.now(UTC))
        if not report.errors or time.monotonic() > deadline:
            return report
        time.sleep(STEP_S / 2)


def source_ms(plant) -> int:
    """The plant's (source) time now [epoch ms]: the server stamps readings with it."""
    return round(plant.now.timestamp() * 1000)


def check_tag(service, engine, tag, record, before_ms, after_ms, cut_ms, restored_ms,
              start, end, tz):
    frame = readings_frame(engine, service.tag_ids[tag.name], start - timedelta(seconds=5),
                           end + timedelta(seconds=5))
    ours = frame.index.asi8.tolist()
    flags = frame["flag"].to_numpy()
    values = frame["value"].to_numpy()
    assert len(ours) == len(set(ours)), tag.name
    assert before_ms < cut_ms < restored_ms <= after_ms, tag.name
    theirs = {round(r.ts.timestamp() * 1000): r for r in record if r.tag == tag.name}
    known = sorted(theirs)

    def repeated_bad(ms: int, flag: int) -> bool:
        # the server historizes on data change: a second identical bad value is not kept
        i = int(np.searchsorted(known, ms)) - 1
        return flag == 9 and i >= 0 and not theirs[known[i]].source_ok

    kept = [(ms, f, v) for ms, f, v in zip(ours, flags, values, strict=True)
            if ms in theirs or not repeated_bad(ms, f)]
    assert {ms for ms, _, _ in kept} <= set(theirs), tag.name  # each stored one is the server's
    # the values are the server's (NaN where it sent a bad status)
    np.testing.assert_array_equal([v for _, _, v in kept],
                                  [theirs[ms].value if theirs[ms].source_ok else np.nan
                                   for ms, _, _ in kept])
    # no gap: every reading the server kept from the last one stored before the cut to the
    # first one after the link came back is stored (live polls sample at their own pace)
    assert sorted(ms for ms in known if before_ms <= ms <= after_ms) == [
        ms for ms, _, _ in kept if before_ms <= ms <= after_ms], tag.name
    # the flags are the whole-series QARTOD flags of ops_logic.qc
    th = replace(service.qc.thresholds(tag.name), max_age_s=None)
    np.testing.assert_array_equal(flags, run_qc(frame.index, values, th, tz=tz),
                                  err_msg=tag.name)
    if tag.quantity == "water_level" and tag.name != DROPOUT:
        assert (flags == 1).all(), tag.name


def test_outage_backfill_over_opcua(server, db_engine):
    port, plant, direct = server
    link = FaultyLink(0, port, lifetime_s=120.0)
    site = west_site(poll_seconds=STEP_S, recommend_seconds=60.0, feeds=[
        {"id": "plc", "type": "opcua", "endpoint": f"opc.tcp://127.0.0.1:{link.port}"}])
    feed = OpcUaFeed("plc", f"opc.tcp://127.0.0.1:{link.port}", timeout_s=2.0,
                     backoff=Backoff(0.2, 2.0, 0.4))
    service = IngestService(site, db_engine, {"plc": feed}, tag_ids=sync_site(db_engine, site))
    try:
        start = datetime.now(UTC)
        t_drop = plant.now + timedelta(seconds=0.6)
        plant.inject_fault(DROPOUT, "dropout", t_drop, t_drop + timedelta(seconds=1.2))
        for _ in range(3):  # live polls
            assert not service.poll_once(datetime.now(UTC)).errors
            time.sleep(STEP_S)
        before = {t.name: service.qc.window(t.name).last_ms for t in service.tags}
        link.cut()
        cut_ms = source_ms(plant)
        assert "plc" in service.poll_once(datetime.now(UTC)).errors
        health = feed_health_frame(db_engine).loc["plc"]
        assert health["last_error_at"] > health["last_success_at"]
        assert "read failed" in health["last_error"]
        assert "(1 consecutive error)" in health["last_error"]
        time.sleep(3 * STEP_S)
        assert "plc" in service.poll_once(datetime.now(UTC)).errors  # still down
        assert service.states["plc"].consecutive_errors >= 2
        link.restore()
        restored_ms = source_ms(plant)
        back = poll_until_ok(service)
        assert not back.errors and back.backfilled > 0
        after = {t.name: service.qc.window(t.name).last_ms for t in service.tags}
        time.sleep(STEP_S)
        assert not service.poll_once(datetime.now(UTC)).errors
        end = datetime.now(UTC)
        assert feed_health_frame(db_engine).loc["plc", "last_success_at"] > health[
            "last_error_at"]
        record = direct.history(service.tags, start - timedelta(seconds=10), end)
        for tag in service.tags:
            check_tag(service, db_engine, tag, record, before[tag.name], after[tag.name],
                      cut_ms, restored_ms, start, end, site.site.time_zone)
        dropped = readings_frame(db_engine, service.tag_ids[DROPOUT],
                                 start - timedelta(seconds=10), end)
        assert (dropped["flag"] == 9).sum() >= 1
        assert dropped["value"].isna().sum() == (dropped["flag"] == 9).sum()
    finally:
        service.close()
        link.stop()
