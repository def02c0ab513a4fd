"""CSV readings: the parser and import (db/csv_import.py), the drop folder's file handling
(db/feeds/csvdrop.py), the catalogue sync (db/site_sync.py), the feed registry
(db/feeds/registry.py) and the ``import-csv`` / ``db upgrade`` commands (db/cli.py).

References: the international foot is exactly 0.3048 m (international yard and pound
agreement of 1959; seen in pint's definitions file), so 1 ft³/s = 0.3048³ m³/s =
0.028316846592 m³/s exactly; ISO 8601 times with offsets are checked against pandas'
independent parser (``pandas.Timestamp``); QARTOD flag 2 = not evaluated, 9 = missing
(IOOS flags manual v1.2, seen in ``ioos_qc.qartod.QartodFlags``).
"""
from __future__ import annotations

import doctest
import importlib
import os
import time
import tomllib
from datetime import UTC, datetime, timedelta, timezone
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import sqlalchemy as sa
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from ioos_qc.qartod import QartodFlags

from dashboard.cli import main as fishway
from db.csv_import import import_csv, parse_readings_csv
from db.engine import make_engine
from db.feeds.csvdrop import CsvDropFeed
from db.feeds.opcua import OpcUaFeed
from db.feeds.registry import build_feeds
from db.migrate import upgrade
from db.readings import readings_frame, store_batch
from db.site_sync import sync_site
from ops_logic.site import demo_site_path, load_site, parse_site
from ops_logic.tags import site_tags

FT_M = 0.3048  # exact, international foot (1959)
CFS_M3S = 0.3048**3  # exact, = 0.028316846592
T0 = pd.Timestamp("2026-05-04T06:00:00-08:00")  # = 14:00 UTC


@pytest.fixture(scope="module")
def site():
    return load_site()


@pytest.fixture(scope="module")
def tags(site):
    return {t.name: t for t in site_tags(site)}


def write(path: Path, *lines: str, header: str = "time,tag,value,unit") -> Path:
    path.write_text(header + "\n" + "".join(f"{x}\n" for x in lines), encoding="utf-8")
    return path


def count(engine, table: str) -> int:
    with engine.connect() as conn:
        return conn.execute(sa.text(f"SELECT count(*) FROM {table}")).scalar()


def stored(engine, name: str) -> pd.DataFrame:
    with engine.connect() as conn:
        tid = conn.execute(sa.text("SELECT id FROM tags WHERE name = :n"), {"n": name}).scalar()
    return readings_frame(engine, tid, datetime(2000, 1, 1, tzinfo=UTC),
                          datetime(2100, 1, 1, tzinfo=UTC))


MIXED = [  # line 2 onwards; (line, expected reason fragment) for the bad ones below
    "2026-05-04T06:00:00-08:00,east.forebay_level,254.0,ft",       # 2 good, ft → m
    "2026-05-04T06:00:00-08:00,east.G1.flow,100,cfs",               # 3 good, cfs → m3/s
    "2026-05-04T06:00:00-08:00,east.water_temp,11.5,",              # 4 good
    "2026-05-04T06:00:00-08:00,east.do,,",                          # 5 good, missing value
    "2026-05-04T06:00:00-08:00,east.nowhere,1.0,",                  # 6 unknown tag
    "2026-05-04T25:00:00-08:00,east.do,9.0,",                       # 7 bad time
    "2026-05-04T06:00:00,east.do,9.0,",                             # 8 naive time
    "2026-05-04T06:00:10-08:00,east.do,9.o,",                       # 9 bad number
    "2026-05-04T06:00:10-08:00,east.water_temp,52,degF",            # 10 unit not converted
    "2026-05-04T06:00:10-08:00,east.forebay_level,3,cfs",           # 11 wrong dimension
    "2026-05-04T06:00:10-08:00,east.forebay_level,inf,",            # 12 not finite
    "2026-05-04T06:00:10-08:00,east.do",                            # 13 too few fields
]
MIXED_BAD = [(6, "unknown tag 'east.nowhere'"), (7, "bad time"), (8, "naive time"),
             (9, "bad number '9.o'"), (10, "unit 'degF' not accepted"),
             (11, "is not a length"), (12, "not finite"), (13, "expected 4 fields, got 2")]


def test_doctests():
    for name in ("db.csv_import", "db.feeds.csvdrop", "db.feeds.registry", "db.site_sync"):
        result = doctest.testmod(importlib.import_module(name))
        assert result.attempted > 0 and result.failed == 0, name


def test_qartod_flags_used_match_ioos_qc():
    # Source: ioos-qc QartodFlags (QARTOD flags manual v1.2): 2 not evaluated, 9 missing.
    from db import csv_import
    assert (csv_import.FLAG_NOT_EVALUATED, csv_import.FLAG_MISSING) == (
        QartodFlags.UNKNOWN, QartodFlags.MISSING)


def test_every_bad_row_is_reported_with_its_line(tmp_path, tags):
    parsed = parse_readings_csv(write(tmp_path / "a.csv", *MIXED), tags)
    assert [e.line for e in parsed.errors] == [line for line, _ in MIXED_BAD]
    for err, (_, fragment) in zip(parsed.errors, MIXED_BAD, strict=True):
        assert fragment in err.reason
    assert parsed.rows == len(MIXED) and len(parsed) == 4


def test_unknown_tag_suggests_the_close_name(tmp_path, tags):
    parsed = parse_readings_csv(write(tmp_path / "a.csv", "2026-05-04T14:00:00Z,east.dox,9,",
                                      "2026-05-04T14:00:00Z,zzz,9,"), tags)
    assert [e.reason for e in parsed.errors] == ["unknown tag 'east.dox' (did you mean east.do?)",
                                                 "unknown tag 'zzz'"]


def test_file_with_bad_rows_is_rejected_whole(db_engine, tmp_path, site):
    report = import_csv(db_engine, site, write(tmp_path / "a.csv", *MIXED))
    assert report.rejected and report.stored == 0
    assert [e.line for e in report.errors] == [line for line, _ in MIXED_BAD]
    assert count(db_engine, "readings") == 0 and count(db_engine, "rollups") == 0
    assert count(db_engine, "tags") == 0  # the catalogue is not touched either


def test_skip_bad_rows_stores_the_good_rows_converted(db_engine, tmp_path, site):
    report = import_csv(db_engine, site, write(tmp_path / "a.csv", *MIXED), skip_bad_rows=True)
    assert not report.rejected and report.stored == 4 and len(report.errors) == len(MIXED_BAD)
    utc = T0.tz_convert("UTC")  # pandas' own reading of the -08:00 offset
    level = stored(db_engine, "east.forebay_level")
    assert level.index.tolist() == [utc]
    assert level["value"].iloc[0] == pytest.approx(254.0 * FT_M, rel=1e-12)  # 77.4192 m
    flow = stored(db_engine, "east.G1.flow")["value"].iloc[0]
    assert flow == pytest.approx(100 * 0.028316846592, rel=1e-12)
    assert stored(db_engine, "east.water_temp")["flag"].tolist() == [QartodFlags.UNKNOWN]
    do = stored(db_engine, "east.do")
    assert np.isnan(do["value"].iloc[0]) and do["flag"].iloc[0] == QartodFlags.MISSING
    assert count(db_engine, "readings") == 4


def test_reimport_stores_nothing_new(db_engine, tmp_path, site):
    lines = [f"{(T0 + pd.Timedelta(seconds=10 * i)).isoformat()},east.P01.level,{77.0 + i / 100}"
             for i in range(300)]
    path = write(tmp_path / "a.csv", *lines, header="time,tag,value")
    first = import_csv(db_engine, site, path)
    assert (first.stored, first.already_stored) == (300, 0)
    with db_engine.connect() as conn:
        rollups = conn.execute(sa.text("SELECT * FROM rollups ORDER BY 1, 2, 3")).all()
    again = import_csv(db_engine, site, path)
    assert (again.stored, again.already_stored) == (0, 300)
    assert count(db_engine, "readings") == 300
    with db_engine.connect() as conn:
        assert conn.execute(sa.text("SELECT * FROM rollups ORDER BY 1, 2, 3")).all() == rollups


def test_duplicates_equal_are_ignored_different_are_bad(tmp_path, tags):
    t = "2026-05-04T14:00:00Z"
    parsed = parse_readings_csv(write(tmp_path / "a.csv", f"{t},east.do,9.5,",
                                      f"{t},east.do,9.5,", f"{t},east.water_temp,12,",
                                      f"{t},east.water_temp,12.5,"), tags)
    assert parsed.duplicates == 1 and len(parsed) == 2
    assert [(e.line, "first on line 4" in e.reason) for e in parsed.errors] == [(5, True)]


@pytest.mark.parametrize(("header", "fragment"), [
    ("time,tag", "header must name"), ("time,tag,value,unit,comment", "header must name"),
    ("when,tag,value", "header must name"), ("time,tag,value,value", "header must name"),
])
def test_bad_header_rejects_even_with_skip_bad_rows(db_engine, tmp_path, site, header,
                                                    fragment):
    path = write(tmp_path / "a.csv", "2026-05-04T14:00:00Z,east.do,9.5", header=header)
    report = import_csv(db_engine, site, path, skip_bad_rows=True)
    assert report.rejected and [e.line for e in report.errors] == [1]
    assert fragment in report.errors[0].reason and count(db_engine, "readings") == 0


def test_empty_file_and_non_utf8_rows(tmp_path, tags):
    (tmp_path / "e.csv").write_bytes(b"")
    assert parse_readings_csv(tmp_path / "e.csv", tags).errors[0].reason.startswith("empty")
    (tmp_path / "b.csv").write_bytes(b"\xef\xbb\xbftime,tag,value\n"
                                     b"2026-05-04T14:00:00Z,east.do,9.5\n"
                                     b"2026-05-04T14:00:10Z,east.d\xff,9.5\n")
    parsed = parse_readings_csv(tmp_path / "b.csv", tags)  # BOM accepted, line 3 is not UTF-8
    assert len(parsed) == 1 and [(e.line, e.reason) for e in parsed.errors] == [
        (3, "not UTF-8 text")]


OFFSETS = st.integers(-14 * 60, 14 * 60).map(lambda m: timezone(timedelta(minutes=m)))
TIMES = st.datetimes(min_value=datetime(2000, 1, 1), max_value=datetime(2090, 1, 1),
                     timezones=OFFSETS).map(lambda d: d.replace(microsecond=d.microsecond
                                                                // 1000 * 1000))


@settings(max_examples=60, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(rows=st.lists(st.tuples(st.sampled_from(["east.do", "west.water_temp", "east.P40.level"]),
                               TIMES, st.floats(-1e6, 1e6, allow_nan=False)),
                     min_size=1, max_size=30, unique_by=lambda r: (r[0], r[1])))
def test_times_and_values_round_trip_against_pandas(tmp_path, tags, rows):
    path = write(tmp_path / "h.csv", *(f"{when.isoformat()},{name},{value!r}"
                                       for name, when, value in rows), header="time,tag,value")
    parsed = parse_readings_csv(path, tags)
    assert not parsed.errors
    expected_ms = [pd.Timestamp(when.isoformat()).value // 1_000_000 for _, when, _ in rows]  # ns
    assert parsed.ts_ms == expected_ms
    assert parsed.values == [v for _, _, v in rows] and parsed.tags == [n for n, _, _ in rows]


# -- drop folder --------------------------------------------------------------------------
def drop(folder: Path, name: str, *lines: str, age_s: float = 10.0) -> Path:
    path = write(folder / name, *lines, header="time,tag,value")
    old = time.time() - age_s
    os.utime(path, (old, old))
    return path


def test_drop_folder_moves_files_only_after_commit(tmp_path, tags):
    path = drop(tmp_path, "a.csv", "2026-05-04T14:00:00Z,east.do,9.5")
    feed = CsvDropFeed("logger", tmp_path)
    now = datetime.now(UTC)
    first = feed.read(list(tags.values()), now)
    assert [(r.tag, r.value) for r in first] == [("east.do", 9.5)]
    assert path.exists() and feed.pending == (path,)
    assert feed.read(list(tags.values()), now) == first  # not committed: the same again
    assert feed.commit() == [tmp_path / "done" / "a.csv"]
    assert not path.exists() and feed.pending == ()
    assert feed.read(list(tags.values()), now) == []
    drop(tmp_path, "a.csv", "2026-05-04T14:00:10Z,east.do,9.6")  # same name again
    feed.read(list(tags.values()), now)
    assert feed.commit() == [tmp_path / "done" / "a.1.csv"]


def test_crash_between_store_and_commit_is_harmless(db_engine, tmp_path, site, tags):
    drop(tmp_path, "a.csv", *(f"2026-05-04T14:00:{s:02d}Z,east.do,{9 + s / 100}"
                              for s in range(0, 60, 10)))
    ids = sync_site(db_engine, site)

    def cycle(feed):
        readings = feed.read(list(tags.values()), datetime.now(UTC))
        return store_batch(db_engine, [(ids[r.tag], r.ts, r.value, 2) for r in readings])

    assert cycle(CsvDropFeed("logger", tmp_path)) == 6  # stored, then the process "dies"
    restarted = CsvDropFeed("logger", tmp_path)
    assert cycle(restarted) == 0  # the same file again: nothing new is stored
    restarted.commit()
    assert count(db_engine, "readings") == 6 and (tmp_path / "done" / "a.csv").exists()


def test_tmp_and_unsettled_files_are_ignored(tmp_path, tags):
    drop(tmp_path, "part.tmp", "2026-05-04T14:00:00Z,east.do,1.0")
    drop(tmp_path, "b.csv.part", "2026-05-04T14:00:00Z,east.do,2.0")
    drop(tmp_path, "fresh.csv", "2026-05-04T14:00:00Z,east.do,3.0", age_s=0.0)
    feed = CsvDropFeed("logger", tmp_path, settle_s=1.0)
    assert feed.read(list(tags.values()), datetime.now(UTC)) == []
    later = CsvDropFeed("logger", tmp_path, settle_s=1.0, clock=lambda: time.time() + 2.0)
    assert [r.value for r in later.read(list(tags.values()), datetime.now(UTC))] == [3.0]
    assert (tmp_path / "part.tmp").exists() and (tmp_path / "b.csv.part").exists()


def test_bad_file_goes_to_rejected_with_its_errors(tmp_path, tags):
    drop(tmp_path, "bad.csv", "2026-05-04T14:00:00Z,east.do,9.5",
         "2026-05-04T14:00:00Z,east.nowhere,1.0", "2099-01-01T00:00:00Z,east.do,9.6")
    feed = CsvDropFeed("logger", tmp_path)
    assert feed.read(list(tags.values()), datetime(2026, 5, 4, 15, tzinfo=UTC)) == []
    assert (tmp_path / "rejected" / "bad.csv").exists() and not (tmp_path / "bad.csv").exists()
    lines = (tmp_path / "rejected" / "bad.csv.errors.txt").read_text().splitlines()
    assert [x.split(":")[0] for x in lines] == ["line 3", "line 4"]
    assert "unknown tag" in lines[0] and "in the future" in lines[1]
    assert any("bad.csv:3:" in p for p in feed.problems)


# -- catalogue sync -----------------------------------------------------------------------
def test_sync_site_is_idempotent_and_follows_the_site_file(db_engine, site):
    ids = sync_site(db_engine, site)
    assert set(ids) == {t.name for t in site_tags(site)}
    assert sync_site(db_engine, site) == ids and count(db_engine, "tags") == len(ids)
    data = tomllib.loads(demo_site_path().read_text(encoding="utf-8"))
    data["ingest"]["tags"] = [{"name": "east.do", "poll_seconds": 60, "address": "ns=2;i=7"}]
    assert sync_site(db_engine, parse_site(data)) == ids
    with db_engine.connect() as conn:
        row = conn.execute(sa.text("SELECT poll_period_s, source_address, role FROM tags "
                                   "WHERE name = 'east.do'")).one()
    assert tuple(row) == (60.0, "ns=2;i=7", "do")


def test_sync_site_refuses_to_move_a_tag_to_another_fishway(db_engine, site):
    sync_site(db_engine, site)
    data = tomllib.loads(demo_site_path().read_text(encoding="utf-8"))
    data["site"]["name"] = "Another invented site"
    with pytest.raises(ValueError, match="already belongs"):
        sync_site(db_engine, parse_site(data))


# -- feed registry ------------------------------------------------------------------------
def test_build_feeds_makes_one_feed_per_config(tmp_path):
    data = tomllib.loads(demo_site_path().read_text(encoding="utf-8"))
    data["ingest"]["feeds"] = [{"id": "plc", "type": "opcua",
                                "endpoint": "opc.tcp://127.0.0.1:4840"},
                               {"id": "logger", "type": "csv", "folder": "drop"},
                               {"id": "plant", "type": "simulated"}]
    site = parse_site(data)
    made = []
    feeds = build_feeds(site, base_dir=tmp_path,
                        simulated_factory=lambda cfg, s: made.append(cfg.id) or "sim")
    assert list(feeds) == ["plc", "logger", "plant"] and made == ["plant"]
    assert isinstance(feeds["plc"], OpcUaFeed) and feeds["plc"].endpoint.endswith(":4840")
    assert isinstance(feeds["logger"], CsvDropFeed) and feeds["logger"].folder == tmp_path / "drop"
    with pytest.raises(ValueError, match="simulated_factory"):
        build_feeds(site)


# -- command line -------------------------------------------------------------------------
@pytest.fixture
def db_url(tmp_path) -> str:
    url = f"sqlite:///{tmp_path / 'cli.sqlite'}"
    upgrade(url)
    return url


def test_cli_imports_and_exits_0(tmp_path, db_url, capsys):
    path = write(tmp_path / "a.csv", *MIXED[:4])
    assert fishway(["import-csv", str(path), "--database", db_url]) == 0
    out = capsys.readouterr().out
    assert "4 readings stored" in out
    assert fishway(["import-csv", str(demo_site_path()), str(path), "--database", db_url]) == 0
    assert "0 readings stored, 4 already stored" in capsys.readouterr().out


def test_cli_lists_bad_rows_and_exits_2(tmp_path, db_url, capsys):
    lines = [f"2026-05-04T14:00:{i:02d},east.do,9.5" for i in range(25)]  # all naive
    path = write(tmp_path / "n.csv", *lines, header="time,tag,value")
    assert fishway(["import-csv", str(path), "--database", db_url]) == 2
    err = capsys.readouterr().err.splitlines()
    assert err[:20] == [f"{path}:{i + 2}: naive time 2026-05-04T14:00:{i:02d} (give a UTC "
                        "offset such as Z or -08:00)" for i in range(20)]
    assert "5 more bad row(s)" in err[20] and "rejected" in err[21]
    eng = make_engine(db_url)
    assert count(eng, "readings") == 0
    eng.dispose()


def test_cli_skip_bad_rows_exits_0_and_lists_them(tmp_path, db_url, capsys):
    path = write(tmp_path / "a.csv", *MIXED)
    assert fishway(["import-csv", "--skip-bad-rows", str(path), "--database", db_url]) == 0
    captured = capsys.readouterr()
    assert len(captured.err.splitlines()) == len(MIXED_BAD)
    assert f"{path}:6: unknown tag" in captured.err and "4 readings stored" in captured.out


@pytest.mark.parametrize("args", [["nope.csv"], ["a", "b", "c"]])
def test_cli_bad_paths_exit_2(args, db_url, capsys):
    assert fishway(["import-csv", *args, "--database", db_url]) == 2
    assert capsys.readouterr().err.startswith("fishway import-csv: ")


def test_cli_refuses_a_database_without_schema_then_db_upgrade_fixes_it(tmp_path, capsys):
    url = f"sqlite:///{tmp_path / 'new.sqlite'}"
    path = write(tmp_path / "a.csv", *MIXED[:2])
    assert fishway(["import-csv", str(path), "--database", url]) == 2
    assert "fishway db upgrade --database" in capsys.readouterr().err
    assert fishway(["db", "upgrade", "--database", url]) == 0
    assert "was empty" in capsys.readouterr().out
    assert fishway(["db", "upgrade", "--database", url]) == 0
    assert "already current" in capsys.readouterr().out
    assert fishway(["import-csv", str(path), "--database", url]) == 0


def test_cli_progress_bar_only_on_a_terminal(tmp_path, db_url, capsys, monkeypatch):
    import db.cli
    path = write(tmp_path / "a.csv", *MIXED[:4])
    monkeypatch.setattr(db.cli, "PROGRESS_MIN_BYTES", 0)
    assert fishway(["import-csv", str(path), "--database", db_url]) == 0
    assert capsys.readouterr().err == ""  # stderr is not a terminal here: no bar
    monkeypatch.setattr("sys.stderr.isatty", lambda: True)
    assert fishway(["import-csv", str(path), "--database", db_url]) == 0
    assert capsys.readouterr().err.endswith("100.0% 4 rows read, storing…\n")
