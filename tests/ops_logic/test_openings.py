"""The solver's openings: same equations as the public functions, exact derivatives, inversion."""

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ops_logic.hydraulics import orifice_flow, vertical_slot_flow, weir_flow
from ops_logic.openings import (
    OrificeOpening,
    SlotOpening,
    WeirOpening,
    control_flow,
    upstream_level,
)

WEIR = WeirOpening(crest_m=10.0, width_m=1.2, height_m=1.5, channel_width_m=3.0)
ORIFICE = OrificeOpening(invert_m=8.6, width_m=0.4, height_m=0.5)
SLOT = SlotOpening(invert_m=8.5, width_m=0.3, cd=0.75)


@given(h1=st.floats(0.03, 1.0), r=st.floats(0.0, 0.98))
def test_weir_opening_equals_public_weir_flow(h1, r):
    # the solver's weir is ops_logic.hydraulics.weir_flow (Kindsvater-Carter x Villemonte)
    q = WEIR.flow(10.0 + h1, 10.0 + r * h1 if r > 0 else 9.0)[0]
    ref = weir_flow(h1, 1.2, weir_height=1.5, channel_width=3.0,
                    downstream_head=r * h1 if r > 0 else 0.0)
    assert q == pytest.approx(ref, rel=1e-12)


@given(dh=st.floats(0.001, 2.0))
def test_full_drowned_orifice_equals_public_orifice_flow(dh):
    zd = ORIFICE.soffit_m + 0.2
    assert ORIFICE.flow(zd + dh, zd)[0] == pytest.approx(orifice_flow(0.2, dh, cd=0.61), rel=1e-12)


@given(y1=st.floats(0.2, 3.0), frac=st.floats(0.01, 0.9))
def test_slot_opening_equals_public_slot_flow(y1, frac):
    dh = frac * y1
    zu = 8.5 + y1
    ref = vertical_slot_flow(0.3, y1, dh, cd=0.75)
    assert SLOT.flow(zu, zu - dh)[0] == pytest.approx(ref, rel=1e-12)


def test_orifice_partly_drowned_is_continuous_at_its_edges():
    # the free/drowned split (Henderson 1966 s6) joins the weir-like and the drowned forms
    zu = 9.5
    for edge in (ORIFICE.invert_m, ORIFICE.soffit_m):
        below = ORIFICE.flow(zu, edge - 1e-9)[0]
        above = ORIFICE.flow(zu, edge + 1e-9)[0]
        assert below == pytest.approx(above, rel=1e-6)


@settings(max_examples=200)
@given(zu=st.floats(8.0, 12.0), gap=st.floats(1e-3, 2.5))
def test_derivatives_match_finite_differences(zu, gap):
    zd = zu - gap
    eps = 1e-7
    for o in (WEIR, ORIFICE, SLOT):
        q, dqu, dqd = o.flow(zu, zd)
        edges = [getattr(o, a) for a in ("crest_m", "invert_m", "soffit_m") if hasattr(o, a)]
        if q == 0.0 or any(abs(zu - e) < 1e-4 or abs(zd - e) < 1e-4 for e in edges):
            continue  # a kink of the piecewise form
        fu = (o.flow(zu + eps, zd)[0] - o.flow(zu - eps, zd)[0]) / (2 * eps)
        fd = (o.flow(zu, zd + eps)[0] - o.flow(zu, zd - eps)[0]) / (2 * eps)
        assert dqu == pytest.approx(fu, rel=1e-4, abs=1e-7)
        assert dqd == pytest.approx(fd, rel=1e-4, abs=1e-7)


@settings(max_examples=200)
@given(q=st.floats(1e-4, 3.0), zd=st.floats(8.0, 11.0))
def test_upstream_level_inverts_the_control(q, zd):
    ctrl = (WEIR, ORIFICE)
    zu, dqu, _ = upstream_level(ctrl, q, zd)
    assert zu > zd
    assert dqu > 0.0
    # the level is exact to 1e-12 m (a level near 10 m carries ~1e-15 m of rounding, so for
    # tiny flows through a drowned orifice the flow itself is only that precise)
    assert control_flow(ctrl, zu - 1e-12, zd)[0] <= q * (1 + 1e-12)
    assert control_flow(ctrl, zu + 1e-12, zd)[0] >= q * (1 - 1e-12)


def test_upstream_level_at_zero_flow_is_the_rest_level():
    assert upstream_level((WEIR,), 0.0, 9.0)[0] == 10.0  # pool holds at the crest
    assert upstream_level((WEIR,), 0.0, 10.4)[0] == 10.4  # drowned: level of the pool below
    assert math.isclose(upstream_level((SLOT,), 0.0, 7.0)[0], 8.5)
