"""QC thresholds of each tag of a site: the QARTOD defaults of :mod:`ops_logic.qc`, fitted to
the site's structure, and the redundant gauge pairs.

``tag_thresholds(site, tag, limits=None) -> QcThresholds`` gives the thresholds the live QC
applies to one tag (:class:`ops_logic.tags.TagDef`):

- ``water_level``: :func:`ops_logic.qc.default_thresholds` (spike, rate of change, flat
  line, timing) with the gross-range FAIL span replaced by the fishway's vertical extent:
  from the lowest pool floor or tailwater-range bottom, whichever is lower, to the top of the
  forebay range, each widened by :data:`LEVEL_MARGIN_M`. The default span ``(0, 10) m`` is a
  depth gauge's; the site's levels are elevations above a datum.
- ``temperature``, ``dissolved_oxygen``: :func:`~ops_logic.qc.default_thresholds` as they are
  (the climatology months are taken in the site's time zone by the caller).
- ``position`` (crest settings): FAIL outside the actuator range ± 0.5 m, SUSPECT outside it
  ± :data:`POSITION_SUSPECT_M`; ``opening`` [%]: FAIL outside −5…105, SUSPECT outside
  −1…101; ``count`` (pumps running): FAIL outside −0.5…count + 0.5; ``status`` (0/1 flags):
  FAIL outside −0.5…1.5; ``flow`` of an auxiliary source: FAIL outside −0.1 m³/s…three times
  its diffuser's capacity (area × velocity limit); ``head_differential``: FAIL outside
  −0.1 m…(forebay top − tailwater bottom); other quantities: only missing values are
  flagged. These quantities get the gross range and the timing test only (a gate at rest
  reads the same value for days, so a flat-line test would be wrong).
- every tag: ``max_age_s`` = max(60 s, six poll periods), the default's "six missed polls".

``limits`` (the ``fail_low``, ``fail_high``, ``suspect_low``, ``suspect_high`` of the tag's
database row, :mod:`db.catalog`) override the spans side by side where they are set.

``redundant_pairs(tags)`` lists the (``pool``, ``pool_b``) gauge pairs on the same pool; the
live QC cross-checks them with :func:`ops_logic.qc.redundant_pair_test` and thresholds
:data:`PAIR_SUSPECT_M`, :data:`PAIR_FAIL_M`.

Every number here is "common practice" (the QARTOD manuals leave thresholds to the operator;
from memory), with its reason beside it; replace them with the site's instrument record.

References: IOOS QARTOD manuals for water level, temperature and dissolved oxygen (see
:mod:`ops_logic.qc`).

>>> from ops_logic.site import load_site
>>> from ops_logic.tags import site_tags
>>> site = load_site()
>>> tags = {t.name: t for t in site_tags(site)}
>>> th = tag_thresholds(site, tags["east.forebay_level"])
>>> [round(v, 3) for v in th.fail_span], th.enabled_tests[:3]
([58.874, 80.876], ('gross_range', 'spike', 'rate_of_change'))
>>> tag_thresholds(site, tags["east.G1.opening"]).enabled_tests
('gross_range', 'timing_gap')
>>> redundant_pairs(list(tags.values()))
[('east.P40.level', 'east.P40.level_b'), ('west.P39.level', 'west.P39.level_b')]
"""
from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import replace

from ops_logic.ladder import Ladder
from ops_logic.qc import QcThresholds, default_thresholds
from ops_logic.site import Fishway, Site
from ops_logic.tags import TagDef

__all__ = ["LEVEL_MARGIN_M", "PAIR_FAIL_M", "PAIR_SUSPECT_M", "POSITION_SUSPECT_M",
           "level_fail_span", "redundant_pairs", "tag_thresholds"]

LEVEL_MARGIN_M = 3.0
"""Common practice: a level gauge reading 3 m beyond the structure's extent is an instrument
fault, not water."""
POSITION_SUSPECT_M = 0.05
"""Common practice: a gate position reading 5 cm outside its travel (position noise is a few
mm) is suspect; 0.5 m outside is a failed transmitter."""
PAIR_SUSPECT_M = 0.05
"""Common practice: two gauges of one pool disagreeing by more than surface turbulence."""
PAIR_FAIL_M = 0.15
"""Common practice: a disagreement no turbulence explains; one gauge is wrong."""
MIN_MAX_AGE_S = 60.0


def level_fail_span(fishway: Fishway) -> tuple[float, float]:
    """Gross-range FAIL span of every level gauge of ``fishway`` [m, elevation].

    low = min(lowest pool floor, tailwater range bottom) − margin;
    high = forebay range top + margin (:data:`LEVEL_MARGIN_M`).
    """
    low = min(*(p.floor for p in fishway.pools), fishway.tailwater_range[0])
    high = max(fishway.forebay_range[1], fishway.tailwater_range[1])
    return low - LEVEL_MARGIN_M, high + LEVEL_MARGIN_M


def _aux_capacity_m3s(fishway: Fishway, actuator: str | None) -> float | None:
    for a in fishway.aux:
        if a.id == actuator:
            velocity = getattr(fishway.targets.max_diffuser_velocity, a.diffuser)
            return a.diffuser_area * velocity
    return None


def _gross_spans(site: Site, tag: TagDef
                 ) -> tuple[tuple[float, float], tuple[float, float] | None]:
    f = site.fishway(tag.fishway_id)
    q = tag.quantity
    if q == "water_level":
        return level_fail_span(f), None
    if q == "position" and tag.setting:
        spec = Ladder(f).settings[tag.setting]
        return ((spec.low - 0.5, spec.high + 0.5),
                (spec.low - POSITION_SUSPECT_M, spec.high + POSITION_SUSPECT_M))
    if q == "opening":
        return (-5.0, 105.0), (-1.0, 101.0)  # common practice: ±1 % beyond the valve's travel
    if q == "count" and tag.setting:
        return (-0.5, Ladder(f).settings[tag.setting].high + 0.5), None
    if q == "status":
        return (-0.5, 1.5), None
    if q == "flow":
        cap = _aux_capacity_m3s(f, tag.actuator)
        return (-0.1, 3.0 * cap if cap else 100.0), None
    if q == "head_differential":
        return (-0.1, f.forebay_range[1] - f.tailwater_range[0]), None
    return (-math.inf, math.inf), None


def _override(span: tuple[float, float] | None, low: float | None, high: float | None
              ) -> tuple[float, float] | None:
    if low is None and high is None:
        return span
    base = span if span is not None else (-math.inf, math.inf)
    return (base[0] if low is None else float(low), base[1] if high is None else float(high))


def _clean(v: object) -> float | None:
    if v is None:
        return None
    f = float(v)  # type: ignore[arg-type]
    return None if math.isnan(f) else f


def tag_thresholds(site: Site, tag: TagDef,
                   limits: Mapping[str, float | None] | None = None) -> QcThresholds:
    """QC thresholds of one tag; see the module docstring.

    Parameters
    ----------
    site : Site
        The site the tag belongs to.
    tag : TagDef
        The tag (quantity, unit, fishway, poll period).
    limits : mapping or None
        ``fail_low``, ``fail_high``, ``suspect_low``, ``suspect_high`` [tag unit]; None or
        NaN entries are not set.

    Raises
    ------
    ValueError
        Limits that make an invalid span (reversed, suspect outside fail).
    """
    max_age_s = max(MIN_MAX_AGE_S, 6.0 * tag.poll_seconds)
    fail, suspect = _gross_spans(site, tag)
    lim = {k: _clean(v) for k, v in (limits or {}).items()}
    fail = _override(fail, lim.get("fail_low"), lim.get("fail_high"))
    suspect = _override(suspect, lim.get("suspect_low"), lim.get("suspect_high"))
    assert fail is not None
    if tag.qc_quantity is not None:
        base = default_thresholds(tag.qc_quantity)
        if tag.quantity != "water_level":
            fail = _override(base.fail_span, lim.get("fail_low"), lim.get("fail_high"))
            suspect = _override(base.suspect_span, lim.get("suspect_low"),
                                lim.get("suspect_high"))
        return replace(base, fail_span=fail, suspect_span=suspect, max_age_s=max_age_s)
    return QcThresholds(tag.quantity, tag.unit, fail_span=fail, suspect_span=suspect,
                        max_age_s=max_age_s)


def redundant_pairs(tags: Sequence[TagDef]) -> list[tuple[str, str]]:
    """(primary, redundant) tag names of the gauges that measure the same pool."""
    primary = {(t.fishway_id, t.pool_id): t.name for t in tags if t.role == "pool"}
    return [(primary[(t.fishway_id, t.pool_id)], t.name) for t in tags
            if t.role == "pool_b" and (t.fishway_id, t.pool_id) in primary]
