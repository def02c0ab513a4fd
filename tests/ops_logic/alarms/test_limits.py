"""Deadband and on/off delays: a noisy signal at a limit gives one alarm, not many.

The behaviour checked is the definition of an alarm deadband and of on/off delays in
ANSI/ISA-18.2-2016 and EEMUA 191 (from memory): the alarm clears only once the value is back
past the limit by the deadband; a condition shorter than the on-delay raises nothing; a return
shorter than the off-delay clears nothing.
"""

from __future__ import annotations

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ops_logic.alarms.limits import DelayState, alarm_intervals, limit_condition, step_delays

LIMIT = 5.0


def _runs_above(values, limit):
    """Independent count of the separate runs above the limit (on above it, off below it;
    a sample exactly on the limit changes nothing)."""
    runs, above = 0, False
    for v in values:
        if v > limit and not above:
            runs += 1
        above = v > limit or (above and v == limit)
    return runs


@settings(max_examples=200, deadline=None)
@given(deadband=st.floats(0.05, 2.0),
       fraction=st.floats(0.05, 0.95),
       n_before=st.integers(1, 20),
       noise=st.lists(st.floats(-1.0, 1.0), min_size=2, max_size=200))
def test_noise_below_the_deadband_gives_one_alarm(deadband, fraction, n_before, noise):
    amplitude = fraction * deadband  # below the deadband
    hover = [LIMIT + amplitude * u for u in noise]
    hover[0] = LIMIT + amplitude * max(abs(noise[0]), 0.5)  # the crossing itself
    before = [LIMIT - deadband - 1.0] * n_before
    values = before + hover
    times = [10.0 * i for i in range(len(values))]
    got = alarm_intervals(times, values, high=LIMIT, deadband=deadband)
    assert got == [(times[n_before], None)]
    # the same signal without a deadband chatters: one alarm per crossing
    assert len(alarm_intervals(times, values, high=LIMIT)) == _runs_above(values, LIMIT)


@settings(max_examples=100, deadline=None)
@given(deadband=st.floats(0.05, 2.0), fraction=st.floats(0.05, 0.95),
       noise=st.lists(st.floats(-1.0, 1.0), min_size=2, max_size=100))
def test_low_limit_noise_below_the_deadband_gives_one_alarm(deadband, fraction, noise):
    amplitude = fraction * deadband
    values = [LIMIT + 3.0] + [LIMIT - amplitude * max(abs(noise[0]), 0.5)] + [
        LIMIT + amplitude * u for u in noise[1:]]
    times = [float(i) for i in range(len(values))]
    assert alarm_intervals(times, values, low=LIMIT, deadband=deadband) == [(1.0, None)]


def test_hand_case_hovering_do_reading():
    # DO hovering about the 5.0 mg/L limit, ±0.15 mg/L, deadband 0.2 mg/L (invented series)
    values = [6.0, 5.5, 4.9, 5.1, 4.86, 5.14, 4.95, 5.12, 5.0, 4.9, 5.15, 5.3]
    times = [60.0 * i for i in range(len(values))]
    assert alarm_intervals(times, values, low=5.0, deadband=0.2) == [(120.0, 660.0)]
    assert len(alarm_intervals(times, values, low=5.0)) == 4  # chatter without deadband


@pytest.mark.parametrize(("excursion_s", "expected"), [
    (50.0, []),  # shorter than the 60 s on-delay: nothing
    (60.0, [(160.0, 170.0)]),  # seen at 100 … 160 s: 60 s, activates
    (120.0, [(160.0, 230.0)]),
])
def test_on_delay_suppresses_a_short_excursion(excursion_s, expected):
    times = [10.0 * i for i in range(40)]
    values = [LIMIT + 1.0 if 100.0 <= t <= 100.0 + excursion_s else LIMIT - 1.0 for t in times]
    assert alarm_intervals(times, values, high=LIMIT, on_delay_s=60.0) == expected


@pytest.mark.parametrize(("dip_s", "expected"), [
    (20.0, [(50.0, 340.0)]),  # a 30 s dip (3 samples) is shorter than the 60 s off-delay
    (80.0, [(50.0, 160.0), (190.0, 340.0)]),  # dip 100–180 s: clears 60 s into it
])
def test_off_delay_holds_through_a_short_dip(dip_s, expected):
    times = [10.0 * i for i in range(40)]
    values = [LIMIT - 1.0 if 100.0 <= t <= 100.0 + dip_s or t < 50.0 or t >= 280.0
              else LIMIT + 1.0 for t in times]
    assert alarm_intervals(times, values, high=LIMIT, off_delay_s=60.0) == expected


@pytest.mark.parametrize(("value", "latched", "expected"), [
    (10.0, False, False),  # on the limit: inside (as the profile's criteria)
    (10.001, False, True),
    (9.5, True, True),  # on limit − deadband: still on
    (9.499, True, False),
])
def test_high_limit_boundaries(value, latched, expected):
    assert limit_condition(value, high=10.0, deadband=0.5, latched=latched) is expected


def test_narrow_band_clears_at_its_middle():
    assert limit_condition(2.0, low=1.0, high=3.0, deadband=1.5, latched=True) is True
    assert limit_condition(2.0, low=1.0, high=3.0, deadband=1.5, latched=False) is False
    assert limit_condition(2.01, low=1.0, high=3.0, deadband=1.5, latched=True) is True


@pytest.mark.parametrize(("kwargs", "match"), [
    ({"value": math.nan, "high": 1.0}, "value must be a finite"),
    ({"value": 1.0, "high": 1.0, "deadband": -0.1}, "deadband must be ≥ 0"),
    ({"value": 1.0}, "give a high limit"),
    ({"value": 1.0, "high": 1.0, "low": 2.0}, "must be below high"),
])
def test_bad_limit_input_is_refused(kwargs, match):
    with pytest.raises(ValueError, match=match):
        limit_condition(**kwargs)


def test_time_going_back_is_refused():
    s = step_delays(DelayState(), True, 100.0, on_delay_s=30.0)
    with pytest.raises(ValueError, match="time went backwards"):
        step_delays(s, True, 90.0, on_delay_s=30.0)
    with pytest.raises(ValueError, match="strictly increasing"):
        alarm_intervals([0.0, 0.0], [1.0, 2.0], high=1.5)
