"""The simulated plant: a site's fishways driven by ``ops_logic``'s solver, measured with noise.

:class:`Plant` plays a site forward in simulated time. The river and the dam come from
:class:`~simulator.environment.Environment` (closed-form signals of time); the fishways are
:class:`~ops_logic.ladder.Ladder` models whose pool levels come from ``Ladder.solve`` under the
actual actuator positions, at the forebay less the trash-rack head loss. Measured values carry
noise and the faults of :mod:`simulator.faults`. Everything is deterministic for a seed: the same
calls give the same readings, and any past instant can be sampled again.

Time in the plant is float seconds since ``start``; the public methods take timezone-aware
datetimes. Events run in time order (a discrete-event loop in :meth:`Plant.advance_to`):

- a profile solve of every fishway every ``profile_interval_s``, and of one fishway as soon as
  one of its actuators reaches a new position (warm-started from the previous profile);
- actuator arrivals and pump starts/stops (:mod:`simulator.actuators`), pump trips and resets;
- the operator's checks, when the scenario has an operator.

Between solves the pool levels and auxiliary flows relax towards the last profile with time
constant :data:`LEVEL_LAG_S` (water takes a while to fill or drain a pool); they do not change
otherwise. The plant is thread-safe (one re-entrant lock), so a server thread may advance it
while another thread samples it.
"""

from __future__ import annotations

import heapq
import math
import threading
from collections.abc import Mapping, Sequence
from datetime import UTC, datetime, timedelta
from typing import Any

import numpy as np

from db.feeds.base import FeedReading
from ops_logic.ladder import Ladder
from ops_logic.profile import Profile
from ops_logic.recommend import Recommendation
from ops_logic.site import Site
from ops_logic.tags import TagDef, site_tags
from simulator.actuators import (
    GATE_RATE_M_S,
    VALVE_RATE_PCT_S,
    Growable,
    LinearActuator,
    PumpStation,
)
from simulator.environment import Environment, blockage_fraction, screen_head_loss_m
from simulator.faults import ActiveFault, Samples, add_noise, apply_faults
from simulator.noise import key_of, uniform
from simulator.scenario import FAULT_KINDS, Fault, Scenario

__all__ = ["LEVEL_LAG_S", "RACKS", "RACK_TOLERANCE_M", "Plant"]

LEVEL_LAG_S = 90.0
"""Time constant [s] with which pool levels follow a new profile (an invented value)."""
RACK_TOLERANCE_M = 0.002
"""The trash-rack loss and the ladder flow of a profile agree to this [m]."""
RACKS = {"trash_rack": (0.4, 0.75), "picket": (0.5, 0.6)}
"""(Design approach velocity [m/s], clean open fraction) of the trash rack and the pickets; the
gross area is sized for the design velocity at the design ladder flow: the settings recommended
for mid-range levels with the forebay at the top of its range (invented values; approach
velocities of a few tenths of a m/s are common practice)."""


class _Fishway:
    """The plant's state for one fishway."""

    def __init__(self, ladder: Ladder):
        self.ladder = ladder
        self.actuators: dict[str, LinearActuator | PumpStation] = {}
        self.profile: Profile | None = None
        n, k = ladder.n_pools, len(ladder.aux)
        self.width = n + k + 1  # pool levels, aux flows, ladder flow
        self.seg_t = Growable(1)
        self.seg_start = Growable(self.width)
        self.seg_target = Growable(self.width)
        self.rack_area_m2 = {"trash_rack": 1.0, "picket": 1.0}

    def state(self, t: np.ndarray, col: int | slice) -> np.ndarray:
        """Lagged state (pool levels, aux flows, ladder flow) at times ``t``, column ``col``."""
        times = self.seg_t.rows[:, 0]
        i = np.maximum(np.searchsorted(times, t, side="right") - 1, 0)
        target = self.seg_target.rows[i, col]
        start = self.seg_start.rows[i, col]
        decay = np.exp(-np.maximum(t - times[i], 0.0) / LEVEL_LAG_S)
        if target.ndim == 2:
            decay = decay[:, None]
        return target + (start - target) * decay

    def record(self, t: float, p: Profile) -> None:
        target = np.array([*(pool.water_level_m for pool in p.pools),
                           *(a.flow_m3s for a in p.aux), p.ladder_flow_m3s])
        start = self.state(np.array([t]), slice(None))[0] if len(self.seg_t) else target
        self.seg_t.append([t])
        self.seg_start.append(start)
        self.seg_target.append(target)
        self.profile = p


def _aware(name: str, t: datetime) -> datetime:
    if not isinstance(t, datetime) or t.tzinfo is None:
        raise ValueError(f"{name} must be a timezone-aware datetime, got {t!r}")
    return t.astimezone(UTC)


class Plant:
    """A simulated site; see the module docstring.

    ``settings`` gives initial actuator positions per fishway (missing ones: the recommendation
    at the start conditions, so the plant starts in criteria where it can).

    >>> from ops_logic.site import load_site
    >>> plant = Plant(load_site(None), start=datetime(2026, 6, 1, tzinfo=UTC), seed=1)
    >>> plant.apply_setting("east", "exit_crest_m", 77.30, plant.start + timedelta(minutes=1))
    >>> plant.advance_to(plant.start + timedelta(minutes=2))
    >>> round(plant.settings("east")["exit_crest_m"], 3), plant.profile("east").fishway_id
    (77.3, 'east')
    >>> [r.tag for r in plant.sample(["east.do", "west.do"], plant.now)]
    ['east.do', 'west.do']
    """

    def __init__(self, site: Site, *, start: datetime, seed: int = 0,
                 profile_interval_s: float = 60.0, scenario: Scenario | None = None,
                 settings: Mapping[str, Mapping[str, float]] | None = None):
        if not 1.0 <= profile_interval_s <= 3600.0:
            raise ValueError(f"profile_interval_s must be within 1–3600 s, got "
                             f"{profile_interval_s}")
        self.site = site
        self.start = _aware("start", start)
        self.seed = int(seed)
        self.profile_interval_s = float(profile_interval_s)
        self.scenario = scenario if scenario is not None else Scenario()
        self.tags: list[TagDef] = site_tags(site)
        self._by_name = {t.name: t for t in self.tags}
        self._keys = {t.name: key_of(self.seed, "noise", t.name) for t in self.tags}
        self._lock = threading.RLock()
        self._t = 0.0
        self._grid_k = 1
        self._heap: list[tuple[float, int, str, tuple[Any, ...]]] = []
        self._seq = 0
        self._faults: list[ActiveFault] = []
        self._outages: list[tuple[float, float]] = []
        self.env = Environment(site, self.start, self.seed, self.scenario)
        self._fw: dict[str, _Fishway] = {}
        for f in site.fishways:
            self._fw[f.id] = self._build(Ladder(f), (settings or {}).get(f.id, {}))
        for fault in self.scenario.faults:
            self._add_fault(fault)
        for trip in self.scenario.pump_trips:
            self._station(trip.fishway_id, trip.aux_id)
            self._push(self._sec(trip.at, "pump trip.at"), "trip", (trip.fishway_id, trip.aux_id))
            if trip.reset_at is not None:
                self._push(self._sec(trip.reset_at, "pump trip.reset_at"), "reset",
                           (trip.fishway_id, trip.aux_id))
        if self.scenario.operator:
            self._push(self._operator_gap(0), "operator", (1,))

    # -- set-up -------------------------------------------------------------------------------
    def _build(self, ladder: Ladder, given: Mapping[str, float]) -> _Fishway:
        fw = _Fishway(ladder)
        f = ladder.fishway
        t0 = np.array([0.0])
        fb, tw = float(self.env.forebay_m(f.id, t0)[0]), float(self.env.tailwater_m(f.id, t0)[0])
        temp = float(self.env.temperature_c(t0)[0])
        mid_fb, mid_tw = 0.5 * sum(f.forebay_range), 0.5 * sum(f.tailwater_range)
        mid = ladder.recommend(mid_fb, mid_tw, temperature_c=temp).settings
        design = ladder.solve(f.forebay_range[1], mid_tw, mid, temperature_c=temp).ladder_flow_m3s
        for where, (velocity, _) in RACKS.items():
            fw.rack_area_m2[where] = max(design, 0.05) / velocity
        recommended = ladder.recommend(fb, tw, temperature_c=temp).settings
        start_settings = ladder.check_settings({**recommended, **given})
        for name, spec in ladder.settings.items():
            value = start_settings[name]
            if spec.kind == "count":
                fw.actuators[name] = PumpStation(spec, int(spec.high), int(round(value)))
            else:
                rate = GATE_RATE_M_S if spec.kind == "level" else VALVE_RATE_PCT_S
                fw.actuators[name] = LinearActuator(spec, value, rate)
        p = ladder.solve(fb, tw, start_settings, temperature_c=temp)
        dp = self._rack_dp(fw, "trash_rack", t0, np.array([p.ladder_flow_m3s]))[0]
        p = ladder.solve(max(fb - dp, tw + 0.1), tw, start_settings, temperature_c=temp, warm=p)
        fw.record(0.0, p)
        return fw

    def _operator_gap(self, k: int) -> float:
        lo, hi = self.scenario.operator_interval_s
        u = float(uniform(key_of(self.seed, "operator"), np.array([k], dtype=np.uint64))[0])
        return lo + (hi - lo) * u

    # -- time ---------------------------------------------------------------------------------
    @property
    def now(self) -> datetime:
        """The plant's simulated time."""
        return self.time_at(self._t)

    def time_at(self, t_s: float) -> datetime:
        """Datetime (UTC) of a plant time [s since start]."""
        return self.start + timedelta(seconds=float(t_s))

    def seconds(self, t: datetime) -> float:
        """Plant time [s since start] of a datetime."""
        return (_aware("time", t) - self.start).total_seconds()

    def _sec(self, t: datetime, name: str, *, past_ok: bool = True) -> float:
        s = (_aware(name, t) - self.start).total_seconds()
        if s < 0.0:
            raise ValueError(f"{name} {t.isoformat()} is before the plant start "
                             f"{self.start.isoformat()}")
        if not past_ok and s < self._t - 1e-6:
            raise ValueError(f"{name} {t.isoformat()} is in the plant's past (now "
                             f"{self.now.isoformat()})")
        return s

    def _push(self, t: float, kind: str, payload: tuple[Any, ...]) -> None:
        self._seq += 1
        heapq.heappush(self._heap, (t, self._seq, kind, payload))

    def advance_to(self, t: datetime) -> None:
        """Run the plant up to ``t`` (nothing happens if ``t`` is not later than now)."""
        with self._lock:
            self._advance(self._sec(t, "advance_to"))

    def _advance(self, t_end: float) -> None:
        while True:
            t_grid = self._grid_k * self.profile_interval_s
            t_event = self._heap[0][0] if self._heap else math.inf
            t_next = min(t_grid, t_event)
            if t_next > t_end:
                break
            self._t = max(self._t, t_next)
            dirty: set[str] = set()
            while self._heap and self._heap[0][0] <= t_next:
                _, _, kind, payload = heapq.heappop(self._heap)
                dirty |= self._handle(t_next, kind, payload)
            if t_grid <= t_next:
                dirty |= set(self._fw)
                self._grid_k += 1
            for fid in sorted(dirty):
                self._solve(fid, t_next)
        self._t = max(self._t, t_end)

    def _handle(self, t: float, kind: str, payload: tuple[Any, ...]) -> set[str]:
        if kind == "arrive":
            return {payload[0]}
        if kind == "pump":
            fid, name, generation = payload
            changed, nxt = self._fw[fid].actuators[name].step(t, generation)  # type: ignore[union-attr]
            if nxt is not None:
                self._push(nxt[0], "pump", (fid, name, nxt[1]))
            return {fid} if changed else set()
        if kind in ("trip", "reset"):
            fid, aux_id = payload
            name, station = self._station(fid, aux_id)
            if kind == "trip":
                return {fid} if station.trip(t) else set()
            nxt = station.reset(t)
            if nxt is not None:
                self._push(nxt[0], "pump", (fid, name, nxt[1]))
            return set()
        if kind == "operator":
            (k,) = payload
            for fid, fw in self._fw.items():
                if fw.profile is not None and not fw.profile.in_criteria:
                    self._follow(fid, t)
            self._push(t + self._operator_gap(k), "operator", (k + 1,))
            return set()
        raise AssertionError(kind)

    # -- the profile --------------------------------------------------------------------------
    def _rack_dp(self, fw: _Fishway, where: str, t: np.ndarray, flow: np.ndarray) -> np.ndarray:
        clean = RACKS[where][1]
        load = self.env.debris_load(fw.ladder.id, where, t)
        open_fraction = clean * (1.0 - blockage_fraction(load))
        return screen_head_loss_m(np.maximum(flow, 0.0), fw.rack_area_m2[where], open_fraction)

    def conditions(self, fishway_id: str, t: float | None = None) -> dict[str, float]:
        """True (noise-free) conditions at plant time ``t`` (default now): forebay, trash-rack
        head loss at the present ladder flow, the forebay the ladder sees behind the rack,
        tailwater, temperature."""
        with self._lock:
            fw = self._fishway(fishway_id)
            ta = np.array([self._t if t is None else t])
            fb_a = self.env.forebay_m(fishway_id, ta)
            fb, tw = float(fb_a[0]), float(self.env.tailwater_m(fishway_id, ta, fb_a)[0])
            flow = float(fw.state(ta, fw.width - 1)[0])
            dp = float(self._rack_dp(fw, "trash_rack", ta, np.array([flow]))[0])
        return {"forebay_m": fb, "trash_rack_dp_m": dp, "ladder_forebay_m": max(fb - dp, tw + 0.1),
                "tailwater_m": tw, "temperature_c": float(self.env.temperature_c(ta)[0])}

    def _positions(self, fw: _Fishway, t: float) -> dict[str, float]:
        ta = np.array([t])
        return {n: float(a.position(ta)[0]) for n, a in fw.actuators.items()}

    def _solve(self, fid: str, t: float) -> None:
        """Solve the profile at ``t`` with the actual positions. The ladder flow and the
        trash-rack loss depend on each other (the rack loss grows with the flow, the flow falls
        with the forebay behind the rack): a secant iteration on the forebay behind the rack
        finds the consistent pair, usually in one solve (a clean rack barely matters)."""
        fw = self._fw[fid]
        c = self.conditions(fid, t)
        fb, tw, temp = c["forebay_m"], c["tailwater_m"], c["temperature_c"]
        settings = self._positions(fw, t)
        ta = np.array([t])

        def behind(p: Profile) -> float:
            dp = float(self._rack_dp(fw, "trash_rack", ta, np.array([p.ladder_flow_m3s]))[0])
            return max(fb - dp, tw + 0.1)

        x0 = c["ladder_forebay_m"]
        p = fw.ladder.solve(x0, tw, settings, temperature_c=temp, warm=fw.profile)
        r0 = behind(p) - x0
        x1 = x0 + r0
        for _ in range(6):
            if abs(r0) <= RACK_TOLERANCE_M:
                break
            p1 = fw.ladder.solve(x1, tw, settings, temperature_c=temp, warm=p)
            r1 = behind(p1) - x1
            p, x_new = p1, (x1 - r1 * (x1 - x0) / (r1 - r0) if r1 != r0 else x1 + r1)
            x0, r0, x1 = x1, r1, min(max(x_new, tw + 0.1), fb)
        fw.record(t, p)

    # -- actuators ----------------------------------------------------------------------------
    def _fishway(self, fishway_id: str) -> _Fishway:
        fw = self._fw.get(fishway_id)
        if fw is None:
            raise ValueError(f"no fishway {fishway_id!r} at this site (have: "
                             f"{', '.join(self._fw)})")
        return fw

    def _station(self, fishway_id: str, aux_id: str) -> tuple[str, PumpStation]:
        fw = self._fishway(fishway_id)
        name = f"aux_{aux_id}_pumps"
        station = fw.actuators.get(name)
        if not isinstance(station, PumpStation):
            raise ValueError(f"fishway {fishway_id!r} has no pump station {aux_id!r}")
        return name, station

    def settings(self, fishway_id: str) -> dict[str, float]:
        """Actual actuator positions now (setting name → SI value)."""
        with self._lock:
            return self._positions(self._fishway(fishway_id), self._t)

    def setpoints(self, fishway_id: str) -> dict[str, float]:
        """Commanded positions (where each actuator is going)."""
        with self._lock:
            return {n: float(a.commanded) for n, a in self._fishway(fishway_id).actuators.items()}

    def rack_area_m2(self, fishway_id: str, where: str = "trash_rack") -> float:
        """Gross area [m²] of the fishway's trash rack (or ``"picket"``: its pickets)."""
        return self._fishway(fishway_id).rack_area_m2[where]

    @property
    def profile_solves(self) -> int:
        """Profiles recorded so far (all fishways), the start included."""
        with self._lock:
            return sum(len(fw.seg_t) for fw in self._fw.values())

    def profile(self, fishway_id: str) -> Profile:
        """The last solved profile of a fishway."""
        with self._lock:
            p = self._fishway(fishway_id).profile
            assert p is not None
            return p

    def apply_setting(self, fishway_id: str, name: str, value: float, at: datetime) -> None:
        """Command an actuator at ``at`` (not in the past; the plant advances to it). Unknown
        names and values out of range raise :class:`~ops_logic.ladder.SettingError`."""
        with self._lock:
            fw = self._fishway(fishway_id)
            t = self._sec(at, "apply_setting at", past_ok=False)
            fw.ladder.check_settings({name: value})
            self._advance(t)
            self._command(fishway_id, name, float(value), t)

    def _command(self, fid: str, name: str, value: float, t: float) -> None:
        actuator = self._fw[fid].actuators[name]
        if isinstance(actuator, PumpStation):
            nxt = actuator.command(t, int(round(value)))
            if nxt is not None:
                self._push(nxt[0], "pump", (fid, name, nxt[1]))
        else:
            self._push(actuator.command(t, value), "arrive", (fid,))

    def recommend(self, fishway_id: str) -> Recommendation:
        """``Ladder.recommend`` at the true conditions now, around the actual positions."""
        with self._lock:
            fw = self._fishway(fishway_id)
            c = self.conditions(fishway_id)
            return fw.ladder.recommend(c["ladder_forebay_m"], c["tailwater_m"],
                                       self._positions(fw, self._t),
                                       temperature_c=c["temperature_c"])

    def follow_recommendation(self, fishway_id: str, at: datetime | None = None
                              ) -> Recommendation:
        """Apply :meth:`recommend`'s settings at ``at`` (default now); return it."""
        with self._lock:
            if at is not None:
                self._advance(self._sec(at, "follow_recommendation at", past_ok=False))
            return self._follow(fishway_id, self._t)

    def _follow(self, fid: str, t: float) -> Recommendation:
        rec = self.recommend(fid)
        current = self._positions(self._fw[fid], t)
        for name, value in rec.settings.items():
            if abs(value - current[name]) > 1e-6:
                self._command(fid, name, value, t)
        return rec

    def trip_pump(self, fishway_id: str, aux_id: str, at: datetime,
                  reset_at: datetime | None = None) -> None:
        """One running pump of station ``aux_id`` trips at ``at`` (reset at ``reset_at``)."""
        with self._lock:
            self._station(fishway_id, aux_id)
            self._push(self._sec(at, "trip_pump at", past_ok=False), "trip", (fishway_id, aux_id))
            if reset_at is not None:
                self.reset_pump_trip(fishway_id, aux_id, reset_at)

    def reset_pump_trip(self, fishway_id: str, aux_id: str, at: datetime) -> None:
        """Clear one trip of station ``aux_id`` at ``at``; the station restarts its pumps."""
        with self._lock:
            self._station(fishway_id, aux_id)
            self._push(self._sec(at, "reset_pump_trip at", past_ok=False), "reset",
                       (fishway_id, aux_id))

    def clean_trash_rack(self, fishway_id: str, at: datetime) -> None:
        """Clean the fishway's trash rack at ``at``: its debris load returns to zero."""
        with self._lock:
            self._fishway(fishway_id)
            self.env.add_cleaning("trash_rack", self._sec(at, "clean at", past_ok=False),
                                  fishway_id)

    def clean_pickets(self, fishway_id: str, at: datetime) -> None:
        """Clean the fishway's counting-window pickets at ``at``."""
        with self._lock:
            self._fishway(fishway_id)
            self.env.add_cleaning("picket", self._sec(at, "clean at", past_ok=False), fishway_id)

    # -- faults -------------------------------------------------------------------------------
    def inject_fault(self, tag_name: str, kind: str, start: datetime, end: datetime,
                     **params: float) -> None:
        """A sensor fault on ``tag_name`` (``kind`` in :data:`~simulator.scenario.FAULT_KINDS`)
        between ``start`` and ``end``; ``kind="outage"`` (tag ``"*"``) cuts the whole feed.
        Parameters as in :class:`~simulator.scenario.Fault`. A fault shows in every sample of
        its window, including past instants sampled again."""
        with self._lock:
            self._add_fault(Fault(tag_name, kind, start, end, params))

    def _add_fault(self, fault: Fault) -> None:
        if fault.kind == "outage":
            if fault.tag != "*" and fault.tag not in self._by_name:
                raise ValueError(f"outage: tag must be '*' (the whole feed), got {fault.tag!r}")
            self._outages.append((self._sec(fault.start, "fault start"),
                                  self._sec(fault.end, "fault end")))
            return
        if fault.tag not in self._by_name:
            raise ValueError(f"fault {fault.kind}: no tag {fault.tag!r} at this site")
        assert fault.kind in FAULT_KINDS
        self._faults.append(ActiveFault(fault.tag, fault.kind, self._sec(fault.start, "start"),
                                        self._sec(fault.end, "end"), dict(fault.params)))

    def end_fault(self, tag_name: str, kind: str, at: datetime) -> int:
        """End, at ``at``, the faults of ``tag_name`` and ``kind`` active then (``"*"`` and
        ``"outage"``: the communications outage); return how many were ended."""
        with self._lock:
            s = self._sec(at, "end_fault at")
            n = 0
            if kind == "outage":
                for i, (a, b) in enumerate(self._outages):
                    if a <= s < b:
                        self._outages[i] = (a, s)
                        n += 1
                return n
            for i, f in enumerate(self._faults):
                if f.tag == tag_name and f.kind == kind and f.start_s <= s < f.end_s:
                    self._faults[i] = f._replace(end_s=s)
                    n += 1
            return n

    def in_outage(self, t: datetime) -> bool:
        """True while a communications outage is scheduled at ``t``."""
        s = self.seconds(t)
        return any(a <= s < b for a, b in self._outages)

    # -- sampling -----------------------------------------------------------------------------
    def tag(self, name: str | TagDef) -> TagDef:
        """The site's tag of that name (a ``TagDef`` is checked to be one of this site)."""
        key = name.name if isinstance(name, TagDef) else name
        tag = self._by_name.get(key)
        if tag is None:
            raise ValueError(f"no tag {key!r} at this site")
        return tag

    def _truth(self, tag: TagDef, t: np.ndarray) -> np.ndarray:
        fw, fid, env = self._fw[tag.fishway_id], tag.fishway_id, self.env
        role = tag.role
        if role == "forebay":
            return env.forebay_m(fid, t)
        if role == "tailwater":
            return env.tailwater_m(fid, t)
        if role in ("pool", "pool_b"):
            return fw.state(t, fw.ladder.pool_ids.index(tag.pool_id or ""))
        if role == "water_temp":
            return env.temperature_c(t)
        if role == "do":
            return env.do_mg_l(t, env.temperature_c(t))
        if role in ("trash_rack_dp", "picket_dp"):
            where = "trash_rack" if role == "trash_rack_dp" else "picket"
            return self._rack_dp(fw, where, t, fw.state(t, fw.width - 1))
        if role == "setting":
            return fw.actuators[tag.setting or ""].position(t)
        if role == "aux_flow":
            ids = [a.id for a in fw.ladder.aux]
            return fw.state(t, fw.ladder.n_pools + ids.index(tag.actuator or ""))
        if role == "pump_trip":
            _, station = self._station(fid, tag.actuator or "")
            return station.trip_flag(t)
        raise ValueError(f"tag {tag.name}: role {role!r} is not simulated")

    def sample_arrays(self, tags: Sequence[TagDef | str], t_s: np.ndarray, *,
                      measured: bool = True) -> dict[str, Samples]:
        """Readings of ``tags`` at plant times ``t_s`` [s since start], one
        :class:`~simulator.faults.Samples` per tag name; ``measured=False`` gives the true
        values (no noise, no faults). The plant advances to the latest time first."""
        t = np.asarray(t_s, dtype=float)
        if t.size and (not np.all(np.isfinite(t)) or float(t.min()) < 0.0):
            raise ValueError("sample times must be finite and not before the plant start")
        with self._lock:
            if t.size:
                self._advance(float(t.max()))
            out = {}
            for item in tags:
                tag = self.tag(item)
                values = self._truth(tag, t)
                if not measured:
                    out[tag.name] = Samples(values, np.ones(t.shape, bool), np.ones(t.shape, bool))
                    continue
                key = self._keys[tag.name]
                noisy = add_noise(tag, key, t, values)
                faults = [f for f in self._faults if f.tag == tag.name]

                def value_at(s: float, tag: TagDef = tag, key: int = key) -> float:
                    one = np.array([s])
                    return float(add_noise(tag, key, one, self._truth(tag, one))[0])

                out[tag.name] = apply_faults(tag, faults, t, noisy, value_at)
            return out

    def sample(self, tags: Sequence[TagDef | str], t: datetime) -> list[FeedReading]:
        """Measured readings of ``tags`` at ``t`` (noise and faults; a dropout with ``omit``
        leaves its tag out). The plant advances to ``t`` first if it is later than now."""
        ts = _aware("t", t)
        s = self._sec(ts, "sample time")
        arrays = self.sample_arrays(tags, np.array([s]))
        return [FeedReading(name, ts, float(a.values[0]), bool(a.ok[0]))
                for name, a in arrays.items() if a.present[0]]
