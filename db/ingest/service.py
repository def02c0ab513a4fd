"""The ingest service: poll the feeds, quality-check, store, recommend, keep the database.

``IngestService(site, engine, feeds, *, clock=None, ...)`` holds the state (QC windows, feed
health, latest recommendations); each job method does the work of one run at the time it is
given, so tests and the demo can drive it from a simulated clock (:mod:`db.ingest.schedule`
wires the same methods to APScheduler for real time):

- ``poll_once(now, groups=None) -> PollReport``: for each poll group (tags of one feed with one
  poll period; all groups when ``groups`` is None) one bulk ``feed.read``; after an outage, or
  at the first poll after a start with readings stored, a feed with history is also asked for
  ``feed.history(tags, since, until)`` (``since``: the time up to which the group's readings are
  complete, at most ``max_backfill_s`` back; ``until``: the newest time stamp of the live read,
  or ``now`` if later; the read comes first, so it is what tells the feed is back, and nothing
  the source recorded while it reconnected is missed). Backfill and live readings are QC'd
  (:mod:`db.ingest.live_qc`) and stored as one batch (:func:`db.readings.store_arrays`: raw
  readings and rollups, atomic, idempotent, so overlaps are harmless), re-flags are applied, a
  CSV drop folder is committed, and the feed's health is written
  (:func:`db.feed_health.update_feed_health`): last success, readings per minute (live readings
  of the cycle per minute since the group's previous poll, summed over the feed's groups), lag
  (now − newest source time stamp, ≥ 0) — or, on a :class:`FeedError` (or any exception a feed
  raises), the error with the number of consecutive errors; the feed is polled again at its next
  period (its own back-off decides whether it really connects).
- ``recommend_once(now)``: each fishway's recommender cycle (:mod:`db.ingest.recommending`)
  with its ladder *in force* (site file plus supervisors' overrides,
  :func:`db.in_force.effective_site`, read at each cycle); a fishway whose mode in force is
  ``maintenance`` or ``out_of_service`` is skipped with that reason
  (:func:`~db.ingest.recommending.not_operating`: no recommendation, no failure, no feed
  problem; counted in ``totals["not_operating"]``, not in ``totals["skipped"]``).
- ``prune_once(now)``: :func:`db.retention.prune` with the site's ``keep_raw_days``.
- ``partitions_once(now)``: :func:`db.partitions.ensure_partitions` two months ahead.
- ``backup_once(now)``: :func:`db.ingest.upkeep.backup_sqlite` (SQLite only).
- ``run_once(now)``: a poll of every group, then the recommenders (``fishway ingest --once``).
- ``ingest(readings, *, now=None, history=())``: QC and store readings as one batch (the core
  of a poll; also the demo's seeding and the benchmark).

Start-up (at the first job, or ``start_up(now)``): the QC windows are seeded from the stored
readings (each tag's window span back from ``now``), the spike verdicts of the seeded readings
are re-checked (a re-flag lost to a crash is written again), and every group with stored
readings is marked for a backfill at its first successful poll, so a restart loses neither
context nor data. Methods are serialised by a lock (the scheduler may call them from threads).

Alarm hook
----------
``evaluators``: callables ``evaluator(now, context)`` run after every ``poll_once`` and
``recommend_once`` with a :class:`CycleContext` (``kind`` "poll" or "recommend"): the latest
reading and QC flag of every tag, the health of every feed, the latest recommendation of every
fishway and what the cycle did. The alarm engine (``ops_logic.alarms``) plugs in here: an
evaluator builds its ``AlarmInputs`` from the context, calls ``AlarmEngine.evaluate(now,
...)`` and stores the events. An evaluator that raises is logged with its traceback and shown
in ``feed_health`` as ``evaluator:<name>``; the ingest goes on.
"""
from __future__ import annotations

import logging
import math
import threading
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from operator import attrgetter
from pathlib import Path
from typing import Any, NamedTuple

import numpy as np
import pandas as pd
from sqlalchemy.engine import Engine

from db.catalog import tags_frame
from db.feed_health import update_feed_health
from db.feeds.base import Feed, FeedReading
from db.in_force import effective_site
from db.ingest.live_qc import LiveQc, Usable
from db.ingest.qc_config import PAIR_FAIL_M, PAIR_SUSPECT_M, redundant_pairs, tag_thresholds
from db.ingest.recommending import (
    RecommendOutcome,
    fishway_tags,
    health_feed_name,
    not_operating,
    recommend_fishway,
)
from db.ingest.store import apply_reflags, recent_readings
from db.ingest.upkeep import backup_sqlite
from db.partitions import ensure_partitions
from db.readings import store_arrays
from db.retention import PruneReport, prune
from db.site_sync import sync_site
from db.types import ms_to_datetime, to_epoch_ms, to_utc
from ops_logic.ladder import Ladder
from ops_logic.recommend import Recommendation
from ops_logic.site import Site
from ops_logic.tags import TagDef, site_tags

__all__ = ["CycleContext", "Evaluator", "FeedState", "IngestResult", "IngestService",
           "PollGroup", "PollReport"]

_log = logging.getLogger("db.ingest")

SEED_MARGIN_S = 3600.0  # extra history loaded at start-up, so each window has its anchor
PARTITION_MONTHS_AHEAD = 62  # days of future partitions made by partitions_once


class PollGroup(NamedTuple):
    """Tags of one feed polled at one period [s]."""

    feed_id: str
    period_s: float


@dataclass
class FeedState:
    """What the service knows of a feed's health (written to ``feed_health`` each cycle)."""

    feed_id: str
    ok: bool | None = None
    last_success_at: datetime | None = None
    consecutive_errors: int = 0
    last_error: str | None = None
    last_error_at: datetime | None = None
    readings_per_min: float | None = None
    lag_s: float | None = None
    newest_ms: int | None = None
    backfilled: int = 0


@dataclass
class _Group:
    tags: list[TagDef]
    needs_backfill: bool = False
    last_poll: datetime | None = None
    rate_per_min: float = 0.0


@dataclass(frozen=True)
class IngestResult:
    """One stored batch: readings received, new rows stored, re-flags, unknown tag names."""

    received: int
    stored: int
    reflagged: int
    unknown: tuple[str, ...] = ()


@dataclass
class PollReport:
    """What one ``poll_once`` did, per feed: stored rows, backfilled readings, errors."""

    now: datetime
    stored: int = 0
    received: int = 0
    backfilled: int = 0
    reflagged: int = 0
    errors: dict[str, str] = field(default_factory=dict)


@dataclass(frozen=True)
class CycleContext:
    """What an evaluator sees after a cycle (see the module docstring)."""

    now: datetime
    kind: str
    site: Site
    engine: Engine
    tag_ids: Mapping[str, int]
    readings: Mapping[str, Usable]
    feeds: Mapping[str, FeedState]
    recommendations: Mapping[str, Recommendation]
    poll: PollReport | None = None
    recommend: tuple[RecommendOutcome, ...] = ()


Evaluator = Callable[[datetime, CycleContext], Any]


_VALUE, _SOURCE_OK = attrgetter("value"), attrgetter("source_ok")


def _columns(readings: Sequence[FeedReading], history: Sequence[FeedReading]
             ) -> tuple[dict[str, tuple[np.ndarray, np.ndarray, np.ndarray]],
                        dict[str, np.ndarray]]:
    """Readings as per-tag arrays (times [epoch ms], values, source_ok) and timed masks."""
    both = [*readings, *history]
    if not both:
        return {}, {}
    tags = [r.tag for r in both]
    stamps = [r.ts for r in both]
    # one poll's readings share a time stamp object: convert each object once (``first``
    # holds the objects, so their ids stay unique while they are used)
    ids = list(map(id, stamps))
    first = dict(zip(ids, stamps, strict=True))
    ms_of = {k: to_epoch_ms(ts) for k, ts in first.items()}
    ms = np.fromiter(map(ms_of.__getitem__, ids), np.int64, len(ids))
    values = np.fromiter(map(_VALUE, both), np.float64, len(both))
    ok = np.fromiter(map(_SOURCE_OK, both), bool, len(both))
    timed = np.zeros(len(both), dtype=bool)
    timed[:len(readings)] = True
    codes, names = pd.factorize(np.asarray(tags, dtype=object))
    order = np.argsort(codes, kind="stable")
    bounds = np.concatenate(([0], np.cumsum(np.bincount(codes, minlength=len(names)))))
    batch, masks = {}, {}
    for k, name in enumerate(names.tolist()):
        part = order[bounds[k]:bounds[k + 1]]
        batch[name] = (ms[part], values[part], ok[part])
        masks[name] = timed[part]
    return batch, masks


def _error_text(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()[0] if str(exc).strip() else ""
    return f"{type(exc).__name__}: {text}" if text else type(exc).__name__


class IngestService:
    """The ingest service of one site; see the module docstring.

    Parameters
    ----------
    site : Site
        The validated site model.
    engine : Engine
        The database (migrated).
    feeds : mapping
        Feed id → :class:`~db.feeds.base.Feed` (:func:`db.feeds.registry.build_feeds`).
    clock : callable or None
        ``clock() -> tz-aware datetime``, the time the scheduler passes to the jobs (default:
        the UTC wall clock; a simulated clock in tests and the demo).
    tag_ids : mapping or None
        Tag name → database id (default: :func:`db.site_sync.sync_site` is run).
    evaluators : sequence
        The alarm hook (see the module docstring).
    backup_dir : path or None
        Folder of the nightly SQLite backups (default ``<database folder>/backups``).
    keep_backups : int
        Number of nightly backups kept, ≥ 1.
    max_backfill_s : float
        Longest gap a backfill asks a feed's history for [s], > 0.
    """

    def __init__(self, site: Site, engine: Engine, feeds: Mapping[str, Feed], *,
                 clock: Callable[[], datetime] | None = None,
                 tag_ids: Mapping[str, int] | None = None,
                 evaluators: Sequence[Evaluator] = (), backup_dir: str | Path | None = None,
                 keep_backups: int = 7, max_backfill_s: float = 86400.0):
        if site.ingest.keep_raw_days < 1:
            raise ValueError(f"ingest.keep_raw_days = {site.ingest.keep_raw_days:g}: raw "
                             "readings must be kept at least 1 day")
        if keep_backups < 1 or not (math.isfinite(max_backfill_s) and max_backfill_s > 0):
            raise ValueError("keep_backups must be >= 1 and max_backfill_s > 0 s")
        self.site, self.engine = site, engine
        self.feeds = dict(feeds)
        self.clock = clock or (lambda: datetime.now(UTC))
        self.tags = site_tags(site)
        missing = sorted({t.feed for t in self.tags} - set(self.feeds))
        if missing:
            raise ValueError(f"no feed given for feed id(s) {', '.join(missing)}")
        self.tag_ids = dict(tag_ids) if tag_ids is not None else sync_site(engine, site)
        rows = tags_frame(engine)
        rows = rows[rows.index.isin(list(self.tag_ids.values()))]
        self.fishway_db_ids = {t.fishway_id: int(rows.loc[self.tag_ids[t.name], "fishway_id"])
                               for t in self.tags}
        limit_cols = ["fail_low", "fail_high", "suspect_low", "suspect_high"]
        qc_tags = {t.name: (self.tag_ids[t.name], tag_thresholds(
            site, t, rows.loc[self.tag_ids[t.name], limit_cols].to_dict())) for t in self.tags}
        polls = {t.name: t.poll_seconds for t in self.tags}
        pairs = redundant_pairs(self.tags)
        self.qc = LiveQc(qc_tags, tz=site.site.time_zone, pairs=pairs,
                         pair_thresholds=(PAIR_SUSPECT_M, PAIR_FAIL_M),
                         pair_tolerance_ms={a: int(500 * polls[a]) for a, _ in pairs})
        self.groups: dict[PollGroup, _Group] = {}
        for t in self.tags:
            self.groups.setdefault(PollGroup(t.feed, float(t.poll_seconds)),
                                   _Group([])).tags.append(t)
        self.states = {fid: FeedState(fid) for fid in self.feeds}
        self._fishway_tags = fishway_tags(self.tags)
        self.evaluators = list(evaluators)
        self.latest_recommendations: dict[str, Recommendation] = {}
        self.backup_dir = Path(backup_dir) if backup_dir is not None else None
        self.keep_backups = int(keep_backups)
        self.max_backfill_s = float(max_backfill_s)
        self.totals = {"stored": 0, "received": 0, "backfilled": 0, "reflagged": 0,
                       "recommendations": 0, "skipped": 0, "not_operating": 0}
        """Running counts since the service was made (for status lines)."""
        self._warned: set[str] = set()
        self._lock = threading.RLock()
        self._started = False

    @property
    def ladders(self) -> dict[str, Ladder]:
        """The fishways' ladders in force (:func:`db.in_force.effective_site`), by id."""
        return effective_site(self.site, self.engine).ladders

    # -- start-up ---------------------------------------------------------------------------
    def start_up(self, now: datetime) -> None:
        """Seed the QC windows from storage (once); see the module docstring."""
        with self._lock:
            if self._started:
                return
            now_ms = to_epoch_ms(now)
            longest = max(self.qc.window(n).span_ms for n in self.qc.names)
            start = now_ms - longest - int(SEED_MARGIN_S * 1000)
            stored = recent_readings(self.engine, self.tag_ids, start, 2**62)
            reflags = []
            for name, (ms, x, flags) in stored.items():
                if ms.size and not len(self.qc.window(name)):
                    self.qc.seed(name, ms, x, flags)
                    reflags += self.qc.recheck_spikes(name)
            if reflags:
                apply_reflags(self.engine, reflags)
            for group in self.groups.values():
                group.needs_backfill = any(len(self.qc.window(t.name)) for t in group.tags)
            self._started = True
            _log.info("ingest of %s: %d tags in %d poll group(s); windows seeded with %d "
                      "readings", self.site.site.name, len(self.tags), len(self.groups),
                      sum(s[0].size for s in stored.values()))

    def request_backfill(self) -> None:
        """Ask every poll group with readings for a backfill at its next successful poll."""
        with self._lock:
            for group in self.groups.values():
                group.needs_backfill = any(len(self.qc.window(t.name)) for t in group.tags)

    # -- the core: QC and store one batch ---------------------------------------------------
    def ingest(self, readings: Sequence[FeedReading], *, now: datetime | None = None,
               history: Sequence[FeedReading] = ()) -> IngestResult:
        """QC ``readings`` (timing-tested at arrival time ``now`` when given) and ``history``
        (never timing-tested), store them as one batch, apply re-flags, update the windows."""
        with self._lock:
            batch, timed_masks = _columns(readings, history)
            now_s = to_utc(now).timestamp() if now is not None else None
            ev = self.qc.evaluate(batch, now_s=now_s, timed=timed_masks)
            for name in ev.unknown:
                if name not in self._warned:
                    self._warned.add(name)
                    _log.warning("readings of tag %r ignored: not in the site's catalogue", name)
            stored = store_arrays(self.engine, *ev.arrays()) if len(ev) else 0
            reflagged = apply_reflags(self.engine, ev.reflags) if ev.reflags else 0
            self.qc.commit(ev)
            return IngestResult(len(readings) + len(history), stored, reflagged,
                                tuple(ev.unknown))

    # -- polling ----------------------------------------------------------------------------
    def _complete_through(self, group: _Group, now: datetime) -> datetime | None:
        lasts = [(self.qc.window(t.name).last_ms, t) for t in group.tags]
        lasts = [(ms, t) for ms, t in lasts if ms is not None]
        if not lasts:
            return None
        newest = max(ms for ms, _ in lasts)
        fresh = [ms for ms, t in lasts
                 if newest - ms <= 1000.0 * (self.qc.thresholds(t.name).max_age_s or 60.0)]
        since = ms_to_datetime(min(fresh))
        return max(since, now - timedelta(seconds=self.max_backfill_s))

    def _feed_failed(self, key: PollGroup, now: datetime, exc: BaseException,
                     what: str) -> str:
        state = self.states[key.feed_id]
        state.ok = False
        state.consecutive_errors += 1
        n = state.consecutive_errors
        text = (f"{what}: {_error_text(exc)} ({n} consecutive error{'s' if n > 1 else ''})")
        state.last_error, state.last_error_at = text, now
        self.groups[key].needs_backfill = True
        log = _log.warning if n == 1 else _log.debug
        log("feed %s: %s", key.feed_id, text)
        try:
            update_feed_health(self.engine, key.feed_id, now, ok=False, error=text)
        except Exception:  # the database itself may be what failed
            _log.exception("feed %s: could not record its failure in feed_health",
                           key.feed_id)
        return text

    def _poll_group(self, key: PollGroup, now: datetime, report: PollReport) -> None:
        group, feed, state = self.groups[key], self.feeds[key.feed_id], self.states[key.feed_id]
        try:
            live = feed.read(group.tags, now)
        except Exception as exc:
            report.errors[key.feed_id] = self._feed_failed(key, now, exc, "read failed")
            return
        history: list[FeedReading] = []
        if group.needs_backfill:
            since = self._complete_through(group, now)
            # up to the newest live reading: the source may have moved on since ``now``
            until = max((r.ts for r in live), default=now)
            until = max(until, now)
            try:
                if since is not None and since < until and feed.supports_history:
                    history = feed.history(group.tags, since, until)
            except Exception as exc:
                report.errors[key.feed_id] = self._feed_failed(key, now, exc,
                                                               "backfill failed")
                return
        try:
            result = self.ingest(live, now=now, history=history)
        except Exception as exc:
            _log.exception("feed %s: storing %d readings failed", key.feed_id,
                           len(live) + len(history))
            report.errors[key.feed_id] = self._feed_failed(key, now, exc, "storing failed")
            return
        commit = getattr(feed, "commit", None)
        if callable(commit):
            commit()
        if history:
            _log.info("feed %s: backfilled %d readings since %s", key.feed_id, len(history),
                      history[0].ts.isoformat())
        if state.ok is False:
            _log.warning("feed %s: back after %d error(s)", key.feed_id,
                         state.consecutive_errors)
        elapsed = ((now - group.last_poll).total_seconds() if group.last_poll is not None
                   and now > group.last_poll else key.period_s)
        group.rate_per_min = 60.0 * len(live) / elapsed
        group.last_poll, group.needs_backfill = now, False
        newest = max((to_epoch_ms(r.ts) for r in live), default=None)
        if newest is not None:
            state.newest_ms = max(newest, state.newest_ms or newest)
        state.ok, state.consecutive_errors, state.last_success_at = True, 0, now
        state.readings_per_min = sum(g.rate_per_min for k, g in self.groups.items()
                                     if k.feed_id == key.feed_id)
        state.lag_s = (max((to_epoch_ms(now) - state.newest_ms) / 1000.0, 0.0)
                       if state.newest_ms is not None else None)
        state.backfilled += len(history)
        update_feed_health(self.engine, key.feed_id, now, ok=True,
                           readings_per_min=state.readings_per_min, lag_s=state.lag_s)
        report.stored += result.stored
        report.received += len(live)
        report.backfilled += len(history)
        report.reflagged += result.reflagged

    def poll_once(self, now: datetime, groups: Sequence[PollGroup] | None = None) -> PollReport:
        """Poll every group (or those given) once at ``now``; then run the evaluators."""
        self.start_up(now)
        with self._lock:
            report = PollReport(now)
            for key in (groups if groups is not None else list(self.groups)):
                self._poll_group(key, now, report)
            for key in ("stored", "received", "backfilled", "reflagged"):
                self.totals[key] += getattr(report, key)
            self._evaluate(now, "poll", poll=report)
            return report

    # -- recommending -----------------------------------------------------------------------
    def recommend_once(self, now: datetime) -> list[RecommendOutcome]:
        """One recommender cycle of every fishway at ``now``; then run the evaluators."""
        self.start_up(now)
        with self._lock:
            out = []
            for f in self.site.fishways:
                try:
                    eff = effective_site(self.site, self.engine)  # cached: one small query
                    mode = eff.modes.get(f.id, "operating")
                    if mode != "operating":
                        o = not_operating(self.engine, f.id, mode, now)
                    else:
                        o = recommend_fishway(self.engine, eff.ladders[f.id], self.qc,
                                              self._fishway_tags[f.id],
                                              self.fishway_db_ids[f.id], now)
                except Exception as exc:
                    _log.exception("recommender of %s failed", f.id)
                    o = RecommendOutcome(f.id, now, None, None,
                                         skipped=f"recommender failed: {_error_text(exc)}")
                    update_feed_health(self.engine, health_feed_name(f.id), now, ok=False,
                                       error=o.skipped or "failed")
                if o.recommendation is not None:
                    self.latest_recommendations[f.id] = o.recommendation
                    self.totals["recommendations"] += 1
                elif not o.failed:
                    self.latest_recommendations.pop(f.id, None)  # none while not operating
                    self.totals["not_operating"] += 1
                else:
                    self.totals["skipped"] += 1
                out.append(o)
            self._evaluate(now, "recommend", recommend=tuple(out))
            return out

    def run_once(self, now: datetime) -> tuple[PollReport, list[RecommendOutcome]]:
        """A poll of every group, then the recommenders (``fishway ingest --once``)."""
        return self.poll_once(now), self.recommend_once(now)

    # -- upkeep -----------------------------------------------------------------------------
    def prune_once(self, now: datetime) -> PruneReport:
        """Delete raw readings older than the site's ``keep_raw_days`` (small transactions)."""
        report = prune(self.engine, now, keep_days=self.site.ingest.keep_raw_days)
        _log.info("prune: %d raw reading(s) before %s deleted, %d partition(s) dropped",
                  report.rows_deleted, report.cutoff.isoformat(),
                  len(report.partitions_dropped))
        return report

    def partitions_once(self, now: datetime) -> list[str]:
        """Make sure PostgreSQL partitions exist two months ahead (no-op on SQLite)."""
        return ensure_partitions(self.engine, now + timedelta(days=PARTITION_MONTHS_AHEAD),
                                 since=now)

    def backup_once(self, now: datetime) -> Path | None:
        """Online backup of the SQLite file (None on other engines)."""
        return backup_sqlite(self.engine, now, backup_dir=self.backup_dir,
                             keep=self.keep_backups)

    # -- the alarm hook ---------------------------------------------------------------------
    def context(self, now: datetime, kind: str, *, poll: PollReport | None = None,
                recommend: tuple[RecommendOutcome, ...] = ()) -> CycleContext:
        """The :class:`CycleContext` evaluators get (also for status displays)."""
        with self._lock:
            readings = {n: u for n in self.qc.names if (u := self.qc.latest(n)) is not None}
            feeds = {k: FeedState(**vars(s)) for k, s in self.states.items()}
            return CycleContext(now, kind, self.site, self.engine, dict(self.tag_ids),
                                readings, feeds, dict(self.latest_recommendations), poll,
                                recommend)

    def _evaluate(self, now: datetime, kind: str, **details: Any) -> None:
        if not self.evaluators:
            return
        ctx = self.context(now, kind, **details)
        for evaluator in self.evaluators:
            name = getattr(evaluator, "__name__", type(evaluator).__name__)
            try:
                evaluator(now, ctx)
            except Exception as exc:
                _log.exception("evaluator %s failed", name)
                update_feed_health(self.engine, f"evaluator:{name}", now, ok=False,
                                   error=_error_text(exc))

    def close(self) -> None:
        """Close every feed."""
        for feed in self.feeds.values():
            try:
                feed.close()
            except Exception:  # closing must not hide the reason we stop
                _log.exception("closing feed %s failed", feed.id)
