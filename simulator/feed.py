"""The simulated plant behind the :class:`db.feeds.base.Feed` interface (in-process).

``read(tags, now)`` advances the plant to ``now`` (if later) and samples it; a communications
outage scheduled in the plant makes ``read`` raise :class:`~db.feeds.base.FeedError` until it
ends. ``history(tags, start, end)`` re-samples the past on each tag's poll grid (multiples of
its ``poll_seconds`` of Unix time, up to the plant's present): what the plant measured, outages
included, since the source kept recording while the link was down.
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import datetime

from db.feeds.base import Feed, FeedError, FeedReading
from ops_logic.tags import TagDef
from simulator.history import generate_history
from simulator.plant import Plant

__all__ = ["SimulatedFeed"]


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

    def read(self, tags: Sequence[TagDef], now: datetime) -> list[FeedReading]:
        if self.plant.in_outage(now):
            raise FeedError(f"feed {self.id}: no answer from the simulated plant "
                            f"(communications outage at {now.isoformat()})")
        return self.plant.sample(tags, now)

    def history(self, tags: Sequence[TagDef], start: datetime, end: datetime
                ) -> list[FeedReading]:
        end = min(end, self.plant.now)
        groups: dict[float, list[TagDef]] = {}
        for t in tags:
            groups.setdefault(t.poll_seconds, []).append(t)
        out: list[FeedReading] = []
        for poll, group in groups.items():
            for batch in generate_history(self.plant, group, start, end, poll, align=True,
                                          batch_s=max(86400.0, poll)):
                out.extend(batch)
        out.sort(key=lambda r: (r.ts, r.tag))
        return out
