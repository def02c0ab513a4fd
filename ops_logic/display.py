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
"""

from __future__ import annotations

import math

from ops_logic.units import KINDS, display_unit, from_si, to_si

__all__ = ["DISPLAY_KINDS", "display_number", "format_value", "parse_value", "unit_label"]

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
