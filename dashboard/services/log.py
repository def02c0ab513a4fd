"""Service of the operator log page: checking and storing entries, and listing them.

Entries (``operator_log``, append-only: the database refuses UPDATE and DELETE):

* **adjustment** — one entry per actuator moved: ``actuator`` is the setting name of
  :class:`~ops_logic.ladder.Ladder` (``entrance_E1_crest_m``, ``aux_G1_opening_pct``...),
  ``from_value``/``to_value`` its SI values, ``text`` why. The same setting is recorded in
  ``actuator_settings`` (source ``recommendation`` with its id when the change carried one
  out, else ``manual``), which is what the alarm rules compare positions with.
* **observation** — a staff gauge reading, debris cleaned, fish behaviour at the entrance, or
  another observation; the topic leads the text (``"Debris cleaned (trash rack): …"``).
  A staff gauge reading is also stored as a reading of a manual tag
  ``<fishway>.<forebay|tailwater|pool id>.staff`` (catalogue source ``manual``, role
  ``staff_gauge``, created at its first use; QARTOD flag 2, not evaluated) and is checked
  against the gauge sensor's reading nearest in time (within :data:`SENSOR_WINDOW_S`): the
  entry keeps ``actuator = "staff_gauge:<where>"``, ``to_value`` the staff reading and
  ``from_value`` the sensor value [m], and its text states the difference; a difference above
  the fishway's gauge tolerance (``alarms.gauge_disagree.limit_m``, 0.03 m ≈ 0.1 ft by
  default) is flagged in the text and on the list.
* **shift_note** — text.
* **correction** — text and ``refers_to``, the id of the entry it corrects (a mistake is never
  edited or deleted).

Every entry records its author, the signed-in user; writing needs the operator role, checked
by the page's callback (:func:`dashboard.auth.require`) before :func:`submit` is called.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from zoneinfo import ZoneInfo

import pandas as pd
from sqlalchemy.exc import IntegrityError

from dashboard.context import AppContext
from dashboard.services.profile import fishway_db_id, local_time_text
from db.catalog import add_tag, tag_id
from db.dashboard_queries import (
    corrections_of,
    fishway_db_ids,
    log_entries,
    log_entry,
    reading_near,
    recommendation,
)
from db.history import add_log_entry, record_actuator_setting
from db.readings import store_batch
from db.status.store import renew_status
from ops_logic.ladder import Ladder, SettingError
from ops_logic.report_format import format_setting, format_value, setting_range_text
from ops_logic.tags import gauged_pools
from ops_logic.units import UnitSystem, display_unit, from_si, to_si

__all__ = [
    "DEBRIS_PLACES",
    "KINDS",
    "MAX_TEXT",
    "SENSOR_WINDOW_S",
    "TOPICS",
    "EntryView",
    "LogForm",
    "SubmitResult",
    "gauge_locations",
    "list_entries",
    "manual_tag_name",
    "parse_when",
    "prefill",
    "submit",
]

KINDS = {"adjustment": "Adjustment", "observation": "Observation", "shift_note": "Shift note",
         "correction": "Correction"}
TOPICS = {"staff_gauge": "Staff gauge reading", "debris": "Debris cleaned",
          "fish_entrance": "Fish behaviour at the entrance", "other": "Other observation"}
DEBRIS_PLACES = ("trash rack", "counting-window pickets", "diffuser gratings", "entrance",
                 "exit", "other")
SENSOR_WINDOW_S = 300.0
"""A staff gauge reading is compared with the sensor reading nearest in time within ± 5 min."""
MAX_TEXT = 4000
"""Longest text of an entry [characters]."""
FUTURE_SLACK = timedelta(minutes=5)


@dataclass(frozen=True)
class LogForm:
    """What the log form sends (text as typed; values in the site's display units)."""

    kind: str
    fishway_id: str
    when: str = ""
    text: str = ""
    topic: str = "staff_gauge"
    gauge_where: str | None = None
    gauge_reading: str = ""
    debris_place: str | None = None
    adjustments: Mapping[str, tuple[str, str]] = field(default_factory=dict)
    """setting name → (from, to) as typed; a row without a *to* is not an adjustment."""
    refers_to: str = ""
    recommendation_id: int | None = None


@dataclass(frozen=True)
class SubmitResult:
    ids: tuple[int, ...] = ()
    problems: tuple[str, ...] = ()
    messages: tuple[str, ...] = ()

    @property
    def ok(self) -> bool:
        return not self.problems and bool(self.ids)


@dataclass(frozen=True)
class EntryView:
    """One entry as the list shows it (all text: it is rendered as text, never markup)."""

    id: int
    when: str
    author: str
    kind: str
    fishway: str
    details: str
    text: str
    flagged: bool
    refers_to: int | None
    corrected_by: tuple[int, ...]


def manual_tag_name(fishway_id: str, where: str) -> str:
    """Name of the manual (staff gauge) tag at ``where``: ``forebay``, ``tailwater`` or a pool.

    >>> manual_tag_name("east", "P10")
    'east.P10.staff'
    """
    return f"{fishway_id}.{where}.staff"


def _sensor_tag_name(fishway_id: str, where: str) -> str:
    if where in ("forebay", "tailwater"):
        return f"{fishway_id}.{where}_level"
    return f"{fishway_id}.{where}.level"


def gauge_locations(ladder: Ladder) -> list[tuple[str, str]]:
    """Where a staff gauge can be read: forebay, tailwater, and each gauged pool.

    >>> from ops_logic.site import load_site
    >>> [w for w, _ in gauge_locations(Ladder.from_site(load_site(), "east"))][:4]
    ['forebay', 'tailwater', 'P01', 'P10']
    """
    pools, _ = gauged_pools(ladder.fishway)
    return [("forebay", "Forebay"), ("tailwater", "Tailwater"),
            *((p, f"Pool {p}") for p in pools)]


def parse_when(text: str | None, now: datetime, time_zone: str) -> datetime:
    """The time of an entry: empty is ``now``; ``HH:MM`` today (site time, or yesterday when
    that would be in the future); ``YYYY-MM-DD HH:MM`` in site time. A time more than five
    minutes ahead of ``now`` is refused.

    >>> from datetime import UTC
    >>> now = datetime(2026, 7, 15, 12, 0, tzinfo=UTC)
    >>> parse_when("03:30", now, "Etc/GMT+8").isoformat()      # 03:30 at UTC−8
    '2026-07-15T11:30:00+00:00'
    >>> parse_when("2026-07-14 23:00", now, "UTC").isoformat()
    '2026-07-14T23:00:00+00:00'
    """
    if text is None or not text.strip():
        return now
    tz = ZoneInfo(time_zone)
    raw = text.strip().replace("T", " ")
    local_now = now.astimezone(tz)
    try:
        if len(raw) <= 5:
            t = datetime.strptime(raw, "%H:%M")
            when = local_now.replace(hour=t.hour, minute=t.minute, second=0, microsecond=0)
            if when > local_now + FUTURE_SLACK:
                when -= timedelta(days=1)
        else:
            when = datetime.strptime(raw, "%Y-%m-%d %H:%M").replace(tzinfo=tz)
    except ValueError:
        raise ValueError(f"time {text!r}: give HH:MM or YYYY-MM-DD HH:MM (site time)") from None
    if when > local_now + FUTURE_SLACK:
        raise ValueError(f"time {text!r} is in the future")
    return when.astimezone(now.tzinfo)


def _setting_value(ladder: Ladder, name: str, text: str, units: UnitSystem) -> float:
    spec = ladder.settings[name]
    raw = text.strip()
    value = (to_si(raw, "length", units) if spec.kind == "level"
             else float(raw.rstrip("%").strip()))
    if not math.isfinite(value):
        raise ValueError("not a finite number")
    try:
        ladder.check_settings({name: value})
    except SettingError as exc:
        if "outside" not in str(exc):  # e.g. not a whole number of pumps
            raise ValueError(str(exc).replace(name, spec.label)) from None
        shown = (f"{value:g} pumps" if spec.kind == "count" else
                 format_setting(spec, value, units, with_si=False))
        raise ValueError(f"{shown} is outside {setting_range_text(spec, units)}") from None
    return float(round(value)) if spec.kind == "count" else value


def _check_text(text: str, required: bool, what: str, problems: list[str]) -> str:
    text = (text or "").strip()
    if required and not text:
        problems.append(f"{what}: write a few words")
    if len(text) > MAX_TEXT:
        problems.append(f"{what}: at most {MAX_TEXT} characters (got {len(text)})")
    return text


def submit(ctx: AppContext, author: str, form: LogForm, now: datetime) -> SubmitResult:
    """Check the form and append its entries as ``author``; nothing is stored when a field is
    wrong (the result lists one problem per bad field, naming it)."""
    problems: list[str] = []
    if form.kind not in KINDS:
        return SubmitResult(problems=(f"Kind: unknown kind {form.kind!r}",))
    if form.fishway_id not in ctx.ladders:
        return SubmitResult(problems=(f"Fishway: unknown fishway {form.fishway_id!r}",))
    ladder = ctx.ladder(form.fishway_id)
    try:
        when = parse_when(form.when, now, ctx.site.site.time_zone)
    except ValueError as exc:
        problems.append(f"Time: {exc}")
        when = now
    fw = fishway_db_id(ctx, form.fishway_id)
    if form.kind == "adjustment":
        result = _adjustments(ctx, ladder, fw, author, form, when, problems)
        if result.ok:  # the overview's adjustment-due judgement may change at once
            renew_status(ctx.site, ctx.engine, now)
        return result
    if form.kind == "observation":
        return _observation(ctx, ladder, fw, author, form, when, problems)
    if form.kind == "shift_note":
        text = _check_text(form.text, True, "Note", problems)
        if problems:
            return SubmitResult(problems=tuple(problems))
        return SubmitResult(ids=(add_log_entry(ctx.engine, when, author, "shift_note",
                                               text=text, fishway_id=fw),),
                            messages=("Shift note saved.",))
    text = _check_text(form.text, True, "Correction", problems)
    ref = None
    try:
        ref = int(str(form.refers_to).strip().lstrip("#"))
    except ValueError:
        problems.append("Corrects entry: give the number (#) of the entry it corrects")
    target = log_entry(ctx.engine, ref) if ref is not None else None
    if ref is not None and target is None:
        problems.append(f"Corrects entry: there is no entry #{ref}")
    if problems:
        return SubmitResult(problems=tuple(problems))
    assert target is not None
    new = add_log_entry(ctx.engine, when, author, "correction", text=text,
                        fishway_id=target["fishway_id"], refers_to=ref)
    return SubmitResult(ids=(new,), messages=(f"Correction #{new} of entry #{ref} saved.",))


def _adjustments(ctx: AppContext, ladder: Ladder, fw: int, author: str, form: LogForm,
                 when: datetime, problems: list[str]) -> SubmitResult:
    units = ctx.units
    why = _check_text(form.text, True, "Why", problems)
    rows: list[tuple[str, float | None, float]] = []
    for name, (from_text, to_text) in form.adjustments.items():
        if name not in ladder.settings:
            problems.append(f"{name}: not a setting of {ladder.fishway.name}")
            continue
        label = ladder.settings[name].label
        if not (to_text or "").strip():
            continue
        try:
            to_v = _setting_value(ladder, name, to_text, units)
        except ValueError as exc:
            problems.append(f"{label}, to: {exc}")
            continue
        from_v = None
        if (from_text or "").strip():
            try:
                from_v = _setting_value(ladder, name, from_text, units)
            except ValueError as exc:
                problems.append(f"{label}, from: {exc}")
                continue
        rows.append((name, from_v, to_v))
    if not rows and not problems:
        problems.append("Adjustment: give the new value (to) of at least one actuator")
    rec_id = form.recommendation_id
    if rec_id is not None:
        rec = recommendation(ctx.engine, rec_id)
        if rec is None or rec["fishway_id"] != fw:
            problems.append(f"Recommendation: #{rec_id} is not a recommendation for "
                            f"{ladder.fishway.name}")
    if problems:
        return SubmitResult(problems=tuple(problems))
    ids, messages = [], []
    for name, from_v, to_v in rows:
        spec = ladder.settings[name]
        ids.append(add_log_entry(ctx.engine, when, author, "adjustment", text=why,
                                 fishway_id=fw, actuator=name, from_value=from_v,
                                 to_value=to_v))
        record_actuator_setting(ctx.engine, fw, when, name, to_v, set_by=author,
                                source="recommendation" if rec_id is not None else "manual",
                                unit=spec.unit, recommendation_id=rec_id,
                                note=f"operator log #{ids[-1]}")
        messages.append(f"#{ids[-1]}: {spec.label} → "
                        f"{format_setting(spec, to_v, units, with_si=False)}")
    return SubmitResult(ids=tuple(ids), messages=("Adjustment saved: " + "; ".join(messages),))


def _manual_tag(ctx: AppContext, fw: int, fishway_id: str, where: str) -> int:
    name = manual_tag_name(fishway_id, where)
    try:
        return tag_id(ctx.engine, name)
    except KeyError:
        pass
    try:
        return add_tag(ctx.engine, fw, name, "water_level", "m", poll_period_s=86400.0,
                       source="manual", role="staff_gauge",
                       pool_id=None if where in ("forebay", "tailwater") else where,
                       description=f"staff gauge at {where}, read by hand (operator log)")
    except IntegrityError:  # created meanwhile by another request: use that one
        return tag_id(ctx.engine, name)


def _observation(ctx: AppContext, ladder: Ladder, fw: int, author: str, form: LogForm,
                 when: datetime, problems: list[str]) -> SubmitResult:
    units = ctx.units
    if form.topic not in TOPICS:
        return SubmitResult(problems=(f"Observation: unknown topic {form.topic!r}",))
    if form.topic != "staff_gauge":
        text = _check_text(form.text, True, "Observation", problems)
        head = TOPICS[form.topic]
        if form.topic == "debris":
            if form.debris_place not in DEBRIS_PLACES:
                problems.append("Debris cleaned: say where (trash rack, pickets…)")
            head += f" ({form.debris_place})"
        if problems:
            return SubmitResult(problems=tuple(problems))
        new = add_log_entry(ctx.engine, when, author, "observation", text=f"{head}: {text}",
                            fishway_id=fw)
        return SubmitResult(ids=(new,), messages=(f"Observation #{new} saved.",))
    places = dict(gauge_locations(ladder))
    text = _check_text(form.text, False, "Remarks", problems)
    if form.gauge_where not in places:
        problems.append("Staff gauge: choose where it was read")
    value = None
    try:
        value = to_si(form.gauge_reading, "length", units)
        if not math.isfinite(value):
            raise ValueError("not a finite number")
    except ValueError as exc:
        problems.append(f"Staff gauge reading: {exc}" if (form.gauge_reading or "").strip()
                        else f"Staff gauge reading: give the level in "
                             f"{display_unit('length', units)}")
    if problems:
        return SubmitResult(problems=tuple(problems))
    assert value is not None and form.gauge_where is not None
    where = form.gauge_where
    tol = ladder.fishway.alarms.gauge_disagree.limit_m
    sensor_name = _sensor_tag_name(form.fishway_id, where)
    try:
        sensor = reading_near(ctx.engine, tag_id(ctx.engine, sensor_name), when,
                              SENSOR_WINDOW_S)
    except KeyError:
        sensor = None
    f = lambda v: format_value(v, "length", units)  # noqa: E731
    line = f"{places[where]} staff gauge read {f(value)}"
    sensor_value = None
    flagged = False
    if sensor is None:
        line += f"; no sensor reading of {sensor_name} within ±{SENSOR_WINDOW_S / 60:.0f} min"
    else:
        sensor_value = sensor["value"]
        diff = value - sensor_value
        flagged = abs(diff) > tol
        qc = {3: " (QC: suspect)", 4: " (QC: fail)"}.get(sensor["flag"], "")
        line += (f"; sensor {sensor_name} {f(sensor_value)}{qc} at "
                 f"{local_time_text(sensor['ts'], ctx)}; difference {f(diff)}")
        line += (f" — more than the {f(tol)} tolerance: FLAGGED" if flagged else
                 f", within the {f(tol)} tolerance")
    manual = _manual_tag(ctx, fw, form.fishway_id, where)
    stored = store_batch(ctx.engine, [(manual, when, value, 2)])
    if not stored:
        line += "; a manual reading at this time was stored already (kept)"
    full = line + "." + (f"\n{text}" if text else "")
    new = add_log_entry(ctx.engine, when, author, "observation", text=full, fishway_id=fw,
                        actuator=f"staff_gauge:{where}", from_value=sensor_value,
                        to_value=value)
    msg = f"Observation #{new} saved: {line}."
    return SubmitResult(ids=(new,), messages=(msg,))


# -- prefill from the URL ----------------------------------------------------------------------
def prefill(ctx: AppContext, query: Mapping[str, object]) -> dict[str, object]:
    """Initial form values from the page's URL query: ``kind``, ``fishway``, ``rec`` (a stored
    recommendation's id), ``set=<setting>:<from SI>:<to SI>`` (repeated) and ``refers_to``.
    Unknown or malformed values are dropped (the URL may be typed or crafted).

    >>> from types import SimpleNamespace
    >>> from ops_logic.site import load_site
    >>> site = load_site()
    >>> c = SimpleNamespace(site=site, units="us", ladders={"east": Ladder.from_site(site, "east")},
    ...                     ladder=lambda f: c.ladders[f])
    >>> p = prefill(c, {"kind": "adjustment", "fishway": "east",
    ...                 "set": ["aux_G1_opening_pct:40:55", "bogus:1:2"]})
    >>> p["kind"], p["adjustments"]
    ('adjustment', {'aux_G1_opening_pct': ('40.0', '55.0')})
    """
    def one(key: str) -> str | None:  # a repeated key arrives as a list: take the first
        v = query.get(key)
        v = v[0] if isinstance(v, list | tuple) and v else v
        return v if isinstance(v, str) else None

    out: dict[str, object] = {}
    fishways = [f.id for f in ctx.site.fishways]
    fishway = one("fishway")
    out["fishway"] = fishway if fishway in fishways else fishways[0]
    kind = one("kind")
    out["kind"] = kind if kind in KINDS else "shift_note"
    ladder = ctx.ladder(out["fishway"])  # type: ignore[arg-type]
    sets = query.get("set") or []
    sets = [sets] if isinstance(sets, str) else list(sets)  # type: ignore[arg-type]
    adjustments: dict[str, tuple[str, str]] = {}
    for item in sets:
        parts = str(item).split(":")
        if len(parts) != 3 or parts[0] not in ladder.settings:
            continue
        try:
            a, b = float(parts[1]), float(parts[2])
        except ValueError:
            continue
        if not (math.isfinite(a) and math.isfinite(b)):
            continue
        spec = ladder.settings[parts[0]]
        adjustments[parts[0]] = (_input_text(spec.kind, a, ctx.units),
                                 _input_text(spec.kind, b, ctx.units))
    out["adjustments"] = adjustments
    rec = one("rec")
    out["rec"] = int(rec) if rec is not None and rec.isdigit() else None
    ref = one("refers_to")
    out["refers_to"] = ref if ref is not None and ref.isdigit() else ""
    if adjustments:
        out["text"] = ("As recommended" + (f" (recommendation #{out['rec']})" if out["rec"]
                                           else " on the setpoints page") + ".")
    return out


def _input_text(kind: str, value: float, units: UnitSystem) -> str:
    if kind == "level":
        return f"{from_si(value, 'length', units):.2f}"
    return f"{value:.0f}" if kind == "count" else f"{value:.1f}"


# -- listing -----------------------------------------------------------------------------------
def _details(ctx: AppContext, row: pd.Series, ladder_of: Mapping[int, Ladder]) -> tuple[str,
                                                                                        bool]:
    units = ctx.units
    actuator = row["actuator"] if isinstance(row["actuator"], str) else ""
    ladder = ladder_of.get(row["fishway_id"]) if pd.notna(row["fishway_id"]) else None
    fv = None if pd.isna(row["from_value"]) else float(row["from_value"])
    tv = None if pd.isna(row["to_value"]) else float(row["to_value"])
    if row["kind"] == "adjustment" and ladder is not None and actuator in ladder.settings:
        spec = ladder.settings[actuator]
        a = format_setting(spec, fv, units, with_si=False) if fv is not None else "?"
        b = format_setting(spec, tv, units, with_si=False) if tv is not None else "?"
        return f"{spec.label}: {a} → {b}", False
    if row["kind"] == "adjustment":
        return f"{actuator}: {fv} → {tv}", False
    if actuator.startswith("staff_gauge:") and tv is not None:
        where = actuator.split(":", 1)[1]
        text = f"Staff gauge {where}: {format_value(tv, 'length', units, with_si=False)}"
        if fv is None:
            return text + " (no sensor reading to compare)", False
        diff = tv - fv
        tol = ladder.fishway.alarms.gauge_disagree.limit_m if ladder else 0.03
        text += (f", sensor {format_value(fv, 'length', units, with_si=False)}, difference "
                 f"{format_value(diff, 'length', units, with_si=False)}")
        return text, abs(diff) > tol
    if row["kind"] == "correction" and pd.notna(row["refers_to"]):
        return f"corrects #{int(row['refers_to'])}", False
    return "", False


def list_entries(ctx: AppContext, now: datetime, *, fishway_id: str | None = None,
                 kinds: Sequence[str] | None = None, author: str | None = None,
                 text: str | None = None, period_h: float | None = 24 * 7,
                 limit: int = 200) -> list[EntryView]:
    """Entries newest first, filtered (``period_h`` None: all time)."""
    ids = fishway_db_ids(ctx.engine, ctx.site.site.name)
    names = {v: k for k, v in ids.items()}
    ladder_of = {v: ctx.ladder(k) for k, v in ids.items() if k in ctx.ladders}
    frame = log_entries(
        ctx.engine, start=None if period_h is None else now - timedelta(hours=period_h),
        fishway_id=ids.get(fishway_id) if fishway_id else None,
        kinds=[k for k in (kinds or []) if k in KINDS] or None,
        author=(author or "").strip() or None, text=(text or "").strip() or None, limit=limit)
    fixes = corrections_of(ctx.engine, frame["id"].tolist()) if len(frame) else {}
    out = []
    for ts, row in frame.iterrows():
        details, flagged = _details(ctx, row, ladder_of)
        fw = row["fishway_id"]
        out.append(EntryView(
            int(row["id"]), local_time_text(ts.to_pydatetime(), ctx), str(row["author"]),
            KINDS.get(row["kind"], row["kind"]),
            ctx.ladder(names[int(fw)]).fishway.name if pd.notna(fw) and int(fw) in names
            and names[int(fw)] in ctx.ladders else "—",
            details, str(row["text"] or ""), flagged,
            int(row["refers_to"]) if pd.notna(row["refers_to"]) else None,
            tuple(fixes.get(int(row["id"]), ()))))
    return out
