"""The simulated plant: determinism, physics through ops_logic, actuators, noise and faults.

External references: `fluids` (Kindsvater–Carter full-width weir, square-edged grill) for the
physics; the instrument accuracies of the task (level ±3 mm, temperature ±0.05 °C, DO
±0.05 mg/L, taken as two standard deviations: common practice) for the noise; the actuator
rates of the task (gates 0.1 ft/s, valves 1 %/s: common practice).
"""
from __future__ import annotations

from dataclasses import replace
from datetime import timedelta

import fluids
import numpy as np
import pytest

from ops_logic.hydraulics import G
from ops_logic.ladder import SettingError
from simulator.actuators import PUMP_START_S
from simulator.environment import blockage_fraction
from simulator.plant import LEVEL_LAG_S, RACKS, Plant
from simulator.scenario import DebrisPulse, Fault, Scenario


def _grid(hours: float, step: float = 10.0) -> np.ndarray:
    return np.arange(0.0, hours * 3600.0 + 1e-9, step)


def _same(a, b) -> bool:
    return all(np.array_equal(a[k].values, b[k].values, equal_nan=True)
               and np.array_equal(a[k].ok, b[k].ok) for k in a)


def test_deterministic_for_a_seed_whatever_the_steps(site, start):
    scenario = Scenario(random_forebay_drops_per_day=3.0,
                        faults=(Fault("east.P10.level", "spike", start + timedelta(minutes=30),
                                      start + timedelta(minutes=31)),))
    one = Plant(site, start=start, seed=7, scenario=scenario)
    other = Plant(site, start=start, seed=7, scenario=scenario)
    for minutes in range(7, 121, 7):  # many small advances against one big one
        other.advance_to(start + timedelta(minutes=minutes))
    t = _grid(2.0)
    a = one.sample_arrays(one.tags, t)
    assert _same(a, other.sample_arrays(other.tags, t))
    # and re-sampling the past later gives the same readings again
    one.advance_to(start + timedelta(hours=3))
    assert _same(a, one.sample_arrays(one.tags, t))
    different = Plant(site, start=start, seed=8, scenario=scenario).sample_arrays(one.tags, t)
    assert not np.array_equal(a["east.forebay_level"].values,
                              different["east.forebay_level"].values)


@pytest.mark.parametrize(("tag", "sigma"), [
    ("east.forebay_level", 0.0015), ("east.P20.level", 0.0015), ("west.P39.level_b", 0.0015),
    ("east.trash_rack_dp", 0.0015), ("west.water_temp", 0.025), ("east.do", 0.025)])
def test_measurement_noise_matches_the_instrument_accuracy(site, start, calm, tag, sigma):
    # ±3 mm level, ±0.05 °C, ±0.05 mg/L as about two standard deviations (common practice);
    # 1081 samples estimate a standard deviation within about ±2 % (1/√(2n))
    plant = Plant(site, start=start, scenario=calm, profile_interval_s=600.0)
    t = _grid(3.0)
    noisy = plant.sample_arrays([tag], t)[tag].values
    true = plant.sample_arrays([tag], t, measured=False)[tag].values
    err = noisy - true
    assert np.std(err) == pytest.approx(sigma, rel=0.1)
    assert abs(np.mean(err)) < 4 * sigma / np.sqrt(t.size)


def _settle(plant: Plant, minutes: float = 12.0) -> None:
    plant.advance_to(plant.now + timedelta(minutes=minutes))


def _kc_free_flow(plant: Plant, fishway_id: str) -> float:
    """Ladder flow over the free exit weir from `fluids` at the plant's own conditions."""
    p = plant.profile(fishway_id)
    ex = plant.site.fishway(fishway_id).exit
    crest = p.settings["exit_crest_m"]
    assert p.controls[0].regime == "free"
    return fluids.Q_weir_rectangular_full_Kindsvater_Carter(
        h1=p.forebay_m - crest, h2=crest - ex.approach_floor, b=ex.width)


def test_raising_the_exit_crest_lowers_the_ladder_flow_and_the_pools(site, start, calm):
    plant = Plant(site, start=start, seed=2, scenario=calm)
    _settle(plant)
    before = plant.profile("east")
    levels_before = plant.sample_arrays(["east.P01.level", "east.P20.level"],
                                        np.array([plant.seconds(plant.now)]), measured=False)
    # reference: fluids' full-width Kindsvater–Carter weir at the head behind the trash rack
    # (the plant feeds the solver the forebay less the rack loss, and the actual crest)
    c = plant.conditions("east")
    assert before.forebay_m == pytest.approx(c["forebay_m"] - c["trash_rack_dp_m"], abs=0.01)
    assert before.ladder_flow_m3s == pytest.approx(_kc_free_flow(plant, "east"), rel=5e-3)
    crest = plant.settings("east")["exit_crest_m"]
    plant.apply_setting("east", "exit_crest_m", crest + 0.1, plant.now)
    _settle(plant)
    after = plant.profile("east")
    assert plant.settings("east")["exit_crest_m"] == pytest.approx(crest + 0.1, abs=1e-9)
    assert after.settings["exit_crest_m"] == pytest.approx(crest + 0.1, abs=1e-9)
    assert after.ladder_flow_m3s < 0.8 * before.ladder_flow_m3s
    assert after.ladder_flow_m3s == pytest.approx(_kc_free_flow(plant, "east"), rel=5e-3)
    t = np.array([plant.seconds(plant.now)])
    levels_after = plant.sample_arrays(["east.P01.level", "east.P20.level"], t, measured=False)
    for name in levels_after:
        assert levels_after[name].values[0] < levels_before[name].values[0] - 0.005
    # the pool tags follow the last solved profile: within the lag (90 s) behind a forebay
    # that moves about a millimetre a minute, a few millimetres
    p01 = next(p for p in after.pools if p.id == "P01").water_level_m
    assert levels_after["east.P01.level"].values[0] == pytest.approx(p01, abs=5e-3)


def test_following_the_recommendation_brings_the_ladder_back_into_criteria(site, start, calm):
    plant = Plant(site, start=start, seed=5, scenario=calm)
    _settle(plant, 5)
    s = plant.settings("east")
    plant.apply_setting("east", "exit_crest_m", s["exit_crest_m"] - 0.3, plant.now)
    plant.apply_setting("east", "entrance_E1_crest_m", s["entrance_E1_crest_m"] + 0.4,
                        plant.now)
    plant.apply_setting("east", "aux_G1_opening_pct", 5.0, plant.now)
    _settle(plant)
    disturbed = plant.profile("east")
    assert not disturbed.in_criteria
    for _ in range(4):  # rate limits may need more than one adjustment
        plant.follow_recommendation("east")
        _settle(plant)
        if plant.profile("east").in_criteria:
            break
    restored = plant.profile("east")
    assert restored.in_criteria, restored.reason
    failing_before = {c.name for c in disturbed.failing()}
    assert failing_before and not restored.failing()


def test_actuators_travel_at_their_rates(site, start, calm):
    plant = Plant(site, start=start, scenario=calm)
    s = plant.settings("east")
    t0 = start + timedelta(minutes=1)
    plant.apply_setting("east", "entrance_E1_crest_m", s["entrance_E1_crest_m"] + 0.3048, t0)
    plant.apply_setting("east", "aux_G1_opening_pct", s["aux_G1_opening_pct"] - 20.0, t0)
    pumps = int(s["aux_PS1_pumps"])
    plant.apply_setting("east", "aux_PS1_pumps", min(pumps + 2, 3), t0)
    base = plant.seconds(t0)
    t = base + np.array([0.0, 5.0, 10.0, 20.0, 30.0])
    got = plant.sample_arrays(["east.E1.crest", "east.G1.opening", "east.PS1.pumps"], t,
                              measured=False)
    gate = got["east.E1.crest"].values - s["entrance_E1_crest_m"]
    # 0.1 ft/s: half a foot in 5 s, the full foot in 10 s
    assert gate == pytest.approx([0.0, 0.1524, 0.3048, 0.3048, 0.3048], abs=1e-9)
    valve = s["aux_G1_opening_pct"] - got["east.G1.opening"].values
    assert valve == pytest.approx([0.0, 5.0, 10.0, 20.0, 20.0], abs=1e-9)  # 1 %/s
    started = got["east.PS1.pumps"].values
    assert started[0] == pumps and started[-1] == min(pumps + 2, 3)
    assert plant.sample_arrays(["east.PS1.pumps"], np.array([base + PUMP_START_S - 0.1]),
                               measured=False)["east.PS1.pumps"].values[0] == pumps
    assert plant.setpoints("east")["aux_PS1_pumps"] == min(pumps + 2, 3)


def test_a_new_command_during_travel_replaces_the_rest_of_it(site, start, calm):
    plant = Plant(site, start=start, scenario=calm)
    v0 = plant.settings("east")["aux_G1_opening_pct"]
    t0 = start + timedelta(minutes=1)
    plant.apply_setting("east", "aux_G1_opening_pct", max(v0 - 30.0, 0.0), t0)
    plant.apply_setting("east", "aux_G1_opening_pct", v0, t0 + timedelta(seconds=10))
    t = plant.seconds(t0) + np.array([10.0, 15.0, 20.0, 40.0])
    v = plant.sample_arrays(["east.G1.opening"], t, measured=False)["east.G1.opening"].values
    assert v == pytest.approx([v0 - 10.0, v0 - 5.0, v0, v0], abs=1e-9)


def test_pump_trip_stops_a_pump_until_it_is_reset(site, start, calm):
    plant = Plant(site, start=start, scenario=calm, settings={"east": {"aux_PS1_pumps": 2}})
    _settle(plant, 5)
    flow_before = plant.profile("east").aux[1].flow_m3s
    t_trip = plant.now
    plant.trip_pump("east", "PS1", t_trip, reset_at=t_trip + timedelta(minutes=10))
    _settle(plant, 5)
    assert plant.settings("east")["aux_PS1_pumps"] == 1
    assert plant.profile("east").aux[1].flow_m3s < 0.75 * flow_before
    trip = plant.sample(["east.PS1.trip", "east.PS1.flow"], plant.now)
    assert trip[0].value == 1.0 and trip[1].value < 0.75 * flow_before
    _settle(plant, 10)
    assert plant.settings("east")["aux_PS1_pumps"] == 2  # restarted after the reset
    assert plant.sample(["east.PS1.trip"], plant.now)[0].value == 0.0


def test_aux_flow_meters_report_the_solver_flows(site, start, calm):
    plant = Plant(site, start=start, scenario=calm)
    _settle(plant, 10)
    t = np.array([plant.seconds(plant.now)])
    true = plant.sample_arrays(["east.G1.flow", "east.PS1.flow", "west.G2.flow"], t,
                               measured=False)
    for name, (fid, i) in {"east.G1.flow": ("east", 0), "east.PS1.flow": ("east", 1),
                           "west.G2.flow": ("west", 0)}.items():
        assert true[name].values[0] == pytest.approx(plant.profile(fid).aux[i].flow_m3s,
                                                     abs=1e-3)


def test_pool_levels_relax_towards_a_new_profile(site, start, calm):
    # hourly grid solves, so the only solve in the window is the one at the crest's arrival
    plant = Plant(site, start=start, scenario=calm, profile_interval_s=3600.0)
    t0 = start + timedelta(minutes=5)
    crest = plant.settings("east")["exit_crest_m"]
    plant.apply_setting("east", "exit_crest_m", crest + 0.06, t0)
    arrival = plant.seconds(t0) + 0.06 / 0.03048
    t = arrival + np.array([0.0, LEVEL_LAG_S, 10 * LEVEL_LAG_S])
    level = plant.sample_arrays(["east.P01.level"], t, measured=False)["east.P01.level"].values
    target = next(p for p in plant.profile("east").pools if p.id == "P01").water_level_m
    assert target < level[0] - 0.01
    # first-order lag: 1 - 1/e of the change after one time constant, all of it after ten
    assert (level[1] - level[0]) / (target - level[0]) == pytest.approx(1 - np.exp(-1),
                                                                        rel=1e-9)
    assert level[2] == pytest.approx(target, abs=1e-5)


def test_trash_rack_head_loss_builds_and_a_cleaning_resets_it(site, start, calm):
    scenario = replace(calm, debris=(DebrisPulse(start, start + timedelta(hours=12), 8.0,
                                                 "trash_rack", "west"),))
    plant = Plant(site, start=start, scenario=scenario, profile_interval_s=600.0)
    t = np.array([600.0, 6 * 3600.0, 12 * 3600.0])
    dp = plant.sample_arrays(["west.trash_rack_dp"], t, measured=False)["west.trash_rack_dp"]
    assert dp.values[0] < dp.values[1] < dp.values[2]
    assert dp.values[2] > 4 * dp.values[0]
    plant.clean_trash_rack("west", plant.now)
    _settle(plant, 20)
    clean = plant.sample_arrays(["west.trash_rack_dp"], np.array([plant.seconds(plant.now)]),
                                measured=False)["west.trash_rack_dp"].values[0]
    # reference: fluids.square_edge_grill at the clean open fraction with a trace of new
    # debris, on the approach velocity of the ladder flow
    velocity, open_clean = RACKS["trash_rack"]
    q = plant.profile("west").ladder_flow_m3s
    area = plant.rack_area_m2("west")
    load = plant.env.debris_load("west", "trash_rack", np.array([plant.seconds(plant.now)]))
    alpha = open_clean * (1.0 - float(blockage_fraction(load)[0]))
    expected = fluids.square_edge_grill(alpha) * (q / area) ** 2 / (2.0 * G)
    assert clean == pytest.approx(expected, rel=0.02)
    assert clean < 0.3 * dp.values[2]
    assert velocity > 0.0


def _window(plant, tag, a_min, b_min, step=10.0):
    t = np.arange(a_min * 60.0, b_min * 60.0, step)
    return t, plant.sample_arrays([tag], t)[tag]


def test_stuck_fault_holds_one_value(site, start, calm):
    plant = Plant(site, start=start, scenario=calm, profile_interval_s=300.0)
    plant.inject_fault("east.P10.level", "stuck", start + timedelta(minutes=20),
                       start + timedelta(minutes=40))
    _, inside = _window(plant, "east.P10.level", 20, 40)
    _, outside = _window(plant, "east.P10.level", 0, 20)
    assert np.unique(inside.values).size == 1 and inside.ok.all()
    assert np.unique(outside.values).size == outside.values.size
    held = plant.sample_arrays(["east.P10.level"], np.array([1200.0]))["east.P10.level"]
    assert held.values[0] == inside.values[0]  # the reading at the fault start is held


def test_spike_fault_gives_one_outlier(site, start, calm):
    plant = Plant(site, start=start, scenario=calm, profile_interval_s=300.0)
    at = start + timedelta(minutes=30)
    plant.inject_fault("west.tailwater_level", "spike", at, at + timedelta(seconds=10),
                       magnitude=0.5)
    _, s = _window(plant, "west.tailwater_level", 20, 40)
    dev = np.abs(s.values - np.median(s.values))
    assert np.sum(dev > 0.1) == 1 and dev.max() == pytest.approx(0.5, abs=0.02)


def test_drift_fault_adds_a_growing_offset(site, start, calm):
    plant = Plant(site, start=start, scenario=calm, profile_interval_s=300.0)
    plant.inject_fault("west.do", "drift", start + timedelta(minutes=10),
                       start + timedelta(minutes=70), rate_per_h=0.6)
    t = np.arange(600.0, 4200.0, 60.0)
    offset = (plant.sample_arrays(["west.do"], t)["west.do"].values
              - plant.sample_arrays(["west.do"], t, measured=False)["west.do"].values)
    slope = np.polyfit(t - 600.0, offset, 1)[0] * 3600.0
    assert slope == pytest.approx(0.6, rel=0.02)
    assert offset[-1] > offset[0] + 0.5


@pytest.mark.parametrize("omit", [0, 1])
def test_dropout_fault_gives_no_value(site, start, calm, omit):
    plant = Plant(site, start=start, scenario=calm, profile_interval_s=300.0)
    a, b = start + timedelta(minutes=5), start + timedelta(minutes=15)
    plant.inject_fault("east.water_temp", "dropout", a, b, omit=omit)
    readings = plant.sample(["east.water_temp", "east.do"], a + timedelta(minutes=1))
    mine = [r for r in readings if r.tag == "east.water_temp"]
    if omit:
        assert mine == []
    else:
        assert len(mine) == 1 and np.isnan(mine[0].value) and not mine[0].source_ok
    after = plant.sample(["east.water_temp"], b)
    assert after[0].source_ok and np.isfinite(after[0].value)
    plant.end_fault("east.water_temp", "dropout", a)  # ending it restores the readings
    assert plant.sample(["east.water_temp"], a + timedelta(minutes=1))[0].source_ok


def test_outage_windows(site, start, calm):
    plant = Plant(site, start=start, scenario=calm)
    plant.inject_fault("*", "outage", start + timedelta(minutes=1), start + timedelta(minutes=2))
    assert not plant.in_outage(start)
    assert plant.in_outage(start + timedelta(seconds=90))
    assert not plant.in_outage(start + timedelta(minutes=2))
    with pytest.raises(ValueError, match="outage"):
        plant.inject_fault("east.nothing", "outage", start, start + timedelta(minutes=1))


@pytest.mark.parametrize(("call", "error"), [
    (lambda p, t: p.apply_setting("east", "exit_crest_m", 99.0, t), SettingError),
    (lambda p, t: p.apply_setting("east", "aux_PS1_pumps", 1.5, t), SettingError),
    (lambda p, t: p.apply_setting("east", "no_such", 1.0, t), SettingError),
    (lambda p, t: p.apply_setting("north", "exit_crest_m", 77.0, t), ValueError),
    (lambda p, t: p.apply_setting("east", "exit_crest_m", 77.0, t.replace(tzinfo=None)),
     ValueError),
    (lambda p, t: p.apply_setting("east", "exit_crest_m", 77.0, t - timedelta(hours=1)),
     ValueError),
    (lambda p, t: p.inject_fault("east.do", "melted", t, t + timedelta(minutes=1)), ValueError),
    (lambda p, t: p.inject_fault("east.nothing", "spike", t, t + timedelta(minutes=1)),
     ValueError),
    (lambda p, t: p.inject_fault("east.do", "drift", t, t - timedelta(minutes=1)), ValueError),
    (lambda p, t: p.inject_fault("east.do", "drift", t, t + timedelta(minutes=1), size=2),
     ValueError),
    (lambda p, t: p.trip_pump("west", "G2", t), ValueError),
    (lambda p, t: p.sample(["east.do"], p.start - timedelta(seconds=1)), ValueError),
    (lambda p, t: p.sample(["east.nothing"], t), ValueError),
])
def test_bad_requests_raise_clear_errors(site, start, calm, call, error):
    plant = Plant(site, start=start, scenario=calm)
    plant.advance_to(start + timedelta(minutes=30))
    with pytest.raises(error):
        call(plant, plant.now)


def test_bad_construction_is_refused(site, start):
    with pytest.raises(ValueError, match="profile_interval_s"):
        Plant(site, start=start, profile_interval_s=0.1)
    with pytest.raises(ValueError, match="timezone-aware"):
        Plant(site, start=start.replace(tzinfo=None))
    with pytest.raises(SettingError):
        Plant(site, start=start, settings={"east": {"exit_crest_m": 1.0}})
