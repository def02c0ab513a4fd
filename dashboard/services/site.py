"""Site & settings: display units, the editable parameters, overrides in force, users.

A supervisor may override a fishway's targets (``targets.<band>.<min|target|max>`` and the
scalar targets), its alarm limits (``alarms.<rule>.<parameter>`` for the limit, threshold,
tolerance and maximum-age parameters of :mod:`ops_logic.alarms.config`) and its mode
(``mode``: operating, maintenance, out of service). Each change is one append-only row of
``setting_changes`` (migration 0002) with the value before and after (SI) and who made it, and
one operator-log note saying the same in display units. The site file is never written: the
values in force are the site file's with the newest override of each key laid over it
(:func:`apply_overrides`), validated exactly like the site file (pydantic models of
:mod:`ops_logic.site` and :mod:`ops_logic.alarms.config`), so an override the site file could
not hold is refused. An override that no longer validates (the site file changed under it) is
left out and reported, never applied silently.

Values typed by a user are read in the site's display units (``site.units``: ft, cfs, ft/s,
ft·lbf/s/ft³ for "us"), or with an explicit unit (``"0.4 ft"``, ``"0.12 m"``) for lengths,
flows, velocities and power densities; temperatures are °C, dissolved oxygen mg/L.

Each parameter's display kind follows its unit suffix:

>>> [_param_kind(n) for n in ("limit_mg_l", "threshold_pct", "threshold_pumps", "max_age_s")]
['do', 'pct', 'pumps', 'seconds']
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from datetime import datetime
from typing import Any

import pandas as pd

from db.dashboard_queries import (
    record_setting_change,
    setting_changes_frame,
    users_frame,
)
from db.history import add_log_entry
from db.in_force import EffectiveSite, effective_site
from db.status.store import renew_status
from ops_logic.alarms.config import RULE_NAMES
from ops_logic.display import display_number, format_value, parse_value, unit_label
from ops_logic.overrides import MODE_LABELS, MODES, apply_overrides, validate_overrides
from ops_logic.site import AdjustableWeirExit, Fishway, GravityAux, Site

__all__ = [
    "MODES",
    "MODE_LABELS",
    "EffectiveSite",
    "Parameter",
    "add_account",
    "apply_overrides",
    "change_setting",
    "changes_rows",
    "config_tables",
    "current_value",
    "display_number",
    "effective_site",
    "format_value",
    "parameter",
    "parameters",
    "parse_value",
    "revert_setting",
    "unit_label",
    "users_rows",
]

# -- the editable parameters -------------------------------------------------------------------
@dataclass(frozen=True)
class Parameter:
    """One editable setting of a fishway: its key, label, group and display kind."""

    key: str
    label: str
    group: str  # "Targets", "Alarm limits" or "Mode"
    kind: str  # a display kind, or "choice" for the mode


_BANDS = {"pool_head_drop": ("Pool head drop", "length"),
          "entrance_head": ("Entrance head", "length"),
          "exit_head": ("Exit weir head", "length"),
          "ladder_flow": ("Ladder flow", "flow")}
_SCALAR_TARGETS = {"max_power_density": ("Power density, maximum", "power_density"),
                   "max_diffuser_velocity.wall": ("Wall diffuser velocity, maximum", "velocity"),
                   "max_diffuser_velocity.floor": ("Floor diffuser velocity, maximum",
                                                   "velocity"),
                   "min_attraction_flow": ("Attraction flow, minimum", "flow")}
_RULE_LABELS = {
    "temp_high": "Water temperature high (7DADM)", "temp_high_high": "Water temperature "
    "high-high", "do_low": "Dissolved oxygen low", "do_low_low": "Dissolved oxygen low-low",
    "do_sat_low": "DO saturation low", "do_sat_low_low": "DO saturation low-low",
    "tdg_high": "Total dissolved gas high", "trash_rack_dp_high": "Trash rack head loss high",
    "picket_dp_high": "Picket head loss high", "actuator_mismatch": "Actuator position mismatch",
    "stale_tag": "Stale tag", "feed_comms": "Feed communications", "gauge_disagree":
    "Redundant gauges disagree", "adjustment_due": "Adjustment due"}
_SUFFIX_KIND = (("_m3s", "flow"), ("_m_s", "velocity"), ("_w_m3", "power_density"),
                ("_mg_l", "do"), ("_pct", "pct"), ("_pumps", "pumps"), ("_m", "length"),
                ("_c", "temperature"), ("_s", "seconds"))
_PARAM_PREFIXES = ("limit_", "threshold_", "tolerance_", "max_age_")
_PARAM_WORDS = {"_m": "level", "_pct": "opening", "_pumps": "pumps"}


def _param_kind(name: str) -> str:
    """Display kind of a rule parameter from its unit suffix (a count when it has none)."""
    return next((kind for suffix, kind in _SUFFIX_KIND if name.endswith(suffix)), "count")


def _param_label(name: str) -> str:
    head = name.split("_", 1)[0] if not name.startswith("max_age") else "maximum age"
    for suffix, word in _PARAM_WORDS.items():
        if name.startswith(("threshold_", "tolerance_")) and name.endswith(suffix):
            return f"{head} ({word})"
    return head


def parameters(fishway: Fishway) -> list[Parameter]:
    """The editable parameters of a fishway, in display order."""
    out = [Parameter("mode", "Fishway mode", "Mode", "choice")]
    t = fishway.targets
    for band, (label, kind) in _BANDS.items():
        if getattr(t, band) is None:
            continue
        for part, word in (("min", "minimum"), ("target", "target"), ("max", "maximum")):
            out.append(Parameter(f"targets.{band}.{part}", f"{label}, {word}", "Targets", kind))
    for name, (label, kind) in _SCALAR_TARGETS.items():
        out.append(Parameter(f"targets.{name}", label, "Targets", kind))
    for rule in RULE_NAMES:
        fields = type(fishway.alarms.rule(rule)).model_fields
        for name in fields:
            if name.startswith(_PARAM_PREFIXES):
                label = _RULE_LABELS.get(rule, rule.replace("_", " ").capitalize())
                out.append(Parameter(f"alarms.{rule}.{name}", f"{label}: {_param_label(name)}",
                                     "Alarm limits", _param_kind(name)))
    return out


def parameter(fishway: Fishway, key: str) -> Parameter:
    """The parameter called ``key``; ValueError when the fishway has none."""
    for p in parameters(fishway):
        if p.key == key:
            return p
    raise ValueError(f"fishway {fishway.id!r} has no editable setting {key!r}")


def current_value(fishway: Fishway, key: str) -> float | None:
    """The value of a target or alarm-limit key in a fishway model (SI; None when unset)."""
    head, _, rest = key.partition(".")
    obj: Any = fishway.targets if head == "targets" else fishway.alarms if head == "alarms" \
        else None
    if obj is None:
        raise ValueError(f"{key!r} is not a target or alarm-limit key")
    for part in rest.split("."):
        if obj is None:
            return None
        obj = getattr(obj, part)
    return None if obj is None else float(obj)


def _text(value: float | None, param: Parameter, units: str) -> str:
    return "unset" if value is None else format_value(value, param.kind, units)


def change_setting(site: Site, engine: Any, user: Mapping[str, str], fishway_id: str,
                   key: str, text: str, *, now: datetime, note: str = "") -> str:
    """Set one parameter of a fishway from the text a supervisor typed; return the message
    for the page. ValueError (with the reason) when the value is refused or changes nothing;
    nothing is stored then. The caller has checked the role (``auth.require("supervisor")``)."""
    eff = effective_site(site, engine)
    if fishway_id not in eff.fishways:
        raise ValueError(f"no fishway {fishway_id!r}")
    fw_site, fw_now = site.fishway(fishway_id), eff.fishways[fishway_id]
    param = parameter(fw_site, key)
    units = site.site.units
    db_id = eff.db_ids[fishway_id]
    author = user["name"]
    if key == "mode":
        new = (text or "").strip()
        if new not in MODES:
            raise ValueError(f"mode must be one of {', '.join(MODES)}")
        old = eff.modes[fishway_id]
        if new == old:
            raise ValueError(f"{fw_site.name} is already {MODE_LABELS[new].lower()}")
        record_setting_change(engine, db_id, key, now, action="set", set_by=author,
                              old_text=old, new_text=new, note=note)
        message = f"{fw_site.name}: mode {MODE_LABELS[old]} → {MODE_LABELS[new]}"
    else:
        new_value = None if text.strip().lower() in ("", "none", "unset") else parse_value(
            text, param.kind, units)
        old_value = current_value(fw_now, key)
        validate_overrides(fw_site, {**eff.overrides[fishway_id], key: (new_value, None)})
        record_setting_change(engine, db_id, key, now, action="set", set_by=author,
                              old_value=old_value, new_value=new_value, note=note)
        message = (f"{fw_site.name}: {param.label} {_text(old_value, param, units)} → "
                   f"{_text(new_value, param, units)}")
    add_log_entry(engine, now, author, "shift_note", fishway_id=db_id,
                  text=f"Setting changed: {message}" + (f" ({note})" if note else ""))
    renew_status(site, engine, now)
    return message


def revert_setting(site: Site, engine: Any, user: Mapping[str, str], fishway_id: str,
                   key: str, *, now: datetime) -> str:
    """Return one parameter to the site file's value; the message for the page. ValueError
    when it has the site file's value already, or the other overrides need it."""
    eff = effective_site(site, engine)
    fw_site = site.fishway(fishway_id)
    param = parameter(fw_site, key)
    if key not in eff.overrides.get(fishway_id, {}):
        raise ValueError(f"{fw_site.name}: {param.label} has the site file's value already")
    units, db_id = site.site.units, eff.db_ids[fishway_id]
    if key == "mode":
        record_setting_change(engine, db_id, key, now, action="revert", set_by=user["name"],
                              old_text=eff.modes[fishway_id], new_text="operating")
        message = f"{fw_site.name}: mode back to operating (the site file's)"
    else:
        rest = {k: v for k, v in eff.overrides[fishway_id].items() if k != key}
        try:
            validate_overrides(fw_site, rest)
        except ValueError as exc:
            raise ValueError(f"the other overrides would not hold without this one: "
                             f"{exc}") from None
        old, new = current_value(eff.fishways[fishway_id], key), current_value(fw_site, key)
        record_setting_change(engine, db_id, key, now, action="revert", set_by=user["name"],
                              old_value=old, new_value=new)
        message = (f"{fw_site.name}: {param.label} {_text(old, param, units)} → "
                   f"{_text(new, param, units)} (the site file's)")
    add_log_entry(engine, now, user["name"], "shift_note", fishway_id=db_id,
                  text=f"Setting changed: {message}")
    renew_status(site, engine, now)
    return message


def changes_rows(site: Site, engine: Any, limit: int = 50) -> list[dict[str, str]]:
    """The newest setting changes as display rows (time, fishway, setting, from, to, by)."""
    eff = effective_site(site, engine)
    by_db = {v: k for k, v in eff.db_ids.items()}
    frame = setting_changes_frame(engine, limit=limit)
    units = site.site.units
    tz = site.site.time_zone
    rows = []
    for ts, r in frame.iterrows():
        fid = by_db.get(int(r["fishway_id"]))
        if fid is None:
            continue
        try:
            param = parameter(site.fishway(fid), r["key"])
        except ValueError:  # a key this page does not offer (the alarms page's, say)
            name = str(r["key"]).rsplit(".", 1)[-1]
            param = Parameter(r["key"], str(r["key"]), "", _param_kind(name))
        if r["key"] == "mode":
            old, new = str(r["old_text"] or "—"), str(r["new_text"] or "—")
        else:
            old = _text(None if pd.isna(r["old_value"]) else r["old_value"], param, units)
            new = _text(None if pd.isna(r["new_value"]) else r["new_value"], param, units)
        rows.append({"time": ts.tz_convert(tz).strftime("%Y-%m-%d %H:%M"),
                     "fishway": site.fishway(fid).name, "setting": param.label,
                     "from": old, "to": new + (" (site file)" if r["action"] == "revert"
                                               else ""),
                     "by": str(r["set_by"]), "note": str(r["note"] or "")})
    return rows


# -- read-only configuration view ---------------------------------------------------------------
def _control_text(b: Any, units: str) -> tuple[str, str]:
    fv = format_value
    if isinstance(b, AdjustableWeirExit):
        return ("adjustable weir", f"crest {fv(b.crest_range[0], 'elevation', units)}–"
                f"{fv(b.crest_range[1], 'elevation', units)}, width {fv(b.width, 'length', units)}")
    if b.type == "weir":
        return ("weir", f"crest {fv(b.crest, 'elevation', units)}, width "
                f"{fv(b.width, 'length', units)}")
    if b.type == "vertical_slot":
        return ("vertical slot", f"invert {fv(b.invert, 'elevation', units)}, slot "
                f"{fv(b.slot_width, 'length', units)}")
    orifices = "; ".join(f"{o.count} × {fv(o.width, 'length', units)} × "
                         f"{fv(o.height, 'length', units)} at "
                         f"{fv(o.invert, 'elevation', units)}" for o in b.orifices)
    if b.type == "weir_orifice":
        return ("weir with orifice", f"crest {fv(b.crest, 'elevation', units)}, "
                f"{b.weir_count} × {fv(b.weir_width, 'length', units)} notch; orifice "
                f"{orifices}")
    return ("orifice", orifices)


def config_tables(site: Site, eff: EffectiveSite, fishway_id: str
                  ) -> dict[str, tuple[list[str], list[list[str]]]]:
    """The fishway's configuration as display tables: (headers, rows) by section."""
    f = site.fishway(fishway_id)
    units = site.site.units
    fv = format_value
    ids, cids = f.pool_ids(), [f.exit.id if isinstance(f.exit, AdjustableWeirExit) else "exit",
                               *f.baffle_ids()]
    controls = [f.exit, *f.baffles]
    pools = [[cids[i], *_control_text(c, units), ids[i], fv(p.floor, "elevation", units),
              fv(p.length, "length", units), fv(p.width, "length", units)]
             for i, (c, p) in enumerate(zip(controls, f.pools, strict=True))]
    gates = [[g.id, fv(g.width, "length", units), f"{fv(g.crest_range[0], 'elevation', units)}"
              f"–{fv(g.crest_range[1], 'elevation', units)}"] for g in f.entrance.gates]
    aux = []
    for a in f.aux:
        if isinstance(a, GravityAux):
            what = (f"gravity conduit {fv(a.conduit.diameter, 'length', units)} × "
                    f"{fv(a.conduit.length, 'length', units)}, "
                    f"{a.valve.characteristic.replace('_', '-')} valve")
        else:
            rated = (f"{fv(a.rated_flow, 'flow', units)} at {fv(a.rated_head, 'length', units)}"
                     if a.rated_flow is not None and a.rated_head is not None else "curve")
            what = f"{a.count} pumps, each {rated}"
        aux.append([a.id, what, a.into_pool, f"{a.diffuser}, "
                    f"{fv(a.diffuser_area, 'area', units)}"])
    eff_fw = eff.fishways[fishway_id]
    targets = []
    for p in parameters(f):
        if p.group == "Mode":
            targets.append([p.label, "Operating", MODE_LABELS[eff.modes[fishway_id]],
                            "override" if "mode" in eff.overrides[fishway_id] else ""])
            continue
        file_v, now_v = current_value(f, p.key), current_value(eff_fw, p.key)
        if p.group == "Targets" and file_v is None and now_v is None:
            continue
        file_t, now_t = _text(file_v, p, units), _text(now_v, p, units)
        if p.key == "alarms.temp_high.limit_c":  # unset: the criterion of the water's use
            use = f.alarms.temperature_use.replace("_", " ")
            file_t = file_t if file_v is not None else \
                f"{f.alarms.temp_high_limit_c:.1f} °C ({use} criterion)"
            now_t = now_t if now_v is not None else \
                f"{eff_fw.alarms.temp_high_limit_c:.1f} °C ({use} criterion)"
        targets.append([p.label, file_t, now_t,
                        "override" if p.key in eff.overrides[fishway_id] else ""])
    rl = f.rate_limits
    rates = [["Exit weir crest", fv(rl.exit_crest, "length", units) if rl.exit_crest else
              "no limit"],
             ["Entrance weir crest", fv(rl.entrance_crest, "length", units)
              if rl.entrance_crest else "no limit"],
             ["Auxiliary valve opening", f"{rl.valve_opening_pct:g} %" if rl.valve_opening_pct
              else "no limit"],
             ["Pumps", f"{rl.pumps} per adjustment" if rl.pumps else "no limit"]]
    ranges = [["Forebay", f"{fv(f.forebay_range[0], 'elevation', units)}–"
               f"{fv(f.forebay_range[1], 'elevation', units)}"],
              ["Tailwater", f"{fv(f.tailwater_range[0], 'elevation', units)}–"
               f"{fv(f.tailwater_range[1], 'elevation', units)}"]]
    return {
        "Operating ranges": (["Level", "Range"], ranges),
        "Targets, alarm limits and mode": (["Setting", "Site file", "In force", ""], targets),
        "Entrance gates": (["Gate", "Width", "Crest range"], gates),
        "Auxiliary water": (["Source", "Supply", "Into pool", "Diffuser"], aux),
        "Rate limits (largest change per adjustment)": (["Actuator", "Limit"], rates),
        "Controls and pools (exit to entrance)": (
            ["Control", "Type", "Opening", "Pool below", "Pool floor", "Length", "Width"], pools),
    }


# -- users ----------------------------------------------------------------------------------------
def users_rows(engine: Any, time_zone: str) -> list[dict[str, str]]:
    """Every account as display rows (name, role, created, active)."""
    frame = users_frame(engine)
    return [{"name": str(name), "role": str(r["role"]),
             "created": r["created_at"].tz_convert(time_zone).strftime("%Y-%m-%d"),
             "active": "yes" if r["active"] else "no"} for name, r in frame.iterrows()]


def add_account(engine: Any, user: Mapping[str, str], name: str, role: str, password: str,
                *, now: datetime) -> str:
    """Create an account (``dashboard.auth.create_user``), log who did it; the message.
    ValueError for a bad name, role or password, or a name in use."""
    from dashboard.auth import create_user

    create_user(engine, (name or "").strip(), role, password or "")
    add_log_entry(engine, now, user["name"], "shift_note",
                  text=f"Account {name.strip()} created with role {role}")
    return f"account {name.strip()} created with role {role}"
