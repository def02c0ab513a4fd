"""Solver invariants of ops_logic.profile, and a cross-check against an independent solve."""

import itertools

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy.optimize import root

from ops_logic.ladder import Ladder, SettingError
from ops_logic.openings import control_flow
from ops_logic.profile import LEVEL_TOL_M
from ops_logic.site import parse_site

FT = 0.3048


def assert_continuity(ladder: Ladder, p) -> None:
    """Flow into each pool + its auxiliary inflow = flow out of it (control or gates).

    The flows are recomputed from the solved levels. A level carries about 1e-12 m of
    resolution, and near zero drop a drowned opening is extremely sensitive to it (Villemonte's
    factor has an infinite slope at H2/H1 = 1; an orifice flow goes as sqrt(dz)), so each check
    allows the flow change that 1e-12 m of level would make, plus 1e-9 m3/s; at the exit the
    solver's own tolerance on the forebay level (LEVEL_TOL_M) applies instead."""
    s = p.settings
    ctrl, gates = ladder.controls(s), ladder.gates(s)
    n = ladder.n_pools
    res = 1e-12
    for j in range(n):
        zu = p.forebay_m if j == 0 else p.pools[j - 1].water_level_m
        zj = p.pools[j].water_level_m
        q_in, du_in, dd_in = control_flow(ctrl[j], zu, zj)
        if p.state == "no_flow" and j == 0:
            q_in = du_in = dd_in = 0.0
        if j + 1 < n:
            q_out, du_out, dd_out = control_flow(ctrl[j + 1], zj, p.pools[j + 1].water_level_m)
        else:
            q_out, du_out, dd_out = control_flow(gates, zj, p.tailwater_m)
        sensitivity = abs(du_in) + abs(dd_in) + abs(du_out) + abs(dd_out)
        slack = (LEVEL_TOL_M if j == 0 else res) * sensitivity + 1e-9
        assert abs(q_in + p.pools[j].aux_inflow_m3s - q_out) <= slack + 1e-6 * q_out, j
    assert p.entrance_flow_m3s == pytest.approx(
        p.ladder_flow_m3s + sum(a.flow_m3s for a in p.aux), rel=1e-6, abs=1e-9)


def assert_monotone(p) -> None:
    levels = [p.forebay_m] + [x.water_level_m for x in p.pools] + [p.tailwater_m]
    assert all(a >= b - 2 * LEVEL_TOL_M for a, b in itertools.pairwise(levels))


@pytest.mark.parametrize("fishway", ["east", "west"])
@pytest.mark.parametrize(("fb_ft", "tw_ft"), [(254.0, 215.0), (252.2, 212.0), (255.5, 219.0)])
def test_demo_ladders_continuity_and_monotone_levels(demo_site, fishway, fb_ft, tw_ft):
    ladder = Ladder.from_site(demo_site, fishway)
    s = {"exit_crest_m": (fb_ft - 1.0) * FT} if "exit_crest_m" in ladder.settings else {}
    p = ladder.solve(fb_ft * FT, tw_ft * FT, s)
    assert p.state == "flowing"
    assert_continuity(ladder, p)
    assert_monotone(p)
    assert [x.id for x in p.pools] == list(ladder.pool_ids)  # upstream to downstream


@pytest.mark.parametrize("kind", ["weir", "weir_orifice"])
def test_uniform_pool_and_weir_drops_equal_the_crest_step(make_ladder, kind):
    # common practice: in the uniform zone of a pool-and-weir ladder with free weirs, every
    # pool level is crest + h(Q) with the same h, so each drop equals the crest step.
    # With orifices each pool also feels the one below it, so the uniform zone is approached
    # geometrically rather than reached: there the check is to 1 mm over the upper pools.
    ladder = make_ladder(n_baffles=12, step_m=0.3, kind=kind)
    p = ladder.solve(100.25, ladder.pool_floor_m[-1] + 0.6,
                     {"exit_crest_m": 99.95, "entrance_E1_crest_m": ladder.pool_floor_m[-1] + 0.3})
    middle = [x.head_drop_m for x in p.pools[2:8]]
    assert middle == pytest.approx([0.3] * len(middle), abs=1e-6 if kind == "weir" else 1e-3)


def test_raising_tailwater_submerges_lower_weirs_and_reduces_their_drops(east):
    s = {"exit_crest_m": 253.0 * FT, "entrance_E1_crest_m": 205.0 * FT,
         "entrance_E2_crest_m": 205.0 * FT}
    low = east.solve(254.0 * FT, 212.0 * FT, s)
    high = east.solve(254.0 * FT, 219.0 * FT, s)
    lower = slice(-6, None)
    for a, b in zip(low.controls[lower], high.controls[lower], strict=True):
        assert b.head_drop_m < a.head_drop_m
    assert high.controls[-1].regime == "submerged"
    # the upper ladder does not feel the tailwater
    assert high.pools[2].water_level_m == pytest.approx(low.pools[2].water_level_m, abs=1e-6)


def test_forebay_below_exit_crest_is_a_no_flow_state(east):
    p = east.solve(251.0 * FT, 214.0 * FT, {"exit_crest_m": 252.0 * FT})
    assert p.state == "no_flow"
    assert p.ladder_flow_m3s == 0.0
    assert "below the exit control" in p.reason
    assert p.entrance_flow_m3s == pytest.approx(sum(a.flow_m3s for a in p.aux), rel=1e-9)
    assert_continuity(east, p)


def test_settings_outside_their_ranges_are_refused(east):
    with pytest.raises(SettingError, match="outside its range"):
        east.solve(254.0 * FT, 215.0 * FT, {"exit_crest_m": 300.0 * FT})
    with pytest.raises(SettingError, match="unknown setting"):
        east.solve(254.0 * FT, 215.0 * FT, {"exit_gate_m": 77.0})
    with pytest.raises(SettingError, match="whole number"):
        east.solve(254.0 * FT, 215.0 * FT, {"aux_PS1_pumps": 1.5})
    with pytest.raises(ValueError, match="tailwater"):
        east.solve(214.0 * FT, 215.0 * FT)


def generic_solve(ladder: Ladder, forebay: float, tailwater: float, s, x0):
    """All pool levels as unknowns in one scipy.optimize.root call (continuity residuals)."""
    ctrl, gates = ladder.controls(s), ladder.gates(s)
    n = ladder.n_pools

    def residual(z):
        r = np.empty(n)
        for j in range(n):
            zu = forebay if j == 0 else z[j - 1]
            q_in = control_flow(ctrl[j], zu, z[j])[0]
            aux = sum(a.flow(forebay, tailwater, z[j], s[a.setting], 10.0)[0]
                      for a in ladder.aux if a.pool_index == j)
            q_out = (control_flow(ctrl[j + 1], z[j], z[j + 1])[0] if j + 1 < n
                     else control_flow(gates, z[j], tailwater)[0])
            r[j] = q_in + aux - q_out
        return r

    sol = root(residual, x0, method="hybr", options={"xtol": 1e-12})
    assert sol.success, sol.message
    return sol.x


@pytest.mark.parametrize("kind", ["weir", "weir_orifice", "vertical_slot"])
def test_profile_agrees_with_a_generic_simultaneous_solve(make_ladder, kind):
    # two independent solution methods on the same equations must give the same levels
    ladder = make_ladder(n_baffles=6, kind=kind, aux=True)
    tw = ladder.pool_floor_m[-1] + 1.2
    p = ladder.solve(100.3, tw)
    start = np.array([x.water_level_m for x in p.pools]) + 0.02
    z = generic_solve(ladder, 100.3, tw, p.settings, start)
    assert z == pytest.approx([x.water_level_m for x in p.pools], abs=1e-7)


@settings(max_examples=40, deadline=None, print_blob=True,
          suppress_health_check=[HealthCheck.too_slow])
@given(n=st.integers(2, 14), step=st.floats(0.1, 0.45), width=st.floats(0.4, 2.5),
       kind=st.sampled_from(["weir", "weir_orifice", "vertical_slot"]),
       head=st.floats(0.05, 0.6), tw_frac=st.floats(0.0, 1.0), aux=st.booleans(),
       crest=st.floats(0.0, 1.0))
def test_random_ladders_hold_continuity_and_monotone_levels(site_dict, n, step, width, kind,
                                                             head, tw_frac, aux, crest):
    ladder = Ladder(parse_site(site_dict(n_baffles=n, step_m=step, weir_width_m=width,
                                         pool_width_m=max(3.0, 2 * width), kind=kind,
                                         aux=aux)).fishways[0])
    lo, hi = ladder.fishway.tailwater_range
    hi = min(hi, 99.5 + head - 0.05)
    tw = lo + tw_frac * (hi - lo)
    gate = ladder.settings["entrance_E1_crest_m"]
    s = {"exit_crest_m": 99.5, "entrance_E1_crest_m": gate.low + crest * (gate.high - gate.low)}
    p = ladder.solve(99.5 + head, tw, s)
    assert_continuity(ladder, p)
    if p.state == "flowing":
        assert p.ladder_flow_m3s > 0.0
        assert_monotone(p)
    else:  # only when some control stands at or above the forebay; water may be held
        lows = [min(o.low_m for o in c) for c in ladder.controls(s)]
        lows.append(s["entrance_E1_crest_m"])
        assert max(lows) >= 99.5 + head
        assert max(x.water_level_m for x in p.pools) <= max(lows) + 1e-9
