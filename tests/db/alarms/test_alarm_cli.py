"""``fishway alarms history`` and ``fishway alarms performance`` (db/alarm_cli.py).

Exit status per dashboard/cli.py: 0, 2 for bad input (one line per problem naming the option),
1 for an internal error. The database is a SQLite file with a few hand-made events.
"""
from __future__ import annotations

import json
from datetime import timedelta

import pandas as pd
import pytest

from dashboard.cli import main
from db.alarm.store import site_ids
from db.alarms import record_alarm_event
from db.engine import make_engine
from db.migrate import upgrade
from ops_logic.site import load_site
from tests.db.alarms.conftest import T0


@pytest.fixture
def database(tmp_path):
    path = tmp_path / "alarms.sqlite"
    engine = make_engine(sqlite_path=path)
    upgrade(engine)
    ids = site_ids(engine, load_site(None))
    for i, (key, priority) in enumerate((("do_low@east", "medium"),
                                         ("do_low_low@east", "high"),
                                         ("trash_rack_dp_high@west", "low"))):
        rule, fishway = key.split("@")
        record_alarm_event(engine, key, T0 + timedelta(minutes=i), kind="raised",
                           state="unacknowledged", priority=priority, rule=rule,
                           fishway_id=ids.fishways[fishway], value=4.0 - i,
                           message=f"{rule} beyond its limit")
    record_alarm_event(engine, "do_low@east", T0 + timedelta(minutes=5), kind="acknowledged",
                       state="acknowledged", priority="medium", rule="do_low",
                       fishway_id=ids.fishways["east"], who="ana", why="aerator started")
    engine.dispose()
    return f"sqlite:///{path}"


PERIOD = ["--from", "2026-07-01T06:00+00:00", "--to", "2026-07-01T07:00+00:00"]


def test_history_table(database, capsys):
    assert main(["alarms", "history", *PERIOD, "--database", database]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[0].split()[:4] == ["time", "(UTC)", "key", "kind"]
    assert out[1].startswith("2026-07-01 06:00:00Z  do_low@east")
    assert "aerator started" in out[4] and out[-1] == "4 alarm event(s)"


def test_history_filters_and_csv(database, tmp_path, capsys):
    path = tmp_path / "east.csv"
    assert main(["alarms", "history", *PERIOD, "--fishway", "east", "--priority", "2",
                 "--rule", "do_low", "--state", "acknowledged", "-o", str(path),
                 "--database", database]) == 0
    assert capsys.readouterr().out.startswith("1 alarm event(s) from 2026-07-01T06:00:00+00:00")
    rows = pd.read_csv(path)
    assert rows[["key", "kind", "who"]].values.tolist() == [["do_low@east", "acknowledged",
                                                            "ana"]]


def test_times_without_an_offset_are_in_the_site_zone(database, capsys):
    # the demo site is at UTC-8: 22:00 local on June 30 is 06:00 UTC on July 1
    assert main(["alarms", "history", "--from", "2026-06-30T22:00", "--to",
                 "2026-06-30T22:01:30", "--database", database]) == 0
    out = capsys.readouterr().out
    assert "do_low@east" in out and "do_low_low@east" in out and "trash_rack" not in out


def test_performance_text_and_json(database, capsys):
    assert main(["alarms", "performance", *PERIOD, "--database", database]) == 0
    out = capsys.readouterr().out
    assert "6 ten-minute periods, 3 alarm(s) annunciated" in out
    assert "average alarms per 10 min     0.5" in out and "≤ 1 acceptable" in out
    assert main(["alarms", "performance", *PERIOD, "--fishway", "east", "--json",
                 "--database", database]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["annunciations"] == 2 and data["periods"] == 6
    assert data["figures"][0] == {"figure": "average alarms per 10 min", "value": 0.333,
                                  "target": "≤ 1 acceptable, ≤ 2 manageable", "meets": True}


def test_bad_input_lists_every_problem(database, capsys):
    code = main(["alarms", "history", "--from", "noon", "--to", "2026-07-01",
                 "--fishway", "north", "--priority", "urgent", "--rule", "do_lwo",
                 "--state", "panicking", "--database", database])
    assert code == 2
    err = capsys.readouterr().err.splitlines()
    assert [line.split(":")[1].strip() for line in err] == [
        "--from", "--fishway", "--priority", "--rule", "--state"]
    assert main(["alarms", "performance", "--from", "2026-07-02", "--to", "2026-07-01",
                 "--database", database]) == 2
    assert "is not after --from" in capsys.readouterr().err


def test_a_database_not_at_the_newest_schema_is_refused(tmp_path, capsys):
    url = f"sqlite:///{tmp_path / 'old.sqlite'}"
    upgrade(url, "0001_initial")
    assert main(["alarms", "history", *PERIOD, "--database", url]) == 2
    assert "run 'fishway db upgrade' first" in capsys.readouterr().err
