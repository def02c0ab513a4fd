"""Openings of a fishway control (weir, orifice, vertical slot) as the profile solver uses them.

Each opening gives its flow and the two partial derivatives for an upstream and a downstream
water level, using the equations of :mod:`ops_logic.hydraulics` (Kindsvater–Carter with the
Villemonte submergence factor, orifices, vertical slots). Unlike the checked public functions they
never raise in the middle of an iteration: :meth:`Opening.notes` reports afterwards where the
final state lies outside a method's validity range, so a profile is shown with a warning rather
than not at all. A *control* is a tuple of openings in parallel between two pools.

:func:`upstream_level` inverts a control: given the flow through it and the level below it, it
finds the level above it by a safeguarded Newton iteration (a free weir does not fix the level
below it, but every control fixes the level above it, so the solver marches upstream).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Protocol

from ops_logic.hydraulics import (
    KC_HEAD_CORRECTION_M,
    KC_LIMITS,
    G,
    kindsvater_carter_coefficients,
)

__all__ = [
    "Opening",
    "OrificeOpening",
    "SlotOpening",
    "WeirOpening",
    "control_flow",
    "upstream_level",
]

SQRT_2G = math.sqrt(2.0 * G)
_KC_MIN_HEAD = KC_LIMITS["min_head_m"]
_VILLEMONTE_EXP = 0.385


class Opening(Protocol):
    """One opening: ``flow(zu, zd) -> (q, dq/dzu, dq/dzd)``; ``low_m`` is where flow stops."""

    low_m: float
    kind: str

    def flow(self, zu: float, zd: float) -> tuple[float, float, float]: ...

    def notes(self, zu: float, zd: float) -> list[str]: ...


@dataclass(slots=True)
class WeirOpening:
    """Sharp-crested rectangular weir: Kindsvater–Carter free flow × Villemonte factor.

    ``height_m`` is P (crest above the approach floor); ``channel_width_m`` is B for the
    contraction ratio (``None``: full width); ``cd`` switches to Q = (2/3)·cd·√(2g)·b·h^1.5;
    ``count`` identical notches side by side; ``cd_factor`` scales the Kindsvater–Carter
    coefficient Ce (a calibrated correction that keeps the method's form).
    """

    crest_m: float
    width_m: float
    height_m: float
    channel_width_m: float | None = None
    cd: float | None = None
    count: int = 1
    cd_factor: float = 1.0
    kind: str = "weir"
    low_m: float = 0.0
    _c0: float = 0.0
    _a: float = 0.0
    _b_over_p: float = 0.0
    _kh: float = 0.0

    def __post_init__(self) -> None:
        self.low_m = self.crest_m
        height = max(self.height_m, 1e-6)
        if self.cd is not None:
            self._c0 = (2.0 / 3.0) * SQRT_2G * self.width_m * self.count * self.cd_factor
            self._a, self._b_over_p, self._kh = self.cd, 0.0, 0.0
        else:
            ratio = 1.0 if self.channel_width_m is None else self.width_m / self.channel_width_m
            a, beta, kb = kindsvater_carter_coefficients(min(max(ratio, 0.0), 1.0))
            self._c0 = (2.0 / 3.0) * SQRT_2G * (self.width_m + kb) * self.count * self.cd_factor
            self._a, self._b_over_p, self._kh = a, beta / height, KC_HEAD_CORRECTION_M

    def flow(self, zu: float, zd: float) -> tuple[float, float, float]:
        h1 = zu - self.crest_m
        if h1 <= 0.0:
            return 0.0, 0.0, 0.0
        if h1 >= _KC_MIN_HEAD or self._kh == 0.0:
            he = h1 + self._kh
            ce = self._a + self._b_over_p * h1
            root = math.sqrt(he)
            qf = self._c0 * ce * he * root
            dqf = self._c0 * (self._b_over_p * he * root + 1.5 * ce * root)
        else:
            # below the method's minimum head the head correction kh would leave a jump at
            # h = 0: scale the flow at the minimum head by (h/h_min)^1.5 instead (flagged)
            he = _KC_MIN_HEAD + self._kh
            q_min = self._c0 * (self._a + self._b_over_p * _KC_MIN_HEAD) * he * math.sqrt(he)
            t = h1 / _KC_MIN_HEAD
            qf = q_min * t * math.sqrt(t)
            dqf = 1.5 * q_min * math.sqrt(t) / _KC_MIN_HEAD
        h2 = zd - self.crest_m
        if h2 <= 0.0:
            return qf, dqf, 0.0
        r = h2 / h1
        if r >= 1.0:
            return 0.0, 0.0, 0.0
        r15 = r * math.sqrt(r)
        base = 1.0 - r15
        s = base**_VILLEMONTE_EXP
        ds_dr = -_VILLEMONTE_EXP * 1.5 * math.sqrt(r) * s / base
        return qf * s, dqf * s - qf * ds_dr * r / h1, qf * ds_dr / h1

    def notes(self, zu: float, zd: float) -> list[str]:
        h1 = zu - self.crest_m
        out: list[str] = []
        if h1 <= 0.0 or self.cd is not None:
            return out
        if h1 < KC_LIMITS["min_head_m"]:
            out.append(f"head {h1:.3f} m below the Kindsvater–Carter minimum 0.03 m")
        if h1 / max(self.height_m, 1e-6) > KC_LIMITS["max_head_over_height"]:
            out.append(f"h/P = {h1 / max(self.height_m, 1e-6):.2f} beyond the "
                       "Kindsvater–Carter limit 2.5")
        return out


@dataclass(slots=True)
class OrificeOpening:
    """Rectangular orifice (or low notch) of width × height, invert at ``invert_m``.

    Full orifice, drowned both sides: Q = cd·A·√(2gΔh). Partly filled or partly drowned, the
    classical split into a free part above the downstream level and a drowned part below it::

        Q = (2/3)·cd·b·√(2g)·[(zu − ya)^1.5 − (zu − yb)^1.5] + cd·b·d·√(2g(zu − zd))

    with ya = max(zd, invert), yb = min(zu, soffit), d = min(zd, soffit) − invert (≥ 0): it is
    continuous across the transitions (Henderson 1966, Open Channel Flow, §6; Chow 1959 §14).
    """

    invert_m: float
    width_m: float
    height_m: float
    cd: float = 0.61
    count: int = 1
    kind: str = "orifice"
    low_m: float = 0.0
    soffit_m: float = 0.0

    def __post_init__(self) -> None:
        self.low_m = self.invert_m
        self.soffit_m = self.invert_m + self.height_m

    def flow(self, zu: float, zd: float) -> tuple[float, float, float]:
        inv, sof = self.invert_m, self.soffit_m
        if zu <= inv or zu <= zd:
            return 0.0, 0.0, 0.0
        k = self.cd * self.width_m * SQRT_2G * self.count
        q = dqu = dqd = 0.0
        ya = zd if zd > inv else inv
        yb = zu if zu < sof else sof
        if yb > ya:
            ta = math.sqrt(zu - ya)
            tb = math.sqrt(zu - yb)
            q += (2.0 / 3.0) * k * (ta**3 - tb**3)
            dqu += k * (ta - tb)
            if zd > inv:
                dqd -= k * ta
        if zd > inv:
            d = (zd if zd < sof else sof) - inv
            delta = zu - zd
            root = math.sqrt(delta)
            q += k * d * root
            dqu += k * d / (2.0 * root)
            dqd += k * ((root if zd < sof else 0.0) - d / (2.0 * root))
        return q, dqu, dqd

    def notes(self, zu: float, zd: float) -> list[str]:
        if self.invert_m < zu < self.soffit_m:
            return [f"orifice not running full (upstream level {zu - self.invert_m:.2f} m above "
                    f"its invert, height {self.height_m:.2f} m): treated as a low notch"]
        return []

    @property
    def area_m2(self) -> float:
        return self.width_m * self.height_m * self.count


@dataclass(slots=True)
class SlotOpening:
    """Vertical slot: Q = cd·b·h₁·√(2gΔh), h₁ depth above the slot invert upstream (Larinier
    2002 form); with the level below under the invert, Δh is taken to the invert."""

    invert_m: float
    width_m: float
    cd: float = 0.75
    kind: str = "slot"
    low_m: float = 0.0

    def __post_init__(self) -> None:
        self.low_m = self.invert_m

    def flow(self, zu: float, zd: float) -> tuple[float, float, float]:
        y1 = zu - self.invert_m
        if y1 <= 0.0 or zu <= zd:
            return 0.0, 0.0, 0.0
        k = self.cd * self.width_m * SQRT_2G
        if zd > self.invert_m:
            root = math.sqrt(zu - zd)
            q = k * y1 * root
            return q, k * (root + y1 / (2.0 * root)), -k * y1 / (2.0 * root)
        root = math.sqrt(y1)
        return k * y1 * root, 1.5 * k * root, 0.0

    def notes(self, zu: float, zd: float) -> list[str]:
        return []


def control_flow(openings: tuple[Opening, ...], zu: float, zd: float
                 ) -> tuple[float, float, float]:
    """Total flow and derivatives of openings in parallel between levels ``zu`` and ``zd``."""
    q = dqu = dqd = 0.0
    for opening in openings:
        a, b, c = opening.flow(zu, zd)
        q += a
        dqu += b
        dqd += c
    return q, dqu, dqd


def upstream_level(openings: tuple[Opening, ...], flow_m3s: float, zd: float,
                   guess: float | None = None, *, tol_m: float = 1e-10,
                   low_m: float | None = None) -> tuple[float, float, float]:
    """Level above a control that passes ``flow_m3s`` with the level ``zd`` below it.

    Returns ``(zu, dq/dzu, dq/dzd)`` at the solution. Safeguarded Newton: the flow is
    increasing in ``zu``; a bracket [lo, hi] is kept and bisection replaces any Newton step that
    leaves it. ``flow_m3s`` ≤ 0 gives the level at which flow starts (the lowest opening, or
    ``zd`` if higher).
    """
    if low_m is None:
        low_m = min(o.low_m for o in openings)
    lo = zd if zd > low_m else low_m
    if flow_m3s <= 0.0:
        return lo, 0.0, 0.0
    z = guess if guess is not None and guess > lo else lo + 0.1
    hi = math.inf
    single = openings[0].flow if len(openings) == 1 else None
    for _ in range(200):
        q, dqu, dqd = single(z, zd) if single is not None else control_flow(openings, z, zd)
        f = q - flow_m3s
        if abs(f) <= 1e-12 * flow_m3s:
            return z, dqu, dqd
        if f > 0.0:
            hi = min(hi, z)
        else:
            lo = max(lo, z)
        if hi - lo <= 4e-15 * max(abs(z), 1.0) + tol_m * 1e-4:
            return z, dqu, dqd
        z_new = z - f / dqu if dqu > 0.0 else math.nan
        if not lo < z_new < hi:
            z_new = 0.5 * (lo + hi) if hi < math.inf else z + 1.0
        z = z_new
    raise ArithmeticError(f"no level passes {flow_m3s:g} m³/s over the control above {zd:.3f} m")
