"""Alarm conditions of a site at one instant: every configured rule against the inputs.

:func:`evaluate_rules` returns one :class:`Condition` per alarm it could judge (raw: deadband
applied, delays not yet) and one ``(key, reason)`` for each it could not (no profile, a reading
that failed QC or is stale): the engine holds those alarms as they were, and the data alarms
say why the data is missing. Measured values are used where the tag catalogue has a gauge and
its reading is usable (QC pass or not evaluated, fresh); otherwise the solved profile's value.

The measured exit weir head is taken from the forebay the ladder sees: the forebay gauge less
the trash-rack head loss (the ``trash_rack_dp`` tag measures forebay to exit),
``forebay − max(loss, 0)``, when that reading is usable, else the forebay gauge itself; a loss
above :data:`~ops_logic.ladder.MAX_TRASH_RACK_LOSS_M` is refused and the forebay gauge used
(:func:`ops_logic.ladder.ladder_forebay`). Its message says which
(``exit weir head (measured: forebay − trash-rack head loss − crest)``).

Alarm keys: ``<rule>@<fishway>`` for one-per-fishway rules, ``<rule>@<fishway>.<actuator or
pool>`` per actuator, auxiliary source or pool, ``<rule>@<tag name>`` per tag, and
``feed_comms@<feed>`` per feed (no fishway).

Which value each rule judges, and its limits:

=====================  =====================================================  ==============
rule                   value                                                  limits
=====================  =====================================================  ==============
head_drop              worst pool-to-pool drop of the profile                 targets band
entrance_head          entrance pool gauge − tailwater gauge, else profile    targets band
exit_head              forebay gauge − trash-rack loss − exit crest position  targets band
                       (the forebay the ladder sees), else profile
power_density          worst pool of the profile                              targets max
diffuser_velocity      each auxiliary source's diffuser, profile              targets max
attraction_flow_low    entrance flow of the profile                           targets min
forebay_range          forebay gauge, else profile                            fishway range
tailwater_range        tailwater gauge, else profile                          fishway range
temp_high              7DADM (or reading) of the water temperature            rule limit
temp_high_high         water temperature reading                              rule limit
do_low, do_low_low     dissolved oxygen reading [mg/L]                        rule limit
do_sat_low(_low)       % saturation (Benson & Krause 1984, site pressure)     rule limit
tdg_high               total dissolved gas reading [%]                        rule limit
trash_rack_dp_high     trash-rack (or picket) head differential               rule limit
actuator_mismatch      |position − last logged setting| per actuator          tolerance
pump_trip              pump trip status = 1                                   —
sensor_fail / suspect  QARTOD flag 4 or 9 / 3 of each tag                     —
stale_tag              age of each tag's reading (missing = stale)            max age
feed_comms             feed failed, or last success too old                   max age
gauge_disagree         |gauge − redundant gauge| of a pool                    rule limit
adjustment_due         recommended − current setting, by kind                 thresholds
=====================  =====================================================  ==============
"""
from __future__ import annotations

from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass
from datetime import datetime

from ops_logic.alarms.config import AlarmSettings
from ops_logic.alarms.inputs import AlarmInputs, FishwayInputs, TagValue
from ops_logic.alarms.limits import limit_condition
from ops_logic.ladder import ladder_forebay
from ops_logic.profile import Criterion
from ops_logic.site import Fishway, Site
from ops_logic.tags import TagDef
from ops_logic.water_quality import barometric_pressure_kpa, percent_saturation

__all__ = ["DATA_RULES", "Condition", "evaluate_rules"]

DATA_RULES = ("stale_tag", "sensor_fail", "sensor_suspect")
"""Per-tag rules that a feed communications failure explains (grouped under it)."""


@dataclass(frozen=True)
class Condition:
    """A rule's verdict on one alarm now: ``raw`` is the limit condition with its deadband
    (latched by the alarm's present activity), before the on/off delays."""

    key: str
    rule: str
    fishway_id: str | None
    raw: bool
    value: float | None
    message: str
    tag: str | None = None
    feed: str | None = None


def _band_text(lo: float | None, hi: float | None, unit: str) -> str:
    if lo is not None and hi is not None:
        return f"{lo:.3g}–{hi:.3g} {unit}"
    return f"max {hi:.3g} {unit}" if hi is not None else f"min {lo:.3g} {unit}"


def _exceedance(c: Criterion) -> float:
    return max(c.value - c.max if c.max is not None else -float("inf"),
               c.min - c.value if c.min is not None else -float("inf"))


class _Ctx:
    def __init__(self, site: Site, tags: Iterable[TagDef], settings: Mapping[str, AlarmSettings],
                 inputs: AlarmInputs, now: datetime, latched: Callable[[str], bool]):
        self.site, self.settings, self.inputs, self.now = site, settings, inputs, now
        self.latched = latched
        self.tags = list(tags)
        self.out: list[Condition] = []
        self.skipped: list[tuple[str, str]] = []

    def tags_of(self, fishway_id: str, role: str) -> list[TagDef]:
        return [t for t in self.tags if t.fishway_id == fishway_id and t.role == role]

    def reading(self, tag: TagDef | str, s: AlarmSettings) -> TagValue | None:
        name = tag if isinstance(tag, str) else tag.name
        r = self.inputs.readings.get(name)
        return r if r is not None and r.usable(s.stale_tag.max_age_s) else None

    def add(self, key: str, rule: str, fishway_id: str | None, raw: bool, value: float | None,
            message: str, tag: str | None = None, feed: str | None = None) -> None:
        self.out.append(Condition(key, rule, fishway_id, raw, value, message, tag, feed))

    def limit(self, key: str, rule: str, f: Fishway, value: float, what: str, unit: str, *,
              high: float | None = None, low: float | None = None, deadband: float = 0.0,
              tag: str | None = None) -> None:
        raw = limit_condition(value, high=high, low=low, deadband=deadband,
                              latched=self.latched(key))
        self.add(key, rule, f.id, raw, value,
                 f"{what} {value:.4g} {unit} ({_band_text(low, high, unit)})", tag)


def evaluate_rules(site: Site, tags: Iterable[TagDef], settings: Mapping[str, AlarmSettings],
                   inputs: AlarmInputs, now: datetime, latched: Callable[[str], bool],
                   feed_settings: Mapping[str, AlarmSettings]
                   ) -> tuple[list[Condition], list[tuple[str, str]]]:
    """Judge every enabled rule; see the module docstring.

    Parameters
    ----------
    site : the site model (SI)
    tags : the tag catalogue (:func:`ops_logic.tags.site_tags`)
    settings : alarm settings in force, by fishway id (site file plus supervisor edits)
    inputs : this evaluation's inputs
    now : the evaluation time (tz-aware)
    latched : whether the alarm of a key is active now (for the deadband)
    feed_settings : alarm settings that govern each feed's alarm, by feed id

    Returns ``(conditions, not_evaluated)``.
    """
    ctx = _Ctx(site, tags, settings, inputs, now, latched)
    for f in site.fishways:
        s = settings[f.id]
        fin = inputs.fishways.get(f.id, FishwayInputs())
        _hydraulic(ctx, f, s, fin)
        _water_quality(ctx, f, s, fin)
        _equipment(ctx, f, s, fin)
        _data(ctx, f, s)
        _adjustment(ctx, f, s, fin)
    _feeds(ctx, feed_settings)
    return ctx.out, ctx.skipped


def _hydraulic(ctx: _Ctx, f: Fishway, s: AlarmSettings, fin: FishwayInputs) -> None:
    prof = fin.profile
    names = {c.name: c for c in prof.criteria} if prof is not None else {}

    def worst(rule: str, prefix: str, what: str, deadband: float) -> None:
        key = f"{rule}@{f.id}"
        crits = [c for n, c in names.items() if n.startswith(prefix)]
        if not crits:
            ctx.skipped.append((key, "no solved profile"))
            return
        lat = ctx.latched(key)
        bad = [c for c in crits if limit_condition(c.value, high=c.max, low=c.min,
                                                   deadband=deadband, latched=lat)]
        w = max(bad or crits, key=_exceedance)
        where = w.name.split(":", 1)[1]
        ctx.add(key, rule, f.id, bool(bad), w.value,
                f"{what} {w.value:.4g} {w.unit} at {where} ({_band_text(w.min, w.max, w.unit)};"
                f" {len(bad)} of {len(crits)} out of limits)")

    if s.head_drop.enabled:
        worst("head_drop", "head_drop:", "pool head drop", s.head_drop.deadband)
    if s.power_density.enabled:
        worst("power_density", "power_density:", "power density", s.power_density.deadband)

    fb = _gauge(ctx, f, s, "forebay")
    tw = _gauge(ctx, f, s, "tailwater")
    t = f.targets
    measured = {k: r.value for k, r in (("forebay_level", fb), ("tailwater_level", tw))
                if r is not None}
    entrance_pool = f.pool_ids()[-1]
    pool_level = next((ctx.reading(tg, s) for role in ("pool", "pool_b")
                       for tg in ctx.tags_of(f.id, role)
                       if tg.pool_id == entrance_pool and ctx.reading(tg, s) is not None), None)
    if pool_level is not None and tw is not None:
        measured["entrance_head"] = pool_level.value - tw.value
    crest = next((ctx.reading(tg, s) for tg in ctx.tags_of(f.id, "setting")
                  if tg.setting == "exit_crest_m"), None)
    sources = {}
    if fb is not None and crest is not None:
        dp = _gauge(ctx, f, s, "trash_rack_dp")
        exit_fb = ladder_forebay(fb.value, dp.value if dp is not None else None)
        measured["exit_head"] = exit_fb.level_m - crest.value
        sources["exit_head"] = f"measured: {exit_fb.less('crest')}"
    bands = {
        "forebay_level": ("forebay_range", "forebay level", *f.forebay_range),
        "tailwater_level": ("tailwater_range", "tailwater level", *f.tailwater_range),
        "entrance_head": ("entrance_head", "entrance head", t.entrance_head.min,
                          t.entrance_head.max),
    }
    if t.exit_head is not None:
        bands["exit_head"] = ("exit_head", "exit weir head", t.exit_head.min, t.exit_head.max)
    for name, (rule, what, lo, hi) in bands.items():
        r = s.rule(rule)
        if not r.enabled:
            continue
        key = f"{rule}@{f.id}"
        value = measured.get(name)
        source = sources.get(name, "measured")
        if value is None and name in names:
            value, source = names[name].value, "profile"
        if value is None:
            ctx.skipped.append((key, "no usable gauge reading and no solved profile"))
            continue
        ctx.limit(key, rule, f, value, f"{what} ({source})", "m", high=hi, low=lo,
                  deadband=r.deadband)
    if s.diffuser_velocity.enabled:
        for a in f.aux:
            key = f"diffuser_velocity@{f.id}.{a.id}"
            c = names.get(f"diffuser_velocity:{a.id}")
            if c is None:
                ctx.skipped.append((key, "no solved profile"))
                continue
            ctx.limit(key, "diffuser_velocity", f, c.value, f"diffuser velocity at {a.id}",
                      "m/s", high=c.max, deadband=s.diffuser_velocity.deadband)
    if s.attraction_flow_low.enabled:
        key = f"attraction_flow_low@{f.id}"
        c = names.get("attraction_flow")
        if c is None:
            ctx.skipped.append((key, "no solved profile"))
        else:
            ctx.limit(key, "attraction_flow_low", f, c.value, "attraction flow", "m3/s",
                      low=c.min, deadband=s.attraction_flow_low.deadband)


def _gauge(ctx: _Ctx, f: Fishway, s: AlarmSettings, role: str) -> TagValue | None:
    return next((r for tg in ctx.tags_of(f.id, role) if (r := ctx.reading(tg, s)) is not None),
                None)


def _water_quality(ctx: _Ctx, f: Fishway, s: AlarmSettings, fin: FishwayInputs) -> None:
    temp = _gauge(ctx, f, s, "water_temp")
    do = _gauge(ctx, f, s, "do")
    no_temp = "no usable water temperature reading"
    if s.temp_high.enabled:
        key = f"temp_high@{f.id}"
        basis = s.temp_high.basis
        value = fin.temp_7dadm_c if basis == "7dadm" else (temp.value if temp else None)
        if value is None:
            ctx.skipped.append((key, "no 7DADM given" if basis == "7dadm" else no_temp))
        else:
            ctx.limit(key, "temp_high", f, value, f"water temperature ({basis})", "°C",
                      high=s.temp_high_limit_c, deadband=s.temp_high.deadband)
    if s.temp_high_high.enabled:
        key = f"temp_high_high@{f.id}"
        if temp is None:
            ctx.skipped.append((key, no_temp))
        else:
            ctx.limit(key, "temp_high_high", f, temp.value, "water temperature", "°C",
                      high=s.temp_high_high.limit_c, deadband=s.temp_high_high.deadband)
    for rule in ("do_low", "do_low_low"):
        r = s.rule(rule)
        if r.enabled:
            if do is None:
                ctx.skipped.append((f"{rule}@{f.id}", "no usable dissolved-oxygen reading"))
            else:
                ctx.limit(f"{rule}@{f.id}", rule, f, do.value, "dissolved oxygen", "mg/L",
                          low=r.limit_mg_l, deadband=r.deadband)  # type: ignore[attr-defined]
    sat: float | None = None
    reason = "no usable dissolved-oxygen and temperature readings"
    if do is not None and temp is not None:
        try:
            sat = percent_saturation(do.value, temp.value,
                                     barometric_pressure_kpa(ctx.site.site.elevation))
        except ValueError as exc:
            reason = f"% saturation not computed: {exc}"
    for rule in ("do_sat_low", "do_sat_low_low"):
        r = s.rule(rule)
        if r.enabled:
            if sat is None:
                ctx.skipped.append((f"{rule}@{f.id}", reason))
            else:
                ctx.limit(f"{rule}@{f.id}", rule, f, sat, "oxygen saturation", "%",
                          low=r.limit_pct, deadband=r.deadband)  # type: ignore[attr-defined]
    if s.tdg_high.enabled:
        key = f"tdg_high@{f.id}"
        name = s.tdg_high.tag.format(fishway=f.id)
        tdg = ctx.reading(name, s)
        if tdg is None:
            ctx.skipped.append((key, f"no usable reading of {name}"))
        else:
            ctx.limit(key, "tdg_high", f, tdg.value, "total dissolved gas", "%",
                      high=s.tdg_high.limit_pct, deadband=s.tdg_high.deadband, tag=name)


def _equipment(ctx: _Ctx, f: Fishway, s: AlarmSettings, fin: FishwayInputs) -> None:
    for rule, role, what in (("trash_rack_dp_high", "trash_rack_dp", "trash-rack differential"),
                             ("picket_dp_high", "picket_dp", "picket differential")):
        r = s.rule(rule)
        for tg in ctx.tags_of(f.id, role) if r.enabled else []:
            key = f"{rule}@{f.id}"
            v = ctx.reading(tg, s)
            if v is None:
                ctx.skipped.append((key, f"no usable reading of {tg.name}"))
                continue
            ctx.limit(key, rule, f, v.value, what, "m", high=r.limit_m,  # type: ignore[attr-defined]
                      deadband=r.deadband, tag=tg.name)
    am = s.actuator_mismatch
    for tg in ctx.tags_of(f.id, "setting") if am.enabled else []:
        key = f"actuator_mismatch@{f.id}.{tg.actuator}"
        v = ctx.reading(tg, s)
        logged = fin.current_settings.get(tg.setting or "")
        if v is None or logged is None:
            ctx.skipped.append((key, f"no usable reading of {tg.name}" if v is None else
                                f"no logged setting {tg.setting}"))
            continue
        tol = {"m": am.tolerance_m, "%": am.tolerance_pct}.get(tg.unit, am.tolerance_pumps)
        diff = abs(v.value - logged)
        ctx.add(key, "actuator_mismatch", f.id, diff > tol, diff,
                f"{tg.actuator} at {v.value:.4g} {tg.unit}, logged setting {logged:.4g} "
                f"{tg.unit} (tolerance {tol:.3g})", tg.name)
    for tg in ctx.tags_of(f.id, "pump_trip") if s.pump_trip.enabled else []:
        key = f"pump_trip@{f.id}.{tg.actuator}"
        v = ctx.reading(tg, s)
        if v is None:
            ctx.skipped.append((key, f"no usable reading of {tg.name}"))
            continue
        ctx.add(key, "pump_trip", f.id, v.value >= 0.5, v.value,
                f"pump station {tg.actuator} {'tripped' if v.value >= 0.5 else 'running'}",
                tg.name)
    gd = s.gauge_disagree
    for tb in ctx.tags_of(f.id, "pool_b") if gd.enabled else []:
        key = f"gauge_disagree@{f.id}.{tb.pool_id}"
        ta = next((t for t in ctx.tags_of(f.id, "pool") if t.pool_id == tb.pool_id), None)
        a = ctx.reading(ta, s) if ta is not None else None
        b = ctx.reading(tb, s)
        if a is None or b is None:
            ctx.skipped.append((key, "redundant gauges not both usable"))
            continue
        ctx.limit(key, "gauge_disagree", f, abs(a.value - b.value),
                  f"gauges of {tb.pool_id} differ by", "m", high=gd.limit_m,
                  deadband=gd.deadband, tag=tb.name)


def _data(ctx: _Ctx, f: Fishway, s: AlarmSettings) -> None:
    for tg in (t for t in ctx.tags if t.fishway_id == f.id):
        r = ctx.inputs.readings.get(tg.name)
        if s.stale_tag.enabled:
            age = None if r is None else r.age_s
            stale = age is None or age > s.stale_tag.max_age_s
            ctx.add(f"stale_tag@{tg.name}", "stale_tag", f.id, stale, age,
                    f"{tg.name}: no reading" if age is None else
                    f"{tg.name}: last reading {age:.0f} s old (max {s.stale_tag.max_age_s:.0f} s)",
                    tg.name, tg.feed)
        for rule, flags, what in (("sensor_fail", (4, 9), "failed"),
                                  ("sensor_suspect", (3,), "suspect")):
            if s.rule(rule).enabled:
                bad = r is not None and r.flag in flags
                ctx.add(f"{rule}@{tg.name}", rule, f.id, bad, None if r is None else r.flag,
                        f"{tg.name}: quality {what}" if bad else f"{tg.name}: quality ok",
                        tg.name, tg.feed)


def _adjustment(ctx: _Ctx, f: Fishway, s: AlarmSettings, fin: FishwayInputs) -> None:
    ad = s.adjustment_due
    if not ad.enabled:
        return
    key = f"adjustment_due@{f.id}"
    rec = fin.recommendation
    if rec is None:
        ctx.skipped.append((key, "no recommendation"))
        return
    due = []
    for c in rec.changes:
        current = fin.current_settings.get(c.name, c.current)
        thr = {"m": ad.threshold_m, "%": ad.threshold_pct}.get(c.unit, ad.threshold_pumps)
        if abs(c.recommended - current) > thr:
            due.append(f"{c.label} {current:.4g} → {c.recommended:.4g} {c.unit}")
    ctx.add(key, "adjustment_due", f.id, bool(due), float(len(due)),
            "adjustment due: " + "; ".join(due) if due else "settings as recommended")


def _feeds(ctx: _Ctx, feed_settings: Mapping[str, AlarmSettings]) -> None:
    for feed in ctx.site.ingest.feeds:
        fc = feed_settings[feed.id].feed_comms
        if not fc.enabled:
            continue
        key = f"feed_comms@{feed.id}"
        st = ctx.inputs.feeds.get(feed.id)
        if st is None:
            ctx.skipped.append((key, "no feed status given"))
            continue
        age = (ctx.now - st.last_success).total_seconds() if st.last_success else None
        failed = not st.ok or (age is not None and age > fc.max_age_s)
        text = (f"feed {feed.id}: communications failed" + (f" ({st.error})" if st.error else "")
                if failed else f"feed {feed.id}: ok")
        if age is not None:
            text += f", last success {age:.0f} s ago"
        ctx.add(key, "feed_comms", None, failed, age, text, feed=feed.id)
