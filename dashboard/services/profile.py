"""Service of the fishway profile page: the live state of a fishway and its solved profile.

:func:`live_state` gathers what the database knows now about one fishway: the newest usable
(QARTOD pass or not evaluated) forebay, tailwater, pool-gauge, trash-rack and water-temperature
readings and the actuator positions. A setting comes from its position reading, else from the
last logged setting (``actuator_settings``), else from the ladder's neutral default, and the
state says which. :func:`solve_live` solves the steady profile from that state
(:meth:`ops_logic.ladder.Ladder.solve`); :func:`pool_details` lists what the page shows for one
clicked pool. Everything is SI inside; text is in the site's display units.

The ladder is the fishway *in force* (site file plus supervisors' overrides,
:func:`db.in_force.effective_site`): :func:`ladder_in_force` gives it, and the state is read
with it, so an overridden target band is the band its criteria carry; the state also carries
the fishway's mode in force (a note says when it is not operating).

The forebay the ladder sees is the water level upstream of its exit control: the forebay
gauge less the trash-rack head loss (the ``trash_rack_dp`` tag measures forebay to exit),
``forebay − max(loss, 0)``, when that reading is usable, else the forebay gauge itself; a loss
above :data:`~ops_logic.ladder.MAX_TRASH_RACK_LOSS_M` is refused and the forebay gauge used
(:func:`ops_logic.ladder.ladder_forebay`). Here a trash-rack reading is usable when it was
taken within the fishway's ``stale_tag.max_age_s`` of the forebay reading. The state keeps the
forebay gauge (``forebay_m``) and the level the ladder sees (``ladder_forebay_m``, with
``ladder_forebay_from`` and a note saying which); :func:`solve_live` solves at the latter.

The setpoints page reuses :func:`live_state` and :func:`solve_live`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from datetime import UTC, datetime
from zoneinfo import ZoneInfo

from dashboard.context import AppContext
from db.catalog import tags_frame
from db.dashboard_queries import fishway_db_ids, latest_good_values
from db.history import latest_actuator_settings
from db.in_force import effective_site
from ops_logic.ladder import Ladder, ladder_forebay
from ops_logic.overrides import MODE_LABELS
from ops_logic.profile import Profile
from ops_logic.report_format import format_setting, format_value
from ops_logic.units import UnitSystem

__all__ = [
    "DEFAULT_TEMPERATURE_C",
    "LiveState",
    "Measured",
    "fishway_db_id",
    "fishway_options",
    "ladder_in_force",
    "live_state",
    "local_time_text",
    "now_utc",
    "pool_details",
    "solve_live",
]

DEFAULT_TEMPERATURE_C = 10.0
"""Water temperature for the solve when no usable reading exists (the solver's default)."""


@dataclass(frozen=True)
class Measured:
    """One usable gauge reading: where (``forebay``, ``tailwater`` or a pool id), its tag,
    its value [m] and time; ``redundant`` for a pool's second gauge."""

    where: str
    tag: str
    value_m: float
    ts: datetime
    redundant: bool = False


@dataclass(frozen=True)
class LiveState:
    """What the database knows now about one fishway (SI). ``forebay_m`` is the forebay
    gauge, ``ladder_forebay_m`` the level the ladder sees (see the module docstring),
    ``trash_rack_loss_m`` the loss subtracted (None: none), ``mode`` the mode in force."""

    fishway_id: str
    forebay_m: float | None
    tailwater_m: float | None
    temperature_c: float
    settings: dict[str, float]
    setting_sources: dict[str, str]
    measured: tuple[Measured, ...]
    as_of: datetime | None
    age_s: float | None
    stale: bool
    notes: tuple[str, ...] = field(default=())
    ladder_forebay_m: float | None = None
    ladder_forebay_from: str = ""
    trash_rack_loss_m: float | None = None
    mode: str = "operating"

    def gauge(self, where: str, *, redundant: bool = False) -> Measured | None:
        for m in self.measured:
            if m.where == where and m.redundant == redundant:
                return m
        return None


def fishway_options(ctx: AppContext) -> list[dict[str, str]]:
    """Dropdown options of the site's fishways (label: name, value: site-file id)."""
    return [{"label": f.name, "value": f.id} for f in ctx.site.fishways]


def ladder_in_force(ctx: AppContext, fishway_id: str) -> Ladder:
    """The ladder of a fishway *in force* (site file plus supervisors' overrides,
    :func:`db.in_force.effective_site`; cached until the next setting change); ``KeyError``
    for a fishway the site does not have."""
    return effective_site(ctx.site, ctx.engine).ladders[fishway_id]


def fishway_db_id(ctx: AppContext, fishway_id: str) -> int:
    """The database id of a fishway; ``KeyError`` when the catalogue lacks it (run
    ``fishway dashboard``, which synchronises the catalogue with the site file)."""
    ids = fishway_db_ids(ctx.engine, ctx.site.site.name)
    if fishway_id not in ids:
        raise KeyError(f"fishway {fishway_id!r} is not in the database catalogue")
    return ids[fishway_id]


def local_time_text(when: datetime | None, ctx: AppContext, *, seconds: bool = False) -> str:
    """A time in the site's time zone, ``YYYY-MM-DD HH:MM`` (``—`` for None)."""
    if when is None:
        return "—"
    fmt = "%Y-%m-%d %H:%M:%S" if seconds else "%Y-%m-%d %H:%M"
    return when.astimezone(ZoneInfo(ctx.site.site.time_zone)).strftime(fmt)


def _age_text(age_s: float) -> str:
    if age_s < 120:
        return f"{age_s:.0f} s"
    if age_s < 7200:
        return f"{age_s / 60:.0f} min"
    if age_s < 172_800:
        return f"{age_s / 3600:.1f} h"
    return f"{age_s / 86400:.0f} days"


def live_state(ctx: AppContext, fishway_id: str, now: datetime) -> LiveState:
    """The live state of ``fishway_id`` at ``now`` (tz-aware); see the module docstring."""
    eff = effective_site(ctx.site, ctx.engine)
    ladder, mode = eff.ladders[fishway_id], eff.modes[fishway_id]
    fw = fishway_db_id(ctx, fishway_id)
    tags = tags_frame(ctx.engine, fw)
    good = latest_good_values(ctx.engine, tags.index.tolist()) if len(tags) else None
    notes: list[str] = []

    def reading(tag_id: int) -> tuple[float, datetime] | None:
        if good is None or tag_id not in good.index:
            return None
        row = good.loc[tag_id]
        return float(row["value"]), row["ts"].to_pydatetime()

    forebay = tailwater = rack = None
    temperature = None
    measured: list[Measured] = []
    positions: dict[str, tuple[float, datetime]] = {}
    for tag_id, t in tags.iterrows():
        got = reading(int(tag_id))
        if got is None:
            continue
        value, ts = got
        role = t["role"]
        if role == "forebay":
            forebay = (value, ts)
            measured.append(Measured("forebay", t["name"], value, ts))
        elif role == "tailwater":
            tailwater = (value, ts)
            measured.append(Measured("tailwater", t["name"], value, ts))
        elif role in ("pool", "pool_b") and t["pool_id"]:
            measured.append(Measured(str(t["pool_id"]), t["name"], value, ts, role == "pool_b"))
        elif role == "water_temp":
            temperature = value
        elif role == "trash_rack_dp":
            rack = (value, ts)
        elif role == "setting" and t["setting"]:
            positions[str(t["setting"])] = (value, ts)
    logged = latest_actuator_settings(ctx.engine, fw)
    settings: dict[str, float] = {}
    sources: dict[str, str] = {}
    defaults = ladder.default_settings()
    for name, spec in ladder.settings.items():
        if name in positions:
            value, ts = positions[name]
            sources[name] = f"position reading {local_time_text(ts, ctx)}"
        elif name in logged.index:
            value = float(logged.loc[name, "value"])
            sources[name] = (f"logged by {logged.loc[name, 'set_by']} "
                             f"{local_time_text(logged.loc[name, 'ts'].to_pydatetime(), ctx)}")
        else:
            value = defaults[name]
            sources[name] = "default (no position reading or logged setting)"
            notes.append(f"{spec.label}: no position reading or logged setting; the neutral "
                         "default is assumed")
        if spec.kind == "count":
            value = float(round(value))
        if not spec.low <= value <= spec.high:
            clipped = min(max(value, spec.low), spec.high)
            notes.append(f"{spec.label}: {format_setting(spec, value, ctx.units)} is outside "
                         f"its range; {format_setting(spec, clipped, ctx.units)} is used")
            value = clipped
        settings[name] = value
    if mode != "operating":
        notes.append(f"{MODE_LABELS[mode]}: no recommendation while the fishway is not "
                     "operating")
    max_age = ladder.fishway.alarms.stale_tag.max_age_s
    exit_fb = None
    if forebay is not None:
        paired = rack is not None and abs((rack[1] - forebay[1]).total_seconds()) <= max_age
        exit_fb = ladder_forebay(forebay[0], rack[0] if rack is not None and paired else None)
        notes.append(f"the ladder sees a forebay of "
                     f"{format_value(exit_fb.level_m, 'length', ctx.units)}: {exit_fb.source}")
    if forebay is None:
        notes.append("no usable forebay reading")
    if tailwater is None:
        notes.append("no usable tailwater reading")
    if temperature is None:
        notes.append(f"no usable water temperature: {DEFAULT_TEMPERATURE_C:g} °C assumed")
    stamps = [x[1] for x in (forebay, tailwater) if x is not None]
    as_of = min(stamps) if stamps else None
    age = (now - as_of).total_seconds() if as_of is not None else None
    stale = age is None or age > max_age
    if age is not None and stale:
        notes.append(f"the levels are {_age_text(age)} old")
    return LiveState(fishway_id, forebay[0] if forebay else None,
                     tailwater[0] if tailwater else None,
                     DEFAULT_TEMPERATURE_C if temperature is None else temperature,
                     settings, sources, tuple(measured), as_of, age, stale, tuple(notes),
                     exit_fb.level_m if exit_fb is not None else None,
                     exit_fb.source if exit_fb is not None else "",
                     exit_fb.loss_m if exit_fb is not None else None, mode)


def solve_live(ladder: Ladder, state: LiveState) -> tuple[Profile | None, str | None]:
    """The profile at the live state, or ``(None, why not)``: solved at the forebay the ladder
    sees (``state.ladder_forebay_m``). ``ladder`` should be the one in force
    (:func:`ladder_in_force`): its targets are the bands of the profile's criteria."""
    if state.ladder_forebay_m is None or state.tailwater_m is None:
        return None, "the profile needs a usable forebay and tailwater reading"
    try:
        return ladder.solve(state.ladder_forebay_m, state.tailwater_m, state.settings,
                            temperature_c=state.temperature_c), None
    except ValueError as exc:
        return None, str(exc)


def _opt(value: float | None, kind: str, units: UnitSystem) -> str:
    if value is None or not math.isfinite(value):
        return "—"
    return format_value(value, kind, units)


def pool_details(ladder: Ladder, profile: Profile, index: int, state: LiveState | None,
                 units: UnitSystem) -> list[tuple[str, str]]:
    """``(label, value text)`` rows describing pool ``index`` (0 = below the exit) and the
    control above it.

    >>> from ops_logic.site import load_site
    >>> site = load_site()
    >>> lad = Ladder.from_site(site, "east")
    >>> p = lad.solve(77.3, 65.7, lad.default_settings())
    >>> rows = dict(pool_details(lad, p, 0, None, "si"))
    >>> rows["Pool"], rows["Control above"], rows["Regime"]
    ('P01 (1 of 40)', 'exit (adjustable weir)', 'free')
    """
    if not 0 <= index < ladder.n_pools:
        raise ValueError(f"pool index {index} outside 0–{ladder.n_pools - 1}")
    t = ladder.fishway.targets
    pool = profile.pools[index]
    ctrl = profile.controls[index]
    kinds = [ladder.fishway.exit, *ladder.fishway.baffles]
    kind = kinds[index].type.replace("_", " ")
    pd_ok = pool.power_density_w_m3 <= t.max_power_density + 1e-9
    rows = [
        ("Pool", f"{pool.id} ({index + 1} of {ladder.n_pools})"),
        ("Water level (computed)", _opt(pool.water_level_m, "length", units)),
    ]
    if state is not None:
        for m in state.measured:
            if m.where == pool.id:
                label = "Gauge B" if m.redundant else "Gauge"
                rows.append((f"{label} ({m.tag})",
                             f"{_opt(m.value_m, 'length', units)}, differs from computed by "
                             f"{_opt(m.value_m - pool.water_level_m, 'length', units)}"))
    rows += [
        ("Floor", _opt(pool.floor_m, "length", units)),
        ("Depth", _opt(pool.depth_m, "length", units)),
        ("Flow into the pool", _opt(pool.inflow_m3s, "flow", units)),
    ]
    if pool.aux_inflow_m3s > 0:
        rows.append(("Auxiliary water in", _opt(pool.aux_inflow_m3s, "flow", units)))
    if index > 0:
        band = t.pool_head_drop
        rows.append(("Head drop from the pool above", f"{_opt(pool.head_drop_m, 'length', units)}"
                     f" (band {_opt(band.min, 'length', units) if band.min is not None else '0'}"
                     f" – {_opt(band.max, 'length', units)})"))
    rows += [
        ("Power density", f"{_opt(pool.power_density_w_m3, 'power_density', units)} "
         f"(limit {_opt(t.max_power_density, 'power_density', units)})"
         + ("" if pd_ok else " — over the limit")),
        ("Control above", f"{ctrl.id} ({kind})"),
        ("Regime", ctrl.regime),
        ("Flow through the control", _opt(ctrl.flow_m3s, "flow", units)),
    ]
    if ctrl.weir_head_m is not None:
        rows.append(("Head on the weir", _opt(ctrl.weir_head_m, "length", units)))
    if ctrl.submergence is not None:
        rows.append(("Submergence H₂/H₁", f"{ctrl.submergence:.2f}"))
    if ctrl.orifice_velocity_m_s is not None:
        rows.append(("Orifice velocity", _opt(ctrl.orifice_velocity_m_s, "velocity", units)))
    if ctrl.slot_velocity_m_s is not None:
        rows.append(("Slot velocity", _opt(ctrl.slot_velocity_m_s, "velocity", units)))
    for note in ctrl.notes:
        rows.append(("Note", note))
    return rows


def now_utc() -> datetime:
    """The current time (tz-aware UTC); the one place the page services read the clock."""
    return datetime.now(UTC)
