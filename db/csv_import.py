"""Import a CSV file of readings into the database, all or nothing; and the format's parser.

The file format is described in :mod:`db.feeds.csvdrop` (``time,tag,value[,unit]``, ISO-8601
times with a UTC offset, catalogue tag names, SI values or a convertible unit).

``import_csv(engine, site, path, *, skip_bad_rows=False, progress=None) -> ImportReport``
parses the whole file first and collects every bad row with its line number and reason.
With ``skip_bad_rows=False`` a file with any bad row is rejected and nothing is stored;
with ``True`` the good rows are stored and the bad rows reported. Either way the readings
go to the database in one :func:`db.readings.store_batch` call, which is one transaction
(all or nothing) and ignores readings already stored, so importing the same file again
stores nothing new. The site's tag catalogue is first brought into the database with
:func:`db.site_sync.sync_site` (its own, earlier transaction: catalogue rows may stay
behind when the readings then fail, which is harmless).

Flags: imported readings carry QARTOD flag 2 (not evaluated) and missing values flag 9;
the QC tests of :mod:`ops_logic.qc` are not run here (they need the neighbouring readings
of the live series; a later QC pass may evaluate the imported span).

``progress(rows_read, bytes_read, bytes_total)`` is called every few thousand rows while
parsing and once at the end of the file.

>>> import tempfile, pathlib
>>> from db.engine import make_engine
>>> from db.migrate import upgrade
>>> from ops_logic.site import load_site
>>> eng = make_engine("sqlite://"); _ = upgrade(eng)
>>> path = pathlib.Path(tempfile.mkdtemp()) / "logger.csv"
>>> _ = path.write_text("time,tag,value,unit\\n"
...                     "2026-05-04T06:00:00-08:00,east.forebay_level,254.0,ft\\n"
...                     "2026-05-04T06:00:00-08:00,east.water_temp,11.5,\\n"
...                     "2026-05-04T06:00:00,east.do,9.1,\\n")
>>> report = import_csv(eng, load_site(), path)
>>> report.rejected, [str(e) for e in report.errors]
(True, ['line 4: naive time 2026-05-04T06:00:00 (give a UTC offset such as Z or -08:00)'])
>>> import_csv(eng, load_site(), path, skip_bad_rows=True).stored
2
>>> import_csv(eng, load_site(), path, skip_bad_rows=True).stored   # again: nothing new
0
>>> eng.dispose(); import shutil; shutil.rmtree(path.parent)
"""
from __future__ import annotations

import csv
import difflib
import math
import os
from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
from sqlalchemy.engine import Engine

from db.feeds.base import FeedReading
from db.readings import store_batch
from db.site_sync import sync_site
from db.types import to_epoch_ms
from ops_logic.site import Site
from ops_logic.tags import TagDef, site_tags
from ops_logic.units import to_si

__all__ = ["COLUMNS", "ImportReport", "ParsedCsv", "RowError", "import_csv",
           "parse_readings_csv"]

COLUMNS = ("time", "tag", "value", "unit")
"""Allowed header names; ``unit`` is optional."""
FLAG_NOT_EVALUATED = 2
FLAG_MISSING = 9
PROGRESS_EVERY_ROWS = 20_000
#: Tag units whose values another unit may be given in, and the ops_logic.units kind.
CONVERTIBLE = {"m": "length", "m3/s": "flow"}
_ALIASES = {"m³/s": "m3/s", "m^3/s": "m3/s", "m**3/s": "m3/s", "°C": "degC", "℃": "degC",
            "mg/l": "mg/L", "percent": "%", "pct": "%"}
_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)

Progress = Callable[[int, int, int], None]


@dataclass(frozen=True)
class RowError:
    """A bad row: its line number in the file (1 = the header) and the reason."""

    line: int
    reason: str

    def __str__(self) -> str:
        return f"line {self.line}: {self.reason}"


@dataclass
class ParsedCsv:
    """The good readings of a file (columns, in file order) and its bad rows."""

    path: Path
    tags: list[str] = field(default_factory=list)
    ts_ms: list[int] = field(default_factory=list)
    values: list[float] = field(default_factory=list)
    errors: list[RowError] = field(default_factory=list)
    rows: int = 0
    """Data rows in the file (blank lines not counted)."""
    duplicates: int = 0
    """Rows repeating an earlier row's tag, time and value (ignored)."""
    header_ok: bool = True

    def __len__(self) -> int:
        return len(self.tags)

    def readings(self) -> list[FeedReading]:
        """The good rows as feed readings (a missing value is ``source_ok=False``)."""
        return [FeedReading(t, _EPOCH + timedelta(milliseconds=ms), v)
                for t, ms, v in zip(self.tags, self.ts_ms, self.values, strict=True)]


def _lines(path: Path, counter: list[int], errors: list[RowError]) -> Iterator[str]:
    with open(path, "rb") as fh:
        for lineno, raw in enumerate(fh, 1):
            counter[0] += len(raw)
            data = raw[3:] if lineno == 1 and raw.startswith(b"\xef\xbb\xbf") else raw
            try:
                yield data.decode("utf-8")
            except UnicodeDecodeError:
                errors.append(RowError(lineno, "not UTF-8 text"))
                yield "\n"


def _unit_factor(unit: str, tag: TagDef, cache: dict[tuple[str, str], float | str]
                 ) -> float | str:
    """Multiplier from ``unit`` to the tag's unit, or the reason it cannot be used."""
    if unit == tag.unit or _ALIASES.get(unit, _ALIASES.get(unit.lower())) == tag.unit:
        return 1.0
    key = (unit, tag.unit)
    if key not in cache:
        kind = CONVERTIBLE.get(tag.unit)
        if kind is None:
            cache[key] = (f"unit {unit!r} not accepted for a value in {tag.unit} (give it in "
                          f"{tag.unit}; only lengths and flows are converted)")
        else:
            try:
                cache[key] = to_si(f"1 {unit}", kind, "si")
            except ValueError as exc:
                cache[key] = f"unit {unit!r}: {exc} (the tag is in {tag.unit})"
    return cache[key]


def _header(row: list[str]) -> dict[str, int] | str:
    names = [c.strip().lower() for c in row]
    unknown = [c for c in names if c not in COLUMNS]
    missing = [c for c in COLUMNS[:3] if c not in names]
    if unknown or missing or len(set(names)) != len(names):
        return (f"header must name the columns time, tag, value and optionally unit, got "
                f"{','.join(row)!r}")
    return {c: names.index(c) for c in names}


def parse_readings_csv(path: str | os.PathLike, tags: Mapping[str, TagDef], *,
                       latest_ms: int | None = None,
                       progress: Progress | None = None) -> ParsedCsv:
    """Parse a readings file (format in :mod:`db.feeds.csvdrop`) against a tag catalogue.

    Parameters
    ----------
    path : path
        The CSV file.
    tags : mapping
        The known tags by name; a row naming any other tag is bad.
    latest_ms : int or None
        Rows stamped after this instant [epoch ms] are bad (a logger clock running ahead).
    progress : callable or None
        ``progress(rows_read, bytes_read, bytes_total)``.

    Returns
    -------
    ParsedCsv
        Good readings with values in the tag's unit, and every bad row, by line.

    Raises
    ------
    OSError
        When the file cannot be opened.
    """
    path = Path(path)
    out = ParsedCsv(path)
    total = path.stat().st_size
    counter = [0]
    reader = csv.reader(_lines(path, counter, out.errors))
    try:
        head = next(reader)
    except StopIteration:
        head = []
    columns = _header(head) if head else "empty file: no header line time,tag,value"
    if isinstance(columns, str):
        out.errors.append(RowError(1, columns))
        out.header_ok = False
        return out
    ncol, it, ig, iv = len(columns), columns["time"], columns["tag"], columns["value"]
    iu = columns.get("unit")
    cache: dict[tuple[str, str], float | str] = {}
    lines: list[int] = []
    last_time, last_ms = "", 0
    previous = reader.line_num
    for row in reader:
        line, previous = previous + 1, reader.line_num
        if not row or (len(row) == 1 and not row[0].strip()):
            continue
        out.rows += 1
        if progress is not None and out.rows % PROGRESS_EVERY_ROWS == 0:
            progress(out.rows, counter[0], total)
        if len(row) != ncol:
            out.errors.append(RowError(line, f"expected {ncol} fields, got {len(row)}"))
            continue
        why: list[str] = []
        name = row[ig].strip()
        tag = tags.get(name)
        if tag is None:
            close = difflib.get_close_matches(name, list(tags), n=1)
            why.append(f"unknown tag {name!r}" + (f" (did you mean {close[0]}?)" if close else ""))
        text = row[it].strip()
        if text != last_time:
            try:
                when = datetime.fromisoformat(text)
            except ValueError:
                when = None
                why.append(f"bad time {text!r} (expected ISO 8601 such as "
                           "2026-05-04T06:00:00-08:00)")
            if when is not None and when.utcoffset() is None:
                why.append(f"naive time {text} (give a UTC offset such as Z or -08:00)")
            elif when is not None:
                last_time, last_ms = text, to_epoch_ms(when)
        if text == last_time and latest_ms is not None and last_ms > latest_ms:
            why.append(f"time {text} is in the future")
        raw = row[iv].strip()
        try:
            value = float(raw) if raw else math.nan
        except ValueError:
            value = math.nan
            why.append(f"bad number {raw!r}")
        if math.isinf(value):
            why.append(f"value {raw!r} is not finite")
        unit = row[iu].strip() if iu is not None else ""
        if unit and tag is not None:
            factor = _unit_factor(unit, tag, cache)
            if isinstance(factor, str):
                why.append(factor)
            else:
                value *= factor
        if why:
            out.errors.append(RowError(line, "; ".join(why)))
            continue
        out.tags.append(name)
        out.ts_ms.append(last_ms)
        out.values.append(value)
        lines.append(line)
    if progress is not None:
        progress(out.rows, counter[0], total)
    _drop_duplicates(out, lines)
    out.errors.sort(key=lambda e: e.line)
    return out


def _drop_duplicates(out: ParsedCsv, lines: list[int]) -> None:
    """Drop repeats of a (tag, time): equal values are duplicates, others bad rows."""
    n = len(out.tags)
    if n < 2:
        return
    names = {t: i for i, t in enumerate(dict.fromkeys(out.tags))}
    tag = np.fromiter((names[t] for t in out.tags), dtype="int64", count=n)
    ts = np.asarray(out.ts_ms, dtype="int64")
    order = np.lexsort((np.arange(n), ts, tag))
    repeat = np.zeros(n, dtype=bool)
    repeat[1:] = (tag[order][1:] == tag[order][:-1]) & (ts[order][1:] == ts[order][:-1])
    if not repeat.any():
        return
    first = np.maximum.accumulate(np.where(repeat, 0, np.arange(n)))
    drop = np.zeros(n, dtype=bool)
    for k in np.flatnonzero(repeat).tolist():
        i, j = int(order[first[k]]), int(order[k])
        drop[j] = True
        a, b = out.values[i], out.values[j]
        if a == b or (math.isnan(a) and math.isnan(b)):
            out.duplicates += 1
            continue
        when = (_EPOCH + timedelta(milliseconds=out.ts_ms[j])).isoformat()
        out.errors.append(RowError(lines[j], f"{out.tags[j]} at {when} again with another "
                                   f"value {b!r} (first on line {lines[i]}: {a!r})"))
    keep = np.flatnonzero(~drop).tolist()
    out.tags = [out.tags[i] for i in keep]
    out.ts_ms = [out.ts_ms[i] for i in keep]
    out.values = [out.values[i] for i in keep]


@dataclass(frozen=True)
class ImportReport:
    """What :func:`import_csv` did with a file."""

    path: Path
    rows: int
    """Data rows in the file."""
    good: int
    """Distinct good readings (duplicates not counted)."""
    duplicates: int
    """Rows repeating an earlier row exactly (ignored)."""
    stored: int
    """Readings newly stored (the rest of the good ones were stored before)."""
    errors: tuple[RowError, ...]
    rejected: bool
    """True when nothing was stored because of bad rows (or a bad header)."""

    @property
    def already_stored(self) -> int:
        """Good readings that were in the database already."""
        return 0 if self.rejected else self.good - self.stored

    def summary(self) -> str:
        """One line: rows read, stored, already stored, bad."""
        if self.rejected:
            return (f"{self.path}: rejected, nothing stored ({len(self.errors)} bad row(s) of "
                    f"{self.rows})")
        return (f"{self.path}: {self.rows} rows, {self.stored} readings stored, "
                f"{self.already_stored} already stored, {self.duplicates} duplicate rows, "
                f"{len(self.errors)} bad rows skipped")


def import_csv(engine: Engine, site: Site, path: str | os.PathLike, *,
               skip_bad_rows: bool = False, progress: Progress | None = None) -> ImportReport:
    """Import a readings file into the database; see the module docstring.

    Raises
    ------
    OSError
        When the file cannot be read.
    """
    path = Path(path)
    tags = {t.name: t for t in site_tags(site)}
    parsed = parse_readings_csv(path, tags, progress=progress)
    errors = tuple(parsed.errors)
    if not parsed.header_ok or (errors and not skip_bad_rows):
        return ImportReport(path, parsed.rows, len(parsed), parsed.duplicates, 0, errors, True)
    stored = 0
    if len(parsed):
        ids = sync_site(engine, site)
        rows = [(ids[t], ms / 1000.0, v, FLAG_MISSING if math.isnan(v) else FLAG_NOT_EVALUATED)
                for t, ms, v in zip(parsed.tags, parsed.ts_ms, parsed.values, strict=True)]
        stored = store_batch(engine, rows)
    return ImportReport(path, parsed.rows, len(parsed), parsed.duplicates, stored, errors, False)
