"""The caches of the status computation: the tag catalogue, solved profiles, warm starts and the
7DADM; what the status computation (:mod:`db.status.judge`) looks up more than once.

Every cache entry keeps the objects it was made for and is used only for those very objects
(an ``id`` can be reused once an object is gone). Solves are cached by their rounded inputs
(levels to the millimetre, settings to 0.001, temperature to 0.1 °C) and warm-started from the
ladder's newest flowing profile; the catalogue is re-read every few minutes, the 7DADM (a
seven-day statistic) every :data:`TEMP_7DADM_TTL_S`.
"""

from __future__ import annotations

import threading
import time
from collections import OrderedDict
from collections.abc import Mapping
from datetime import datetime, timedelta
from typing import Any

import pandas as pd

from db.catalog import tags_frame
from db.dashboard_queries import hourly_maxima
from ops_logic.alarms.temperature import seven_day_average_daily_max
from ops_logic.ladder import Ladder
from ops_logic.profile import Profile
from ops_logic.site import Site
from ops_logic.tags import TagDef, site_tags

__all__ = ["TEMP_7DADM_TTL_S", "cached_solve", "clear_caches", "find_tag", "tag_catalogue",
           "temp_7dadm"]

TagEntry = tuple[TagDef, int, float]
"""A catalogue entry: the tag's definition, database id and poll period [s]."""

_SOLVE_CACHE_SIZE = 64
_CATALOGUE_TTL_S = 300.0
TEMP_7DADM_TTL_S = 600.0
"""The 7DADM (a seven-day statistic) is recomputed at most this often [s]."""

_lock = threading.Lock()
# Cache entries keep the objects they were made for and are used only for those very objects
# (an id can be reused once an object is gone).
_catalogue: dict[tuple, tuple[Site, Any, float, dict[str, tuple[TagDef, int, float]]]] = {}
_solves: OrderedDict[tuple, tuple[Ladder, Profile | Exception]] = OrderedDict()
_t7: dict[tuple, float | None] = {}
_last: dict[int, tuple[Ladder, Profile]] = {}
"""The newest profile of each ladder: the warm start of its next solve."""


def tag_catalogue(site: Site, engine: Any) -> dict[str, tuple[TagDef, int, float]]:
    """Tag name → (definition, database id, poll period [s]) for the site's tags that exist
    in the database (cached for a few minutes)."""
    key = (id(engine), id(site))
    now = time.monotonic()
    hit = _catalogue.get(key)
    if hit is not None and hit[0] is site and hit[1] is engine and now - hit[2] < \
            _CATALOGUE_TTL_S:
        return hit[3]
    frame = tags_frame(engine)
    by_name = {str(n): (int(i), float(p)) for i, n, p in
               zip(frame.index, frame["name"], frame["poll_period_s"], strict=True)}
    out = {t.name: (t, *by_name[t.name]) for t in site_tags(site) if t.name in by_name}
    with _lock:
        _catalogue[key] = (site, engine, now, out)
    return out


def cached_solve(ladder: Ladder, version: int, forebay: float, tailwater: float,
           settings: Mapping[str, float], temp_c: float) -> Profile:
    key = (ladder.id, id(ladder), version, round(forebay, 3), round(tailwater, 3),
           tuple(sorted((k, round(v, 3)) for k, v in settings.items())), round(temp_c, 1))
    with _lock:
        entry = _solves.get(key)
        hit = entry[1] if entry is not None and entry[0] is ladder else None
        if hit is not None:
            _solves.move_to_end(key)
    if hit is None:
        prev = _last.get(id(ladder))
        warm = prev[1] if prev is not None and prev[0] is ladder else None
        try:
            hit = ladder.solve(forebay, tailwater, settings, temperature_c=temp_c, warm=warm)
        except ValueError as exc:  # SettingError included: refused inputs
            hit = exc
        with _lock:
            _solves[key] = (ladder, hit)
            if isinstance(hit, Profile) and hit.state == "flowing":
                _last[id(ladder)] = (ladder, hit)
            while len(_solves) > _SOLVE_CACHE_SIZE:
                _solves.popitem(last=False)
    if isinstance(hit, Exception):
        raise hit
    return hit


_by_role: dict[int, tuple[Mapping, dict[tuple[str, str], list[tuple[TagDef, int, float]]]]] = {}
"""Per catalogue mapping of :func:`tag_catalogue`: its entries grouped by (fishway, role)."""


def find_tag(tags: Mapping[str, TagEntry], fishway_id: str, role: str,
             **match: str | None) -> TagEntry | None:
    """The first entry of ``tags`` (in its order) of this fishway and role whose fields equal
    ``match``. The entries are grouped by (fishway, role) once per catalogue mapping: this is
    asked some twenty times a refresh."""
    hit = _by_role.get(id(tags))
    if hit is None or hit[0] is not tags:
        groups: dict[tuple[str, str], list[tuple[TagDef, int, float]]] = {}
        for entry in tags.values():
            groups.setdefault((entry[0].fishway_id, entry[0].role), []).append(entry)
        with _lock:
            if len(_by_role) > 16:
                _by_role.clear()
            _by_role[id(tags)] = (tags, groups)
        hit = (tags, groups)
    for entry in hit[1].get((fishway_id, role), ()):
        if all(getattr(entry[0], k) == v for k, v in match.items()):
            return entry
    return None


def temp_7dadm(engine: Any, entry: tuple[TagDef, int, float] | None, now: datetime,
                time_zone: str) -> float | None:
    """The newest 7DADM (today's or yesterday's) from the hourly rollups' maxima, or None."""
    if entry is None:
        return None
    key = (str(engine.url), entry[1], int(now.timestamp() // TEMP_7DADM_TTL_S))
    if key in _t7:
        return _t7[key]
    ts_ms, vmax = hourly_maxima(engine, entry[1], now - timedelta(days=8), now)
    out = None
    if ts_ms.size:
        series = seven_day_average_daily_max(
            pd.DatetimeIndex(ts_ms.astype("datetime64[ms]")).tz_localize("UTC"), vmax,
            time_zone=time_zone).dropna()
        today = pd.Timestamp(now).tz_convert(time_zone).date()
        if len(series) and series.index[-1] >= today - timedelta(days=1):
            out = float(series.iloc[-1])
    with _lock:
        if len(_t7) > 256:
            _t7.clear()
        _t7[key] = out
    return out


def clear_caches() -> None:
    """Forget the cached solves, warm starts, catalogue and 7DADM values (tests, benchmarks:
    every computation from scratch)."""
    with _lock:
        _solves.clear()
        _last.clear()
        _catalogue.clear()
        _t7.clear()
        _by_role.clear()
