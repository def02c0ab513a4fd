"""The tag catalogue of a site: every reading the pipeline pulls, derived from the site model.

Tag names are ``<fishway>.<what>`` (``east.forebay_level``, ``east.P40.level``,
``east.P40.level_b``, ``east.G1.opening``). Each :class:`TagDef` says what the reading is
(quantity, SI unit, role), where it comes from (feed and address) and how often to poll it.
The default OPC UA address of a tag is a numeric node id, ``ns=<namespace>;i=<1000 + n>`` in
catalogue order (numeric because string node ids do not survive the SQLite history store of the
OPC UA server); a site file may override any tag's address, feed or poll period under
``[[ingest.tags]]``.

Roles: ``forebay``, ``tailwater``, ``pool`` (with ``pool_id``), ``pool_b`` (the redundant
gauge), ``water_temp``, ``do``, ``trash_rack_dp`` (forebay to exit), ``picket_dp`` (across the
counting-window pickets), ``setting`` (actuator position; ``setting`` holds the setting name as
in :class:`~ops_logic.ladder.Ladder`), ``aux_flow`` (flow meter of an auxiliary source, with
``actuator``), ``pump_trip`` (1 when a pump of a station has tripped).
"""

from __future__ import annotations

from dataclasses import dataclass

from ops_logic.site import AdjustableWeirExit, Fishway, GravityAux, Site

__all__ = ["TagDef", "gauged_pools", "site_tags"]


@dataclass(frozen=True)
class TagDef:
    name: str
    fishway_id: str
    quantity: str  # water_level, temperature, dissolved_oxygen, head_differential, position,
    # opening, count, flow, status
    unit: str  # SI: m, degC, mg/L, %, count, m3/s, flag
    role: str
    feed: str
    address: str
    poll_seconds: float
    pool_id: str | None = None
    setting: str | None = None
    actuator: str | None = None

    @property
    def qc_quantity(self) -> str | None:
        """The QARTOD quantity whose thresholds apply (``ops_logic.qc``), if any."""
        return {"water_level": "water_level", "temperature": "temperature",
                "dissolved_oxygen": "dissolved_oxygen"}.get(self.quantity)


def gauged_pools(f: Fishway) -> tuple[list[str], list[str]]:
    """Pools with a level gauge, and pools with a redundant second gauge."""
    ids = f.pool_ids()
    pools = f.gauging.pools
    if pools is None:
        pools = [ids[i] for i in sorted({0, *range(9, len(ids), 10), len(ids) - 1})]
    redundant = f.gauging.redundant if f.gauging.redundant is not None else [ids[-1]]
    return list(pools), list(redundant)


def _fishway_tags(f: Fishway) -> list[tuple[str, str, str, str, dict]]:
    out: list[tuple[str, str, str, str, dict]] = [
        (f"{f.id}.forebay_level", "water_level", "m", "forebay", {}),
        (f"{f.id}.tailwater_level", "water_level", "m", "tailwater", {}),
    ]
    pools, redundant = gauged_pools(f)
    for pid in pools:
        out.append((f"{f.id}.{pid}.level", "water_level", "m", "pool", {"pool_id": pid}))
    for pid in redundant:
        out.append((f"{f.id}.{pid}.level_b", "water_level", "m", "pool_b", {"pool_id": pid}))
    out += [
        (f"{f.id}.water_temp", "temperature", "degC", "water_temp", {}),
        (f"{f.id}.do", "dissolved_oxygen", "mg/L", "do", {}),
        (f"{f.id}.trash_rack_dp", "head_differential", "m", "trash_rack_dp", {}),
        (f"{f.id}.picket_dp", "head_differential", "m", "picket_dp", {}),
    ]
    if isinstance(f.exit, AdjustableWeirExit):
        out.append((f"{f.id}.exit.crest", "position", "m", "setting",
                    {"setting": "exit_crest_m", "actuator": f.exit.id}))
    for g in f.entrance.gates:
        out.append((f"{f.id}.{g.id}.crest", "position", "m", "setting",
                    {"setting": f"entrance_{g.id}_crest_m", "actuator": g.id}))
    for a in f.aux:
        if isinstance(a, GravityAux):
            out.append((f"{f.id}.{a.id}.opening", "opening", "%", "setting",
                        {"setting": f"aux_{a.id}_opening_pct", "actuator": a.id}))
        else:
            out.append((f"{f.id}.{a.id}.pumps", "count", "count", "setting",
                        {"setting": f"aux_{a.id}_pumps", "actuator": a.id}))
            out.append((f"{f.id}.{a.id}.trip", "status", "flag", "pump_trip",
                        {"actuator": a.id}))
        out.append((f"{f.id}.{a.id}.flow", "flow", "m3/s", "aux_flow", {"actuator": a.id}))
    return out


def site_tags(site: Site) -> list[TagDef]:
    """Every tag of the site in catalogue order, with the site file's overrides applied.

    An override naming no known tag raises ``ValueError`` (a typo must not pass silently).
    """
    ingest = site.ingest
    feeds = {fd.id: fd for fd in ingest.feeds}
    default_feed = ingest.feeds[0]
    overrides = {o.name: o for o in ingest.tags}
    out: list[TagDef] = []
    n = 0
    for f in site.fishways:
        for name, quantity, unit, role, extra in _fishway_tags(f):
            o = overrides.pop(name, None)
            feed_id = (o.feed if o and o.feed else None) or default_feed.id
            if feed_id not in feeds:
                raise ValueError(f"ingest.tags: {name} names unknown feed {feed_id!r}")
            address = (o.address if o and o.address else
                       f"ns={feeds[feed_id].namespace};i={1000 + n}")
            poll = (o.poll_seconds if o and o.poll_seconds else ingest.poll_seconds)
            out.append(TagDef(name, f.id, quantity, unit, role, feed_id, address, poll, **extra))
            n += 1
    if overrides:
        raise ValueError("ingest.tags: no such tag: " + ", ".join(sorted(overrides)))
    return out
