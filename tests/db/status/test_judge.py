"""The status judged from the database (db/status/judge.py) with the forebay the ladder sees,
on SQLite and PostgreSQL.

The readings are the demo site at its own recommendation for the middle of each fishway's
forebay and tailwater ranges, stored 5 s before the status is judged (fresh: the demo polls
every 10 s). Expected values are hand calculations from the stored readings by the rule of
ops_logic.ladder.exit_forebay_m: the ladder sees the forebay gauge less the trash-rack head
loss, measured forebay to exit (common practice for a differential gauge across a rack), so a
0.10 m loss lowers the solve's forebay and the measured exit weir head by exactly 0.10 m.
"""
from __future__ import annotations

from datetime import UTC, datetime, timedelta

import pytest

from db.dashboard_queries import fishway_db_ids, record_setting_change
from db.in_force import clear_cache
from db.readings import store_batch
from db.site_sync import sync_site
from db.status import compute_status
from db.status.cache import clear_caches
from ops_logic.display import format_value
from ops_logic.site import load_site
from simulator.steady import steady_readings

T0 = datetime(2026, 7, 1, 6, 0, tzinfo=UTC)


@pytest.fixture
def judged(db_engine):
    """``judged(flags=None, at=T0, **values)``: store the still readings (with ``values`` by
    tag name) at ``at`` and return the statuses judged 5 s later, by fishway id."""
    site = load_site()
    ids = sync_site(db_engine, site)
    clear_caches()
    clear_cache()
    base = steady_readings(site)

    def run(flags: dict[str, int] | None = None, at: datetime = T0, **values: float):
        rows = {**base, **values}
        store_batch(db_engine, [(ids[n], at, v, (flags or {}).get(n, 1))
                                for n, v in rows.items()])
        return ({s.id: s for s in compute_status(site, db_engine, at + timedelta(seconds=5))},
                rows, site)

    return run


@pytest.mark.parametrize(("loss_m", "lowered_m"), [(0.10, 0.10), (0.0, 0.0), (-0.02, 0.0)])
def test_the_solve_and_the_exit_head_see_the_forebay_less_the_loss(judged, loss_m, lowered_m):
    statuses, rows, site = judged(**{"east.trash_rack_dp": loss_m,
                                     "west.trash_rack_dp": loss_m})
    for fid in ("east", "west"):
        s = statuses[fid]
        forebay = rows[f"{fid}.forebay_level"]
        assert s.profile.forebay_m == pytest.approx(forebay - lowered_m, abs=1e-12)
        assert s.metric("forebay").value == pytest.approx(forebay, abs=1e-12)  # the gauge
        level = format_value(forebay - lowered_m, "elevation", site.site.units)
        assert s.metric("forebay").note == f"ladder sees {level}: forebay − trash-rack head loss"
    head = statuses["east"].metric("exit_head")
    want = rows["east.forebay_level"] - lowered_m - rows["east.exit.crest"]
    assert head.value == pytest.approx(want, abs=1e-12)
    assert head.source == "forebay − trash-rack head loss − crest"


def test_exactly_a_tenth_of_a_metre_lower_than_without_a_loss(judged):
    clean, _, _ = judged(**{"east.trash_rack_dp": 0.0})
    fouled, _, _ = judged(at=T0 + timedelta(minutes=1), **{"east.trash_rack_dp": 0.10})
    assert clean["east"].metric("exit_head").value - fouled["east"].metric("exit_head").value \
        == pytest.approx(0.10, abs=1e-12)
    assert clean["east"].profile.forebay_m - fouled["east"].profile.forebay_m == \
        pytest.approx(0.10, abs=1e-12)


@pytest.mark.parametrize(("values", "flags", "why"), [
    ({"east.trash_rack_dp": 0.10}, {"east.trash_rack_dp": 4}, "no usable trash-rack head loss"),
    ({"east.trash_rack_dp": 2.5}, None, "trash-rack head loss 2.5 m refused"),
])
def test_without_a_usable_loss_the_forebay_gauge_itself_and_it_says_so(judged, values, flags,
                                                                       why):
    statuses, rows, _ = judged(flags, **values)
    east = statuses["east"]
    assert east.profile.forebay_m == pytest.approx(rows["east.forebay_level"], abs=1e-12)
    head = east.metric("exit_head")
    assert head.value == pytest.approx(rows["east.forebay_level"] - rows["east.exit.crest"],
                                       abs=1e-12)
    assert head.source.startswith(f"forebay − crest ({why}")
    assert f"forebay ({why}" in east.metric("forebay").note


def test_the_status_judges_against_the_band_in_force(judged, db_engine):
    # a supervisor's maximum pool head drop is the band of the worst-drop metric and of the
    # profile's criteria (hand calculation: the band is the value set)
    site = load_site()
    sync_site(db_engine, site)
    fw = fishway_db_ids(db_engine, site.site.name)["east"]
    record_setting_change(db_engine, fw, "targets.pool_head_drop.max", T0, action="set",
                          set_by="sup1", new_value=0.33)
    statuses, _, _ = judged()
    east = statuses["east"]
    assert east.metric("head_drop").hi == 0.33
    assert {c.max for c in east.profile.criteria if c.name.startswith("head_drop:")} == {0.33}
