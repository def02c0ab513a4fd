"""A fishway as the solver sees it: controls between pools, entrance gates, auxiliary water.

:class:`Ladder` is built from a :class:`~ops_logic.site.Fishway` (SI). Pools are numbered from
the exit (0) to the entrance pool (N−1); control j discharges into pool j (control 0 is the exit
control, drawing from the forebay; control j ≥ 1 is baffle j−1); the entrance gates discharge
from pool N−1 to the tailwater. Auxiliary water joins at its pool and leaves through every control
below it.

Settings are a flat mapping of names to SI values, the names that ``fishway solve --set``
accepts and that a recommendation returns: ``exit_crest_m``, ``entrance_<gate>_crest_m``,
``aux_<id>_opening_pct`` (gravity valves) and ``aux_<id>_pumps`` (pumps running).
The solver itself is in :mod:`ops_logic.profile`.

The forebay a ladder sees is the water level upstream of its exit control, behind the trash rack:
:func:`exit_forebay_m` (the rule) and :func:`ladder_forebay` (the rule with its fallback and the
words that say which forebay was used). Everything that solves, recommends or judges a ladder
from live readings passes the level these give to :meth:`Ladder.solve` or
:meth:`Ladder.recommend`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING

from ops_logic.aux_water import (
    PumpCurve,
    conduit_flow,
    pump_station_flow,
    valve_loss_coefficient,
)
from ops_logic.openings import Opening, OrificeOpening, SlotOpening, WeirOpening
from ops_logic.site import (
    AdjustableWeirExit,
    Fishway,
    GravityAux,
    OrificeBaffle,
    PumpAux,
    SlotBaffle,
    WeirBaffle,
    WeirOrificeBaffle,
)
from ops_logic.units import UnitSystem, level_text

if TYPE_CHECKING:
    from ops_logic.profile import Profile
    from ops_logic.recommend import Recommendation
    from ops_logic.site import Site

__all__ = ["MAX_TRASH_RACK_LOSS_M", "NO_USABLE_LOSS", "AuxSource", "ExitForebay", "Ladder",
           "SettingError", "SettingSpec", "exit_forebay_m", "ladder_forebay"]

MAX_TRASH_RACK_LOSS_M = 1.0
"""Largest trash-rack head loss [m] taken as real by :func:`exit_forebay_m`. An operating choice
of ours, not a published value: exit trash racks are cleaned at a loss of one or two tenths of
a metre (common practice; the ``trash_rack_dp_high`` alarm's default is 0.15 m), so a loss of a
metre means a blocked rack, whose ladder no longer runs at the steady flow of the model, or a
failed differential gauge; a larger reading is refused rather than subtracted."""


def exit_forebay_m(forebay_m: float, trash_rack_loss_m: float | None = None, *,
                   max_loss_m: float = MAX_TRASH_RACK_LOSS_M) -> float:
    """Water level upstream of a ladder's exit control: the forebay less the trash-rack loss.

    z_exit = z_forebay − max(Δh_rack, 0)    (z_exit = z_forebay when no loss is given)

    The trash-rack head loss Δh_rack is the reading of the ``trash_rack_dp`` tag: a differential
    gauge across the rack, measured from the forebay to the exit side (common practice for a
    differential gauge across a rack). The velocity heads on either side are neglected, as
    the gauge's level difference neglects them.

    Parameters
    ----------
    forebay_m : float
        Forebay water level, from the forebay gauge [m].
    trash_rack_loss_m : float or None
        Head loss across the trash rack, forebay to exit [m]; None when no usable reading.
        A negative reading (a gauge offset: in steady flow towards the exit the water behind the
        rack cannot stand above the forebay) counts as no loss.
    max_loss_m : float
        Largest loss taken as real [m] (:data:`MAX_TRASH_RACK_LOSS_M`).

    Returns
    -------
    float
        The level the ladder's exit control draws from [m].

    Validity: finite inputs; ``trash_rack_loss_m`` ≤ ``max_loss_m`` (inclusive); outside these
    a ValueError says which.

    >>> round(exit_forebay_m(77.30, 0.10), 6), exit_forebay_m(77.30, -0.01)
    (77.2, 77.3)
    >>> exit_forebay_m(77.30)
    77.3
    >>> exit_forebay_m(77.30, 2.5)  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    ValueError: trash-rack head loss 2.5 m is above the 1 m taken as real (...)

    Reference: the energy equation between the forebay and the exit side of the rack with the
    rack's loss taken as measured (Henderson 1966; rack loss coefficients in Blevins 1984, for
    a rack without a gauge); see DEVELOPERS.md, References.
    """
    if not math.isfinite(forebay_m):
        raise ValueError(f"forebay level must be a finite number, got {forebay_m!r}")
    if not (math.isfinite(max_loss_m) and max_loss_m > 0.0):
        raise ValueError(f"max_loss_m must be a finite number > 0 m, got {max_loss_m!r}")
    if trash_rack_loss_m is None:
        return float(forebay_m)
    if not math.isfinite(trash_rack_loss_m):
        raise ValueError(f"trash-rack head loss must be a finite number, got "
                         f"{trash_rack_loss_m!r}")
    if trash_rack_loss_m > max_loss_m:
        raise ValueError(f"trash-rack head loss {trash_rack_loss_m:.3g} m is above the "
                         f"{max_loss_m:g} m taken as real (a blocked rack or a failed gauge)")
    return float(forebay_m) - max(float(trash_rack_loss_m), 0.0)


@dataclass(frozen=True)
class ExitForebay:
    """The forebay a ladder sees (:func:`ladder_forebay`): its level [m], the trash-rack loss
    subtracted [m] (None: none subtracted) and, when none was, why (``note``)."""

    level_m: float
    loss_m: float | None
    note: str = ""

    @property
    def source(self) -> str:
        """Which forebay: ``"forebay − trash-rack head loss"`` or ``"forebay (<why not>)"``
        (stored by the recommender as ``inputs["ladder_forebay_from"]``)."""
        return "forebay − trash-rack head loss" if self.loss_m is not None else \
            f"forebay ({self.note})"

    def less(self, what: str) -> str:
        """The words of a head measured from this forebay down to ``what``:
        ``"forebay − trash-rack head loss − crest"`` or ``"forebay − crest (<why not>)"``."""
        return f"forebay − trash-rack head loss − {what}" if self.loss_m is not None else \
            f"forebay − {what} ({self.note})"


NO_USABLE_LOSS = "no usable trash-rack head loss"
"""The note of an :class:`ExitForebay` made without a usable ``trash_rack_dp`` reading."""


def ladder_forebay(forebay_m: float, trash_rack_loss_m: float | None) -> ExitForebay:
    """The forebay a ladder sees by the rule of :func:`exit_forebay_m`, with the words that say
    which it is. A loss that rule refuses (not finite, above :data:`MAX_TRASH_RACK_LOSS_M`) is
    treated as a reading that failed QC: the forebay itself is used, and ``note`` says why;
    a forebay that is not finite raises ValueError.

    Parameters
    ----------
    forebay_m : float
        Forebay water level, from the forebay gauge [m].
    trash_rack_loss_m : float or None
        The usable ``trash_rack_dp`` reading [m] (forebay to exit), or None.

    >>> e = ladder_forebay(77.30, 0.10)
    >>> round(e.level_m, 6), e.loss_m, e.source
    (77.2, 0.1, 'forebay − trash-rack head loss')
    >>> e = ladder_forebay(77.30, None)
    >>> e.level_m, e.source
    (77.3, 'forebay (no usable trash-rack head loss)')
    >>> e.less("crest")
    'forebay − crest (no usable trash-rack head loss)'
    >>> e = ladder_forebay(77.30, 3.0)
    >>> e.level_m, e.loss_m, e.note  # doctest: +ELLIPSIS
    (77.3, None, 'trash-rack head loss 3 m refused: above the 1 m taken as real (...)')
    """
    if trash_rack_loss_m is None:
        return ExitForebay(exit_forebay_m(forebay_m), None, NO_USABLE_LOSS)
    try:
        level = exit_forebay_m(forebay_m, trash_rack_loss_m)
    except ValueError:
        if not math.isfinite(forebay_m):
            raise
        limit = (f"above the {MAX_TRASH_RACK_LOSS_M:g} m taken as real (a blocked rack or a "
                 "failed gauge)" if math.isfinite(trash_rack_loss_m) else "not a number")
        return ExitForebay(float(forebay_m), None,
                           f"trash-rack head loss {trash_rack_loss_m:.3g} m refused: {limit}")
    return ExitForebay(level, max(float(trash_rack_loss_m), 0.0))


class SettingError(ValueError):
    """A setting that is unknown or outside its actuator range."""


@dataclass(frozen=True)
class SettingSpec:
    """One adjustable setting: its name, unit, range and largest change per adjustment."""

    name: str
    label: str
    kind: str  # "level" (m), "opening" (%), "count"
    low: float
    high: float
    rate_limit: float | None
    actuator: str  # id of the exit, gate or auxiliary source it moves

    @property
    def unit(self) -> str:
        return {"level": "m", "opening": "%", "count": "pumps"}[self.kind]


@dataclass(frozen=True)
class AuxSource:
    """An auxiliary water source of a ladder with its setting name and pool index."""

    spec: GravityAux | PumpAux
    pool_index: int
    setting: str
    curve: PumpCurve | None = None

    @property
    def id(self) -> str:
        return self.spec.id

    def flow(self, forebay_m: float, tailwater_m: float, pool_level_m: float, value: float,
             temperature_c: float) -> tuple[float, float]:
        """Flow [m³/s] into the pool and its derivative with respect to the pool level."""
        s = self.spec
        if isinstance(s, GravityAux):
            if value <= 0.0:
                return 0.0, 0.0
            if s.conduit.intake_invert is not None and forebay_m <= s.conduit.intake_invert:
                return 0.0, 0.0
            head = forebay_m - pool_level_m
            if head <= 0.0:
                return 0.0, 0.0
            v = s.valve
            k_valve = valve_loss_coefficient(
                value, diameter_m=s.conduit.diameter, characteristic=v.characteristic,
                rangeability=v.rangeability, cv_full=v.cv, kv_full=v.kv, k_full=v.k_open)
            q = conduit_flow(head, diameter_m=s.conduit.diameter, length_m=s.conduit.length,
                             roughness_m=s.conduit.roughness, minor_k=s.conduit.minor_k,
                             valve_k=k_valve, temperature_c=temperature_c)
            return q, -q / (2.0 * head)  # Q ∝ √head for a fixed friction factor
        n = int(round(value))
        if n <= 0 or self.curve is None:
            return 0.0, 0.0
        lift = pool_level_m - tailwater_m
        if lift >= self.curve.max_head_m:
            return 0.0, 0.0
        q = pump_station_flow(self.curve, n, lift, loss_k_s2_m5=s.loss_k)
        dz = 1e-4
        q2 = pump_station_flow(self.curve, n, min(lift + dz, self.curve.max_head_m),
                               loss_k_s2_m5=s.loss_k) if lift + dz < self.curve.max_head_m else 0.0
        return q, (q2 - q) / dz


def _pump_curve(s: PumpAux) -> PumpCurve:
    if s.curve is not None:
        return PumpCurve.from_points([(h, q) for h, q in s.curve])
    assert s.rated_flow is not None and s.rated_head is not None
    return PumpCurve.from_rated(s.rated_flow, s.rated_head, s.shutoff_head)


def _baffle_openings(b: WeirBaffle | WeirOrificeBaffle | SlotBaffle | OrificeBaffle,
                     floor_above: float, width_above: float) -> tuple[Opening, ...]:
    if isinstance(b, WeirBaffle):
        return (WeirOpening(b.crest, b.width, b.crest - floor_above,
                            max(width_above, b.width), b.cd, cd_factor=b.cd_factor),)
    if isinstance(b, SlotBaffle):
        return (SlotOpening(b.invert, b.slot_width, b.cd),)
    out: list[Opening] = []
    if isinstance(b, WeirOrificeBaffle):
        # each notch contracts in its share of the pool width (an approximation: the
        # contraction ratio of Kindsvater–Carter is defined for one notch in one channel)
        channel = width_above / b.weir_count
        out.append(WeirOpening(b.crest, b.weir_width, b.crest - floor_above,
                               max(channel, b.weir_width), b.weir_cd, count=b.weir_count,
                               cd_factor=b.weir_cd_factor))
    for o in b.orifices:
        out.append(OrificeOpening(o.invert, o.width, o.height, o.cd, o.count))
    return tuple(out)


class Ladder:
    """The solver's model of one fishway, built from its validated site entry."""

    def __init__(self, fishway: Fishway, *, units: UnitSystem = "si"):
        self.fishway = fishway
        self.units: UnitSystem = units
        """Display unit system for the text of reasons (values stay SI everywhere else)."""
        self.id = fishway.id
        pools = fishway.pools
        self.pool_ids: tuple[str, ...] = tuple(fishway.pool_ids())
        self.pool_floor_m = tuple(p.floor for p in pools)
        self.pool_area_m2 = tuple(p.length * p.width for p in pools)
        self.pool_width_m = tuple(p.width for p in pools)
        self.control_ids: tuple[str, ...] = (fishway.exit.id or "exit", *fishway.baffle_ids())
        self.n_pools = len(pools)
        # controls 1..N-1 are fixed; the exit is fixed unless it is an adjustable weir
        self._fixed: list[tuple[Opening, ...] | None] = [None] * self.n_pools
        ex = fishway.exit
        if not isinstance(ex, AdjustableWeirExit):
            # a fixed exit draws from the open forebay: deep approach, no side contraction
            floor = getattr(ex, "crest", ex.pool.floor) - 10.0
            self._fixed[0] = _baffle_openings(ex, floor, 1e9)
        for j, b in enumerate(fishway.baffles, start=1):
            self._fixed[j] = _baffle_openings(b, pools[j - 1].floor, pools[j - 1].width)
        self.aux: tuple[AuxSource, ...] = tuple(
            AuxSource(a, fishway.aux_pool_index(a),
                      f"aux_{a.id}_opening_pct" if isinstance(a, GravityAux) else
                      f"aux_{a.id}_pumps",
                      _pump_curve(a) if isinstance(a, PumpAux) else None)
            for a in fishway.aux)
        self.settings: dict[str, SettingSpec] = {s.name: s for s in self._setting_specs()}

    # -- settings ---------------------------------------------------------------------------
    def _setting_specs(self) -> list[SettingSpec]:
        f, rl = self.fishway, self.fishway.rate_limits
        out = []
        if isinstance(f.exit, AdjustableWeirExit):
            out.append(SettingSpec("exit_crest_m", "Exit weir crest", "level",
                                   *f.exit.crest_range, rl.exit_crest, f.exit.id))
        for g in f.entrance.gates:
            out.append(SettingSpec(f"entrance_{g.id}_crest_m", f"Entrance weir {g.id} crest",
                                   "level", *g.crest_range, rl.entrance_crest, g.id))
        for a in self.aux:
            if isinstance(a.spec, GravityAux):
                out.append(SettingSpec(a.setting, f"Auxiliary valve {a.id} opening", "opening",
                                       0.0, 100.0, rl.valve_opening_pct, a.id))
            else:
                out.append(SettingSpec(a.setting, f"Pumps running at {a.id}", "count", 0.0,
                                       float(a.spec.count), rl.pumps, a.id))
        return out

    def default_settings(self) -> dict[str, float]:
        """Mid-range crests, gravity valves half open, no pumps: a neutral starting point."""
        out = {}
        for s in self.settings.values():
            out[s.name] = 0.0 if s.kind == "count" else (
                50.0 if s.kind == "opening" else 0.5 * (s.low + s.high))
        return out

    def check_settings(self, settings: Mapping[str, float] | None) -> dict[str, float]:
        """Defaults overlaid with ``settings``; unknown names or values out of range raise."""
        out = self.default_settings()
        for name, value in (settings or {}).items():
            spec = self.settings.get(name)
            if spec is None:
                raise SettingError(f"unknown setting {name!r} for fishway {self.id!r} "
                                   f"(settings: {', '.join(self.settings)})")
            v = float(value)
            if not math.isfinite(v) or not spec.low - 1e-9 <= v <= spec.high + 1e-9:
                raise SettingError(f"{name} = {v:g} {spec.unit} is outside its range "
                                   f"{spec.low:g}–{spec.high:g} {spec.unit}")
            if spec.kind == "count" and abs(v - round(v)) > 1e-9:
                raise SettingError(f"{name} must be a whole number of pumps, got {v:g}")
            out[name] = min(max(v, spec.low), spec.high)
        return out

    # -- controls for a given set of settings -------------------------------------------------
    def controls(self, settings: Mapping[str, float]) -> list[tuple[Opening, ...]]:
        """Openings of every control (exit first) under ``settings`` (already checked)."""
        out = list(self._fixed)
        ex = self.fishway.exit
        if isinstance(ex, AdjustableWeirExit):
            crest = settings["exit_crest_m"]
            floor = ex.approach_floor if ex.approach_floor is not None else ex.pool.floor
            out[0] = (WeirOpening(crest, ex.width, crest - floor, None, ex.cd,
                                  cd_factor=ex.cd_factor),)
        return out  # type: ignore[return-value]

    def control_lows(self, controls: list[tuple[Opening, ...]]) -> list[float]:
        """The level at which flow through each control starts (its lowest opening)."""
        return [min(o.low_m for o in c) for c in controls]

    def gates(self, settings: Mapping[str, float]) -> tuple[Opening, ...]:
        """Entrance gate openings under ``settings``."""
        floor, width = self.pool_floor_m[-1], self.pool_width_m[-1]
        gates = self.fishway.entrance.gates
        channel = width / len(gates)
        return tuple(
            WeirOpening(settings[f"entrance_{g.id}_crest_m"], g.width,
                        settings[f"entrance_{g.id}_crest_m"] - floor,
                        max(channel, g.width), g.cd, cd_factor=g.cd_factor)
            for g in gates)

    def pool_volume_m3(self, j: int, level_m: float) -> float:
        return self.pool_area_m2[j] * max(level_m - self.pool_floor_m[j], 0.0)

    # -- solving ------------------------------------------------------------------------------
    @classmethod
    def from_site(cls, site: Site, fishway_id: str) -> Ladder:
        """The ladder of fishway ``fishway_id`` of a loaded site."""
        return cls(site.fishway(fishway_id), units=site.site.units)

    def length_text(self, value_m: float) -> str:
        """A level or length for a message: display units, with SI beside US values
        (:func:`ops_logic.units.level_text`)."""
        return level_text(value_m, self.units)

    def solve(self, forebay: float, tailwater: float, settings: Mapping[str, float] | None = None,
              *, temperature_c: float = 10.0, warm: Profile | None = None) -> Profile:
        """Steady water-surface profile at these levels [m] and settings (SI); see
        :func:`ops_logic.profile.solve_profile`."""
        from ops_logic.profile import solve_profile

        return solve_profile(self, forebay, tailwater, settings, temperature_c=temperature_c,
                             warm=warm)

    def recommend(self, forebay: float, tailwater: float,
                  current_settings: Mapping[str, float] | None = None, *,
                  temperature_c: float = 10.0) -> Recommendation:
        """Advisory settings that best hold the targets; see :mod:`ops_logic.recommend`."""
        from ops_logic.recommend import recommend

        return recommend(self, forebay, tailwater, current_settings, temperature_c=temperature_c)
