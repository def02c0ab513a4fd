"""A small ingest driver for the crash test: ``python crash_driver.py DB START UNTIL BLOCK [GAP]``.

It runs :class:`db.ingest.service.IngestService` on the demo site's west ladder against the
SQLite file DB, with a simulated clock and a synthetic feed (:class:`GridFeed`) that delivers
each poll as one block: every tag at each whole second of the last BLOCK seconds, so one
batch holds BLOCK × 15 readings and covers BLOCK time stamps for all tags (a half-stored
batch would show as a time stamp with fewer than 15 readings, or a block with fewer than BLOCK
time stamps). The site polls every BLOCK seconds, so no reading is stale on arrival.
After each stored batch it prints ``batch K`` (flushed). On start it resumes: when the
database holds readings the clock starts GAP seconds after the newest (the service backfills
the gap from the feed's history). Values are a deterministic function of tag and time.
"""
from __future__ import annotations

import math
import sys
from datetime import UTC, datetime
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from conftest import west_site

from db.engine import make_engine
from db.feeds.base import Feed, FeedReading
from db.ingest.qc_config import tag_thresholds
from db.ingest.schedule import SimulatedClock
from db.ingest.service import IngestService
from db.ingest.store import newest_ms
from db.migrate import upgrade
from db.site_sync import sync_site

__all__ = ["GridFeed", "run"]


class GridFeed(Feed):
    """Readings of every tag at each whole second; see the module docstring."""

    supports_history = True

    def __init__(self, site, block_s: int):
        self.id = "plant"
        self.block_s = block_s
        self.mid = {}
        for i, tag in enumerate(site_tags_of(site)):
            low, high = tag_thresholds(site, tag).fail_span
            low, high = max(low, -1e3), min(high, 1e3)
            self.mid[tag.name] = (0.5 * (low + high), i)

    def _at(self, tags, seconds) -> list[FeedReading]:
        out = []
        for s in seconds:
            ts = datetime.fromtimestamp(s, tz=UTC)
            for tag in tags:
                mid, i = self.mid[tag.name]
                out.append(FeedReading(tag.name, ts, mid + 0.002 * math.sin(s / 40.0 + i)))
        return out

    def read(self, tags, now):
        end = int(now.timestamp())
        return self._at(tags, range(end - self.block_s + 1, end + 1))

    def history(self, tags, start, end):
        return self._at(tags, range(math.ceil(start.timestamp()), int(end.timestamp()) + 1))


def site_tags_of(site):
    from ops_logic.tags import site_tags
    return site_tags(site)


def run(db: str, start_s: int, until_s: int, block_s: int, gap_s: int = 0,
        echo=lambda line: None) -> int:
    """Ingest blocks from ``start_s`` (or resume) to ``until_s``; return the batches stored."""
    site = west_site(poll_seconds=float(block_s), recommend_seconds=3600.0)
    engine = make_engine(sqlite_path=db)
    upgrade(engine)
    tag_ids = sync_site(engine, site)
    newest = newest_ms(engine, tag_ids)
    now_s = start_s + block_s
    if newest:  # resume GAP seconds after the newest stored reading (at most at UNTIL)
        last = max(newest.values()) // 1000
        now_s = min(last + max(gap_s, block_s), until_s) if last < until_s else until_s + 1
    clock = SimulatedClock(datetime.fromtimestamp(now_s, tz=UTC))
    service = IngestService(site, engine, {"plant": GridFeed(site, block_s)}, clock=clock,
                            tag_ids=tag_ids)
    k = 0
    while now_s <= until_s:
        report = service.poll_once(clock())
        if report.errors:
            raise RuntimeError(report.errors)
        k += 1
        echo(f"batch {k}")
        now_s += block_s
        clock.set(datetime.fromtimestamp(now_s, tz=UTC))
    engine.dispose()
    return k


if __name__ == "__main__":
    db, start, until, block, *rest = sys.argv[1:]

    def echo(line: str) -> None:
        print(line, flush=True)

    run(db, int(start), int(until), int(block), int(rest[0]) if rest else 0, echo)
