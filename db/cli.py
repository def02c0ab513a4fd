"""``fishway`` sub-commands of the storage layer: ``import-csv`` and ``db upgrade``.

:func:`register` adds them to the top command line (:mod:`dashboard.cli`).

``fishway import-csv [SITE] FILE [--database URL] [--skip-bad-rows]`` imports a readings file
(format: :mod:`db.feeds.csvdrop`) with :func:`db.csv_import.import_csv`: the site's tag
catalogue is synced into the database first, then every reading is stored in one
transaction. ``SITE`` defaults to the shipped demo site. Exit status 0 when imported
(with ``--skip-bad-rows`` the skipped rows are listed on stderr), 2 for bad input (each
bad row one line ``FILE:LINE: reason`` on stderr, at most 20 then a count; nothing was
stored), 1 for an internal error. A summary line goes to stdout; a progress bar goes to
stderr for files of 1 MiB or more when stderr is a terminal.

``fishway db upgrade [--database URL]`` brings the database to the newest schema
(:func:`db.migrate.upgrade`). Without ``--database`` both commands use
:func:`db.engine.make_engine`'s default (``$FISHWAY_DATABASE_URL`` or
``var/fishway.sqlite``).
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Engine

from db.csv_import import ImportReport, import_csv
from db.engine import make_engine
from db.migrate import current_revision, head_revision, upgrade
from ops_logic.cli import InputError
from ops_logic.site import load_site

__all__ = ["MAX_LISTED_ERRORS", "register"]

MAX_LISTED_ERRORS = 20
PROGRESS_MIN_BYTES = 1 << 20


def _engine(url: str | None) -> Engine:
    try:
        return make_engine(url)
    except (sa.exc.ArgumentError, sa.exc.NoSuchModuleError) as exc:
        raise InputError(f"--database: cannot use {url!r}: {exc}") from None


def _where(url: str | None, engine: Engine) -> str:
    return f"--database {url}" if url else f"the default database ({engine.url})"


class _ProgressBar:
    """``progress(rows, bytes_read, bytes_total)`` drawing a bar on a terminal's stderr."""

    def __init__(self, width: int = 30) -> None:
        self.width = width
        self._last = 0.0

    def __call__(self, rows: int, done: int, total: int) -> None:
        now = time.monotonic()
        if done < total and now - self._last < 0.1:
            return
        self._last = now
        frac = done / total if total else 1.0
        bar = "#" * int(self.width * frac)
        last = done >= total
        print(f"\rimport-csv: [{bar:<{self.width}}] {100 * frac:5.1f}% {rows:,} rows"
              + (" read, storing…\n" if last else ""), end="", file=sys.stderr, flush=True)


def _print_errors(file: Path, report: ImportReport) -> None:
    for err in report.errors[:MAX_LISTED_ERRORS]:
        print(f"{file}:{err.line}: {err.reason}", file=sys.stderr)
    more = len(report.errors) - MAX_LISTED_ERRORS
    if more > 0:
        print(f"{file}: … and {more} more bad row(s)", file=sys.stderr)


def _import_csv(args: argparse.Namespace) -> int:
    if len(args.paths) > 2:
        raise InputError(f"expected [SITE] FILE, got {len(args.paths)} paths: "
                         + " ".join(args.paths))
    site = load_site(args.paths[0] if len(args.paths) == 2 else None)
    file = Path(args.paths[-1])
    if not file.is_file():
        raise InputError(f"{file}: no such file")
    engine = _engine(args.database)
    try:
        revision = current_revision(engine)
        if revision != head_revision():
            again = f" --database {args.database}" if args.database else ""
            raise InputError(f"{_where(args.database, engine)} is at schema revision "
                             f"{revision or 'none (empty)'}, not {head_revision()}: run "
                             f"'fishway db upgrade{again}' first")
        big = file.stat().st_size >= PROGRESS_MIN_BYTES and sys.stderr.isatty()
        try:
            report = import_csv(engine, site, file, skip_bad_rows=args.skip_bad_rows,
                                progress=_ProgressBar() if big else None)
        except OSError as exc:
            raise InputError(f"{file}: cannot read ({exc.strerror or exc})") from None
    finally:
        engine.dispose()
    _print_errors(file, report)
    if report.rejected:
        hint = "" if args.skip_bad_rows or not report.good else (
            " (--skip-bad-rows stores the good rows)")
        print(f"{report.summary()}{hint}", file=sys.stderr)
        return 2
    print(report.summary())
    return 0


def _db_upgrade(args: argparse.Namespace) -> int:
    engine = _engine(args.database)
    try:
        before = current_revision(engine)
        after = upgrade(engine)
        print(f"{_where(args.database, engine)}: schema at revision {after}"
              + (" (already current)" if before == after else f" (was {before or 'empty'})"))
    finally:
        engine.dispose()
    return 0


def register(subparsers: Any, common: argparse.ArgumentParser) -> None:
    """Add this package's sub-commands; each sets ``handler(args) -> exit status``."""
    db_help = ("SQLAlchemy URL of the database (default: $FISHWAY_DATABASE_URL or "
               "var/fishway.sqlite)")
    p = subparsers.add_parser(
        "import-csv", parents=[common],
        usage="fishway import-csv [-h] [SITE] FILE [--database URL] [--skip-bad-rows]",
        help="import a CSV file of readings into the database",
        description="Import readings from FILE (columns time,tag,value[,unit]; ISO-8601 times "
        "with a UTC offset, tag names of the site's catalogue, SI values unless unit says "
        "otherwise) in one transaction. A file with any bad row is rejected whole unless "
        "--skip-bad-rows is given. Importing the same file again stores nothing new.")
    p.add_argument("paths", nargs="+", metavar="[SITE] FILE",
                   help="site file (optional, default: the demo site) and the CSV file")
    p.add_argument("--database", metavar="URL", help=db_help)
    p.add_argument("--skip-bad-rows", action="store_true",
                   help="store the good rows and list the bad ones instead of rejecting")
    p.set_defaults(handler=_import_csv, extra_positionals="paths")

    p = subparsers.add_parser("db", parents=[common], help="database maintenance (upgrade)",
                              description="Database maintenance.")
    actions = p.add_subparsers(dest="db_action", metavar="ACTION", required=True)
    u = actions.add_parser("upgrade", parents=[common], help="create or upgrade the schema",
                           description="Bring the database to the newest schema revision "
                           "(safe to repeat: at the newest revision it does nothing).")
    u.add_argument("--database", metavar="URL", help=db_help)
    u.set_defaults(handler=_db_upgrade)
