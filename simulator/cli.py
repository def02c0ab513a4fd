"""``fishway simulate``: serve a simulated plant of a site over OPC UA.

``fishway simulate [SITE] [--opcua opc.tcp://127.0.0.1:4840] [--speed N] [--seed S]
[--scenario demo|quiet] [--duration SECONDS] [--history-db FILE] [--allow-remote]``

SITE is optional (the shipped demo site when omitted). The server publishes every tag of the
site at its address, keeps history, and takes actuator commands on each position tag's
``.setpoint`` node (see :mod:`simulator.opcua_server`). It binds to loopback unless
``--allow-remote`` is given. ``--duration`` stops it after so many real seconds (default: run
until interrupted). Exit status: 0 after a clean stop, 2 for bad input (one line per problem
naming the option), 1 for an internal error.
"""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import sys
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from ops_logic.cli import InputError
from ops_logic.site import demo_site_path, load_site
from simulator.opcua_server import check_endpoint, serve
from simulator.scenario import Scenario, demo_scenario

__all__ = ["register"]


def _parse_start(text: str | None) -> datetime:
    if text is None:
        return datetime.now(UTC).replace(microsecond=0)
    try:
        t = datetime.fromisoformat(text)
    except ValueError:
        raise InputError(f"--start: {text!r} is not an ISO 8601 time "
                         "(e.g. 2026-06-01T00:00:00Z)") from None
    if t.tzinfo is None:
        raise InputError(f"--start: {text!r} needs a time zone (e.g. a trailing Z for UTC)")
    return t.astimezone(UTC)


def _simulate(args: argparse.Namespace) -> int:
    problems = []
    try:
        check_endpoint(args.opcua, args.allow_remote)
    except ValueError as exc:
        problems.append(f"--opcua: {exc}")
    if not 0.0 < args.speed <= 100_000.0:
        problems.append(f"--speed: {args.speed:g} is outside (0, 100000]")
    if args.duration is not None and not args.duration > 0.0:
        problems.append(f"--duration: {args.duration:g} s must be positive")
    if not 0 <= args.seed < 2**32:
        problems.append(f"--seed: {args.seed} is outside 0–4294967295")
    start = None
    try:
        start = _parse_start(args.start)
    except InputError as exc:
        problems += exc.problems
    if args.history_db is not None and not Path(args.history_db).parent.is_dir():
        problems.append(f"--history-db: folder {Path(args.history_db).parent} does not exist")
    if problems:
        raise InputError(problems)
    assert start is not None
    site = load_site(Path(args.site) if args.site else demo_site_path())
    scenario = demo_scenario(start, site) if args.scenario == "demo" else Scenario()
    print(f"fishway simulate: {site.site.name} at {args.opcua} (speed ×{args.speed:g}, seed "
          f"{args.seed}, scenario {args.scenario}, plant time from {start.isoformat()}); "
          "Ctrl-C stops", file=sys.stderr, flush=True)

    async def run() -> None:
        coro = serve(site, args.opcua, speed=args.speed, seed=args.seed, start=start,
                     scenario=scenario, history_db=args.history_db,
                     allow_remote=args.allow_remote)
        if args.duration is None:
            await coro
            return
        task = asyncio.create_task(coro)
        done, _ = await asyncio.wait({task}, timeout=args.duration)
        if not done:
            task.cancel()
        with contextlib.suppress(asyncio.CancelledError):
            await task

    try:
        asyncio.run(run())
    except OSError as exc:
        raise InputError(f"--opcua: cannot listen on {args.opcua}: "
                         f"{exc.strerror or exc}") from None
    return 0


def register(subparsers: Any, common: argparse.ArgumentParser) -> None:
    """Add ``simulate``; its handler returns the exit status."""
    p = subparsers.add_parser(
        "simulate", parents=[common], help="serve a simulated plant of the site over OPC UA",
        description="Run the simulated plant of SITE (default: the demo site) and publish every "
        "tag over OPC UA, with history and writable '<tag>.setpoint' nodes for the actuators. "
        "Binds to loopback unless --allow-remote.")
    p.add_argument("site", nargs="?", metavar="SITE", help="site file (TOML)")
    p.add_argument("--opcua", default="opc.tcp://127.0.0.1:4840", metavar="URL",
                   help="endpoint to serve (default opc.tcp://127.0.0.1:4840)")
    p.add_argument("--speed", type=float, default=1.0, metavar="N",
                   help="simulated seconds per real second (default 1)")
    p.add_argument("--seed", type=int, default=0, metavar="S", help="random seed (default 0)")
    p.add_argument("--scenario", choices=("demo", "quiet"), default="demo",
                   help="demo: a few days of events with an operator (default); quiet: the "
                   "base plant")
    p.add_argument("--start", metavar="TIME", help="plant start, ISO 8601 with zone "
                   "(default now)")
    p.add_argument("--duration", type=float, metavar="SECONDS",
                   help="stop after so many real seconds (default: until interrupted)")
    p.add_argument("--history-db", metavar="FILE", help="keep history in this SQLite file "
                   "instead of memory")
    p.add_argument("--allow-remote", action="store_true",
                   help="allow a non-loopback endpoint host")
    p.set_defaults(handler=_simulate)
