"""A supervisor's target override sets the band the hydraulic alarm rules judge against
(db/alarm/evaluator.py hands the targets in force to the engine and the input reader).

The demo site's east ladder: entrance head band 1.0–1.5 ft (ops_logic/data/demo_site.toml),
the rule's on-delay 300 s and deadband 0.02 m (common practice, ops_logic.alarms.config). An
entrance head of 1.60 ft (entrance-pool gauges − tailwater, as the rule measures it) is out of
the site file's band; a supervisor's maximum of 1.80 ft takes it back in.
"""
from __future__ import annotations

import pytest

from db.alarms import alarms_frame
from db.dashboard_queries import record_setting_change

FT = 0.3048  # m, exact


def _run(evaluator, feed, quiet, at, minutes: int) -> None:
    head = 1.60 * FT
    level = quiet["east.tailwater_level"] + head
    for m in range(minutes + 1):
        feed(at(m), east__P40__level=level, east__P40__level_b=level)
        evaluator(at(m))


def _active(db_engine) -> set[str]:
    frame = alarms_frame(db_engine)
    return set(frame.index[frame["state"].isin(["unacknowledged", "acknowledged"])])


def test_out_of_the_site_files_band_alarms(db_engine, evaluator, feed, quiet, at):
    _run(evaluator, feed, quiet, at, 7)  # past the 5-minute on-delay
    assert "entrance_head@east" in _active(db_engine)


def test_a_supervisors_wider_band_holds_the_alarm_back(db_engine, evaluator, feed, quiet, at):
    fw = evaluator.store.ids.fishways["east"]
    record_setting_change(db_engine, fw, "targets.entrance_head.max", at(-1), action="set",
                          set_by="sam", old_value=1.5 * FT, new_value=1.8 * FT)
    _run(evaluator, feed, quiet, at, 7)
    assert "entrance_head@east" not in _active(db_engine)
    # the solved profile's criteria carry the band in force too
    ladder = evaluator.reader.ladders["east"]
    assert ladder.fishway.targets.entrance_head.max == pytest.approx(1.8 * FT)


def test_a_band_narrowed_later_takes_effect_at_the_next_cycle(db_engine, evaluator, feed,
                                                             quiet, at):
    fw = evaluator.store.ids.fishways["east"]
    record_setting_change(db_engine, fw, "targets.entrance_head.max", at(-1), action="set",
                          set_by="sam", old_value=1.5 * FT, new_value=1.8 * FT)
    _run(evaluator, feed, quiet, at, 2)
    record_setting_change(db_engine, fw, "targets.entrance_head.max", at(2), action="revert",
                          set_by="sam", old_value=1.8 * FT, new_value=1.5 * FT)
    head = quiet["east.tailwater_level"] + 1.60 * FT
    for m in range(3, 11):
        feed(at(m), east__P40__level=head, east__P40__level_b=head)
        evaluator(at(m))
    assert "entrance_head@east" in _active(db_engine)
