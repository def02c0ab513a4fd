"""Crash safety of the ingest on SQLite: SIGKILL in the middle of writing, then restart.

A driver process (``crash_driver.py``) ingests blocks of 1000 s × 15 tags (15 000 readings a
batch) into a SQLite file and is killed with SIGKILL at a random moment after its first
batches; then it is restarted (and killed again), and finally run to the end. References:
SQLite's ``PRAGMA integrity_check`` ("ok"); the table's primary key (tag_id, ts_ms) for
duplicates; a re-ingest of the same blocks into a fresh file without any kill for the final
content; the rollup definition (db/rollups.py: the daily bucket counts every reading) for
raw readings and rollups written together.
"""
from __future__ import annotations

import random
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
import crash_driver

DRIVER = Path(__file__).with_name("crash_driver.py")
START_S = 1_780_272_000  # 2026-06-01T00:00:00Z
BLOCK_S = 1000
UNTIL_S = START_S + 12 * BLOCK_S
N_TAGS = 15


def kill_after_writing(db: Path, rng: random.Random, *, gap_s: int = 0) -> int:
    """Start the driver, let it store at least two batches, SIGKILL it at a random moment."""
    proc = subprocess.Popen([sys.executable, str(DRIVER), str(db), str(START_S), str(UNTIL_S),
                             str(BLOCK_S), str(gap_s)], stdout=subprocess.PIPE,
                            stderr=subprocess.DEVNULL, text=True)
    assert proc.stdout is not None
    for line in proc.stdout:
        if line.strip() == "batch 2":
            break
    time.sleep(rng.uniform(0.0, 0.25))  # somewhere in a later batch (each takes ~0.1 s)
    proc.kill()
    proc.wait(10)
    return proc.returncode


def check_whole_batches(db: Path) -> int:
    """Integrity, no duplicate, every time stamp complete, whole blocks only, rollups agree."""
    con = sqlite3.connect(db)
    try:
        assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        n, distinct = con.execute("SELECT count(*), count(DISTINCT tag_id || ':' || ts_ms) "
                                  "FROM readings").fetchone()
        assert n == distinct
        per_ts = con.execute("SELECT ts_ms, count(*) FROM readings GROUP BY ts_ms "
                             "ORDER BY ts_ms").fetchall()
        assert all(c == N_TAGS for _, c in per_ts)  # no half-stored time stamp
        stamps = [ts // 1000 for ts, _ in per_ts]
        # whole blocks from the start, with no hole: the stored stamps are START+1 .. START+k
        assert stamps == list(range(START_S + 1, START_S + 1 + len(stamps)))
        assert len(stamps) % BLOCK_S == 0
        daily = con.execute("SELECT sum(n) FROM rollups WHERE res_s = 86400").fetchone()[0]
        assert (daily or 0) == n  # raw readings and rollups were committed together
        return len(stamps)
    finally:
        con.close()


def rows(db: Path) -> list[tuple]:
    con = sqlite3.connect(db)
    try:
        return con.execute("SELECT tag_id, ts_ms, value, flag FROM readings "
                           "ORDER BY tag_id, ts_ms").fetchall()
    finally:
        con.close()


def test_sigkill_while_writing_then_resume(tmp_path):
    rng = random.Random()
    db = tmp_path / "ingest.sqlite"
    assert kill_after_writing(db, rng) == -9
    first = check_whole_batches(db)
    assert first >= 2 * BLOCK_S
    assert kill_after_writing(db, rng, gap_s=3 * BLOCK_S) == -9  # restart, kill again
    second = check_whole_batches(db)
    assert second > first
    done = subprocess.run([sys.executable, str(DRIVER), str(db), str(START_S), str(UNTIL_S),
                           str(BLOCK_S), str(2 * BLOCK_S)], capture_output=True, text=True,
                          timeout=120, check=False)
    assert done.returncode == 0, done.stderr
    assert check_whole_batches(db) == UNTIL_S - START_S
    reference = tmp_path / "reference.sqlite"
    crash_driver.run(str(reference), START_S, UNTIL_S, BLOCK_S)
    assert rows(db) == rows(reference)
