"""The alarm engine's inputs read from the database: :class:`InputReader`.

One :meth:`InputReader.read` builds an :class:`~ops_logic.alarms.inputs.AlarmInputs` with a
fixed number of queries, whatever the number of tags (no query per tag):

1. the newest reading of every tag of the site with its QARTOD flag (the query of
   :func:`db.readings.latest_values`): ``TagValue(value, flag, age_s = now − its time)``
   (NaN for a missing value);
2. every feed's health (the ``feed_health`` rows, :mod:`db.feed_health`): ``FeedStatus(ok,
   last success, error)``, ``ok`` when the last success is not older than the last error;
3. the newest stored recommendation of each fishway (one query for all), used when it is no
   older than :data:`RECOMMENDATION_MAX_AGE_CYCLES` recommender periods (``[ingest]
   recommend_seconds``): its ``settings`` become the ``changes`` the adjustment-due rule
   compares (its predicted profile is stored only as a summary and is not rebuilt; the rules
   use the changes only, and ``profile`` holds the current solved profile);
4. the newest logged actuator setting of each actuator (one query for all fishways; matched
   to a setting by setting name or actuator id);
5. at most every :data:`TEMPERATURE_REFRESH_S`: the 15-minute maxima of the usable water
   temperature readings (flag 1 or 2) over the last seven local days, for the 7DADM
   (:func:`~ops_logic.alarms.temperature.seven_day_average_daily_max` in the site's time
   zone; the seventh day is today so far; missing days leave it undefined).

Per fishway it then sets ``current_settings`` — the settings *last logged* (the engine's
actuator-mismatch rule compares them with the positions), and for an actuator never logged its
position tag's newest usable reading — and solves the **current profile**
(:meth:`ops_logic.ladder.Ladder.solve`, warm-started from the previous cycle's) from the usable
forebay and tailwater gauges, the water temperature (else the solver's 10 °C) and the actual
positions (position tags, clipped to each actuator's range, pump counts rounded; else the
logged setting). The ladder solved carries the targets in force (the evaluator hands them over,
:meth:`InputReader.use_fishways`), so a supervisor's target override sets the bands of this
profile's criteria; alarm-limit and mode changes reach the engine through
:mod:`db.alarm.overrides`. Without a usable forebay or tailwater, or a position for
every setting, there is no profile and the hydraulic rules say so (``not_evaluated``); the
reason is in :attr:`InputReader.problems`. A *usable* reading has flag 1 or 2 and is no older
than the fishway's ``stale_tag.max_age_s``.

The forebay the ladder sees is the water level upstream of its exit control: the forebay
gauge less the trash-rack head loss (the ``trash_rack_dp`` tag measures forebay to exit),
``forebay − max(loss, 0)``, when that reading is usable, else the forebay gauge itself; a loss
above :data:`~ops_logic.ladder.MAX_TRASH_RACK_LOSS_M` is refused and the forebay gauge used
(:func:`ops_logic.ladder.ladder_forebay`). A refused loss is named in
:attr:`InputReader.problems`; the profile's ``forebay_m`` is the level used. The alarm rules
take the measured exit weir head from the same rule
(:func:`ops_logic.alarms.rules.evaluate_rules`).

The fishway's mode is not an input here: it is kept in the engine state (operator actions and
:mod:`db.alarm.overrides`).
"""
from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from datetime import datetime, timedelta
from zoneinfo import ZoneInfo

import numpy as np
import pandas as pd
import sqlalchemy as sa
from sqlalchemy.engine import Connection, Engine

from db.alarm.store import SiteIds
from db.models import ActuatorSetting, FeedHealth
from db.models import Recommendation as RecommendationRow
from db.types import to_utc
from ops_logic.alarms.inputs import AlarmInputs, FeedStatus, FishwayInputs, TagValue
from ops_logic.alarms.temperature import seven_day_average_daily_max
from ops_logic.ladder import Ladder, SettingError, ladder_forebay
from ops_logic.profile import Profile
from ops_logic.recommend import Recommendation, SettingChange
from ops_logic.site import Fishway, Site
from ops_logic.tags import TagDef

__all__ = ["DEFAULT_TEMPERATURE_C", "RECOMMENDATION_MAX_AGE_CYCLES", "TEMPERATURE_REFRESH_S",
           "InputReader", "feed_status"]

DEFAULT_TEMPERATURE_C = 10.0
"""Water temperature for the profile without a usable reading [°C] (the solver's default)."""
RECOMMENDATION_MAX_AGE_CYCLES = 3.0
"""A stored recommendation counts for this many recommender periods."""
TEMPERATURE_REFRESH_S = 900.0
"""The 7DADM is recomputed at most this often [s] (the 15-minute maxima it is built on)."""
_BUCKET_MS = 900_000


def feed_status(row: Mapping[str, object]) -> FeedStatus:
    """A feed's :class:`FeedStatus` from its ``feed_health`` row: failed while its last error
    is newer than its last success.

    >>> from datetime import UTC, datetime
    >>> t = datetime(2026, 7, 1, tzinfo=UTC)
    >>> st = feed_status({"last_success_at": t, "last_error_at": t.replace(hour=1),
    ...                   "last_error": "timed out"})
    >>> st.ok, st.last_success == t, st.error
    (False, True, 'timed out')
    """
    def when(x: object) -> datetime | None:
        return None if x is None or pd.isna(x) else pd.Timestamp(x).to_pydatetime()

    ok_at, err_at = when(row.get("last_success_at")), when(row.get("last_error_at"))
    ok = ok_at is not None and (err_at is None or ok_at >= err_at)
    error = "" if ok else str(row.get("last_error") or ("no successful read yet"
                                                        if ok_at is None else ""))
    return FeedStatus(ok, ok_at, error)


class InputReader:
    """Builds the alarm inputs of ``site`` from the database; see the module docstring."""

    def __init__(self, engine: Engine, site: Site, ids: SiteIds, tags: list[TagDef]):
        self.engine, self.site, self.ids = engine, site, ids
        self.tags = tags
        self.ladders = {f.id: Ladder(f, units=site.site.units) for f in site.fishways}
        self._tag_ids = [ids.tags[t.name] for t in tags if t.name in ids.tags]
        self._by_id = {ids.tags[t.name]: t.name for t in tags if t.name in ids.tags}
        self._role: dict[tuple[str, str], list[TagDef]] = {}
        for t in tags:
            self._role.setdefault((t.fishway_id, t.role), []).append(t)
        self._statements()
        self._profiles: dict[str, Profile] = {}
        self._profile_keys: dict[str, tuple] = {}
        self._temp_at: int | None = None
        self._temp: dict[str, float | None] = {}
        self.problems: list[str] = []
        """Why a profile, a 7DADM or a recommendation is missing, after the last read."""

    def use_fishways(self, fishways: Sequence[Fishway]) -> None:
        """Solve with these fishway models from now on (the targets in force; same ids)."""
        self.ladders = {f.id: Ladder(f, units=self.site.site.units) for f in fishways}
        self._profiles.clear()  # warm starts and cached profiles belong to the old ladders
        self._profile_keys.clear()

    # -- queries (built once: SQLAlchemy then reuses their compiled form) -------------------
    def _statements(self) -> None:
        fishway_ids = sorted(self.ids.fishways.values())
        self._latest_sql = sa.text(
            "SELECT r.tag_id, r.ts_ms, r.value, r.flag FROM tags t JOIN readings r "
            "ON r.tag_id = t.id AND r.ts_ms = (SELECT max(m.ts_ms) FROM readings m "
            "WHERE m.tag_id = t.id) WHERE t.id IN :ids"
        ).bindparams(sa.bindparam("ids", expanding=True))
        h = FeedHealth.__table__
        self._health_sql = sa.select(h.c.feed, h.c.last_success_at, h.c.last_error_at,
                                     h.c.last_error).where(
            h.c.feed.in_([fd.id for fd in self.site.ingest.feeds]))
        t = RecommendationRow.__table__
        m = t.alias("m")
        newest = (sa.select(sa.func.max(m.c.ts)).where(m.c.fishway_id == t.c.fishway_id)
                  .scalar_subquery())
        self._rec_sql = (sa.select(t.c.fishway_id, t.c.id, t.c.ts, t.c.inputs, t.c.settings,
                                   t.c.feasible, t.c.binding_constraint, t.c.reason)
                         .where(t.c.fishway_id.in_(fishway_ids), t.c.ts == newest,
                                t.c.ts >= sa.bindparam("since", type_=t.c.ts.type))
                         .order_by(t.c.id))
        a = ActuatorSetting.__table__
        m = a.alias("m")
        newest = (sa.select(sa.func.max(m.c.ts)).where(m.c.fishway_id == a.c.fishway_id,
                                                       m.c.actuator == a.c.actuator)
                  .scalar_subquery())
        self._logged_sql = (sa.select(a.c.fishway_id, a.c.actuator, a.c.value)
                            .where(a.c.fishway_id.in_(fishway_ids), a.c.ts == newest)
                            .order_by(a.c.id))

    def _recommendations(self, conn: Connection, since: datetime) -> dict[int, dict]:
        return {int(r.fishway_id): dict(r._mapping)
                for r in conn.execute(self._rec_sql, {"since": to_utc(since)})}

    def _logged(self, conn: Connection) -> dict[int, dict[str, float]]:
        out: dict[int, dict[str, float]] = {}
        for fw, actuator, value in conn.execute(self._logged_sql):
            out.setdefault(int(fw), {})[str(actuator)] = float(value)
        return out

    def _seven_day(self, conn: Connection, now: datetime) -> dict[str, float | None]:
        bucket = int(to_utc(now).timestamp() * 1000) // int(TEMPERATURE_REFRESH_S * 1000)
        if bucket == self._temp_at:
            return self._temp
        tz = ZoneInfo(self.site.site.time_zone)
        local = now.astimezone(tz)
        first_day = (local - timedelta(days=6)).replace(hour=0, minute=0, second=0,
                                                        microsecond=0)
        since_ms = int(first_day.timestamp() * 1000)
        temp_tags = {f.id: self._role.get((f.id, "water_temp"), [None])[0]
                     for f in self.site.fishways}
        ids = {self.ids.tags[t.name]: fid for fid, t in temp_tags.items()
               if t is not None and t.name in self.ids.tags}
        frames: dict[str, list[tuple[int, float]]] = {fid: [] for fid in temp_tags}
        if ids:
            stmt = sa.text(
                "SELECT tag_id, ts_ms / :b AS k, max(value) FROM readings "
                "WHERE tag_id IN :ids AND ts_ms >= :since AND ts_ms <= :now "
                "AND flag IN (1, 2) AND value IS NOT NULL GROUP BY tag_id, ts_ms / :b"
            ).bindparams(sa.bindparam("ids", expanding=True))
            rows = conn.execute(stmt, {"b": _BUCKET_MS, "ids": sorted(ids), "since": since_ms,
                                       "now": int(to_utc(now).timestamp() * 1000)})
            for tag_id, k, vmax in rows:
                frames[ids[int(tag_id)]].append((int(k) * _BUCKET_MS, float(vmax)))
        out: dict[str, float | None] = {}
        today = local.date()
        for fid, rows_ in frames.items():
            if not rows_:
                out[fid] = None
                continue
            times = pd.to_datetime([r[0] for r in rows_], unit="ms", utc=True)
            try:
                series = seven_day_average_daily_max(times, [r[1] for r in rows_],
                                                     time_zone=self.site.site.time_zone)
            except ValueError as exc:
                self.problems.append(f"{fid}: 7DADM not computed: {exc}")
                out[fid] = None
                continue
            value = series.get(today)
            out[fid] = float(value) if value is not None and np.isfinite(value) else None
        self._temp_at, self._temp = bucket, out
        return out

    # -- building the inputs -----------------------------------------------------------------
    def read(self, now: datetime) -> AlarmInputs:
        """The inputs of an evaluation at ``now`` (tz-aware); see the module docstring."""
        now = to_utc(now)
        self.problems = []
        max_age = RECOMMENDATION_MAX_AGE_CYCLES * self.site.ingest.recommend_seconds
        now_ms = int(now.timestamp() * 1000)
        readings: dict[str, TagValue] = {}
        with self.engine.connect() as conn:
            if self._tag_ids:
                for tag_id, ts_ms, value, flag in conn.execute(self._latest_sql,
                                                               {"ids": self._tag_ids}):
                    name = self._by_id.get(int(tag_id))
                    if name is not None:
                        readings[name] = TagValue(float("nan") if value is None else value,
                                                  int(flag), max(now_ms - int(ts_ms), 0) / 1000)
            feeds = {str(r.feed): feed_status(r._mapping) for r in conn.execute(self._health_sql)}
            recs = self._recommendations(conn, now - timedelta(seconds=max_age))
            logged = self._logged(conn)
            temps = self._seven_day(conn, now)
        fishways = {}
        for f in self.site.fishways:
            db_id = self.ids.fishways.get(f.id)
            fishways[f.id] = self._fishway(f.id, readings, logged.get(db_id, {}),
                                           recs.get(db_id), temps.get(f.id), now)
        return AlarmInputs(readings, fishways, feeds)

    def _usable(self, readings: Mapping[str, TagValue], fid: str, role: str,
                max_age_s: float, setting: str | None = None) -> TagValue | None:
        for t in self._role.get((fid, role), []):
            if setting is not None and t.setting != setting:
                continue
            r = readings.get(t.name)
            if r is not None and r.usable(max_age_s):
                return r
        return None

    def _fishway(self, fid: str, readings: Mapping[str, TagValue], logged: Mapping[str, float],
                 rec_row: dict | None, temp_7dadm_c: float | None,
                 now: datetime) -> FishwayInputs:
        ladder = self.ladders[fid]
        max_age = ladder.fishway.alarms.stale_tag.max_age_s
        positions: dict[str, float] = {}
        current: dict[str, float] = {}
        for name, spec in ladder.settings.items():
            r = self._usable(readings, fid, "setting", max_age, setting=name)
            log = next((logged[k] for k in (name, spec.actuator) if k in logged), None)
            if r is not None:
                v = min(max(r.value, spec.low), spec.high)
                positions[name] = float(round(v)) if spec.kind == "count" else v
            elif log is not None:
                v = min(max(log, spec.low), spec.high)
                positions[name] = float(round(v)) if spec.kind == "count" else v
            if log is not None:
                current[name] = log
            elif r is not None:
                current[name] = r.value
        profile = self._profile(fid, ladder, readings, positions, max_age)
        rec = self._recommendation(fid, ladder, rec_row, current, profile)
        return FishwayInputs(profile, rec, current, temp_7dadm_c)

    def _profile(self, fid: str, ladder: Ladder, readings: Mapping[str, TagValue],
                 positions: Mapping[str, float], max_age: float) -> Profile | None:
        fb = self._usable(readings, fid, "forebay", max_age)
        tw = self._usable(readings, fid, "tailwater", max_age)
        missing = [n for n in ladder.settings if n not in positions]
        if fb is None or tw is None or missing:
            what = [w for w, r in (("forebay", fb), ("tailwater", tw)) if r is None] + missing
            self.problems.append(f"{fid}: no profile: no usable reading of {', '.join(what)}")
            self._profiles.pop(fid, None)
            return None
        dp = self._usable(readings, fid, "trash_rack_dp", max_age)
        temp = self._usable(readings, fid, "water_temp", max_age)
        exit_fb = ladder_forebay(fb.value, dp.value if dp is not None else None)
        if dp is not None and exit_fb.loss_m is None:
            self.problems.append(f"{fid}: the profile uses the {exit_fb.source}")
        forebay = exit_fb.level_m
        temperature = temp.value if temp else DEFAULT_TEMPERATURE_C
        key = (forebay, tw.value, temperature, tuple(sorted(positions.items())))
        if fid in self._profiles and self._profile_keys.get(fid) == key:
            return self._profiles[fid]  # the same inputs as last time (a second evaluation)
        try:
            p = ladder.solve(forebay, tw.value, positions, temperature_c=temperature,
                             warm=self._profiles.get(fid))
        except (ValueError, SettingError, ArithmeticError) as exc:
            self.problems.append(f"{fid}: no profile: the solver failed: {exc}")
            self._profiles.pop(fid, None)
            return None
        self._profiles[fid], self._profile_keys[fid] = p, key
        return p

    def _recommendation(self, fid: str, ladder: Ladder, row: dict | None,
                        current: Mapping[str, float],
                        profile: Profile | None) -> Recommendation | None:
        if row is None:
            return None
        if profile is None:
            self.problems.append(f"{fid}: stored recommendation {row['id']} not used: no "
                                 "current profile")
            return None
        settings = {k: float(v) for k, v in (row["settings"] or {}).items()
                    if k in ladder.settings and isinstance(v, int | float) and math.isfinite(v)}
        changes = tuple(SettingChange(name, ladder.settings[name].label,
                                      ladder.settings[name].unit, current.get(name, value),
                                      value, None) for name, value in settings.items())
        inputs = row["inputs"] or {}

        def level(key: str, fallback: float) -> float:
            v = inputs.get(key)
            return float(v) if isinstance(v, int | float) else fallback

        return Recommendation(fid, level("forebay_m", profile.forebay_m),
                              level("tailwater_m", profile.tailwater_m), settings,
                              dict(current), profile, bool(row["feasible"]),
                              row["binding_constraint"] or "", row["reason"] or "", changes)
