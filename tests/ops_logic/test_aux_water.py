"""Tests for ops_logic.aux_water: valves, gravity conduits and pumps."""
from __future__ import annotations

import math

import pytest
from fluids.fittings import Cv_to_K, K_to_Cv, K_to_Kv, Kv_to_K
from fluids.friction import friction_factor
from hypothesis import assume, given
from hypothesis import strategies as st

from ops_logic.aux_water import (
    PumpCurve,
    conduit_flow,
    conduit_head_loss,
    pump_station_flow,
    valve_flow_fraction,
    valve_loss_coefficient,
)

G = 9.80665


# --------------------------------------------------------------------------- valves
@pytest.mark.parametrize("cv", [10.0, 250.0, 4000.0])
@pytest.mark.parametrize("diameter_m", [0.05, 0.3, 1.2])
def test_full_open_conversions_match_fluids(cv, diameter_m):
    # Reference: fluids.fittings.Cv_to_K / Kv_to_K / K_to_Cv (ISA-75.01.01 / IEC 60534-2-1).
    k_cv = valve_loss_coefficient(100.0, diameter_m=diameter_m, characteristic="linear",
                                  cv_full=cv)
    assert k_cv == pytest.approx(Cv_to_K(cv, diameter_m), rel=1e-12)
    assert K_to_Cv(k_cv, diameter_m) == pytest.approx(cv, rel=1e-12)
    k_kv = valve_loss_coefficient(100.0, diameter_m=diameter_m, characteristic="linear",
                                  kv_full=cv)
    assert k_kv == pytest.approx(Kv_to_K(cv, diameter_m), rel=1e-12)


@pytest.mark.parametrize("cv", [10.0, 250.0, 4000.0])
def test_kv_is_0865_cv(cv):
    # Published Kv = 0.865·Cv (IEC 60534-2-1, seen in fluids): the same valve described by
    # either coefficient has the same K. 0.865 is rounded from 0.86498, so K agrees to
    # 2·(0.865/0.86498 - 1) ≈ 5e-5 relative.
    d = 0.25
    k_cv = valve_loss_coefficient(100.0, diameter_m=d, characteristic="linear", cv_full=cv)
    k_kv = valve_loss_coefficient(100.0, diameter_m=d, characteristic="linear",
                                  kv_full=0.865 * cv)
    assert k_kv == pytest.approx(k_cv, rel=1e-4)


@pytest.mark.parametrize("characteristic", ["linear", "equal_percentage"])
@pytest.mark.parametrize("opening_pct", [5.0, 30.0, 50.0, 75.0, 100.0])
def test_partial_opening_scales_flow_coefficient(characteristic, opening_pct):
    # Cv(x) = Cv_full·f(x): convert the K back with fluids' K_to_Kv and compare.
    d, kv_full = 0.4, 1800.0
    k = valve_loss_coefficient(opening_pct, diameter_m=d, characteristic=characteristic,
                               kv_full=kv_full)
    f = valve_flow_fraction(opening_pct, characteristic)
    assert K_to_Kv(k, d) == pytest.approx(kv_full * f, rel=1e-12)


def test_k_full_scales_with_inverse_square():
    k = valve_loss_coefficient(25.0, diameter_m=0.5, characteristic="linear", k_full=0.3)
    assert k == pytest.approx(0.3 / 0.25**2, rel=1e-12)


def test_equal_percentage_midpoint():
    # R = 50, x = 0.5 -> 50^-0.5 = 0.1414 (REFERENCES.md, from memory).
    assert valve_flow_fraction(50.0, "equal_percentage", 50.0) == pytest.approx(0.1414, abs=5e-5)


@given(x_pct=st.floats(1.0, 90.0), rangeability=st.floats(5.0, 100.0))
def test_equal_percentage_definition(x_pct, rangeability):
    # Definition (common practice): each further 10 % of travel multiplies the flow
    # coefficient by the same factor, R^0.1, wherever the valve starts.
    f0 = valve_flow_fraction(x_pct, "equal_percentage", rangeability)
    f1 = valve_flow_fraction(x_pct + 10.0, "equal_percentage", rangeability)
    assert f1 / f0 == pytest.approx(rangeability**0.1, rel=1e-12)


@pytest.mark.parametrize("characteristic", ["linear", "equal_percentage"])
def test_valve_end_points(characteristic):
    assert valve_flow_fraction(0.0, characteristic) == 0.0
    assert valve_flow_fraction(100.0, characteristic) == 1.0
    assert valve_loss_coefficient(0.0, diameter_m=0.3, characteristic=characteristic,
                                  k_full=0.2) == math.inf


def test_linear_is_proportional():
    # Definition (IEC 60534-1 terminology): linear characteristic f = x.
    assert valve_flow_fraction(37.0, "linear") == pytest.approx(0.37, rel=1e-15)


@pytest.mark.parametrize(
    ("args", "match"),
    [
        ((-0.1, "linear"), "opening_pct"),
        ((100.1, "linear"), "opening_pct"),
        ((math.nan, "linear"), "opening_pct"),
        ((50.0, "quick_opening"), "characteristic"),
        ((50.0, "equal_percentage", 1.0), "rangeability"),
        ((50.0, "equal_percentage", math.inf), "rangeability"),
    ],
)
def test_valve_flow_fraction_rejects(args, match):
    with pytest.raises(ValueError, match=match):
        valve_flow_fraction(*args)


@pytest.mark.parametrize(
    "coeffs",
    [{}, {"cv_full": 10.0, "kv_full": 8.65}, {"k_full": 0.0}, {"cv_full": -1.0},
     {"kv_full": math.nan}],
)
def test_valve_loss_coefficient_needs_one_positive_coefficient(coeffs):
    with pytest.raises(ValueError):
        valve_loss_coefficient(50.0, diameter_m=0.3, characteristic="linear", **coeffs)


# --------------------------------------------------------------------------- conduits
def test_friction_factor_reference():
    # Colebrook, Re = 1e5, ε/D = 1e-4 -> 0.018514 (fluids doctest, seen); this is the
    # friction call conduit_* use.
    f = friction_factor(Re=1e5, eD=1e-4, Method="Colebrook")
    assert f == pytest.approx(0.018514, abs=5e-7)


# Hand calculation of the Darcy-Weisbach energy equation, turbulent case:
#   D = 0.1 m, L = 100 m, ε = 1e-5 m (ε/D = 1e-4), entrance K = 0.5, exit K = 1.0, 20 °C.
#   Handbook water at 20 °C: ρ = 998.2 kg/m³, μ = 1.002e-3 Pa·s -> ν = 1.003807e-6 m²/s.
#   Choose Re = 1e5: V = Re·ν/D = 1.003807 m/s; A = π·0.1²/4 = 7.853982e-3 m²;
#   Q = V·A = 7.88388e-3 m³/s. Colebrook at Re = 1e5, ε/D = 1e-4: f = 0.018514 (above).
#   V²/2g = 1.007628 / 19.6133 = 0.0513747 m.
#   ΔH = (f·L/D + 0.5 + 1.0)·V²/2g = (18.514 + 1.5) × 0.0513747 = 1.02821 m.
# The handbook properties have 4 significant figures and our correlations give μ 0.04 %
# lower, which moves f (and ΔH) by about 0.01 %: tolerance 2e-4 relative.
HAND_CASE = {"diameter_m": 0.1, "length_m": 100.0, "roughness_m": 1e-5, "minor_k": 0.5,
             "temperature_c": 20.0}
HAND_Q_M3S = 7.88388e-3
HAND_HEAD_M = 1.02821


def test_conduit_head_loss_hand_calculation():
    assert conduit_head_loss(HAND_Q_M3S, **HAND_CASE) == pytest.approx(HAND_HEAD_M, rel=2e-4)


def test_conduit_flow_hand_calculation():
    assert conduit_flow(HAND_HEAD_M, **HAND_CASE) == pytest.approx(HAND_Q_M3S, rel=2e-4)


def test_conduit_laminar_hand_calculation():
    # Hagen-Poiseuille (f = 64/Re) plus exit loss, hand calculation at 20 °C with the
    # handbook properties: D = 0.01 m, L = 10 m, ε = 0, V = 0.1 m/s ->
    #   Re = 0.1·0.01/1.003807e-6 = 996.2 (laminar), f = 64/996.2 = 0.064244,
    #   V²/2g = 0.01/19.6133 = 5.09858e-4 m,
    #   ΔH = (0.064244·1000 + 1.0) × 5.09858e-4 = 0.033265 m;  Q = 0.1·π·0.01²/4.
    q = 0.1 * math.pi * 0.01**2 / 4.0
    kw = {"diameter_m": 0.01, "length_m": 10.0, "roughness_m": 0.0, "temperature_c": 20.0}
    assert conduit_head_loss(q, **kw) == pytest.approx(0.033265, rel=6e-4)


conduit_geometry = st.fixed_dictionaries({
    "diameter_m": st.floats(0.2, 2.0),
    "length_m": st.floats(5.0, 500.0),
    "roughness_m": st.floats(0.0, 2e-3),
    "minor_k": st.floats(0.0, 5.0),
    "valve_k": st.floats(0.0, 50.0),
    "temperature_c": st.floats(0.0, 40.0),
})


@given(head_m=st.floats(0.01, 15.0), geometry=conduit_geometry)
def test_conduit_round_trip_head(head_m, geometry):
    q = conduit_flow(head_m, **geometry)
    assert conduit_head_loss(q, **geometry) == pytest.approx(head_m, rel=1e-9)


@given(flow_m3s=st.floats(0.01, 5.0), geometry=conduit_geometry)
def test_conduit_round_trip_flow(flow_m3s, geometry):
    head = conduit_head_loss(flow_m3s, **geometry)
    assume(head <= 100.0)
    assert conduit_flow(head, **geometry) == pytest.approx(flow_m3s, rel=1e-9)


@given(head_m=st.floats(0.05, 10.0), o1=st.floats(1.0, 100.0), o2=st.floats(1.0, 100.0))
def test_opening_the_valve_raises_flow(head_m, o1, o2):
    lo, hi = sorted((o1, o2))
    assume(hi - lo > 0.5)
    geometry = {"diameter_m": 0.6, "length_m": 40.0, "roughness_m": 2e-4, "minor_k": 0.8}

    def flow(opening):
        k = valve_loss_coefficient(opening, diameter_m=0.6, characteristic="equal_percentage",
                                   kv_full=4000.0)
        return conduit_flow(head_m, valve_k=k, **geometry)

    assert flow(lo) < flow(hi)


@pytest.mark.parametrize("head_m", [0.0, -0.5])
def test_no_head_no_flow(head_m):
    assert conduit_flow(head_m, diameter_m=0.5, length_m=20.0, roughness_m=1e-4) == 0.0


def test_closed_valve():
    kw = {"diameter_m": 0.5, "length_m": 20.0, "roughness_m": 1e-4, "valve_k": math.inf}
    assert conduit_flow(2.0, **kw) == 0.0
    assert conduit_head_loss(0.1, **kw) == math.inf
    assert conduit_head_loss(0.0, **kw) == 0.0


@pytest.mark.parametrize(
    "override",
    [
        {"roughness_m": 0.03},  # ε/D = 0.06 > 0.05
        {"roughness_m": -1e-4},
        {"diameter_m": 0.0},
        {"length_m": 0.0},
        {"minor_k": -0.1},
        {"valve_k": math.nan},
        {"temperature_c": 45.0},
    ],
)
def test_conduit_rejects_bad_geometry(override):
    kw = {"diameter_m": 0.5, "length_m": 20.0, "roughness_m": 1e-4, **override}
    with pytest.raises(ValueError):
        conduit_flow(1.0, **kw)
    with pytest.raises(ValueError):
        conduit_head_loss(0.2, **kw)


@pytest.mark.parametrize("flow_m3s", [-0.1, math.nan])
def test_conduit_head_loss_rejects_bad_flow(flow_m3s):
    with pytest.raises(ValueError, match="flow_m3s"):
        conduit_head_loss(flow_m3s, diameter_m=0.5, length_m=20.0, roughness_m=1e-4)


def test_conduit_rejects_reynolds_above_moody_chart():
    # D = 5 m at 40 °C, 1000 m of head: Re well above 1e8.
    with pytest.raises(ValueError, match="Reynolds"):
        conduit_flow(1000.0, diameter_m=5.0, length_m=10.0, roughness_m=0.0, temperature_c=40.0)


# --------------------------------------------------------------------------- pumps
@pytest.mark.parametrize("pumps", [1, 2, 3, 4])
@pytest.mark.parametrize("static_head_m", [-2.0, 0.0, 3.5, 7.0])
@pytest.mark.parametrize("loss_k", [0.0, 1.5, 20.0])
def test_quadratic_pump_against_closed_form(pumps, static_head_m, loss_k):
    # Closed form (derived): per pump H0 - a·q² = Hs + k·(n q)², a = (H0 - Hr)/Qr², so
    # q = sqrt((H0 - Hs) / (a + k n²)) and Q = n q, valid while the head stays >= 0.
    qr, hr, h0 = 0.6, 8.0, 10.0
    a = (h0 - hr) / qr**2
    q_pump = math.sqrt((h0 - static_head_m) / (a + loss_k * pumps**2))
    head = h0 - a * q_pump**2
    curve = PumpCurve.from_rated(qr, hr, h0)
    if head < 0.0:
        with pytest.raises(ValueError, match="beyond the end of the pump curve"):
            pump_station_flow(curve, pumps, static_head_m, loss_k_s2_m5=loss_k)
    else:
        got = pump_station_flow(curve, pumps, static_head_m, loss_k_s2_m5=loss_k)
        assert got == pytest.approx(pumps * q_pump, rel=1e-9)


TABLE_CURVE = PumpCurve.from_points(
    # (head_m, flow_m3s): an invented curve, head falling with flow.
    [(12.0, 0.0), (11.5, 0.2), (10.4, 0.4), (8.6, 0.6), (6.0, 0.8), (2.5, 1.0)]
)


@pytest.mark.parametrize("curve", [TABLE_CURVE, PumpCurve.from_rated(0.5, 6.0)])
@pytest.mark.parametrize("static_head_m", [2.5, 4.0, 7.0, 9.0])
def test_two_pumps_no_loss_twice_one(curve, static_head_m):
    # Parallel pumps at the same head add their flows (textbook construction).
    one = pump_station_flow(curve, 1, static_head_m)
    two = pump_station_flow(curve, 2, static_head_m)
    assert two == pytest.approx(2.0 * one, rel=1e-9)
    assert one == pytest.approx(curve.flow_at_head(static_head_m), rel=1e-9)


def test_table_interpolation_between_points():
    # Linear interpolation, hand calculation: between (10.4 m, 0.4) and (8.6 m, 0.6),
    # 9.5 m is half way -> 0.5 m³/s; 0.7 m³/s is half way from 8.6 m to 6.0 m -> 7.3 m.
    assert TABLE_CURVE.flow_at_head(9.5) == pytest.approx(0.5, rel=1e-12)
    assert TABLE_CURVE.head_at_flow(0.7) == pytest.approx(7.3, rel=1e-12)


@given(q=st.floats(0.0, 1.0))
def test_table_curve_inverse(q):
    assert TABLE_CURVE.flow_at_head(TABLE_CURVE.head_at_flow(q)) == pytest.approx(q, abs=1e-12)


@given(q=st.floats(0.01, 0.75), h=st.floats(0.0, 11.0))
def test_quadratic_curve_inverse(q, h):
    # Flow from head is ill-conditioned right at shutoff (dH/dQ = 0), so the flow round
    # trip starts at 0.01 m³/s; the head round trip covers the whole curve.
    curve = PumpCurve.from_rated(0.5, 8.0, 11.0)
    assert curve.flow_at_head(curve.head_at_flow(q)) == pytest.approx(q, rel=1e-9)
    assert curve.head_at_flow(curve.flow_at_head(h)) == pytest.approx(h, abs=1e-12)


def test_from_rated_default_shutoff_is_the_documented_assumption():
    # H0 = 1.25·Hr is an assumption typical of radial-flow pumps (not a published value).
    curve = PumpCurve.from_rated(0.5, 8.0)
    assert curve.head_at_flow(0.0) == pytest.approx(10.0, rel=1e-12)
    assert curve.head_at_flow(0.5) == pytest.approx(8.0, rel=1e-12)


@pytest.mark.parametrize("curve", [TABLE_CURVE, PumpCurve.from_rated(0.5, 8.0)])
def test_at_or_above_shutoff_no_flow(curve):
    assert curve.flow_at_head(curve.max_head_m) == 0.0
    assert curve.flow_at_head(curve.max_head_m + 5.0) == 0.0
    assert pump_station_flow(curve, 3, curve.max_head_m) == 0.0
    assert pump_station_flow(curve, 3, curve.max_head_m + 1.0, loss_k_s2_m5=2.0) == 0.0


def test_head_below_curve_raises():
    with pytest.raises(ValueError, match="below the lowest head"):
        TABLE_CURVE.flow_at_head(2.0)
    with pytest.raises(ValueError, match="beyond the end of the pump curve"):
        pump_station_flow(TABLE_CURVE, 2, 1.0)
    with pytest.raises(ValueError, match="below the lowest head"):
        PumpCurve.from_rated(0.5, 8.0).flow_at_head(-0.1)


def test_flow_off_curve_raises():
    with pytest.raises(ValueError, match="outside the pump curve"):
        TABLE_CURVE.head_at_flow(1.01)
    with pytest.raises(ValueError, match="outside the pump curve"):
        TABLE_CURVE.head_at_flow(-0.01)


def test_table_without_shutoff_point():
    curve = PumpCurve.from_points([(9.0, 0.3), (7.0, 0.6), (4.0, 0.9)])
    with pytest.raises(ValueError, match="no zero-flow"):
        curve.flow_at_head(9.5)
    with pytest.raises(ValueError, match="lowest tabulated flow"):
        pump_station_flow(curve, 1, 9.5)
    assert pump_station_flow(curve, 1, 7.0) == pytest.approx(0.6, rel=1e-9)


def test_no_pumps_no_flow():
    assert pump_station_flow(TABLE_CURVE, 0, 3.0) == 0.0


@pytest.mark.parametrize(
    "points",
    [
        [(10.0, 0.0)],  # one point
        [(10.0, 0.0), (10.5, 0.3), (8.0, 0.6)],  # drooping: head rises with flow
        [(10.0, 0.0), (9.0, 0.3), (8.0, 0.3)],  # repeated flow
        [(10.0, -0.1), (8.0, 0.5)],  # negative flow
        [(10.0, 0.0), (math.nan, 0.5)],
    ],
)
def test_from_points_validates(points):
    with pytest.raises(ValueError):
        PumpCurve.from_points(points)


@pytest.mark.parametrize(("qr", "hr", "h0"), [(0.5, 8.0, 8.0), (0.0, 8.0, 10.0), (0.5, -1.0, 2.0)])
def test_from_rated_validates(qr, hr, h0):
    with pytest.raises(ValueError):
        PumpCurve.from_rated(qr, hr, h0)


@pytest.mark.parametrize("pumps", [-1, 1.5, True])
def test_pump_count_validated(pumps):
    with pytest.raises(ValueError, match="pumps_running"):
        pump_station_flow(TABLE_CURVE, pumps, 3.0)


def test_pump_curve_is_frozen():
    with pytest.raises(AttributeError):
        TABLE_CURVE.kind = "quadratic"  # type: ignore[misc]
