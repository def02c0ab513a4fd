"""``fishway alarms``: alarm history and alarm-system performance from the database.

:func:`register` adds the commands to the top command line (:mod:`dashboard.cli`).

``fishway alarms history [SITE] --from ISO --to ISO [--fishway ID] [--priority P] [--rule R]
[--state S] [-o FILE.csv] [--database URL]`` lists the alarm events of ``[from, to)``
(:func:`db.alarm.history.alarm_history_frame`), filtered by fishway (site-file id), priority
(``high``/``medium``/``low`` or 1/2/3), rule (a rule name of :mod:`ops_logic.alarms.config`)
and the state after the event (an ISA-18.2 state, :data:`db.models.ALARM_STATES`). Without
``-o`` a table goes to stdout; with ``-o FILE.csv`` every column is written as CSV (times ISO
8601 UTC) and a summary line is printed.

``fishway alarms performance [SITE] --from ISO --to ISO [--fishway ID] [--json]
[--database URL]`` prints the EEMUA 191 / ISA-18.2 performance figures of the period
(:func:`db.alarm.history.alarm_performance_report`), each beside the standard's target; with
``--json`` the figures as one JSON object.

Times are ISO 8601 (``2026-07-01``, ``2026-07-01T06:00``, ``2026-07-01T06:00+00:00``); a
time without a UTC offset is in the site's time zone. ``SITE`` defaults to the shipped demo
site; ``--database`` to :func:`db.engine.make_engine`'s default. Exit status 0; 2 for bad input
(one line per problem naming the option and the reason, or a database not at the newest
schema); 1 for an internal error.
"""
from __future__ import annotations

import argparse
import json
import math
from dataclasses import asdict
from datetime import datetime
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo

import pandas as pd
import sqlalchemy as sa
from sqlalchemy.engine import Engine

from db.alarm.history import alarm_history_frame, alarm_performance_report, priority_name
from db.engine import make_engine
from db.migrate import current_revision, head_revision
from db.models import ALARM_STATES
from ops_logic.alarms.config import RULE_NAMES
from ops_logic.alarms.performance import to_csv
from ops_logic.cli import InputError
from ops_logic.site import Site, load_site

__all__ = ["parse_time", "register"]

DB_HELP = "SQLAlchemy URL of the database (default: $FISHWAY_DATABASE_URL or var/fishway.sqlite)"


def parse_time(text: str, time_zone: str, option: str) -> datetime:
    """An ISO 8601 time; without an offset it is in ``time_zone``.

    >>> parse_time("2026-07-01T06:00", "Etc/GMT+8", "--from").isoformat()
    '2026-07-01T06:00:00-08:00'
    >>> parse_time("yesterday", "UTC", "--from")
    Traceback (most recent call last):
    ...
    ops_logic.cli.InputError: --from: not an ISO 8601 time: 'yesterday'
    """
    try:
        t = datetime.fromisoformat(text.strip())
    except ValueError:
        raise InputError(f"{option}: not an ISO 8601 time: {text!r}") from None
    return t.replace(tzinfo=ZoneInfo(time_zone)) if t.tzinfo is None else t


def _period(args: argparse.Namespace, site: Site) -> tuple[datetime, datetime]:
    problems, times = [], []
    for option, text in (("--from", args.start), ("--to", args.end)):
        try:
            times.append(parse_time(text, site.site.time_zone, option))
        except InputError as exc:
            problems += exc.problems
    if not problems and not times[0] < times[1]:
        problems.append(f"--to: {args.end} is not after --from {args.start}")
    if problems:
        raise InputError(problems)
    return times[0], times[1]


def _filters(args: argparse.Namespace, site: Site) -> dict[str, Any]:
    problems: list[str] = []
    out: dict[str, Any] = {}
    ids = [f.id for f in site.fishways]
    if args.fishway is not None:
        if args.fishway not in ids:
            problems.append(f"--fishway: no fishway {args.fishway!r} at {site.site.name} "
                            f"(have: {', '.join(ids)})")
        out["fishway"] = args.fishway
    if getattr(args, "priority", None) is not None:
        try:
            out["priority"] = priority_name(args.priority)
        except ValueError as exc:
            problems.append(f"--priority: {exc}")
    if getattr(args, "rule", None) is not None:
        if args.rule not in RULE_NAMES:
            problems.append(f"--rule: unknown alarm rule {args.rule!r} (rules: "
                            f"{', '.join(RULE_NAMES)})")
        out["rule"] = args.rule
    if getattr(args, "state", None) is not None:
        if args.state not in ALARM_STATES:
            problems.append(f"--state: unknown alarm state {args.state!r} (states: "
                            f"{', '.join(ALARM_STATES)})")
        out["state"] = args.state
    if problems:
        raise InputError(problems)
    return out


def _inputs(args: argparse.Namespace, site: Site
            ) -> tuple[datetime, datetime, dict[str, Any]]:
    """The period and the filters; every problem of both in one :class:`InputError`."""
    problems: list[str] = []
    period: tuple[datetime, datetime] | None = None
    filters: dict[str, Any] = {}
    try:
        period = _period(args, site)
    except InputError as exc:
        problems += exc.problems
    try:
        filters = _filters(args, site)
    except InputError as exc:
        problems += exc.problems
    if problems or period is None:
        raise InputError(problems)
    return period[0], period[1], filters


def _engine(url: str | None) -> Engine:
    try:
        engine = make_engine(url)
    except (sa.exc.ArgumentError, sa.exc.NoSuchModuleError) as exc:
        raise InputError(f"--database: cannot use {url!r}: {exc}") from None
    revision = current_revision(engine)
    if revision != head_revision():
        where = f"--database {url}" if url else f"the default database ({engine.url})"
        engine.dispose()
        raise InputError(f"{where} is at schema revision {revision or 'none (empty)'}, not "
                         f"{head_revision()}: run 'fishway db upgrade' first")
    return engine


def _cell(v: object) -> str:
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return ""
    if isinstance(v, float):
        return f"{v:.4g}"
    return str(v)


def _history(args: argparse.Namespace) -> int:
    site = load_site(args.site)
    start, end, filters = _inputs(args, site)
    engine = _engine(args.database)
    try:
        frame = alarm_history_frame(engine, start, end, **filters)
    finally:
        engine.dispose()
    if args.output:
        path = Path(args.output)
        try:
            to_csv(frame, path)
        except OSError as exc:
            raise InputError(f"-o: cannot write {path} ({exc.strerror or exc})") from None
        print(f"{len(frame)} alarm event(s) from {start.isoformat()} to {end.isoformat()} "
              f"written to {path}")
        return 0
    columns = ["key", "kind", "state", "priority", "value", "who", "why"]
    rows = [[ts.strftime("%Y-%m-%d %H:%M:%SZ"), *(_cell(r[c]) for c in columns)]
            for ts, r in zip(frame.index, frame.to_dict("records"), strict=True)]
    head = ["time (UTC)", *columns]
    widths = [max([len(h)] + [len(r[i]) for r in rows]) for i, h in enumerate(head[:-1])]
    for line in [head, *rows]:
        print("  ".join(c.ljust(w) for c, w in zip(line[:-1], widths, strict=True))
              + "  " + line[-1])
    print(f"{len(frame)} alarm event(s)")
    return 0


def _json_value(v: object) -> object:
    if isinstance(v, pd.Timestamp | datetime):
        return v.isoformat()
    if isinstance(v, tuple | list):
        return [_json_value(x) for x in v]
    if isinstance(v, float) and not math.isfinite(v):
        return None
    return v


def _performance(args: argparse.Namespace) -> int:
    site = load_site(args.site)
    start, end, filters = _inputs(args, site)
    engine = _engine(args.database)
    try:
        perf, table = alarm_performance_report(engine, start, end, **filters)
    finally:
        engine.dispose()
    if args.json:
        out = {k: _json_value(v) for k, v in asdict(perf).items()}
        out["figures"] = [{k: _json_value(v) for k, v in row.items()}
                          for row in table.to_dict("records")]
        print(json.dumps(out, indent=2, ensure_ascii=False))
        return 0
    where = f", fishway {args.fishway}" if args.fishway else ""
    print(f"Alarm performance at {site.site.name}{where}: {perf.start:%Y-%m-%d %H:%M} to "
          f"{perf.end:%Y-%m-%d %H:%M} UTC, {perf.periods} ten-minute periods, "
          f"{perf.annunciations} alarm(s) annunciated")
    rows = [[str(r["figure"]), _cell(r["value"]), str(r["target"]),
             "" if r["meets"] is None else ("yes" if r["meets"] else "NO")]
            for r in table.to_dict("records")]
    head = ["figure", "value", "target (EEMUA 191 / ISA-18.2)", "meets"]
    widths = [max([len(h)] + [len(r[i]) for r in rows]) for i, h in enumerate(head)]
    for line in [head, *rows]:
        print("  ".join(c.ljust(w) for c, w in zip(line, widths, strict=True)).rstrip())
    if perf.top10:
        print("most frequent: " + ", ".join(f"{k} ({n})" for k, n in perf.top10))
    for label, keys in (("chattering", perf.chattering), ("stale", perf.stale)):
        if keys:
            print(f"{label}: {', '.join(keys)}")
    return 0


def register(subparsers: Any, common: argparse.ArgumentParser) -> None:
    """Add ``fishway alarms history`` and ``fishway alarms performance``."""
    p = subparsers.add_parser("alarms", parents=[common], help="alarm history and alarm-"
                              "system performance from the database",
                              description="Alarm history and alarm-system performance.")
    actions = p.add_subparsers(dest="alarms_action", metavar="ACTION", required=True)

    def period(q: argparse.ArgumentParser) -> None:
        q.add_argument("site", nargs="?", metavar="SITE",
                       help="site file (default: the shipped demo site)")
        q.add_argument("--from", dest="start", required=True, metavar="ISO",
                       help="start of the period (ISO 8601; without an offset: site time)")
        q.add_argument("--to", dest="end", required=True, metavar="ISO",
                       help="end of the period (exclusive)")
        q.add_argument("--fishway", metavar="ID", help="one fishway (site-file id)")
        q.add_argument("--database", metavar="URL", help=DB_HELP)

    h = actions.add_parser("history", parents=[common], help="list or export alarm events",
                           description="Alarm events of a period, oldest first, as a table or "
                           "as CSV (-o).")
    period(h)
    h.add_argument("--priority", metavar="P", help="high, medium, low (or 1, 2, 3)")
    h.add_argument("--rule", metavar="R", help="one alarm rule, e.g. do_low")
    h.add_argument("--state", metavar="S", help="the state after the event, e.g. "
                   "unacknowledged")
    h.add_argument("-o", "--output", metavar="FILE.csv", help="write CSV to this file")
    h.set_defaults(handler=_history)

    q = actions.add_parser("performance", parents=[common],
                           help="alarm-system performance figures beside their targets",
                           description="EEMUA 191 / ISA-18.2 figures of a period: alarm rate "
                           "per 10 minutes, peak, time in flood, top 10, chattering and stale "
                           "alarms, priority split.")
    period(q)
    q.add_argument("--json", action="store_true", help="print the figures as JSON")
    q.set_defaults(handler=_performance)
