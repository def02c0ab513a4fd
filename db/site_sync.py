"""Bring the database catalogue in line with a site file: site, fishways and tags.

``sync_site(engine, site) -> dict[str, int]`` makes sure the site (by name), each fishway
(by the site file's fishway id, stored as the fishway's ``name``; its long name goes to
``description``) and each tag of :func:`ops_logic.tags.site_tags` exist, in one
transaction, and returns the tag ids by tag name. It is idempotent: run again on the same
site it changes nothing; run after the site file changed it updates each existing tag's
quantity, unit, source, address, poll period, role, pool, setting and actuator (a tag is
never deleted or moved to another fishway: that raises ``ValueError``, because its readings
would change meaning).

Mapping of a :class:`~ops_logic.tags.TagDef` to a ``tags`` row:

- ``quantity``: ``TagDef.quantity`` when it is one of :data:`db.catalog.QUANTITIES`, else
  ``other`` (with the original quantity in ``description``);
- ``role``, ``pool_id``, ``setting``, ``actuator``: as in the ``TagDef``;
- ``unit``: ``TagDef.unit`` as is (SI: m, degC, mg/L, %, count, m3/s, flag);
- ``source``: the feed id (``TagDef.feed``), ``source_address``: ``TagDef.address``;
- ``poll_period_s``: ``TagDef.poll_seconds``; QC limits are left empty (they come from the
  QC configuration, :mod:`ops_logic.qc`).

>>> from db.engine import make_engine
>>> from db.migrate import upgrade
>>> from ops_logic.site import load_site
>>> eng = make_engine("sqlite://"); _ = upgrade(eng)
>>> ids = sync_site(eng, load_site())
>>> ids == sync_site(eng, load_site())          # idempotent
True
>>> from db.catalog import tags_frame
>>> tags_frame(eng).loc[ids["east.trash_rack_dp"], ["quantity", "unit", "source_address"]].tolist()
['head_differential', 'm', 'ns=2;i=1010']
>>> eng.dispose()
"""
from __future__ import annotations

from datetime import UTC, datetime

import sqlalchemy as sa
from sqlalchemy.engine import Connection, Engine

from db.catalog import QUANTITIES
from db.models import Fishway, Site, Tag
from ops_logic.site import Site as SiteModel
from ops_logic.tags import TagDef, site_tags

__all__ = ["sync_site", "tag_row"]


def tag_row(tag: TagDef) -> dict:
    """The ``tags`` column values for ``tag`` (without ``fishway_id``).

    >>> from ops_logic.tags import TagDef
    >>> row = tag_row(TagDef("e.G1.opening", "e", "opening", "%", "setting", "plc",
    ...                      "ns=2;i=1007", 10.0, actuator="G1"))
    >>> row["quantity"], row["unit"], row["source"], row["role"], row["actuator"]
    ('opening', '%', 'plc', 'setting', 'G1')
    """
    known = tag.quantity in QUANTITIES
    return {"name": tag.name, "quantity": tag.quantity if known else "other", "unit": tag.unit,
            "source": tag.feed, "source_address": tag.address,
            "poll_period_s": float(tag.poll_seconds), "role": tag.role, "pool_id": tag.pool_id,
            "setting": tag.setting, "actuator": tag.actuator,
            "description": "" if known else f"quantity {tag.quantity}"}


def _fishway_kind(site: SiteModel, fishway_id: str) -> str:
    types = {b.type for b in site.fishway(fishway_id).baffles}
    return types.pop() if len(types) == 1 else "mixed"


def _site_id(conn: Connection, site: SiteModel) -> int:
    table = Site.__table__
    found = conn.execute(sa.select(table.c.id).where(table.c.name == site.site.name)).scalar()
    if found is not None:
        return int(found)
    return int(conn.execute(sa.insert(table).values(
        name=site.site.name, time_zone=site.site.time_zone, description="",
        created_at=datetime.now(UTC))).inserted_primary_key[0])


def _fishway_ids(conn: Connection, site: SiteModel, site_id: int) -> dict[str, int]:
    table = Fishway.__table__
    rows = conn.execute(sa.select(table.c.id, table.c.name).where(table.c.site_id == site_id))
    have = {name: int(i) for i, name in rows}
    for f in site.fishways:
        if f.id not in have:
            have[f.id] = int(conn.execute(sa.insert(table).values(
                site_id=site_id, name=f.id, kind=_fishway_kind(site, f.id),
                description=f.name)).inserted_primary_key[0])
    return have


def sync_site(engine: Engine, site: SiteModel) -> dict[str, int]:
    """Create or update the catalogue rows of ``site``; return tag ids by tag name.

    Raises ValueError when a tag name of the site already belongs to another fishway (of
    this or another site) in the database.
    """
    tags = site_tags(site)
    table = Tag.__table__
    columns = ("quantity", "unit", "source", "source_address", "poll_period_s", "role",
               "pool_id", "setting", "actuator")
    with engine.begin() as conn:
        fishways = _fishway_ids(conn, site, _site_id(conn, site))
        names = [t.name for t in tags]
        existing = {r.name: r for r in conn.execute(
            sa.select(table).where(table.c.name.in_(names))).all()} if names else {}
        out: dict[str, int] = {}
        for tag in tags:
            row = tag_row(tag)
            fishway_id = fishways[tag.fishway_id]
            old = existing.get(tag.name)
            if old is None:
                out[tag.name] = int(conn.execute(sa.insert(table).values(
                    fishway_id=fishway_id, **row)).inserted_primary_key[0])
                continue
            if old.fishway_id != fishway_id:
                raise ValueError(f"tag {tag.name} already belongs to fishway id "
                                 f"{old.fishway_id} in the database, not to {tag.fishway_id} "
                                 f"of site {site.site.name!r}; nothing was changed")
            changed = {c: row[c] for c in columns if getattr(old, c) != row[c]}
            if changed:
                conn.execute(sa.update(table).where(table.c.id == old.id).values(**changed))
            out[tag.name] = int(old.id)
    return out
