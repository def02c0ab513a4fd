"""``fishway ingest`` and ``fishway demo`` (db/ingest/cli.py, dashboard/cli.py).

Checks of the command-line contract (exit status 0 / 1 / 2, one line per problem naming the
option or file), of what a run stores (counts that follow from the demo site: 35 tags, one
reading each per 10 s poll), and of a clean stop on SIGTERM / Ctrl-C. No published values.
"""
from __future__ import annotations

import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest

from dashboard.cli import main

FISHWAY = Path(sys.executable).with_name("fishway")
N_TAGS = 35  # the demo site's catalogue (ops_logic.tags.site_tags)


def run(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def count(db: Path, sql: str) -> int:
    con = sqlite3.connect(db)
    try:
        return con.execute(sql).fetchone()[0]
    finally:
        con.close()


def test_ingest_once_twice_keeps_context(capsys, tmp_path):
    db = tmp_path / "fishway.sqlite"
    code, out, err = run(capsys, "ingest", "--once", "--database", f"sqlite:///{db}")
    assert code == 0, err
    assert f"{N_TAGS} new reading(s)" in out and "east none, west none" in out
    assert count(db, "SELECT count(*) FROM readings") == N_TAGS
    assert count(db, "SELECT count(*) FROM feed_health WHERE feed = 'plant' AND "
                     "last_success_at IS NOT NULL") == 1
    assert len(list((tmp_path / "backups").glob("fishway-*.sqlite"))) == 1
    time.sleep(1.1)
    # the second run starts from the stored readings: now the first ones are settled inputs
    code, out, err = run(capsys, "ingest", "--once", "--database", f"sqlite:///{db}")
    assert code == 0, err
    assert "east stored, west stored" in out
    assert count(db, "SELECT count(*) FROM readings") == 2 * N_TAGS
    assert count(db, "SELECT count(*) FROM recommendations") == 2
    # the status evaluator stored each fishway's status after the cycles (replaced, not added)
    assert count(db, "SELECT count(*) FROM fishway_status") == 2
    assert count(db, "SELECT count(DISTINCT fishway_id) FROM fishway_status_metrics") == 2


@pytest.mark.parametrize(("argv", "expected"), [
    (["--speed", "0"], "fishway ingest: --speed: 0 is outside (0, 100000]"),
    (["--database", "nosuchdriver://x"], "fishway ingest: --database: cannot use"),
    (["/no/such/site.toml"], "fishway ingest: /no/such/site.toml: cannot read the file"),
])
def test_ingest_bad_input_exits_2(capsys, argv, expected):
    code, _, err = run(capsys, "ingest", "--once", *argv)
    assert code == 2 and err.startswith(expected), err


def test_speed_needs_a_simulated_feed(capsys, tmp_path):
    text = Path(__file__).parents[3].joinpath("ops_logic", "data", "demo_site.toml").read_text()
    site = tmp_path / "plc.toml"
    site.write_text(text.replace(
        "[ingest]\n", '[ingest]\nfeeds = [{ id = "plc", type = "opcua", endpoint = '
        '"opc.tcp://127.0.0.1:4840" }]\n', 1))
    code, _, err = run(capsys, "ingest", str(site), "--speed", "5")
    assert code == 2
    assert "--speed: feed(s) plc are not simulated" in err


def test_ingest_runs_until_sigterm(tmp_path):
    db = tmp_path / "live.sqlite"
    proc = subprocess.Popen([str(FISHWAY), "ingest", "--speed", "20", "--database",
                             f"sqlite:///{db}"], stderr=subprocess.PIPE, text=True,
                            env={**os.environ, "FISHWAY_DATA_DIR": str(tmp_path)})
    try:
        assert proc.stderr is not None
        first = proc.stderr.readline()
        assert "Ctrl-C or SIGTERM stops" in first, first
        deadline = time.monotonic() + 30
        while time.monotonic() < deadline:  # 10 s polls at speed 20: one every 0.5 s
            if db.exists() and count(db, "SELECT count(*) FROM readings") >= 3 * N_TAGS:
                break
            time.sleep(0.3)
        proc.send_signal(signal.SIGTERM)
        rest = proc.stderr.read()
        assert proc.wait(30) == 0, rest
    finally:
        if proc.poll() is None:
            proc.kill()
    assert "fishway ingest: stopped" in rest
    assert count(db, "SELECT count(*) FROM readings") >= 3 * N_TAGS
    assert count(db, "SELECT count(*) FROM readings") % N_TAGS == 0  # whole polls only


def test_demo_seed_only(capsys, tmp_path, monkeypatch):
    monkeypatch.setenv("FISHWAY_DATA_DIR", str(tmp_path))
    code, out, err = run(capsys, "demo", "--seed-only", "--days", "0.02")
    assert code == 0, err
    db = tmp_path / "demo" / "fishway-demo.sqlite"
    stamps = count(db, "SELECT count(DISTINCT ts_ms) FROM readings")
    assert 172 <= stamps <= 174  # 0.02 days of 10 s readings
    assert count(db, "SELECT count(*) FROM readings") == stamps * N_TAGS
    assert count(db, "SELECT count(DISTINCT fishway_id) FROM recommendations") == 2
    assert f"seeded {stamps * N_TAGS:,} readings of {N_TAGS} tags" in out
    assert "seeding 0.02 day(s): 100%" in err
    first = count(db, "SELECT min(ts_ms) FROM readings")
    time.sleep(1.0)
    code, _, err = run(capsys, "demo", "--seed-only", "--days", "0.02")
    assert code == 0, err
    assert count(db, "SELECT min(ts_ms) FROM readings") >= first  # a fresh file each time
    assert count(db, "SELECT count(*) FROM readings") <= 174 * N_TAGS


def test_demo_days_out_of_range(capsys):
    code, _, err = run(capsys, "demo", "--seed-only", "--days", "9")
    assert code == 2 and "fishway demo: --days: 9 is outside (0, 7]" in err


def test_demo_runs_live_until_ctrl_c(tmp_path):
    proc = subprocess.Popen([str(FISHWAY), "demo", "--days", "0.01"], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True,
                            env={**os.environ, "FISHWAY_DATA_DIR": str(tmp_path)})
    try:
        assert proc.stdout is not None
        lines = []
        for line in proc.stdout:
            lines.append(line)
            if "run live now" in line:
                break
        assert "fishway-demo.sqlite" in lines[-1], lines
        time.sleep(1.0)
        proc.send_signal(signal.SIGINT)
        _out, err = proc.communicate(timeout=30)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 0, err
    assert "fishway demo: stopped" in err
