"""Live QC (db/ingest/live_qc.py): readings judged as they arrive, in windows, must get the
flags the QARTOD tests give the whole series at once.

References:
- ``ioos_qc.qartod`` 3.0 (the IOOS reference implementation of the QARTOD tests): a series
  polled one reading at a time gets the flags of ``qartod_compare`` over its gross range,
  spike, rate of change and flat line tests on the whole series;
- ``ops_logic.qc.run_qc`` on the whole series (itself checked against ioos-qc in
  tests/ops_logic/test_qc.py) for random series split into random batches, with missing
  readings and climatology (hypothesis);
- the redundant pair test against ``ioos_qc.qartod.gross_range_test(a − b, ...)``, the
  equivalence stated in ``ops_logic.qc.redundant_pair_test``;
- the public ``ops_logic.qc`` tests (gross range, spike, rate of change, timing/gap) for the
  kernels the live path calls with the thresholds ``_checked`` validated once per tag.
"""
from __future__ import annotations

import itertools
import math
from dataclasses import replace

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from ioos_qc import qartod as iq

from db.ingest.live_qc import LiveQc, TrailingWindow, _checked
from ops_logic.qc import (  # the private kernels, as db.ingest.live_qc imports them
    QcThresholds,
    SeasonalRange,
    _gross_range_kernel,
    _rate_of_change_kernel,
    _spike_kernel,
    _timing_gap_kernel,
    default_thresholds,
    gross_range_test,
    rate_of_change_test,
    run_qc,
    spike_test,
    timing_gap_test,
)

P, N, S, F, M = 1, 2, 3, 4, 9
T0_MS = 1_780_000_000_000  # 2026-05-28T20:26:40Z, whole seconds
LEVEL = replace(default_thresholds("water_level"), fail_span=(60.0, 80.0), max_age_s=60.0)


def as_dt64(t_s: np.ndarray) -> np.ndarray:
    return (np.asarray(t_s) * 1e9).astype(np.int64).astype("datetime64[ns]")


def feed(qc: LiveQc, name: str, ms: np.ndarray, x: np.ndarray, splits: list[int],
         ok: np.ndarray | None = None) -> np.ndarray:
    """Give the readings in batches cut at ``splits``; return the final stored flags."""
    stored: dict[int, int] = {}
    tag_id = 1
    bounds = [0, *sorted(set(splits)), ms.size]
    for lo, hi in itertools.pairwise(bounds):
        if hi <= lo:
            continue
        ev = qc.evaluate({name: (ms[lo:hi], x[lo:hi], None if ok is None else ok[lo:hi])})
        for tid, ts_s, _value, flag in ev.rows:
            assert tid == tag_id
            stored[round(ts_s * 1000)] = flag
        for tid, ts_ms, flag in ev.reflags:
            assert tid == tag_id and ts_ms in stored
            stored[ts_ms] = flag
        qc.commit(ev)
    return np.array([stored[int(m)] for m in ms], dtype=np.uint8)


def one_tag(th: QcThresholds, tz: str = "UTC") -> LiveQc:
    return LiveQc({"g": (1, th)}, tz=tz)


def test_polled_one_by_one_matches_ioos_qc():
    # reference: ioos_qc.qartod qartod_compare of gross_range_test, spike_test (average),
    # rate_of_change_test and flat_line_test over the whole series; 10 s steps and flat-line
    # thresholds that are multiples of the step, where ops_logic.qc agrees with ioos-qc
    th = QcThresholds("water_level", "m", fail_span=(60.0, 80.0), suspect_span=(65.0, 75.0),
                      spike_suspect=0.15, spike_fail=0.5, rate_suspect_per_s=0.02,
                      rate_fail_per_s=0.1, flat_tolerance=0.0005, flat_suspect_s=60.0,
                      flat_fail_s=120.0)
    rng = np.random.default_rng(7)
    n = 120
    x = 70.0 + 0.003 * rng.standard_normal(n)
    x[30] += 0.6          # a spike
    x[50:70] = 70.123     # a stuck gauge: suspect after 60 s, fail after 120 s
    x[90] = 75.5          # outside the operating span
    x[100] = 81.0         # outside the sensor span
    t_s = T0_MS / 1000 + 10.0 * np.arange(n)
    ms = (t_s * 1000).astype(np.int64)
    ours = feed(one_tag(th), "g", ms, x, list(range(1, n)))
    theirs = np.ma.getdata(iq.qartod_compare([
        iq.gross_range_test(x, (60.0, 80.0), (65.0, 75.0)),
        iq.spike_test(x, 0.15, 0.5, method="average"),
        iq.rate_of_change_test(x, as_dt64(t_s), 0.02, 0.1),
        iq.flat_line_test(x, as_dt64(t_s), 60, 120, 0.0005),
    ])).astype(np.uint8)
    np.testing.assert_array_equal(ours, theirs)
    assert ours[30] == F and ours[69] == F and ours[100] == F and S in ours[50:70]


thresholds = st.sampled_from([
    LEVEL,
    QcThresholds("water_level", "m", fail_span=(60.0, 80.0), spike_suspect=0.05,
                 spike_fail=0.2, rate_suspect_per_s=0.005, flat_tolerance=0.002,
                 flat_suspect_s=40.0, flat_fail_s=95.0),
    replace(default_thresholds("temperature"), max_age_s=None),
    QcThresholds("temperature", "degC", fail_span=(-5.0, 45.0), seasonal_ranges=(
        SeasonalRange(5, 6, (8.0, 12.0), (0.0, 30.0)),), flat_tolerance=0.01,
        flat_suspect_s=30.0, flat_fail_s=60.0),
])


@st.composite
def series(draw):
    n = draw(st.integers(3, 160))
    steps = draw(st.lists(st.sampled_from([10, 10, 10, 20, 3600]), min_size=n, max_size=n))
    ms = T0_MS + 1000 * np.cumsum(np.array(steps, dtype=np.int64))
    level = draw(st.sampled_from([70.0, 10.0]))
    x = level + np.array(draw(st.lists(st.sampled_from([0.0, 0.001, 0.003, -0.002, 0.3, 3.0]),
                                       min_size=n, max_size=n)))
    flat = draw(st.lists(st.tuples(st.integers(0, n - 1), st.integers(1, 40)), max_size=3))
    for start, length in flat:
        x[start:start + length] = x[start]
    for i in draw(st.lists(st.integers(0, n - 1), max_size=6)):
        x[i] = math.nan
    splits = draw(st.lists(st.integers(1, n - 1), max_size=n))
    return ms, x, splits


@settings(max_examples=60, deadline=None)
@given(th=thresholds, s=series(), tz=st.sampled_from(["UTC", "Etc/GMT+8"]))
def test_any_batching_gives_the_whole_series_flags(th, s, tz):
    # reference: ops_logic.qc.run_qc over the whole series at once (no timing test); the
    # live path must reproduce it whatever the batches, the gaps, the missing readings
    ms, x, splits = s
    ours = feed(one_tag(th, tz), "g", ms, x, splits)
    whole = run_qc(ms / 1000.0, x, replace(th, max_age_s=None), tz=tz)
    np.testing.assert_array_equal(ours, whole)


# Quarter steps are exact binary fractions, so random draws hit thresholds exactly.
quarters = st.integers(-40, 40).map(lambda k: k / 4)
positive_quarters = st.integers(1, 40).map(lambda k: k / 4)


@st.composite
def small_test_thresholds(draw):
    lo, hi = sorted(draw(st.lists(quarters, min_size=2, max_size=2, unique=True)))
    suspect_span = None
    if draw(st.booleans()):
        suspect_span = tuple(sorted(draw(st.lists(
            quarters.filter(lambda v: lo <= v <= hi), min_size=2, max_size=2, unique=True))))
    spike = sorted(draw(st.lists(positive_quarters, min_size=2, max_size=2)))
    rate = sorted(draw(st.lists(positive_quarters, min_size=2, max_size=2)))
    rate_fail = rate[1] if draw(st.booleans()) else None
    return QcThresholds("water_level", "m", fail_span=(lo, hi), suspect_span=suspect_span,
                        spike_suspect=spike[0], spike_fail=spike[1],
                        rate_suspect_per_s=rate[0], rate_fail_per_s=rate_fail,
                        max_age_s=draw(positive_quarters) * 10,
                        max_future_s=draw(st.integers(0, 40)) / 4)


@st.composite
def live_series(draw):
    n = draw(st.integers(0, 40))
    x = np.array(draw(st.lists(st.one_of(quarters, quarters, quarters, st.just(math.nan),
                                         st.just(math.inf), st.just(-math.inf)),
                               min_size=n, max_size=n)), dtype=np.float64)
    steps = draw(st.lists(st.integers(1, 30_000), min_size=n, max_size=n))
    ms = T0_MS + np.cumsum(np.array(steps, dtype=np.int64))
    return ms, x


@settings(max_examples=150, deadline=None)
@given(th=small_test_thresholds(), s=live_series(), late_s=st.integers(-200, 200))
def test_kernels_with_checked_thresholds_give_the_public_flags(th, s, late_s):
    # reference: the public tests of ops_logic.qc (checked against ioos_qc.qartod in
    # tests/ops_logic/test_qc.py), called with the thresholds as configured; the live path
    # calls their kernels with the parameters _checked validated once per tag
    ms, x = s
    t_s = ms / 1000.0
    now_s = (t_s[-1] if ms.size else T0_MS / 1000.0) + late_s / 4
    checked = _checked(th)
    assert set(checked) == {"gross_range", "spike", "rate_of_change", "timing_gap"}
    pairs = [
        (_gross_range_kernel(x, *checked["gross_range"]),
         gross_range_test(x, th.fail_span, th.suspect_span)),
        (_spike_kernel(x, *checked["spike"]),
         spike_test(x, th.spike_suspect, th.spike_fail)),
        (_rate_of_change_kernel(t_s, x, *checked["rate_of_change"]),
         rate_of_change_test(t_s, x, th.rate_suspect_per_s, th.rate_fail_per_s)),
        (_timing_gap_kernel(t_s, now_s, *checked["timing_gap"]),
         timing_gap_test(t_s, now_s, th.max_age_s, max_future_s=th.max_future_s)),
    ]
    for kernel, public in pairs:
        assert kernel.dtype == public.dtype == np.uint8
        np.testing.assert_array_equal(kernel, public)


def test_window_keeps_the_flat_line_span_and_its_anchor():
    # the flat-line test needs the readings back to flat_fail_s and the valid reading before
    w = TrailingWindow(100.0, min_keep=3)
    for i in range(50):
        x = math.nan if i == 38 else float(i)
        w.extend(np.array([i * 10_000]), np.array([x]), np.array([1], np.uint8))
    assert w.ms[-1] - w.ms[0] >= 100_000
    assert math.isfinite(w.x[0]) and w.ms[0] <= w.ms[-1] - 100_000
    assert len(w) <= 13


def test_source_status_and_missing_values():
    # QARTOD flags manual: a value the source marks bad FAILs; no value is MISSING
    qc = one_tag(LEVEL)
    ms = T0_MS + 10_000 * np.arange(5)
    x = np.array([70.0, 70.001, 70.002, math.nan, math.inf])
    ok = np.array([True, False, True, False, False])
    ev = qc.evaluate({"g": (ms, x, ok)})
    flags = [r[3] for r in ev.rows]
    values = [r[2] for r in ev.rows]
    assert flags == [P, F, P, M, M]
    assert values[1] == 70.001 and math.isnan(values[4])  # the bad value kept, inf as missing
    qc.commit(ev)
    assert np.isnan(qc.window("g").x[1])  # a bad reading is no context for its neighbours


def test_timing_test_on_live_readings_only():
    # QARTOD timing/gap test: stale on arrival FAILs; backfilled readings are not judged by it
    qc = one_tag(LEVEL)
    ms = T0_MS + 10_000 * np.arange(4)
    now_s = T0_MS / 1000 + 80.0  # ages 80, 70, 60, 50 s: the first two are over 60 s
    ev = qc.evaluate({"g": (ms, 70.0 + np.zeros(4), None)}, now_s=now_s,
                     timed={"g": np.array([True, False, True, True])})
    assert [r[3] for r in ev.rows] == [F, P, P, P]


def test_late_and_repeated_readings():
    qc = one_tag(LEVEL)
    ms = T0_MS + 10_000 * np.arange(6)
    qc.commit(qc.evaluate({"g": (ms[[0, 2, 4, 5]], np.full(4, 70.0), None)}))
    ev = qc.evaluate({"g": (ms[[1, 2, 3]], np.array([70.0, 70.0, 90.0]), None)})
    # the repeated reading (ms[2]) is dropped; the late ones are judged on their own
    assert [(round(r[1] * 1000), r[3]) for r in ev.rows] == [(ms[1], P), (ms[3], F)]
    qc.commit(ev)
    assert qc.window("g").ms.tolist() == ms[[0, 2, 4, 5]].tolist()


@pytest.mark.parametrize(("difference", "flag"), [(0.01, P), (0.05, P), (0.08, S), (0.3, F)])
def test_redundant_pair_cross_check(difference, flag):
    # reference: ioos_qc.qartod.gross_range_test(a - b, (-fail, fail), (-suspect, suspect)),
    # the equivalence of ops_logic.qc.redundant_pair_test; both gauges get the worse flag
    qc = LiveQc({"a": (1, LEVEL), "b": (2, LEVEL)}, pairs=[("a", "b")],
                pair_thresholds=(0.05, 0.15))
    ms = T0_MS + 10_000 * np.arange(3)
    a = np.array([70.0, 70.0, 70.0])
    b = a + np.array([0.0, difference, 0.0])
    expected = np.ma.getdata(iq.gross_range_test(a - b, (-0.15, 0.15), (-0.05, 0.05)))
    assert expected[1] == flag
    ev = qc.evaluate({"a": (ms, a, None), "b": (ms + 400, b, None)})  # 0.4 s apart
    got = {(r[0], round(r[1] * 1000) // 10_000 * 10_000): r[3] for r in ev.rows}
    assert got[(1, int(ms[1]))] == got[(2, int(ms[1]))] == max(flag, P)


def test_seeded_window_rechecks_spikes():
    # after a restart the spike verdicts of the stored readings are judged again
    qc = one_tag(LEVEL)
    ms = T0_MS + 10_000 * np.arange(5)
    qc.seed("g", ms, np.array([70.0, 70.0, 70.8, 70.0, 70.0]), np.full(5, P, np.uint8))
    # spike test, average of the neighbours: |70.8 - 70| = 0.8 > 0.5 fails, each neighbour
    # is off its own neighbours' mean by 0.4 > 0.15 (suspect)
    assert qc.recheck_spikes("g") == [(1, int(ms[1]), S), (1, int(ms[2]), F),
                                      (1, int(ms[3]), S)]
    assert qc.recheck_spikes("g") == []  # already written
    assert qc.window("g").flags.tolist() == [P, S, F, S, P]


def test_latest_usable_prefers_settled_pass_readings():
    qc = one_tag(LEVEL)
    ms = T0_MS + 10_000 * np.arange(4)
    qc.seed("g", ms, np.array([70.0, 70.1, 70.2, 70.3]), np.array([P, S, F, P], np.uint8))
    now = int(ms[-1]) + 5_000
    # the newest (70.3) is not settled (no later reading for its spike verdict), 70.2 failed,
    # 70.1 is suspect: the newest settled PASS reading is 70.0
    assert qc.latest_usable("g", now, 60.0).value == 70.0
    assert qc.latest_usable("g", now + 30_000, 60.0).value == 70.1  # PASS too old: SUSPECT
    assert qc.latest_usable("g", now + 60_000, 60.0) is None
