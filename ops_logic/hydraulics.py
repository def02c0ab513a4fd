"""Discharge through the openings of a pool-type fishway: weirs, orifices, vertical slots.

Pure functions on SI floats (m, m³/s, W/m³), g = 9.80665 m/s². Each documents its equation,
its validity range (enforced: outside it a ``ValueError`` names the limit) and its source; the
full references are listed in DEVELOPERS.md, section References.

The solver does not call these checked functions in its inner loop: it uses the same equations
through :mod:`ops_logic.openings`, which also returns derivatives and reports (rather than raises)
departures from the validity range, so a profile can still be shown with a warning.
"""

from __future__ import annotations

import math
from bisect import bisect_left

from ops_logic.properties import water_density

__all__ = [
    "KC_TABLE",
    "G",
    "kindsvater_carter_coefficients",
    "orifice_flow",
    "power_density",
    "vertical_slot_flow",
    "villemonte_factor",
    "weir_flow",
]

G = 9.80665
"""Standard gravity [m/s²]."""

KC_HEAD_CORRECTION_M = 0.001
"""Kindsvater–Carter head correction kh [m] (ISO 1438; USBR Water Measurement Manual ch. 7)."""

KC_TABLE: tuple[tuple[float, float, float, float], ...] = (
    # b/B,  a,      beta,    kb [m]   -- Ce = a + beta·h/P; ISO 1438 table (from memory,
    # consistent with the US-unit lines of the USBR Water Measurement Manual, ch. 7).
    (0.0, 0.587, -0.0023, 0.0024),
    (0.2, 0.589, -0.0018, 0.0024),
    (0.4, 0.591, 0.0058, 0.0027),
    (0.5, 0.592, 0.011, 0.0030),
    (0.6, 0.593, 0.018, 0.0036),
    (0.7, 0.595, 0.030, 0.0041),
    (0.8, 0.597, 0.045, 0.0043),
    (0.9, 0.599, 0.064, 0.0037),
    (1.0, 0.602, 0.075, -0.0009),
)

KC_LIMITS = {"min_head_m": 0.03, "max_head_over_height": 2.5, "min_height_m": 0.10,
             "min_width_m": 0.15}
"""Validity of Kindsvater–Carter: h > 0.03 m, h/P ≤ 2.5, P ≥ 0.10 m, b ≥ 0.15 m
(ISO 1438 allows h/P to 2.5, from memory; ``fluids`` documents h/P < 2)."""


def kindsvater_carter_coefficients(width_ratio: float) -> tuple[float, float, float]:
    """Kindsvater–Carter coefficients ``(a, beta, kb)`` for a weir of contraction ratio b/B.

    Ce = a + beta·h/P; kb is the width correction [m]. Linear interpolation in the ISO 1438
    table (:data:`KC_TABLE`), valid for 0 ≤ b/B ≤ 1.

    >>> kindsvater_carter_coefficients(1.0)
    (0.602, 0.075, -0.0009)
    >>> a, beta, kb = kindsvater_carter_coefficients(0.55)
    >>> round(a, 4), round(beta, 4), round(kb, 5)
    (0.5925, 0.0145, 0.0033)

    Reference: Kindsvater & Carter (1957); ISO 1438:2017; USBR Water Measurement Manual ch. 7.
    """
    if not 0.0 <= width_ratio <= 1.0:
        raise ValueError(f"contraction ratio b/B must lie in [0, 1], got {width_ratio:g}")
    ratios = [row[0] for row in KC_TABLE]
    i = bisect_left(ratios, width_ratio)
    if ratios[i] == width_ratio:
        return KC_TABLE[i][1:]
    lo, hi = KC_TABLE[i - 1], KC_TABLE[i]
    t = (width_ratio - lo[0]) / (hi[0] - lo[0])
    a, beta, kb = (lo[k] + t * (hi[k] - lo[k]) for k in (1, 2, 3))
    return a, beta, kb


def villemonte_factor(submergence_ratio: float, exponent: float = 1.5) -> float:
    """Villemonte submergence factor Qs/Qf = (1 − (H₂/H₁)^n)^0.385, n = 1.5 for rectangular weirs.

    ``submergence_ratio`` is H₂/H₁ (downstream over upstream head above the crest), in [0, 1].

    >>> round(villemonte_factor(0.5), 4)
    0.8454

    Reference: Villemonte (1947), "Submerged weir discharge studies", Eng. News-Record 139.
    """
    if not 0.0 <= submergence_ratio <= 1.0:
        raise ValueError(f"submergence ratio H2/H1 must lie in [0, 1], got {submergence_ratio:g}")
    return (1.0 - submergence_ratio**exponent) ** 0.385


def weir_flow(head: float, crest_width: float, *, weir_height: float,
              channel_width: float | None = None, downstream_head: float = 0.0,
              cd: float | None = None) -> float:
    """Flow over a sharp-crested rectangular weir [m³/s], free or submerged.

    With ``cd=None`` (Kindsvater–Carter, ISO 1438 / USBR Water Measurement Manual)::

        Q = Ce · (2/3) · √(2g) · (b + kb) · (h + kh)^1.5,   Ce = a + β·h/P,   kh = 0.001 m

    with a, β, kb from b/B (``channel_width=None`` means a full-width weir, b/B = 1). With ``cd``
    given: Q = (2/3)·cd·√(2g)·b·h^1.5. A ``downstream_head`` h₂ > 0 (downstream level above the
    crest) multiplies the free flow by the Villemonte factor (1 − (h₂/h)^1.5)^0.385.

    Parameters: head — upstream level above the crest h [m]; crest_width — b [m]; weir_height —
    crest above the approach floor P [m]; channel_width — approach channel width B [m];
    downstream_head — h₂ [m]; cd — discharge coefficient [-] (a calibrated value overrides the
    method).

    Validity (Kindsvater–Carter): h ≥ 0.03 m, h/P ≤ 2.5, P ≥ 0.10 m, b ≥ 0.15 m; h₂ ≤ h. A head
    ≤ 0 gives 0.

    >>> round(weir_flow(0.30, 2.0, weir_height=0.40), 4)   # fluids gives 0.64156 (kb -0.001)
    0.6416
    >>> round(weir_flow(0.30, 2.0, weir_height=0.40, downstream_head=0.15), 4)
    0.5424

    References: Kindsvater & Carter (1957), J. Hydraulics Div. ASCE 83(6); ISO 1438:2017;
    Villemonte (1947).
    """
    if head <= 0.0:
        return 0.0
    if crest_width <= 0.0:
        raise ValueError(f"crest width must be > 0, got {crest_width:g} m")
    if weir_height <= 0.0:
        raise ValueError(f"weir height must be > 0, got {weir_height:g} m")
    if downstream_head > head:
        raise ValueError(f"downstream head {downstream_head:g} m exceeds upstream head {head:g} m")
    if cd is not None:
        if cd <= 0.0:
            raise ValueError(f"discharge coefficient must be > 0, got {cd:g}")
        free = (2.0 / 3.0) * cd * math.sqrt(2.0 * G) * crest_width * head**1.5
    else:
        _check_kc_range(head, crest_width, weir_height)
        ratio = 1.0 if channel_width is None else crest_width / channel_width
        if ratio > 1.0:
            raise ValueError(f"crest width {crest_width:g} m exceeds channel width "
                             f"{channel_width:g} m")
        a, beta, kb = kindsvater_carter_coefficients(ratio)
        ce = a + beta * head / weir_height
        free = (ce * (2.0 / 3.0) * math.sqrt(2.0 * G) * (crest_width + kb)
                * (head + KC_HEAD_CORRECTION_M) ** 1.5)
    if downstream_head > 0.0:
        return free * villemonte_factor(downstream_head / head)
    return free


def _check_kc_range(head: float, width: float, height: float) -> None:
    lim = KC_LIMITS
    if head < lim["min_head_m"]:
        raise ValueError(f"head {head:g} m below the Kindsvater–Carter minimum "
                         f"{lim['min_head_m']} m (give cd to use the simple form)")
    if head / height > lim["max_head_over_height"]:
        raise ValueError(f"h/P = {head / height:.2f} beyond the Kindsvater–Carter limit "
                         f"{lim['max_head_over_height']}")
    if height < lim["min_height_m"]:
        raise ValueError(f"weir height {height:g} m below the Kindsvater–Carter minimum "
                         f"{lim['min_height_m']} m")
    if width < lim["min_width_m"]:
        raise ValueError(f"crest width {width:g} m below the Kindsvater–Carter minimum "
                         f"{lim['min_width_m']} m")


def orifice_flow(area: float, head_difference: float, *, cd: float = 0.61) -> float:
    """Flow through a submerged orifice [m³/s]: Q = cd · A · √(2g·Δh).

    area — orifice area A [m²]; head_difference — upstream minus downstream level Δh [m]
    (≤ 0 gives 0); cd — discharge coefficient, 0.61 for a sharp-edged orifice (USBR Water
    Measurement Manual ch. 9, from memory; measured 0.603–0.620 in classic hydraulics texts).

    >>> round(orifice_flow(0.5, 0.3), 4)
    0.7398

    Reference: USBR (2001) Water Measurement Manual, ch. 9 (submerged orifices, ±2 %).
    """
    if area <= 0.0:
        raise ValueError(f"orifice area must be > 0, got {area:g} m²")
    if cd <= 0.0:
        raise ValueError(f"discharge coefficient must be > 0, got {cd:g}")
    if head_difference <= 0.0:
        return 0.0
    return cd * area * math.sqrt(2.0 * G * head_difference)


def vertical_slot_flow(slot_width: float, upstream_depth: float, head_difference: float, *,
                       cd: float) -> float:
    """Flow through a vertical slot [m³/s]: Q = cd · b · h₁ · √(2g·Δh).

    slot_width — b [m]; upstream_depth — depth above the slot invert upstream h₁ [m];
    head_difference — drop across the slot Δh [m] (≤ 0 gives 0); cd — discharge coefficient:
    about 0.65 for sharp-edged to above 0.85 for rounded slots (Larinier 2002, from memory).
    Rajaratnam, Van der Vinne & Katopodis (1986) and Rajaratnam, Katopodis & Solanki (1992)
    give the dimensionless design curves Q* = Q/√(g·S₀·b⁵) from which site values are taken.

    >>> round(vertical_slot_flow(0.30, 1.0, 0.10, cd=0.75), 4)
    0.3151

    References: Larinier (2002), Bull. Fr. Pêche Piscic. 364 suppl.; Rajaratnam et al. (1986),
    J. Hydraul. Eng. 112(10); Rajaratnam et al. (1992), Can. J. Civ. Eng. 19.
    """
    if slot_width <= 0.0:
        raise ValueError(f"slot width must be > 0, got {slot_width:g} m")
    if cd <= 0.0:
        raise ValueError(f"discharge coefficient must be > 0, got {cd:g}")
    if upstream_depth <= 0.0 or head_difference <= 0.0:
        return 0.0
    if head_difference > upstream_depth:
        raise ValueError(f"drop {head_difference:g} m exceeds the upstream depth "
                         f"{upstream_depth:g} m")
    return cd * slot_width * upstream_depth * math.sqrt(2.0 * G * head_difference)


def power_density(flow: float, head_drop: float, pool_volume: float, *,
                  temperature_c: float = 10.0) -> float:
    """Volumetric power dissipation in a pool [W/m³]: P/V = ρ·g·Q·Δh / V.

    flow — Q into the pool [m³/s]; head_drop — drop into the pool Δh [m]; pool_volume — wetted
    volume V [m³]; temperature_c — water temperature for ρ [°C]. The form used is the energy
    entering the pool per unit wetted volume (Towler, Mulligan & Haro 2015 show that published
    "energy dissipation factor" forms differ: this is the ρgQΔh/V one). 4 ft·lbf/s/ft³ =
    191.5 W/m³.

    >>> round(power_density(1.0, 0.3, 20.0))
    147

    References: Larinier (2002); Bates (2000); Towler, Mulligan & Haro (2015), Ecol. Eng.
    """
    if pool_volume <= 0.0:
        raise ValueError(f"pool volume must be > 0, got {pool_volume:g} m³")
    if flow < 0.0 or head_drop < 0.0:
        raise ValueError("flow and head drop must be ≥ 0")
    return water_density(temperature_c) * G * flow * head_drop / pool_volume
