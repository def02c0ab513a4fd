"""The status of each fishway, judged from the database: readings, positions, solver, advice.

What the status rests on (the hydraulic state is *solved*, not read from a stored prediction):
the latest usable forebay and tailwater readings (QARTOD flag 1 or 2, no older than
:data:`~db.status.model.STALE_POLLS` poll periods) and the latest actuator positions (the
position tags, or the settings last logged in ``actuator_settings`` when a position tag has no
usable reading) go to ``Ladder.solve`` of the fishway *in force* (site file plus supervisors'
overrides, :func:`db.in_force.effective_site`). A solve takes about a millisecond on the demo's
40-pool ladder (less warm-started from the ladder's previous profile), and results are cached
by their rounded inputs (:mod:`db.status.cache`).

The forebay the ladder sees is the water level upstream of its exit control: the forebay
gauge less the trash-rack head loss (the ``trash_rack_dp`` tag measures forebay to exit),
``forebay − max(loss, 0)``, when that reading is usable, else the forebay gauge itself; a loss
above :data:`~ops_logic.ladder.MAX_TRASH_RACK_LOSS_M` is refused and the forebay gauge used
(:func:`ops_logic.ladder.ladder_forebay`). The solve takes that level, and the forebay
metric's note says which it was (the metric itself is the forebay gauge).

The entrance head and the exit weir head are taken from the gauges where they exist
(entrance-pool gauge − tailwater; the forebay the ladder sees − exit crest position, the
metric's source saying which forebay), as the alarm rules take them; flows, the worst pool
head drop and the power densities come from the solved profile. The gauged pool levels are
compared with the profile as a check of the model and the gauges. Water quality
(temperature, its 7DADM, dissolved oxygen) is shown beside its limits but does not set the
hydraulic state: alarms carry it.

An adjustment is due when the latest stored recommendation differs from the current positions
by more than the ``adjustment_due`` thresholds of the fishway's alarm settings.

The ingest computes the status once per cycle (:func:`db.status.store.status_evaluator`) and
the dashboard reads the stored result: the solves run once per cycle, not once per viewer.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from datetime import datetime
from typing import Any

import pandas as pd

from db.dashboard_queries import latest_good_values, latest_recommendation
from db.history import latest_actuator_settings
from db.in_force import EffectiveSite, effective_site
from db.readings import latest_values
from db.status.cache import cached_solve, find_tag, tag_catalogue, temp_7dadm
from db.status.model import (
    DEFAULT_TEMP_C,
    MODEL_GAUGE_TOLERANCE_M,
    POSITION_SLACK,
    STALE_POLLS,
    USABLE_FLAGS,
    Adjustment,
    FishwayStatus,
    Metric,
    Reading,
    age_text,
    metric_band_text,
)
from ops_logic.display import bullet_geometry, format_value
from ops_logic.ladder import Ladder, SettingSpec, ladder_forebay
from ops_logic.overrides import MODE_LABELS
from ops_logic.profile import Criterion
from ops_logic.site import AdjustableWeirExit, Fishway, Site
from ops_logic.tags import TagDef

__all__ = ["compute_status", "worst_criterion"]

# -- judging readings --------------------------------------------------------------------------
_Row = tuple[int, float, int]  # (epoch ms, value, flag)


def _rows(frame: pd.DataFrame) -> dict[int, _Row]:
    """A latest-values frame (index tag_id; ts, value, flag) as plain tuples by tag id."""
    ms = frame["ts"].to_numpy(dtype="datetime64[ms]").astype("int64").tolist()
    return dict(zip(frame.index.tolist(), zip(ms, frame["value"].tolist(),
                                              frame["flag"].tolist(), strict=True),
                    strict=True))


def _reading(latest: Mapping[int, _Row], good: Mapping[int, _Row],
             entry: tuple[TagDef, int, float] | None, now_ms: int) -> Reading:
    if entry is None:
        return Reading(None, None, None, "none")
    _, tag_id, poll_s = entry
    limit_s = STALE_POLLS * poll_s
    row = latest.get(tag_id)
    if row is None:
        return Reading(None, None, None, "none")
    age = (now_ms - row[0]) / 1000.0
    value, flag = float(row[1]), int(row[2])
    if flag in USABLE_FLAGS and math.isfinite(value):
        return Reading(value, flag, age, "ok" if age <= limit_s else "stale", limit_s - age)
    g = good.get(tag_id)
    if g is not None:  # the newest failed QC: a usable one still fresh enough?
        g_age = (now_ms - g[0]) / 1000.0
        if g_age <= limit_s:
            return Reading(float(g[1]), int(g[2]), g_age, "ok", limit_s - g_age)
    status = {3: "suspect", 4: "fail"}.get(flag, "missing")
    return Reading(value if math.isfinite(value) else None, flag, age, status)


_READING_NOTES = {"stale": "stale", "suspect": "suspect (QC)", "fail": "failed QC",
                  "missing": "missing", "none": "no reading"}


def _metric_from(key: str, label: str, kind: str, r: Reading, lo: float | None = None,
                 hi: float | None = None, target: float | None = None, note: str = "",
                 source: str = "gauge") -> Metric:
    if r.status == "ok":
        m = Metric(key, label, kind, r.value, lo, hi, target, "normal", note, source)
        return m if m.in_band else Metric(key, label, kind, r.value, lo, hi, target,
                                          "abnormal", note, source)
    what = _READING_NOTES[r.status]
    extra = f"{what}, {age_text(r.age_s)} old" if r.age_s is not None else what
    status = "stale" if r.status in ("stale", "suspect") else "bad"
    if r.status == "none":
        status = "none"
    return Metric(key, label, kind, r.value if r.status in ("stale", "suspect") else None, lo,
                  hi, target, status, "; ".join(x for x in (extra, note) if x), source)


def _margin(c: Criterion | Metric, value: float) -> float:
    lo, hi = (c.min, c.max) if isinstance(c, Criterion) else (c.lo, c.hi)
    ref = (hi - lo) if lo is not None and hi is not None else abs(hi if hi is not None else lo)
    ref = ref if ref and ref > 0 else 1.0
    m = math.inf
    if lo is not None:
        m = min(m, (value - lo) / ref)
    if hi is not None:
        m = min(m, (hi - value) / ref)
    return m


def worst_criterion(criteria: list[Criterion]) -> Criterion | None:
    """The criterion with the least margin to its band, relative to the band's width (or to
    its one limit): the farthest out when some fail, else the closest to failing.

    >>> a = Criterion("head_drop:B01", 0.30, None, 0.366, True, "m", "length")
    >>> b = Criterion("entrance_head", 0.20, 0.305, 0.457, False, "m", "length")
    >>> worst_criterion([a, b]).name
    'entrance_head'
    """
    worst, least = None, math.inf
    for c in criteria:  # min() over _margin, inlined: some 170 criteria a refresh
        lo, hi = c.min, c.max
        if lo is None and hi is None:
            continue
        ref = (hi - lo) if lo is not None and hi is not None else abs(hi if hi is not None
                                                                       else lo)
        ref = ref if ref and ref > 0 else 1.0
        m = math.inf
        if lo is not None:
            m = min(m, (c.value - lo) / ref)  # min(), as _margin: a NaN value gives inf
        if hi is not None:
            m = min(m, (hi - c.value) / ref)
        if worst is None or m < least:
            worst, least = c, m
    return worst


_CRITERION_LABELS = {"forebay_level": "Forebay level", "tailwater_level": "Tailwater level",
                     "exit_head": "Exit weir head", "ladder_flow": "Ladder flow",
                     "head_drop": "Pool head drop", "entrance_head": "Entrance head",
                     "power_density": "Power density", "diffuser_velocity": "Diffuser velocity",
                     "attraction_flow": "Attraction flow"}


def _criterion_text(c: Criterion, units: str) -> str:
    base, _, where = c.name.partition(":")
    label = _CRITERION_LABELS.get(base, base.replace("_", " ").capitalize())
    kind = c.kind if c.kind != "length" or base not in ("forebay_level", "tailwater_level") \
        else "elevation"
    value = format_value(c.value, kind, units)
    if c.min is not None and c.max is not None:
        band = f"band {format_value(c.min, kind, units, unit=False)}–" \
               f"{format_value(c.max, kind, units)}"
    elif c.max is not None:
        band = f"max {format_value(c.max, kind, units)}"
    else:
        band = f"min {format_value(c.min, kind, units)}"
    return f"{label}{' at ' + where if where else ''} {value} ({band})"


# -- one fishway ------------------------------------------------------------------------------
@dataclass
class _Inputs:
    """What one status computation read from the database (shared by all fishways)."""

    tags: dict[str, tuple[TagDef, int, float]]
    latest: dict[int, _Row]
    good: dict[int, _Row]
    now_ms: int


def _positions(ladder: Ladder, f: Fishway, inp: _Inputs, engine: Any, db_id: int | None,
               units: str) -> tuple[dict[str, float], list[str], list[str]]:
    """Current setting values, the settings without a known position, out-of-range notes."""
    out: dict[str, float] = {}
    missing: list[str] = []
    wrong: list[str] = []
    logged: pd.DataFrame | None = None
    for spec in ladder.settings.values():
        r = _reading(inp.latest, inp.good, find_tag(inp.tags, f.id, "setting", setting=spec.name),
                     inp.now_ms)
        value = r.value if r.status in ("ok", "stale") else None
        if value is None and db_id is not None:
            if logged is None:
                logged = latest_actuator_settings(engine, db_id)
            if spec.actuator in logged.index:
                value = float(logged.loc[spec.actuator, "value"])
        if value is None:
            missing.append(spec.label.lower())
            continue
        slack = POSITION_SLACK[spec.kind]
        if not spec.low - slack - 1e-9 <= value <= spec.high + slack + 1e-9:
            wrong.append(f"{spec.label.lower()} {_setting_text(spec, value, units)} is outside "
                         f"its range")
            continue
        out[spec.name] = min(max(value, spec.low), spec.high)
    return out, missing, wrong


def _setting_text(spec: SettingSpec, value: float, units: str) -> str:
    if spec.kind == "level":
        return format_value(value, "elevation", units)
    if spec.kind == "opening":
        return f"{value:.0f} %"
    return f"{value:.0f} pump{'s' if round(value) != 1 else ''}"


def _adjustment(ladder: Ladder, f: Fishway, rec: dict | None, current: Mapping[str, float],
                missing: list[str], now: datetime, stale_after_s: float,
                units: str) -> Adjustment:
    if rec is None:
        return Adjustment("no_recommendation", "no recommendation stored yet")
    age = (now - pd.Timestamp(rec["ts"]).to_pydatetime()).total_seconds()
    stale = age > stale_after_s
    old = f" (recommendation {age_text(age)} old)" if stale else ""
    if missing:
        return Adjustment("unknown", f"positions unknown: {', '.join(missing)}{old}",
                          stale=stale)
    thr = f.alarms.adjustment_due
    limits = {"level": thr.threshold_m, "opening": thr.threshold_pct,
              "count": thr.threshold_pumps}
    changes = []
    unknown = sorted(set(rec.get("settings") or {}) - set(ladder.settings))
    for name, spec in ladder.settings.items():
        want = (rec.get("settings") or {}).get(name)
        if want is None or name not in current:
            continue
        if abs(float(want) - current[name]) > limits[spec.kind]:
            changes.append(f"{spec.label} {_setting_text(spec, current[name], units)} → "
                           f"{_setting_text(spec, float(want), units)}")
    extra = f"; unknown settings in it: {', '.join(unknown)}" if unknown else ""
    infeasible = "" if rec.get("feasible", True) else " — no setting meets every criterion"
    if changes:
        return Adjustment("due", f"adjustment due{infeasible}{old}{extra}", tuple(changes),
                          stale)
    return Adjustment("none", f"settings match the latest recommendation{old}{extra}",
                      stale=stale)


def _fishway(site: Site, eff: EffectiveSite, fid: str, inp: _Inputs, engine: Any,
             now: datetime) -> FishwayStatus:
    f, ladder = eff.fishways[fid], eff.ladders[fid]
    units, db_id = site.site.units, eff.db_ids.get(fid)
    t, al = f.targets, f.alarms
    read = {role: _reading(inp.latest, inp.good, find_tag(inp.tags, fid, role), inp.now_ms)
            for role in ("forebay", "tailwater", "water_temp", "do", "trash_rack_dp")}
    fb, tw, dp = read["forebay"], read["tailwater"], read["trash_rack_dp"]
    exit_fb = ladder_forebay(fb.value, dp.value if dp.usable else None) if fb.usable else None
    positions, missing, wrong = _positions(ladder, f, inp, engine, db_id, units)
    temp_c = read["water_temp"].value if read["water_temp"].usable else DEFAULT_TEMP_C

    reason, profile, state = "", None, "in_criteria"
    if eff.modes[fid] != "operating":
        state, reason = "out_of_service", MODE_LABELS[eff.modes[fid]]
    problems = [f"{name} gauge {_READING_NOTES[r.status]}" + (
        f" ({age_text(r.age_s)} old)" if r.age_s is not None else "")
        for name, r in (("forebay", fb), ("tailwater", tw)) if not r.usable]
    if missing:
        problems.append("no position for " + ", ".join(missing))
    if problems or wrong:
        if state != "out_of_service":
            state = "no_data" if problems else "model_error"
            reason = "; ".join(problems + wrong)
    else:
        assert exit_fb is not None  # the forebay reading is usable here
        try:
            profile = cached_solve(ladder, eff.version, exit_fb.level_m, tw.value, positions,
                             temp_c)
        except ValueError as exc:
            if state != "out_of_service":
                state, reason = "model_error", str(exc)

    # measured heads where the gauges exist (as the alarm rules take them)
    entrance_pool = f.pool_ids()[-1]
    ep = next((r for r in (_reading(inp.latest, inp.good, find_tag(inp.tags, fid, role,
                                                                pool_id=entrance_pool),
                                    inp.now_ms) for role in ("pool", "pool_b")) if r.usable),
              None)
    checks: list[Criterion] = list(profile.criteria) if profile is not None else []
    measured: dict[str, tuple[float, str]] = {}
    if ep is not None and tw.usable:
        measured["entrance_head"] = (ep.value - tw.value, f"gauge {entrance_pool} − tailwater")
    if isinstance(f.exit, AdjustableWeirExit) and exit_fb is not None and \
            "exit_crest_m" in positions:
        measured["exit_head"] = (exit_fb.level_m - positions["exit_crest_m"],
                                 exit_fb.less("crest"))
    checks = [c._replace(value=measured[c.name][0], ok=(c.min is None or measured[c.name][0]
                                                        >= c.min - 1e-9) and (
        c.max is None or measured[c.name][0] <= c.max + 1e-9)) if c.name in measured else c
        for c in checks]
    worst = worst_criterion(checks)
    if profile is not None and state == "in_criteria":
        bad = [c for c in checks if not c.ok]
        if profile.state == "no_flow":
            state, reason = "out_of_criteria", profile.reason
        elif bad:
            state = "out_of_criteria"
            reason = "out of criteria: " + "; ".join(_criterion_text(c, units) for c in sorted(
                bad, key=lambda c: _margin(c, c.value))[:3]) + (
                f" and {len(bad) - 3} more" if len(bad) > 3 else "")
        else:
            reason = "every criterion in its band"
    worst_text = _criterion_text(worst, units) if worst is not None else reason

    def crit(name: str) -> Criterion | None:
        return next((c for c in checks if c.name == name), None)

    def model_metric(key: str, label: str, kind: str, c: Criterion | None, value: float | None,
                     lo: float | None, hi: float | None, target: float | None, note: str = "",
                     source: str = "model") -> Metric:
        if value is None:
            return Metric(key, label, kind, None, lo, hi, target, "none",
                          reason if state in ("no_data", "model_error") else "", source)
        m = Metric(key, label, kind, value, lo, hi, target, "normal", note, source)
        return m if m.in_band else Metric(key, label, kind, value, lo, hi, target, "abnormal",
                                          note, source)

    drops = [c for c in checks if c.name.startswith("head_drop:")]
    wd = worst_criterion(drops) if drops else None
    eh = crit("entrance_head")
    metrics = [
        _metric_from("forebay", "Forebay", "elevation", fb, *f.forebay_range,
                     note=f"ladder sees {format_value(exit_fb.level_m, 'elevation', units)}: "
                          f"{exit_fb.source}" if exit_fb is not None else ""),
        _metric_from("tailwater", "Tailwater", "elevation", tw, *f.tailwater_range),
        model_metric("ladder_flow", "Ladder flow", "flow", None,
                     profile.ladder_flow_m3s if profile else None,
                     t.ladder_flow.min if t.ladder_flow else None,
                     t.ladder_flow.max if t.ladder_flow else None,
                     t.ladder_flow.aim if t.ladder_flow else None),
        model_metric("attraction_flow", "Attraction flow", "flow", None,
                     profile.entrance_flow_m3s if profile else None, t.min_attraction_flow,
                     None, None, "ladder + auxiliary water"),
        model_metric("head_drop", "Worst pool head drop", "length", wd,
                     wd.value if wd else None, t.pool_head_drop.min, t.pool_head_drop.max,
                     t.pool_head_drop.aim, f"at {wd.name.split(':', 1)[1]}" if wd else ""),
        model_metric("entrance_head", "Entrance head", "length", eh, eh.value if eh else None,
                     t.entrance_head.min, t.entrance_head.max, t.entrance_head.aim,
                     source=measured["entrance_head"][1] if "entrance_head" in measured
                     else "model"),
    ]
    if t.exit_head is not None and isinstance(f.exit, AdjustableWeirExit):
        xh = crit("exit_head")
        value = measured["exit_head"][0] if "exit_head" in measured else (
            xh.value if xh else None)
        metrics.append(model_metric("exit_head", "Exit weir head", "length", xh, value,
                                    t.exit_head.min, t.exit_head.max, t.exit_head.aim,
                                    source=measured["exit_head"][1] if "exit_head" in
                                    measured else "model"))
    metrics.append(_metric_from("water_temp", "Water temperature", "temperature",
                                read["water_temp"], None, al.temp_high_high.limit_c,
                                note=f"blocking {al.temp_high_high.limit_c:.1f} °C"))
    t7 = temp_7dadm(engine, find_tag(inp.tags, fid, "water_temp"), now, site.site.time_zone)
    limit7 = al.temp_high_limit_c
    metrics.append(model_metric("temp_7dadm", "Temperature 7DADM", "temperature", None, t7,
                                None, limit7, None, f"criterion {limit7:.0f} °C",
                                source="hourly maxima") if t7 is not None else
                   Metric("temp_7dadm", "Temperature 7DADM", "temperature", None, None, limit7,
                          None, "none", "needs 7 full days of readings", "hourly maxima"))
    metrics.append(_metric_from("do", "Dissolved oxygen", "do", read["do"],
                                al.do_low.limit_mg_l, None,
                                note=f"low-low {al.do_low_low.limit_mg_l:.1f} mg/L"))

    # gauged pools against the profile
    gauges, gauges_ok = "no gauged pools", True
    if profile is not None:
        levels = {p.id: p.water_level_m for p in profile.pools}
        diffs = []
        for entry in inp.tags.values():
            tag = entry[0]
            if tag.fishway_id == fid and tag.role in ("pool", "pool_b") and tag.pool_id in levels:
                r = _reading(inp.latest, inp.good, entry, inp.now_ms)
                if r.usable:
                    diffs.append((r.value - levels[tag.pool_id], tag.pool_id))
        if diffs:
            d, where = max(diffs, key=lambda x: abs(x[0]))
            gauges_ok = abs(d) <= MODEL_GAUGE_TOLERANCE_M
            gauges = (f"{len(diffs)} pool gauges within "
                      f"{format_value(MODEL_GAUGE_TOLERANCE_M, 'length', units)} of the model"
                      if gauges_ok else
                      f"{where} gauge {format_value(abs(d), 'length', units)} "
                      f"{'above' if d > 0 else 'below'} the model")
    elif state != "out_of_service":
        gauges = "no model to compare the gauges with"

    ages = [r.age_s for r in (fb, tw) if r.age_s is not None]
    age = max(ages) if len(ages) == 2 else None
    stale = age is None or any(r.status in ("stale", "none") for r in (fb, tw))
    rec = latest_recommendation(engine, db_id) if db_id is not None else None
    adjust = _adjustment(ladder, f, rec, positions, missing, now,
                         max(3 * site.ingest.recommend_seconds, 300.0), units)
    metrics = [_displayed(m, units) for m in metrics]
    left = [r.left_s for r in (fb, tw, read["water_temp"], read["do"]) if r.usable]
    fresh_until = inp.now_ms + int(1000 * min(left)) if left and not stale else None
    return FishwayStatus(
        fid, f.name, state, reason, worst_text, age, stale, tuple(metrics), None, adjust,
        gauges, gauges_ok, eff.modes[fid], profile, computed_ms=inp.now_ms,
        data_ms=inp.now_ms - int(round(1000 * age)) if age is not None else None,
        fresh_until_ms=fresh_until,
        problems=tuple(p for p in eff.problems if p.startswith(f"{fid}:")))


def _displayed(m: Metric, units: str) -> Metric:
    """The metric with its texts in the site's units and its bullet indicator's geometry."""
    b = bullet_geometry(m.value, m.lo, m.hi, m.target)
    m = m._replace(text=format_value(m.value, m.kind, units), band_text=metric_band_text(m, units))
    return m if b is None else m._replace(
        band_left_pct=b.band_left_pct, band_width_pct=b.band_width_pct, target_pct=b.target_pct,
        value_pct=b.value_pct, off_scale=b.off_scale)


def compute_status(site: Site, engine: Any, now: datetime) -> tuple[FishwayStatus, ...]:
    """The status of every fishway of ``site`` at ``now`` (tz-aware), in site order; see the
    module. Alarm counts are not part of it (``alarms`` is None): they change with every
    acknowledgement, so the dashboard reads them live."""
    eff = effective_site(site, engine)
    tags = tag_catalogue(site, engine)
    ids = [entry[1] for entry in tags.values()]
    latest = _rows(latest_values(engine, ids))
    now_ms = int(pd.Timestamp(now).as_unit("ms").value // 1_000_000)
    bad = [t for t, (_, value, flag) in latest.items()
           if flag not in USABLE_FLAGS or not math.isfinite(value)]
    good = _rows(latest_good_values(engine, bad)) if bad else {}
    inp = _Inputs(tags, latest, good, now_ms)
    return tuple(_fishway(site, eff, f.id, inp, engine, now) for f in site.fishways)
