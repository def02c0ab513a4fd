"""Units at the edge: parse site-file and command-line values into SI, format SI for display.

Everything inside ``ops_logic`` is SI floats (m, m³/s, m², m/s, W/m³). This module is the only
place that knows about US customary units and about ``pint``. A value is either a bare number,
read in the declared unit system of its source (``"us"``: ft, cfs, ft², ft/s, ft·lbf/s/ft³;
``"si"``: m, m³/s, m², m/s, W/m³), or a string with an explicit unit (``"1.2 m"``, ``"40 cfs"``).

>>> round(to_si("40 cfs", "flow", "si"), 5)
1.13267
>>> round(to_si(1.0, "length", "us"), 4)
0.3048
>>> format_quantity(0.3048, "length", "us")
'1.00 ft'
>>> round(to_si("59 degF", "temperature", "us"), 6)
15.0
"""

from __future__ import annotations

import re
from functools import cache
from typing import Literal

import pint

__all__ = [
    "KINDS",
    "UnitSystem",
    "display_unit",
    "format_quantity",
    "from_si",
    "level_text",
    "to_si",
]

UnitSystem = Literal["us", "si"]

_NUMBER_UNIT = re.compile(r"^([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*([^\d\s].*)$")

# kind -> (SI unit, US customary unit, label in SI, label in US)
KINDS: dict[str, tuple[str, str, str, str]] = {
    "length": ("m", "ft", "m", "ft"),
    "flow": ("m**3/s", "ft**3/s", "m³/s", "cfs"),
    "area": ("m**2", "ft**2", "m²", "ft²"),
    "velocity": ("m/s", "ft/s", "m/s", "ft/s"),
    "power_density": ("W/m**3", "ft*lbf/s/ft**3", "W/m³", "ft·lbf/s/ft³"),
    "loss_coefficient": ("s**2/m**5", "s**2/ft**5", "s²/m⁵", "s²/ft⁵"),
    # water-quality criteria are published in °C and mg/L, so both systems display them so;
    # values given with another unit ("59 degF", "0.006 g/L") are converted
    "temperature": ("degC", "degC", "°C", "°C"),
    "concentration": ("mg/L", "mg/L", "mg/L", "mg/L"),
}


@cache
def _registry() -> pint.UnitRegistry:
    ureg = pint.UnitRegistry()
    ureg.define("cfs = foot ** 3 / second")
    ureg.define("gpm = gallon / minute")
    return ureg


@cache
def _factor(kind: str, system: str) -> float:
    """Multiplier from the display unit of ``system`` to SI for ``kind``."""
    si_unit, us_unit, _, _ = _kind(kind)
    if system == "si":
        return 1.0
    if system != "us":
        raise ValueError(f"unknown unit system {system!r}: use 'us' or 'si'")
    ureg = _registry()
    return float(ureg.Quantity(1.0, us_unit).to(si_unit).magnitude)


def _kind(kind: str) -> tuple[str, str, str, str]:
    try:
        return KINDS[kind]
    except KeyError:
        raise ValueError(f"unknown quantity kind {kind!r}") from None


def to_si(value: float | int | str, kind: str, system: UnitSystem) -> float:
    """Convert a bare number (in ``system``'s unit) or a unit string to the SI value of ``kind``.

    Raises ``ValueError`` with the reason when the string cannot be parsed or has the wrong
    dimension (``"3 cfs"`` given for a length).
    """
    if isinstance(value, bool):
        raise ValueError(f"expected a number or a quantity string, got {value!r}")
    if isinstance(value, int | float):
        return float(value) * _factor(kind, system)
    if not isinstance(value, str):
        raise ValueError(f"expected a number or a quantity string, got {value!r}")
    text = value.strip()
    try:
        return float(text) * _factor(kind, system)
    except ValueError:
        pass
    si_unit = _kind(kind)[0]
    ureg = _registry()
    try:
        m = _NUMBER_UNIT.match(text)
        # number and unit apart, so offset units (degF) are not read as a product
        quantity = ureg.Quantity(float(m.group(1)), m.group(2)) if m else ureg.Quantity(text)
    except Exception as exc:
        raise ValueError(f"cannot read {value!r} as a quantity ({exc})") from None
    if not isinstance(quantity, pint.Quantity) or quantity.dimensionless:
        raise ValueError(f"{value!r} has no unit; give a number or a value with a unit")
    try:
        return float(quantity.to(si_unit).magnitude)
    except pint.DimensionalityError:
        want = _kind(kind)[1 if system == "us" else 0].replace("**", "^")
        raise ValueError(
            f"{value!r} is not a {kind.replace('_', ' ')} (expected e.g. {want})") from None


def from_si(value_si: float, kind: str, system: UnitSystem) -> float:
    """Convert an SI value of ``kind`` to ``system``'s display unit."""
    return value_si / _factor(kind, system)


def display_unit(kind: str, system: UnitSystem) -> str:
    """The label of ``kind``'s display unit in ``system`` (``'cfs'``, ``'m³/s'``...)."""
    _, _, si_label, us_label = _kind(kind)
    return us_label if system == "us" else si_label


def format_quantity(value_si: float, kind: str, system: UnitSystem, digits: int = 2) -> str:
    """Format an SI value in ``system``'s display unit, e.g. ``'1.00 ft'``."""
    return f"{from_si(value_si, kind, system):.{digits}f} {display_unit(kind, system)}"


def level_text(value_m: float, system: UnitSystem) -> str:
    """A level or length [m] as messages give it: the display unit of ``system``, with the SI
    value beside a US one.

    ``"x.xx ft (y.yyy m)"`` with x = value_m / 0.3048 (the conversion of :func:`from_si`, so a
    level read from a US site file shows the feet it was written in), ``"y.yyy m"`` in SI.

    Parameters
    ----------
    value_m : float
        Level (an elevation) or length [m].
    system : str
        ``"us"`` or ``"si"``; another value raises ``ValueError``.

    >>> level_text(to_si(254.0, "length", "us"), "us")
    '254.00 ft (77.419 m)'
    >>> level_text(77.4192, "si")
    '77.419 m'
    """
    if system == "si":
        return f"{value_m:.3f} m"
    if system != "us":
        raise ValueError(f"unknown unit system {system!r}: use 'us' or 'si'")
    return f"{format_quantity(value_m, 'length', 'us')} ({value_m:.3f} m)"
