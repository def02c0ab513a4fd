"""When the ingest jobs run: one job list, driven by APScheduler in real time or by a simulated
clock in tests and the demo.

:func:`service_jobs` lists the jobs of an :class:`~db.ingest.service.IngestService`:

- one poll job per poll group, every ``period_s`` (the site's ``[ingest] poll_seconds`` or a
  tag's own), due on multiples of the period in Unix time;
- ``recommend`` every ``[ingest] recommend_seconds`` (default 60 s), after the polls due at
  the same instant;
- daily, in the site's time zone: ``backup`` at 01:30, ``prune`` at 02:30, ``partitions`` at
  02:45 (quiet hours; the backup first, so it holds what the prune removes).

:func:`run_simulated` plays the jobs in simulated time: it sets a :class:`SimulatedClock` to
each due time in turn (ties in list order) and calls the job, so a day of simulated time runs
as fast as the jobs do. :func:`build_scheduler` wires the same jobs to an APScheduler 3
``BackgroundScheduler`` (two single-thread executors, polls and recommendations on one,
upkeep on the other; ``coalesce`` and one instance per job, so a late job runs once, not in a
burst); with ``speed`` ≠ 1 every period is divided by ``speed`` and the jobs get the time of
a :class:`ScaledClock`. A job that raises is logged with its traceback and recorded in
``feed_health`` as ``job:<name>``; the scheduler goes on.

>>> from datetime import UTC, datetime
>>> clock = SimulatedClock(datetime(2026, 6, 1, tzinfo=UTC))
>>> clock.advance(90); clock().isoformat()
'2026-06-01T00:01:30+00:00'
>>> next_due(datetime(2026, 6, 1, 0, 0, 7, tzinfo=UTC), 10.0).isoformat()
'2026-06-01T00:00:10+00:00'
"""
from __future__ import annotations

import logging
import math
import time
from collections.abc import Callable
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from datetime import time as dtime
from typing import Any
from zoneinfo import ZoneInfo

from apscheduler.executors.pool import ThreadPoolExecutor
from apscheduler.schedulers.background import BackgroundScheduler
from apscheduler.triggers.cron import CronTrigger
from apscheduler.triggers.interval import IntervalTrigger

from db.feed_health import update_feed_health
from db.types import to_utc

__all__ = ["DAILY_TIMES", "Job", "ScaledClock", "SimulatedClock", "build_scheduler",
           "next_due", "run_job", "run_simulated", "service_jobs"]

_log = logging.getLogger("db.ingest")

DAILY_TIMES = {"backup": dtime(1, 30), "prune": dtime(2, 30), "partitions": dtime(2, 45)}
"""Local time of day (the site's zone) of the daily jobs."""
RECOMMEND_LAG_S = 2.0
"""Seconds of service time the recommender runs after the polls of the same instant
(APScheduler; divided by the speed in real time)."""


class SimulatedClock:
    """A clock that stands still until set or advanced (tz-aware UTC datetimes)."""

    def __init__(self, start: datetime):
        self._now = to_utc(start)

    def __call__(self) -> datetime:
        return self._now

    def set(self, when: datetime) -> None:
        self._now = to_utc(when)

    def advance(self, seconds: float) -> None:
        self._now += timedelta(seconds=seconds)


class ScaledClock:
    """Simulated time running ``speed`` times faster than real time from ``start``."""

    def __init__(self, start: datetime, speed: float = 1.0):
        if not (math.isfinite(speed) and speed > 0):
            raise ValueError(f"speed must be a positive number, got {speed!r}")
        self.start, self.speed = to_utc(start), float(speed)
        self._mono0 = time.monotonic()

    def __call__(self) -> datetime:
        return self.start + timedelta(seconds=self.speed * (time.monotonic() - self._mono0))


@dataclass(frozen=True)
class Job:
    """A job: ``run(now)`` every ``period_s``, or daily at ``daily_at`` (local time)."""

    name: str
    run: Callable[[datetime], Any]
    period_s: float | None = None
    daily_at: dtime | None = None
    upkeep: bool = False


def next_due(now: datetime, period_s: float) -> datetime:
    """First multiple of ``period_s`` of Unix time at or after ``now``."""
    t = to_utc(now).timestamp()
    k = math.ceil(t / period_s - 1e-9)
    return datetime.fromtimestamp(k * period_s, tz=UTC)


def _next_daily(now: datetime, at: dtime, tz: str) -> datetime:
    local = to_utc(now).astimezone(ZoneInfo(tz))
    due = datetime.combine(local.date(), at, tzinfo=ZoneInfo(tz))
    if due < local:
        due = datetime.combine(local.date() + timedelta(days=1), at, tzinfo=ZoneInfo(tz))
    return due.astimezone(UTC)


def service_jobs(service: Any) -> list[Job]:
    """The jobs of an ingest service, polls first (see the module docstring)."""
    jobs = [Job(f"poll:{key.feed_id}:{key.period_s:g}s",
                lambda now, key=key: service.poll_once(now, [key]), period_s=key.period_s)
            for key in service.groups]
    jobs.append(Job("recommend", service.recommend_once,
                    period_s=float(service.site.ingest.recommend_seconds)))
    jobs += [Job("backup", service.backup_once, daily_at=DAILY_TIMES["backup"], upkeep=True),
             Job("prune", service.prune_once, daily_at=DAILY_TIMES["prune"], upkeep=True),
             Job("partitions", service.partitions_once, daily_at=DAILY_TIMES["partitions"],
                 upkeep=True)]
    return jobs


def run_job(service: Any, job: Job, now: datetime) -> Any:
    """Run one job at ``now``; an exception is logged and shown in ``feed_health``."""
    try:
        return job.run(now)
    except Exception as exc:
        _log.exception("job %s failed", job.name)
        try:
            update_feed_health(service.engine, f"job:{job.name}", now, ok=False,
                               error=f"{type(exc).__name__}: {exc}"[:500])
        except Exception:
            _log.exception("could not record the failure of job %s", job.name)
        return None


def run_simulated(service: Any, clock: SimulatedClock, until: datetime, *,
                  jobs: list[Job] | None = None,
                  after: Callable[[Job, datetime, Any], None] | None = None) -> dict[str, int]:
    """Run the jobs on their schedule from ``clock()`` up to ``until`` (inclusive), setting
    the clock to each due time; ``after(job, now, result)`` is called after each run.
    Returns the number of runs of each job."""
    jobs = jobs if jobs is not None else service_jobs(service)
    tz = service.site.site.time_zone
    start, end = clock(), to_utc(until)

    def first(job: Job) -> datetime:
        if job.period_s is not None:
            return next_due(start, job.period_s)
        assert job.daily_at is not None
        return _next_daily(start, job.daily_at, tz)

    due = [first(j) for j in jobs]
    runs = dict.fromkeys((j.name for j in jobs), 0)
    while True:
        i = min(range(len(jobs)), key=lambda k: (due[k], k))
        if due[i] > end:
            break
        clock.set(due[i])
        result = run_job(service, jobs[i], due[i])
        runs[jobs[i].name] += 1
        if after is not None:
            after(jobs[i], due[i], result)
        period = jobs[i].period_s
        due[i] = (due[i] + timedelta(seconds=period) if period is not None
                  else _next_daily(due[i] + timedelta(seconds=1), jobs[i].daily_at, tz))
    clock.set(end)
    return runs


def build_scheduler(service: Any, *, speed: float = 1.0,
                    clock: Callable[[], datetime] | None = None) -> BackgroundScheduler:
    """An APScheduler ``BackgroundScheduler`` running the service's jobs (not started).

    ``clock`` gives the time passed to the jobs (default: the service's clock); with
    ``speed`` ≠ 1 it should be a :class:`ScaledClock` of that speed.
    """
    if not (math.isfinite(speed) and speed > 0):
        raise ValueError(f"speed must be a positive number, got {speed!r}")
    clock = clock or service.clock
    tz = service.site.site.time_zone
    scheduler = BackgroundScheduler(
        executors={"default": ThreadPoolExecutor(1), "upkeep": ThreadPoolExecutor(1)},
        job_defaults={"coalesce": True, "max_instances": 1}, timezone=UTC)
    sim_now, real_now = clock(), datetime.now(UTC)

    def real_time(sim: datetime) -> datetime:
        return real_now + (sim - sim_now) / speed

    for job in service_jobs(service):
        def call(job: Job = job) -> None:
            run_job(service, job, clock())

        executor = "upkeep" if job.upkeep else "default"
        if job.period_s is not None:
            # the recommender a moment after the polls due at the same instant
            lag = timedelta(seconds=RECOMMEND_LAG_S / speed if job.name == "recommend" else 0.0)
            trigger = IntervalTrigger(seconds=job.period_s / speed, start_date=real_time(
                next_due(sim_now, job.period_s)) + lag, timezone=UTC)
            grace = max(job.period_s / speed, 1.0)
        elif speed == 1.0:
            assert job.daily_at is not None
            trigger = CronTrigger(hour=job.daily_at.hour, minute=job.daily_at.minute,
                                  timezone=ZoneInfo(tz))
            grace = 3600.0
        else:
            assert job.daily_at is not None
            trigger = IntervalTrigger(seconds=86400.0 / speed, start_date=real_time(
                _next_daily(sim_now, job.daily_at, tz)), timezone=UTC)
            grace = max(3600.0 / speed, 1.0)
        scheduler.add_job(call, trigger, id=job.name, name=job.name, executor=executor,
                          misfire_grace_time=int(math.ceil(grace)))
    return scheduler
