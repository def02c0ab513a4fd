"""The simulated plant behind the :class:`db.feeds.base.Feed` interface (in-process).

``read(tags, now)`` advances the plant to ``now`` (if later) and samples it; a communications
outage scheduled in the plant makes ``read`` raise :class:`~db.feeds.base.FeedError` until it
ends. A tag the plant does not have gets no reading and a line in :attr:`SimulatedFeed.problems`
(as the other feeds report unknown items).

``history(tags, start, end)`` is what the plant's own historian kept: every reading it served
through ``read`` in the window, and, where nobody read a tag for longer than its poll period
(during an outage, say), one reading per poll period on a grid of multiples of
``poll_seconds`` of Unix time. Readings are re-sampled (the plant is deterministic, so a served
reading comes back with the value ``read`` returned), up to the plant's present.
"""

from __future__ import annotations

import bisect
from collections import deque
from collections.abc import Sequence
from datetime import datetime

import numpy as np

from db.feeds.base import Feed, FeedError, FeedReading
from ops_logic.tags import TagDef
from simulator.history import history_grid_s
from simulator.plant import Plant

__all__ = ["SimulatedFeed"]

SERVED_KEPT = 500_000
"""Reads remembered for ``history`` (about 58 days of 10-second polls)."""


class SimulatedFeed(Feed):
    """A :class:`~db.feeds.base.Feed` reading a :class:`~simulator.plant.Plant`.

    >>> from datetime import UTC, timedelta
    >>> from ops_logic.site import load_site
    >>> plant = Plant(load_site(None), start=datetime(2026, 6, 1, tzinfo=UTC))
    >>> feed = SimulatedFeed(plant)
    >>> [r.tag for r in feed.read(plant.tags[:2], plant.start + timedelta(seconds=10))]
    ['east.forebay_level', 'east.tailwater_level']
    """

    supports_history = True

    def __init__(self, plant: Plant, feed_id: str = "plant"):
        self.plant = plant
        self.id = feed_id
        self.problems: tuple[str, ...] = ()
        """Tags of the last read that the plant does not have, one line each."""
        self._served: deque[tuple[float, datetime, frozenset[str]]] = deque(maxlen=SERVED_KEPT)

    def _known(self, tags: Sequence[TagDef]) -> tuple[list[TagDef], list[str]]:
        known, problems = [], []
        for t in tags:
            try:
                self.plant.tag(t)
            except ValueError:
                problems.append(f"feed {self.id}: tag {t.name} ({t.address}) is not a tag of "
                                f"the simulated site {self.plant.site.site.name!r}")
                continue
            known.append(t)
        return known, problems

    def read(self, tags: Sequence[TagDef], now: datetime) -> list[FeedReading]:
        if self.plant.in_outage(now):
            raise FeedError(f"feed {self.id}: no answer from the simulated plant "
                            f"(communications outage at {now.isoformat()})")
        known, problems = self._known(tags)
        self.problems = tuple(problems)
        readings = self.plant.sample(known, now)
        if readings:
            ts = readings[0].ts
            self._served.append((self.plant.seconds(ts), ts, frozenset(t.name for t in known)))
        return readings

    def history(self, tags: Sequence[TagDef], start: datetime, end: datetime
                ) -> list[FeedReading]:
        end = min(end, self.plant.now)
        known, _ = self._known(tags)
        a, b = self.plant.seconds(start), self.plant.seconds(end)
        served = sorted(self._served, key=lambda e: e[0])
        out: list[FeedReading] = []
        for tag in known:
            mine = [(s, ts) for s, ts, names in served if tag.name in names]
            times = [s for s, _ in mine]
            stamps = {s: ts for s, ts in mine if a <= s <= b}
            for g in history_grid_s(self.plant, start, end, tag.poll_seconds, align=True):
                i = bisect.bisect_left(times, g)
                near = [abs(times[j] - g) for j in (i - 1, i) if 0 <= j < len(times)]
                if not near or min(near) >= tag.poll_seconds:
                    stamps.setdefault(float(g), self.plant.time_at(g))
            if not stamps:
                continue
            t_s = np.array(sorted(stamps))
            s = self.plant.sample_arrays([tag], t_s)[tag.name]
            out.extend(FeedReading(tag.name, stamps[float(x)], float(v), bool(ok))
                       for x, v, ok, here in zip(t_s.tolist(), s.values.tolist(),
                                                 s.ok.tolist(), s.present.tolist(), strict=True)
                       if here)
        out.sort(key=lambda r: (r.ts, r.tag))
        return out
