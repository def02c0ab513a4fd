"""Quality control of readings after the IOOS QARTOD manuals.

Every test is a pure, vectorised function returning a ``uint8`` flag array of the same shape
as its input, with the QARTOD flags of :class:`QcFlag`. There is no clock here: the time of
arrival (``now``) is an argument.

Conventions
-----------
- ``values``: floats in the quantity's unit (m, °C, mg/L); NaN is a missing reading (MISSING).
  ±inf is a (bad) value: the range tests FAIL it, the sequence tests (spike, rate of change,
  flat line) treat it like a missing reading, as ``ioos_qc.qartod`` 3.0 does.
- ``times``: epoch seconds (float, UTC) or time-zone-aware timestamps (pandas ``DatetimeIndex``
  or ``Series``, ``datetime`` with ``tzinfo``). Naive timestamps are refused as ambiguous.
  Sequence tests need finite, strictly increasing times.
- Boundaries follow ``ioos_qc.qartod`` 3.0 so that results agree: a reading *on* a span limit
  or a threshold passes (flags use strict ``<``/``>``); each docstring says so.
- Differences from ioos-qc are deliberate and listed under *Notes* in each docstring.

References
----------
- [QF] IOOS (2020) Manual for the Use of Real-Time Oceanographic Data Quality Control Flags,
  v1.2 (flag values seen in ``ioos_qc.qartod.QartodFlags``).
- [QWL] IOOS QARTOD Manual for Real-Time Quality Control of Water Level Data, v2.0 (2021).
- [QTS] IOOS QARTOD Manual for Real-Time Quality Control of In-situ Temperature and Salinity
  Data, v2.1 (2020) (version from memory; ioos-qc cites v2.0, 2016).
- [QDO] IOOS QARTOD Manual for Real-Time Quality Control of Dissolved Oxygen Observations,
  v2.0 (2018) (version from memory).
- [IQ] ioos-qc 3.0, ``ioos_qc.qartod`` (the reference implementation the tests compare with).
"""
from __future__ import annotations

import datetime as _dt
import difflib
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from enum import IntEnum
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from pandas.api.indexers import BaseIndexer

__all__ = [
    "QUANTITIES", "TEST_NAMES", "QcFlag", "QcThresholds", "SeasonalRange", "climatology_test",
    "default_thresholds", "epoch_seconds", "feed_freshness_flag", "flat_line_test",
    "gross_range_test", "qc_aggregate", "rate_of_change_test", "redundant_pair_test", "run_qc",
    "run_qc_tests", "spike_test", "timing_gap_test",
]


class QcFlag(IntEnum):
    """QARTOD primary flags [QF]: 1 pass, 2 not evaluated, 3 suspect, 4 fail, 9 missing."""

    PASS = 1
    NOT_EVALUATED = 2
    SUSPECT = 3
    FAIL = 4
    MISSING = 9


_P, _N, _S, _F, _M = (int(f) for f in QcFlag)
TEST_NAMES = ("gross_range", "climatology", "spike", "rate_of_change", "flat_line", "timing_gap")
QUANTITIES = ("water_level", "temperature", "dissolved_oxygen")


# ----------------------------------------------------------------------------- validation
def _unknown(kind: str, name: object, known: Iterable[str]) -> ValueError:
    known = list(known)
    close = difflib.get_close_matches(str(name), known, n=1)
    hint = f"; did you mean {close[0]!r}?" if close else ""
    return ValueError(f"unknown {kind} {name!r}{hint} (known: {', '.join(known)})")


def _span(name: str, span: object) -> tuple[float, float]:
    try:
        low, high = (float(v) for v in span)  # type: ignore[union-attr]
    except (TypeError, ValueError) as err:
        raise ValueError(f"{name} must be a (low, high) pair of numbers, got {span!r}") from err
    if np.isnan(low) or np.isnan(high) or not low < high:
        raise ValueError(f"{name} must satisfy low < high, got {span!r}")
    return low, high


def _inside(name: str, inner: tuple[float, float], outer: tuple[float, float]) -> None:
    if inner[0] < outer[0] or inner[1] > outer[1]:
        raise ValueError(f"{name}: suspect span {inner} must lie inside fail span {outer}")


def _positive(name: str, value: float) -> float:
    value = float(value)
    if not (np.isfinite(value) and value > 0):
        raise ValueError(f"{name} must be a positive finite number, got {value!r}")
    return value


def _pair(names: str, suspect: float, fail: float) -> tuple[float, float]:
    s, f = _positive(names + " suspect", suspect), _positive(names + " fail", fail)
    if s > f:
        raise ValueError(f"{names}: suspect threshold {s} must not exceed fail threshold {f}")
    return s, f


def _floats(values: ArrayLike) -> np.ndarray:
    return np.asarray(values, dtype=np.float64)


def _series(values: ArrayLike) -> np.ndarray:
    x = _floats(values)
    if x.ndim != 1:
        raise ValueError(f"sequence tests need a 1-D series, got shape {x.shape}")
    return x


# ----------------------------------------------------------------------------- times
_MAX_EPOCH_S = 1e11  # about year 5100: larger numbers are epoch ms/µs/ns passed by mistake


def epoch_seconds(times: ArrayLike) -> np.ndarray:
    """Convert times to float epoch seconds (UTC); NaT becomes NaN.

    Parameters
    ----------
    times : epoch seconds [s] or time-zone-aware timestamps. Naive timestamps raise
        ValueError, and so do numbers above 1e11 (epoch ms, µs or ns passed as seconds;
        pandas 3 ``astype("int64")`` gives µs).

    Examples
    --------
    >>> epoch_seconds(pd.DatetimeIndex(["1970-01-01T00:00:10Z"])).tolist()
    [10.0]
    """
    if isinstance(times, (_dt.datetime, np.datetime64)):
        times = [times]
    if isinstance(times, (pd.Series, pd.Index)):
        kind, shape, raw = times.dtype.kind, (len(times),), times
        if isinstance(times.dtype, pd.DatetimeTZDtype):
            kind = "O"
    else:
        raw = np.asarray(times)
        kind, shape = raw.dtype.kind, raw.shape
    if kind in "iuf":
        seconds = np.asarray(raw, dtype=np.float64)
        if np.any(np.abs(seconds[np.isfinite(seconds)]) > _MAX_EPOCH_S):
            raise ValueError("epoch times beyond year 5000: milli-, micro- or nanoseconds?")
        return seconds
    if kind == "M":
        raise ValueError("naive timestamps are ambiguous: localise them or pass epoch seconds")
    items = raw if isinstance(raw, (pd.Series, pd.Index)) else raw.ravel()
    try:
        index = pd.DatetimeIndex(items)
    except (TypeError, ValueError) as err:  # pandas refuses mixed UTC offsets without utc=True
        if len(items) == 0 or any(getattr(v, "tzinfo", None) is None for v in items):
            raise ValueError(f"times must be epoch seconds or tz-aware timestamps: {err}") from err
        index = pd.DatetimeIndex(pd.to_datetime(list(items), utc=True))
    if index.tz is None:
        raise ValueError("naive timestamps are ambiguous: localise them or pass epoch seconds")
    ns = index.as_unit("ns").asi8.astype(np.float64)
    ns[index.isna()] = np.nan
    return (ns / 1e9).reshape(shape)


def _scalar_seconds(when: object) -> float:
    out = epoch_seconds([when]).ravel()
    if out.size != 1 or not np.isfinite(out[0]):
        raise ValueError(f"expected one finite time, got {when!r}")
    return float(out[0])


def _increasing(times: ArrayLike, n: int) -> np.ndarray:
    t = epoch_seconds(times)
    if t.shape != (n,):
        raise ValueError(f"times shape {t.shape} does not match values shape ({n},)")
    if not np.all(np.isfinite(t)):
        raise ValueError("times must be finite (no NaN/NaT)")
    if n > 1 and not np.all(np.diff(t) > 0):
        raise ValueError("times must be strictly increasing")
    return t


# ----------------------------------------------------------------------------- range tests
# The *kernels* (``_<test>_kernel``) do a test's numeric work on inputs its public function
# has validated; they check nothing. They are private by name but shared within the project:
# :mod:`db.ingest.live_qc` validates the thresholds once per tag and calls them per batch.
def _gross_range_kernel(x: np.ndarray, fail: tuple[float, float],
                        suspect: tuple[float, float] | None) -> np.ndarray:
    """Flags of :func:`gross_range_test` (QARTOD gross range); the caller validated the spans."""
    flags = np.full(x.shape, _P, dtype=np.uint8)
    flags[np.isnan(x)] = _M
    if suspect is not None:
        flags[(x < suspect[0]) | (x > suspect[1])] = _S
    flags[(x < fail[0]) | (x > fail[1])] = _F
    return flags


def gross_range_test(
    values: ArrayLike, fail_span: tuple[float, float],
    suspect_span: tuple[float, float] | None = None,
) -> np.ndarray:
    """Gross range test: flag readings outside the sensor span (FAIL) or the user span (SUSPECT).

    FAIL if x < f_low or x > f_high; else SUSPECT if x < s_low or x > s_high; else PASS.

    Parameters
    ----------
    values : readings [quantity unit], any shape; NaN is MISSING, ±inf FAILs.
    fail_span : (low, high) sensor span [quantity unit]; a value on a limit is inside.
    suspect_span : (low, high) operating span [quantity unit] inside ``fail_span``, optional.

    Notes
    -----
    Agrees with ``ioos_qc.qartod.gross_range_test``, except that a reversed span
    (low > high) raises ValueError here; ioos-qc sorts it silently.

    Examples
    --------
    >>> gross_range_test([1, 2, 3, 4, 8, float("nan")], (0, 5), (1, 4)).tolist()
    [1, 1, 1, 1, 4, 9]

    References: QARTOD test "gross range" [QWL], [QTS], [QDO]; [IQ] ``gross_range_test``.
    """
    fail = _span("fail_span", fail_span)
    x = _floats(values)
    suspect = None
    if suspect_span is not None:
        suspect = _span("suspect_span", suspect_span)
        _inside("gross range", suspect, fail)
    return _gross_range_kernel(x, fail, suspect)


@dataclass(frozen=True)
class SeasonalRange:
    """Climatology span for the months ``first_month``..``last_month`` (inclusive).

    A range may wrap over the new year (``first_month=11, last_month=2`` is Nov–Feb).
    Spans are in the quantity unit; ``fail_span`` is optional and must contain
    ``suspect_span``.
    """

    first_month: int
    last_month: int
    suspect_span: tuple[float, float]
    fail_span: tuple[float, float] | None = None

    def __post_init__(self) -> None:
        for name in ("first_month", "last_month"):
            month = getattr(self, name)
            if isinstance(month, bool) or not isinstance(month, (int, np.integer)) or not (
                1 <= month <= 12
            ):
                raise ValueError(f"{name} must be an integer month 1..12, got {month!r}")
        object.__setattr__(self, "suspect_span", _span("suspect_span", self.suspect_span))
        if self.fail_span is not None:
            object.__setattr__(self, "fail_span", _span("fail_span", self.fail_span))
            _inside("seasonal range", self.suspect_span, self.fail_span)

    @property
    def months(self) -> tuple[int, ...]:
        """The calendar months (1..12) this range covers."""
        first, last = int(self.first_month), int(self.last_month)
        if first <= last:
            return tuple(range(first, last + 1))
        return (*range(first, 13), *range(1, last + 1))


def _month_table(ranges: Sequence[SeasonalRange]) -> np.ndarray:
    """Rows by month 0..12: covered, suspect low/high, fail low/high (NaN-free)."""
    table = np.zeros((13, 5))
    table[:, 3], table[:, 4] = -np.inf, np.inf
    for rng in ranges:
        if not isinstance(rng, SeasonalRange):
            raise ValueError(f"seasonal ranges must be SeasonalRange, got {rng!r}")
        for month in rng.months:
            if table[month, 0]:
                raise ValueError(f"seasonal ranges overlap in month {month}")
            fail = rng.fail_span or (-np.inf, np.inf)
            table[month] = (1.0, *rng.suspect_span, *fail)
    return table


def climatology_test(
    times: ArrayLike, values: ArrayLike, seasonal_ranges: Sequence[SeasonalRange],
    *, tz: str = "UTC", months: ArrayLike | None = None,
) -> np.ndarray:
    """Climatology test: flag readings outside the seasonal span of their calendar month.

    For the month m of each reading: FAIL if x is outside fail_span(m); else SUSPECT if x is
    outside suspect_span(m); else PASS. Months no range covers are NOT_EVALUATED.

    Parameters
    ----------
    times : epoch seconds [s] or tz-aware timestamps, same shape as ``values``; finite.
    values : readings [quantity unit]; NaN is MISSING.
    seasonal_ranges : non-overlapping :class:`SeasonalRange` table; a value on a limit passes.
    tz : time zone in which the calendar month is taken (IANA name), default UTC.
    months : the calendar months (1–12) of ``times`` in ``tz``, when the caller knows them
        already (live use: one month look-up per batch instead of per tag); default None:
        taken from ``times``.

    Notes
    -----
    Agrees with ``ioos_qc.qartod.climatology_test`` with ``period="month"`` members (month
    limits inclusive, spans compared strictly) on finite values. Deliberate differences:
    NaN is always MISSING and ±inf lies outside every span (ioos-qc 3.0 flags both PASS
    inside a covered month); overlapping ranges raise (ioos-qc lets the last one win); a
    range may wrap over the new year (ioos-qc sorts (11, 2) into (2, 11)).

    Examples
    --------
    >>> summer = SeasonalRange(6, 8, suspect_span=(8.0, 26.0), fail_span=(0.0, 32.0))
    >>> t = pd.DatetimeIndex(["2026-07-01T12:00Z"] * 3 + ["2026-01-10T12:00Z"])
    >>> climatology_test(t, [12.0, 27.5, 33.0, 5.0], [summer]).tolist()
    [1, 3, 4, 2]

    References: QARTOD test "climatology" [QWL], [QTS], [QDO]; [IQ] ``climatology_test``.
    """
    x = _floats(values)
    t = epoch_seconds(times)
    if t.shape != x.shape:
        raise ValueError(f"times shape {t.shape} does not match values shape {x.shape}")
    if not np.all(np.isfinite(t)):
        raise ValueError("times must be finite (no NaN/NaT)")
    table = _month_table(seasonal_ranges)
    if months is None:
        stamps = pd.to_datetime(t.ravel(), unit="s", utc=True).tz_convert(tz)
        month = np.asarray(stamps.month, dtype=np.intp).reshape(x.shape)
    else:
        month = np.asarray(months, dtype=np.intp)
        if month.shape != x.shape or np.any((month < 1) | (month > 12)):
            raise ValueError("months must be calendar months 1-12, one per reading")
    row = table[month]
    covered = row[..., 0] > 0
    flags = np.full(x.shape, _N, dtype=np.uint8)
    suspect = (x < row[..., 1]) | (x > row[..., 2])
    fail = (x < row[..., 3]) | (x > row[..., 4])
    flags[covered] = _P
    flags[covered & suspect] = _S
    flags[covered & fail] = _F
    flags[np.isnan(x)] = _M
    return flags


def redundant_pair_test(
    values_a: ArrayLike, values_b: ArrayLike, suspect_difference: float, fail_difference: float,
) -> np.ndarray:
    """Redundant-sensor test: cross-check two gauges of one quantity at one place.

    d = a − b; FAIL if |d| > fail_difference; else SUSPECT if |d| > suspect_difference.

    Parameters
    ----------
    values_a, values_b : simultaneous readings of the two gauges [quantity unit], same shape.
    suspect_difference, fail_difference : allowed disagreement [quantity unit], positive,
        suspect ≤ fail; a difference equal to a threshold passes.

    Notes
    -----
    A NaN in either gauge makes the pair MISSING. ioos-qc has no such test; the result equals
    ``ioos_qc.qartod.gross_range_test(a - b, (-fail, fail), (-suspect, suspect))``.

    Examples
    --------
    >>> redundant_pair_test([2.00, 2.00, 2.00], [2.01, 2.10, 2.50], 0.05, 0.20).tolist()
    [1, 3, 4]

    References: QARTOD multi-variate / neighbour tests (suggested) [QWL], [QTS], [QDO].
    """
    a, b = _floats(values_a), _floats(values_b)
    if a.shape != b.shape:
        raise ValueError(f"gauge shapes differ: {a.shape} and {b.shape}")
    suspect, fail = _pair("redundant pair", suspect_difference, fail_difference)
    with np.errstate(invalid="ignore"):  # inf - inf is NaN: MISSING below
        diff = np.abs(a - b)
    flags = np.full(a.shape, _P, dtype=np.uint8)
    flags[diff > suspect] = _S
    flags[diff > fail] = _F
    flags[np.isnan(diff)] = _M
    return flags


# ----------------------------------------------------------------------------- sequence tests
def _spike_kernel(x: np.ndarray, suspect: float, fail: float) -> np.ndarray:
    """Flags of :func:`spike_test` (QARTOD spike) of a 1-D series; the caller validated all."""
    finite = np.isfinite(x)
    flags = np.full(x.shape, _P, dtype=np.uint8)
    if x.size > 2:
        with np.errstate(invalid="ignore"):  # non-finite readings are handled below
            diff = np.abs(x[1:-1] - (x[:-2] + x[2:]) / 2)
        inner = flags[1:-1]
        inner[diff > suspect] = _S
        inner[diff > fail] = _F
        inner[~(finite[:-2] & finite[2:])] = _N
    flags[[0, -1] if x.size else []] = _N
    flags[~finite] = _M
    return flags


def spike_test(values: ArrayLike, suspect_threshold: float, fail_threshold: float) -> np.ndarray:
    """Spike test: compare each reading with the mean of its two neighbours.

    ref(n) = (x(n−1) + x(n+1)) / 2; FAIL if |x(n) − ref(n)| > fail_threshold; else SUSPECT
    if it exceeds suspect_threshold; else PASS.

    Parameters
    ----------
    values : 1-D series in time order [quantity unit]; NaN/±inf are MISSING.
    suspect_threshold, fail_threshold : spike heights [quantity unit], positive,
        suspect ≤ fail; a spike equal to a threshold passes.

    Notes
    -----
    Agrees with ``ioos_qc.qartod.spike_test(method="average")``: the first and last readings
    and readings next to a missing one are NOT_EVALUATED. Zero thresholds raise (ioos-qc
    silently disables a zero threshold).

    Examples
    --------
    >>> spike_test([1.0, 1.0, 1.6, 1.0, 3.0, 1.0, 1.0], 0.5, 1.0).tolist()
    [2, 1, 3, 4, 4, 3, 2]

    References: QARTOD test "spike" [QWL], [QTS], [QDO]; [IQ] ``spike_test``.
    """
    x = _series(values)
    suspect, fail = _pair("spike", suspect_threshold, fail_threshold)
    return _spike_kernel(x, suspect, fail)


def _rate_of_change_kernel(t: np.ndarray, x: np.ndarray, suspect: float, fail: float
                           ) -> np.ndarray:
    """Flags of :func:`rate_of_change_test` (QARTOD rate of change); the caller validated all."""
    finite = np.isfinite(x)
    flags = np.full(x.shape, _P, dtype=np.uint8)
    if x.size > 1:
        with np.errstate(invalid="ignore"):  # non-finite readings are handled below
            rate = np.abs(np.diff(x)) / np.diff(t)
        later = flags[1:]
        later[rate > suspect] = _S
        later[rate > fail] = _F
        later[~finite[:-1]] = _N
    flags[:1] = _N
    flags[~finite] = _M
    return flags


def rate_of_change_test(
    times: ArrayLike, values: ArrayLike, threshold_per_s: float,
    fail_threshold_per_s: float | None = None,
) -> np.ndarray:
    """Rate-of-change test: flag a reading that moved too fast from the previous one.

    r(n) = |x(n) − x(n−1)| / (t(n) − t(n−1)); SUSPECT if r > threshold_per_s, FAIL if
    r > fail_threshold_per_s.

    Parameters
    ----------
    times : epoch seconds [s] or tz-aware timestamps, strictly increasing.
    values : 1-D series [quantity unit]; NaN/±inf are MISSING.
    threshold_per_s : suspect rate [quantity unit/s], positive; a rate equal to it passes.
    fail_threshold_per_s : fail rate [quantity unit/s] ≥ the suspect rate, optional.

    Notes
    -----
    Agrees with ``ioos_qc.qartod.rate_of_change_test`` on whole-second steps. Deliberate
    differences: time steps are exact float seconds (ioos-qc truncates them to whole seconds,
    so a 1.5 s step counts as 1 s); the first reading and a reading after a missing one are
    NOT_EVALUATED (ioos-qc: PASS); non-increasing times raise.

    Examples
    --------
    >>> rate_of_change_test([0, 10, 20, 30], [1.0, 1.05, 1.25, 3.0], 0.01, 0.1).tolist()
    [2, 1, 3, 4]

    References: QARTOD test "rate of change" [QWL], [QTS], [QDO]; [IQ] ``rate_of_change_test``.
    """
    x = _series(values)
    t = _increasing(times, x.size)
    suspect = _positive("rate of change suspect", threshold_per_s)
    fail = np.inf
    if fail_threshold_per_s is not None:
        suspect, fail = _pair("rate of change", suspect, fail_threshold_per_s)
    return _rate_of_change_kernel(t, x, suspect, fail)


class _Windows(BaseIndexer):
    """Rolling windows with given [start, end) bounds, for pandas' fast rolling max/min."""

    def __init__(self, start: np.ndarray, end: np.ndarray) -> None:
        super().__init__()
        self._bounds = (start, end)

    def get_window_bounds(self, num_values: int = 0, min_periods: int | None = None,
                          center: bool | None = None, closed: str | None = None,
                          step: int | None = None) -> tuple[np.ndarray, np.ndarray]:
        return self._bounds


def flat_line_test(
    times: ArrayLike, values: ArrayLike, tolerance: float, suspect_seconds: float,
    fail_seconds: float,
) -> np.ndarray:
    """Flat-line test: flag a stuck sensor whose readings stay within a tolerance too long.

    Over the valid readings, with m(n) the last one at or before t(n) − T: flag n if
    max(x[m..n]) − min(x[m..n]) < tolerance, for T = suspect_seconds (SUSPECT) and
    T = fail_seconds (FAIL).

    Parameters
    ----------
    times : epoch seconds [s] or tz-aware timestamps, strictly increasing.
    values : 1-D series [quantity unit]; NaN/±inf are MISSING.
    tolerance : smallest change that counts as movement [quantity unit], positive; a range
        equal to it is movement (passes).
    suspect_seconds, fail_seconds : how long a flat run may last [s], 0 < suspect ≤ fail;
        a run lasting exactly that long is flagged.

    Notes
    -----
    O(n) through pandas' rolling max/min over explicit windows (a million readings in well
    under a second). Agrees with ``ioos_qc.qartod.flat_line_test`` on regular whole-second
    sampling when the thresholds are multiples of the step. Deliberate differences: windows
    are in time, not counts of the median step, so gaps are handled and a threshold that is
    not a multiple of the step means "at least that long" (ioos-qc rounds the count down);
    missing readings are left out, so the first reading after a long dropout is compared with
    the last one before it (ioos-qc sees a window of one valid reading and calls it flat);
    readings with less than ``suspect_seconds`` of valid history are NOT_EVALUATED (ioos-qc:
    PASS); series of one or two readings are evaluated too (ioos-qc passes them).

    Examples
    --------
    >>> flat_line_test([0, 10, 20, 30, 40], [1.0, 2.0, 2.0, 2.0, 2.0], 0.01, 20, 30).tolist()
    [2, 2, 1, 3, 4]

    References: QARTOD test "flat line" [QWL], [QTS], [QDO]; [IQ] ``flat_line_test``.
    """
    x = _series(values)
    t = _increasing(times, x.size)
    tol = _positive("flat line tolerance", tolerance)
    suspect, fail = _pair("flat line", suspect_seconds, fail_seconds)
    finite = np.isfinite(x)
    tv, series = t[finite], pd.Series(x[finite])  # missing readings are left out entirely
    end = np.arange(1, tv.size + 1, dtype=np.int64)
    valid = np.full(tv.shape, _P, dtype=np.uint8)
    for seconds, flag in ((suspect, _S), (fail, _F)):
        anchor = np.searchsorted(tv, tv - seconds, side="right") - 1
        rolling = series.rolling(_Windows(np.maximum(anchor, 0), end), min_periods=1)
        spread = rolling.max().to_numpy() - rolling.min().to_numpy()
        valid[(anchor >= 0) & (spread < tol)] = flag
        if flag == _S:
            valid[anchor < 0] = _N
    flags = np.full(x.shape, _M, dtype=np.uint8)
    flags[finite] = valid
    return flags


# ----------------------------------------------------------------------------- timing
def _timing_gap_kernel(t: np.ndarray, now_s: float, max_age_s: float, max_future_s: float
                       ) -> np.ndarray:
    """Flags of :func:`timing_gap_test` (QARTOD timing/gap); the caller validated all."""
    flags = np.full(t.shape, _P, dtype=np.uint8)
    flags[(now_s - t > max_age_s) | (t - now_s > max_future_s)] = _F
    flags[np.isnan(t)] = _M
    return flags


def timing_gap_test(
    times: ArrayLike, now: object, max_age_s: float, *, max_future_s: float = 60.0,
) -> np.ndarray:
    """Timing/gap test: FAIL readings that arrived stale or carry an impossible time stamp.

    FAIL if now − t > max_age_s (stale) or t − now > max_future_s (stamped in the future).

    Parameters
    ----------
    times : time stamps of the readings: epoch seconds [s] or tz-aware; NaN/NaT are MISSING.
    now : arrival (ingest) time of these readings: epoch seconds [s] or tz-aware timestamp.
    max_age_s : largest acceptable age at arrival [s], positive; an age equal to it passes.
    max_future_s : tolerated clock skew [s], ≥ 0 (60 s: common practice for unsynchronised
        field clocks).

    Notes
    -----
    Apply it to newly arrived readings only, with ``now`` the time they were received; old
    readings re-read as context would all be stale. The staleness part agrees with
    ``ioos_qc.qartod.data_reception_test(tinp, fail_span=max_age_s / 3600, from_time=now)``;
    future stamps are deliberately FAIL here (ioos-qc passes them there and FAILs them only
    in ``impossible_date_test``), since one would hide a stale feed. For the state of a whole
    feed (no reading at all) use :func:`feed_freshness_flag`.

    Examples
    --------
    >>> timing_gap_test([0.0, 40.0, 100.0, 300.0], now=100.0, max_age_s=60.0).tolist()
    [4, 1, 1, 4]

    References: QARTOD test "timing/gap" [QWL], [QTS], [QDO]; [IQ] ``data_reception_test``.
    """
    t = epoch_seconds(times)
    now_s = _scalar_seconds(now)
    age_limit = _positive("max_age_s", max_age_s)
    future = float(max_future_s)
    if not (np.isfinite(future) and future >= 0):
        raise ValueError(f"max_future_s must be finite and >= 0, got {max_future_s!r}")
    return _timing_gap_kernel(t, now_s, age_limit, future)


def feed_freshness_flag(times: ArrayLike, now: object, max_age_s: float) -> QcFlag:
    """State of a feed: MISSING without readings, FAIL if the latest is older than max_age_s.

    Parameters
    ----------
    times : time stamps of the feed's readings (epoch seconds [s] or tz-aware).
    now : current time (epoch seconds [s] or tz-aware timestamp).
    max_age_s : largest acceptable age of the latest reading [s]; equal passes.

    Examples
    --------
    >>> feed_freshness_flag([0.0, 50.0], now=100.0, max_age_s=30.0).name
    'FAIL'

    References: QARTOD test "timing/gap" [QWL].
    """
    t = epoch_seconds(times).ravel()
    t = t[np.isfinite(t)]
    if t.size == 0:
        return QcFlag.MISSING
    stale = _scalar_seconds(now) - t.max() > _positive("max_age_s", max_age_s)
    return QcFlag.FAIL if stale else QcFlag.PASS


# ----------------------------------------------------------------------------- aggregate
_RANK = np.full(256, -1, dtype=np.int8)
_ORDER = np.array([_M, _N, _P, _S, _F], dtype=np.uint8)  # ioos-qc qartod_compare priorities
_RANK[_ORDER] = np.arange(_ORDER.size)


def qc_aggregate(flag_arrays: Sequence[ArrayLike]) -> np.ndarray:
    """Aggregate per-test flags into one flag per reading, by QARTOD precedence.

    FAIL > SUSPECT > PASS > NOT_EVALUATED > MISSING: the highest flag any test gave wins.

    Parameters
    ----------
    flag_arrays : one or more flag arrays of the same shape (values 1, 2, 3, 4 or 9).

    Notes
    -----
    Agrees with ``ioos_qc.qartod.qartod_compare``: a reading MISSING in one test and PASS in
    another aggregates to PASS (``run_qc`` therefore re-marks missing values MISSING).
    Deliberate differences: a value that is not a QARTOD flag raises (ioos-qc ignores it),
    and any shape is accepted, not only 1-D.

    Examples
    --------
    >>> qc_aggregate([[1, 9, 2, 3], [4, 9, 9, 1], [2, 9, 9, 2]]).tolist()
    [4, 9, 2, 3]

    References: [QF]; [IQ] ``qartod_compare``.
    """
    arrays = [np.asarray(a) for a in flag_arrays]
    if not arrays:
        raise ValueError("qc_aggregate needs at least one flag array")
    if any(a.shape != arrays[0].shape for a in arrays):
        raise ValueError(f"flag arrays differ in shape: {[a.shape for a in arrays]}")
    stack = np.stack(arrays)
    if stack.dtype.kind not in "iu" and not np.all(np.mod(stack, 1) == 0):
        raise ValueError("flags must be integers")
    codes = stack.astype(np.int64)
    valid = (codes >= 0) & (codes < 256)
    if not (np.all(valid) and np.all(_RANK[np.where(valid, codes, 0)] >= 0)):
        bad = sorted({int(c) for c in np.unique(codes) if not (0 <= c < 256 and _RANK[c] >= 0)})
        raise ValueError(f"not QARTOD flags: {bad} (expected 1, 2, 3, 4, 9)")
    return _ORDER[_RANK[codes].max(axis=0)]


# ----------------------------------------------------------------------------- thresholds
_CONFIG_FIELDS: dict[str, dict[str, str]] = {
    "gross_range": {"fail_span": "fail_span", "suspect_span": "suspect_span"},
    "climatology": {"seasonal_ranges": "seasonal_ranges"},
    "spike": {"suspect": "spike_suspect", "fail": "spike_fail"},
    "rate_of_change": {"suspect_per_s": "rate_suspect_per_s", "fail_per_s": "rate_fail_per_s"},
    "flat_line": {"tolerance": "flat_tolerance", "suspect_s": "flat_suspect_s",
                  "fail_s": "flat_fail_s"},
    "timing_gap": {"max_age_s": "max_age_s", "max_future_s": "max_future_s"},
}


_NUMBER_FIELDS = ("spike_suspect", "spike_fail", "rate_suspect_per_s", "rate_fail_per_s",
                  "flat_tolerance", "flat_suspect_s", "flat_fail_s", "max_age_s", "max_future_s")


def _seasonal(item: SeasonalRange | Mapping[str, Any]) -> SeasonalRange:
    if isinstance(item, SeasonalRange):
        return item
    known = ("first_month", "last_month", "suspect_span", "fail_span")
    for key in item:
        if key not in known:
            raise _unknown("seasonal range field", key, known)
    return SeasonalRange(**item)


@dataclass(frozen=True)
class QcThresholds:
    """Thresholds of every QARTOD test for one quantity (values in ``unit``, times in s).

    A test is enabled when its thresholds are set (``None`` disables it; ``gross_range`` is
    always on). Construction validates everything and raises ValueError on nonsense: reversed
    spans, a suspect span outside the fail span, a suspect threshold above the fail one,
    half-configured tests.
    """

    quantity: str
    unit: str
    fail_span: tuple[float, float]
    suspect_span: tuple[float, float] | None = None
    seasonal_ranges: tuple[SeasonalRange, ...] = ()
    spike_suspect: float | None = None
    spike_fail: float | None = None
    rate_suspect_per_s: float | None = None
    rate_fail_per_s: float | None = None
    flat_tolerance: float | None = None
    flat_suspect_s: float | None = None
    flat_fail_s: float | None = None
    max_age_s: float | None = None
    max_future_s: float = 60.0

    def __post_init__(self) -> None:
        if not (isinstance(self.quantity, str) and self.quantity):
            raise ValueError("quantity must be a non-empty string")
        fail = _span("fail_span", self.fail_span)
        object.__setattr__(self, "fail_span", fail)
        if self.suspect_span is not None:
            suspect = _span("suspect_span", self.suspect_span)
            _inside(self.quantity, suspect, fail)
            object.__setattr__(self, "suspect_span", suspect)
        ranges = tuple(_seasonal(r) for r in self.seasonal_ranges)
        _month_table(ranges)
        object.__setattr__(self, "seasonal_ranges", ranges)
        for name in _NUMBER_FIELDS:
            if getattr(self, name) is not None:
                object.__setattr__(self, name, float(getattr(self, name)))
        groups = {
            "spike": ("spike_suspect", "spike_fail"),
            "flat_line": ("flat_tolerance", "flat_suspect_s", "flat_fail_s"),
        }
        for test, names in groups.items():
            given = [getattr(self, n) is not None for n in names]
            if any(given) and not all(given):
                raise ValueError(f"{test}: set all of {names} or none")
        if self.spike_suspect is not None:
            _pair("spike", self.spike_suspect, self.spike_fail)  # type: ignore[arg-type]
        if self.rate_fail_per_s is not None and self.rate_suspect_per_s is None:
            raise ValueError("rate_of_change: rate_fail_per_s needs rate_suspect_per_s")
        if self.rate_suspect_per_s is not None:
            _positive("rate_suspect_per_s", self.rate_suspect_per_s)
            if self.rate_fail_per_s is not None:
                _pair("rate of change", self.rate_suspect_per_s, self.rate_fail_per_s)
        if self.flat_tolerance is not None:
            _positive("flat_tolerance", self.flat_tolerance)
            _pair("flat line", self.flat_suspect_s, self.flat_fail_s)  # type: ignore[arg-type]
        if self.max_age_s is not None:
            _positive("max_age_s", self.max_age_s)
        if not (np.isfinite(self.max_future_s) and self.max_future_s >= 0):
            raise ValueError(f"max_future_s must be finite and >= 0, got {self.max_future_s}")

    @property
    def enabled_tests(self) -> tuple[str, ...]:
        """Names (from :data:`TEST_NAMES`) of the tests these thresholds configure."""
        on = {
            "gross_range": True,
            "climatology": bool(self.seasonal_ranges),
            "spike": self.spike_suspect is not None,
            "rate_of_change": self.rate_suspect_per_s is not None,
            "flat_line": self.flat_tolerance is not None,
            "timing_gap": self.max_age_s is not None,
        }
        return tuple(name for name in TEST_NAMES if on[name])

    @classmethod
    def from_mapping(
        cls, quantity: str, unit: str, config: Mapping[str, Mapping[str, Any]],
    ) -> QcThresholds:
        """Build thresholds from a configuration keyed by test name, e.g. read from TOML.

        ``{"gross_range": {"fail_span": [0, 10]}, "spike": {"suspect": 0.1, "fail": 0.3}}``.
        An unknown test or parameter name raises ValueError naming the closest valid one
        (ioos-qc only logs a warning for a misspelled test).

        >>> QcThresholds.from_mapping("level", "m", {"gross_rang": {"fail_span": (0, 1)}})
        Traceback (most recent call last):
        ...
        ValueError: unknown QC test 'gross_rang'; did you mean 'gross_range'? (known: ...)
        """
        kwargs: dict[str, Any] = {}
        for test, params in config.items():
            if test not in _CONFIG_FIELDS:
                raise _unknown("QC test", test, _CONFIG_FIELDS)
            for key, value in params.items():
                if key not in _CONFIG_FIELDS[test]:
                    raise _unknown(f"parameter of {test}", key, _CONFIG_FIELDS[test])
                kwargs[_CONFIG_FIELDS[test][key]] = value
        if "fail_span" not in kwargs:
            raise ValueError("the gross_range test needs a fail_span")
        return cls(quantity=quantity, unit=unit, **kwargs)


def default_thresholds(quantity: str) -> QcThresholds:
    """Default thresholds for "water_level" [m], "temperature" [°C] or "dissolved_oxygen" [mg/L].

    Sampling is assumed every ~10 s. No value is taken from a QARTOD manual (they leave the
    numbers to the operator; from memory): each is "common practice" with its reason beside
    it; replace them with the site's sensor specifications and record. FAIL limits lie well
    outside the alarm criteria (DO 1-day minimum 4.0 mg/L, US EPA 1986; migration blocking
    near 21-22 °C, McCullough 1999; both from memory), so a real event is alarmed, never
    discarded as FAIL.

    >>> default_thresholds("water_level").enabled_tests[:3]
    ('gross_range', 'spike', 'rate_of_change')
    """
    if quantity == "water_level":
        return QcThresholds(
            quantity, "m",
            fail_span=(0.0, 10.0),  # common practice: the measuring range of a 10 m level gauge
            suspect_span=None,  # operating band is site-specific: set per gauge
            spike_suspect=0.15,  # common practice: above pool-surface turbulence (a few cm)
            spike_fail=0.50,  # common practice: no pool level jumps 0.5 m in one 10 s sample
            rate_suspect_per_s=0.02,  # common practice: 1.2 m/min, far above gate-driven rates
            flat_tolerance=0.0005,  # below a 1 mm resolution: only repeated identical readings
            flat_suspect_s=3600.0,  # common practice: a turbulent pool moves within an hour
            flat_fail_s=14400.0,  # common practice: 4 h identical (a still forebay: longer)
            max_age_s=60.0,  # common practice: six missed 10 s polls
        )
    if quantity == "temperature":
        return QcThresholds(
            quantity, "degC",
            fail_span=(-5.0, 45.0),  # common practice: span of water-quality thermistors
            suspect_span=(-0.5, 32.0),  # common practice: liquid fresh water, warmest rivers
            seasonal_ranges=(  # invented demo scenario (temperate river): use the site record
                SeasonalRange(12, 2, (-0.5, 12.0)),
                SeasonalRange(3, 5, (-0.5, 24.0)),
                SeasonalRange(6, 8, (4.0, 30.0)),
                SeasonalRange(9, 11, (-0.5, 24.0)),
            ),
            spike_suspect=0.5,  # common practice: river water does not jump 0.5 °C in 10 s
            spike_fail=2.0,
            rate_suspect_per_s=0.01,  # common practice: 0.6 °C/min, above mixing fronts
            flat_tolerance=0.005,  # below a 0.01 °C resolution: only identical readings
            flat_suspect_s=21600.0,  # common practice: 6 h; ice-covered water sits at 0 °C
            flat_fail_s=86400.0,  # common practice: a day of identical readings
            max_age_s=60.0,  # common practice: six missed 10 s polls
        )
    if quantity == "dissolved_oxygen":
        return QcThresholds(
            quantity, "mg/L",
            fail_span=(0.0, 20.0),  # common practice: span of optical DO sensors
            # upper: 110 % (total-dissolved-gas limit) of the 0 °C, 1 atm fresh-water
            # solubility 14.621 mg/L (Benson & Krause 1984); lower: anoxia in a flowing pool
            suspect_span=(0.5, 16.1),
            spike_suspect=1.0,  # common practice: above optical-sensor noise (~0.1 mg/L)
            spike_fail=3.0,
            rate_suspect_per_s=0.02,  # common practice: 1.2 mg/L/min, diurnal swings are slower
            flat_tolerance=0.005,  # below a 0.01 mg/L resolution: only identical readings
            flat_suspect_s=7200.0,  # common practice: DO drifts with light within 2 h
            flat_fail_s=21600.0,  # common practice: 6 h of identical readings
            max_age_s=60.0,  # common practice: six missed 10 s polls
        )
    raise _unknown("quantity", quantity, QUANTITIES)


# ----------------------------------------------------------------------------- run
def run_qc_tests(
    times: ArrayLike, values: ArrayLike, thresholds: QcThresholds, *, now: object = None,
    tests: Sequence[str] | None = None, tz: str = "UTC",
) -> dict[str, np.ndarray]:
    """Run the configured QARTOD tests on one series; return the flags of each test by name.

    Parameters
    ----------
    times : epoch seconds [s] or tz-aware timestamps, strictly increasing.
    values : 1-D series [thresholds.unit]; NaN is MISSING.
    thresholds : the quantity's :class:`QcThresholds`.
    now : arrival time of the readings; the timing test runs only when it is given.
    tests : subset of :data:`TEST_NAMES` to run (default: all enabled). An unknown or
        unconfigured name raises ValueError.
    tz : time zone of the climatology months.
    """
    x = _series(values)
    t = _increasing(times, x.size)
    if tests is None:
        names = [n for n in thresholds.enabled_tests if n != "timing_gap" or now is not None]
        if now is not None and "timing_gap" not in names:
            raise ValueError("now was given but the thresholds set no max_age_s")
    else:
        names = list(dict.fromkeys(tests))
        for name in names:
            if name not in TEST_NAMES:
                raise _unknown("QC test", name, TEST_NAMES)
            if name not in thresholds.enabled_tests:
                raise ValueError(f"test {name!r} is not configured for {thresholds.quantity}")
        if "timing_gap" in names and now is None:
            raise ValueError("the timing_gap test needs now (the arrival time)")
    th = thresholds
    runners = {
        "gross_range": lambda: gross_range_test(x, th.fail_span, th.suspect_span),
        "climatology": lambda: climatology_test(t, x, th.seasonal_ranges, tz=tz),
        "spike": lambda: spike_test(x, th.spike_suspect, th.spike_fail),
        "rate_of_change": lambda: rate_of_change_test(
            t, x, th.rate_suspect_per_s, th.rate_fail_per_s),
        "flat_line": lambda: flat_line_test(
            t, x, th.flat_tolerance, th.flat_suspect_s, th.flat_fail_s),
        "timing_gap": lambda: timing_gap_test(
            t, now, th.max_age_s, max_future_s=th.max_future_s),
    }
    return {name: runners[name]() for name in names}


def run_qc(
    times: ArrayLike, values: ArrayLike, thresholds: QcThresholds, *, now: object = None,
    tests: Sequence[str] | None = None, tz: str = "UTC",
) -> np.ndarray:
    """Run the configured QARTOD tests on one series and aggregate them (see :func:`qc_aggregate`).

    Parameters are those of :func:`run_qc_tests`. A missing (NaN) reading is MISSING whatever
    the timing test says (the plain QARTOD aggregate would let its PASS win).

    For a live feed, run it over a trailing window (at least ``flat_fail_s`` long) without
    ``now``, then combine the new readings' flags with :func:`timing_gap_test` on those
    readings only; the newest reading is NOT_EVALUATED by the spike test until the next one
    arrives, so re-flag the previous reading on each run.

    Examples
    --------
    >>> th = default_thresholds("water_level")
    >>> t = [0.0, 10.0, 20.0, 30.0, 40.0]
    >>> run_qc(t, [2.00, 2.01, 2.90, 2.02, float("nan")], th, now=45.0).tolist()
    [1, 3, 4, 3, 9]
    """
    flags = qc_aggregate(list(run_qc_tests(times, values, thresholds, now=now, tests=tests,
                                           tz=tz).values()))
    flags[np.isnan(_floats(values))] = _M
    return flags
