"""The fishways *in force*: the site file with the supervisors' overrides laid over it.

Everything that judges, recommends or displays a fishway uses these (the ingest's recommender
and status, the dashboard's pages): a target a supervisor changed holds everywhere from the
next cycle on. The overrides are the newest ``setting_changes`` row of each key
(:func:`db.dashboard_queries.setting_overrides`); :func:`ops_logic.overrides.apply_overrides`
lays them over the site file's values and reports those that no longer validate. The result is
cached until the next setting change (its id is the cache's version).

>>> import pathlib, tempfile
>>> from db.engine import make_engine
>>> from db.migrate import upgrade
>>> from db.site_sync import sync_site
>>> from ops_logic.site import load_site
>>> site = load_site()
>>> engine = make_engine(sqlite_path=pathlib.Path(tempfile.mkdtemp()) / "f.sqlite")
>>> _ = upgrade(engine), sync_site(engine, site)
>>> eff = effective_site(site, engine)
>>> eff.version, eff.modes, eff.problems       # no change made yet: the site file's
(0, {'east': 'operating', 'west': 'operating'}, ())
>>> effective_site(site, engine) is eff        # cached until the next change
True
"""

from __future__ import annotations

import threading
from dataclasses import dataclass, field
from typing import Any

from db.dashboard_queries import fishway_db_ids, setting_overrides
from ops_logic.ladder import Ladder
from ops_logic.overrides import MODES, apply_overrides
from ops_logic.site import Fishway, Site

__all__ = ["EffectiveSite", "clear_cache", "effective_site"]


@dataclass(frozen=True)
class EffectiveSite:
    """The fishways as in force: site file plus overrides, their ladders, modes, database ids
    and any override problems. ``version`` is the newest change id (a cache key)."""

    version: int
    fishways: dict[str, Fishway]
    ladders: dict[str, Ladder]
    modes: dict[str, str]
    db_ids: dict[str, int]
    overrides: dict[str, dict[str, tuple]]
    problems: tuple[str, ...] = field(default=())


_CACHE: dict[tuple, tuple[Site, Any, EffectiveSite]] = {}
_LOCK = threading.Lock()


def effective_site(site: Site, engine: Any) -> EffectiveSite:
    """The fishways of ``site`` in force in ``engine``'s database (cached until the next
    setting change; one small query per call to learn whether there was one)."""
    version, by_db_id = setting_overrides(engine)
    key = (id(engine), id(site))
    hit = _CACHE.get(key)  # used only for the very objects it was made for
    if hit is not None and hit[0] is site and hit[1] is engine and hit[2].version == version:
        return hit[2]
    db_ids = fishway_db_ids(engine, site.site.name)
    fishways, ladders, modes, overrides = {}, {}, {}, {}
    problems: list[str] = []
    for f in site.fishways:
        ov = by_db_id.get(db_ids.get(f.id, -1), {})
        overrides[f.id] = ov
        eff, bad = apply_overrides(f, ov)
        problems.extend(bad)
        mode = (ov.get("mode") or (None, "operating"))[1] or "operating"
        if mode not in MODES:
            problems.append(f"{f.id}: unknown mode {mode!r} stored; taken as operating")
            mode = "operating"
        fishways[f.id], modes[f.id] = eff, mode
        ladders[f.id] = Ladder(eff, units=site.site.units)
    out = EffectiveSite(version, fishways, ladders, modes, db_ids, overrides, tuple(problems))
    with _LOCK:
        _CACHE[key] = (site, engine, out)
    return out


def clear_cache() -> None:
    """Forget every cached result (tests, benchmarks)."""
    with _LOCK:
        _CACHE.clear()
