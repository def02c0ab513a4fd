"""Tests for ops_logic.properties against handbook tables and IAPWS (``iapws`` package)."""
from __future__ import annotations

import math

import numpy as np
import pytest
from iapws import IAPWS95

from ops_logic.properties import water_density, water_viscosity

KELVIN = 273.15
ATM_MPA = 0.101325


# Handbook tables after Vennard & Street (1975), seen (REFERENCES.md, "Water properties").
# Printed to 4 significant figures, so the tolerance is half a unit of the last digit.
@pytest.mark.parametrize(
    ("temperature_c", "rho_kg_m3", "mu_pa_s"),
    [(10.0, 999.7, 1.307e-3), (20.0, 998.2, 1.002e-3)],
)
def test_handbook_values(temperature_c, rho_kg_m3, mu_pa_s):
    assert water_density(temperature_c) == pytest.approx(rho_kg_m3, abs=0.05)
    assert water_viscosity(temperature_c) == pytest.approx(mu_pa_s, abs=0.0005e-3)


def _iapws95(temperature_c: float) -> IAPWS95:
    # iapws refuses exactly 273.15 K at 1 atm (PLATFORM_NOTES): 0.01 °C is the lowest used.
    return IAPWS95(T=temperature_c + KELVIN, P=ATM_MPA)


TEMPERATURES_C = [0.01, *np.arange(1.0, 40.5, 1.0).tolist()]


@pytest.mark.parametrize("temperature_c", TEMPERATURES_C)
def test_density_against_iapws95(temperature_c):
    # Reference: IAPWS-95 via the iapws package. The largest difference found by running
    # both over 0.01-40 °C is 1.2e-6 relative; 1e-5 (about 0.01 kg/m³) leaves room for that
    # and is far tighter than the 0.2 % quoted in REFERENCES.md.
    assert water_density(temperature_c) == pytest.approx(_iapws95(temperature_c).rho, rel=1e-5)


@pytest.mark.parametrize("temperature_c", TEMPERATURES_C)
def test_viscosity_against_iapws2008(temperature_c):
    # Reference: IAPWS 2008 viscosity formulation via the iapws package (attribute ``mu``).
    # Kestin et al. (1978) / ISO/TR 3666 differ from it by at most about 0.1 % (largest
    # near 5 °C, found by running both); the docstring documents 0.15 %, tested here.
    assert water_viscosity(temperature_c) == pytest.approx(_iapws95(temperature_c).mu, rel=1.5e-3)


def test_density_maximum_near_4_c():
    # Fresh water is densest at 3.98 °C (Tanaka et al. 2001: a1 = -3.983035 °C; the value
    # 3.98 °C is textbook, from memory).
    t = np.linspace(0.0, 10.0, 1001)
    rho = [water_density(x) for x in t]
    assert t[int(np.argmax(rho))] == pytest.approx(3.98, abs=0.011)


@pytest.mark.parametrize("func", [water_density, water_viscosity])
@pytest.mark.parametrize("temperature_c", [-0.01, 40.01, -5.0, 100.0, math.nan, math.inf])
def test_outside_range_raises(func, temperature_c):
    with pytest.raises(ValueError, match="temperature_c"):
        func(temperature_c)


@pytest.mark.parametrize("func", [water_density, water_viscosity])
@pytest.mark.parametrize("temperature_c", [0.0, 40.0])
def test_range_limits_inclusive(func, temperature_c):
    assert math.isfinite(func(temperature_c))
