"""``fishway ingest``: run the ingest service of a site (one process per site).

``fishway ingest [SITE] [--database URL] [--once] [--speed N]``

SITE is optional (the shipped demo site when omitted). The database is migrated
(:func:`db.migrate.upgrade`) and the site's tag catalogue synced (:func:`db.site_sync.sync_site`)
first; then the feeds of the site's ``[ingest]`` section are built
(:func:`db.feeds.registry.build_feeds`; a ``simulated`` feed is a simulated plant of the site
with the demo scenario, starting now; the ``simulator`` package is imported only then) and
the :class:`~db.ingest.service.IngestService` runs on APScheduler
(:mod:`db.ingest.schedule`) until Ctrl-C or SIGTERM, which stop it cleanly (running jobs
finish, feeds are closed). A one-line status goes to stderr every minute. The dashboard runs
in other processes reading the same database.

``--once``: one cycle (a poll of every feed, the recommenders, then the upkeep a cron job
needs: prune, partitions, and the day's backup if it is missing) and exit; a summary line
goes to stdout. ``--speed N``: simulated seconds per real second (simulated feeds only).

Exit status: 0 success (with ``--once``: every feed polled); 1 an internal error, or with
``--once`` a feed or store failure (one line per failure on stderr); 2 bad input (a site
file, an option: one line per problem).
"""
from __future__ import annotations

import argparse
import contextlib
import signal
import sys
import threading
import time
from collections.abc import Callable, Iterator
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Engine

from db.engine import make_engine
from db.feeds.registry import build_feeds
from db.ingest.schedule import ScaledClock, build_scheduler
from db.ingest.service import IngestService
from db.ingest.upkeep import sqlite_file
from db.migrate import upgrade
from db.site_sync import sync_site
from ops_logic.cli import InputError
from ops_logic.site import Feed as FeedConfig
from ops_logic.site import Site, demo_site_path, load_site

__all__ = ["MAX_SPEED", "STATUS_EVERY_S", "register", "run_until_stopped",
           "simulated_factory", "site_evaluators", "status_line", "stop_on_signals"]

MAX_SPEED = 100_000.0
STATUS_EVERY_S = 60.0


def simulated_factory(start: datetime, *, seed: int = 0, plant: Any = None
                      ) -> Callable[[FeedConfig, Site], Any]:
    """``build_feeds``' factory for ``simulated`` feeds: the simulator's in-process feed on a
    plant of the site (``plant``, or a new one from ``start`` with the demo scenario). The
    simulator is imported when the factory is called, not before."""

    def factory(cfg: FeedConfig, site: Site) -> Any:
        from simulator.feed import SimulatedFeed
        from simulator.plant import Plant
        from simulator.scenario import demo_scenario

        nonlocal plant
        if plant is None:
            plant = Plant(site, start=start, seed=seed, scenario=demo_scenario(start, site))
        return SimulatedFeed(plant, cfg.id)

    return factory


def engine_for(url: str | None) -> Engine:
    """The engine of ``--database URL`` (a bad URL is bad input)."""
    try:
        return make_engine(url)
    except (sa.exc.ArgumentError, sa.exc.NoSuchModuleError) as exc:
        raise InputError(f"--database: cannot use {url!r}: {exc}") from None


def status_line(service: IngestService, now: datetime) -> str:
    """One line: time, stored counts, each feed's health, each fishway's last recommendation."""
    t = service.totals
    parts = [f"{now:%Y-%m-%d %H:%M:%S}Z", f"{t['stored']:,} readings stored"
             + (f" ({t['backfilled']:,} backfilled)" if t["backfilled"] else "")]
    for fid, s in service.states.items():
        if s.ok is None:
            parts.append(f"feed {fid}: not polled yet")
        elif s.ok:
            lag = f", lag {s.lag_s:.1f} s" if s.lag_s is not None else ""
            parts.append(f"feed {fid}: ok, {s.readings_per_min or 0:.0f}/min{lag}")
        else:
            parts.append(f"feed {fid}: FAILING ({s.last_error})")
    for fid, rec in service.latest_recommendations.items():
        parts.append(f"{fid}: {'feasible' if rec.feasible else 'INFEASIBLE'} "
                     f"(binding {rec.binding})")
    if t["skipped"]:
        parts.append(f"{t['skipped']} recommender cycle(s) without usable inputs")
    if t.get("not_operating"):
        parts.append(f"{t['not_operating']} cycle(s) of fishways not operating (no advice)")
    return " | ".join(parts)


@contextlib.contextmanager
def stop_on_signals(stop: threading.Event) -> Iterator[None]:
    """Set ``stop`` on SIGINT (Ctrl-C) and SIGTERM while inside (main thread only)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    old = {s: signal.signal(s, lambda *_: stop.set()) for s in (signal.SIGINT, signal.SIGTERM)}
    try:
        yield
    finally:
        for s, handler in old.items():
            signal.signal(s, handler)


def run_until_stopped(service: IngestService, *, speed: float = 1.0,
                      stop: threading.Event | None = None,
                      status: Callable[[str], None] | None = None,
                      status_every_s: float = STATUS_EVERY_S) -> None:
    """Run the service's jobs on APScheduler until ``stop`` is set (or a signal sets it)."""
    stop = stop or threading.Event()
    scheduler = build_scheduler(service, speed=speed)
    with stop_on_signals(stop):
        scheduler.start()
        try:
            next_status = time.monotonic() + status_every_s
            while not stop.wait(0.5):
                if status is not None and time.monotonic() >= next_status:
                    status(status_line(service, service.clock()))
                    next_status += status_every_s
        finally:
            scheduler.shutdown(wait=True)
            service.close()


def _check(args: argparse.Namespace, site: Site) -> None:
    problems = []
    if not 0.0 < args.speed <= MAX_SPEED:
        problems.append(f"--speed: {args.speed:g} is outside (0, {MAX_SPEED:g}]")
    elif args.speed != 1.0:
        real = [f.id for f in site.ingest.feeds if f.type != "simulated"]
        if real:
            problems.append(f"--speed: feed(s) {', '.join(real)} are not simulated: only a "
                            "simulated plant can run faster than real time")
    if problems:
        raise InputError(problems)


def _once(service: IngestService, now: datetime) -> int:
    poll, outcomes = service.run_once(now)
    service.prune_once(now)
    service.partitions_once(now)
    path = sqlite_file(service.engine)
    if path is not None:
        folder = service.backup_dir or path.parent / "backups"
        if not (folder / f"fishway-{now:%Y%m%d}.sqlite").exists():
            service.backup_once(now)
    recs = ", ".join(f"{o.fishway_id} " + ("stored" if o.recommendation_id else "none" if
                                           o.failed else o.mode.replace("_", " "))
                     for o in outcomes)
    print(f"fishway ingest: {service.site.site.name}: {poll.stored:,} new reading(s) "
          f"({poll.backfilled:,} backfilled, {poll.reflagged} re-flagged); "
          f"recommendations: {recs}")
    for o in outcomes:
        if o.skipped and o.failed:  # a fishway in maintenance is no problem to report
            print(f"fishway ingest: {o.skipped}", file=sys.stderr)
    for feed_id, error in poll.errors.items():
        print(f"fishway ingest: feed {feed_id}: {error}", file=sys.stderr)
    return 1 if poll.errors else 0


def _ingest(args: argparse.Namespace) -> int:
    site_path = Path(args.site) if args.site else demo_site_path()
    site = load_site(site_path)
    _check(args, site)
    engine = engine_for(args.database)
    service = None
    try:
        upgrade(engine)
        tag_ids = sync_site(engine, site)
        start = datetime.now(UTC).replace(microsecond=0)
        clock = ScaledClock(start, args.speed) if args.speed != 1.0 else (
            lambda: datetime.now(UTC))
        feeds = build_feeds(site, simulated_factory=simulated_factory(start),
                            base_dir=site_path.parent)
        service = IngestService(site, engine, feeds, clock=clock, tag_ids=tag_ids,
                                evaluators=site_evaluators(engine, site))
        if args.once:
            return _once(service, clock())
        print(f"fishway ingest: {site.site.name} into {engine.url.render_as_string()} "
              f"(speed ×{args.speed:g}); Ctrl-C or SIGTERM stops", file=sys.stderr, flush=True)
        run_until_stopped(service, speed=args.speed,
                          status=lambda line: print(line, file=sys.stderr, flush=True))
        print("fishway ingest: stopped", file=sys.stderr)
        return 0
    finally:
        if service is not None and args.once:
            service.close()
        engine.dispose()


def site_evaluators(engine: Any, site: Site) -> tuple:
    """The hooks a running ingest calls after each cycle, in order: the alarm evaluation, then
    the fishway status (so the status sees the same readings as the alarms)."""
    from db.alarm.evaluator import alarm_evaluator  # heavy: imported only here
    from db.status import status_evaluator

    return alarm_evaluator(engine, site), status_evaluator(site, engine)


def register(subparsers: Any, common: argparse.ArgumentParser) -> None:
    """Add ``ingest``; its handler returns the exit status."""
    p = subparsers.add_parser(
        "ingest", parents=[common], help="run the ingest service of a site (poll, QC, store, "
        "recommend)",
        description="Poll the site's feeds, quality-check (QARTOD) and store every reading, "
        "run the recommender of each fishway and keep the database (retention, partitions, "
        "nightly SQLite backup), until Ctrl-C or SIGTERM. One ingest process per site; the "
        "dashboard reads the same database.")
    p.add_argument("site", nargs="?", metavar="SITE", help="site file (TOML; default: the "
                   "demo site)")
    p.add_argument("--database", metavar="URL", help="SQLAlchemy URL of the database "
                   "(default: $FISHWAY_DATABASE_URL or var/fishway.sqlite)")
    p.add_argument("--once", action="store_true", help="one cycle (poll, recommend, upkeep), "
                   "then exit (for cron and tests)")
    p.add_argument("--speed", type=float, default=1.0, metavar="N",
                   help="simulated seconds per real second (simulated feeds only; default 1)")
    p.set_defaults(handler=_ingest)
