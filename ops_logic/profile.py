"""Steady water-surface profile of a fishway: the solver and its results.

Method: every control fixes the level above it for a given flow and level below it (a free weir
does not fix the level below it), so the profile is computed by marching *upstream* from the
tailwater: for a trial entrance flow Q_E, the entrance gates give the entrance-pool level; at each
pool the auxiliary inflow (a function of that pool's level) is taken off the flow; each control
is inverted (:func:`~ops_logic.openings.upstream_level`) for the level above it; the march ends
with the forebay level that Q_E would need. One scalar equation F(Q_E) = forebay remains; F is
increasing in Q_E, and the march carries dF/dQ_E by the chain rule, so a bracketed Newton
iteration solves it in a few marches. Continuity holds at every control by construction.

Where the trial flow would have to be negative above an auxiliary inlet, or the forebay cannot
lift water over the exit, the ladder is in the ``no_flow`` state: the pools above hold their
rest levels and only auxiliary water moves.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, NamedTuple

from scipy.optimize import brentq

from ops_logic.hydraulics import G, power_density
from ops_logic.ladder import Ladder
from ops_logic.openings import (
    Opening,
    control_flow,
    upstream_level,
)

__all__ = ["AuxState", "ControlState", "Criterion", "PoolState", "Profile", "solve_profile"]

LEVEL_TOL_M = 1e-9
"""Convergence of the profile: the computed forebay matches the given one to this [m]."""

NO_FLOW_M3S = 1e-9
"""A converged ladder flow at or below this (a millilitre a second: the forebay stands exactly
at an upper crest) is reported as the no-flow state."""


# The per-element records are NamedTuples: immutable like the frozen Profile that holds them,
# and cheap to build forty at a time (this is on the solver's path).
class PoolState(NamedTuple):
    id: str
    water_level_m: float
    floor_m: float
    depth_m: float
    volume_m3: float
    inflow_m3s: float
    aux_inflow_m3s: float
    head_drop_m: float
    power_density_w_m3: float


class ControlState(NamedTuple):
    id: str
    kind: str  # "exit", "baffle" or "gate"
    upstream_level_m: float
    downstream_level_m: float
    flow_m3s: float
    head_drop_m: float
    regime: str  # "free", "submerged" or "no flow"
    weir_head_m: float | None = None
    submergence: float | None = None
    orifice_velocity_m_s: float | None = None
    slot_velocity_m_s: float | None = None
    notes: tuple[str, ...] = ()


class AuxState(NamedTuple):
    id: str
    type: str
    pool_id: str
    flow_m3s: float
    diffuser_velocity_m_s: float
    setting_name: str
    setting_value: float


class Criterion(NamedTuple):
    name: str
    value: float
    min: float | None
    max: float | None
    ok: bool
    unit: str
    kind: str  # quantity kind for display: "length", "flow", "velocity", "power_density"


@dataclass(frozen=True)
class Profile:
    """The steady state of one fishway at given levels and settings (SI throughout)."""

    fishway_id: str
    forebay_m: float
    tailwater_m: float
    temperature_c: float
    settings: Mapping[str, float]
    state: str  # "flowing" or "no_flow"
    reason: str
    ladder_flow_m3s: float
    entrance_flow_m3s: float
    entrance_head_m: float
    pools: tuple[PoolState, ...]
    controls: tuple[ControlState, ...]
    gates: tuple[ControlState, ...]
    aux: tuple[AuxState, ...]
    criteria: tuple[Criterion, ...]
    warnings: tuple[str, ...] = ()
    iterations: int = field(default=0, compare=False)

    @property
    def in_criteria(self) -> bool:
        return all(c.ok for c in self.criteria)

    def failing(self) -> list[Criterion]:
        return [c for c in self.criteria if not c.ok]

    def criterion(self, name: str) -> Criterion:
        for c in self.criteria:
            if c.name == name:
                return c
        raise KeyError(name)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict, SI with unit-suffixed keys, pools upstream to downstream."""
        return {
            "fishway": self.fishway_id,
            "state": self.state,
            "reason": self.reason,
            "forebay_m": self.forebay_m,
            "tailwater_m": self.tailwater_m,
            "temperature_c": self.temperature_c,
            "ladder_flow_m3s": self.ladder_flow_m3s,
            "entrance_flow_m3s": self.entrance_flow_m3s,
            "entrance_head_m": self.entrance_head_m,
            "in_criteria": self.in_criteria,
            "settings": dict(self.settings),
            "pools": [p._asdict() for p in self.pools],
            "controls": [{**c._asdict(), "notes": list(c.notes)} for c in self.controls],
            "gates": [{**c._asdict(), "notes": list(c.notes)} for c in self.gates],
            "aux": [a._asdict() for a in self.aux],
            "criteria": [c._asdict() for c in self.criteria],
            "warnings": list(self.warnings),
        }


# -- the solver ------------------------------------------------------------------------------
class _March:
    """One upstream march for a trial entrance flow (kept small: this is the hot path)."""

    __slots__ = ("aux_q", "deficit", "dforebay", "forebay_needed", "inflow", "levels",
                 "source_q")

    def __init__(self, n: int):
        self.levels = [0.0] * n
        self.inflow = [0.0] * n
        self.aux_q = [0.0] * n
        self.forebay_needed = 0.0
        self.dforebay = 0.0
        self.deficit = 0.0
        self.source_q: dict[str, float] = {}


def _march(ladder: Ladder, q_e: float, forebay: float, tailwater: float,
           ctrl: list[tuple[Opening, ...]], gates: tuple[Opening, ...],
           aux_by_pool: dict[int, list[Any]], settings: Mapping[str, float], temp: float,
           guess: list[float] | None, *, clip: bool = False) -> _March:
    n = ladder.n_pools
    m = _March(n)
    lows = ladder.control_lows(ctrl)
    z, du, _ = upstream_level(gates, q_e, tailwater, guess[n - 1] if guess else None)
    dz = 1.0 / du if du > 0.0 else 0.0
    q_out, dq_out = q_e, 1.0
    for j in range(n - 1, -1, -1):
        m.levels[j] = z
        a = da = 0.0
        for src in aux_by_pool.get(j, ()):
            q, dq = src.flow(forebay, tailwater, z, settings[src.setting], temp)
            m.source_q[src.id] = q
            a += q
            da += dq
        m.aux_q[j] = a
        q_in = q_out - a
        dq_in = dq_out - da * dz
        if q_in < 0.0:
            m.deficit = max(m.deficit, -q_in)
            if not clip:
                return m
            q_in = dq_in = 0.0
        m.inflow[j] = q_in
        g = None
        if guess:
            g = z + (guess[j - 1] - guess[j]) if j > 0 else None
        if g is None and j < n - 1:
            g = z + (z - m.levels[j + 1])  # cold start: the drop of the control below
        zu, cu, cdn = upstream_level(ctrl[j], q_in, z, g, low_m=lows[j])
        z = zu
        dz = (dq_in - cdn * dz) / cu if cu > 0.0 else 0.0
        q_out, dq_out = q_in, dq_in
    m.forebay_needed, m.dforebay = z, dz
    return m


def solve_profile(ladder: Ladder, forebay_m: float, tailwater_m: float,
                  settings: Mapping[str, float] | None = None, *, temperature_c: float = 10.0,
                  warm: Profile | None = None) -> Profile:
    """Solve the steady profile; see the module docstring for the method.

    ``warm`` (a previous profile of the same ladder) speeds up the iteration. Raises
    :class:`~ops_logic.ladder.SettingError` for unknown or out-of-range settings and
    ``ValueError`` for impossible levels (tailwater at or above the forebay).
    """
    if not (math.isfinite(forebay_m) and math.isfinite(tailwater_m)):
        raise ValueError("forebay and tailwater must be finite numbers")
    if tailwater_m >= forebay_m:
        raise ValueError(f"tailwater {ladder.length_text(tailwater_m)} is at or above the "
                         f"forebay {ladder.length_text(forebay_m)}: no flow can pass the ladder")
    s = ladder.check_settings(settings)
    ctrl = ladder.controls(s)
    gates = ladder.gates(s)
    aux_by_pool: dict[int, list[Any]] = {}
    for src in ladder.aux:
        aux_by_pool.setdefault(src.pool_index, []).append(src)
    guess = [p.water_level_m for p in warm.pools] if warm is not None else None

    # first trial entrance flow: the exit's free flow (scaled by the warm profile's share of it)
    # plus the auxiliary water at an estimated entrance-pool level
    x = control_flow(ctrl[0], forebay_m, -math.inf)[0]
    z_entrance = tailwater_m + ladder.fishway.targets.entrance_head.aim
    if warm is not None and warm.state == "flowing":
        free_then = control_flow(ctrl[0], warm.forebay_m, -math.inf)[0]
        if free_then > 0.0:
            x *= warm.ladder_flow_m3s / free_then
        z_entrance = warm.pools[-1].water_level_m + tailwater_m - warm.tailwater_m
    for src in ladder.aux:
        z = z_entrance if src.pool_index == ladder.n_pools - 1 or guess is None else guess[
            src.pool_index]
        x += src.flow(forebay_m, tailwater_m, z, s[src.setting], temperature_c)[0]
    x = max(x, 1e-3)
    if forebay_m <= min(o.low_m for o in ctrl[0]):
        return _rest_state(ladder, forebay_m, tailwater_m, s, ctrl, gates, aux_by_pool,
                           temperature_c, guess)
    lo, hi = 0.0, math.inf
    march = None
    it = 0
    for it in range(1, 200):  # noqa: B007
        march = _march(ladder, x, forebay_m, tailwater_m, ctrl, gates, aux_by_pool, s,
                       temperature_c, guess)
        if march.deficit > 0.0:
            r, dr = -1.0, 0.0
        else:
            r, dr = march.forebay_needed - forebay_m, march.dforebay
            guess = march.levels
        if abs(r) <= LEVEL_TOL_M:
            break
        if r > 0.0:
            hi = x
        else:
            lo = x
        if hi < math.inf and hi - lo <= 1e-12 * max(hi, 1e-3):
            break
        x_new = x - r / dr if dr > 0.0 else math.nan
        if not lo < x_new < hi:
            x_new = 0.5 * (lo + hi) if hi < math.inf else 2.0 * x + 1e-3
        x = x_new
    assert march is not None
    if (march.deficit > 0.0 or abs(march.forebay_needed - forebay_m) > 1e-6
            or march.inflow[0] <= NO_FLOW_M3S):
        # the iteration closed on the jump where flow over the exit would start: no flow
        return _rest_state(ladder, forebay_m, tailwater_m, s, ctrl, gates, aux_by_pool,
                           temperature_c, guess)
    return _build(ladder, forebay_m, tailwater_m, s, ctrl, gates, march, x, temperature_c,
                  False, it)


def _rest_state(ladder: Ladder, forebay: float, tailwater: float, s: Mapping[str, float],
                ctrl: list[tuple[Opening, ...]], gates: tuple[Opening, ...],
                aux_by_pool: dict[int, list[Any]], temp: float,
                guess: list[float] | None) -> Profile:
    """No flow over the exit: the entrance passes the auxiliary water alone (a fixed point,
    since the auxiliary flows depend only weakly on the levels they set). Pools above the
    highest auxiliary inlet are at rest: each holds the level the control below it allows,
    but no higher than water could drain back upstream (over the control above it, or to the
    forebay)."""
    calls = [0]

    def excess(x: float) -> float:  # auxiliary inflow at the levels x sets, less x: decreasing
        calls[0] += 1
        m = _march(ladder, x, forebay, tailwater, ctrl, gates, aux_by_pool, s, temp, guess,
                   clip=True)
        return sum(m.aux_q) - x

    g0 = excess(0.0)
    x = float(brentq(excess, 0.0, g0, xtol=1e-13, rtol=1e-12)) if g0 > 0.0 else 0.0
    march = _march(ladder, x, forebay, tailwater, ctrl, gates, aux_by_pool, s, temp, guess,
                   clip=True)
    it = calls[0]
    cap = max(forebay, min(o.low_m for o in ctrl[0]))
    for j in range(ladder.n_pools):
        if march.aux_q[j] > 0.0:
            break
        march.inflow[j] = 0.0
        march.levels[j] = min(march.levels[j], cap)
        if j + 1 < ladder.n_pools:
            cap = max(min(o.low_m for o in ctrl[j + 1]), march.levels[j])
    return _build(ladder, forebay, tailwater, s, ctrl, gates, march, x, temp, True, it)


# -- results ---------------------------------------------------------------------------------
def _control_state(cid: str, kind: str, openings: tuple[Opening, ...], zu: float, zd: float,
                   flow: float) -> ControlState:
    weir_head = sub = v_orifice = v_slot = None
    notes: list[str] = []
    flowing = flow > 0.0
    regime = "free" if flowing else "no flow"
    for o in openings:
        if flowing:
            found = o.notes(zu, zd)
            if found:
                notes.extend(found)
        k = o.kind
        if k == "weir":
            weir_head = zu - o.crest_m if zu > o.crest_m else 0.0
            if flowing and zd > o.crest_m and weir_head > 0.0:
                sub = (zd - o.crest_m) / weir_head
                regime = "submerged"
        elif k == "orifice":
            v_orifice = o.flow(zu, zd)[0] / o.area_m2
            if flowing and zd > o.soffit_m and weir_head is None:
                regime = "submerged"
        else:
            head = zu - (zd if zd > o.invert_m else o.invert_m)
            v_slot = math.sqrt(2.0 * G * head) if head > 0.0 else 0.0
            if flowing and zd > o.invert_m:
                regime = "submerged"
    return ControlState(cid, kind, zu, zd, flow, zu - zd, regime, weir_head, sub, v_orifice,
                        v_slot, tuple(dict.fromkeys(notes)) if notes else ())


def _build(ladder: Ladder, forebay: float, tailwater: float, s: Mapping[str, float],
           ctrl: list[tuple[Opening, ...]], gates: tuple[Opening, ...], m: Any, q_e: float,
           temp: float, no_flow: bool, iterations: int) -> Profile:
    f = ladder.fishway
    t = f.targets
    n = ladder.n_pools
    levels, inflow = list(m.levels), list(m.inflow)
    if no_flow:
        inflow[0] = 0.0
    warnings: list[str] = []
    pools, controls = [], []
    # power density rho*g*Q*dh/V, the form of ops_logic.hydraulics.power_density, with the
    # density looked up once per profile
    rho_g = power_density(1.0, 1.0, 1.0, temperature_c=temp)
    for j in range(n):
        zu = forebay if j == 0 else levels[j - 1]
        flow = inflow[j]
        state = _control_state(ladder.control_ids[j], "exit" if j == 0 else "baffle", ctrl[j],
                               zu if not (no_flow and j == 0) else min(zu, forebay), levels[j],
                               flow)
        controls.append(state)
        vol = ladder.pool_volume_m3(j, levels[j])
        drop = max(zu - levels[j], 0.0) if flow > 0.0 else 0.0
        if vol <= 0.0:
            warnings.append(f"pool {ladder.pool_ids[j]} is dry")
            pd = 0.0
        else:
            pd = rho_g * flow * drop / vol if flow > 0.0 else 0.0
        pools.append(PoolState(ladder.pool_ids[j], levels[j], ladder.pool_floor_m[j],
                               levels[j] - ladder.pool_floor_m[j], vol, flow, m.aux_q[j],
                               drop, pd))
        if state.notes:
            warnings.extend(f"{state.id}: {note}" for note in state.notes)
    z_e = levels[-1]
    gate_states = []
    for g, o in zip(f.entrance.gates, gates, strict=True):
        q = o.flow(z_e, tailwater)[0]
        gs = _control_state(g.id, "gate", (o,), z_e, tailwater, q)
        gate_states.append(gs)
        warnings.extend(f"{g.id}: {note}" for note in gs.notes)
    aux_states = []
    for src in ladder.aux:
        j = src.pool_index
        q = m.source_q.get(src.id)
        if q is None:
            q = src.flow(forebay, tailwater, levels[j], s[src.setting], temp)[0]
        aux_states.append(AuxState(src.id, src.spec.type, ladder.pool_ids[j], q,
                                   q / src.spec.diffuser_area, src.setting, s[src.setting]))
    ladder_flow = 0.0 if no_flow else inflow[0]
    entrance_flow = q_e
    entrance_head = z_e - tailwater

    crit: list[Criterion] = []

    def add(name: str, value: float, lo: float | None, hi: float | None, unit: str,
            kind: str) -> None:
        ok = (lo is None or value >= lo - 1e-9) and (hi is None or value <= hi + 1e-9)
        crit.append(Criterion(name, value, lo, hi, ok, unit, kind))

    add("forebay_level", forebay, *f.forebay_range, "m", "length")
    add("tailwater_level", tailwater, *f.tailwater_range, "m", "length")
    if "exit_crest_m" in s and t.exit_head is not None:
        add("exit_head", forebay - s["exit_crest_m"], t.exit_head.min, t.exit_head.max, "m",
            "length")
    if t.ladder_flow is not None:
        add("ladder_flow", ladder_flow, t.ladder_flow.min, t.ladder_flow.max, "m3/s", "flow")
    for j in range(1, n):
        add(f"head_drop:{ladder.control_ids[j]}", pools[j].head_drop_m, t.pool_head_drop.min,
            t.pool_head_drop.max, "m", "length")
    add("entrance_head", entrance_head, t.entrance_head.min, t.entrance_head.max, "m", "length")
    for p in pools:
        add(f"power_density:{p.id}", p.power_density_w_m3, None, t.max_power_density, "W/m3",
            "power_density")
    for a, src in zip(aux_states, ladder.aux, strict=True):
        vmax = getattr(t.max_diffuser_velocity, src.spec.diffuser)
        add(f"diffuser_velocity:{a.id}", a.diffuser_velocity_m_s, None, vmax, "m/s", "velocity")
    add("attraction_flow", entrance_flow, t.min_attraction_flow, None, "m3/s", "flow")

    if no_flow:
        low = min(o.low_m for o in ctrl[0])
        reason = (f"no flow through the ladder: the forebay ({ladder.length_text(forebay)}) is "
                  f"below the exit control ({ladder.length_text(low)})" if forebay <= low else
                  "no flow through the ladder: the forebay cannot lift water over the upper "
                  "controls")
    else:
        bad = [c.name for c in crit if not c.ok]
        reason = "in criteria" if not bad else "out of criteria: " + ", ".join(bad[:6]) + (
            f" and {len(bad) - 6} more" if len(bad) > 6 else "")
    return Profile(f.id, forebay, tailwater, temp, dict(s), "no_flow" if no_flow else "flowing",
                   reason, ladder_flow, entrance_flow, entrance_head, tuple(pools),
                   tuple(controls), tuple(gate_states), tuple(aux_states), tuple(crit),
                   tuple(dict.fromkeys(warnings)), iterations)
