"""CSV drop-folder feed: loggers drop files of readings into a folder; each is taken once.

File format (our own)
---------------------
UTF-8 text (a byte-order mark is allowed), comma-separated, one header line then one
reading per line::

    time,tag,value,unit
    2026-05-04T06:00:00-08:00,east.forebay_level,77.41,
    2026-05-04T06:00:00-08:00,east.tailwater_level,215.2,ft
    2026-05-04T14:00:10Z,east.water_temp,11.8,degC

- ``time``: ISO-8601 date and time **with** a UTC offset (``Z``, ``+00:00``, ``-08:00``);
  a time without an offset is refused (it would be ambiguous). Kept to the millisecond.
- ``tag``: a tag name of the catalogue (:func:`ops_logic.tags.site_tags`).
- ``value``: a decimal number in the tag's SI unit (``TagDef.unit``); an empty field or
  ``NaN`` is a missing reading; infinities are refused.
- ``unit`` (optional column; an empty field means the tag's unit): a value in another unit
  is converted with :mod:`ops_logic.units`, which knows lengths (m, ft, in…) and flows
  (m³/s, cfs, gpm…); for tags in other units (°C, mg/L, %, counts, flags) only the tag's own
  unit is accepted, and any other is a bad row.
- The columns may come in any order; no other columns are allowed. Blank lines are skipped.
  A second line with the same tag and time is a duplicate (ignored) when its value is the
  same and a bad row when it differs.

Every bad row is reported with its line number and the reason (unknown tag, bad time, naive
time, bad number, wrong unit, conflicting duplicate, time in the future).

Drop folder protocol
--------------------
Loggers write ``name.tmp`` (or any name not ending in ``.csv``) and rename it to
``name.csv`` when complete; the feed reads only ``*.csv`` files directly in the folder whose
last change is at least ``settle_s`` (default 1 s) old, oldest first, at most ``max_files``
per read. A file with any bad row is rejected whole: it is moved to ``rejected/`` with
``<name>.errors.txt`` beside it (one ``line N: reason`` per bad row), nothing of it is
returned, and its problems are listed in :attr:`CsvDropFeed.problems`. The caller must pass
*all* tags of the feed to each read: a row naming any other tag is a bad row.

Two phases (the choice made against a crash between "returned readings" and "moved the
file"): ``read`` returns the readings of the good files and leaves those files in place,
listed in :attr:`CsvDropFeed.pending`; the caller stores the readings, then calls
``commit()`` (or ``commit(paths)``), which moves the files to ``done/``. If the process stops
before the commit, the next read returns the same readings again, and the idempotent
storage (:func:`db.readings.store_batch` ignores readings already stored) makes that
harmless. A feed user that never commits sees the same files at every read.

A missing or unreadable folder raises :class:`~db.feeds.base.FeedError`; the next read
after it is back works again. The feed keeps no connection; ``close`` does nothing.

>>> import tempfile, os, pathlib
>>> from datetime import UTC, datetime
>>> from ops_logic.site import load_site
>>> from ops_logic.tags import site_tags
>>> tags = [t for t in site_tags(load_site()) if t.name.startswith("east.fore")]
>>> folder = pathlib.Path(tempfile.mkdtemp())
>>> _ = (folder / "a.csv").write_text("time,tag,value\\n"
...                                   "2026-05-04T06:00:00-08:00,east.forebay_level,77.41\\n")
>>> os.utime(folder / "a.csv", (0, 0))   # as if written long ago
>>> feed = CsvDropFeed("logger", folder)
>>> [(r.tag, r.ts.isoformat(), r.value) for r in feed.read(tags, datetime.now(UTC))]
[('east.forebay_level', '2026-05-04T14:00:00+00:00', 77.41)]
>>> [p.name for p in feed.commit()], sorted(p.name for p in (folder / "done").iterdir())
(['a.csv'], ['a.csv'])
>>> import shutil; shutil.rmtree(folder)
"""
from __future__ import annotations

import logging
import math
import os
import time
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path

from db.csv_import import ParsedCsv, parse_readings_csv
from db.feeds.base import Feed, FeedError, FeedReading
from ops_logic.tags import TagDef

__all__ = ["DONE_DIR", "REJECTED_DIR", "CsvDropFeed"]

_log = logging.getLogger(__name__)

DONE_DIR = "done"
REJECTED_DIR = "rejected"
FUTURE_TOLERANCE_S = 300.0  # a reading stamped later than now + 5 min is a bad row


def _free_name(folder: Path, name: str) -> Path:
    """``folder/name``, or ``folder/<stem>.<n><suffix>`` when that is taken."""
    target = folder / name
    n = 1
    while target.exists():
        target = folder / f"{Path(name).stem}.{n}{Path(name).suffix}"
        n += 1
    return target


@dataclass(frozen=True)
class _Found:
    path: Path
    mtime: float


class CsvDropFeed(Feed):
    """Feed taking CSV files from a drop folder; see the module docstring.

    Parameters
    ----------
    feed_id : str
        The feed's id in the site file.
    folder : path
        The drop folder; ``done/`` and ``rejected/`` are made inside it.
    settle_s : float
        A file changed less than this long ago is left for a later read [s], ≥ 0.
    max_files : int
        Most files taken by one read (bounds the batch), ≥ 1.
    clock : callable
        Wall clock [epoch s] compared with the files' modification times.
    """

    supports_history = False

    def __init__(self, feed_id: str, folder: str | os.PathLike, *, settle_s: float = 1.0,
                 max_files: int = 100, clock: Callable[[], float] = time.time) -> None:
        if not (math.isfinite(settle_s) and settle_s >= 0):
            raise ValueError(f"feed {feed_id}: settle_s must be >= 0 s, got {settle_s!r}")
        if max_files < 1:
            raise ValueError(f"feed {feed_id}: max_files must be >= 1, got {max_files!r}")
        self.id = feed_id
        self.folder = Path(folder)
        self.settle_s = float(settle_s)
        self.max_files = int(max_files)
        self._clock = clock
        self.pending: tuple[Path, ...] = ()
        """Good files whose readings the last read returned, not yet committed."""
        self.problems: tuple[str, ...] = ()
        """Bad rows and rejected files of the last read, one line each."""

    def _ready_files(self) -> list[_Found]:
        if not self.folder.is_dir():
            raise FeedError(f"feed {self.id}: drop folder {self.folder} does not exist "
                            "or is not a folder")
        try:
            for sub in (DONE_DIR, REJECTED_DIR):
                (self.folder / sub).mkdir(exist_ok=True)
            entries = list(os.scandir(self.folder))
        except OSError as exc:
            raise FeedError(f"feed {self.id}: cannot use drop folder {self.folder}: "
                            f"{exc.strerror or exc}") from exc
        latest = self._clock() - self.settle_s
        found = []
        for entry in entries:
            if not entry.name.endswith(".csv") or entry.name.startswith("."):
                continue
            try:
                if not entry.is_file():
                    continue
                mtime = entry.stat().st_mtime
            except OSError:  # removed meanwhile
                continue
            if mtime <= latest:
                found.append(_Found(Path(entry.path), mtime))
        found.sort(key=lambda f: (f.mtime, f.path.name))
        return found[: self.max_files]

    def read(self, tags: Sequence[TagDef], now: datetime) -> list[FeedReading]:
        """Readings of every ready good file (left pending until :meth:`commit`)."""
        if now.tzinfo is None:
            raise ValueError("read: now must be a timezone-aware datetime")
        by_name = {t.name: t for t in tags}
        latest_ms = round((now.timestamp() + FUTURE_TOLERANCE_S) * 1000)
        readings: list[FeedReading] = []
        pending: list[Path] = []
        problems: list[str] = []
        for found in self._ready_files():
            try:
                parsed = parse_readings_csv(found.path, by_name, latest_ms=latest_ms)
            except FileNotFoundError:
                continue  # taken by someone else meanwhile
            except OSError as exc:
                raise FeedError(f"feed {self.id}: cannot read {found.path}: "
                                f"{exc.strerror or exc}") from exc
            if parsed.errors:
                problems += self._reject(parsed)
                continue
            readings += parsed.readings()
            pending.append(found.path)
        self.pending = tuple(pending)
        self.problems = tuple(problems)
        return readings

    def _reject(self, parsed: ParsedCsv) -> list[str]:
        path = parsed.path
        rejected = self.folder / REJECTED_DIR
        target = _free_name(rejected, path.name)
        report = target.with_name(target.name + ".errors.txt")
        lines = [f"{path.name}:{e.line}: {e.reason}" for e in parsed.errors]
        try:
            report.write_text("".join(f"line {e.line}: {e.reason}\n" for e in parsed.errors),
                              encoding="utf-8")
            os.replace(path, target)
        except FileNotFoundError:
            return []
        except OSError as exc:
            raise FeedError(f"feed {self.id}: cannot move {path} to {rejected}: "
                            f"{exc.strerror or exc}") from exc
        _log.warning("feed %s: rejected %s (%d bad row(s)), see %s", self.id, path.name,
                     len(parsed.errors), report)
        return [*lines, f"{path.name}: rejected ({len(parsed.errors)} bad row(s)), see {report}"]

    def commit(self, paths: Iterable[str | os.PathLike] | None = None) -> list[Path]:
        """Move files (default: :attr:`pending`) to ``done/`` once their readings are stored.

        Returns the new paths. A file already gone is skipped (committed twice, or taken).
        """
        done = self.folder / DONE_DIR
        chosen = self.pending if paths is None else tuple(Path(p) for p in paths)
        moved = []
        for path in chosen:
            target = _free_name(done, path.name)
            try:
                os.replace(path, target)
            except FileNotFoundError:
                continue
            except OSError as exc:
                raise FeedError(f"feed {self.id}: cannot move {path} to {done}: "
                                f"{exc.strerror or exc}") from exc
            moved.append(target)
        self.pending = tuple(p for p in self.pending if p not in set(chosen))
        return moved

    def close(self) -> None:
        """Nothing to release (the feed holds no connection or open file)."""
