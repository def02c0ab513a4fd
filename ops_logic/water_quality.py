"""Dissolved-oxygen saturation in fresh water and the site barometric pressure.

Functions accept a float or a numpy array (any array-like) and return the same kind: a
Python float for scalar input, a ``numpy.ndarray`` otherwise. Inputs outside the validity
range, or NaN, raise ``ValueError``: mask missing readings before calling.

References
----------
.. [BensonKrause1984] Benson, B. B. and Krause, D. (1984). "The concentration and isotopic
   fractionation of oxygen dissolved in freshwater and seawater in equilibrium with the
   atmosphere." Limnology and Oceanography 29(3), 620-632.
.. [APHA4500O] APHA, AWWA, WEF. Standard Methods for the Examination of Water and
   Wastewater, method 4500-O (Oxygen, dissolved), table of oxygen solubility and its
   pressure correction; the same equations underlie the USGS dissolved-oxygen tables.
.. [USSA1976] U.S. Standard Atmosphere, 1976 (document S/T 76-1562), the joint US
   government standard atmosphere.
"""
from __future__ import annotations

from typing import overload

import numpy as np
import numpy.typing as npt

from ops_logic.properties import TEMPERATURE_MAX_C, TEMPERATURE_MIN_C

__all__ = [
    "ELEVATION_MAX_M",
    "ELEVATION_MIN_M",
    "PRESSURE_MAX_KPA",
    "PRESSURE_MIN_KPA",
    "barometric_pressure_kpa",
    "oxygen_solubility",
    "percent_saturation",
]

KELVIN_OFFSET = 273.15
STANDARD_ATMOSPHERE_KPA = 101.325

PRESSURE_MIN_KPA = 50.0
"""Lowest barometric pressure accepted by :func:`oxygen_solubility` [kPa] (limit chosen here)."""
PRESSURE_MAX_KPA = 110.0
"""Highest barometric pressure accepted by :func:`oxygen_solubility` [kPa] (limit chosen here)."""

ELEVATION_MIN_M = -500.0
"""Lowest site elevation accepted by :func:`barometric_pressure_kpa` [m] (limit chosen here)."""
ELEVATION_MAX_M = 11_000.0
"""Highest site elevation accepted by :func:`barometric_pressure_kpa` [m] (the troposphere)."""

# Benson & Krause (1984) as printed in Standard Methods 4500-O (seen, REFERENCES.md).
_BK_COEFFS = (-139.34411, 1.575701e5, -6.642308e7, 1.243800e10, -8.621949e11)

# U.S. Standard Atmosphere 1976, lowest layer (0-11 km geopotential).
_USSA_T0_K = 288.15
_USSA_LAPSE_K_M = 0.0065
_USSA_G0_M_S2 = 9.80665
_USSA_M0_KG_MOL = 0.0289644
_USSA_R_J_MOL_K = 8.31432
_USSA_EARTH_RADIUS_M = 6_356_766.0

ArrayLike = npt.ArrayLike


def _as_checked_array(value: ArrayLike, name: str, low: float, high: float, unit: str):
    """Return ``value`` as a float array, raising ValueError for NaN or values outside."""
    arr = np.asarray(value, dtype=float)
    if np.isnan(arr).any():
        raise ValueError(f"{name} contains NaN; mask missing readings before calling")
    if ((arr < low) | (arr > high)).any():
        bad = arr[(arr < low) | (arr > high)].ravel()[0]
        raise ValueError(f"{name}={bad!r} is outside the validity range {low:g}-{high:g} {unit}")
    return arr


def _is_scalar(*values: ArrayLike) -> bool:
    return all(np.ndim(v) == 0 for v in values)


def _vapour_pressure_atm(temperature_c: np.ndarray) -> np.ndarray:
    r"""Saturation vapour pressure of water in atm, the fit printed with Standard Methods.

    .. math::
        \ln P_{wv} = 11.8571 - \frac{3840.70}{T} - \frac{216961}{T^2}
    """
    t_k = temperature_c + KELVIN_OFFSET
    return np.exp(11.8571 - 3840.70 / t_k - 216961.0 / t_k**2)


@overload
def oxygen_solubility(temperature_c: float, pressure_kpa: float = ...) -> float: ...
@overload
def oxygen_solubility(
    temperature_c: npt.ArrayLike, pressure_kpa: ArrayLike = ...
) -> np.ndarray: ...
def oxygen_solubility(temperature_c, pressure_kpa=STANDARD_ATMOSPHERE_KPA):
    r"""Dissolved-oxygen saturation of fresh water, Benson & Krause (1984).

    At 1 atm of water-saturated air:

    .. math::
        \ln C^*_0 = -139.34411 + \frac{1.575701\times10^5}{T}
        - \frac{6.642308\times10^7}{T^2} + \frac{1.243800\times10^{10}}{T^3}
        - \frac{8.621949\times10^{11}}{T^4}

    and at a barometric pressure :math:`P` (atm), as in Standard Methods 4500-O:

    .. math::
        C^* = C^*_0\,P\,\frac{(1 - P_{wv}/P)(1 - \theta P)}{(1 - P_{wv})(1 - \theta)},
        \quad \theta = 0.000975 - 1.426\times10^{-5}t + 6.436\times10^{-8}t^2,
        \quad \ln P_{wv} = 11.8571 - \frac{3840.70}{T} - \frac{216961}{T^2}

    Parameters
    ----------
    temperature_c : float or array-like
        Water temperature, t [°C]; T = t + 273.15 [K]
    pressure_kpa : float or array-like, optional
        Barometric pressure at the site (not corrected to sea level) [kPa]

    Returns
    -------
    do_sat_mg_l : float or numpy.ndarray
        Oxygen solubility [mg/L]; a float when both inputs are scalars

    Notes
    -----
    Valid 0-40 °C and 50-110 kPa (the pressure limits are chosen here to cover sites from
    below sea level to about 5.5 km); outside them, or for NaN, ``ValueError`` is raised.
    Fresh water only (no salinity correction).

    Examples
    --------
    >>> round(oxygen_solubility(20.0), 3)
    9.092
    >>> oxygen_solubility([0.0, 30.0]).round(3)
    array([14.621,  7.559])

    References
    ----------
    .. [1] Benson & Krause (1984), Limnol. Oceanogr. 29(3), 620-632; APHA Standard Methods
       4500-O; see module references.
    """
    t = _as_checked_array(temperature_c, "temperature_c", TEMPERATURE_MIN_C,
                          TEMPERATURE_MAX_C, "°C")
    p_kpa = _as_checked_array(pressure_kpa, "pressure_kpa", PRESSURE_MIN_KPA,
                              PRESSURE_MAX_KPA, "kPa")
    t_k = t + KELVIN_OFFSET
    a0, a1, a2, a3, a4 = _BK_COEFFS
    c0 = np.exp(a0 + a1 / t_k + a2 / t_k**2 + a3 / t_k**3 + a4 / t_k**4)
    p_atm = p_kpa / STANDARD_ATMOSPHERE_KPA
    p_wv = _vapour_pressure_atm(t)
    theta = 0.000975 - 1.426e-5 * t + 6.436e-8 * t**2
    c = c0 * p_atm * (1.0 - p_wv / p_atm) * (1.0 - theta * p_atm) / ((1.0 - p_wv) * (1.0 - theta))
    if _is_scalar(temperature_c, pressure_kpa):
        return float(c)
    return c


@overload
def percent_saturation(
    do_mg_l: float, temperature_c: float, pressure_kpa: float = ...
) -> float: ...
@overload
def percent_saturation(
    do_mg_l: npt.ArrayLike, temperature_c: ArrayLike, pressure_kpa: ArrayLike = ...
) -> np.ndarray: ...
def percent_saturation(do_mg_l, temperature_c, pressure_kpa=STANDARD_ATMOSPHERE_KPA):
    r"""Dissolved-oxygen percent saturation.

    .. math::
        S = 100\,\frac{DO}{C^*(t, P)}

    with :math:`C^*` from :func:`oxygen_solubility` (Benson & Krause 1984).

    Parameters
    ----------
    do_mg_l : float or array-like
        Measured dissolved-oxygen concentration, >= 0 [mg/L]
    temperature_c : float or array-like
        Water temperature [°C]
    pressure_kpa : float or array-like, optional
        Barometric pressure at the site [kPa]

    Returns
    -------
    saturation_pct : float or numpy.ndarray
        Percent saturation [%]; a float when all inputs are scalars

    Notes
    -----
    Same limits as :func:`oxygen_solubility`; a negative or NaN concentration raises
    ``ValueError``. Supersaturation (> 100 %) is returned as computed.

    Examples
    --------
    >>> round(percent_saturation(9.092, 20.0), 1)
    100.0

    References
    ----------
    .. [1] Benson & Krause (1984); APHA Standard Methods 4500-O (see module references).
    """
    do = np.asarray(do_mg_l, dtype=float)
    if np.isnan(do).any():
        raise ValueError("do_mg_l contains NaN; mask missing readings before calling")
    if (do < 0.0).any():
        raise ValueError(f"do_mg_l={do[do < 0.0].ravel()[0]!r} is negative")
    c_sat = np.asarray(oxygen_solubility(np.asarray(temperature_c, dtype=float),
                                         np.asarray(pressure_kpa, dtype=float)))
    pct = 100.0 * do / c_sat
    if _is_scalar(do_mg_l, temperature_c, pressure_kpa):
        return float(pct)
    return pct


@overload
def barometric_pressure_kpa(elevation_m: float) -> float: ...
@overload
def barometric_pressure_kpa(elevation_m: npt.ArrayLike) -> np.ndarray: ...
def barometric_pressure_kpa(elevation_m):
    r"""Pressure of the U.S. Standard Atmosphere 1976 at a site elevation.

    For sites with no barometer. Lowest layer of the standard (constant lapse rate):

    .. math::
        P = P_0\left(1 - \frac{L H}{T_0}\right)^{g_0 M_0 / (R^* L)},
        \quad H = \frac{r_0 z}{r_0 + z}

    with :math:`P_0` = 101.325 kPa, :math:`T_0` = 288.15 K, :math:`L` = 0.0065 K/m,
    :math:`g_0` = 9.80665 m/s², :math:`M_0` = 0.0289644 kg/mol,
    :math:`R^*` = 8.31432 J/(mol·K), :math:`r_0` = 6 356 766 m, :math:`z` the geometric
    elevation and :math:`H` the geopotential height.

    Parameters
    ----------
    elevation_m : float or array-like
        Geometric elevation of the site above mean sea level, z [m]

    Returns
    -------
    pressure_kpa : float or numpy.ndarray
        Standard-atmosphere pressure [kPa]

    Notes
    -----
    Valid -500 m to 11 000 m (this function's limit: the lowest layer of the standard
    reaches 11 km geopotential); outside, or for NaN, ``ValueError`` is raised. Actual
    barometric pressure varies with the weather by a few kPa: a measured value is better.

    Examples
    --------
    >>> barometric_pressure_kpa(0.0)
    101.325
    >>> round(barometric_pressure_kpa(1000.0), 3)
    89.876

    References
    ----------
    .. [1] U.S. Standard Atmosphere, 1976 (S/T 76-1562), eqs. for the 0-11 km layer;
       see module references.
    """
    z = _as_checked_array(elevation_m, "elevation_m", ELEVATION_MIN_M, ELEVATION_MAX_M, "m")
    h = _USSA_EARTH_RADIUS_M * z / (_USSA_EARTH_RADIUS_M + z)
    exponent = _USSA_G0_M_S2 * _USSA_M0_KG_MOL / (_USSA_R_J_MOL_K * _USSA_LAPSE_K_M)
    p = STANDARD_ATMOSPHERE_KPA * (1.0 - _USSA_LAPSE_K_M * h / _USSA_T0_K) ** exponent
    if _is_scalar(elevation_m):
        return float(p)
    return p

