"""Setpoint recommender: the settings that best hold a fishway's targets at given levels.

The targets separate along the ladder, so the recommender sets each actuator for the target it
governs and then checks the whole profile, instead of searching all settings at once:

1. **Exit weir crest** — holds the head on the exit weir at its aim (crest = forebay − aim), or,
   when the site gives a ladder-flow band instead, the crest at which the profile passes the aim
   flow (``scipy.optimize.brentq`` on whole-profile solves).
2. **Auxiliary water** — enough to lift the entrance flow to the aim attraction flow
   (the minimum plus :data:`ATTRACTION_MARGIN`), each diffuser kept under its velocity limit.
   Pump counts are discrete: every allowed combination is enumerated; for each, the gravity
   valve openings are found by bounded optimisation (``scipy.optimize.minimize``, L-BFGS-B).
   The cheapest combination wins: shortfall first, then pumps running (gravity water costs no
   energy), then the size of the change.
3. **Entrance weir crests** — the common crest at which the gates pass the entrance flow with the
   entrance head at its aim (``brentq``); if the lower pools then break their drop or power
   limits, the aim is moved inside the entrance-head band (``minimize_scalar``, bounded).
4. The whole profile is solved under the candidate settings and steps 2–3 repeat with the
   computed levels until the settings stop moving (two or three passes).

Every setting is held within its actuator range and, when current settings are given, within
its rate limit (the largest change per adjustment). The result says which criterion or limit
binds and, when no setting can meet the criteria, ``feasible = False`` and why. Recommendations
are advisory (:data:`~ops_logic.advisory.ADVISORY_CAUTION`).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from scipy.optimize import brentq, minimize, minimize_scalar

from ops_logic.advisory import ADVISORY_CAUTION
from ops_logic.ladder import Ladder, SettingSpec
from ops_logic.openings import control_flow
from ops_logic.profile import Criterion, Profile
from ops_logic.site import GravityAux

__all__ = ["ATTRACTION_MARGIN", "Recommendation", "SettingChange", "recommend"]

ATTRACTION_MARGIN = 0.05
"""Aim the attraction flow this fraction above its minimum, so small level changes between
adjustments do not drop it below (an operating choice of ours, not a published value)."""

PUMP_COST = 0.3
"""Cost of one pump running, in percent of aim attraction flow short: gravity water first."""


@dataclass(frozen=True)
class SettingChange:
    name: str
    label: str
    unit: str
    current: float
    recommended: float
    limited_by: str | None  # "range", "rate limit" or None


@dataclass(frozen=True)
class Recommendation:
    """Recommended settings, the profile they predict, and why (advisory)."""

    fishway_id: str
    forebay_m: float
    tailwater_m: float
    settings: dict[str, float]
    current_settings: dict[str, float]
    profile: Profile
    feasible: bool
    binding: str
    reason: str
    changes: tuple[SettingChange, ...]
    caution: str = ADVISORY_CAUTION

    def to_dict(self) -> dict[str, Any]:
        out = self.profile.to_dict()
        out.update(settings=dict(self.settings), current_settings=dict(self.current_settings),
                   feasible=self.feasible, binding=self.binding, reason=self.reason,
                   changes=[c.__dict__ | {} for c in self.changes], caution=self.caution)
        return out


class _Bounds:
    """Per-setting bounds: actuator range intersected with the rate limit around current."""

    def __init__(self, ladder: Ladder, current: Mapping[str, float], rate_limited: bool):
        self.lo: dict[str, float] = {}
        self.hi: dict[str, float] = {}
        for name, spec in ladder.settings.items():
            lo, hi = spec.low, spec.high
            if rate_limited and spec.rate_limit is not None:
                lo = max(lo, current[name] - spec.rate_limit)
                hi = min(hi, current[name] + spec.rate_limit)
            self.lo[name], self.hi[name] = lo, hi

    def clip(self, name: str, value: float) -> float:
        return min(max(value, self.lo[name]), self.hi[name])


def recommend(ladder: Ladder, forebay_m: float, tailwater_m: float,
              current_settings: Mapping[str, float] | None = None, *,
              temperature_c: float = 10.0) -> Recommendation:
    """Recommend settings for ``ladder`` at these levels [m]; see the module docstring.

    ``current_settings`` (names as in ``Ladder.settings``) are the settings now in force: the
    rate limits apply around them. Without them, every setting may move across its whole range
    (the setpoint table uses this).
    """
    current = ladder.check_settings(current_settings)
    bounds = _Bounds(ladder, current, current_settings is not None)
    t = ladder.fishway.targets
    s = dict(current)
    notes: list[str] = []

    # 1. exit weir crest
    if "exit_crest_m" in s:
        if t.exit_head is not None:
            s["exit_crest_m"] = bounds.clip("exit_crest_m", forebay_m - t.exit_head.aim)
        else:
            s["exit_crest_m"] = _crest_for_ladder_flow(ladder, forebay_m, tailwater_m, s,
                                                       bounds, temperature_c)
    profile = ladder.solve(forebay_m, tailwater_m, s, temperature_c=temperature_c)

    entrance_aim = t.entrance_head.aim
    for _ in range(4):
        before = dict(s)
        _set_aux(ladder, s, bounds, profile, forebay_m, tailwater_m, entrance_aim, temperature_c)
        _set_entrance(ladder, s, bounds, profile, forebay_m, tailwater_m, entrance_aim,
                      temperature_c)
        profile = ladder.solve(forebay_m, tailwater_m, s, temperature_c=temperature_c,
                               warm=profile)
        if all(abs(s[k] - before[k]) < 1e-6 for k in s):
            break
    if not profile.in_criteria and profile.state == "flowing":
        profile = _move_entrance_aim(ladder, s, bounds, profile, forebay_m, tailwater_m,
                                     temperature_c, notes)

    changes = tuple(_change(spec, current[n], s[n], bounds) for n, spec in ladder.settings.items())
    feasible, binding, reason = _explain(ladder, profile, s, bounds, changes, forebay_m)
    if notes:
        reason = f"{reason}; {'; '.join(notes)}"
    return Recommendation(ladder.id, forebay_m, tailwater_m, dict(s), dict(current), profile,
                          feasible, binding, reason, changes)


def _crest_for_ladder_flow(ladder: Ladder, forebay: float, tailwater: float,
                           s: dict[str, float], bounds: _Bounds, temp: float) -> float:
    band = ladder.fishway.targets.ladder_flow
    assert band is not None
    lo, hi = bounds.lo["exit_crest_m"], min(bounds.hi["exit_crest_m"], forebay - 1e-4)
    if hi <= lo:
        return lo

    def excess(crest: float) -> float:
        return ladder.solve(forebay, tailwater, {**s, "exit_crest_m": crest},
                            temperature_c=temp).ladder_flow_m3s - band.aim

    f_lo, f_hi = excess(lo), excess(hi)
    if f_lo <= 0.0:
        return lo  # even the lowest crest passes too little
    if f_hi >= 0.0:
        return hi
    return float(brentq(excess, lo, hi, xtol=1e-5))


def _aim_level(ladder: Ladder, profile: Profile, j: int, tailwater: float, aim: float) -> float:
    return tailwater + aim if j == ladder.n_pools - 1 else profile.pools[j].water_level_m


def _set_aux(ladder: Ladder, s: dict[str, float], bounds: _Bounds, profile: Profile,
             forebay: float, tailwater: float, entrance_aim: float, temp: float) -> None:
    if not ladder.aux:
        return
    t = ladder.fishway.targets
    target = t.min_attraction_flow * (1.0 + ATTRACTION_MARGIN) - profile.ladder_flow_m3s
    scale = max(t.min_attraction_flow, 1e-3)

    def cap(src: Any) -> float:
        v = getattr(t.max_diffuser_velocity, src.spec.diffuser)
        return v * src.spec.diffuser_area * 0.995

    def q(src: Any, value: float) -> float:
        z = _aim_level(ladder, profile, src.pool_index, tailwater, entrance_aim)
        return src.flow(forebay, tailwater, z, value, temp)[0]

    pumps = [a for a in ladder.aux if not isinstance(a.spec, GravityAux)]
    valves = [a for a in ladder.aux if isinstance(a.spec, GravityAux)]
    # the most each valve may open before its diffuser passes its velocity limit
    valve_hi = {}
    for v in valves:
        lo, hi = bounds.lo[v.setting], bounds.hi[v.setting]
        if hi > lo and q(v, hi) > cap(v):
            hi = lo if q(v, lo) >= cap(v) else float(brentq(lambda x, v=v: q(v, x) - cap(v),
                                                            lo, hi, xtol=1e-4))
        valve_hi[v.setting] = hi
    best: tuple[float, dict[str, float]] | None = None
    choices = [range(int(math.ceil(bounds.lo[p.setting] - 1e-9)),
                     int(math.floor(bounds.hi[p.setting] + 1e-9)) + 1) for p in pumps]
    for counts in itertools.product(*choices):
        trial = {p.setting: float(n) for p, n in zip(pumps, counts, strict=True)}
        pumped = [q(p, n) for p, n in zip(pumps, counts, strict=True)]
        if any(qp > cap(p) for p, qp in zip(pumps, pumped, strict=True)):
            continue
        trial.update(_open_valves(valves, target - sum(pumped), s, bounds, valve_hi, q, scale))
        delivered = sum(pumped) + sum(q(v, trial[v.setting]) for v in valves)
        short = max(target - delivered, 0.0) / scale * 100.0
        over = max(delivered - target, 0.0) / scale * 10.0
        change = sum(abs(trial[p.setting] - s[p.setting]) for p in pumps) * 0.05
        cost = short + over + PUMP_COST * sum(counts) + change
        if best is None or cost < best[0] - 1e-9:
            best = (cost, trial)
    if best is None:  # every pump choice overloads its diffuser: run as few as allowed
        best = (0.0, {p.setting: bounds.lo[p.setting] for p in pumps})
        best[1].update(_open_valves(valves, target, s, bounds, valve_hi, q, scale))
    s.update(best[1])


def _open_valves(valves: list[Any], need: float, s: Mapping[str, float], bounds: _Bounds,
                 valve_hi: Mapping[str, float], q: Any, scale: float) -> dict[str, float]:
    if not valves:
        return {}
    names = [v.setting for v in valves]
    lo = [bounds.lo[n] for n in names]
    hi = [max(valve_hi[n], bounds.lo[n]) for n in names]
    if need <= 0.0:
        return dict(zip(names, lo, strict=True))
    if len(valves) == 1:
        v = valves[0]
        if q(v, hi[0]) <= need:
            return {names[0]: hi[0]}
        if q(v, lo[0]) >= need:
            return {names[0]: lo[0]}
        return {names[0]: float(brentq(lambda x: q(v, x) - need, lo[0], hi[0], xtol=1e-4))}

    def cost(x: Any) -> float:
        total = sum(q(v, xi) for v, xi in zip(valves, x, strict=True))
        move = sum(((xi - s[n]) / 100.0) ** 2 for xi, n in zip(x, names, strict=True))
        return ((total - need) / scale) ** 2 + 1e-4 * move

    x0 = [min(max(s[n], a), b) for n, a, b in zip(names, lo, hi, strict=True)]
    res = minimize(cost, x0, method="L-BFGS-B", bounds=list(zip(lo, hi, strict=True)),
                   options={"maxiter": 60})
    return {n: float(min(max(x, a), b)) for n, x, a, b in zip(names, res.x, lo, hi, strict=True)}


def _set_entrance(ladder: Ladder, s: dict[str, float], bounds: _Bounds, profile: Profile,
                  forebay: float, tailwater: float, aim: float, temp: float) -> None:
    names = [f"entrance_{g.id}_crest_m" for g in ladder.fishway.entrance.gates]
    q_e = profile.ladder_flow_m3s + sum(
        src.flow(forebay, tailwater, _aim_level(ladder, profile, src.pool_index, tailwater, aim),
                 s[src.setting], temp)[0] for src in ladder.aux)
    z_e = tailwater + aim

    def passes(crest: float) -> float:
        trial = {**s, **{n: bounds.clip(n, crest) for n in names}}
        return control_flow(ladder.gates(trial), z_e, tailwater)[0] - q_e

    lo = min(bounds.lo[n] for n in names)
    hi = max(bounds.hi[n] for n in names)
    if passes(lo) <= 0.0:
        crest = lo
    elif passes(hi) >= 0.0:
        crest = hi
    else:
        crest = float(brentq(passes, lo, hi, xtol=1e-5))
    for n in names:
        s[n] = bounds.clip(n, crest)


def _shortfall(profile: Profile) -> float:
    """Total normalised violation of the criteria the entrance level acts on."""
    out = 0.0
    for c in profile.criteria:
        if c.ok or c.name.startswith(("forebay_level", "tailwater_level", "exit_head")):
            continue
        span = abs(c.max if c.max is not None else c.min or 1.0) or 1.0
        over = (c.value - c.max) if c.max is not None and c.value > c.max else 0.0
        under = (c.min - c.value) if c.min is not None and c.value < c.min else 0.0
        out += (over + under) / span
    return out


def _move_entrance_aim(ladder: Ladder, s: dict[str, float], bounds: _Bounds, profile: Profile,
                       forebay: float, tailwater: float, temp: float,
                       notes: list[str]) -> Profile:
    band = ladder.fishway.targets.entrance_head
    cache: dict[float, tuple[float, dict[str, float], Profile]] = {}

    def trial(aim: float) -> float:
        t = dict(s)
        _set_aux(ladder, t, bounds, profile, forebay, tailwater, aim, temp)
        _set_entrance(ladder, t, bounds, profile, forebay, tailwater, aim, temp)
        p = ladder.solve(forebay, tailwater, t, temperature_c=temp, warm=profile)
        cost = _shortfall(p) + 1e-3 * abs(aim - band.aim) / (band.max - band.min)
        cache[aim] = (cost, t, p)
        return cost

    base = _shortfall(profile)
    if base <= 0.0:
        return profile
    res = minimize_scalar(trial, bounds=(band.min, band.max), method="bounded",
                          options={"xatol": 0.002 * (band.max - band.min), "maxiter": 14})
    cost, t, p = cache[float(res.x)] if float(res.x) in cache else min(cache.values(),
                                                                         key=lambda c: c[0])
    if cost < base - 1e-9:
        s.update(t)
        notes.append(f"entrance head aimed at {ladder.length_text(p.entrance_head_m)} within its "
                     "band to "
                     "ease the lower pools")
        return p
    return profile


def _change(spec: SettingSpec, cur: float, new: float, bounds: _Bounds) -> SettingChange:
    limited = None
    for edge in (bounds.lo[spec.name], bounds.hi[spec.name]):
        if abs(new - edge) < 1e-9:
            at_range = abs(edge - spec.low) < 1e-9 or abs(edge - spec.high) < 1e-9
            limited = "range" if at_range else "rate limit"
    return SettingChange(spec.name, spec.label, spec.unit, cur, new, limited)


def _margin(c: Criterion) -> float:
    if c.min is not None and c.max is not None:
        return min(c.value - c.min, c.max - c.value) / (c.max - c.min)
    if c.max is not None:
        return (c.max - c.value) / abs(c.max or 1.0)
    assert c.min is not None
    return (c.value - c.min) / abs(c.min or 1.0)


_LEVEL_RANGES = ("forebay_level", "tailwater_level")


def _explain(ladder: Ladder, p: Profile, s: Mapping[str, float], bounds: _Bounds,
             changes: tuple[SettingChange, ...], forebay: float) -> tuple[bool, str, str]:
    t = ladder.fishway.targets
    limited = [c for c in changes if c.limited_by == "rate limit" or (
        c.limited_by == "range" and c.unit == "m")]
    def value_text(c: SettingChange) -> str:
        if c.unit == "m":
            return ladder.length_text(c.recommended)
        return f"{c.recommended:.0f} pumps" if c.unit == "pumps" else f"{c.recommended:.1f} %"

    lim_text = "; ".join(f"{c.label} held at its {c.limited_by} ({value_text(c)})"
                         for c in limited)
    if "exit_crest_m" in s and t.exit_head is not None:
        lowest = ladder.settings["exit_crest_m"].low
        if forebay - lowest < t.exit_head.min - 1e-9:
            return False, "exit_head", (
                f"forebay too low for the exit weir range: {ladder.length_text(forebay)} leaves "
                f"{ladder.length_text(forebay - lowest)} over the lowest crest "
                f"({ladder.length_text(lowest)}), below the minimum head "
                f"{ladder.length_text(t.exit_head.min)}")
    if p.state == "no_flow":
        return False, "ladder_flow", p.reason
    outside = [c for c in p.criteria if not c.ok and c.name in _LEVEL_RANGES]
    if outside:
        c = outside[0]
        side = "below" if c.min is not None and c.value < c.min else "above"
        return False, c.name, (f"{c.name.replace('_', ' ')} {ladder.length_text(c.value)} is "
                               f"{side} the fishway's operating range "
                               f"{ladder.length_text(c.min)} to {ladder.length_text(c.max)}; the "
                               "settings shown are the best within reach")
    failing = [c for c in p.criteria if not c.ok]
    if failing:
        worst = max(failing, key=lambda c: -_margin(c))
        text = "no setting within reach meets " + ", ".join(c.name for c in failing[:6])
        if len(failing) > 6:
            text += f" and {len(failing) - 6} more"
        return False, worst.name, text + (f" ({lim_text})" if lim_text else "")
    tight = min((c for c in p.criteria if c.name not in _LEVEL_RANGES), key=_margin)
    text = f"all criteria met; closest to its limit: {tight.name}"
    return True, tight.name, text + (f"; {lim_text}" if lim_text else "")
