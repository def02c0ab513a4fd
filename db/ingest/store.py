"""Storage helpers of the ingest: recent readings for the QC windows, and re-flags.

``recent_readings(engine, tag_ids, start_ms, end_ms) -> dict[name, (ms, value, flag)]`` reads
each tag's stored readings with ``start_ms <= ts_ms <= end_ms`` (time order; NaN for a
missing value) to seed the trailing QC windows at start-up, so a restart keeps its context.

``apply_reflags(engine, reflags) -> int`` raises the flags of readings already stored (the
spike verdict of a reading is known one reading later, :mod:`db.ingest.live_qc`). In one
transaction, for each ``(tag_id, ts_ms, flag)``: the reading's flag becomes ``flag`` when that
is SUSPECT (3) or FAIL (4) and differs, and the ``flag_max`` of the reading's four rollup
buckets (:mod:`db.rollups`) is raised to it if lower (rollups aggregate values of every flag
and keep the largest flag, so raising it keeps them true; values are unchanged). Returns the
number of readings changed. A re-flag of a reading that is not stored changes nothing.

``newest_ms(engine, tag_ids) -> dict[name, int]`` is the newest stored time of each tag.

>>> from db.engine import make_engine
>>> from db.migrate import upgrade
>>> from db.catalog import add_site, add_fishway, add_tag
>>> from db.readings import store_batch, readings_frame
>>> eng = make_engine("sqlite://"); _ = upgrade(eng)
>>> tag = add_tag(eng, add_fishway(eng, add_site(eng, "S"), "F"), "F.level", "water_level",
...               "m", poll_period_s=10)
>>> store_batch(eng, [(tag, 1767225600, 70.0, 1), (tag, 1767225610, 70.6, 1)])
2
>>> apply_reflags(eng, [(tag, 1767225610000, 4)])
1
>>> readings_frame(eng, tag, 1767225600, 1767225620)["flag"].tolist()
[1, 4]
>>> recent_readings(eng, {"F.level": tag}, 0, 1767225610000)["F.level"][2].tolist()
[1, 4]
>>> eng.dispose()
"""
from __future__ import annotations

from collections.abc import Iterable, Mapping

import numpy as np
import sqlalchemy as sa
from sqlalchemy.engine import Engine

from db.arrays import fetch_array
from db.rollups import RESOLUTIONS_S

__all__ = ["apply_reflags", "newest_ms", "recent_readings"]

_RECENT = sa.text("SELECT ts_ms, value, flag FROM readings WHERE tag_id = :tag "
                  "AND ts_ms >= :start AND ts_ms <= :end ORDER BY ts_ms")
_NEWEST = sa.text("SELECT max(ts_ms) FROM readings WHERE tag_id = :tag")
_REFLAG = sa.text("UPDATE readings SET flag = :flag WHERE tag_id = :tag AND ts_ms = :ms "
                  "AND flag <> :flag AND flag IN (1, 2, 3) AND value IS NOT NULL")
_ROLLUP = sa.text("UPDATE rollups SET flag_max = :flag WHERE tag_id = :tag AND res_s = :res "
                  "AND bucket_ms = :bucket AND flag_max < :flag")


def recent_readings(engine: Engine, tag_ids: Mapping[str, int], start_ms: int, end_ms: int
                    ) -> dict[str, tuple[np.ndarray, np.ndarray, np.ndarray]]:
    """Stored readings of each tag in ``[start_ms, end_ms]``: (ts_ms, value, flag) arrays."""
    out: dict[str, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}
    with engine.connect() as conn:
        for name, tag in tag_ids.items():
            arr = fetch_array(conn, _RECENT, {"tag": int(tag), "start": int(start_ms),
                                              "end": int(end_ms)}, 3)
            out[name] = (arr[:, 0].astype(np.int64), arr[:, 1].astype(np.float64),
                         arr[:, 2].astype(np.uint8))
    return out


def newest_ms(engine: Engine, tag_ids: Mapping[str, int]) -> dict[str, int]:
    """Newest stored reading time [epoch ms] of each tag that has readings."""
    out: dict[str, int] = {}
    with engine.connect() as conn:
        for name, tag in tag_ids.items():
            found = conn.execute(_NEWEST, {"tag": int(tag)}).scalar()
            if found is not None:
                out[name] = int(found)
    return out


def apply_reflags(engine: Engine, reflags: Iterable[tuple[int, int, int]]) -> int:
    """Raise stored flags to SUSPECT or FAIL, with the rollups' ``flag_max``; see above."""
    todo = [(int(t), int(ms), int(f)) for t, ms, f in reflags if int(f) in (3, 4)]
    if not todo:
        return 0
    changed = 0
    with engine.begin() as conn:
        for tag, ms, flag in todo:
            if conn.execute(_REFLAG, {"flag": flag, "tag": tag, "ms": ms}).rowcount:
                changed += 1
                conn.execute(_ROLLUP, [{"flag": flag, "tag": tag, "res": res,
                                        "bucket": ms // (res * 1000) * (res * 1000)}
                                       for res in RESOLUTIONS_S])
    return changed
