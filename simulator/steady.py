"""A still plant: every tag of a site at one steady, in-criteria operating point.

Each fishway at the recommended settings for the middle of its forebay and tailwater ranges
(:meth:`ops_logic.ladder.Ladder.recommend`), its pool levels and auxiliary flows from that
solved profile, the water at ``temperature_c`` with ``do_mg_l`` of oxygen, clean racks and
pickets, no pump trips. The values are invented (a demo operating point, not a measurement);
tests and benchmarks start from them and change what they study.

>>> from ops_logic.site import load_site
>>> values, points = steady_state(load_site())
>>> values["east.trash_rack_dp"], values["east.water_temp"], points["east"][1].feasible
(0.0, 12.0, True)
>>> abs(values["east.forebay_level"] - points["east"][0].forebay_m) < 1e-9
True
"""

from __future__ import annotations

from ops_logic.ladder import Ladder
from ops_logic.profile import Profile
from ops_logic.recommend import Recommendation
from ops_logic.site import Site
from ops_logic.tags import site_tags

__all__ = ["steady_readings", "steady_state"]


def steady_state(site: Site, *, temperature_c: float = 12.0, do_mg_l: float = 9.5
                 ) -> tuple[dict[str, float], dict[str, tuple[Profile, Recommendation]]]:
    """A reading of every tag of ``site`` (SI, by tag name) at the still operating point, and
    each fishway's solved profile and recommendation there (by fishway id)."""
    values: dict[str, float] = {}
    points: dict[str, tuple[Profile, Recommendation]] = {}
    tags = site_tags(site)
    for f in site.fishways:
        ladder = Ladder(f, units=site.site.units)
        fb, tw = 0.5 * sum(f.forebay_range), 0.5 * sum(f.tailwater_range)
        rec = ladder.recommend(fb, tw, temperature_c=temperature_c)
        p = ladder.solve(fb, tw, rec.settings, temperature_c=temperature_c)
        levels = {q.id: q.water_level_m for q in p.pools}
        aux = {a.id: a.flow_m3s for a in p.aux}
        fixed = {"forebay": fb, "tailwater": tw, "water_temp": temperature_c, "do": do_mg_l,
                 "trash_rack_dp": 0.0, "picket_dp": 0.0, "pump_trip": 0.0}
        for t in (t for t in tags if t.fishway_id == f.id):
            values[t.name] = (levels[t.pool_id] if t.role in ("pool", "pool_b") else
                              rec.settings[t.setting] if t.role == "setting" else
                              aux[t.actuator] if t.role == "aux_flow" else fixed[t.role])
        points[f.id] = (p, rec)
    return values, points


def steady_readings(site: Site, **kwargs: float) -> dict[str, float]:
    """Only the readings of :func:`steady_state`."""
    return steady_state(site, **kwargs)[0]
