"""What every page and callback of the running dashboard shares: the site, the database engine,
the ladders, and the display units. Set once by :func:`dashboard.app.create_app`."""

from __future__ import annotations

from dataclasses import dataclass, field

from sqlalchemy.engine import Engine

from ops_logic.ladder import Ladder
from ops_logic.site import Site

__all__ = ["AppContext", "current", "install"]


@dataclass
class AppContext:
    site: Site
    engine: Engine
    ladders: dict[str, Ladder] = field(default_factory=dict)
    wall_only: bool = False

    @property
    def units(self) -> str:
        return self.site.site.units

    def ladder(self, fishway_id: str) -> Ladder:
        return self.ladders[fishway_id]


_current: AppContext | None = None


def install(ctx: AppContext) -> None:
    global _current  # noqa: PLW0603 - one dashboard per process
    _current = ctx


def current() -> AppContext:
    if _current is None:
        raise RuntimeError("the dashboard has no site and database yet: call create_app first")
    return _current
