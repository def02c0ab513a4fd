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
from collections.abc import Sequence
from typing import Any

from ops_logic.cli import InputError
from ops_logic.ladder import Ladder, SettingError
from ops_logic.report_format import format_profile, format_recommendation
from ops_logic.site import SiteConfigError, load_site

__all__ = ["COMMAND_MODULES", "build_parser", "main", "register"]

COMMAND_MODULES: tuple[str, ...] = ("ops_logic.cli", "db.cli", "db.alarm_cli",
                                     "simulator.cli")
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
def _demo(args: argparse.Namespace) -> int:
    """Until the dashboard exists: the core on the demo site at representative levels."""
    site = load_site(None)
    units = site.site.units
    print(f"fishway-ops demo: {site.site.name} (an invented site); the live dashboard demo "
          "replaces this text demo in a later release.\n")
    for f in site.fishways:
        ladder = Ladder(f)
        fb = 0.5 * sum(f.forebay_range)
        tw = 0.5 * sum(f.tailwater_range)
        current = ladder.default_settings()
        profile = ladder.solve(fb, tw, current)
        print("=" * 100)
        print(f"{f.name}: current profile (default settings) at mid forebay and tailwater")
        print(format_profile(profile, ladder, units))
        print()
        rec = ladder.recommend(fb, tw, current)
        print(format_recommendation(rec, ladder, units))
        print()
    return 0


def register(subparsers: Any, common: argparse.ArgumentParser) -> None:
    """The dashboard package's sub-commands."""
    p = subparsers.add_parser("demo", parents=[common], help="run the core on the demo site "
                              "and print each fishway's profile and recommendation",
                              description="Solve each fishway of the shipped demo site at the "
                              "middle of its forebay and tailwater ranges with its default "
                              "settings, then print the advisory recommendation from there "
                              "(rate limits apply).")
    p.set_defaults(handler=_demo)
    from dashboard import commands

    commands.register(subparsers, common)


if __name__ == "__main__":
    sys.exit(main())
