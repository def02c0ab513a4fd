"""The one small interface every feed implements, and the reading it hands to the ingest.

Contract (the same contract tests run against every feed, see ``tests/db/test_feed_contract.py``):

- ``feed.id`` names the feed (the site file's ``[[ingest.feeds]] id``).
- ``feed.read(tags, now)`` makes one bulk read of the current values of ``tags`` (a sequence of
  :class:`ops_logic.tags.TagDef`) and returns one :class:`FeedReading` per tag it could read,
  stamped with the source's own time. A value the source marks bad comes back with
  ``source_ok=False`` (its value may be NaN). A communications failure raises
  :class:`FeedError`; the feed must then reconnect by itself on a later call (with back-off:
  ``read`` raises at once while the back-off lasts rather than blocking the scheduler).
- ``feed.supports_history`` tells whether ``feed.history(tags, start, end)`` can return the
  readings the source kept between two times (used to backfill a gap after an outage); a feed
  without history returns an empty list.
- ``feed.commit()`` is called by the ingest after the readings of a ``read`` are stored: a feed
  that consumes its source (the CSV drop folder moves its files) does so only then, so a crash
  between reading and storing loses nothing (storage is idempotent, a re-read is harmless).
- ``feed.problems`` lists what the last ``read`` could not read (unknown addresses, bad rows),
  one line each, for the feed-health table; the readings it could read are still returned.
- ``feed.close()`` releases connections; a closed feed may be read again (it reconnects).

Values are SI in the tag's unit (``TagDef.unit``); times are timezone-aware UTC.
"""

from __future__ import annotations

import math
from abc import ABC, abstractmethod
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime

from ops_logic.tags import TagDef

__all__ = ["Feed", "FeedError", "FeedReading"]


class FeedError(RuntimeError):
    """The feed could not be read (connection lost, server down, folder unreadable)."""


@dataclass(frozen=True)
class FeedReading:
    tag: str
    ts: datetime
    value: float
    source_ok: bool = True

    def __post_init__(self) -> None:
        if self.ts.tzinfo is None:
            raise ValueError(f"reading of {self.tag} has a naive timestamp {self.ts!r}")
        if self.source_ok and not math.isfinite(self.value):
            object.__setattr__(self, "source_ok", False)


class Feed(ABC):
    """A source of readings; see the module docstring for the contract."""

    id: str
    supports_history: bool = False
    problems: list[str]

    def __init__(self) -> None:
        self.problems = []

    @abstractmethod
    def read(self, tags: Sequence[TagDef], now: datetime) -> list[FeedReading]:
        """One bulk read of the current value of each tag."""

    def history(self, tags: Sequence[TagDef], start: datetime, end: datetime
                ) -> list[FeedReading]:
        """Readings kept by the source between ``start`` and ``end`` (inclusive)."""
        return []

    def commit(self) -> None:  # noqa: B027 - optional for feeds that consume nothing
        """Acknowledge that the last read's readings are stored."""

    def close(self) -> None:  # noqa: B027 - optional for feeds that hold nothing
        """Release connections."""
