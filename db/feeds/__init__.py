"""Feed adapters: where readings come from (simulated plant, OPC UA, CSV drop folder)."""

from db.feeds.base import Feed, FeedError, FeedReading

__all__ = ["Feed", "FeedError", "FeedReading"]
