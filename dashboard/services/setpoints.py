"""Service of the setpoints page: current against recommended settings, their predicted
effect on every criterion, the what-if solve, and the printable setpoint table.

Which recommendation: the newest one stored for the fishway (``recommendations`` table,
written by the ingest service; its ``settings`` payload maps setting names, as in
:class:`~ops_logic.ladder.Ladder`, to SI values); when none is stored the dashboard computes one
now with :meth:`~ops_logic.ladder.Ladder.recommend` from the live state, and says so. A fishway
whose mode in force is ``maintenance`` or ``out_of_service`` gets no recommendation (as in the
ingest): none is shown or computed, and a note says why.
The predicted effect is always solved here, at the newest usable levels: *before* under the
current settings, *after* under the recommended ones. Recommendations are advisory
(:data:`~ops_logic.advisory.ADVISORY_CAUTION`).

The ladder is the fishway *in force* (site file plus supervisors' overrides,
:func:`dashboard.services.profile.ladder_in_force`), so the criteria carry the bands in force;
the printable table too. The forebay the ladder sees is the one of the live state
(:func:`dashboard.services.profile.live_state`: the forebay gauge less the trash-rack head
loss when that reading is usable, by :func:`ops_logic.ladder.ladder_forebay`, its note saying
which). The what-if form takes a forebay *gauge* level; given the live loss
(``trash_rack_loss_m``, as the live state holds it) the ladder sees that level less it.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from datetime import datetime
from urllib.parse import urlencode

from dashboard.context import AppContext
from dashboard.services.profile import (
    LiveState,
    fishway_db_id,
    ladder_in_force,
    live_state,
    local_time_text,
)
from db.dashboard_queries import latest_recommendation
from db.in_force import effective_site
from ops_logic.ladder import Ladder, SettingError, SettingSpec, exit_forebay_m
from ops_logic.profile import Criterion, Profile
from ops_logic.report_format import format_setting, setting_range_text
from ops_logic.setpoint_table import level_grid, render_html, setpoint_table
from ops_logic.units import UnitSystem, display_unit, from_si, to_si

__all__ = [
    "CriterionRow",
    "SetpointView",
    "SettingRow",
    "criteria_rows",
    "criterion_label",
    "log_link",
    "parse_what_if",
    "setpoint_table_html",
    "setpoint_view",
    "setting_input_value",
    "what_if",
]

CHANGE_EPS = {"level": 1e-4, "opening": 0.05, "count": 0.5}
"""A recommended setting differs from the current one when the difference exceeds this
(m, %, pumps): below it the change is not worth making or logging."""

TABLE_STEPS_M = {"us": (0.5 * 0.3048, 1.0 * 0.3048), "si": (0.15, 0.30)}
"""Forebay and tailwater steps of the printable setpoint table [m] by unit system."""

_FAMILIES = ("head_drop", "power_density", "diffuser_velocity")
_FAMILY_WORDS = {"head_drop": "pool head drop", "power_density": "power density",
                 "diffuser_velocity": "diffuser velocity"}


@dataclass(frozen=True)
class SettingRow:
    name: str
    label: str
    spec: SettingSpec
    current: float
    current_source: str
    recommended: float
    changed: bool
    limited_by: str | None


@dataclass(frozen=True)
class CriterionRow:
    name: str
    label: str
    kind: str
    min: float | None
    max: float | None
    before: float | None
    after: float | None
    ok_before: bool | None
    ok_after: bool | None


@dataclass(frozen=True)
class SetpointView:
    fishway_id: str
    state: LiveState
    source: str  # "stored", "computed" or "none"
    recommendation_id: int | None
    made_at: datetime | None
    settings: tuple[SettingRow, ...]
    criteria: tuple[CriterionRow, ...]
    feasible: bool | None
    binding: str | None
    reason: str
    before: Profile | None
    after: Profile | None
    notes: tuple[str, ...]

    @property
    def changes(self) -> tuple[SettingRow, ...]:
        return tuple(r for r in self.settings if r.changed)


def criterion_label(name: str) -> str:
    """A reader's label for a criterion name of :class:`~ops_logic.profile.Profile`.

    >>> criterion_label("head_drop:B05"), criterion_label("entrance_head")
    ('Head drop at B05', 'Entrance head')
    """
    base, _, where = name.partition(":")
    words = {"head_drop": "Head drop at", "power_density": "Power density in",
             "diffuser_velocity": "Diffuser velocity of"}
    if where:
        return f"{words.get(base, base.replace('_', ' ').capitalize())} {where}"
    return base.replace("_", " ").capitalize()


def _changed(spec: SettingSpec, a: float, b: float) -> bool:
    return abs(a - b) > CHANGE_EPS[spec.kind]


def criteria_rows(before: Profile | None, after: Profile | None) -> list[CriterionRow]:
    """One row per single criterion; for each per-pool family (head drop, power density,
    diffuser velocity) a row with the worst member before and after, then every member that
    is out of its band before or after.

    >>> from ops_logic.site import load_site
    >>> lad = Ladder.from_site(load_site(), "west")
    >>> p = lad.solve(77.3, 65.7, lad.default_settings())
    >>> [r.label for r in criteria_rows(p, p)][:3]
    ['Forebay level', 'Tailwater level', 'Entrance head']
    """
    ref = after or before
    if ref is None:
        return []
    look_b = {c.name: c for c in before.criteria} if before is not None else {}
    look_a = {c.name: c for c in after.criteria} if after is not None else {}
    rows: list[CriterionRow] = []
    families: dict[str, list[str]] = {}

    def row(name: str, label: str, cb: Criterion | None, ca: Criterion | None) -> CriterionRow:
        c = ca or cb
        assert c is not None
        return CriterionRow(name, label, c.kind, c.min, c.max, cb.value if cb else None,
                            ca.value if ca else None, cb.ok if cb else None,
                            ca.ok if ca else None)

    for c in ref.criteria:
        fam = c.name.split(":", 1)[0]
        if fam in _FAMILIES and ":" in c.name:
            families.setdefault(fam, []).append(c.name)
            continue
        rows.append(row(c.name, criterion_label(c.name), look_b.get(c.name), look_a.get(c.name)))
    for fam, names in families.items():
        def worst(look: Mapping[str, Criterion], names: list[str] = names) -> Criterion | None:
            members = [look[n] for n in names if n in look]
            return max(members, key=lambda m: m.value) if members else None

        wb, wa = worst(look_b), worst(look_a)
        at = [f"{when} {c.name.split(':', 1)[1]}" for when, c in (("now", wb), ("after", wa))
              if c is not None]
        if wb is None or wa is None:
            at = [a.split(" ", 1)[1] for a in at]
        label = f"Largest {_FAMILY_WORDS[fam]} (of {len(names)}; at {', '.join(at)})"
        rows.append(row(f"{fam}:max", label, wb, wa))
        for n in names:
            cb, ca = look_b.get(n), look_a.get(n)
            if (cb is not None and not cb.ok) or (ca is not None and not ca.ok):
                rows.append(row(n, "  " + criterion_label(n), cb, ca))
    return rows


def _recommended_settings(ladder: Ladder, stored: Mapping[str, object],
                          current: Mapping[str, float], notes: list[str]) -> dict[str, float]:
    out = dict(current)
    for name, value in stored.items():
        if name not in ladder.settings:
            notes.append(f"the stored recommendation names an unknown setting {name!r}: "
                         "ignored")
            continue
        try:
            v = float(value)  # type: ignore[arg-type]
            ladder.check_settings({name: v})
            out[name] = v
        except (SettingError, TypeError, ValueError) as exc:
            notes.append(f"the stored recommendation's {name} is unusable ({exc}): the "
                         "current value is shown instead")
    missing = [n for n in ladder.settings if n not in stored]
    if missing:
        notes.append("the stored recommendation leaves " + ", ".join(missing) + " as they are")
    return out


def setpoint_view(ctx: AppContext, fishway_id: str, now: datetime) -> SetpointView:
    """Current against recommended settings and their predicted effect; see the module."""
    ladder = ladder_in_force(ctx, fishway_id)
    state = live_state(ctx, fishway_id, now)
    notes: list[str] = []
    current = ladder.check_settings(state.settings)
    operating = state.mode == "operating"
    stored = latest_recommendation(ctx.engine, fishway_db_id(ctx, fishway_id)) if operating \
        else None
    forebay, tailwater = state.ladder_forebay_m, state.tailwater_m
    levels = forebay is not None and tailwater is not None
    source, rec_id, made_at = "none", None, None
    feasible, binding, reason = None, None, ""
    recommended = dict(current)
    if stored is not None:
        source, rec_id, made_at = "stored", int(stored["id"]), stored["ts"]
        recommended = _recommended_settings(ladder, stored.get("settings") or {}, current, notes)
        feasible, binding = bool(stored["feasible"]), stored.get("binding_constraint")
        reason = stored.get("reason") or ""
        if state.as_of is not None and made_at is not None:
            lag = (state.as_of - made_at).total_seconds()
            if lag > max(10 * ctx.site.ingest.recommend_seconds, 600.0):
                notes.append(f"the stored recommendation ({local_time_text(made_at, ctx)}) is "
                             "older than the newest levels: it may no longer fit them")
    elif levels and operating:  # not operating: none (the live state's note says why)
        try:
            rec = ladder.recommend(forebay, tailwater, current,  # type: ignore[arg-type]
                                   temperature_c=state.temperature_c)
        except ValueError as exc:
            notes.append(f"no recommendation: {exc}")
        else:
            source, made_at = "computed", now
            recommended = dict(rec.settings)
            feasible, binding, reason = rec.feasible, rec.binding, rec.reason
    before = after = None
    if levels:
        try:
            before = ladder.solve(forebay, tailwater, current,  # type: ignore[arg-type]
                                  temperature_c=state.temperature_c)
            after = ladder.solve(forebay, tailwater, recommended,  # type: ignore[arg-type]
                                 temperature_c=state.temperature_c)
        except ValueError as exc:
            notes.append(f"no prediction: {exc}")
            before = after = None
    rows = tuple(SettingRow(n, spec.label, spec, current[n], state.setting_sources.get(n, ""),
                            recommended[n], _changed(spec, current[n], recommended[n]),
                            _limited(ladder, spec, current[n], recommended[n]))
                 for n, spec in ladder.settings.items())
    return SetpointView(fishway_id, state, source, rec_id, made_at, rows,
                        tuple(criteria_rows(before, after)), feasible, binding, reason, before,
                        after, tuple(notes))


def _limited(ladder: Ladder, spec: SettingSpec, current: float, new: float) -> str | None:
    if abs(new - spec.low) < 1e-9 or abs(new - spec.high) < 1e-9:
        return "range"
    if spec.rate_limit is not None and abs(abs(new - current) - spec.rate_limit) < 1e-6:
        return "rate limit"
    return None


def log_link(view: SetpointView) -> str:
    """The operator-log URL with the recommended changes filled in (SI values in the query:
    ``set=<setting>:<from>:<to>``, repeated; ``rec`` the stored recommendation's id).

    >>> from types import SimpleNamespace
    >>> row = SimpleNamespace(name="aux_G1_opening_pct", current=40.0, recommended=55.0,
    ...                       changed=True)
    >>> v = SimpleNamespace(fishway_id="east", recommendation_id=7, settings=(row,),
    ...                     changes=(row,))
    >>> log_link(v)
    '/log?kind=adjustment&fishway=east&rec=7&set=aux_G1_opening_pct%3A40%3A55'
    """
    params: list[tuple[str, str]] = [("kind", "adjustment"), ("fishway", view.fishway_id)]
    if view.recommendation_id is not None:
        params.append(("rec", str(view.recommendation_id)))
    params += [("set", f"{r.name}:{r.current:.6g}:{r.recommended:.6g}") for r in view.changes]
    return "/log?" + urlencode(params)


def setting_input_value(spec: SettingSpec, value: float, units: UnitSystem) -> str:
    """A setting as the what-if form shows it (display units, no unit text)."""
    if spec.kind == "level":
        return f"{from_si(value, 'length', units):.2f}"
    return f"{value:.0f}" if spec.kind == "count" else f"{value:.1f}"


def parse_what_if(ladder: Ladder, units: UnitSystem, forebay: str | None,
                  tailwater: str | None, settings: Mapping[str, str | None]
                  ) -> tuple[float | None, float | None, dict[str, float], list[str]]:
    """Read the what-if form (display units, or a value with its unit such as ``"77.3 m"``);
    return SI levels, settings and one problem line per bad field."""
    problems: list[str] = []
    levels: list[float | None] = []
    for label, text in (("Forebay", forebay), ("Tailwater", tailwater)):
        if text is None or not str(text).strip():
            problems.append(f"{label}: give a level in {display_unit('length', units)}")
            levels.append(None)
            continue
        try:
            levels.append(to_si(str(text), "length", units))
        except ValueError as exc:
            problems.append(f"{label}: {exc}")
            levels.append(None)
    out: dict[str, float] = {}
    for name, text in settings.items():
        spec = ladder.settings.get(name)
        if spec is None:
            problems.append(f"{name}: unknown setting")
            continue
        if text is None or not str(text).strip():
            problems.append(f"{spec.label}: give a value ({setting_range_text(spec, units)})")
            continue
        try:
            value = (to_si(str(text), "length", units) if spec.kind == "level"
                     else float(str(text).strip().rstrip("%").strip()))
            if not math.isfinite(value):
                raise ValueError("not a finite number")
            ladder.check_settings({name: value})
        except (SettingError, ValueError) as exc:
            reason = (f"{format_setting(spec, value, units)} is outside "
                      f"{setting_range_text(spec, units)}" if isinstance(exc, SettingError)
                      and "outside" in str(exc) else str(exc))
            problems.append(f"{spec.label}: {reason}")
            continue
        out[name] = value
    return levels[0], levels[1], out, problems


def what_if(ladder: Ladder, units: UnitSystem, forebay: str | None, tailwater: str | None,
            settings: Mapping[str, str | None], *, temperature_c: float = 10.0,
            trash_rack_loss_m: float | None = None) -> tuple[Profile | None, list[str]]:
    """The predicted profile for the what-if form, or ``(None, problems)``. ``forebay`` is a
    forebay gauge level; with ``trash_rack_loss_m`` [m] (the live state's loss, forebay to
    exit) the ladder sees it less that loss (:func:`ops_logic.ladder.exit_forebay_m`; a loss
    that rule refuses is a problem line), else the level itself.

    >>> from ops_logic.site import load_site
    >>> lad = Ladder.from_site(load_site(), "west")
    >>> p, problems = what_if(lad, "us", "253.5", "215", {"aux_G2_opening_pct": "60"})
    >>> p.state, problems
    ('flowing', [])
    >>> for line in what_if(lad, "us", "253.5", "3 cfs", {"aux_G2_opening_pct": "160"})[1]:
    ...     print(line)
    Tailwater: '3 cfs' is not a length (expected e.g. ft)
    Auxiliary valve G2 opening: 160.0 % is outside 0–100 %, at most 25 % per adjustment
    """
    fb, tw, s, problems = parse_what_if(ladder, units, forebay, tailwater, settings)
    if problems or fb is None or tw is None:
        return None, problems
    try:
        fb = exit_forebay_m(fb, trash_rack_loss_m)
    except ValueError as exc:
        why = str(exc)
        return None, [why[:1].upper() + why[1:]]
    try:
        return ladder.solve(fb, tw, s, temperature_c=temperature_c), []
    except ValueError as exc:
        return None, [str(exc)]


_TABLE_CACHE: dict[tuple[int, str, int], str] = {}


def setpoint_table_html(ctx: AppContext, fishway_id: str, generated: datetime) -> str:
    """The printable setpoint table of a fishway in force over its forebay and tailwater
    ranges (:func:`ops_logic.setpoint_table.render_html`), computed once per dashboard process
    and setting change."""
    eff = effective_site(ctx.site, ctx.engine)
    key = (id(ctx.site), fishway_id, eff.version)
    if key not in _TABLE_CACHE:
        for old in [k for k in _TABLE_CACHE if k[:2] == key[:2]]:
            del _TABLE_CACHE[old]  # made for an earlier setting change
        ladder = eff.ladders[fishway_id]
        f = ladder.fishway
        step_fb, step_tw = TABLE_STEPS_M[ctx.units]
        table = setpoint_table(ladder, level_grid(*f.forebay_range, step_fb),
                               level_grid(*f.tailwater_range, step_tw))
        _TABLE_CACHE[key] = render_html(
            table, ladder, site_name=ctx.site.site.name,
            site_file_date="as loaded by this dashboard",
            generated=local_time_text(generated, ctx) + f" ({ctx.site.site.time_zone})",
            units=ctx.units)
    return _TABLE_CACHE[key]
