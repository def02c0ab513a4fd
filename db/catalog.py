"""The catalogue: sites, fishways, tags and users.

Functions
---------
``add_site(engine, name, *, time_zone="UTC", description="", now=None) -> int``
``add_fishway(engine, site_id, name, *, kind="", description="") -> int``
``add_tag(engine, fishway_id, name, quantity, unit, *, poll_period_s, source="",
source_address="", role="", pool_id=None, setting=None, actuator=None, fail_low=None,
fail_high=None, suspect_low=None, suspect_high=None, description="") -> int``
``tags_frame(engine, fishway_id=None) -> DataFrame`` (index ``id``, one column per tag field)
``tag_id(engine, name) -> int`` (KeyError when unknown)
``add_user(engine, name, role, password_hash, *, now=None) -> int``
``get_user(engine, name) -> dict | None``

A tag's ``quantity`` is one of :data:`QUANTITIES`; its limits (in the tag's unit) are the
QARTOD gross-range limits: readings outside ``[fail_low, fail_high]`` fail, outside
``[suspect_low, suspect_high]`` are suspect. ``source`` names the feed (e.g. ``opcua``,
``simulated``, ``csv``) and ``source_address`` the item within it (e.g. an OPC UA node id).
``role``, ``pool_id``, ``setting`` and ``actuator`` carry the site model's description of
the tag (``ops_logic.tags.TagDef``); a fishway's ``name`` is the site model's fishway id.
Password hashing belongs to the sign-in code; this module stores the hash it is given.

>>> from db.engine import make_engine
>>> from db.migrate import upgrade
>>> eng = make_engine("sqlite://"); _ = upgrade(eng)
>>> fw = add_fishway(eng, add_site(eng, "Demo site"), "Right bank", kind="vertical_slot")
>>> t = add_tag(eng, fw, "RB.entrance.temp", "temperature", "degC", poll_period_s=60,
...             fail_low=-2.0, fail_high=40.0)
>>> tag_id(eng, "RB.entrance.temp") == t
True
>>> tags_frame(eng).loc[t, "quantity"]
'temperature'
>>> eng.dispose()
"""
from __future__ import annotations

import math
from datetime import UTC, datetime

import pandas as pd
import sqlalchemy as sa
from sqlalchemy.engine import Engine

from db.models import USER_ROLES, Fishway, Site, Tag, User

__all__ = ["QUANTITIES", "add_fishway", "add_site", "add_tag", "add_user", "get_user",
           "tag_id", "tags_frame"]

#: Quantities a tag may measure (extend here; the column is free text).
QUANTITIES = ("water_level", "temperature", "dissolved_oxygen", "head_differential", "position",
              "opening", "count", "flow", "status", "velocity", "total_dissolved_gas", "other")


def _now(now: datetime | None) -> datetime:
    return now if now is not None else datetime.now(UTC)


def _insert(engine: Engine, table: sa.Table, values: dict) -> int:
    with engine.begin() as conn:
        return int(conn.execute(sa.insert(table).values(**values)).inserted_primary_key[0])


def add_site(engine: Engine, name: str, *, time_zone: str = "UTC", description: str = "",
             now: datetime | None = None) -> int:
    """Create a site; return its id."""
    if not name.strip():
        raise ValueError("a site needs a name")
    return _insert(engine, Site.__table__, {"name": name, "time_zone": time_zone,
                                            "description": description,
                                            "created_at": _now(now)})


def add_fishway(engine: Engine, site_id: int, name: str, *, kind: str = "",
                description: str = "") -> int:
    """Create a fishway of a site; return its id."""
    if not name.strip():
        raise ValueError("a fishway needs a name")
    return _insert(engine, Fishway.__table__, {"site_id": site_id, "name": name, "kind": kind,
                                               "description": description})


def _check_limits(low: float | None, high: float | None, what: str) -> None:
    for v in (low, high):
        if v is not None and not math.isfinite(v):
            raise ValueError(f"{what} limits must be finite")
    if low is not None and high is not None and not low < high:
        raise ValueError(f"{what} limits: low {low} must be below high {high}")


def add_tag(engine: Engine, fishway_id: int, name: str, quantity: str, unit: str, *,
            poll_period_s: float, source: str = "", source_address: str = "",
            role: str = "", pool_id: str | None = None, setting: str | None = None,
            actuator: str | None = None, fail_low: float | None = None,
            fail_high: float | None = None, suspect_low: float | None = None,
            suspect_high: float | None = None, description: str = "") -> int:
    """Create a tag; return its id.

    Raises ValueError for an unknown quantity, a poll period that is not positive, or
    limits that are not ordered ``fail_low ≤ suspect_low < suspect_high ≤ fail_high``.
    """
    if quantity not in QUANTITIES:
        raise ValueError(f"unknown quantity {quantity!r}; known: {QUANTITIES}")
    if not (math.isfinite(poll_period_s) and poll_period_s > 0):
        raise ValueError("poll_period_s must be a positive number of seconds")
    _check_limits(fail_low, fail_high, "fail")
    _check_limits(suspect_low, suspect_high, "suspect")
    if fail_low is not None and suspect_low is not None and suspect_low < fail_low:
        raise ValueError("suspect_low is below fail_low")
    if fail_high is not None and suspect_high is not None and suspect_high > fail_high:
        raise ValueError("suspect_high is above fail_high")
    return _insert(engine, Tag.__table__, {
        "fishway_id": fishway_id, "name": name, "quantity": quantity, "unit": unit,
        "poll_period_s": float(poll_period_s), "source": source,
        "source_address": source_address, "role": role, "pool_id": pool_id,
        "setting": setting, "actuator": actuator, "fail_low": fail_low, "fail_high": fail_high,
        "suspect_low": suspect_low, "suspect_high": suspect_high, "description": description,
    })


def tags_frame(engine: Engine, fishway_id: int | None = None) -> pd.DataFrame:
    """All tags (or those of one fishway), index ``id``."""
    table = Tag.__table__
    stmt = sa.select(table).order_by(table.c.id)
    if fishway_id is not None:
        stmt = stmt.where(table.c.fishway_id == fishway_id)
    with engine.connect() as conn:
        result = conn.execute(stmt)
        frame = pd.DataFrame(result.all(), columns=list(result.keys()))
    return frame.set_index("id")


def tag_id(engine: Engine, name: str) -> int:
    """Id of the tag called ``name``; KeyError when there is none."""
    with engine.connect() as conn:
        found = conn.execute(sa.select(Tag.id).where(Tag.name == name)).scalar()
    if found is None:
        raise KeyError(f"no tag named {name!r}")
    return int(found)


def add_user(engine: Engine, name: str, role: str, password_hash: str, *,
             now: datetime | None = None) -> int:
    """Create a user with a role in :data:`db.models.USER_ROLES`; return the id."""
    if role not in USER_ROLES:
        raise ValueError(f"unknown role {role!r}; known: {USER_ROLES}")
    if not password_hash:
        raise ValueError("a user needs a password hash")
    return _insert(engine, User.__table__, {"name": name, "role": role,
                                            "password_hash": password_hash,
                                            "created_at": _now(now)})


def get_user(engine: Engine, name: str) -> dict | None:
    """The user's row as a dict (id, name, role, password_hash, created_at, active)."""
    with engine.connect() as conn:
        row = conn.execute(sa.select(User.__table__).where(User.name == name)).mappings().first()
    return dict(row) if row is not None else None
