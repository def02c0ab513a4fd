"""What the alarm engine is given at each evaluation: readings, profiles, feed health, modes.

All plain frozen dataclasses with SI values; the ingest builds them from its latest readings
and QC flags, the latest solved profile and recommendation of each fishway, the settings last
logged, and the health of each feed. No clock: ages are given, and ``now`` is an argument of
:meth:`~ops_logic.alarms.engine.AlarmEngine.evaluate`.

>>> TagValue(4.6, flag=1, age_s=12.0).usable(max_age_s=120.0)
True
>>> TagValue(float("nan")).usable(max_age_s=120.0)
False
"""
from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from datetime import datetime

from ops_logic.profile import Profile
from ops_logic.recommend import Recommendation

__all__ = ["USABLE_FLAGS", "AlarmInputs", "FeedStatus", "FishwayInputs", "TagValue"]

USABLE_FLAGS = frozenset({1, 2})
"""QARTOD flags whose readings the rules use: PASS and NOT_EVALUATED (IOOS flags manual v1.2,
2020; values seen in ``ioos_qc.qartod.QartodFlags``)."""


@dataclass(frozen=True)
class TagValue:
    """The latest reading of a tag: its value (SI, the tag's unit), QARTOD flag and age [s]."""

    value: float
    flag: int = 1
    age_s: float = 0.0

    def __post_init__(self) -> None:
        if self.flag not in (1, 2, 3, 4, 9):
            raise ValueError(f"QARTOD flag must be 1, 2, 3, 4 or 9, got {self.flag!r}")
        if not (math.isfinite(self.age_s) and self.age_s >= 0):
            raise ValueError(f"age_s must be finite and ≥ 0, got {self.age_s!r}")

    def usable(self, max_age_s: float) -> bool:
        """Finite, passed QC (or not evaluated) and no older than ``max_age_s`` [s]."""
        return (math.isfinite(self.value) and self.flag in USABLE_FLAGS
                and self.age_s <= max_age_s)


@dataclass(frozen=True)
class FeedStatus:
    """Health of one feed: ``ok`` false after a communications failure."""

    ok: bool
    last_success: datetime | None = None
    error: str = ""


@dataclass(frozen=True)
class FishwayInputs:
    """Per-fishway inputs. ``current_settings`` are the settings last logged (setting names as
    in :class:`~ops_logic.ladder.Ladder`); ``temp_7dadm_c`` the seven-day average of daily
    maximum water temperatures (:func:`~ops_logic.alarms.temperature.seven_day_average_daily_max`)
    [°C]; ``mode`` the fishway's mode when the caller knows it (``None`` keeps the mode set by
    :meth:`~ops_logic.alarms.engine.AlarmEngine.set_fishway_mode`)."""

    profile: Profile | None = None
    recommendation: Recommendation | None = None
    current_settings: Mapping[str, float] = field(default_factory=dict)
    temp_7dadm_c: float | None = None
    mode: str | None = None


@dataclass(frozen=True)
class AlarmInputs:
    """Everything one evaluation sees: ``readings`` by tag name, ``fishways`` by fishway id,
    ``feeds`` by feed id. A catalogue tag without a reading counts as stale."""

    readings: Mapping[str, TagValue] = field(default_factory=dict)
    fishways: Mapping[str, FishwayInputs] = field(default_factory=dict)
    feeds: Mapping[str, FeedStatus] = field(default_factory=dict)
