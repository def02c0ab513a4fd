"""Scheduled events of a simulated plant: faults, warm spells, low oxygen, debris, drops, trips.

A :class:`Scenario` is a frozen list of what will happen and when; :class:`~simulator.plant.Plant`
plays it. Times are timezone-aware datetimes. The base behaviour of the plant (daily cycles,
drift, noise, debris building up at its base rate) needs no scenario; a scenario adds events on
top, and optionally an *operator* who follows the recommendation every 30–60 minutes.

:func:`demo_scenario` gives :data:`DEMO_DAYS` days of events for a demonstration: a debris
storm and a trash-rack cleaning, two sudden forebay drops, a warm spell whose 7-day average of
daily maxima passes 20 °C, a low-oxygen night below 5 mg/L, a pump trip, one sensor fault of
each kind and a communications outage, with the operator on.

Thresholds the demo is built to cross (from memory, see /work/shared/REFERENCES.md):
7DADM 18 °C (migration plus non-core rearing) and 20 °C (migration corridor), US EPA Region 10
(2003) temperature guidance, EPA 910-B-03-002; dissolved oxygen 5.0 mg/L (7-day mean minimum,
coldwater, other life stages), US EPA (1986) Quality Criteria for Water, EPA 440/5-86-003.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from typing import Literal

import numpy as np

from ops_logic.site import Site, load_site
from ops_logic.tags import site_tags

__all__ = [
    "DEMO_DAYS",
    "FAULT_KINDS",
    "Cleaning",
    "DebrisPulse",
    "Fault",
    "ForebayDrop",
    "LowOxygen",
    "PumpTrip",
    "Scenario",
    "WarmSpell",
    "demo_scenario",
]

FAULT_KINDS = ("stuck", "spike", "drift", "dropout", "outage")
"""Sensor faults (the first four act on one tag) and the communications outage (whole feed)."""

DEMO_DAYS = 8
"""Length of :func:`demo_scenario` [days]: a 7-day average of daily maxima needs 7 full days."""


def _aware(name: str, t: datetime) -> None:
    if not isinstance(t, datetime) or t.tzinfo is None:
        raise ValueError(f"{name} must be a timezone-aware datetime, got {t!r}")


def _window(what: str, start: datetime, end: datetime) -> None:
    _aware(f"{what}.start", start)
    _aware(f"{what}.end", end)
    if not start < end:
        raise ValueError(f"{what}: start {start.isoformat()} must be before end "
                         f"{end.isoformat()}")


@dataclass(frozen=True)
class Fault:
    """A sensor fault on one tag, or (``kind="outage"``, ``tag="*"``) a communications outage.

    ``params`` by kind: stuck ``value`` (default: the reading at ``start``); spike ``magnitude``
    (tag units, default by quantity; it shifts every reading in [start, end), so a window of one
    poll period gives one outlier); drift ``rate_per_h`` (tag units per hour, default by
    quantity); dropout ``omit`` (1: no reading at all; default 0: NaN with ``source_ok``
    False).
    """

    tag: str
    kind: str
    start: datetime
    end: datetime
    params: Mapping[str, float] = field(default_factory=dict)

    def __post_init__(self) -> None:
        if self.kind not in FAULT_KINDS:
            raise ValueError(f"fault kind {self.kind!r} is not one of {', '.join(FAULT_KINDS)}")
        _window(f"fault {self.kind} on {self.tag}", self.start, self.end)
        allowed = {"stuck": {"value"}, "spike": {"magnitude"}, "drift": {"rate_per_h"},
                   "dropout": {"omit"}, "outage": set()}[self.kind]
        extra = set(self.params) - allowed
        if extra:
            raise ValueError(f"fault {self.kind} on {self.tag}: unknown parameter(s) "
                             f"{', '.join(sorted(extra))} (allowed: "
                             f"{', '.join(sorted(allowed)) or 'none'})")
        object.__setattr__(self, "params", dict(self.params))


@dataclass(frozen=True)
class WarmSpell:
    """Water warming to a daily mean of ``peak_c`` [°C], ramping in and out over ``ramp_s``."""

    start: datetime
    end: datetime
    peak_c: float = 21.0
    ramp_s: float = 86400.0

    def __post_init__(self) -> None:
        _window("warm spell", self.start, self.end)
        if not 0.0 < self.peak_c < 35.0 or not self.ramp_s > 0.0:
            raise ValueError("warm spell: peak_c must be within 0–35 °C and ramp_s positive")


@dataclass(frozen=True)
class LowOxygen:
    """Dissolved oxygen pulled down to about ``min_do_mg_l`` [mg/L] (a plankton die-off, a
    low-flow night), ramping in and out over ``ramp_s``."""

    start: datetime
    end: datetime
    min_do_mg_l: float = 4.3
    ramp_s: float = 3600.0

    def __post_init__(self) -> None:
        _window("low-oxygen event", self.start, self.end)
        if not 0.5 <= self.min_do_mg_l <= 12.0 or not self.ramp_s > 0.0:
            raise ValueError("low-oxygen event: min_do_mg_l must be within 0.5–12 mg/L and "
                             "ramp_s positive")


@dataclass(frozen=True)
class ForebayDrop:
    """A sudden forebay drop of ``depth_m`` [m] over ``fall_s`` (a generating unit taking
    load, a spill gate opening), recovering exponentially with time constant ``recovery_s``."""

    at: datetime
    depth_m: float
    fall_s: float = 600.0
    recovery_s: float = 3 * 3600.0

    def __post_init__(self) -> None:
        _aware("forebay drop.at", self.at)
        if not 0.0 < self.depth_m <= 5.0 or not self.fall_s > 0.0 or not self.recovery_s > 0.0:
            raise ValueError("forebay drop: depth_m must be within (0, 5] m, fall_s and "
                             "recovery_s positive")


Where = Literal["trash_rack", "picket"]


@dataclass(frozen=True)
class DebrisPulse:
    """Debris arriving ``rate_factor`` times faster than the base rate (a storm), at one
    fishway's trash rack or pickets (``fishway_id`` None: every fishway)."""

    start: datetime
    end: datetime
    rate_factor: float = 8.0
    where: Where = "trash_rack"
    fishway_id: str | None = None

    def __post_init__(self) -> None:
        _window("debris pulse", self.start, self.end)
        if not self.rate_factor > 0.0 or self.where not in ("trash_rack", "picket"):
            raise ValueError("debris pulse: rate_factor must be positive and where "
                             "'trash_rack' or 'picket'")


@dataclass(frozen=True)
class Cleaning:
    """A cleaning of a trash rack or pickets at ``at`` (``fishway_id`` None: every fishway)."""

    at: datetime
    where: Where = "trash_rack"
    fishway_id: str | None = None

    def __post_init__(self) -> None:
        _aware("cleaning.at", self.at)
        if self.where not in ("trash_rack", "picket"):
            raise ValueError("cleaning: where must be 'trash_rack' or 'picket'")


@dataclass(frozen=True)
class PumpTrip:
    """One pump of station ``aux_id`` trips at ``at``; it is reset at ``reset_at`` (None: it
    stays tripped until :meth:`~simulator.plant.Plant.reset_pump_trip`)."""

    fishway_id: str
    aux_id: str
    at: datetime
    reset_at: datetime | None = None

    def __post_init__(self) -> None:
        _aware("pump trip.at", self.at)
        if self.reset_at is not None:
            _window("pump trip", self.at, self.reset_at)


@dataclass(frozen=True)
class Scenario:
    """Everything scheduled for a plant run (all optional; ``Scenario()`` is the base plant).

    ``rack_cleaning_interval_s`` / ``picket_cleaning_interval_s``: scheduled cleanings every so
    many seconds after the plant start. ``random_forebay_drops_per_day``: the expected number of
    unscheduled sudden drops per day (deterministic for the plant's seed; 0 for a calm plant).
    ``operator``: an operator applies ``Ladder.recommend`` settings whenever the ladder is out of
    criteria, checking every ``operator_interval_s`` = (shortest, longest) seconds.
    """

    faults: tuple[Fault, ...] = ()
    warm_spells: tuple[WarmSpell, ...] = ()
    low_oxygen: tuple[LowOxygen, ...] = ()
    forebay_drops: tuple[ForebayDrop, ...] = ()
    debris: tuple[DebrisPulse, ...] = ()
    cleanings: tuple[Cleaning, ...] = ()
    pump_trips: tuple[PumpTrip, ...] = ()
    rack_cleaning_interval_s: float | None = None
    picket_cleaning_interval_s: float | None = None
    random_forebay_drops_per_day: float = 0.25
    operator: bool = False
    operator_interval_s: tuple[float, float] = (1800.0, 3600.0)

    def __post_init__(self) -> None:
        for name in ("faults", "warm_spells", "low_oxygen", "forebay_drops", "debris",
                     "cleanings", "pump_trips"):
            object.__setattr__(self, name, tuple(getattr(self, name)))
        for name in ("rack_cleaning_interval_s", "picket_cleaning_interval_s"):
            v = getattr(self, name)
            if v is not None and not v >= 600.0:
                raise ValueError(f"{name} must be at least 600 s, got {v}")
        if not 0.0 <= self.random_forebay_drops_per_day <= 24.0:
            raise ValueError("random_forebay_drops_per_day must be within 0–24")
        lo, hi = self.operator_interval_s
        if not 60.0 <= lo <= hi:
            raise ValueError("operator_interval_s must be (shortest, longest) with 60 s <= "
                             "shortest <= longest")

    def timeline(self) -> list[tuple[datetime, str]]:
        """Every scheduled event as (time, one-line description), in time order."""
        out: list[tuple[datetime, str]] = []
        for f in self.faults:
            what = "communications outage" if f.kind == "outage" else f"{f.kind} fault on {f.tag}"
            out.append((f.start, f"{what} until {f.end.isoformat()}"))
        out += [(w.start, f"warm spell to {w.peak_c:g} °C until {w.end.isoformat()}")
                for w in self.warm_spells]
        out += [(e.start, f"low oxygen to about {e.min_do_mg_l:g} mg/L until {e.end.isoformat()}")
                for e in self.low_oxygen]
        out += [(d.at, f"sudden forebay drop of {d.depth_m:g} m") for d in self.forebay_drops]
        out += [(d.start, f"debris at the {d.where.replace('_', ' ')} ×{d.rate_factor:g} until "
                 f"{d.end.isoformat()}") for d in self.debris]
        out += [(c.at, f"{c.where.replace('_', ' ')} cleaned ({c.fishway_id or 'all fishways'})")
                for c in self.cleanings]
        out += [(p.at, f"pump trip at {p.fishway_id}.{p.aux_id}") for p in self.pump_trips]
        return sorted(out, key=lambda e: e[0])


def _pick(site: Site, role: str, fishway: int = 0, index: int | None = None) -> str:
    fid = site.fishways[min(fishway, len(site.fishways) - 1)].id
    names = [t.name for t in site_tags(site) if t.fishway_id == fid and t.role == role]
    if not names:
        raise ValueError(f"the site has no {role} tag at fishway {fid}")
    return names[len(names) // 2 if index is None else index]


WARM_SEASON_MIN_C = 12.0
"""Seasonal water temperature [°C] from which the demo scenario has its summer events."""


def seasonal_temperature_c(day_of_year: np.ndarray | float) -> np.ndarray | float:
    """The plant's seasonal water temperature [°C]: 4 °C late January to 18 °C late July
    (the seasonal part of :meth:`simulator.environment.Environment.temperature_c`)."""
    return 11.0 - 7.0 * np.cos(2.0 * np.pi * (day_of_year - 25.0) / 365.2425)


def demo_scenario(start: datetime, site: Site | None = None) -> Scenario:
    """:data:`DEMO_DAYS` days of events from ``start`` on ``site`` (default: the demo site).

    Faults go to tags picked by role (a middle pool gauge of the first fishway, the tailwater
    gauge, the second fishway's oxygen probe and a pool gauge), so any site works.

    The warm spell and the low-oxygen event belong to the warm season: a demo started when the
    seasonal water temperature is below :data:`WARM_SEASON_MIN_C` (winter, early spring) has
    neither, so a December demo shows a cold river rather than 21 °C water that its own
    climatology check would call suspect.

    >>> from datetime import datetime, timezone
    >>> s = demo_scenario(datetime(2026, 6, 1, tzinfo=timezone.utc))
    >>> sorted({f.kind for f in s.faults}) == sorted(FAULT_KINDS), s.operator
    (True, True)
    """
    _aware("start", start)
    site = site if site is not None else load_site(None)

    def at(days: float) -> datetime:
        return start + timedelta(days=days)

    fw = [f.id for f in site.fishways]
    pumps = [(f.id, a.id) for f in site.fishways for a in f.aux if a.type == "pumps"]
    stuck, spike = _pick(site, "pool"), _pick(site, "tailwater")
    drift = _pick(site, "do", fishway=1)
    dropout = _pick(site, "pool", fishway=1, index=1)
    faults = (
        Fault(stuck, "stuck", at(2.30), at(2.30 + 3 / 24)),
        Fault(spike, "spike", at(2.60), at(2.60) + timedelta(seconds=10), {"magnitude": 0.6}),
        Fault(drift, "drift", at(3.00), at(3.50), {"rate_per_h": 0.12}),
        Fault(dropout, "dropout", at(3.70), at(3.70 + 1 / 24)),
        Fault("*", "outage", at(5.10), at(5.10) + timedelta(minutes=20)),
    )
    warm = seasonal_temperature_c(start.timetuple().tm_yday) >= WARM_SEASON_MIN_C
    return Scenario(
        faults=faults,
        warm_spells=(WarmSpell(at(0.25), at(7.9), peak_c=21.2, ramp_s=0.8 * 86400.0),)
        if warm else (),
        low_oxygen=(LowOxygen(at(4.05), at(4.05 + 10 / 24), min_do_mg_l=4.3),) if warm else (),
        forebay_drops=(ForebayDrop(at(0.85), 0.45), ForebayDrop(at(6.30), 0.35)),
        debris=(DebrisPulse(at(0.40), at(1.40), 8.0, "trash_rack", fw[0]),
                DebrisPulse(at(2.00), at(3.00), 4.0, "picket", None)),
        cleanings=(Cleaning(at(1.60), "trash_rack", fw[0]), Cleaning(at(3.40), "picket", None)),
        pump_trips=tuple(PumpTrip(f, a, at(5.50), at(5.50 + 2 / 24)) for f, a in pumps[:1]),
        rack_cleaning_interval_s=None,
        random_forebay_drops_per_day=0.0,
        operator=True,
    )
