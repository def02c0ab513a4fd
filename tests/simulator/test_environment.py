"""The closed-form river and dam signals, and the rack head loss against `fluids`."""
from __future__ import annotations

from dataclasses import replace
from datetime import timedelta

import fluids
import gsw
import numpy as np
import pytest

from ops_logic.hydraulics import G
from simulator.environment import (
    Environment,
    blockage_fraction,
    screen_head_loss_m,
    smooth_window,
)
from simulator.scenario import Cleaning, DebrisPulse, ForebayDrop

DAY = 86400.0


@pytest.mark.parametrize("alpha", [0.1, 0.3, 0.45, 0.6, 0.75, 0.9, 1.0])
def test_screen_head_loss_uses_the_square_edged_grill_coefficient_of_fluids(alpha):
    # reference: fluids.square_edge_grill(alpha) (Blevins 1984), K on the approach velocity
    q, area = 1.7, 3.2
    v = q / area
    expected = fluids.square_edge_grill(alpha) * v * v / (2.0 * G)
    assert float(screen_head_loss_m(q, area, alpha)) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("kwargs", [dict(flow_m3s=-1.0, gross_area_m2=1.0, open_fraction=0.5),
                                    dict(flow_m3s=1.0, gross_area_m2=0.0, open_fraction=0.5),
                                    dict(flow_m3s=1.0, gross_area_m2=1.0, open_fraction=0.01),
                                    dict(flow_m3s=1.0, gross_area_m2=1.0, open_fraction=1.2)])
def test_screen_head_loss_refuses_inputs_outside_its_limits(kwargs):
    with pytest.raises(ValueError):
        screen_head_loss_m(**kwargs)


def test_blockage_saturates_and_refuses_negative_loads():
    b = blockage_fraction(np.linspace(0.0, 20.0, 200))
    assert b[0] == 0.0 and np.all(np.diff(b) > 0.0) and b[-1] == pytest.approx(0.85, abs=1e-6)
    with pytest.raises(ValueError):
        blockage_fraction(-0.1)


def test_smooth_window_boundaries():
    w = smooth_window(np.array([-1.0, 0.0, 10.0, 90.0, 100.0, 101.0]), 0.0, 100.0, 10.0)
    assert w.tolist() == [0.0, 0.0, 1.0, 1.0, 0.0, 0.0]


def _env(site, start, scenario, seed=0):
    return Environment(site, start, seed, scenario)


def test_forebay_cycles_daily_within_its_range_and_tailwater_follows_generation(site, start,
                                                                                calm):
    env = _env(site, start, calm)
    t = np.arange(0.0, 6 * DAY, 600.0)
    lo, hi = site.fishway("east").forebay_range
    fb = env.forebay_m("east", t)
    assert lo - 0.3 < fb.min() and fb.max() < hi + 0.3
    assert np.mean((fb >= lo) & (fb <= hi)) > 0.9  # mostly within the range
    daily = fb.reshape(6, -1)
    assert np.all(daily.max(axis=1) - daily.min(axis=1) > 0.1)  # a visible daily cycle
    tw = env.tailwater_m("east", t)
    # the tailwater rises with the lagged powerhouse discharge
    gen = env.generation(t - 2700.0)
    assert np.corrcoef(gen, tw)[0, 1] > 0.3
    assert np.all(tw < fb - 0.49)


def test_sudden_drop_falls_fast_and_recovers(site, start, calm):
    drop = ForebayDrop(start + timedelta(hours=10), 0.4, fall_s=600.0, recovery_s=7200.0)
    env = _env(site, start, replace(calm, forebay_drops=(drop,)))
    base = _env(site, start, calm)
    t = 36000.0 + np.array([-60.0, 300.0, 600.0, 600.0 + 7200.0, 600.0 + 5 * 7200.0])
    d = base.forebay_m("east", t) - env.forebay_m("east", t)
    assert d == pytest.approx([0.0, 0.2, 0.4, 0.4 / np.e, 0.4 * np.exp(-5)], abs=1e-9)


def test_random_drops_are_deterministic_and_appear_at_about_their_rate(site, start, calm):
    s = replace(calm, random_forebay_drops_per_day=2.0)
    t = np.arange(0.0, 20 * DAY, 300.0)
    d1 = _env(site, start, s, seed=4).forebay_drop_m(t)
    d2 = _env(site, start, s, seed=4).forebay_drop_m(t)
    assert np.array_equal(d1, d2)
    onsets = np.sum((d1[1:] > 0.05) & (d1[:-1] <= 0.05))
    assert 10 <= onsets <= 70  # 40 expected; overlapping drops merge, so a wide band
    assert np.all(_env(site, start, calm, seed=4).forebay_drop_m(t) == 0.0)


def test_oxygen_is_near_saturation_from_an_independent_library(site, start, calm):
    # reference: gsw.O2sol_SP_pt (Garcia & Gordon 1992) at zero salinity, µmol/kg at 1 atm,
    # converted with the water density (gsw.rho); a river at a dam runs at about 85-100 %
    # saturation with its daily photosynthesis cycle (common practice)
    env = _env(site, start, calm)
    t = np.arange(0.0, 3 * DAY, 900.0)
    temp = env.temperature_c(t)
    do = env.do_mg_l(t, temp)
    rho = gsw.rho(0.0, temp, 0.0) / 1000.0  # kg/L
    sat = gsw.O2sol_SP_pt(0.0, temp) * rho * 31.998e-3  # mg/L
    pct = 100.0 * do / (sat * env.pressure_kpa / 101.325)
    assert pct.min() > 84.0 and pct.max() < 101.0
    hour = env.local_hour(t)
    assert pct[np.abs(hour - 15.0) < 1.0].mean() > pct[np.abs(hour - 3.0) < 1.0].mean() + 5.0


def test_debris_builds_faster_in_a_pulse_and_a_cleaning_resets_it(site, start, calm):
    s = replace(calm, debris=(DebrisPulse(start + timedelta(days=1), start + timedelta(days=2),
                                          5.0, "trash_rack", "east"),),
                cleanings=(Cleaning(start + timedelta(days=3), "trash_rack", "east"),))
    env = _env(site, start, s)
    t = np.array([1.0, 2.0, 3.0 - 1e-6, 3.0, 3.5]) * DAY
    load = env.debris_load("east", "trash_rack", t)
    base = 1.0 / 4.0  # base load per day
    assert load == pytest.approx([base, base * 6, base * 7, 0.0, base * 0.5], rel=1e-6)
    assert env.debris_load("west", "trash_rack", t) == pytest.approx(base * t / DAY)


def test_scheduled_cleaning_interval(site, start, calm):
    env = _env(site, start, replace(calm, picket_cleaning_interval_s=DAY))
    t = np.array([0.5, 1.0, 1.5, 2.25]) * DAY
    assert env.last_cleaning_s("east", "picket", t).tolist() == [0.0, DAY, DAY, 2 * DAY]
