"""Human-readable reports in the site's display units, shared by the ``fishway`` commands.

Every function here takes SI results (a :class:`~ops_logic.profile.Profile`, a
:class:`~ops_logic.recommend.Recommendation`, a loaded :class:`~ops_logic.site.Site`...) and
returns plain text; nothing is printed. Headline values show the display unit and SI side by
side when the site works in US customary units (``"254.00 ft (77.419 m)"``); tables show the
display unit in their header. :func:`json_text` writes JSON with non-finite floats as ``null``.

>>> format_value(77.4192, "length", "us")
'254.00 ft (77.419 m)'
>>> format_value(1.5, "flow", "si")
'1.500 m³/s'
>>> json_text({"a": float("nan"), "b": [1.0, float("inf")]})
'{"a": null, "b": [1.0, null]}'
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable, Mapping, Sequence
from typing import TYPE_CHECKING, Any

from ops_logic.advisory import ADVISORY_CAUTION
from ops_logic.ladder import Ladder
from ops_logic.units import UnitSystem, display_unit, from_si

if TYPE_CHECKING:
    from ops_logic.calibrate import CalibrationResult
    from ops_logic.ladder import SettingSpec
    from ops_logic.profile import Criterion, Profile
    from ops_logic.recommend import Recommendation
    from ops_logic.site import Site

__all__ = [
    "finite_or_none",
    "format_calibration",
    "format_profile",
    "format_recommendation",
    "format_setting",
    "format_site",
    "format_value",
    "json_text",
    "setting_range_text",
    "text_table",
]

# decimals per quantity kind: (display unit of a US site, SI)
_DIGITS = {"length": (2, 3), "flow": (1, 3), "velocity": (2, 3), "power_density": (2, 1),
           "area": (1, 2)}


def _num(value_si: float, kind: str, system: UnitSystem) -> str:
    if value_si is None or not math.isfinite(value_si):
        return "—"
    digits = _DIGITS.get(kind, (3, 3))[0 if system == "us" else 1]
    return f"{from_si(value_si, kind, system):.{digits}f}"


def format_value(value_si: float, kind: str, system: UnitSystem, *, with_si: bool = True) -> str:
    """An SI value in the display unit, with the SI value beside it for a US site."""
    text = f"{_num(value_si, kind, system)} {display_unit(kind, system)}"
    if system == "us" and with_si:
        text += f" ({_num(value_si, kind, 'si')} {display_unit(kind, 'si')})"
    return text


def format_setting(spec: SettingSpec, value: float, system: UnitSystem, *,
                   with_si: bool = True) -> str:
    """A setting value in its display unit: a level in ft or m, an opening in %, a pump count."""
    if spec.kind == "level":
        return format_value(value, "length", system, with_si=with_si)
    if spec.kind == "opening":
        return f"{value:.1f} %"
    n = round(value)
    return f"{n:d} pump" + ("" if n == 1 else "s")


def setting_range_text(spec: SettingSpec, system: UnitSystem) -> str:
    """``'250.00–255.00 ft, at most 0.50 ft per adjustment'`` style summary of a setting."""
    if spec.kind == "level":
        unit = display_unit("length", system)
        text = f"{_num(spec.low, 'length', system)}–{_num(spec.high, 'length', system)} {unit}"
        step = (f"{_num(spec.rate_limit, 'length', system)} {unit}"
                if spec.rate_limit is not None else None)
    elif spec.kind == "opening":
        text, step = f"{spec.low:g}–{spec.high:g} %", (
            f"{spec.rate_limit:g} %" if spec.rate_limit is not None else None)
    else:
        text, step = f"{spec.low:g}–{spec.high:g} pumps", (
            f"{spec.rate_limit:g}" if spec.rate_limit is not None else None)
    return text + (f", at most {step} per adjustment" if step else ", no rate limit")


def text_table(headers: Sequence[str], rows: Iterable[Sequence[Any]],
               right: Sequence[bool] | None = None, indent: str = "  ") -> str:
    """A plain monospace table; ``right[i]`` right-aligns column i (numbers)."""
    body = [[str(c) for c in r] for r in rows]
    cols = len(headers)
    width = [max(len(headers[i]), *(len(r[i]) for r in body)) if body else len(headers[i])
             for i in range(cols)]
    right = right or [False] * cols

    def line(cells: Sequence[str]) -> str:
        return indent + "  ".join(c.rjust(w) if r else c.ljust(w)
                                  for c, w, r in zip(cells, width, right, strict=True)).rstrip()

    return "\n".join([line(headers), line(["-" * w for w in width]), *map(line, body)])


def finite_or_none(obj: Any) -> Any:
    """``obj`` with every NaN or infinite float replaced by ``None`` (for JSON)."""
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, Mapping):
        return {str(k): finite_or_none(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [finite_or_none(v) for v in obj]
    return obj


def json_text(obj: Any, indent: int | None = None) -> str:
    """Strict JSON (no NaN/Infinity: they become ``null``)."""
    return json.dumps(finite_or_none(obj), indent=indent, allow_nan=False, ensure_ascii=False)


# -- site ------------------------------------------------------------------------------------
def format_site(site: Site, source: str) -> str:
    """Summary of a valid site file: the site, then each fishway's pools, baffles, settings."""
    system = site.site.units
    out = [f"{source}: valid",
           f"Site: {site.site.name} (units {system}, time zone {site.site.time_zone}, "
           f"elevation {format_value(site.site.elevation, 'length', system)})"]
    for f in site.fishways:
        ladder = Ladder(f)
        types: dict[str, int] = {}
        for b in f.baffles:
            types[b.type] = types.get(b.type, 0) + 1
        out += ["", f"Fishway {f.id}: {f.name}",
                f"  forebay range    {_range(f.forebay_range, system)}",
                f"  tailwater range  {_range(f.tailwater_range, system)}",
                f"  pools            {ladder.n_pools} ({ladder.pool_ids[0]} … "
                f"{ladder.pool_ids[-1]}, upstream to downstream)",
                f"  exit             {f.exit.type}",
                "  baffles          " + ", ".join(f"{n} × {t}" for t, n in types.items()),
                f"  entrance gates   {', '.join(g.id for g in f.entrance.gates)}",
                "  auxiliary water  " + (", ".join(f"{a.id} ({a.type} into {a.into_pool})"
                                                   for a in f.aux) or "none"),
                "  settings:"]
        out.append(text_table(["name", "label", "range"],
                              [(s.name, s.label, setting_range_text(s, system))
                               for s in ladder.settings.values()], indent="    "))
    return "\n".join(out)


def _range(pair: tuple[float, float], system: UnitSystem) -> str:
    unit = display_unit("length", system)
    text = f"{_num(pair[0], 'length', system)}–{_num(pair[1], 'length', system)} {unit}"
    if system == "us":
        text += f" ({_num(pair[0], 'length', 'si')}–{_num(pair[1], 'length', 'si')} m)"
    return text


# -- profile ---------------------------------------------------------------------------------
def _band(c: Criterion, system: UnitSystem) -> str:
    lo = _num(c.min, c.kind, system) if c.min is not None else None
    hi = _num(c.max, c.kind, system) if c.max is not None else None
    unit = display_unit(c.kind, system)
    if lo is not None and hi is not None:
        return f"{lo}–{hi} {unit}"
    return f"≥ {lo} {unit}" if lo is not None else f"≤ {hi} {unit}"


def _criteria_rows(p: Profile, system: UnitSystem) -> list[tuple[str, str, str, str]]:
    """Single criteria in full; the per-pool families (head_drop:*, power_density:*) as one
    summary row each (worst value) plus every member that is out."""
    rows: list[tuple[str, str, str, str]] = []
    families: dict[str, list[Criterion]] = {}
    for c in p.criteria:
        if ":" in c.name and c.name.split(":", 1)[0] in ("head_drop", "power_density"):
            families.setdefault(c.name.split(":", 1)[0], []).append(c)
            continue
        rows.append((c.name, f"{_num(c.value, c.kind, system)} {display_unit(c.kind, system)}",
                     _band(c, system), "OK" if c.ok else "OUT"))
    for fam, items in families.items():
        worst = max(items, key=lambda c: c.value)
        bad = [c for c in items if not c.ok]
        rows.append((f"{fam} (max of {len(items)}, at {worst.name.split(':', 1)[1]})",
                     f"{_num(worst.value, worst.kind, system)} "
                     f"{display_unit(worst.kind, system)}", _band(worst, system),
                     "OK" if not bad else f"OUT ({len(bad)} of {len(items)})"))
        rows.extend((f"  {c.name}", f"{_num(c.value, c.kind, system)} "
                     f"{display_unit(c.kind, system)}", _band(c, system), "OUT") for c in bad)
    return rows


def format_profile(p: Profile, ladder: Ladder, system: UnitSystem) -> str:
    """The profile as text: headline levels and flows, settings, pools, gates, auxiliary
    water, criteria and warnings, in display units."""
    L, Q = display_unit("length", system), display_unit("flow", system)
    PD, V = display_unit("power_density", system), display_unit("velocity", system)
    ok = {c.name: c.ok for c in p.criteria}
    out = [f"{ladder.fishway.name} ({p.fishway_id}): {p.state}; {p.reason}",
           f"  forebay          {format_value(p.forebay_m, 'length', system)}",
           f"  tailwater        {format_value(p.tailwater_m, 'length', system)}",
           f"  ladder flow      {format_value(p.ladder_flow_m3s, 'flow', system)}",
           f"  entrance flow    {format_value(p.entrance_flow_m3s, 'flow', system)}",
           f"  entrance head    {format_value(p.entrance_head_m, 'length', system)}",
           f"  water temperature {p.temperature_c:.1f} °C", "", "Settings"]
    out.append(text_table(["name", "label", "value"],
                          [(n, ladder.settings[n].label,
                            format_setting(ladder.settings[n], v, system))
                           for n, v in p.settings.items()]))
    rows = []
    for pool, ctrl in zip(p.pools, p.controls, strict=True):
        drop_ok = ok.get(f"head_drop:{ctrl.id}", True)
        pd_ok = ok.get(f"power_density:{pool.id}", True)
        rows.append((pool.id, _num(pool.water_level_m, "length", system),
                     _num(pool.depth_m, "length", system),
                     _num(pool.head_drop_m, "length", system) + ("" if drop_ok else " OUT"),
                     _num(pool.power_density_w_m3, "power_density", system)
                     + ("" if pd_ok else " OUT"),
                     _num(pool.inflow_m3s, "flow", system), f"{ctrl.id}: {ctrl.regime}"))
    out += ["", "Pools (upstream to downstream; drop over the control above each pool)",
            text_table(["pool", f"level {L}", f"depth {L}", f"drop {L}", f"power {PD}",
                        f"inflow {Q}", "control above"], rows,
                       [False, True, True, True, True, True, False])]
    out += ["", "Entrance gates", text_table(
        ["gate", f"crest {L}", f"head {L}", f"flow {Q}", "regime"],
        [(g.id, _num(p.settings.get(f"entrance_{g.id}_crest_m", math.nan), "length", system),
          _num(g.weir_head_m if g.weir_head_m is not None else math.nan, "length", system),
          _num(g.flow_m3s, "flow", system), g.regime) for g in p.gates],
        [False, True, True, True, False])]
    if p.aux:
        out += ["", "Auxiliary water", text_table(
            ["source", "type", "pool", "setting", f"flow {Q}", f"diffuser velocity {V}",
             "OK/OUT"],
            [(a.id, a.type, a.pool_id,
              format_setting(ladder.settings[a.setting_name], a.setting_value, system,
                             with_si=False),
              _num(a.flow_m3s, "flow", system), _num(a.diffuser_velocity_m_s, "velocity", system),
              "OK" if ok.get(f"diffuser_velocity:{a.id}", True) else "OUT") for a in p.aux],
            [False, False, False, True, True, True, False])]
    out += ["", "Criteria", text_table(["criterion", "value", "band", "OK/OUT"],
                                       _criteria_rows(p, system))]
    if p.warnings:
        out += ["", "Warnings", *(f"  - {w}" for w in p.warnings)]
    return "\n".join(out)


def format_recommendation(rec: Recommendation, ladder: Ladder, system: UnitSystem) -> str:
    """A recommendation as text: the settings (current → recommended, what limited each), the
    verdict and the predicted profile, closed by the advisory caution."""
    out = [f"Recommendation for {ladder.fishway.name} ({rec.fishway_id}) at forebay "
           f"{format_value(rec.forebay_m, 'length', system)}, tailwater "
           f"{format_value(rec.tailwater_m, 'length', system)}",
           f"  feasible: {'yes' if rec.feasible else 'NO'}; binding: {rec.binding}",
           f"  {rec.reason}", ""]
    rows = []
    for c in rec.changes:
        spec = ladder.settings[c.name]
        rows.append((c.name, c.label, format_setting(spec, c.current, system, with_si=False),
                     format_setting(spec, c.recommended, system), c.limited_by or ""))
    out += ["Settings", text_table(["name", "label", "current", "recommended", "limited by"],
                                   rows), "", "Predicted profile under the recommended settings",
            format_profile(rec.profile, ladder, system), "",
            f"CAUTION: {rec.caution or ADVISORY_CAUTION}"]
    return "\n".join(out)


# -- calibration -----------------------------------------------------------------------------
def _small_length(value_m: float, system: UnitSystem) -> str:
    """A small length (an error): ft with 3 decimals and mm for a US site, mm otherwise."""
    if value_m is None or not math.isfinite(value_m):
        return "—"
    mm = f"{value_m * 1000.0:.1f} mm"
    return f"{from_si(value_m, 'length', 'us'):.3f} ft ({mm})" if system == "us" else mm


def format_calibration(result: CalibrationResult, ladder: Ladder, system: UnitSystem) -> str:
    """A calibration fit as text: errors before and after, multipliers, the coefficients to
    write into the site file, residuals per pool and the warnings."""
    r = result
    out = [f"Calibration of {ladder.fishway.name} ({r.fishway_id}): {r.n_observations} "
           f"observations, {r.n_levels} measured pool levels",
           f"  RMS level error before  {_small_length(r.rms_before_m, system)}",
           f"  RMS level error after   {_small_length(r.rms_after_m, system)}",
           f"  solver: {'converged' if r.success else 'NOT converged'} ({r.message})", "",
           "Multipliers (× the discharge coefficients of each kind of opening)",
           text_table(["kind", "openings", "multiplier", "± std. error", "note"],
                      [(k.kind, k.openings, f"{k.multiplier:.4f}" if k.fitted else "1 (kept)",
                        f"{k.std_error:.4f}" if k.std_error is not None else "—", k.note)
                       for k in r.kinds], [False, True, True, True, False])]
    rows = [(c.assignment, k.kind, f"{c.before:.4f}", f"{k.multiplier:.4f}")
            for k in r.kinds for c in k.coefficients]
    if rows:
        out += ["", f"Write into the site file, in the entry of fishway {r.fishway_id!r} "
                "(fitted = multiplier × now; [*] = every element of the list)",
                text_table(["field = fitted value", "kind", "now", "multiplier"], rows,
                           [False, False, True, True])]
        if any("[*]" not in c.path and not c.path.startswith("exit.")
               for k in r.kinds for c in k.coefficients):
            out.append("  (elements named by id as loaded: unnamed baffles are B01, B02, … "
                       "in order, those of a `repeat` entry included)")
    out += ["", "Residuals per measured pool (model − measured)",
            text_table(["pool", "n", "RMS before", "RMS after", "mean after"],
                       [(p.pool_id, p.n, _small_length(p.rms_before_m, system),
                         _small_length(p.rms_after_m, system),
                         _small_length(p.mean_after_m, system)) for p in r.pools],
                       [False, True, True, True, True])]
    if r.warnings:
        out += ["", "Warnings", *(f"  - {w}" for w in r.warnings)]
    return "\n".join(out)
