"""Values as operators read them: SI values in the site's display units, as text.

One table of *display kinds* (length, elevation, flow, velocity, power density, area,
temperature, dissolved oxygen, percent, pumps, seconds, count) gives each its unit family in
:mod:`ops_logic.units` (or a fixed unit) and its digits in US customary and SI display.
Used for every value the tool shows or says: the dashboard, the overview status the ingest
stores (:mod:`db.status`), messages. Values typed by a user are read in the site's display
units or with an explicit unit (``"0.4 ft"``, ``"0.12 m"``) for lengths, flows, velocities and
power densities; temperatures are °C, dissolved oxygen mg/L.

>>> format_value(0.3048, "length", "us"), format_value(0.3048, "length", "si")
('1.00 ft', '0.305 m')
>>> format_value(77.343, "elevation", "us"), format_value(2.83168, "flow", "us")
('253.75 ft', '100.0 cfs')
>>> format_value(None, "do", "us"), format_value(8.25, "do", "us")
('—', '8.25 mg/L')
>>> round(parse_value("1.2", "length", "us"), 5), round(parse_value("0.4 m", "length", "us"), 5)
(0.36576, 0.4)

A *bullet indicator* is a horizontal track with the acceptable band drawn on it, a tick at the
target and a marker at the value (the practice of ANSI/ISA-101 high-performance displays: the
value beside its band, so how far off it is shows at a glance). Its scale depends on the band
only, so the track stays put as the value moves:

>>> b = bullet_geometry(0.4, 0.3048, 0.4572, 0.381)
>>> round(b.band_left_pct, 1), round(b.band_width_pct, 1), round(b.value_pct, 1)
(25.0, 50.0, 56.2)
>>> bullet_geometry(12.0, None, 21.0, None).value_pct > 0    # one-sided band from zero
True
>>> bullet_geometry(None, 1.0, 2.0, None).value_pct is None
True
"""

from __future__ import annotations

import math
from typing import NamedTuple

from ops_logic.units import KINDS, display_unit, from_si, to_si

__all__ = ["DISPLAY_KINDS", "Bullet", "bullet_geometry", "display_number", "format_value",
           "parse_value", "unit_label"]

# display kind -> (ops_logic.units kind or None, fixed unit label, digits us, digits si)
_DISPLAY: dict[str, tuple[str | None, str, int, int]] = {
    "length": ("length", "", 2, 3),
    "elevation": ("length", "", 2, 3),
    "flow": ("flow", "", 1, 3),
    "velocity": ("velocity", "", 2, 3),
    "power_density": ("power_density", "", 2, 0),
    "area": ("area", "", 1, 2),
    "temperature": (None, "°C", 1, 1),
    "do": (None, "mg/L", 2, 2),
    "pct": (None, "%", 1, 1),
    "pumps": (None, "pumps", 1, 1),
    "seconds": (None, "s", 0, 0),
    "count": (None, "", 0, 0),
}
DISPLAY_KINDS: tuple[str, ...] = tuple(_DISPLAY)
"""Every display kind."""


def unit_label(kind: str, units: str) -> str:
    """The display unit of a display kind (``'ft'``, ``'cfs'``, ``'°C'``...)."""
    base, label, _, _ = _DISPLAY[kind]
    return display_unit(base, units) if base else label  # type: ignore[arg-type]


def display_number(value_si: float, kind: str, units: str) -> float:
    """An SI value in the display unit of ``kind``."""
    base = _DISPLAY[kind][0]
    return from_si(value_si, base, units) if base else value_si  # type: ignore[arg-type]


def format_value(value_si: float | None, kind: str, units: str, *, unit: bool = True,
                 digits: int | None = None) -> str:
    """An SI value as display text with its unit; ``'—'`` for None or NaN."""
    if value_si is None or not math.isfinite(value_si):
        return "—"
    _, _, d_us, d_si = _DISPLAY[kind]
    d = digits if digits is not None else (d_us if units == "us" else d_si)
    text = f"{display_number(value_si, kind, units):.{d}f}"
    label = unit_label(kind, units)
    return f"{text} {label}" if unit and label else text


def parse_value(text: str, kind: str, units: str) -> float:
    """A value typed by a user, in display units or with its own unit, as SI; ValueError
    when it is not a finite number of that kind."""
    text = (text or "").strip()
    if not text:
        raise ValueError("give a value")
    base = _DISPLAY[kind][0]
    if base in KINDS:
        value = to_si(text, base, units)  # type: ignore[arg-type]
    else:
        try:
            value = float(text)
        except ValueError:
            raise ValueError(f"{text!r} is not a number (in {_DISPLAY[kind][1]})") from None
    if not math.isfinite(value):
        raise ValueError(f"{text!r} is not a finite number")
    return value


class Bullet(NamedTuple):
    """Positions on the track, in percent of its width (None: not drawn)."""

    band_left_pct: float | None
    band_width_pct: float | None
    target_pct: float | None
    value_pct: float | None
    off_scale: bool


def _scale(lo: float | None, hi: float | None) -> tuple[float, float] | None:
    if lo is not None and hi is not None:
        span = hi - lo
        return lo - 0.5 * span, hi + 0.5 * span
    if hi is not None:
        return (0.0, 1.5 * hi) if hi > 0 else (hi - 1.0, hi + 1.0)
    if lo is not None:
        return (0.0, 2.0 * lo) if lo > 0 else (lo - 1.0, lo + 1.0)
    return None


def bullet_geometry(value: float | None, lo: float | None, hi: float | None,
                    target: float | None) -> Bullet | None:
    """The bullet of a value against a band (any unit, the same for all); None without a
    band. Two-sided bands span the middle half of the track; a one-sided band runs from zero
    (a maximum over 2/3 of the track, a minimum over 1/2)."""
    scale = _scale(lo, hi)
    if scale is None:
        return None
    a, w = scale[0], 0.01 * (scale[1] - scale[0])  # percent of the track: (x - a) / w
    left = (lo - a) / w if lo is not None else 0.0
    right = (hi - a) / w if hi is not None else 100.0
    v = None
    off = False
    if value is not None and math.isfinite(value):
        raw = (value - a) / w
        off = raw < 0.0 or raw > 100.0
        v = min(max(raw, 0.0), 100.0)
    t = (target - a) / w if target is not None else None
    return Bullet(left, right - left, t, v, off)
