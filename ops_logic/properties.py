"""Physical properties of fresh liquid water at atmospheric pressure.

Pure functions on SI floats. Both correlations cover 0-40 °C, the range of river water at a
fishway; inputs outside it (or NaN) raise ``ValueError`` rather than being extrapolated.

References
----------
.. [Tanaka2001] Tanaka, M., Girard, G., Davis, R., Peuto, A. and Bignell, N. (2001).
   "Recommended table for the density of water between 0 °C and 40 °C based on recent
   experimental reports." Metrologia 38(4), 301-309.
.. [Kestin1978] Kestin, J., Sokolov, M. and Wakeham, W. A. (1978). "Viscosity of liquid
   water in the range -8 °C to 150 °C." J. Phys. Chem. Ref. Data 7(3), 941-948; the
   same equation is adopted in ISO/TR 3666:1998 "Viscosity of water", which fixes the
   reference value at 20 °C to 1.0016 mPa·s.
"""
from __future__ import annotations

import math

__all__ = ["TEMPERATURE_MAX_C", "TEMPERATURE_MIN_C", "water_density", "water_viscosity"]

TEMPERATURE_MIN_C = 0.0
"""Lowest temperature accepted by the correlations in this module [°C]."""
TEMPERATURE_MAX_C = 40.0
"""Highest temperature accepted by the correlations in this module [°C]."""

# Tanaka et al. (2001), eq. (1) and table 5 (coefficients from memory; the tests compare
# the result with IAPWS-95 through the ``iapws`` package).
_TANAKA_A1_C = -3.983035
_TANAKA_A2_C = 301.797
_TANAKA_A3_C2 = 522528.9
_TANAKA_A4_C = 69.34881
_TANAKA_A5_KG_M3 = 999.974950

# Kestin, Sokolov & Wakeham (1978) / ISO/TR 3666:1998 (coefficients from memory; the tests
# compare the result with the IAPWS 2008 viscosity formulation through ``iapws``).
_MU_20C_PA_S = 1.0016e-3
_KESTIN_COEFFS = (1.2378, -1.303e-3, 3.06e-6, 2.55e-8)


def _check_temperature(temperature_c: float) -> float:
    """Return ``temperature_c`` as a float, raising ValueError outside 0-40 °C or for NaN."""
    t = float(temperature_c)
    if math.isnan(t) or not TEMPERATURE_MIN_C <= t <= TEMPERATURE_MAX_C:
        raise ValueError(
            f"temperature_c={temperature_c!r} is outside the validity range "
            f"{TEMPERATURE_MIN_C:g}-{TEMPERATURE_MAX_C:g} °C of the water-property correlations"
        )
    return t


def water_density(temperature_c: float) -> float:
    r"""Density of air-free fresh water at 101.325 kPa, Tanaka et al. (2001).

    .. math::
        \rho = a_5\left[1 - \frac{(t + a_1)^2 (t + a_2)}{a_3 (t + a_4)}\right]

    with :math:`a_1 = -3.983035` °C, :math:`a_2 = 301.797` °C,
    :math:`a_3 = 522528.9` °C², :math:`a_4 = 69.34881` °C and
    :math:`a_5 = 999.974950` kg/m³.

    Parameters
    ----------
    temperature_c : float
        Water temperature (ITS-90) [°C]

    Returns
    -------
    rho : float
        Density [kg/m³]

    Notes
    -----
    Valid 0-40 °C (the range of the fit); outside it, or for NaN, ``ValueError`` is raised.
    The fit is for standard mean ocean water isotopic composition; it agrees with IAPWS-95
    within 0.001 % over the range (checked in the tests). Air-saturated water is very
    slightly lighter (a few parts per million, from memory), which is negligible here.

    Examples
    --------
    >>> round(water_density(10.0), 2)
    999.7
    >>> round(water_density(20.0), 2)
    998.21

    References
    ----------
    .. [1] Tanaka et al. (2001), Metrologia 38(4), 301-309 (see module references).
    """
    t = _check_temperature(temperature_c)
    return _TANAKA_A5_KG_M3 * (
        1.0
        - (t + _TANAKA_A1_C) ** 2 * (t + _TANAKA_A2_C) / (_TANAKA_A3_C2 * (t + _TANAKA_A4_C))
    )


def water_viscosity(temperature_c: float) -> float:
    r"""Dynamic viscosity of fresh water at atmospheric pressure, Kestin et al. (1978).

    .. math::
        \log_{10}\frac{\mu(t)}{\mu(20\,°C)} = \frac{20 - t}{t + 96}
        \left[1.2378 - 1.303\times10^{-3}(20 - t) + 3.06\times10^{-6}(20 - t)^2
        + 2.55\times10^{-8}(20 - t)^3\right]

    with :math:`\mu(20\,°C) = 1.0016\times10^{-3}` Pa·s (ISO/TR 3666:1998).

    Parameters
    ----------
    temperature_c : float
        Water temperature [°C]

    Returns
    -------
    mu : float
        Dynamic viscosity [Pa·s]

    Notes
    -----
    The published equation covers a wider range, but this function accepts 0-40 °C only
    (the range of the module) and raises ``ValueError`` outside it or for NaN. It agrees
    with the IAPWS 2008 viscosity formulation within 0.15 % over 0-40 °C (checked in the
    tests; the largest difference, about 0.1 %, is near 5 °C).

    Examples
    --------
    >>> round(water_viscosity(20.0) * 1e3, 4)
    1.0016
    >>> round(water_viscosity(10.0) * 1e3, 3)
    1.307

    References
    ----------
    .. [1] Kestin, Sokolov & Wakeham (1978), J. Phys. Chem. Ref. Data 7(3), 941-948;
       ISO/TR 3666:1998 (see module references).
    """
    t = _check_temperature(temperature_c)
    d = 20.0 - t
    c0, c1, c2, c3 = _KESTIN_COEFFS
    exponent = d / (t + 96.0) * (c0 + c1 * d + c2 * d**2 + c3 * d**3)
    return _MU_20C_PA_S * 10.0**exponent
