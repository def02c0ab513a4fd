"""Seed a database with history through the ingest's own QC and storage (the demo's days).

``seed_history(service, batches, *, total=None, progress=None, recommend_every_s=3600.0)
-> SeedReport`` takes batches of :class:`~db.feeds.base.FeedReading` in time order (e.g. one
hour of every tag per batch, as :func:`simulator.history.generate_history` yields them) and
stores each with :meth:`IngestService.ingest <db.ingest.service.IngestService.ingest>` as
history: the same QARTOD tests and windows as live readings, without the timing test (the
readings did not arrive live), re-flags included, one :func:`~db.readings.store_batch`
transaction per batch. Every ``recommend_every_s`` of data time (at a batch end) the
recommenders run at that time, so the seeded days have recommendations too (None: never).
``progress(done, total, elapsed_s)`` is called after each batch. Afterwards every poll group
is marked for a backfill, so the live service fills the time the seeding took.
"""
from __future__ import annotations

import time
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from datetime import datetime

from db.feeds.base import FeedReading

__all__ = ["SeedReport", "seed_history"]


@dataclass(frozen=True)
class SeedReport:
    """What a seeding stored: readings given, new rows, re-flags, recommendations, time."""

    readings: int
    stored: int
    reflagged: int
    recommendations: int
    start: datetime | None
    end: datetime | None
    seconds: float


def seed_history(service, batches: Iterable[Sequence[FeedReading]], *, total: int | None = None,
                 progress: Callable[[int, int | None, float], None] | None = None,
                 recommend_every_s: float | None = 3600.0) -> SeedReport:
    """Store ``batches`` of history through the service's QC; see the module docstring."""
    t0 = time.monotonic()
    done = stored = reflagged = recs = 0
    first: datetime | None = None
    last: datetime | None = None
    last_rec: datetime | None = None
    for batch in batches:
        if not batch:
            continue
        begin = min(r.ts for r in batch)
        end = max(r.ts for r in batch)
        if first is None:
            first = begin
            service.start_up(begin)
        result = service.ingest((), history=batch)
        done += len(batch)
        stored += result.stored
        reflagged += result.reflagged
        last = end if last is None else max(last, end)
        due = recommend_every_s is not None and (
            last_rec is None or (end - last_rec).total_seconds() >= recommend_every_s)
        if due:
            recs += sum(o.recommendation_id is not None for o in service.recommend_once(end))
            last_rec = end
        if progress is not None:
            progress(done, total, time.monotonic() - t0)
    service.request_backfill()
    return SeedReport(done, stored, reflagged, recs, first, last, time.monotonic() - t0)
