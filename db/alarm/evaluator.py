"""The alarm evaluation after each ingest cycle: :class:`AlarmEvaluator`.

``AlarmEvaluator(engine, site, notifier=None)`` is a callable ``evaluator(now, context=None)``
— the signature of the ingest service's per-cycle hook (``IngestService.evaluators``, see
:mod:`db.ingest.service`), so plugging it in is one line; :func:`alarm_evaluator` also gives it
the site's e-mail channel when the site file has a ``[notify]`` section::

    service.evaluators.append(alarm_evaluator(engine, site))

Everything it needs comes from the database (the context is accepted and not needed), so the
same evaluator gives the same alarms from the ingest hook, a scheduled job of its own or a test.
One evaluation:

1. reads the inputs (:class:`~db.alarm.inputs.InputReader`: a fixed handful of queries) outside
   the lock;
2. in one locked transaction (:meth:`db.alarm.store.AlarmStore.session`): brings the
   supervisors' limit and mode changes of the dashboard into the engine when the
   ``setting_changes`` table changed or the state was reloaded
   (:func:`db.alarm.overrides.sync_overrides`), runs :meth:`AlarmEngine.evaluate`, stores its
   events, the changed alarm records and the engine state;
3. after the commit hands the events and the flood status to the notifier (which queues and
   returns at once: a slow or failing mail server never holds up the ingest).

:attr:`AlarmEvaluator.not_evaluated` lists the alarms the engine could not judge (with the
reason) and :attr:`AlarmEvaluator.problems` what was missing from the inputs; both are logged
when they change, so a broken input shows in the log rather than failing silently.
"""
from __future__ import annotations

import logging
from datetime import datetime
from typing import Any, Protocol

from sqlalchemy.engine import Engine

from db.alarm.inputs import InputReader
from db.alarm.overrides import read_overrides, sync_overrides, table_version
from db.alarm.store import AlarmStore, SiteIds
from db.in_force import effective_site
from db.notify import EmailNotifier
from ops_logic.alarms.engine import FloodStatus
from ops_logic.alarms.states import AlarmEvent
from ops_logic.site import Site

__all__ = ["AlarmEvaluator", "Notifier", "alarm_evaluator"]

_log = logging.getLogger("db.alarm")


class Notifier(Protocol):
    """What the evaluator tells after each committed evaluation
    (:class:`db.notify.EmailNotifier`)."""

    def notify(self, events: list[AlarmEvent], now: datetime, flood: FloodStatus) -> int:
        ...


class AlarmEvaluator:
    """Per-cycle alarm evaluation of one site; see the module docstring.

    Parameters
    ----------
    engine : the database (migrated).
    site : the site model.
    notifier : optional; gets each evaluation's events after they are stored.
    ids : database ids (default: the catalogue is synced, :func:`db.alarm.store.site_ids`).
    """

    __name__ = "AlarmEvaluator"  # the ingest names a failing evaluator by this

    def __init__(self, engine: Engine, site: Site, *, notifier: Notifier | None = None,
                 ids: SiteIds | None = None):
        self.store = AlarmStore(engine, site, ids=ids)
        self.site = site
        self.reader = InputReader(engine, site, self.store.ids, self.store.tags)
        self.notifier = notifier
        self.not_evaluated: tuple[tuple[str, str], ...] = ()
        self.problems: tuple[str, ...] = ()
        self._overrides_version: int | None = None
        self._targets_version: int | None = None
        self._site_in_force = site
        self._overrides: dict = {}
        self._logged: tuple[set, set] = (set(), set())

    def __call__(self, now: datetime, context: Any = None) -> list[AlarmEvent]:
        return self.evaluate(now)

    def _targets_in_force(self) -> Site:
        """The site with each fishway's targets as in force (supervisors' target overrides;
        :func:`db.in_force.effective_site`): the bands the rules and the solved profile's
        criteria judge against. Alarm limits and modes reach the engine as its own events
        (:mod:`db.alarm.overrides`), so only the targets are taken from here."""
        eff = effective_site(self.site, self.store.engine)
        if eff.version != self._targets_version:
            fishways = [f.model_copy(update={"targets": eff.fishways[f.id].targets})
                        for f in self.site.fishways]
            self._site_in_force = self.site.model_copy(update={"fishways": fishways})
            self.reader.use_fishways(fishways)
            self._targets_version = eff.version
        return self._site_in_force

    def evaluate(self, now: datetime) -> list[AlarmEvent]:
        """Evaluate every alarm at ``now`` (tz-aware) and store the result; return the events."""
        site = self._targets_in_force()
        inputs = self.reader.read(now)
        problems = list(self.reader.problems)
        with self.store.session(now) as s:
            s.alarm_engine.site = site  # the rules judge against the targets in force
            version = table_version(s.conn)
            if version != self._overrides_version:
                self._overrides = read_overrides(s.conn, self.store.ids.fishways)
            if s.reloaded or version != self._overrides_version:
                events, bad = sync_overrides(s.alarm_engine, self._overrides, now)
                s.add(events)
                problems += bad
            s.add(s.alarm_engine.evaluate(now, inputs))
            flood = s.alarm_engine.flood
            not_evaluated = s.alarm_engine.not_evaluated
        self._overrides_version = version
        self.not_evaluated, self.problems = not_evaluated, tuple(problems)
        self._report(not_evaluated, problems)
        if self.notifier is not None:  # also without events: a held-back digest may be due
            self.notifier.notify(list(s.events), now, flood)
        return list(s.events)

    def _report(self, not_evaluated: tuple[tuple[str, str], ...], problems: list[str]) -> None:
        skipped, known = set(not_evaluated), set(problems)
        old_skipped, old_known = self._logged
        for key, why in sorted(skipped - old_skipped):
            _log.info("alarm %s not evaluated: %s", key, why)
        for line in sorted(known - old_known):
            _log.warning("alarm inputs: %s", line)
        self._logged = (skipped, known)


def alarm_evaluator(engine: Engine, site: Site, *, ids: SiteIds | None = None
                    ) -> AlarmEvaluator:
    """The evaluator of ``site`` with its e-mail channel (:class:`db.notify.EmailNotifier`,
    health in ``feed_health``) when the site file configures one."""
    notifier = None
    if site.notify is not None:
        notifier = EmailNotifier(site.notify, site.site.name, time_zone=site.site.time_zone,
                                 engine=engine)
    return AlarmEvaluator(engine, site, notifier=notifier, ids=ids)
