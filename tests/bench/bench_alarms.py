"""Alarm benchmark (a script, not a test): prints ratios measured in one run.

A site of about 500 tags — six copies of the demo site's east ladder with every pool gauged
and 30 pools gauged twice (84 tags each) on one feed — polled every 10 s. Each cycle stores
one reading per tag (``db.readings.store_batch``: raw readings and rollups, the ingest's write
path) and then runs the alarm evaluation of the same cycle (``db.alarm.evaluator.
AlarmEvaluator``: the inputs read from the database, six profile solves, the engine's rules
and state machine over every alarm, and the locked transaction that stores the result).
Readings carry a little noise, so every cycle is judged afresh.

Printed: the median time per cycle of each, the ratio evaluation / ingest of the same cycle,
and the evaluation as a share of the 10-s poll period (target: a small fraction of the cycle);
then where the evaluation's time goes (input queries and profiles, the engine, storing), the
first cycle (every alarm's row written) and a cycle in which the feed fails (every tag's stale
alarm grouped: a burst of events). SQLite (WAL) always; PostgreSQL too when the machine has it.

Run: ``.venv/bin/python tests/bench/bench_alarms.py`` (about a minute).
"""
from __future__ import annotations

import copy
import logging
import statistics
import sys
import tempfile
import time
import tomllib
from collections.abc import Callable
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from db.alarm.evaluator import AlarmEvaluator
from db.engine import make_engine
from db.feed_health import update_feed_health
from db.migrate import upgrade
from db.readings import store_batch
from ops_logic.alarms.engine import AlarmEngine
from ops_logic.site import Site, demo_site_path, parse_site
from simulator.steady import steady_readings

T0 = datetime(2026, 7, 1, 6, 0, tzinfo=UTC)
POLL_S = 10.0
COPIES = 6
REDUNDANT = 30
CYCLES = 40


def bench_site() -> Site:
    data = copy.deepcopy(tomllib.loads(demo_site_path().read_text(encoding="utf-8")))
    east = data["fishways"][0]
    pools = ["P01", *[f"P{i:02d}" for i in range(2, 40)], "P40"]
    east["gauging"] = {"pools": pools, "redundant": pools[:REDUNDANT]}
    data["fishways"] = [{**copy.deepcopy(east), "id": f"e{i}", "name": f"Ladder {i}"}
                        for i in range(COPIES)]
    data["site"]["name"] = "Bench site"
    return parse_site(data, "<alarm bench site>")


class Timer:
    """Wraps a function and keeps the duration of each call [s]."""

    def __init__(self, fn: Callable):
        self.fn, self.times = fn, []

    def __call__(self, *args, **kwargs):
        t = time.perf_counter()
        try:
            return self.fn(*args, **kwargs)
        finally:
            self.times.append(time.perf_counter() - t)


def run(url: str, label: str) -> None:
    site = bench_site()
    engine = make_engine(url)
    upgrade(engine)
    evaluator = AlarmEvaluator(engine, site)
    ids = evaluator.store.ids.tags
    names = list(steady_readings(site).items())
    rng = np.random.default_rng(7)
    read = evaluator.reader.read = Timer(evaluator.reader.read)
    judge = Timer(AlarmEngine.evaluate)
    original = AlarmEngine.evaluate

    def timed(self, now, inputs):  # bound like the method it stands in for
        return judge(self, now, inputs)

    AlarmEngine.evaluate = timed  # type: ignore[method-assign]
    ingest, evaluate, events = [], [], []
    try:
        for k in range(CYCLES + 1):
            now = T0 + timedelta(seconds=POLL_S * k)
            noise = rng.normal(0.0, 0.0005, len(names))
            rows = [(ids[n], now, v + (e if v != 0.0 else 0.0), 1)
                    for (n, v), e in zip(names, noise, strict=True)]
            t = time.perf_counter()
            store_batch(engine, rows)
            ingest.append(time.perf_counter() - t)
            update_feed_health(engine, "plant", now, ok=True)
            t = time.perf_counter()
            events.append(len(evaluator(now)))
            evaluate.append(time.perf_counter() - t)
        # the feed fails: no readings for 3 minutes, then the stale tags are grouped
        burst_t, burst_n = 0.0, 0
        for j in range(1, 19):
            now = T0 + timedelta(seconds=POLL_S * (CYCLES + j))
            update_feed_health(engine, "plant", now, ok=False, error="bench: feed cut")
            t = time.perf_counter()
            n = len(evaluator(now))
            if n > burst_n:
                burst_t, burst_n = time.perf_counter() - t, n
    finally:
        AlarmEngine.evaluate = original  # type: ignore[method-assign]
        engine.dispose()
    steady = slice(1, CYCLES + 1)  # the first cycle writes every alarm's row
    ing, ev = statistics.median(ingest[steady]), statistics.median(evaluate[steady])
    rd, jd = statistics.median(read.times[1:CYCLES + 1]), statistics.median(
        judge.times[1:CYCLES + 1])
    n_tags, n_alarms = len(ids), len(evaluator.store._cache.alarm_engine.state.alarms) \
        if evaluator.store._cache else 0
    print(f"== {label}: {n_tags} tags, {COPIES} fishways, {n_alarms} alarms judged per cycle, "
          f"{CYCLES} cycles of {POLL_S:g} s")
    print(f"  ingest (store_batch of {n_tags} readings) {ing * 1e3:7.1f} ms per cycle")
    print(f"  alarm evaluation                          {ev * 1e3:7.1f} ms per cycle "
          f"(events per steady cycle: {max(events[steady])})")
    print(f"  ratio evaluation / ingest of the same cycle: {ev / ing:.2f}")
    print(f"  evaluation as a share of the {POLL_S:g}-s cycle: {100 * ev / POLL_S:.2f} % "
          f"(ingest + evaluation: {100 * (ev + ing) / POLL_S:.2f} %)")
    print(f"  of the evaluation: inputs and profiles {rd * 1e3:.1f} ms, engine {jd * 1e3:.1f} "
          f"ms, locking and storing {(ev - rd - jd) * 1e3:.1f} ms")
    print(f"  first cycle (every alarm's row written): {evaluate[0] * 1e3:.0f} ms; "
          f"feed failure cycle ({burst_n} events stored): {burst_t * 1e3:.0f} ms")


def main() -> None:
    logging.getLogger("db.alarm").setLevel(logging.ERROR)  # the failure cycles' missing inputs
    with tempfile.TemporaryDirectory(prefix="fishway-alarm-bench-") as folder:
        run(f"sqlite:///{Path(folder) / 'bench.sqlite'}", "SQLite (WAL)")
    try:
        sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
        from pg_server import PgServer, PgUnavailableError
    except ImportError:
        return
    try:
        server = PgServer.start()
    except PgUnavailableError as exc:
        print(f"== PostgreSQL: skipped ({exc})")
        return
    try:
        run(server.url("postgres"), "PostgreSQL")
    finally:
        server.stop()


if __name__ == "__main__":
    main()
