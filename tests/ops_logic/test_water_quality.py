"""Tests for ops_logic.water_quality: Benson & Krause DO saturation and USSA 1976 pressure."""
from __future__ import annotations

import math

import gsw
import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from iapws.iapws97 import _PSat_T

from ops_logic.water_quality import (
    _vapour_pressure_atm,
    barometric_pressure_kpa,
    oxygen_solubility,
    percent_saturation,
)

O2_MOLAR_MASS_G_MOL = 31.9988  # 2 × 15.9994 g/mol, standard atomic weight of O (common practice)

# USGS / Standard Methods 4500-O table at 1 atm, fresh water (REFERENCES.md: "computed;
# matches the published tables, from memory"). The tables print 3 decimals: ±0.0005 mg/L.
TABLE_1ATM = [
    (0.0, 14.621),
    (5.0, 12.771),
    (10.0, 11.288),
    (15.0, 10.084),
    (20.0, 9.092),
    (25.0, 8.263),
    (30.0, 7.559),
]


@pytest.mark.parametrize(("temperature_c", "do_sat_mg_l"), TABLE_1ATM)
def test_table_at_one_atmosphere(temperature_c, do_sat_mg_l):
    assert oxygen_solubility(temperature_c) == pytest.approx(do_sat_mg_l, abs=0.0005)


def test_pressure_correction_example():
    # 20 °C at 0.9 atm = 91.1925 kPa -> 8.162 mg/L: computed from the published form of the
    # Standard Methods pressure correction (REFERENCES.md), so a regression-style check.
    assert oxygen_solubility(20.0, 91.1925) == pytest.approx(8.162, abs=0.0005)


@pytest.mark.parametrize("temperature_c", [0.0, 10.0, 20.0, 30.0, 40.0])
def test_vapour_pressure_fit_against_iapws97(temperature_c):
    # The P_wv fit used by the correction is recalled from memory (REFERENCES.md); check it
    # against the IAPWS-IF97 saturation pressure (iapws package). Running both, the fit is
    # 0.04-0.11 % low over 0-40 °C; tolerance 0.2 %. (An error of that size moves the
    # corrected solubility by far less than the tables' last digit.)
    p_ref_atm = _PSat_T(temperature_c + 273.15) * 1e6 / 101325.0
    assert float(_vapour_pressure_atm(np.asarray(temperature_c))) == pytest.approx(
        p_ref_atm, rel=2e-3)


def _gsw_o2sol_mg_l(temperature_c: float) -> float:
    """Garcia & Gordon (1992) through gsw, µmol/kg -> mg/L with the density of pure water.

    gsw.O2sol_SP_pt(SP=0, pt) gives µmol per kg of water; times the density of the water
    (gsw.rho at SA = 0, p = 0 dbar, i.e. 1 atm; PLATFORM_NOTES: not 1 kg/L) gives µmol/L.
    """
    umol_kg = gsw.O2sol_SP_pt(0.0, temperature_c)
    ct = gsw.CT_from_pt(0.0, temperature_c)
    rho_kg_l = gsw.rho(0.0, ct, 0.0) / 1000.0
    return float(umol_kg * rho_kg_l * O2_MOLAR_MASS_G_MOL * 1e-3)


@pytest.mark.parametrize("temperature_c", np.arange(0.0, 40.5, 2.5).tolist())
def test_against_garcia_gordon_via_gsw(temperature_c):
    # Garcia & Gordon (1992) refitted Benson & Krause's own measurements with another
    # equation. Running both over 0-40 °C at 0.5 °C steps, they differ by at most 0.023 %
    # (largest at 40 °C, about 0.0015 mg/L); tolerance 0.03 % therefore checks that the
    # same physics is reproduced, not just that the magnitude is right.
    assert oxygen_solubility(temperature_c) == pytest.approx(
        _gsw_o2sol_mg_l(temperature_c), rel=3e-4)


def test_array_input_returns_array_and_matches_scalars():
    t = np.array([0.0, 12.5, 27.0])
    p = np.array([101.325, 95.0, 80.0])
    out = oxygen_solubility(t, p)
    assert isinstance(out, np.ndarray)
    assert out.shape == (3,)
    for ti, pi, oi in zip(t, p, out, strict=True):
        assert oi == pytest.approx(oxygen_solubility(float(ti), float(pi)), rel=1e-12)
    assert isinstance(oxygen_solubility(10.0), float)
    assert isinstance(oxygen_solubility(10, 100), float)


def test_percent_saturation_array_and_scalar():
    do = np.array([9.092, 4.546, 11.0])
    pct = percent_saturation(do, 20.0)
    assert isinstance(pct, np.ndarray)
    # 9.092 mg/L is the 20 °C, 1 atm table value above; 4.546 is half of it.
    np.testing.assert_allclose(pct[:2], [100.0, 50.0], atol=0.006)
    assert isinstance(percent_saturation(9.092, 20.0), float)


@given(
    temperature_c=st.floats(0.0, 40.0),
    pressure_kpa=st.floats(50.0, 110.0),
    do_mg_l=st.floats(0.0, 25.0),
)
def test_percent_saturation_definition(temperature_c, pressure_kpa, do_mg_l):
    # Definition (Standard Methods 4500-O): % saturation = 100 · DO / C*.
    expected = 100.0 * do_mg_l / oxygen_solubility(temperature_c, pressure_kpa)
    assert percent_saturation(do_mg_l, temperature_c, pressure_kpa) == pytest.approx(expected)


@given(temperature_c=st.floats(0.0, 40.0), p1=st.floats(50.0, 110.0), p2=st.floats(50.0, 110.0))
def test_solubility_rises_with_pressure(temperature_c, p1, p2):
    # Henry's law (common practice): more pressure, more dissolved oxygen.
    lo, hi = sorted((p1, p2))
    if hi - lo > 1e-6:
        assert oxygen_solubility(temperature_c, lo) < oxygen_solubility(temperature_c, hi)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"temperature_c": -0.1}, "temperature_c"),
        ({"temperature_c": 40.1}, "temperature_c"),
        ({"temperature_c": math.nan}, "NaN"),
        ({"temperature_c": 10.0, "pressure_kpa": 49.9}, "pressure_kpa"),
        ({"temperature_c": 10.0, "pressure_kpa": 110.1}, "pressure_kpa"),
        ({"temperature_c": [5.0, 45.0]}, "temperature_c"),
        ({"temperature_c": [5.0, math.nan]}, "NaN"),
    ],
)
def test_oxygen_solubility_limits(kwargs, match):
    with pytest.raises(ValueError, match=match):
        oxygen_solubility(**kwargs)


def test_oxygen_solubility_limits_inclusive():
    assert math.isfinite(oxygen_solubility(0.0, 50.0))
    assert math.isfinite(oxygen_solubility(40.0, 110.0))


@pytest.mark.parametrize("do_mg_l", [-0.1, math.nan])
def test_percent_saturation_rejects_bad_do(do_mg_l):
    with pytest.raises(ValueError, match="do_mg_l"):
        percent_saturation(do_mg_l, 10.0)


# U.S. Standard Atmosphere 1976, table of pressure by geometric altitude (from memory):
# 0 m 1.01325E+05 Pa, 1000 m 8.9876E+04, 2000 m 7.9501E+04, 5000 m 5.4048E+04,
# 11000 m 2.2700E+04. The brief quotes 1000 m as 89.87 kPa. Tolerance: half a unit in the
# fifth significant figure.
@pytest.mark.parametrize(
    ("elevation_m", "pressure_kpa", "tol_kpa"),
    [(0.0, 101.325, 0.0005), (1000.0, 89.876, 0.005), (2000.0, 79.501, 0.005),
     (5000.0, 54.048, 0.005), (11000.0, 22.700, 0.005)],
)
def test_standard_atmosphere_table(elevation_m, pressure_kpa, tol_kpa):
    assert barometric_pressure_kpa(elevation_m) == pytest.approx(pressure_kpa, abs=tol_kpa)


def test_standard_atmosphere_array():
    z = np.array([0.0, 1000.0])
    out = barometric_pressure_kpa(z)
    assert isinstance(out, np.ndarray)
    np.testing.assert_allclose(out, [barometric_pressure_kpa(0.0), barometric_pressure_kpa(1e3)])


@pytest.mark.parametrize("elevation_m", [-500.1, 11000.1, math.nan])
def test_standard_atmosphere_limits(elevation_m):
    with pytest.raises(ValueError, match="elevation_m"):
        barometric_pressure_kpa(elevation_m)


def test_site_pressure_feeds_solubility():
    # At 1000 m (89.876 kPa) saturation is lower than at sea level by about the pressure
    # ratio (Standard Methods correction; vapour-pressure and θ terms change it slightly).
    # Water vapour pressure at 10 °C from IAPWS-IF97 (iapws package).
    p = barometric_pressure_kpa(1000.0)
    p_wv_kpa = _PSat_T(283.15) * 1e3
    ratio = oxygen_solubility(10.0, p) / oxygen_solubility(10.0)
    assert ratio == pytest.approx((p - p_wv_kpa) / (101.325 - p_wv_kpa), rel=1e-3)
