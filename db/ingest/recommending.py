"""The recommender job of the ingest: inputs from the QC windows, ``Ladder.recommend``, storage.

Which readings drive a recommendation (the policy)
--------------------------------------------------
For each input (forebay, tailwater, trash-rack head loss, water temperature, each actuator
position) the newest *settled* reading of its tag no older than the tag's ``max_age_s``
(six poll periods, at least 60 s) is taken:

- a PASS (1) reading if there is one in that time;
- otherwise a SUSPECT (3) reading, and the input is named in ``inputs["suspect_inputs"]`` and
  at the start of the stored reason, so a recommendation made from suspect data says so;
- FAIL (4), MISSING (9) and NOT_EVALUATED-only readings never drive a recommendation.

*Settled* means its spike verdict is known (a later reading of the tag exists), so a spike on
the newest reading cannot slip in before the spike test has seen it.

The forebay the ladder sees is the water level upstream of its exit control: the forebay
gauge less the trash-rack head loss (the ``trash_rack_dp`` tag measures forebay to exit),
``forebay − max(loss, 0)``, when that reading is usable, else the forebay gauge itself; a loss
above :data:`~ops_logic.ladder.MAX_TRASH_RACK_LOSS_M` is refused and the forebay gauge used
(:func:`ops_logic.ladder.ladder_forebay`). Which it was is stored as ``inputs
["ladder_forebay_from"]`` beside ``inputs["ladder_forebay_m"]``.

Without a usable temperature the solver's 10 °C is used (noted). Current settings come from
the position tags, clipped to the actuator's range (pump counts rounded); a setting without a
usable reading falls back to the latest logged actuator setting (:mod:`db.history`, matched
by setting name or actuator id), else the ladder's neutral default; ``inputs
["settings_source"]`` says which.

The ladder is the fishway *in force* (site file plus supervisors' overrides,
:func:`db.in_force.effective_site`; the caller hands it over), so an overridden target band
is the band the recommendation aims at and its predicted criteria carry. A fishway whose mode
is ``maintenance`` or ``out_of_service`` gets no recommendation: the caller skips it with that
reason (:meth:`db.ingest.service.IngestService.recommend_once`), which is no failure of the
recommender.

Without a usable forebay or tailwater reading no recommendation is stored for the cycle; the
reason goes to the log and to the ``feed_health`` row ``recommender:<fishway>`` (``ok=False``),
which a successful cycle sets back to ok with ``lag_s`` = the age of the oldest level input.

The stored recommendation (:func:`db.history.record_recommendation`): ``inputs`` as above
(values SI, times ISO 8601 UTC, flags), ``settings`` the recommended settings, ``predicted``
a summary of the predicted profile (state, in_criteria, flows, entrance head, each criterion's
value, band (``min``, ``max``) and whether it is met, pool levels), ``binding_constraint``,
``feasible``, ``reason``.
Recommendations are advisory (:data:`ops_logic.advisory.ADVISORY_CAUTION`).
"""
from __future__ import annotations

import logging
import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

from sqlalchemy.engine import Engine

from db.feed_health import update_feed_health
from db.history import latest_actuator_settings, record_recommendation
from db.ingest.live_qc import SUSPECT, LiveQc, Usable
from db.types import ms_to_datetime, to_epoch_ms
from ops_logic.ladder import Ladder, ladder_forebay
from ops_logic.overrides import MODE_LABELS
from ops_logic.recommend import Recommendation
from ops_logic.tags import TagDef

__all__ = ["DEFAULT_TEMPERATURE_C", "RecommendOutcome", "fishway_tags", "health_feed_name",
           "not_operating", "recommend_fishway"]

_log = logging.getLogger("db.ingest")

DEFAULT_TEMPERATURE_C = 10.0
"""The solver's default water temperature [°C], used when no temperature reading is usable."""


def health_feed_name(fishway_id: str) -> str:
    """The ``feed_health`` row of a fishway's recommender job."""
    return f"recommender:{fishway_id}"


@dataclass(frozen=True)
class RecommendOutcome:
    """One fishway's recommender cycle: the stored id and result, or why there is none;
    ``mode`` is the fishway's mode in force (not ``"operating"``: skipped for it, no failure)."""

    fishway_id: str
    ts: datetime
    recommendation_id: int | None
    recommendation: Recommendation | None
    inputs: dict[str, Any] = field(default_factory=dict)
    skipped: str | None = None
    mode: str = "operating"

    @property
    def failed(self) -> bool:
        """No recommendation although the fishway is operating (missing inputs, an error)."""
        return self.recommendation is None and self.mode == "operating"


def _finite(v: Any) -> Any:
    if isinstance(v, float) and not math.isfinite(v):
        return None
    if isinstance(v, dict):
        return {k: _finite(x) for k, x in v.items()}
    if isinstance(v, list | tuple):
        return [_finite(x) for x in v]
    return v


def _predicted(rec: Recommendation) -> dict[str, Any]:
    p = rec.profile
    return _finite({
        "state": p.state, "in_criteria": bool(p.in_criteria),
        "ladder_flow_m3s": p.ladder_flow_m3s, "entrance_flow_m3s": p.entrance_flow_m3s,
        "entrance_head_m": p.entrance_head_m,
        "criteria": {c.name: {"value": float(c.value), "ok": bool(c.ok), "min": c.min,
                              "max": c.max} for c in p.criteria},
        "pool_levels_m": {q.id: q.water_level_m for q in p.pools},
    })


def _put(inputs: dict[str, Any], key: str, unit: str, u: Usable) -> None:
    inputs[f"{key}_{unit}"] = u.value
    inputs[f"{key}_ts"] = ms_to_datetime(u.ts_ms).isoformat()
    inputs[f"{key}_flag"] = u.flag


class _NoInputError(Exception):
    pass


def _usable(qc: LiveQc, tag: TagDef | None, now_ms: int) -> Usable | None:
    if tag is None or tag.name not in qc.names:
        return None
    max_age = qc.thresholds(tag.name).max_age_s or 60.0
    return qc.latest_usable(tag.name, now_ms, max_age)


def _current_settings(engine: Engine, ladder: Ladder, qc: LiveQc, tags: list[TagDef],
                      fishway_db_id: int, now_ms: int, inputs: dict[str, Any],
                      suspect: list[str]) -> dict[str, float]:
    by_setting = {t.setting: t for t in tags if t.role == "setting" and t.setting}
    current: dict[str, float] = {}
    source: dict[str, str] = {}
    logged = None
    for name, spec in ladder.settings.items():
        u = _usable(qc, by_setting.get(name), now_ms)
        if u is not None:
            value = min(max(u.value, spec.low), spec.high)
            current[name] = float(round(value)) if spec.kind == "count" else value
            source[name] = "tag"
            if u.flag == SUSPECT:
                suspect.append(name)
            continue
        if logged is None:
            logged = latest_actuator_settings(engine, fishway_db_id)
        for key in (name, spec.actuator):
            if key in logged.index and math.isfinite(float(logged.loc[key, "value"])):
                value = min(max(float(logged.loc[key, "value"]), spec.low), spec.high)
                current[name] = float(round(value)) if spec.kind == "count" else value
                source[name] = "logged"
                break
        else:
            current[name] = ladder.default_settings()[name]
            source[name] = "default"
    inputs["current_settings"] = dict(current)
    inputs["settings_source"] = source
    return current


def _inputs(engine: Engine, ladder: Ladder, qc: LiveQc, tags: list[TagDef], fishway_db_id: int,
            now_ms: int) -> tuple[dict[str, Any], float, float, float, dict[str, float]]:
    role = {t.role: t for t in tags if t.role in ("forebay", "tailwater", "trash_rack_dp",
                                                  "water_temp")}
    inputs: dict[str, Any] = {}
    suspect: list[str] = []
    levels = {}
    for key in ("forebay", "tailwater"):
        tag = role.get(key)
        u = _usable(qc, tag, now_ms)
        if u is None:
            what = tag.name if tag is not None else f"no {key} tag"
            raise _NoInputError(f"no usable {key} reading ({what}: no PASS or SUSPECT reading "
                           "settled within its maximum age)")
        _put(inputs, key, "m", u)
        levels[key] = u
        if u.flag == SUSPECT:
            suspect.append(key)
    dp = _usable(qc, role.get("trash_rack_dp"), now_ms)
    if dp is not None:
        _put(inputs, "trash_rack_dp", "m", dp)
    exit_fb = ladder_forebay(levels["forebay"].value, dp.value if dp is not None else None)
    if dp is not None and dp.flag == SUSPECT and exit_fb.loss_m is not None:
        suspect.append("trash_rack_dp")
    forebay = exit_fb.level_m
    inputs["ladder_forebay_m"] = forebay
    inputs["ladder_forebay_from"] = exit_fb.source
    temp = _usable(qc, role.get("water_temp"), now_ms)
    if temp is not None:
        _put(inputs, "temperature", "c", temp)
        if temp.flag == SUSPECT:
            suspect.append("temperature")
        temperature = temp.value
    else:
        temperature = DEFAULT_TEMPERATURE_C
        inputs["temperature_c"] = temperature
        inputs["temperature_from"] = "default (no usable temperature reading)"
    current = _current_settings(engine, ladder, qc, tags, fishway_db_id, now_ms, inputs,
                                suspect)
    inputs["suspect_inputs"] = suspect
    inputs["input_age_s"] = max((now_ms - u.ts_ms) / 1000.0 for u in levels.values())
    return inputs, forebay, levels["tailwater"].value, temperature, current


def recommend_fishway(engine: Engine, ladder: Ladder, qc: LiveQc, tags: list[TagDef],
                      fishway_db_id: int, now: datetime) -> RecommendOutcome:
    """One recommender cycle of one fishway at ``now``; see the module docstring.

    Parameters
    ----------
    engine : Engine
    ladder : Ladder
        The fishway's solver model, as in force (:func:`db.in_force.effective_site`).
    qc : LiveQc
        The ingest's QC windows (the inputs are read from them).
    tags : list of TagDef
        The fishway's tags.
    fishway_db_id : int
        The fishway's id in the database.
    now : datetime
        Tz-aware time of the cycle (the recommendation's time stamp).
    """
    now_ms = to_epoch_ms(now)
    fid = ladder.id
    try:
        inputs, forebay, tailwater, temperature, current = _inputs(
            engine, ladder, qc, tags, fishway_db_id, now_ms)
    except _NoInputError as exc:
        why = f"no recommendation for {fid}: {exc}"
        _log.warning("%s", why)
        update_feed_health(engine, health_feed_name(fid), now, ok=False, error=why)
        return RecommendOutcome(fid, now, None, None, skipped=why)
    rec = ladder.recommend(forebay, tailwater, current, temperature_c=temperature)
    reason = rec.reason
    if inputs["suspect_inputs"]:
        reason = f"suspect input(s): {', '.join(inputs['suspect_inputs'])}; {reason}"
    rec_id = record_recommendation(
        engine, fishway_db_id, now, inputs=_finite(inputs),
        settings={k: float(v) for k, v in rec.settings.items()}, predicted=_predicted(rec),
        binding_constraint=rec.binding, feasible=rec.feasible, reason=reason)
    update_feed_health(engine, health_feed_name(fid), now, ok=True,
                       lag_s=max(inputs["input_age_s"], 0.0))
    return RecommendOutcome(fid, now, rec_id, rec, inputs)


def not_operating(engine: Engine, fishway_id: str, mode: str, now: datetime) -> RecommendOutcome:
    """The cycle of a fishway whose mode in force is ``maintenance`` or ``out_of_service``: no
    recommendation, and the reason. Nothing failed, so the recommender's ``feed_health`` row is
    recorded as a successful cycle (never as an error: the dewatered gauges of a fishway in
    maintenance raise no feed problem)."""
    if mode not in MODE_LABELS or mode == "operating":
        raise ValueError(f"{fishway_id}: mode {mode!r} is not a mode out of operation")
    why = f"no recommendation for {fishway_id}: {MODE_LABELS[mode].lower()}"
    _log.info("%s", why)
    update_feed_health(engine, health_feed_name(fishway_id), now, ok=True)
    return RecommendOutcome(fishway_id, now, None, None, skipped=why, mode=mode)


def fishway_tags(tags: list[TagDef]) -> Mapping[str, list[TagDef]]:
    """Tags grouped by fishway id (catalogue order)."""
    out: dict[str, list[TagDef]] = {}
    for t in tags:
        out.setdefault(t.fishway_id, []).append(t)
    return out
