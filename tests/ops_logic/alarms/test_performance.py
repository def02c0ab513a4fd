"""Alarm performance figures on a hand-built history whose answers are counted by hand.

Definitions: EEMUA 191 / ISA-18.2 as summarised in REFERENCES.md: alarms per 10 minutes
(about 1 acceptable, 2 manageable; seen), flood = more than 10 in 10 minutes (seen), under 1 %
of time in flood (seen), chattering = 3 or more activations within a minute (from memory),
stale = active more than 24 h (from memory), priority split about 80/15/5 (from memory).

The history, 00:00-02:00 on 1 July 2026 (12 ten-minute periods), annunciations only:

=========  ==============  =====================================================
period     alarms          what
=========  ==============  =====================================================
00:20-30   a1 … a6         6 alarms in one window
00:40-50   slow × 3        3 activations over 61 s: not chattering
00:50-60   edge × 3        3 activations in exactly 60 s: chattering (a minute)
01:00-10   chat × 4        4 activations in 50 s: chattering
01:30-40   f01 … f11       11 alarms: a flood (f01 high, f02-f05 medium)
=========  ==============  =====================================================

27 annunciations: average 27/12 = 2.25, peak 11, 1 of 12 periods in flood (8.33 %); top 10 =
chat 4 + slow 3 + edge 3 + seven single ones = 17 of 27 = 62.96 %; priority high 1, medium 4,
low 22. Besides: ``stale`` raised 25 h before the end and never cleared (stale), ``long`` active
23 h (not stale), ``old`` active 36 h but over before the period (not stale here), and
events that are not annunciations (clears, acknowledgements, a raise while shelved).
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from io import StringIO

import pandas as pd
import pytest

from ops_logic.alarms.performance import (
    alarm_history,
    alarm_performance,
    events_frame,
    to_csv,
)

START = datetime(2026, 7, 1, 0, 0, tzinfo=UTC)
END = START + timedelta(hours=2)


def _at(h, m, s=0.0, day=1):
    return datetime(2026, 7, day, h, m, tzinfo=UTC) + timedelta(seconds=s)


def _history() -> pd.DataFrame:
    rows = []

    def raise_(ts, key, priority="low", fishway="e", state="unacknowledged"):
        rows.append((ts, key, key.split("@")[0], fishway, "raised", state, priority))

    def clear(ts, key, state="rtn_unacknowledged", fishway="e"):
        rows.append((ts, key, key.split("@")[0], fishway, "cleared", state, "low"))

    for i in range(6):
        raise_(_at(0, 21 + i), f"a{i + 1}@e")
    for s in (0.0, 40.0, 61.0):
        raise_(_at(0, 40, s), "slow@e")
        clear(_at(0, 40, s + 10.0), "slow@e")
    for s in (0.0, 30.0, 60.0):
        raise_(_at(0, 50, s), "edge@w", fishway="w")
        clear(_at(0, 50, s + 5.0), "edge@w", fishway="w")
    for s in (0.0, 15.0, 30.0, 50.0):
        raise_(_at(1, 0, s), "chat@e")
        clear(_at(1, 0, s + 5.0), "chat@e")
    for k in range(11):
        pri = "high" if k == 0 else ("medium" if k <= 4 else "low")
        raise_(_at(1, 30, 30.0 * k), f"f{k + 1:02d}@e", pri)
    raise_(_at(1, 0, day=30).replace(month=6), "stale@e")
    raise_(_at(2, 30, day=30).replace(month=6), "long@e")
    clear(_at(1, 30), "long@e")
    raise_(datetime(2026, 6, 29, 0, 0, tzinfo=UTC), "old@e")
    clear(datetime(2026, 6, 30, 12, 0, tzinfo=UTC), "old@e")
    raise_(_at(0, 22, 30.0), "shelved@e", state="shelved")  # recorded, not annunciated
    rows.append((_at(0, 23), "a1@e", "a1", "e", "acknowledged", "acknowledged", "low"))
    raise_(END, "after@e")  # at the end: outside [start, end)
    frame = pd.DataFrame(rows, columns=["ts", "key", "rule", "fishway_id", "kind", "state",
                                        "priority"])
    return frame.sample(frac=1.0, random_state=3).set_index("ts")  # order must not matter


@pytest.fixture(scope="module")
def perf():
    return alarm_performance(_history(), START, END)


def test_rates_and_flood(perf):
    p, _ = perf
    assert p.periods == 12
    assert p.annunciations == 27
    assert p.average_per_10min == pytest.approx(27 / 12)
    assert p.peak_per_10min == 11
    assert p.flood_periods_pct == pytest.approx(100 / 12)


def test_top_ten(perf):
    p, _ = perf
    assert p.top10[:3] == (("chat@e", 4), ("edge@w", 3), ("slow@e", 3))
    assert len(p.top10) == 10 and all(n == 1 for _, n in p.top10[3:])
    assert p.top10_share_pct == pytest.approx(100 * 17 / 27)


def test_chattering_and_stale(perf):
    p, _ = perf
    assert p.chattering == ("chat@e", "edge@w")
    assert p.stale == ("stale@e",)


def test_priority_distribution(perf):
    p, _ = perf
    assert dict(p.priority_pct) == pytest.approx({"low": 100 * 22 / 27, "medium": 100 * 4 / 27,
                                                  "high": 100 * 1 / 27})


def test_display_table_sits_beside_the_targets(perf):
    _, table = perf
    t = table.set_index("figure")
    assert t.loc["average alarms per 10 min", "value"] == pytest.approx(2.25)
    assert t.loc["average alarms per 10 min", "meets"] is False  # above 2 per 10 min
    assert t.loc["% of 10-min periods in flood", "meets"] is False  # 8.3 % ≥ 1 %
    assert t.loc["chattering alarms", "value"] == 2
    assert t.loc["stale alarms (active > 24 h)", "value"] == 1
    assert t.loc["low priority, % of alarms", "target"] == "≈ 80 %"


def test_a_quiet_period_meets_every_target():
    p, table = alarm_performance(_history(), _at(2, 0, day=2), _at(4, 0, day=2))
    assert (p.annunciations, p.peak_per_10min, p.chattering) == (0, 0, ())
    # every alarm never cleared is active for more than 24 h by then; the cleared ones are not
    never_cleared = {"stale@e", "after@e", "shelved@e", *(f"a{i}@e" for i in range(1, 7)),
                     *(f"f{k:02d}@e" for k in range(1, 12))}
    assert set(p.stale) == never_cleared
    assert table.set_index("figure").loc["peak alarms in 10 min", "meets"] is True


def test_one_fishway(perf):
    p, _ = alarm_performance(_history(), START, END, fishway="w")
    assert (p.annunciations, p.chattering, p.top10) == (3, ("edge@w",), (("edge@w", 3),))


@pytest.mark.parametrize(("kwargs", "n"), [
    ({}, 27 + 3 + 3 + 4 + 1 + 1 + 1),  # annunciations, clears of slow/edge/chat/long, shelved, ack
    ({"fishway": "w"}, 6),
    ({"priority": "high"}, 1),
    ({"priority": 2}, 4),
    ({"rule": "chat"}, 8),
    ({"state": "acknowledged"}, 1),
])
def test_history_filter(kwargs, n):
    h = alarm_history(_history(), START, END, **kwargs)
    assert len(h) == n
    assert h.index.is_monotonic_increasing


def test_history_filter_refuses_bad_arguments():
    with pytest.raises(ValueError, match="end must be after start"):
        alarm_history(_history(), END, START)
    with pytest.raises(ValueError, match="unknown priority"):
        alarm_history(_history(), START, END, priority="urgent")
    naive = _history().tz_localize(None)
    with pytest.raises(ValueError, match="time-zone aware"):
        alarm_history(naive, START, END)


def test_csv_round_trip(tmp_path):
    h = alarm_history(_history(), START, END, rule="chat")
    text = to_csv(h, tmp_path / "alarms.csv")
    assert (tmp_path / "alarms.csv").read_text(encoding="utf-8") == text
    back = pd.read_csv(StringIO(text), index_col="ts", parse_dates=["ts"])
    assert back.index[0] == pd.Timestamp("2026-07-01T01:00:00Z")
    assert back["kind"].tolist() == h["kind"].tolist()
    assert text.splitlines()[0] == "ts,key,rule,fishway_id,kind,state,priority"


def test_engine_events_feed_the_figures(engine, plant, at):
    ev = []
    for m in range(1, 8):
        stale = {t.name: 500.0 for t in plant.tags[:2 * m]}
        ev += engine.evaluate(at(m), plant.inputs(at(m), ages=stale))
    frame = events_frame(ev)
    assert str(frame.index.tz) == "UTC" and set(frame["priority"]) == {"low"}
    p, _ = alarm_performance(frame, at(0), at(10))
    assert p.annunciations == sum(e.annunciated for e in ev) == 14
    assert p.peak_per_10min == 14 and p.flood_periods_pct == 100.0
