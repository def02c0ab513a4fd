"""The ``fishway`` command line: one entry point that gathers the sub-commands of every package.

Registration: each package that has commands keeps them in its own ``cli.py`` module exposing
``register(subparsers, common)``. It adds its sub-parsers with ``subparsers.add_parser(name,
parents=[common], ...)`` (``common`` carries ``--debug``) and gives each a handler with
``set_defaults(handler=func)``, where ``func(args) -> int`` returns the exit status (a command
whose positionals may come after its options declares ``set_defaults(extra_positionals=
"dest")`` and receives the left-over positionals in ``args.dest``). The modules
are listed in :data:`COMMAND_MODULES` in the order their commands appear in ``--help``; a
module that does not exist yet (``db.cli``, ``simulator.cli`` today) is skipped, but a module
that exists and fails to import is an error, not a silent omission. This module registers the
dashboard's own commands (``demo`` for now) last.

Exit status: 0 success; 2 bad input (a site file, a command-line value or an observations file:
one line per problem on stderr naming the file or option, the field and the reason); 1 an
internal error (a one-line message; the traceback only with ``--debug`` or ``FISHWAY_DEBUG=1``).
"""

from __future__ import annotations

import argparse
import importlib
import importlib.util
import os
import sys
import traceback
from collections.abc import Callable, Sequence
from typing import Any

from ops_logic.cli import InputError
from ops_logic.ladder import SettingError
from ops_logic.site import SiteConfigError, load_site

__all__ = ["COMMAND_MODULES", "build_parser", "main", "register"]

COMMAND_MODULES: tuple[str, ...] = ("ops_logic.cli", "db.cli", "db.ingest.cli",
                                     "db.alarm_cli", "simulator.cli")
"""Modules whose ``register(subparsers, common)`` adds sub-commands, in ``--help`` order."""


def _module(name: str) -> Any | None:
    try:
        if importlib.util.find_spec(name) is None:
            return None
    except ModuleNotFoundError:  # the parent package itself is absent
        return None
    return importlib.import_module(name)


def build_parser() -> argparse.ArgumentParser:
    """The top parser with every registered sub-command."""
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("--debug", action="store_true", default=argparse.SUPPRESS,
                        help="show the traceback of an internal error (or FISHWAY_DEBUG=1)")
    parser = argparse.ArgumentParser(
        prog="fishway", description="Operations tool for fish ladders: site files, hydraulic "
        "profiles, advisory setpoints, setpoint tables and calibration. Every recommendation "
        "is advisory.", epilog="Run 'fishway COMMAND --help' for the options of a command.")
    parser.add_argument("--debug", action="store_true",
                        help="show the traceback of an internal error (or FISHWAY_DEBUG=1)")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    for name in COMMAND_MODULES:
        module = _module(name)
        if module is not None:
            module.register(sub, common)
    register(sub, common)
    return parser


def _error(prog: str, lines: Sequence[str]) -> None:
    for line in lines:
        print(f"{prog}: {line}", file=sys.stderr)


def main(argv: Sequence[str] | None = None) -> int:
    """Run ``fishway`` with ``argv`` (default ``sys.argv[1:]``); return the exit status."""
    parser = build_parser()
    try:
        args, extra = parser.parse_known_args(argv)
        if extra:
            # argparse takes a positional in one chunk: ``calibrate SITE --fishway ID OBS.csv``
            # leaves OBS.csv over; a command that declares ``extra_positionals`` collects it
            target = getattr(args, "extra_positionals", None)
            if target is None or any(e.startswith("-") for e in extra):
                parser.error(f"unrecognized arguments: {' '.join(extra)}")
            getattr(args, target).extend(extra)
    except SystemExit as exc:  # --help (0) or a usage error (2, message already printed)
        return exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 2)
    prog = f"fishway {args.command}"
    debug = getattr(args, "debug", False) or os.environ.get("FISHWAY_DEBUG", "") not in (
        "", "0")
    try:
        return int(args.handler(args))
    except SiteConfigError as exc:
        _error(prog, [f"{exc.source}: {p}: {m}" if p else f"{exc.source}: {m}"
                      for p, m in exc.errors])
        return 2
    except InputError as exc:
        _error(prog, exc.problems)
        return 2
    except SettingError as exc:
        _error(prog, [str(exc)])
        return 2
    except BrokenPipeError:  # the reader went away (``fishway solve | head``): stop quietly
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 1
    except KeyboardInterrupt:
        print(f"{prog}: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:
        if debug:
            traceback.print_exc()
        first = str(exc).splitlines()[0] if str(exc) else ""
        print(f"{prog}: internal error: {type(exc).__name__}{': ' + first if first else ''}"
              + ("" if debug else " (run with --debug or FISHWAY_DEBUG=1 for the traceback)"),
              file=sys.stderr)
        return 1


# -- the dashboard's own commands ------------------------------------------------------------
DEMO_MAX_DAYS = 7.0
"""Most seeded days: the demo scenario (simulator.scenario.DEMO_DAYS) lasts 8 days."""
DEMO_FILE = "fishway-demo.sqlite"


DEMO_ACCOUNTS = (("demo-operator", "operator"), ("demo-supervisor", "supervisor"))
"""Accounts the demo creates, each with a fresh password printed at start."""


def _start_dashboard(site: Any, engine: Any, host: str, port: int) -> Callable[[], None]:
    """Serve the dashboard (waitress, in a background thread) on the demo's database, create
    the demo accounts with fresh passwords, print the address and the credentials; return the
    function that stops the server."""
    import secrets

    from dashboard.app import create_app
    from dashboard.auth import hash_password
    from dashboard.commands import serve_in_background
    from db.catalog import add_user, get_user

    lines = []
    for name, role in DEMO_ACCOUNTS:
        password = secrets.token_urlsafe(9)
        if get_user(engine, name) is None:
            from datetime import UTC, datetime

            add_user(engine, name, role, hash_password(password), now=datetime.now(UTC))
            lines.append(f"  {role:<10}  user {name}  password {password}")
    app = create_app(site, engine, secret_key=secrets.token_hex(32))
    server = serve_in_background(app, host, port, threads=8)
    print(f"fishway demo: dashboard at http://{host}:{port}/  (wall display: "
          f"http://{host}:{port}/wall, no sign-in)", flush=True)
    for line in lines:
        print(line, flush=True)
    return server.close


def _progress(total_days: float) -> Callable[[int, int | None, float], None]:
    shown = [-10]  # the last percentage printed

    def progress(done: int, total: int | None, elapsed: float) -> None:
        pct = min(int(100 * done / total), 100 if done >= total else 99) if total else 0
        if pct // 10 > shown[0] // 10 or (pct == 100 and shown[0] != 100):
            shown[0] = pct
            print(f"fishway demo: seeding {total_days:g} day(s): {min(pct, 100):3d}% "
                  f"({done:,} readings, {elapsed:.0f} s)", file=sys.stderr, flush=True)

    return progress


def _demo(args: argparse.Namespace) -> int:
    """Seed a demo database with simulated history, then run the plant and the ingest live."""
    import itertools
    from datetime import UTC, datetime, timedelta

    from db.engine import default_data_dir
    from db.feeds.registry import build_feeds
    from db.ingest.cli import engine_for, run_until_stopped, simulated_factory
    from db.ingest.seed import seed_history
    from db.ingest.service import IngestService
    from db.migrate import upgrade
    from db.site_sync import sync_site
    from simulator.history import generate_history
    from simulator.plant import Plant
    from simulator.scenario import demo_scenario

    if not 0.0 < args.days <= DEMO_MAX_DAYS:
        raise InputError(f"--days: {args.days:g} is outside (0, {DEMO_MAX_DAYS:g}]")
    site = load_site(None)
    if args.database:
        url = args.database
    else:  # a fresh file each time
        path = default_data_dir() / "demo" / DEMO_FILE
        path.parent.mkdir(parents=True, exist_ok=True)
        for old in (path, path.with_name(path.name + "-wal"), path.with_name(path.name + "-shm")):
            old.unlink(missing_ok=True)
        url = f"sqlite:///{path}"
    engine = engine_for(url)
    try:
        upgrade(engine)
        tag_ids = sync_site(engine, site)
        now = datetime.now(UTC).replace(microsecond=0)
        start = now - timedelta(days=args.days)
        plant = Plant(site, start=start, seed=args.seed, scenario=demo_scenario(start, site))
        feeds = build_feeds(site, simulated_factory=simulated_factory(start, plant=plant))
        from db.ingest.cli import site_evaluators

        service = IngestService(site, engine, feeds, tag_ids=tag_ids,
                                evaluators=site_evaluators(engine, site))
        print(f"fishway demo: {site.site.name} (an invented site), database "
              f"{engine.url.render_as_string()}", file=sys.stderr, flush=True)
        by_period: dict[float, list] = {}
        for tag in plant.tags:
            by_period.setdefault(tag.poll_seconds, []).append(tag)
        total = sum(len(tags) * (int(args.days * 86400 / p) + 1) for p, tags in by_period.items())
        streams = [generate_history(plant, tags, start, now, p, align=True)
                   for p, tags in by_period.items()]
        batches = ([r for b in step if b for r in b]
                   for step in itertools.zip_longest(*streams))
        progress = _progress(args.days)
        report = seed_history(service, batches, total=total, progress=progress)
        progress(report.readings, report.readings, report.seconds)  # the grid may end short
        print(f"fishway demo: seeded {report.stored:,} readings of {len(plant.tags)} tags "
              f"({args.days:g} day(s), {report.reflagged:,} re-flagged by QC, "
              f"{report.recommendations} recommendations) in {report.seconds:.1f} s")
        if args.seed_only:
            service.close()
            return 0
        stop_dashboard = _start_dashboard(site, engine, args.host, args.port)
        print(f"fishway demo: the plant and the ingest run live now (Ctrl-C stops); "
              f"database {engine.url.render_as_string()}", flush=True)
        try:
            run_until_stopped(service, status=lambda line: print(line, flush=True))
        finally:
            stop_dashboard()
        print("fishway demo: stopped", file=sys.stderr)
        return 0
    finally:
        engine.dispose()


def register(subparsers: Any, common: argparse.ArgumentParser) -> None:
    """The dashboard package's sub-commands."""
    p = subparsers.add_parser(
        "demo", parents=[common], help="seed a demo database with simulated days, then run "
        "the simulated plant, the ingest and the dashboard live",
        description="Seed an embedded database (a fresh var/demo/fishway-demo.sqlite, or "
        "--database) with DAYS of simulated 10-second history of the demo site (quality-"
        "checked, with hourly recommendations), then keep the simulated plant (its demo "
        "scenario and an operator who follows the recommendations), the ingest and the "
        "dashboard running in real time until Ctrl-C, with a status line every minute; prints "
        "the dashboard's address and the demo accounts' passwords. Every recommendation is "
        "advisory.")
    p.add_argument("--database", metavar="URL", help="SQLAlchemy URL of the database to seed "
                   "(default: a fresh var/demo/fishway-demo.sqlite under $FISHWAY_DATA_DIR)")
    p.add_argument("--days", type=float, default=3.0, metavar="N",
                   help=f"days of history to seed (default 3, at most {DEMO_MAX_DAYS:g})")
    p.add_argument("--seed", type=int, default=0, metavar="S", help="random seed of the "
                   "simulated plant (default 0)")
    p.add_argument("--seed-only", action="store_true", help="seed the database, then exit")
    p.add_argument("--host", default="127.0.0.1", help="address the dashboard binds to "
                   "(default 127.0.0.1)")
    p.add_argument("--port", type=int, default=8050, help="dashboard port (default 8050)")
    p.set_defaults(handler=_demo)
    from dashboard import commands

    commands.register(subparsers, common)


if __name__ == "__main__":
    sys.exit(main())
