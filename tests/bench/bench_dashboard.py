"""Dashboard serving benchmark (a script, not a test): prints what it measured in this run.

1. Database: a year of one-minute readings for 30 tags of the demo site (the intermediate pool
   gauges P10, P20 and P30 of the east ladder and P10 and P20 of the west one get none):
   15.8 million readings written through ``db.readings.store_batch`` (the ingest's own write
   path, rollups included; measured at about 0.2 million readings a second here, so no bulk
   shortcut is needed), in batches of about four months of one tag. The values are
   synthetic (seasonal and daily sines around the solved mid-range profile, small noise);
   actuator positions are the recommendation at mid-range levels. ``--database PATH`` keeps
   the file and reuses it on the next run.
2. The overview's refresh callback (``dashboard/pages/overview.py``: ``refresh``, called as a
   plain function in a signed-in request) against the bare database work it does. The status
   it shows is judged once per ingest cycle and stored (``db.status``); the benchmark stores
   it as the ingest would (``update_status`` at the clock below, its time reported against the
   10 s poll). The SQL statements the callback sends are recorded (SQLite's statement trace on
   every pooled connection: the overview's read goes through the DBAPI cursor, past
   SQLAlchemy's events) and replayed with bare ``sqlite3`` on the same file (same page-cache
   size; transaction statements left out: reads need none), one bare round beside each call
   over a thousand rounds (the medians compared, so a slow spell of the machine weighs on
   both alike). Two cases: a *new* status (the
   first refresh after an ingest cycle: the kept output lists are cleared before each call, so
   the texts, classes and bullet styles are built) and the *same* status (every other refresh
   until the next cycle). Target: the callback within 3× its bare queries, judged on the new
   status case.
3. A year-long trend of one tag: the trends page's ``draw`` callback (another engineer's
   ``dashboard/pages/trends.py``) for a chart whose plot area is 1500 px, and
   ``db.trends.trend(..., width_px=1500)`` itself, each against its recorded bare queries.
4. Load run: the app served by waitress (8 threads, as ``fishway dashboard``) in this process,
   20 simulated clients (threads with ``urllib`` on loopback, each signed in as a viewer) that
   post the overview's refresh callback every 5 s for ``--seconds`` (default 60; ``--minutes 3``
   for the full run), while a writer thread stands in for the ingest: every 10 s it judges and
   stores the status anew (profiles solved from scratch) and drops the kept output lists, so
   each cycle's first refreshes build them again. Prints requests, errors, median and
   95th-percentile latency. The clients, the server and the writer share this process (and
   its interpreter lock).

The clock of the dashboard is set to 20 s after the last reading so the data is fresh. Run:
``.venv/bin/python tests/bench/bench_dashboard.py``.
"""
from __future__ import annotations

import argparse
import json
import logging
import os
import random
import re
import sqlite3
import statistics
import sys
import tempfile
import threading
import time
import urllib.parse
import urllib.request
from datetime import UTC, datetime, timedelta
from http.cookiejar import CookieJar
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

END = datetime(2026, 6, 30, 23, 59, tzinfo=UTC)
START = END - timedelta(days=365) + timedelta(minutes=1)
NOW = END + timedelta(seconds=20)
SKIPPED = ("east.P10.level", "east.P20.level", "east.P30.level", "west.P10.level",
           "west.P20.level")
BATCH_DAYS = 122
TARGET_RATIO = 3.0
CLIENTS = 20
CLIENT_PERIOD_S = 5.0
LOAD_USER = ("load1", "load-user-pass-1")


# -- 1. the database ---------------------------------------------------------------------------
def _series(tag, t_s: np.ndarray, mid: dict, rng: np.random.Generator) -> np.ndarray:
    year = 2 * np.pi * t_s / (365.0 * 86400.0)
    day = 2 * np.pi * t_s / 86400.0
    noise = rng.normal(0.0, 1.0, t_s.size)
    role = tag.role
    if role in ("forebay", "tailwater", "pool", "pool_b"):
        base = mid[tag.name]
        swing = 0.25 if role == "forebay" else 0.4 if role == "tailwater" else 0.05
        return base + swing * np.sin(year) + 0.03 * np.sin(day) + 0.003 * noise
    if role == "water_temp":
        return 12.0 + 5.0 * np.sin(year - 1.8) + 1.2 * np.sin(day - 2.0) + 0.05 * noise
    if role == "do":
        return 9.5 - 1.5 * np.sin(year - 1.8) + 0.4 * np.sin(day) + 0.05 * noise
    if role in ("trash_rack_dp", "picket_dp"):
        return 0.02 + 0.02 * ((t_s / (7 * 86400.0)) % 1.0) + 0.001 * noise
    if role == "pump_trip":
        return np.zeros(t_s.size)
    return np.full(t_s.size, mid[tag.name])  # positions and auxiliary flows


def build_database(path: Path) -> tuple[float, int]:
    """Create the benchmark database; return (seconds, readings written)."""
    from dashboard.auth import create_user
    from db.engine import make_engine
    from db.migrate import upgrade
    from db.readings import store_batch
    from db.site_sync import sync_site
    from ops_logic.ladder import Ladder
    from ops_logic.site import load_site
    from ops_logic.tags import site_tags

    site = load_site()
    engine = make_engine(sqlite_path=path)
    upgrade(engine)
    ids = sync_site(engine, site)
    create_user(engine, LOAD_USER[0], "viewer", LOAD_USER[1])
    mid: dict[str, float] = {}
    for f in site.fishways:
        ladder = Ladder.from_site(site, f.id)
        fb, tw = sum(f.forebay_range) / 2, sum(f.tailwater_range) / 2
        rec = ladder.recommend(fb, tw)
        p = rec.profile
        levels = {pool.id: pool.water_level_m for pool in p.pools}
        for t in site_tags(site):
            if t.fishway_id != f.id:
                continue
            if t.role == "forebay":
                mid[t.name] = fb
            elif t.role == "tailwater":
                mid[t.name] = tw
            elif t.role in ("pool", "pool_b"):
                mid[t.name] = levels[t.pool_id]
            elif t.role == "setting":
                mid[t.name] = rec.settings[t.setting]
            elif t.role == "aux_flow":
                mid[t.name] = next(a.flow_m3s for a in p.aux if a.id == t.actuator)
    rng = np.random.default_rng(2026)
    tags = [t for t in site_tags(site) if t.name not in SKIPPED]
    assert len(tags) == 30, len(tags)
    t0 = time.perf_counter()
    written = 0
    minutes = int((END - START).total_seconds() // 60) + 1
    step = BATCH_DAYS * 1440
    for tag in tags:
        for i in range(0, minutes, step):
            k = np.arange(i, min(i + step, minutes))
            t_s = k * 60.0
            values = _series(tag, t_s, mid, rng)
            if tag.role == "setting" and tag.setting.endswith("_pumps"):
                values = np.round(values)
            epoch = (START.timestamp() + t_s).astype("int64").tolist()
            written += store_batch(engine, list(zip([ids[tag.name]] * k.size, epoch,
                                                    values.tolist(), [1] * k.size,
                                                    strict=True)))
        print(f"  {tag.name}: done ({written:,} readings, {time.perf_counter() - t0:.0f} s)",
              flush=True)
    engine.dispose()
    return time.perf_counter() - t0, written


# -- recording and replaying the SQL a call makes ----------------------------------------------
class Recorder:
    """The SQL statements sent to the database while a call runs, from SQLite's statement trace
    (``set_trace_callback``) on every pooled connection: it sees what goes through SQLAlchemy
    and what goes straight to the DBAPI cursor alike, with the parameters bound in."""

    _SKIP = ("BEGIN", "COMMIT", "ROLLBACK", "PRAGMA", "SAVEPOINT", "RELEASE")

    def __init__(self, engine):
        from sqlalchemy import event

        self.statements: list[tuple[str, tuple]] = []
        self.on = False
        event.listen(engine, "connect", self._attach)
        engine.dispose()  # every connection from now on is a new one, traced

    def _attach(self, dbapi_connection, _record) -> None:
        dbapi_connection.set_trace_callback(self._record)

    def _record(self, statement: str) -> None:
        if self.on and not statement.lstrip().upper().startswith(self._SKIP):
            self.statements.append((statement, ()))

    def record(self, fn):
        self.statements = []
        self.on = True
        try:
            fn()
        finally:
            self.on = False
        return list(self.statements)


def bare_time(path: Path, statements: list[tuple[str, tuple]], runs: int) -> float:
    """Median time [s] of running ``statements`` with bare sqlite3 (fetching every row)."""
    con = sqlite3.connect(path, isolation_level=None)
    con.execute("PRAGMA cache_size=-65536")  # as db.engine's connections
    times = []
    for _ in range(runs + 2):
        t = time.perf_counter()
        for sql, params in statements:
            con.execute(sql, params).fetchall()
        times.append(time.perf_counter() - t)
    con.close()
    return statistics.median(times[2:])


def timed(fn, runs: int, before=None) -> float:
    times = []
    for _ in range(runs + 2):
        if before is not None:
            before()
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times[2:])


def paired_times(path: Path, statements: list[tuple[str, tuple]], fn, runs: int,
                 before=None) -> tuple[float, float]:
    """Median times [s] of ``fn`` and of its bare statements, taken in alternation (one of
    each per round), so a slow spell of the machine weighs on both alike."""
    con = sqlite3.connect(path, isolation_level=None)
    con.execute("PRAGMA cache_size=-65536")  # as db.engine's connections
    ours, bare = [], []
    for _ in range(runs + 5):
        if before is not None:
            before()
        t = time.perf_counter()
        fn()
        ours.append(time.perf_counter() - t)
        t = time.perf_counter()
        for sql, params in statements:
            con.execute(sql, params).fetchall()
        bare.append(time.perf_counter() - t)
    con.close()
    return statistics.median(ours[5:]), statistics.median(bare[5:])


def _ids(layout, kind):
    found = []

    def walk(node):
        if isinstance(node, list | tuple):
            for n in node:
                walk(n)
            return
        node_id = getattr(node, "id", None)
        if isinstance(node_id, dict) and node_id.get("type") == kind:
            found.append(node_id)
        walk(getattr(node, "children", None) or [])

    walk(layout)
    return found


# -- 2 and 3. callbacks against their bare queries ---------------------------------------------
def bench_callbacks(path: Path, app, engine, runs: int) -> None:
    from dashboard.context import current
    from dashboard.figures.overview import clear_outputs, refresh_outputs
    from dashboard.services import overview as service
    from db.status import update_status
    from db.status.cache import clear_caches
    from db.trends import trend

    page = sys.modules["pages.overview"]
    server = app.server
    recorder = Recorder(engine)
    app_ctx = current()

    import flask

    request = server.test_request_context("/")  # one signed-in request for every call, as
    request.push()  # Dash runs a callback inside the request that posted it
    flask.session["user"] = {"name": "load1", "role": "viewer"}
    layout = page.layout()
    items, rows = _ids(layout, page.OVERVIEW_ITEM), _ids(layout, page.OVERVIEW_ROW)
    styles = _ids(layout, page.OVERVIEW_STYLE)

    def refresh():
        return page.refresh(1, items, rows, styles)

    def status_cycle():  # the ingest's work per cycle, solves from scratch
        clear_caches()
        update_status(app_ctx.site, engine, NOW)

    status_cycle()
    cycle = timed(status_cycle, max(5, runs // 3))
    refresh()  # the catalogue and pool warm, as in steady operation
    statements = recorder.record(refresh)
    fast = max(runs, 1000)  # sub-millisecond calls: many rounds for a steady median
    new, bare = paired_times(path, statements, refresh, fast, clear_outputs)
    same, bare_same = paired_times(path, statements, refresh, fast)
    read = timed(lambda: service.snapshot(app_ctx.site, engine, NOW), fast)
    snap = service.snapshot(app_ctx.site, engine, NOW)
    keys = (tuple(i["key"] for i in items), [i["key"] for i in rows],
            [i["key"] for i in styles])

    def outputs():
        clear_outputs()
        refresh_outputs(snap, *keys)

    build = timed(outputs, fast)
    print("\nOverview refresh callback (two fishways, 35 tags, a year of data)")
    print(f"  the ingest's status per cycle (judge with cold solves, store): {cycle * 1e3:.1f} "
          f"ms = {cycle / 10.0 * 100:.2f} % of the 10 s poll")
    print(f"  SQL statements per refresh: {len(statements)}; bare sqlite3 of them "
          f"{bare * 1e3:.3f} ms (median of {fast} rounds, each timed beside the callback)")
    print(f"  callback, a new status (outputs built): {new * 1e3:.3f} ms, ratio "
          f"{new / bare:.2f} (target ≤ {TARGET_RATIO:g}: "
          f"{'met' if new / bare <= TARGET_RATIO else 'NOT met'})")
    print(f"  callback, the same status (kept outputs, clock texts renewed): {same * 1e3:.3f} "
          f"ms against {bare_same * 1e3:.3f} ms bare, ratio {same / bare_same:.2f}")
    print(f"  where the time goes (each alone): reading the status and the alarm counts "
          f"{read * 1e3:.3f} ms; building the texts, classes and bullet styles "
          f"{build * 1e3:.3f} ms")

    trends_page = sys.modules.get("pages.trends")
    with engine.connect() as conn:
        tag = conn.exec_driver_sql(
            "SELECT id FROM tags WHERE name = 'east.forebay_level'").scalar()
    if trends_page is not None and hasattr(trends_page, "draw"):
        trends_page.now_utc = lambda: NOW
        width = 1500 + getattr(trends_page, "PLOT_MARGIN_PX", 0)

        def draw():
            return trends_page.draw(width, ["east.forebay_level"], "1y", None, None)

        draw()
        st = recorder.record(draw)
        cb = timed(draw, runs)
        bare = bare_time(path, st, runs)
        print(f"\nYear-long trend callback (pages/trends.py draw, one tag, {width} px chart, "
              f"{trends_page.columns_for(width)} M4 columns)")
        print(f"  SQL statements: {len(st)}; callback {cb * 1e3:.2f} ms, bare sqlite3 "
              f"{bare * 1e3:.2f} ms, ratio {cb / bare:.2f} (target ≤ {TARGET_RATIO:g}: "
              f"{'met' if cb / bare <= TARGET_RATIO else 'NOT met'})")
    else:
        print("\nYear-long trend callback: the trends page has no draw callback in this tree")

    def year_trend():
        return trend(engine, tag, NOW - timedelta(days=365), NOW, width_px=1500)

    year_trend()
    st = recorder.record(year_trend)
    cb = timed(year_trend, runs)
    bare = bare_time(path, st, runs)
    n = len(year_trend())
    print(f"\ndb.trends.trend, one tag, a year, width_px=1500 ({n} points returned)")
    print(f"  SQL statements: {len(st)}; call {cb * 1e3:.2f} ms, bare sqlite3 "
          f"{bare * 1e3:.2f} ms, ratio {cb / bare:.2f} (target ≤ {TARGET_RATIO:g}: "
          f"{'met' if cb / bare <= TARGET_RATIO else 'NOT met'})")
    request.pop()


# -- 4. load run ----------------------------------------------------------------------------------
def refresh_body(base: str, opener, layout_ids: dict[str, list[dict]]) -> dict:
    """The request the browser posts when the overview's refresh interval fires."""
    deps = json.loads(opener.open(f"{base}/_dash-dependencies").read())
    dep = next(d for d in deps if any(i["id"] == "overview-refresh" for i in d["inputs"]))
    items, rows, styles = (layout_ids[k] for k in ("item", "row", "style"))

    def outs(ids, prop):
        return [{"id": i, "property": prop} for i in ids]

    def states(ids):
        return [{"id": i, "property": "id", "value": i} for i in ids]

    return {"output": dep["output"],
            "outputs": [outs(items, "children"), outs(items, "className"),
                        outs(rows, "className"), outs(styles, "style")],
            "inputs": [{"id": "overview-refresh", "property": "n_intervals", "value": 1}],
            "changedPropIds": ["overview-refresh.n_intervals"],
            "state": [states(items), states(rows), states(styles)]}


def signed_in_opener(base: str):
    opener = urllib.request.build_opener(urllib.request.HTTPCookieProcessor(CookieJar()))
    page = opener.open(f"{base}/login").read().decode()
    csrf = re.search(r'name="csrf" value="([^"]+)"', page).group(1)
    form = urllib.parse.urlencode({"name": LOAD_USER[0], "password": LOAD_USER[1],
                                   "csrf": csrf, "next": "/"}).encode()
    opener.open(f"{base}/login", data=form).read()
    return opener


class _QueueDepth(logging.Handler):
    """Keeps the deepest request queue waitress reported (it logs each time all its threads
    are busy and requests wait)."""

    def __init__(self) -> None:
        super().__init__()
        self.deepest = 0
        self.reports = 0

    def emit(self, record: logging.LogRecord) -> None:
        m = re.search(r"depth is (\d+)", record.getMessage())
        if m:
            self.reports += 1
            self.deepest = max(self.deepest, int(m.group(1)))


def load_run(app, layout_ids: dict[str, list[dict]], seconds: float, app_ctx_engine) -> None:
    from dashboard.commands import serve_in_background

    queue = _QueueDepth()
    log = logging.getLogger("waitress.queue")
    log.addHandler(queue)
    log.propagate = False

    server = serve_in_background(app, threads=8)  # as fishway dashboard
    port = server.effective_port
    base = f"http://127.0.0.1:{port}"
    results: list[tuple[bool, float]] = []
    lock = threading.Lock()
    failures: list[str] = []
    template = json.dumps(refresh_body(base, signed_in_opener(base), layout_ids))
    ready = threading.Barrier(CLIENTS + 1)
    ends: list[float] = []

    def client(k: int) -> None:
        try:
            opener = signed_in_opener(base)
            opener.open(f"{base}/").read()  # the page shell, as a browser loads it
        except Exception as exc:
            with lock:
                failures.append(f"client {k} sign-in: {exc}")
            ready.wait()
            return
        ready.wait()  # all signed in: the refreshes start together (staggered below)
        end = ends[0]
        body = json.loads(template)
        nxt = time.monotonic() + random.uniform(0.0, CLIENT_PERIOD_S)
        n = 0
        while True:
            time.sleep(max(0.0, nxt - time.monotonic()))
            if time.monotonic() >= end:
                return
            n += 1
            body["inputs"][0]["value"] = n
            req = urllib.request.Request(f"{base}/_dash-update-component",
                                         data=json.dumps(body).encode(),
                                         headers={"Content-Type": "application/json"})
            t = time.perf_counter()
            try:
                with opener.open(req, timeout=30) as r:
                    data = r.read()
                ok = r.status == 200 and b'"response"' in data
            except Exception as exc:
                ok = False
                with lock:
                    failures.append(f"client {k}: {exc}")
            with lock:
                results.append((ok, time.perf_counter() - t))
            nxt += CLIENT_PERIOD_S

    cycles: list[float] = []
    stop_writer = threading.Event()

    def writer() -> None:  # stands in for the ingest: a new status every poll
        from dashboard.context import current
        from dashboard.figures.overview import clear_outputs
        from db.status import update_status
        from db.status.cache import clear_caches

        site = current().site
        while not stop_writer.wait(10.0):
            t = time.perf_counter()
            try:
                clear_caches()
                update_status(site, app_ctx_engine, NOW)
                clear_outputs()
            except Exception as exc:
                with lock:
                    failures.append(f"status writer: {exc}")
            cycles.append(time.perf_counter() - t)

    threads = [threading.Thread(target=client, args=(k,)) for k in range(CLIENTS)]
    for th in threads:
        th.start()
    writer_thread = threading.Thread(target=writer, daemon=True)
    writer_thread.start()
    t_sign = time.monotonic()
    ends.append(time.monotonic() + 3600.0)  # replaced below, once everyone is signed in
    while ready.n_waiting < CLIENTS and any(th.is_alive() for th in threads):
        time.sleep(0.01)
    sign_in_s = time.monotonic() - t_sign
    during_sign_in = (queue.reports, queue.deepest)
    queue.reports = queue.deepest = 0
    t0 = time.monotonic()
    ends[0] = t0 + seconds + CLIENT_PERIOD_S
    ready.wait()
    for th in threads:
        th.join()
    stop_writer.set()
    writer_thread.join()
    wall = time.monotonic() - t0
    server.close()
    lat = sorted(x for _, x in results)
    errors = sum(1 for ok, _ in results if not ok) + len([f for f in failures
                                                          if "sign-in" in f])
    print(f"\nLoad run: {CLIENTS} clients, overview refresh every {CLIENT_PERIOD_S:g} s, "
          f"{seconds:g} s (+ up to {CLIENT_PERIOD_S:g} s start stagger), waitress 8 threads")
    print(f"  sign-in of the {CLIENTS} clients (scrypt, page shell): {sign_in_s:.1f} s; "
          f"waitress queue then: {during_sign_in[0]} reports of all threads busy, deepest "
          f"{during_sign_in[1]} waiting")
    print(f"  status writer: {len(cycles)} new statuses stored"
          + (f", {statistics.median(cycles) * 1e3:.0f} ms each (median)" if cycles else ""))
    print(f"  refreshes: requests {len(results)}, errors {errors}, wall {wall:.0f} s; waitress "
          f"queue: {queue.reports} reports of all threads busy, deepest {queue.deepest} "
          "waiting")
    if lat:
        p95 = lat[min(len(lat) - 1, int(np.ceil(0.95 * len(lat))) - 1)]
        print(f"  latency median {statistics.median(lat) * 1e3:.1f} ms, 95th percentile "
              f"{p95 * 1e3:.1f} ms, max {lat[-1] * 1e3:.1f} ms")
    for f in failures[:5]:
        print(f"  failure: {f}")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=60.0,
                        help="length of the load run [s] (default 60)")
    parser.add_argument("--minutes", type=float, help="length of the load run [min]")
    parser.add_argument("--database", type=Path, help="keep the database in this file and "
                        "reuse it when it exists")
    parser.add_argument("--runs", type=int, default=30, help="timed repetitions (median)")
    args = parser.parse_args(argv)
    seconds = args.minutes * 60.0 if args.minutes is not None else args.seconds
    os.environ["FISHWAY_INSECURE_COOKIES"] = "1"  # plain-http loopback test bench

    from dashboard.app import create_app
    from dashboard.services import overview as service
    from db.engine import make_engine
    from db.migrate import upgrade
    from ops_logic.site import load_site

    load = os.getloadavg() if hasattr(os, "getloadavg") else (float("nan"),) * 3
    print(f"Machine: {os.cpu_count()} cores, load average {load[0]:.1f} at the start "
          "(other work on the machine makes every figure noisier)")
    with tempfile.TemporaryDirectory(prefix="fishway-bench-dash-") as tmp:
        path = args.database or Path(tmp) / "year.sqlite"
        if path.exists():
            print(f"Database: reusing {path}")
        else:
            print(f"Database: a year of one-minute readings for 30 tags into {path}")
            took, n = build_database(path)
            print(f"  {n:,} readings through store_batch in {took:.0f} s "
                  f"({n / took / 1e6:.2f} million a second), rollups included")
        with sqlite3.connect(path) as con:
            n = con.execute("SELECT count(*) FROM readings").fetchone()[0]
        print(f"  {n:,} readings, {path.stat().st_size / 1e6:.0f} MB")
        site = load_site()
        engine = make_engine(sqlite_path=path)
        upgrade(engine)  # a kept file from an older tree gets the newer tables
        app = create_app(site, engine, secret_key="bench")
        service.now = lambda: NOW
        bench_callbacks(path, app, engine, args.runs)
        page = sys.modules["pages.overview"]
        with app.server.test_request_context("/"):
            import flask

            flask.session["user"] = {"name": "load1", "role": "viewer"}
            layout = page.layout()
        ids = {"item": _ids(layout, page.OVERVIEW_ITEM), "row": _ids(layout, page.OVERVIEW_ROW),
               "style": _ids(layout, page.OVERVIEW_STYLE)}
        load_run(app, ids, seconds, engine)
        engine.dispose()
    return 0


if __name__ == "__main__":
    sys.exit(main())
