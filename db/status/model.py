"""What the overview and the wall display show of a fishway, as judged from the readings.

A :class:`FishwayStatus` is computed by :func:`db.status.judge.compute_status` (solver,
readings, positions, the latest recommendation) once per ingest cycle, stored by
:mod:`db.status.store`, and read back by the dashboard, which only adds what changes between
cycles: the data's age, whether it has gone stale since, and the alarm counts.

States: ``out_of_service`` (a supervisor set the fishway's mode to maintenance or out of
service), ``no_data`` (forebay, tailwater or an actuator position missing, stale or failing
QC; also when the stored status itself has gone stale, the ingest having stopped),
``model_error`` (the solver refused the inputs, e.g. tailwater above forebay),
``out_of_criteria`` (a hydraulic criterion outside its band), ``in_criteria``.

>>> m = Metric("head_drop", "Worst pool head drop", "length", 0.40, 0.30, 0.366, None)
>>> m.in_band, metric_band_text(m, "us")
(False, 'band 0.98–1.20 ft')
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import NamedTuple

from ops_logic.display import format_value
from ops_logic.profile import Profile
from ops_logic.site import AdjustableWeirExit, Fishway

__all__ = [
    "DEFAULT_TEMP_C",
    "MODEL_GAUGE_TOLERANCE_M",
    "POSITION_SLACK",
    "STALE_POLLS",
    "STATE_LABELS",
    "USABLE_FLAGS",
    "Adjustment",
    "FishwayStatus",
    "Metric",
    "Reading",
    "age_text",
    "metric_band_text",
    "metric_keys",
]

STALE_POLLS = 3
"""A reading older than this many poll periods of its tag is stale (common practice)."""
MODEL_GAUGE_TOLERANCE_M = 0.06
"""A gauged pool differing from the solved profile by more than this [m] (about 0.2 ft) is
shown as a model/gauge disagreement (an operating choice of ours, not a published value)."""
POSITION_SLACK = {"level": 0.03, "opening": 1.0, "count": 0.0}
"""How far [m, %, pumps] a measured position may lie outside its actuator range and still be
taken as the range end (position-sensor noise at an end stop); farther is an error."""
STATE_LABELS = {"in_criteria": "IN CRITERIA", "out_of_criteria": "OUT OF CRITERIA",
                "out_of_service": "OUT OF SERVICE", "no_data": "NO CURRENT DATA",
                "model_error": "MODEL ERROR"}
USABLE_FLAGS = (1, 2)
DEFAULT_TEMP_C = 10.0


def metric_keys(fishway: Fishway) -> list[tuple[str, str]]:
    """(key, label) of the metrics of a fishway's panel, in display order."""
    out = [("forebay", "Forebay"), ("tailwater", "Tailwater"), ("ladder_flow", "Ladder flow"),
           ("attraction_flow", "Attraction flow"), ("head_drop", "Worst pool head drop"),
           ("entrance_head", "Entrance head")]
    if fishway.targets.exit_head is not None and isinstance(fishway.exit, AdjustableWeirExit):
        out.append(("exit_head", "Exit weir head"))
    out += [("water_temp", "Water temperature"), ("temp_7dadm", "Temperature 7DADM"),
            ("do", "Dissolved oxygen")]
    return out


def age_text(age_s: float | None) -> str:
    """An age for display: ``'8 s'``, ``'4 min'``, ``'2.5 h'``, ``'3 d'``.

    >>> age_text(8.2), age_text(250), age_text(9000), age_text(300000), age_text(None)
    ('8 s', '4 min', '2.5 h', '3 d', '—')
    """
    if age_s is None or not math.isfinite(age_s):
        return "—"
    if age_s < 120:
        return f"{max(age_s, 0):.0f} s"
    if age_s < 7200:
        return f"{age_s / 60:.0f} min"
    if age_s < 172800:
        return f"{age_s / 3600:.1f} h"
    return f"{age_s / 86400:.0f} d"


@dataclass(frozen=True)
class Reading:
    """The newest reading of a tag as the overview judges it. ``status``: ``ok``, ``stale``,
    ``suspect`` (QARTOD 3), ``fail`` (4), ``missing`` (9 or no value), ``none`` (no reading)."""

    value: float | None
    flag: int | None
    age_s: float | None
    status: str
    left_s: float | None = None
    """For a usable reading: how long until it goes stale [s]."""

    @property
    def usable(self) -> bool:
        return self.status == "ok"


class Metric(NamedTuple):
    """One displayed quantity with its band (SI). ``status``: ``normal``, ``abnormal``
    (outside its band), ``stale``, ``bad`` (failed QC or missing), ``none`` (no value).
    A named tuple: the overview reads some twenty of them every refresh."""

    key: str
    label: str
    kind: str
    value: float | None
    lo: float | None = None
    hi: float | None = None
    target: float | None = None
    status: str = "normal"
    note: str = ""
    source: str = ""
    text: str = ""
    """The value as displayed (site units), set when the status is computed."""
    band_text: str = ""
    """The band as displayed (:func:`metric_band_text`), set when the status is computed."""
    band_left_pct: float | None = None
    """Bullet indicator (:func:`ops_logic.display.bullet_geometry`): where the band starts on
    the track [% of its width]; None: no band, nothing drawn."""
    band_width_pct: float | None = None
    target_pct: float | None = None
    value_pct: float | None = None
    off_scale: bool = False

    @property
    def in_band(self) -> bool:
        v = self.value
        return v is not None and (self.lo is None or v >= self.lo - 1e-9) and (
            self.hi is None or v <= self.hi + 1e-9)


@dataclass(frozen=True)
class Adjustment:
    """Whether an adjustment is due. ``status``: ``due``, ``none``, ``no_recommendation``,
    ``unknown`` (positions unknown); ``stale`` says the recommendation is old."""

    status: str
    text: str
    changes: tuple[str, ...] = ()
    stale: bool = False


class FishwayStatus(NamedTuple):
    """The status of one fishway (see the module); a named tuple, as the overview reads two
    every refresh."""

    id: str
    name: str
    state: str
    reason: str
    worst: str
    age_s: float | None
    stale: bool
    metrics: tuple[Metric, ...]
    alarms: dict[str, int] | None
    adjustment: Adjustment
    gauges: str
    gauges_ok: bool
    mode: str
    profile: Profile | None = None
    """The solved profile (when computed; not stored)."""
    computed_ms: int = 0
    """When the status was judged [epoch ms]."""
    data_ms: int | None = None
    """Time of the older of the forebay and tailwater readings it rests on [epoch ms]."""
    fresh_until_ms: int | None = None
    """From this time on [epoch ms] a reading it took as current has gone stale: the status
    no longer holds (None: nothing current)."""
    problems: tuple[str, ...] = ()
    """Overrides of this fishway that could not be applied."""

    @property
    def state_label(self) -> str:
        if self.state == "out_of_service" and self.mode == "maintenance":
            return "MAINTENANCE"
        return STATE_LABELS[self.state]

    def metric(self, key: str) -> Metric:
        return next(m for m in self.metrics if m.key == key)


def metric_band_text(m: Metric, units: str) -> str:
    """The band of a metric in display units (``'band 1.00–1.50 ft, target 1.25'``)."""
    if m.lo is None and m.hi is None:
        return "no target band"
    fv = format_value
    if m.lo is not None and m.hi is not None:
        text = f"band {fv(m.lo, m.kind, units, unit=False)}–{fv(m.hi, m.kind, units)}"
    elif m.hi is not None:
        text = f"max {fv(m.hi, m.kind, units)}"
    else:
        text = f"min {fv(m.lo, m.kind, units)}"
    if m.target is not None:
        text += f", target {fv(m.target, m.kind, units, unit=False)}"
    return text
