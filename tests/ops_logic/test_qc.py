"""Tests of ops_logic.qc against ioos_qc.qartod (ioos-qc 3.0), the reference implementation
of the IOOS QARTOD manuals, plus hand-made edge cases.

Manuals named beside the checks: QARTOD Water Level manual v2.0 (2021) [QWL], Temperature/
Salinity manual v2.1 (2020) [QTS], Dissolved Oxygen manual v2.0 (2018) [QDO], flags manual
v1.2 (2020) [QF]; manual versions and test numbers are from memory. Where ops_logic.qc
deliberately differs from ioos-qc (documented in its docstrings) the expected array is the
ioos-qc result with exactly those positions replaced, so every other position still agrees.
"""
from __future__ import annotations

import dataclasses
import datetime as dt
import logging
import time

import gsw
import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from ioos_qc import qartod as iq
from ioos_qc.config import Config
from ioos_qc.streams import NumpyStream

from ops_logic import qc
from ops_logic.qc import QcFlag

P, N, S, F, M = (int(f) for f in QcFlag)
T0 = 1_772_323_200.0  # 2026-03-01T00:00:00Z (datetime.timestamp(), standard library)
SETTINGS = settings(max_examples=80, deadline=None)

# Quarter steps are exact binary fractions, so random draws hit thresholds exactly.
quarters = st.integers(-40, 40).map(lambda k: k / 4)
readings = st.one_of(quarters, quarters, quarters, st.just(np.nan), st.just(np.inf),
                     st.just(-np.inf))
series = arrays(np.float64, st.integers(0, 40), elements=readings)
finite_series = arrays(np.float64, st.integers(0, 40), elements=quarters)


def as_dt64(t_s: np.ndarray) -> np.ndarray:
    """Epoch seconds (whole, or NaN) to naive UTC datetime64[ns], the form ioos-qc expects."""
    t_s = np.asarray(t_s, dtype=np.float64)
    out = np.full(t_s.shape, np.datetime64("NaT"), dtype="datetime64[ns]")
    ok = np.isfinite(t_s)
    out[ok] = (t_s[ok] * 1_000_000_000).astype(np.int64).astype("datetime64[ns]")
    return out


def ref(flags: np.ndarray) -> np.ndarray:
    """An ioos-qc (masked) flag array as a plain uint8 array."""
    return np.asarray(np.ma.getdata(flags), dtype=np.uint8)


def regular(n: int, step_s: float = 10.0) -> np.ndarray:
    return T0 + step_s * np.arange(n)


# ----------------------------------------------------------------------------- flags, times
@pytest.mark.parametrize(("ours", "theirs"), [
    (QcFlag.PASS, iq.QartodFlags.GOOD), (QcFlag.NOT_EVALUATED, iq.QartodFlags.UNKNOWN),
    (QcFlag.SUSPECT, iq.QartodFlags.SUSPECT), (QcFlag.FAIL, iq.QartodFlags.FAIL),
    (QcFlag.MISSING, iq.QartodFlags.MISSING),
])
def test_flag_values(ours, theirs):
    # [QF] flag values; reference: ioos_qc.qartod.QartodFlags
    assert int(ours) == theirs


def test_epoch_seconds_tz_aware_forms():
    # reference: datetime.timestamp() of the standard library
    stamps = [dt.datetime(2026, 3, 1, 2, 0, 10, tzinfo=dt.timezone(dt.timedelta(hours=2))),
              dt.datetime(2026, 7, 1, 12, 30, tzinfo=dt.UTC)]
    expected = [s.timestamp() for s in stamps]
    index = pd.to_datetime(stamps, utc=True).tz_convert("Etc/GMT-2")
    for form in (stamps, index, pd.Series(index), [pd.Timestamp(s) for s in stamps]):
        assert qc.epoch_seconds(form).tolist() == expected
    assert expected[0] == T0 + 10.0
    assert qc.epoch_seconds([T0, 5]).tolist() == [T0, 5.0]
    with_nat = qc.epoch_seconds(pd.DatetimeIndex([stamps[0], None]))
    assert with_nat[0] == expected[0] and np.isnan(with_nat[1])


@pytest.mark.parametrize("naive", [
    pd.DatetimeIndex(["2026-03-01T00:00"]), np.array(["2026-03-01T00:00"], "datetime64[s]"),
    [dt.datetime(2026, 3, 1)], ["2026-03-01 00:00"],
])
def test_epoch_seconds_refuses_naive(naive):
    with pytest.raises(ValueError, match="naive"):
        qc.epoch_seconds(naive)


@pytest.mark.parametrize("scale", [1e3, 1e6, 1e9])
def test_epoch_seconds_refuses_other_units(scale):
    # PLATFORM_NOTES: pandas 3 astype("int64") of timestamps gives µs, not s or ns
    with pytest.raises(ValueError, match="nanoseconds"):
        qc.epoch_seconds(np.array([T0, T0 + 10]) * scale)
    with pytest.raises(ValueError, match="nanoseconds"):
        qc.rate_of_change_test(np.array([T0, T0 + 10]) * scale, [1.0, 1.0], 0.1)


# ----------------------------------------------------------------------------- gross range
@st.composite
def spans(draw):
    lo, hi = sorted(draw(st.lists(quarters, min_size=2, max_size=2, unique=True)))
    if draw(st.booleans()):
        s_lo, s_hi = sorted(draw(st.lists(quarters.filter(lambda v: lo <= v <= hi),
                                          min_size=2, max_size=2, unique=True)))
        return (lo, hi), (s_lo, s_hi)
    return (lo, hi), None


@SETTINGS
@given(values=series, span=spans())
def test_gross_range_matches_ioos(values, span):
    # [QWL]/[QTS]/[QDO] gross range test; reference: ioos_qc.qartod.gross_range_test
    fail, suspect = span
    expected = ref(iq.gross_range_test(values, fail, suspect))
    np.testing.assert_array_equal(qc.gross_range_test(values, fail, suspect), expected)


@pytest.mark.parametrize(("value", "flag"), [
    (0.0, S), (10.0, S), (-0.25, F), (10.25, F),  # on a fail limit: not FAIL
    (2.0, P), (8.0, P), (1.75, S), (8.25, S), (np.nan, M), (np.inf, F), (-np.inf, F),
])
def test_gross_range_boundaries(value, flag):
    # [QWL] gross range test; reference: ioos_qc.qartod.gross_range_test (inclusive limits)
    assert qc.gross_range_test([value], (0, 10), (2, 8)).tolist() == [flag]
    assert ref(iq.gross_range_test([value], (0, 10), (2, 8))).tolist() == [flag]


def test_gross_range_keeps_shape():
    # reference: ioos_qc.qartod.gross_range_test (it reshapes to the input too)
    x = np.array([[1.0, 9.0, np.nan], [3.0, -1.0, 4.5]])
    out = qc.gross_range_test(x, (0, 5), (1, 4))
    assert out.shape == x.shape and out.dtype == np.uint8
    np.testing.assert_array_equal(out, ref(iq.gross_range_test(x, (0, 5), (1, 4))))


def test_gross_range_reversed_span_raises_where_ioos_sorts():
    # deliberate difference: ioos-qc sorts a reversed span silently
    assert ref(iq.gross_range_test([1.0, 9.0], (5, 0))).tolist() == [P, F]
    with pytest.raises(ValueError, match="low < high"):
        qc.gross_range_test([1.0, 9.0], (5, 0))


def test_gross_range_suspect_outside_fail_raises_like_ioos():
    with pytest.raises(ValueError, match="must fall within"):
        iq.gross_range_test([1.0], (0, 5), (-1, 4))
    with pytest.raises(ValueError, match="inside fail span"):
        qc.gross_range_test([1.0], (0, 5), (-1, 4))


# ----------------------------------------------------------------------------- climatology
def ioos_climatology_config(ranges):
    """SeasonalRange table as ioos-qc ClimatologyConfig members (wrapped ranges split)."""
    members = []
    for r in ranges:
        pieces = ([(r.first_month, r.last_month)] if r.first_month <= r.last_month
                  else [(r.first_month, 12), (1, r.last_month)])
        for first, last in pieces:
            member = {"tspan": (first, last), "period": "month", "vspan": r.suspect_span}
            if r.fail_span is not None:
                member["fspan"] = r.fail_span
            members.append(member)
    return members


TABLES = [
    [qc.SeasonalRange(1, 3, (0.0, 6.0), (-2.0, 9.0)), qc.SeasonalRange(6, 9, (4.0, 9.0))],
    [qc.SeasonalRange(11, 2, (-1.0, 4.0), (-3.0, 6.0)), qc.SeasonalRange(4, 4, (2.0, 3.0))],
    [qc.SeasonalRange(m, m, (m / 4 - 3, m / 4 + 3), (m / 4 - 6, m / 4 + 6))
     for m in range(1, 13)],
]


@pytest.mark.parametrize("table", TABLES)
@pytest.mark.parametrize("tz", ["UTC", "Etc/GMT-2", "Etc/GMT+5"])
def test_climatology_matches_ioos(table, tz):
    # [QTS]/[QDO]/[QWL] climatology test; reference: ioos_qc.qartod.climatology_test with
    # period="month" members (month limits inclusive, value spans inclusive)
    rng = np.random.default_rng(7)
    t = np.sort(rng.integers(T0 - 100 * 86400, T0 + 300 * 86400, 400)).astype(float)
    t[:4] = [T0 - 1, T0, T0 + 3600, T0 + 7199]  # around the Feb/Mar boundary in UTC and +2 h
    x = rng.integers(-32, 44, t.size) / 4
    local = pd.Series(pd.to_datetime(t, unit="s", utc=True).tz_convert(tz))
    expected = ref(iq.climatology_test(ioos_climatology_config(table), x, local,
                                       np.full(t.size, np.nan)))
    assert set(expected) >= {P, S}
    np.testing.assert_array_equal(qc.climatology_test(t, x, table, tz=tz), expected)
    np.testing.assert_array_equal(qc.climatology_test(local, x, table, tz=tz), expected)


def test_climatology_nan_and_inf():
    # deliberate difference: ioos-qc 3.0 flags NaN and ±inf PASS (seen, even in a month no
    # member covers); here NaN is MISSING and ±inf lies outside every span
    table = [qc.SeasonalRange(3, 3, (0.0, 5.0), (-1.0, 6.0)), qc.SeasonalRange(4, 4, (0.0, 5.0))]
    mar, apr, may = T0, T0 + 31 * 86400, T0 + 62 * 86400
    t = np.array([mar, mar, mar, mar, apr, apr, apr, may, may])
    x = np.array([np.nan, np.inf, -np.inf, 5.5, np.inf, np.nan, 5.5, np.inf, 5.5])
    expected = ref(iq.climatology_test(ioos_climatology_config(table), x, as_dt64(t),
                                       np.full(t.size, np.nan)))
    assert expected[[3, 6, 8]].tolist() == [S, S, N]  # finite readings: ioos-qc agrees
    expected[[0, 5]] = M
    expected[[1, 2]] = F  # March has a fail span
    expected[4] = S  # April has only a suspect span
    expected[7] = N  # May: no range
    np.testing.assert_array_equal(qc.climatology_test(t, x, table), expected)


@pytest.mark.parametrize("bad", [
    [qc.SeasonalRange(1, 3, (0, 1)), qc.SeasonalRange(3, 4, (0, 1))],
    [qc.SeasonalRange(11, 2, (0, 1)), qc.SeasonalRange(1, 1, (0, 1))],
    [("not", "a range")],
])
def test_climatology_rejects_overlapping_tables(bad):
    # deliberate difference: ioos-qc applies overlapping members in order, the last one wins
    with pytest.raises(ValueError):
        qc.climatology_test([T0], [1.0], bad)


@pytest.mark.parametrize("kwargs", [
    {"first_month": 0, "last_month": 3, "suspect_span": (0, 1)},
    {"first_month": 1, "last_month": 13, "suspect_span": (0, 1)},
    {"first_month": 1.5, "last_month": 3, "suspect_span": (0, 1)},
    {"first_month": 1, "last_month": 3, "suspect_span": (1, 0)},
    {"first_month": 1, "last_month": 3, "suspect_span": (0, 5), "fail_span": (1, 4)},
])
def test_seasonal_range_validation(kwargs):
    with pytest.raises(ValueError):
        qc.SeasonalRange(**kwargs)


def test_climatology_needs_finite_aware_times():
    table = [qc.SeasonalRange(1, 12, (0, 1))]
    with pytest.raises(ValueError, match="finite"):
        qc.climatology_test([T0, np.nan], [0.5, 0.5], table)
    with pytest.raises(ValueError, match="naive"):
        qc.climatology_test(pd.DatetimeIndex(["2026-03-01"]), [0.5], table)
    with pytest.raises(ValueError, match="shape"):
        qc.climatology_test([T0], [0.5, 0.5], table)


# ----------------------------------------------------------------------------- spike
@SETTINGS
@given(values=series, thresholds=st.lists(st.integers(1, 24).map(lambda k: k / 4),
                                          min_size=2, max_size=2))
def test_spike_matches_ioos(values, thresholds):
    # [QWL] test 6 spike (test numbers from memory); reference: ioos_qc.qartod.spike_test
    suspect, fail = sorted(thresholds)
    expected = ref(iq.spike_test(values, suspect, fail, method="average")) if values.size else []
    np.testing.assert_array_equal(qc.spike_test(values, suspect, fail), expected)


@pytest.mark.parametrize(("values", "expected"), [
    ([1.0, 1.0, 1.5, 1.0, 1.0], [N, P, S, P, N]),  # a single spike; neighbours see 0.25
    ([1.0, 1.0, 2.0, 1.0, 1.0], [N, S, F, S, N]),  # a bigger one: neighbours see 0.5 > 0.3
    ([9.0, 1.0, 1.0, 1.0], [N, F, P, N]),  # spike at the start: unevaluable, next sees 4
    ([1.0, 1.0, 1.0, 9.0], [N, P, F, N]),  # spike at the end
    ([1.0, np.nan, 1.0, 1.0], [N, M, N, N]),  # next to a missing reading: not evaluated
    ([5.0], [N]), ([5.0, 6.0], [N, N]), ([], []),
])
def test_spike_cases(values, expected):
    # [QWL] test 6 spike; reference: ioos_qc.qartod.spike_test (strict >, ends UNKNOWN)
    assert qc.spike_test(values, 0.3, 0.6).tolist() == expected
    if values:
        assert ref(iq.spike_test(np.array(values), 0.3, 0.6)).tolist() == expected


def test_spike_boundary_inclusive():
    # reference: ioos_qc.qartod.spike_test: a spike equal to a threshold is not flagged
    x = np.array([0.0, 1.0, 0.0])
    for suspect, fail, mid in [(1.0, 2.0, P), (0.75, 1.0, S), (0.5, 0.75, F)]:
        assert qc.spike_test(x, suspect, fail)[1] == mid
        assert ref(iq.spike_test(x, suspect, fail))[1] == mid


@pytest.mark.parametrize(("suspect", "fail"), [(0.0, 1.0), (1.0, 0.5), (-1.0, 1.0),
                                               (1.0, np.inf), (np.nan, 1.0)])
def test_spike_threshold_validation(suspect, fail):
    # deliberate difference: ioos-qc treats a zero threshold as "off" (truthiness test)
    with pytest.raises(ValueError):
        qc.spike_test([1.0, 2.0, 1.0], suspect, fail)


def test_spike_refuses_2d():
    with pytest.raises(ValueError, match="1-D"):
        qc.spike_test(np.zeros((3, 3)), 1.0, 2.0)


# ----------------------------------------------------------------------------- rate of change
def not_evaluated_after_gaps(expected: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Documented difference: first reading and readings after a missing one are NOT_EVALUATED."""
    out = expected.copy()
    finite = np.isfinite(values)
    after = np.r_[True, ~finite[:-1]] & finite
    out[after] = N
    return out


@SETTINGS
@given(values=series, steps=st.lists(st.integers(1, 30), min_size=40, max_size=40),
       suspect=st.integers(1, 8).map(lambda k: k / 40), fail=st.none() | st.just(0.5))
def test_rate_of_change_matches_ioos(values, steps, suspect, fail):
    # [QWL]/[QTS]/[QDO] rate of change test; reference: ioos_qc.qartod.rate_of_change_test
    t = T0 + np.cumsum(steps[: values.size]).astype(float)
    if values.size == 0:
        assert qc.rate_of_change_test(t, values, suspect, fail).size == 0
        return
    with np.errstate(invalid="ignore"):
        expected = ref(iq.rate_of_change_test(values, as_dt64(t), suspect, fail))
    expected = not_evaluated_after_gaps(expected, values)
    np.testing.assert_array_equal(qc.rate_of_change_test(t, values, suspect, fail), expected)


def test_rate_of_change_boundary_and_fail():
    # reference: ioos_qc.qartod.rate_of_change_test: a rate equal to the threshold passes
    t, x = regular(4), np.array([0.0, 1.0, 2.5, 7.5])  # rates 0.1, 0.15, 0.5 per s
    assert qc.rate_of_change_test(t, x, 0.1, 0.5).tolist() == [N, P, S, S]
    assert ref(iq.rate_of_change_test(x, as_dt64(t), 0.1, 0.5)).tolist() == [P, P, S, S]
    assert qc.rate_of_change_test(t, x, 0.1, 0.25).tolist() == [N, P, S, F]


def test_rate_of_change_uses_exact_time_steps():
    # deliberate difference: ioos-qc truncates steps to whole seconds (1.5 s -> 1 s)
    t, x = T0 + np.array([0.0, 1.5, 3.0]), np.array([0.0, 0.15, 0.30])  # 0.1 per s exactly
    assert ref(iq.rate_of_change_test(x, as_dt64(t), 0.12)).tolist() == [P, S, S]
    assert qc.rate_of_change_test(t, x, 0.12).tolist() == [N, P, P]


@pytest.mark.parametrize("times", [[T0, T0, T0 + 10], [T0, T0 + 10, T0 + 5],
                                   [T0, np.nan, T0 + 20], [T0, T0 + 10]])
def test_rate_of_change_needs_increasing_times(times):
    with pytest.raises(ValueError):
        qc.rate_of_change_test(times, [1.0, 1.0, 1.0], 0.1)


def test_rate_of_change_accepts_aware_times():
    t = regular(5)
    aware = pd.Series(pd.to_datetime(t, unit="s", utc=True).tz_convert("Etc/GMT+5"))
    x = [1.0, 1.2, 1.3, 3.0, 3.1]
    np.testing.assert_array_equal(qc.rate_of_change_test(aware, x, 0.02),
                                  qc.rate_of_change_test(t, x, 0.02))


# ----------------------------------------------------------------------------- flat line
def stuck_series(rng: np.random.Generator, n: int) -> np.ndarray:
    """Runs of repeated integers: a stuck-prone sensor (no missing readings: see below)."""
    lengths = rng.integers(1, 12, n)
    return np.repeat(rng.integers(0, 3, n).astype(float), lengths)[:n]


@pytest.mark.parametrize("seed", range(12))
@pytest.mark.parametrize(("tolerance", "suspect_s", "fail_s"), [
    (0.5, 30, 60), (1.0, 20, 50), (1.5, 10, 90), (0.5, 40, 40),
])
def test_flat_line_matches_ioos(seed, tolerance, suspect_s, fail_s):
    # [QWL]/[QTS]/[QDO] flat line test; reference: ioos_qc.qartod.flat_line_test on regular
    # 10 s sampling with thresholds that are multiples of the step
    rng = np.random.default_rng(seed)
    x = stuck_series(rng, 300)
    t = regular(x.size)
    expected = ref(iq.flat_line_test(x, as_dt64(t), suspect_s, fail_s, tolerance))
    warm_up = (t - t[0] < suspect_s) & np.isfinite(x)
    expected[warm_up] = N  # deliberate difference: ioos-qc passes them
    assert F in expected and (S in expected or suspect_s == fail_s)
    np.testing.assert_array_equal(qc.flat_line_test(t, x, tolerance, suspect_s, fail_s),
                                  expected)


@pytest.mark.parametrize(("run", "flags_at_end"), [(3, [P, P, P]), (4, [P, P, P, S]),
                                                   (7, [P, P, P, S, S, S, F])])
def test_flat_line_run_as_long_as_window(run, flags_at_end):
    # a run of 4 readings at 10 s lasts exactly 30 s: flagged SUSPECT at its 4th reading;
    # reference: ioos_qc.qartod.flat_line_test gives the same
    x = np.r_[np.arange(5.0), np.full(run, 9.0)]
    t = regular(x.size)
    ours = qc.flat_line_test(t, x, 0.1, 30, 60)
    theirs = ref(iq.flat_line_test(x, as_dt64(t), 30, 60, 0.1))
    assert ours[5:].tolist() == theirs[5:].tolist() == flags_at_end


def test_flat_line_range_equal_to_tolerance_is_movement():
    # reference: ioos_qc.qartod.flat_line_test uses range < tolerance
    x, t = np.array([0.0, 0.5, 0.0, 0.5, 0.0, 0.5]), regular(6)
    assert qc.flat_line_test(t, x, 0.5, 20, 30).tolist() == [N, N, P, P, P, P]
    assert ref(iq.flat_line_test(x, as_dt64(t), 20, 30, 0.5)).tolist() == [P] * 6
    assert qc.flat_line_test(t, x, 0.75, 20, 30).tolist() == [N, N, S, F, F, F]


def test_flat_line_threshold_not_a_multiple_of_the_step():
    # deliberate difference: ioos-qc rounds 35 s / 10 s down to 3 steps (30 s of flatness);
    # here the run must last at least 35 s, i.e. 4 steps
    x, t = np.r_[0.0, np.full(7, 1.0)], regular(8)
    assert ref(iq.flat_line_test(x, as_dt64(t), 35, 60, 0.1)).tolist() == [P, P, P, P, S, S, S, F]
    assert qc.flat_line_test(t, x, 0.1, 35, 60).tolist() == [N, N, N, N, P, S, S, F]


def test_flat_line_burst_of_fast_readings():
    # deliberate difference: windows are in time. 10 s sampling, then a burst at 1 s: ioos-qc
    # counts 3 median steps and calls 3 s of equal readings "flat for 30 s"
    t = np.r_[T0 + 10.0 * np.arange(11), T0 + 100 + np.arange(1.0, 4.0)]
    x = np.r_[np.arange(11.0), np.full(3, 10.0)]
    assert ref(iq.flat_line_test(x, as_dt64(t), 30, 60, 0.1))[-1] == S
    assert qc.flat_line_test(t, x, 0.1, 30, 60)[-1] == P


def test_flat_line_across_a_gap_and_missing():
    # held value across a gap counts as flat (the anchor reading is before the gap);
    # missing readings inside the window are ignored, as in ioos_qc.qartod.flat_line_test
    t = T0 + np.array([0.0, 10, 20, 30, 1000, 1010])
    x = np.array([5.0, 5.0, np.nan, 5.0, 5.0, 6.0])
    assert qc.flat_line_test(t, x, 0.1, 30, 60).tolist() == [N, N, M, S, F, P]


def test_flat_line_first_reading_after_a_dropout():
    # deliberate difference: ioos-qc's window of 4 positions holds one valid reading, which
    # it calls flat (FAIL); here the reading is compared with the last valid one 70 s earlier
    t, x = regular(10), np.r_[1.0, 2.0, 3.0, np.full(6, np.nan), 7.0]
    assert ref(iq.flat_line_test(x, as_dt64(t), 30, 60, 0.1))[-1] == F
    assert qc.flat_line_test(t, x, 0.1, 30, 60).tolist() == [N, N, N] + [M] * 6 + [P]
    x[-1] = 3.0  # the value held across the dropout: flat for 70 s
    assert qc.flat_line_test(t, x, 0.1, 30, 60)[-1] == F


@pytest.mark.parametrize("seed", range(5))
def test_flat_line_missing_readings_are_left_out(seed):
    # property of the documented rule: flags of the valid readings do not depend on the
    # missing ones (no external reference; guards the mapping back to full length)
    rng = np.random.default_rng(seed)
    x = stuck_series(rng, 300)
    t = regular(x.size)
    x[rng.random(x.size) < 0.1] = rng.choice([np.nan, np.inf, -np.inf])
    ok = np.isfinite(x)
    flags = qc.flat_line_test(t, x, 0.5, 30, 60)
    np.testing.assert_array_equal(flags[~ok], M)
    np.testing.assert_array_equal(flags[ok], qc.flat_line_test(t[ok], x[ok], 0.5, 30, 60))


def test_flat_line_short_series():
    # deliberate difference: ioos-qc passes series shorter than 3 readings unevaluated
    t, x = T0 + np.array([0.0, 60.0]), np.array([2.0, 2.0])
    assert ref(iq.flat_line_test(x, as_dt64(t), 30, 60, 0.1)).tolist() == [P, P]
    assert qc.flat_line_test(t, x, 0.1, 30, 60).tolist() == [N, F]
    assert qc.flat_line_test([], [], 0.1, 30, 60).tolist() == []


@pytest.mark.parametrize(("tolerance", "suspect_s", "fail_s"), [
    (0.0, 30, 60), (0.1, 60, 30), (0.1, 0, 30), (-1, 30, 60)])
def test_flat_line_validation(tolerance, suspect_s, fail_s):
    # deliberate difference: ioos-qc's default tolerance 0 never flags anything (range < 0)
    with pytest.raises(ValueError):
        qc.flat_line_test(regular(3), [1.0, 1.0, 1.0], tolerance, suspect_s, fail_s)


def test_flat_line_million_points_under_a_second():
    # requirement of the brief (ioos-qc: ~0.5-3.5 s per million points, PLATFORM_NOTES)
    rng = np.random.default_rng(3)
    x = np.round(rng.normal(size=1_000_000), 1)
    t = regular(x.size)
    best = np.inf
    for _ in range(3):
        start = time.perf_counter()
        flags = qc.flat_line_test(t, x, 0.05, 3600, 14400)
        best = min(best, time.perf_counter() - start)
    assert flags.shape == x.shape
    assert best < 1.0, f"flat line took {best:.2f} s per million points"


# ----------------------------------------------------------------------------- timing / gap
@pytest.mark.parametrize("max_age_s", [60, 90, 600, 3600])
@pytest.mark.parametrize("seed", range(3))
def test_timing_gap_matches_ioos(max_age_s, seed):
    # [QWL]/[QTS]/[QDO] timing/gap test; reference: ioos_qc.qartod.data_reception_test
    # (fail_span in hours; whole seconds so that its int() conversion is exact)
    rng = np.random.default_rng(seed)
    now = T0 + 86400.0
    t = now - rng.integers(-200, 2 * max_age_s, 200).astype(float)
    t[:3] = [now - max_age_s, now - max_age_s - 1, now + 60]
    t[rng.random(t.size) < 0.05] = np.nan
    expected = ref(iq.data_reception_test(as_dt64(t), fail_span=max_age_s / 3600,
                                          from_time=as_dt64(np.array([now]))[0]))
    expected[np.nan_to_num(t - now, nan=0) > 60] = F  # deliberate difference: future stamps
    assert expected[:3].tolist() == [P, F, P]
    np.testing.assert_array_equal(qc.timing_gap_test(t, now, max_age_s), expected)


def test_timing_gap_aware_now_and_future():
    now = pd.Timestamp(T0 + 100, unit="s", tz="UTC").tz_convert("Etc/GMT-2")
    t = T0 + np.array([0.0, 40.0, 100.0, 160.0, 161.0])
    assert qc.timing_gap_test(t, now, 60.0).tolist() == [F, P, P, P, F]
    assert qc.timing_gap_test(t, now, 60.0, max_future_s=0).tolist() == [F, P, P, F, F]
    with pytest.raises(ValueError, match="naive"):
        qc.timing_gap_test(t, np.datetime64("2026-03-01T00:00"), 60.0)
    with pytest.raises(ValueError):
        qc.timing_gap_test(t, T0, 0.0)


def test_feed_freshness_flag():
    # [QWL] timing/gap test applied to the latest reading of a feed
    assert qc.feed_freshness_flag([], T0, 60) is QcFlag.MISSING
    assert qc.feed_freshness_flag([np.nan], T0, 60) is QcFlag.MISSING
    assert qc.feed_freshness_flag([T0 - 500, T0 - 60], T0, 60) is QcFlag.PASS
    assert qc.feed_freshness_flag([T0 - 61, T0 - 500], T0, 60) is QcFlag.FAIL


# ----------------------------------------------------------------------------- redundant pair
@SETTINGS
@given(data=st.data(), thresholds=st.lists(st.integers(1, 24).map(lambda k: k / 4),
                                           min_size=2, max_size=2))
def test_redundant_pair_matches_ioos_gross_range_of_difference(data, thresholds):
    # [QWL] multi-variate/neighbour idea for two gauges on one pool; reference:
    # ioos_qc.qartod.gross_range_test applied to a - b with symmetric spans
    a = data.draw(series)
    b = data.draw(arrays(np.float64, a.shape, elements=readings))
    suspect, fail = sorted(thresholds)
    with np.errstate(invalid="ignore"):
        expected = ref(iq.gross_range_test(a - b, (-fail, fail), (-suspect, suspect)))
    np.testing.assert_array_equal(qc.redundant_pair_test(a, b, suspect, fail), expected)


def test_redundant_pair_cases():
    a = [2.0, 2.0, 2.0, 2.0, np.nan, 2.0]
    b = [2.25, 2.5, 2.75, 1.0, 2.0, np.nan]  # differences 0.25 (= suspect), 0.5 (= fail), ...
    assert qc.redundant_pair_test(a, b, 0.25, 0.5).tolist() == [P, S, F, F, M, M]
    with pytest.raises(ValueError, match="shapes"):
        qc.redundant_pair_test([1.0], [1.0, 2.0], 0.1, 0.2)
    with pytest.raises(ValueError):
        qc.redundant_pair_test([1.0], [1.0], 0.3, 0.2)


# ----------------------------------------------------------------------------- aggregate
flag_values = st.sampled_from([P, N, S, F, M])


@SETTINGS
@given(data=st.data(), n=st.integers(1, 30), k=st.integers(1, 6))
def test_aggregate_matches_ioos(data, n, k):
    # [QF] aggregate rule; reference: ioos_qc.qartod.qartod_compare
    vectors = [np.array(data.draw(st.lists(flag_values, min_size=n, max_size=n)))
               for _ in range(k)]
    expected = ref(iq.qartod_compare(vectors))
    np.testing.assert_array_equal(qc.qc_aggregate(vectors), expected)


def test_aggregate_precedence():
    # reference: ioos_qc.qartod.qartod_compare priorities MISSING < UNKNOWN < GOOD < ...
    vectors = [np.array([9, 9, 2, 1, 3]), np.array([9, 2, 1, 3, 4])]
    assert qc.qc_aggregate(vectors).tolist() == [M, N, P, S, F]
    assert ref(iq.qartod_compare(vectors)).tolist() == [M, N, P, S, F]
    grid = qc.qc_aggregate([np.ones((2, 2), int), np.full((2, 2), 4)])
    assert grid.shape == (2, 2) and set(grid.ravel()) == {F}


@pytest.mark.parametrize("bad", [[np.array([0, 1])], [np.array([5])], [np.array([1.5])],
                                 [np.array([-1])], [np.array([300])]])
def test_aggregate_rejects_non_flags(bad):
    # deliberate difference: ioos-qc ignores values that are not flags
    with pytest.raises(ValueError):
        qc.qc_aggregate(bad)


def test_aggregate_rejects_ioos_ignored_value():
    assert ref(iq.qartod_compare([np.array([0, 1])])).tolist() == [M, P]
    with pytest.raises(ValueError, match="not QARTOD flags"):
        qc.qc_aggregate([np.array([0, 1])])
    with pytest.raises(ValueError):
        qc.qc_aggregate([])
    with pytest.raises(ValueError, match="shape"):
        qc.qc_aggregate([np.array([1, 1]), np.array([1])])


# ----------------------------------------------------------------------------- thresholds
@pytest.mark.parametrize(("quantity", "unit"), [
    ("water_level", "m"), ("temperature", "degC"), ("dissolved_oxygen", "mg/L")])
def test_default_thresholds(quantity, unit):
    th = qc.default_thresholds(quantity)
    assert th.quantity == quantity and th.unit == unit
    assert {"gross_range", "spike", "rate_of_change", "flat_line", "timing_gap"} <= set(
        th.enabled_tests)
    assert dataclasses.replace(th) == th  # re-validates


def test_default_do_upper_suspect_is_110_percent_of_saturation_at_0c():
    # gsw (TEOS-10) O2sol, Garcia & Gordon (1992), at S = 0, 0 °C, in µmol/kg, converted with
    # the TEOS-10 density and 31.998 g/mol; 110 % total-dissolved-gas limit (REFERENCES, seen)
    sat_mg_l = gsw.O2sol_SP_pt(0.0, 0.0) * gsw.rho(0.0, 0.0, 0.0) / 1000 * 31.998e-3
    assert sat_mg_l == pytest.approx(14.621, rel=1e-3)  # Benson & Krause (1984) table value
    th = qc.default_thresholds("dissolved_oxygen")
    assert th.suspect_span[1] == pytest.approx(1.10 * sat_mg_l, rel=0.005)


def test_default_fail_limits_never_discard_alarm_levels():
    # FAIL readings never drive a recommendation, so FAIL must not hide real events:
    # DO 1-day minimum 4.0 mg/L (US EPA 1986, from memory) and adult-migration blocking
    # 21-22 °C (McCullough 1999, from memory) lie well inside the fail spans.
    do, temp = qc.default_thresholds("dissolved_oxygen"), qc.default_thresholds("temperature")
    assert do.fail_span[0] < do.suspect_span[0] < 4.0
    assert temp.fail_span[1] > temp.suspect_span[1] > 22.0
    assert all(r.fail_span is None for r in temp.seasonal_ranges)
    summer = [r for r in temp.seasonal_ranges if 7 in r.months]
    assert summer[0].suspect_span[1] > 22.0


def test_default_thresholds_unknown_quantity():
    with pytest.raises(ValueError, match="did you mean 'temperature'"):
        qc.default_thresholds("temprature")


BASE = {"quantity": "level", "unit": "m", "fail_span": (0.0, 10.0)}


@pytest.mark.parametrize("extra", [
    {"fail_span": (10.0, 0.0)}, {"suspect_span": (-1.0, 5.0)}, {"quantity": ""},
    {"spike_suspect": 0.5}, {"spike_suspect": 0.5, "spike_fail": 0.2},
    {"rate_fail_per_s": 0.1}, {"rate_suspect_per_s": 0.2, "rate_fail_per_s": 0.1},
    {"rate_suspect_per_s": 0.0}, {"flat_tolerance": 0.1, "flat_suspect_s": 60.0},
    {"flat_tolerance": 0.0, "flat_suspect_s": 60.0, "flat_fail_s": 120.0},
    {"max_age_s": -1.0}, {"max_future_s": np.inf},
    {"seasonal_ranges": (qc.SeasonalRange(1, 6, (0, 1)), qc.SeasonalRange(6, 7, (0, 1)))},
])
def test_thresholds_validation(extra):
    with pytest.raises(ValueError):
        qc.QcThresholds(**(BASE | extra))


def test_thresholds_frozen():
    th = qc.QcThresholds(**BASE)
    with pytest.raises(dataclasses.FrozenInstanceError):
        th.fail_span = (0.0, 1.0)  # type: ignore[misc]
    assert th.enabled_tests == ("gross_range",)


def test_thresholds_from_mapping():
    config = {
        "gross_range": {"fail_span": [0, 10], "suspect_span": [1, 9]},
        "climatology": {"seasonal_ranges": [
            {"first_month": 11, "last_month": 3, "suspect_span": [1, 4]}]},
        "spike": {"suspect": 0.1, "fail": 0.3},
        "rate_of_change": {"suspect_per_s": 0.01},
        "flat_line": {"tolerance": 0.001, "suspect_s": 600, "fail_s": 1200},
        "timing_gap": {"max_age_s": 60},
    }
    th = qc.QcThresholds.from_mapping("level", "m", config)
    assert th.enabled_tests == qc.TEST_NAMES
    assert th.suspect_span == (1.0, 9.0)
    assert isinstance(th.max_age_s, float) and isinstance(th.flat_suspect_s, float)
    assert th.seasonal_ranges[0].months == (11, 12, 1, 2, 3)


@pytest.mark.parametrize(("config", "match"), [
    ({"gross_range": {"fail_span": [0, 1]}, "spikes": {"suspect": 1, "fail": 2}},
     "did you mean 'spike'"),
    ({"gross_range": {"fail_span": [0, 1]}, "flat_line": {"tolerence": 0.1}},
     "did you mean 'tolerance'"),
    ({"gross_range_test": {"fail_span": [0, 1]}}, "unknown QC test"),
    ({"spike": {"suspect": 1, "fail": 2}}, "fail_span"),
    ({"gross_range": {"fail_span": [0, 1]}, "climatology": {"seasonal_ranges": [
        {"first_month": 1, "last_month": 2, "suspect_spam": [0, 1]}]}},
     "did you mean 'suspect_span'"),
])
def test_thresholds_from_mapping_typos_raise(config, match):
    with pytest.raises(ValueError, match=match):
        qc.QcThresholds.from_mapping("level", "m", config)


def test_ioos_only_logs_a_misspelled_test(caplog):
    # the behaviour improved upon: ioos_qc.config skips a misspelled test with a log line
    with caplog.at_level(logging.WARNING, logger="ioos_qc"):
        config = Config({"streams": {"x": {"qartod": {"gross_rang_test": {"fail_span": [0, 1]}}}}})
        results = list(NumpyStream(np.arange(3.0), as_dt64(regular(3))).run(config))
    assert results == [] and "gross_rang_test" in caplog.text


# ----------------------------------------------------------------------------- run_qc
def ioos_aggregate(t, x, th):
    """The same tests run with ioos-qc and combined with its qartod_compare."""
    t64 = as_dt64(t)
    results = [iq.gross_range_test(x, th.fail_span, th.suspect_span),
               iq.spike_test(x, th.spike_suspect, th.spike_fail),
               iq.rate_of_change_test(x, t64, th.rate_suspect_per_s),
               iq.flat_line_test(x, t64, th.flat_suspect_s, th.flat_fail_s, th.flat_tolerance)]
    if th.seasonal_ranges:
        results.append(iq.climatology_test(ioos_climatology_config(th.seasonal_ranges), x,
                                           t64, np.full(x.size, np.nan)))
    return ref(iq.qartod_compare([ref(r) for r in results]))


@pytest.mark.parametrize(("quantity", "level", "noise"), [
    ("water_level", 2.0, 0.05), ("temperature", 8.0, 0.4), ("dissolved_oxygen", 9.0, 0.8)])
def test_run_qc_matches_ioos_aggregate(quantity, level, noise):
    # [QF] aggregate of the QARTOD tests; reference: ioos_qc.qartod tests + qartod_compare.
    # Where the reading is missing, run_qc says MISSING (documented). The scattered single
    # NaNs could, by the documented flat-line difference, shift a window by one reading;
    # with this seed they do not.
    rng = np.random.default_rng(11)
    n = 4000
    t = T0 - 3600 + 10.0 * np.arange(n)  # crosses 1 March: two seasonal ranges
    x = np.round(level + noise * np.cumsum(rng.normal(size=n)) / 10, 2)
    x[1000:1800] = x[1000]  # a stuck sensor, 8000 s
    x[rng.integers(0, n, 30)] += rng.choice([-1, 1], 30) * rng.uniform(0, 6 * noise, 30)
    x[rng.integers(0, n, 20)] = np.nan
    th = qc.default_thresholds(quantity)
    expected = ioos_aggregate(t, x, th)
    expected[np.isnan(x)] = M
    assert {P, S} <= set(expected)
    np.testing.assert_array_equal(qc.run_qc(t, x, th), expected)
    with_now = qc.run_qc(t, x, th, now=t[-1] + 5)
    stale = t[-1] + 5 - t > th.max_age_s
    np.testing.assert_array_equal(with_now[stale & ~np.isnan(x)], F)
    np.testing.assert_array_equal(with_now[~stale], expected[~stale])


def test_run_qc_missing_reading_stays_missing():
    # deliberate difference from the plain aggregate: the timing test's PASS must not make
    # a NaN reading look good
    th = qc.default_thresholds("temperature")
    t, x = regular(3), np.array([8.0, np.nan, 8.1])
    per_test = qc.run_qc_tests(t, x, th, now=t[-1])
    assert per_test["timing_gap"][1] == P and per_test["gross_range"][1] == M
    assert qc.qc_aggregate(list(per_test.values()))[1] == P
    assert qc.run_qc(t, x, th, now=t[-1])[1] == M


def test_run_qc_test_selection():
    th = qc.default_thresholds("water_level")
    t, x = regular(5), np.array([2.0, 2.0, 3.0, 2.0, 2.0])
    assert set(qc.run_qc_tests(t, x, th)) == set(th.enabled_tests) - {"timing_gap"}
    assert set(qc.run_qc_tests(t, x, th, now=t[-1])) == set(th.enabled_tests)
    only = qc.run_qc(t, x, th, tests=["gross_range", "spike"])
    assert only.tolist() == qc.qc_aggregate([qc.gross_range_test(x, th.fail_span),
                                             qc.spike_test(x, 0.15, 0.5)]).tolist()
    with pytest.raises(ValueError, match="did you mean 'flat_line'"):
        qc.run_qc(t, x, th, tests=["flat_lines"])
    with pytest.raises(ValueError, match="not configured"):
        qc.run_qc(t, x, th, tests=["climatology"])
    with pytest.raises(ValueError, match="needs now"):
        qc.run_qc(t, x, th, tests=["timing_gap"])
    with pytest.raises(ValueError, match="max_age_s"):
        qc.run_qc(t, x, qc.QcThresholds(**BASE), now=t[-1])
    assert qc.run_qc([], [], th).tolist() == []
