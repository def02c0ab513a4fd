"""Bulk history of a simulated plant: what it measured on a regular time grid, in batches.

For seeding a database with a few days of readings (the demo): the plant advances one batch at
a time and each batch is sampled with one vectorised call per tag
(:meth:`~simulator.plant.Plant.sample_arrays`). :func:`iter_history_arrays` yields numpy arrays
(the cheapest form for a bulk insert); :func:`generate_history` yields lists of
:class:`~db.feeds.base.FeedReading`.
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Sequence
from datetime import datetime

import numpy as np

from db.feeds.base import FeedReading
from ops_logic.tags import TagDef
from simulator.faults import Samples
from simulator.plant import Plant

__all__ = ["generate_history", "history_grid_s", "iter_history_arrays"]


def history_grid_s(plant: Plant, start: datetime, end: datetime, step_s: float,
                   *, align: bool = False) -> np.ndarray:
    """Plant times [s since start] from ``start`` to ``end`` inclusive every ``step_s``,
    clipped to the plant's start; with ``align`` the grid falls on multiples of ``step_s``
    of Unix time (round timestamps, the same grid for every call)."""
    if not step_s > 0.0:
        raise ValueError(f"step_s must be positive, got {step_s}")
    a, b = max(plant.seconds(start), 0.0), plant.seconds(end)
    if b < a:
        return np.empty(0)
    if align:
        epoch = plant.start.timestamp()
        first = math.ceil((epoch + a) / step_s - 1e-9) * step_s - epoch
        return np.arange(first, b + 1e-9, step_s)
    n = int(math.floor((b - a) / step_s + 1e-9))
    return a + step_s * np.arange(n + 1)


def iter_history_arrays(plant: Plant, tags: Sequence[TagDef | str], start: datetime,
                        end: datetime, step_s: float = 10.0, *, batch_s: float = 3600.0,
                        align: bool = False
                        ) -> Iterator[tuple[np.ndarray, dict[str, Samples]]]:
    """Yield ``(t_s, {tag name: Samples})`` for consecutive batches of about ``batch_s``."""
    t = history_grid_s(plant, start, end, step_s, align=align)
    per = max(int(batch_s // step_s), 1)
    for i in range(0, t.size, per):
        chunk = t[i:i + per]
        yield chunk, plant.sample_arrays(tags, chunk)


def generate_history(plant: Plant, tags: Sequence[TagDef | str], start: datetime,
                     end: datetime, step_s: float = 10.0, *, batch_s: float = 3600.0,
                     skip_outages: bool = False, align: bool = False
                     ) -> Iterator[list[FeedReading]]:
    """Yield lists of readings, one list per batch of about ``batch_s`` of plant time, tag by
    tag in time order. A dropout with ``omit`` leaves its readings out; with
    ``skip_outages`` the readings inside a communications outage are left out too (what a live
    ingest without backfill would have stored).

    >>> from datetime import UTC, timedelta
    >>> from ops_logic.site import load_site
    >>> from simulator.scenario import Scenario
    >>> plant = Plant(load_site(None), start=datetime(2026, 6, 1, tzinfo=UTC),
    ...               scenario=Scenario(random_forebay_drops_per_day=0.0))
    >>> batches = list(generate_history(plant, ["east.do"], plant.start,
    ...                                 plant.start + timedelta(minutes=10), 60.0))
    >>> len(batches), len(batches[0]), batches[0][0].ts == plant.start
    (1, 11, True)
    """
    for chunk, arrays in iter_history_arrays(plant, tags, start, end, step_s,
                                            batch_s=batch_s, align=align):
        stamps = [plant.time_at(s) for s in chunk.tolist()]
        keep = np.ones(chunk.size, dtype=bool)
        if skip_outages:
            keep = np.array([not plant.in_outage(ts) for ts in stamps], dtype=bool)
        batch: list[FeedReading] = []
        for name, s in arrays.items():
            mask = s.present & keep
            values, ok = s.values.tolist(), s.ok.tolist()
            batch.extend(FeedReading(name, stamps[i], values[i], ok[i])
                         for i in np.flatnonzero(mask).tolist())
        yield batch
