"""Build the feeds of a site from its ``[ingest]`` section.

``build_feeds(site, *, simulated_factory=None, base_dir=None, timeout_s=5.0) -> dict[str, Feed]``
returns one feed per ``[[ingest.feeds]]`` entry, keyed by its id, in the file's order:

- ``type = "opcua"`` → :class:`db.feeds.opcua.OpcUaFeed` on ``endpoint``;
- ``type = "csv"`` → :class:`db.feeds.csvdrop.CsvDropFeed` on ``folder`` (a relative folder
  is taken from ``base_dir``, e.g. the site file's folder, or else the working directory);
- ``type = "simulated"`` → ``simulated_factory(feed_config, site)``. The simulated plant lives
  in the ``simulator`` package, which ``db`` must not import, so the caller (the ingest
  service started by the command line) passes the factory; without one a site with a
  simulated feed raises ``ValueError``.

Nothing connects here: feeds connect at their first read.

>>> from ops_logic.site import load_site
>>> site = load_site()                      # the demo site: one simulated feed, "plant"
>>> build_feeds(site, simulated_factory=lambda cfg, s: f"simulated {cfg.id}")
{'plant': 'simulated plant'}
>>> build_feeds(site)  # doctest: +IGNORE_EXCEPTION_DETAIL
Traceback (most recent call last):
ValueError: feed plant is simulated but no simulated_factory was given
"""
from __future__ import annotations

import os
from collections.abc import Callable
from pathlib import Path

from db.feeds.base import Feed
from db.feeds.csvdrop import CsvDropFeed
from db.feeds.opcua import OpcUaFeed
from ops_logic.site import Feed as FeedConfig
from ops_logic.site import Site

__all__ = ["SimulatedFactory", "build_feeds"]

SimulatedFactory = Callable[[FeedConfig, Site], Feed]
"""``factory(feed_config, site) -> Feed`` for ``type = "simulated"`` feeds."""


def build_feeds(site: Site, *, simulated_factory: SimulatedFactory | None = None,
                base_dir: str | os.PathLike | None = None,
                timeout_s: float = 5.0) -> dict[str, Feed]:
    """One feed per ``[[ingest.feeds]]`` entry of ``site``, by id; see the module docstring.

    Parameters
    ----------
    site : Site
        The validated site model.
    simulated_factory : callable or None
        Builds the simulated feed; required when the site has one.
    base_dir : path or None
        Folder that relative CSV drop folders are taken from (default: working directory).
    timeout_s : float
        Request and connection timeout of OPC UA feeds [s].
    """
    out: dict[str, Feed] = {}
    for cfg in site.ingest.feeds:
        if cfg.id in out:
            raise ValueError(f"ingest.feeds: feed id {cfg.id!r} is used twice")
        if cfg.type == "opcua":
            assert cfg.endpoint is not None  # checked by the site schema
            out[cfg.id] = OpcUaFeed(cfg.id, cfg.endpoint, timeout_s=timeout_s)
        elif cfg.type == "csv":
            assert cfg.folder is not None
            folder = Path(cfg.folder).expanduser()
            if not folder.is_absolute():
                folder = Path(base_dir if base_dir is not None else Path.cwd()) / folder
            out[cfg.id] = CsvDropFeed(cfg.id, folder)
        elif cfg.type == "simulated":
            if simulated_factory is None:
                raise ValueError(f"feed {cfg.id} is simulated but no simulated_factory was "
                                 "given (the ingest service passes the simulator's)")
            out[cfg.id] = simulated_factory(cfg, site)
        else:  # pragma: no cover - the schema allows only the three types
            raise ValueError(f"feed {cfg.id}: unknown type {cfg.type!r}")
    return out
