"""The alarm engine: rules → deadband and delays → ISA-18.2 states → events; operator actions.

:class:`AlarmEngine` holds the site, its tag catalogue and an :class:`EngineState` (plain data,
``to_dict``/``from_dict`` to JSON, so the ingest stores it between cycles). Each call returns the
:class:`~ops_logic.alarms.states.AlarmEvent` list for storage to append; nothing else leaves the
engine, and it reads no clock: ``now`` (tz-aware) is an argument of every call.

One evaluation (:meth:`AlarmEngine.evaluate`):

1. fishway modes given in the inputs take effect (suppression by design of the rules whose
   ``suppress_in`` names the mode); shelves whose time is up end (the alarm annunciates again
   if its condition is still there);
2. every rule is judged (:func:`~ops_logic.alarms.rules.evaluate_rules`) with its deadband;
3. causes are grouped: while a feed's communications have failed, the stale-tag and
   sensor-quality alarms of its tags whose condition is present are suppressed by design as
   children of the feed alarm (``parent`` names it): one annunciation for one cause. A tripped
   pump station's actuator mismatch is grouped under the trip the same way. A child stays
   grouped until it clears, so the feed's return raises no burst;
4. the on/off delays run; activation and return to normal move each alarm's state;
5. alarm flood (EEMUA 191 [EEMUA191]): more than 10 annunciations within 10 minutes starts a
   flood, fewer than 5 in the last 10 minutes ends it; :attr:`AlarmEngine.flood` gives the
   first-out alarm and the count.

Rules that cannot be judged (no profile, a reading that failed QC) hold their alarms as they
are; :attr:`AlarmEngine.not_evaluated` lists them with the reason.

References: ANSI/ISA-18.2-2016 and IEC 62682 [ISA182] (states, shelving, suppression by design,
out of service, first-out); EEMUA 191 [EEMUA191] (flood).
"""
from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field, replace
from datetime import datetime, timedelta
from typing import Any

from ops_logic.alarms.config import AlarmSettings
from ops_logic.alarms.inputs import AlarmInputs
from ops_logic.alarms.limits import DelayState, step_delays
from ops_logic.alarms.rules import DATA_RULES, Condition, evaluate_rules
from ops_logic.alarms.states import (
    AlarmEvent,
    AlarmRecord,
    AlarmState,
    EventKind,
    IllegalTransitionError,
    Trigger,
    apply_trigger,
)
from ops_logic.site import Site
from ops_logic.tags import TagDef, site_tags

__all__ = ["FLOOD_END", "FLOOD_START", "FLOOD_WINDOW", "AlarmEngine", "EngineState",
           "FloodStatus"]

FLOOD_WINDOW = timedelta(minutes=10)
FLOOD_START = 10
"""A flood: more than this many annunciations within :data:`FLOOD_WINDOW` (EEMUA 191)."""
FLOOD_END = 5
"""The flood ends when fewer than this many annunciated within the window (EEMUA 191)."""
MODES = ("operating", "maintenance", "out_of_service")


def _aware(now: datetime, name: str = "now") -> datetime:
    if not isinstance(now, datetime) or now.tzinfo is None or now.utcoffset() is None:
        raise ValueError(f"{name} must be a time-zone-aware datetime")
    return now


@dataclass(frozen=True)
class FloodStatus:
    """Alarm flood now: whether one is on, when it began, its first-out alarm, the number of
    annunciations since it began, and the number within the last 10 minutes."""

    active: bool
    started_at: datetime | None
    first_out: str | None
    count: int
    window_count: int


@dataclass
class EngineState:
    """Everything the engine remembers between evaluations (plain data)."""

    alarms: dict[str, AlarmRecord] = field(default_factory=dict)
    modes: dict[str, str] = field(default_factory=dict)
    overrides: dict[str, dict[str, dict[str, Any]]] = field(default_factory=dict)
    annunciations: list[tuple[datetime, str]] = field(default_factory=list)
    flood_started: datetime | None = None
    flood_first_out: str | None = None
    flood_count: int = 0
    last_evaluated: datetime | None = None

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict (times as ISO 8601 strings)."""
        def iso(t: datetime | None) -> str | None:
            return None if t is None else t.isoformat()

        return {"alarms": {k: r.to_dict() for k, r in self.alarms.items()},
                "modes": dict(self.modes), "overrides": self.overrides,
                "annunciations": [[t.isoformat(), k] for t, k in self.annunciations],
                "flood_started": iso(self.flood_started), "flood_first_out": self.flood_first_out,
                "flood_count": self.flood_count, "last_evaluated": iso(self.last_evaluated)}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> EngineState:
        """Inverse of :meth:`to_dict`."""
        def t(text: str | None) -> datetime | None:
            return None if text is None else datetime.fromisoformat(text)

        return cls({k: AlarmRecord.from_dict(r) for k, r in data.get("alarms", {}).items()},
                   dict(data.get("modes", {})), data.get("overrides", {}),
                   [(datetime.fromisoformat(ts), k) for ts, k in data.get("annunciations", [])],
                   t(data.get("flood_started")), data.get("flood_first_out"),
                   int(data.get("flood_count", 0)), t(data.get("last_evaluated")))


class AlarmEngine:
    """Alarm engine of one site (one operator console); see the module docstring.

    Parameters
    ----------
    site : the site model; each fishway's ``alarms`` holds its rules (defaults without).
    tags : the tag catalogue; default :func:`ops_logic.tags.site_tags`.
    state : the state stored after the last cycle; default a fresh one.
    """

    def __init__(self, site: Site, tags: Sequence[TagDef] | None = None,
                 state: EngineState | None = None):
        self.site = site
        self.tags = list(tags) if tags is not None else site_tags(site)
        self.state = state if state is not None else EngineState()
        self.not_evaluated: tuple[tuple[str, str], ...] = ()
        self._fishway_ids = [f.id for f in site.fishways]
        self._feed_owner = {}
        for feed in site.ingest.feeds:
            owners = [t.fishway_id for t in self.tags if t.feed == feed.id]
            self._feed_owner[feed.id] = owners[0] if owners else self._fishway_ids[0]

    # -- configuration --------------------------------------------------------------------
    def settings(self, fishway_id: str) -> AlarmSettings:
        """The alarm settings in force for a fishway: site file plus supervisor edits."""
        s = self.site.fishway(fishway_id).alarms
        for rule, params in self.state.overrides.get(fishway_id, {}).items():
            for name, value in params.items():
                s = s.with_parameter(rule, name, value)
        return s

    def _settings_of(self, rec: AlarmRecord) -> AlarmSettings:
        if rec.fishway_id is not None:
            return self.settings(rec.fishway_id)
        return self.settings(self._feed_owner[rec.key.split("@", 1)[1]])

    def _mode_reason(self, rec: AlarmRecord, s: AlarmSettings) -> str | None:
        mode = self.state.modes.get(rec.fishway_id or "", "operating")
        return mode if mode in s.rule(rec.rule).suppress_in else None

    @property
    def flood(self) -> FloodStatus:
        st = self.state
        return FloodStatus(st.flood_started is not None, st.flood_started, st.flood_first_out,
                           st.flood_count, len(st.annunciations))

    def grouped_under(self, key: str) -> list[str]:
        """Keys of the alarms grouped (suppressed) under the alarm ``key``."""
        return sorted(k for k, r in self.state.alarms.items()
                      if r.parent == key and r.state is AlarmState.SUPPRESSED)

    # -- evaluation -----------------------------------------------------------------------
    def evaluate(self, now: datetime, inputs: AlarmInputs) -> list[AlarmEvent]:
        """Judge every rule at ``now`` and return the resulting events (oldest first)."""
        now = _aware(now)
        st = self.state
        if st.last_evaluated is not None and now < st.last_evaluated:
            raise ValueError(f"now ({now.isoformat()}) is before the last evaluation "
                             f"({st.last_evaluated.isoformat()}): time must not go back")
        unknown = set(inputs.fishways) - set(self._fishway_ids)
        if unknown:
            raise ValueError(f"inputs name unknown fishway(s): {', '.join(sorted(unknown))}")
        unknown = set(inputs.feeds) - set(self._feed_owner)
        if unknown:
            raise ValueError(f"inputs name unknown feed(s): {', '.join(sorted(unknown))}")
        events: list[AlarmEvent] = []
        for fid, fin in inputs.fishways.items():
            if fin.mode is not None and fin.mode != st.modes.get(fid, "operating"):
                events += self.set_fishway_mode(fid, fin.mode, now, who=None,
                                                why="mode given by the inputs")
        for key, rec in list(st.alarms.items()):
            if rec.state is AlarmState.SHELVED and rec.shelved_until and rec.shelved_until <= now:
                events += self._move(key, Trigger.UNSHELVE, now, why="shelving time ended")
        settings = {fid: self.settings(fid) for fid in self._fishway_ids}
        feed_settings = {fd: settings[owner] for fd, owner in self._feed_owner.items()}

        def latched(key: str) -> bool:
            rec = st.alarms.get(key)
            return rec is not None and rec.active

        conditions, skipped = evaluate_rules(self.site, self.tags, settings, inputs, now,
                                             latched, feed_settings)
        parents = self._parents(conditions)
        seen = set()
        for c in conditions:
            seen.add(c.key)
            s = settings[c.fishway_id] if c.fishway_id else feed_settings[c.feed or ""]
            events += self._judge(c, s, parents.get(c.key), now)
        for key, rec in list(st.alarms.items()):
            if key not in seen and not (rec.suppressed_by or "").startswith("group:"):
                events += self._suppression(key, self._mode_reason(rec, self._settings_of(rec)),
                                            None, now)
        self._flood(now, events)
        st.last_evaluated = now
        self.not_evaluated = tuple(skipped)
        return events

    def _parents(self, conditions: Iterable[Condition]) -> dict[str, str]:
        conds = list(conditions)
        st = self.state

        def on(c: Condition) -> bool:
            return c.raw or (c.key in st.alarms and st.alarms[c.key].active)

        failed = {c.feed for c in conds if c.rule == "feed_comms" and on(c)}
        trips = {c.key.split("@", 1)[1] for c in conds if c.rule == "pump_trip" and on(c)}
        out = {}
        for c in conds:
            rec = st.alarms.get(c.key)
            if c.rule in DATA_RULES and c.feed in failed and on(c):
                out[c.key] = f"feed_comms@{c.feed}"
            elif c.rule == "actuator_mismatch" and c.key.split("@", 1)[1] in trips:
                out[c.key] = f"pump_trip@{c.key.split('@', 1)[1]}"
            elif rec is not None and rec.parent and rec.active and not c.raw:
                out[c.key] = rec.parent  # stays grouped until it has cleared
        return out

    def _judge(self, c: Condition, s: AlarmSettings, parent: str | None,
               now: datetime) -> list[AlarmEvent]:
        st = self.state
        rule = s.rule(c.rule)
        rec = st.alarms.get(c.key)
        if rec is None:
            rec = AlarmRecord(c.key, c.rule, c.fishway_id, rule.priority, tag=c.tag,
                              updated_at=now)
        st.alarms[c.key] = replace(rec, value=c.value, message=c.message,
                                   priority=rule.priority)
        reason = f"group:{parent}" if parent else self._mode_reason(rec, s)
        events = self._suppression(c.key, reason, parent, now, release=False)
        rec = st.alarms[c.key]
        ds = step_delays(DelayState(rec.active, rec.pending_since, rec.clearing_since), c.raw,
                         now, on_delay_s=rule.on_delay_s, off_delay_s=rule.off_delay_s)
        timers = {"pending_since": ds.pending_since, "clearing_since": ds.clearing_since}
        if ds.active != rec.active:
            trig = Trigger.ACTIVATE if ds.active else Trigger.CLEAR
            events += self._move(c.key, trig, now, why=c.message, **timers)
        else:
            st.alarms[c.key] = replace(rec, **timers)
        return events + self._suppression(c.key, reason, parent, now)

    def _suppression(self, key: str, reason: str | None, parent: str | None, now: datetime, *,
                     release: bool = True, who: str | None = None,
                     why: str = "") -> list[AlarmEvent]:
        """Bring an alarm's suppression by design to ``reason`` (None: none); releasing waits
        until ``release`` (after the delays have run, so the alarm lands in the right state)."""
        rec = self.state.alarms[key]
        if reason is not None and rec.state is not AlarmState.SUPPRESSED:
            if rec.state is AlarmState.OUT_OF_SERVICE:
                self.state.alarms[key] = replace(rec, suppressed_by=reason, parent=parent)
                return []
            text = why or (f"grouped under {parent}" if parent else f"fishway in {reason}")
            return self._move(key, Trigger.SUPPRESS, now, who=who, why=text,
                              suppressed_by=reason, parent=parent)
        if reason is not None:
            self.state.alarms[key] = replace(rec, suppressed_by=reason, parent=parent)
        elif rec.suppressed_by is not None and release:
            if rec.state is not AlarmState.SUPPRESSED:
                self.state.alarms[key] = replace(rec, suppressed_by=None, parent=None)
                return []
            text = why or ("cause cleared" if rec.parent else "fishway back in operation")
            return self._move(key, Trigger.UNSUPPRESS, now, who=who, why=text,
                              suppressed_by=None, parent=None)
        return []

    def _move(self, key: str, trigger: Trigger, now: datetime, *, who: str | None = None,
              why: str = "", **changes: Any) -> list[AlarmEvent]:
        rec, event = apply_trigger(self.state.alarms[key], trigger, now, who=who, why=why,
                                   **changes)
        self.state.alarms[key] = rec
        return [event] if event is not None else []

    def _flood(self, now: datetime, events: list[AlarmEvent]) -> None:
        st = self.state
        st.annunciations += [(e.ts, e.key) for e in events if e.annunciated]
        st.annunciations = [(t, k) for t, k in st.annunciations if now - t < FLOOD_WINDOW]
        n_new = sum(e.annunciated for e in events)
        if st.flood_started is None:
            if len(st.annunciations) > FLOOD_START:
                st.flood_started, st.flood_first_out = st.annunciations[0]
                st.flood_count = len(st.annunciations)
        elif len(st.annunciations) < FLOOD_END:
            st.flood_started, st.flood_first_out, st.flood_count = None, None, 0
        else:
            st.flood_count += n_new

    # -- operator actions -----------------------------------------------------------------
    def _record(self, key: str) -> AlarmRecord:
        try:
            return self.state.alarms[key]
        except KeyError:
            raise ValueError(f"no alarm {key!r} (known once its rule has been evaluated)") \
                from None

    @staticmethod
    def _who(who: str | None) -> str:
        if not who or not who.strip():
            raise ValueError("an operator action records who took it")
        return who

    def acknowledge(self, keys: str | Iterable[str], now: datetime, who: str,
                    why: str = "") -> list[AlarmEvent]:
        """Acknowledge one alarm or many (all or none: any that cannot be acknowledged
        raises :class:`IllegalTransitionError` before any changes)."""
        now, who = _aware(now), self._who(who)
        key_list = [keys] if isinstance(keys, str) else list(keys)
        for key in key_list:
            rec = self._record(key)
            if rec.state not in (AlarmState.UNACK, AlarmState.RTNUN):
                raise IllegalTransitionError(
                    f"cannot acknowledge {key}: it is {rec.state.value.replace('_', ' ')}; only "
                    "an unacknowledged alarm (active or returned to normal) can be acknowledged")
        out: list[AlarmEvent] = []
        for key in key_list:
            out += self._move(key, Trigger.ACKNOWLEDGE, now, who=who, why=why)
        return out

    def shelve(self, key: str, now: datetime, who: str, why: str,
               duration_s: float) -> list[AlarmEvent]:
        """Shelve an alarm for ``duration_s`` [s] (0 < duration ≤ the fishway's
        ``max_shelve_s``) with a reason; it unshelves itself at the first evaluation after."""
        now, who = _aware(now), self._who(who)
        rec = self._record(key)
        if not why.strip():
            raise ValueError("shelving needs a reason")
        limit = self._settings_of(rec).max_shelve_s
        if not 0 < duration_s <= limit:
            raise ValueError(f"shelving time must be above 0 and at most {limit:g} s, "
                             f"got {duration_s!r}")
        return self._move(key, Trigger.SHELVE, now, who=who, why=why,
                          shelved_until=now + timedelta(seconds=duration_s))

    def unshelve(self, key: str, now: datetime, who: str, why: str = "") -> list[AlarmEvent]:
        now, who = _aware(now), self._who(who)
        self._record(key)
        return self._move(key, Trigger.UNSHELVE, now, who=who, why=why)

    def remove_from_service(self, key: str, now: datetime, who: str,
                            why: str) -> list[AlarmEvent]:
        """Take an alarm out of service (e.g. its instrument is being repaired); a reason is
        required."""
        now, who = _aware(now), self._who(who)
        self._record(key)
        if not why.strip():
            raise ValueError("removing an alarm from service needs a reason")
        return self._move(key, Trigger.REMOVE_FROM_SERVICE, now, who=who, why=why)

    def return_to_service(self, key: str, now: datetime, who: str,
                          why: str = "") -> list[AlarmEvent]:
        """Return an alarm to service; it follows its condition (and its fishway's mode)."""
        now, who = _aware(now), self._who(who)
        rec = self._record(key)
        reason, parent = rec.suppressed_by, rec.parent
        events = self._move(key, Trigger.RETURN_TO_SERVICE, now, who=who, why=why,
                            suppressed_by=None, parent=None)
        if reason is not None:
            events += self._suppression(key, reason, parent, now, who=who)
        return events

    def set_fishway_mode(self, fishway_id: str, mode: str, now: datetime, who: str | None,
                         why: str = "") -> list[AlarmEvent]:
        """Put a fishway into ``"maintenance"`` (dewatered), ``"out_of_service"`` or back to
        ``"operating"``: the rules that name the mode in ``suppress_in`` are suppressed by
        design, the others released. ``who`` is ``None`` only for a mode from the inputs."""
        now = _aware(now)
        if mode not in MODES:
            raise ValueError(f"unknown fishway mode {mode!r}; use one of {', '.join(MODES)}")
        self.site.fishway(fishway_id)
        self.state.modes[fishway_id] = mode
        s = self.settings(fishway_id)
        text = why or f"fishway {fishway_id} {mode.replace('_', ' ')}"
        events: list[AlarmEvent] = []
        for key, rec in list(self.state.alarms.items()):
            if rec.fishway_id != fishway_id or (rec.suppressed_by or "").startswith("group:"):
                continue
            events += self._suppression(key, self._mode_reason(rec, s), None, now, who=who,
                                        why=text)
        return events

    def change_limit(self, fishway_id: str, rule: str, parameter: str, value: float,
                     now: datetime, who: str, why: str = "") -> list[AlarmEvent]:
        """A supervisor's edit of a rule parameter (a limit, deadband, delay or priority):
        validated as in the site file, kept in the engine state, and recorded as a
        ``limit_changed`` event (``priority_changed`` for the priority) with the old and new
        value. The event's key is ``<rule>@<fishway>``: the rule as configured for that
        fishway (for ``feed_comms``, the fishway whose settings govern the feed)."""
        now, who = _aware(now), self._who(who)
        old_settings = self.settings(fishway_id)
        old = getattr(old_settings.rule(rule), parameter, None)
        new_settings = old_settings.with_parameter(rule, parameter, value)
        new = getattr(new_settings.rule(rule), parameter)
        self.state.overrides.setdefault(fishway_id, {}).setdefault(rule, {})[parameter] = new
        key = f"{rule}@{fishway_id}"
        rec = self.state.alarms.get(key)
        state = rec.state.value if rec else AlarmState.NORMAL.value
        priority = new_settings.rule(rule).priority
        for k, r in self.state.alarms.items():
            if r.rule == rule and r.fishway_id == fishway_id:
                self.state.alarms[k] = replace(r, priority=priority)
        def num(x: object) -> float | None:
            return float(x) if isinstance(x, int | float) else None

        kind = EventKind.PRIORITY_CHANGED if parameter == "priority" else \
            EventKind.LIMIT_CHANGED
        return [AlarmEvent(now, key, rule, fishway_id, kind.value, state,
                           state, priority, who=who,
                           why=why or f"{rule}.{parameter}: {old!r} → {new!r}",
                           old_value=num(old), new_value=num(new))]
