"""Live quality control: a trailing window per tag and the QARTOD tests of :mod:`ops_logic.qc`.

The tests themselves are :mod:`ops_logic.qc`'s; this module feeds them the right context as
readings arrive, following the notes of :func:`ops_logic.qc.run_qc` on live use:

- **pointwise tests** (gross range, climatology) run on the new readings;
- **spike** and **rate of change** run on the new readings with the last two readings of the
  window before them. The newest reading is NOT_EVALUATED by the spike test until the next
  one arrives, so each batch also re-judges the window's last reading: when its spike verdict
  is worse than its stored flag, a *re-flag* ``(tag_id, ts_ms, flag)`` is returned for the
  caller to write (:func:`db.ingest.store.apply_reflags`);
- **flat line** needs the window back to ``flat_fail_s`` (the window keeps that much, plus the
  last valid reading before it as the anchor). It runs on the whole window only when some new
  reading might be flat: when, with the four valid readings before it, it spans less than the
  tolerance (or fewer than five valid readings lie within ``flat_suspect_s``). Otherwise its
  result could only be PASS or NOT_EVALUATED, which never changes the aggregate (the gross
  range test always evaluates a finite value), so the flags are those of the full test;
- **timing/gap** runs on live readings only, with ``now`` their arrival time; readings fetched
  from a feed's history (backfill, seeding) are not timing-tested (their lateness is the feed
  outage's, recorded in feed health);
- **redundant pair**: the readings of a ``pool`` and ``pool_b`` gauge of the same pool taken
  within half a poll period of each other are compared with
  :func:`~ops_logic.qc.redundant_pair_test`; both get the worse flag;
- **source status**: a reading the source marks bad is FAIL (4) when it carries a finite value
  and MISSING (9) when it has none (NaN or ±inf, stored as NULL). Its value is left out of the
  window (as missing) so it is no context for the neighbours' tests.

Readings not newer than a tag's window (already seen, or late arrivals such as an old CSV
file) are dropped when the window holds their time stamp, else judged on their own series
(no window context, no timing test).

Two steps, so nothing is remembered that was not stored: :meth:`LiveQc.evaluate` returns the
rows to store and the re-flags; after the store, :meth:`LiveQc.commit` appends them to the
windows. Times are epoch milliseconds (the storage's key) and epoch seconds for the tests.

>>> from ops_logic.qc import default_thresholds
>>> from dataclasses import replace
>>> th = replace(default_thresholds("water_level"), fail_span=(50.0, 90.0))
>>> qc = LiveQc({"p": (7, th)}, tz="UTC")
>>> t0 = 1_780_000_000_000                      # epoch ms; one reading every 10 s
>>> def poll(ms, values):
...     ev = qc.evaluate({"p": (ms, values, None)}, now_s=ms[-1] / 1000 + 1)
...     qc.commit(ev)
...     return [r[3] for r in ev.rows], ev.reflags
>>> poll([t0, t0 + 10_000, t0 + 20_000], [70.0, 70.01, 70.0])
([1, 1, 1], [])
>>> poll([t0 + 30_000], [70.6])         # rate of change: suspect; spike: not yet judged
([3], [(7, 1780000020000, 3)])
>>> poll([t0 + 40_000], [70.0])         # the 70.6 m reading is now judged a spike: FAIL
([3], [(7, 1780000030000, 4)])
"""
from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ops_logic.qc import (  # the _*_kernel names: private to ops_logic.qc, shared in-project
    QcThresholds,
    _gross_range_kernel,
    _rate_of_change_kernel,
    _spike_kernel,
    _timing_gap_kernel,
    climatology_test,
    gross_range_test,
    qc_aggregate,
    rate_of_change_test,
    redundant_pair_test,
    run_qc_tests,
    spike_test,
    timing_gap_test,
)

__all__ = ["Evaluation", "LiveQc", "TrailingWindow", "Usable"]

PASS, NOT_EVALUATED, SUSPECT, FAIL, MISSING = 1, 2, 3, 4, 9
_FLAT_CHECK = 5  # readings spanned by the quick "might be flat" check
_RANK = {MISSING: 0, NOT_EVALUATED: 1, PASS: 2, SUSPECT: 3, FAIL: 4}
"""QARTOD precedence of the flags, as in :func:`ops_logic.qc.qc_aggregate`."""


class TrailingWindow:
    """Recent readings of one tag, oldest first: times [epoch ms], values (NaN: missing or
    bad source), QARTOD flags. Keeps ``span_s`` before its newest reading, plus the last
    valid reading before that (the flat-line anchor), and at least ``min_keep`` readings."""

    def __init__(self, span_s: float, min_keep: int = 3):
        self.span_ms = int(math.ceil(span_s * 1000.0))
        self.min_keep = int(min_keep)
        self._ms = np.empty(64, dtype=np.int64)
        self._x = np.empty(64)
        self._f = np.empty(64, dtype=np.uint8)
        self._lo = self._hi = 0

    def __len__(self) -> int:
        return self._hi - self._lo

    @property
    def ms(self) -> np.ndarray:
        return self._ms[self._lo:self._hi]

    @property
    def x(self) -> np.ndarray:
        return self._x[self._lo:self._hi]

    @property
    def flags(self) -> np.ndarray:
        return self._f[self._lo:self._hi]

    @property
    def last_ms(self) -> int | None:
        return int(self._ms[self._hi - 1]) if self._hi > self._lo else None

    def extend(self, ms: np.ndarray, x: np.ndarray, flags: np.ndarray) -> None:
        """Append readings newer than the newest kept, then trim the old end."""
        n = len(ms)
        if n == 0:
            return
        if self._hi + n > self._ms.size:
            keep = self._hi - self._lo
            size = max(self._ms.size, 2 * (keep + n))
            for name in ("_ms", "_x", "_f"):
                old = getattr(self, name)
                new = np.empty(size, dtype=old.dtype)
                new[:keep] = old[self._lo:self._hi]
                setattr(self, name, new)
            self._lo, self._hi = 0, keep
        self._ms[self._hi:self._hi + n] = ms
        self._x[self._hi:self._hi + n] = x
        self._f[self._hi:self._hi + n] = flags
        self._hi += n
        self._trim()

    def _trim(self) -> None:
        ms = self.ms
        cut = int(np.searchsorted(ms, ms[-1] - self.span_ms, side="right")) - 1
        if cut <= 0:
            return
        x = self.x
        while cut > 0 and not math.isfinite(x[cut]):
            cut -= 1  # keep the last valid reading at or before the cut (the anchor)
        self._lo += min(cut, max(len(ms) - self.min_keep, 0))

    def set_last_flag(self, flag: int) -> None:
        self._f[self._hi - 1] = flag


@dataclass(frozen=True)
class Usable:
    """A reading chosen as an input: time [epoch ms], value, flag."""

    ts_ms: int
    value: float
    flag: int


@dataclass
class _TagState:
    tag_id: int
    thresholds: QcThresholds
    window: TrailingWindow
    tests: tuple[str, ...]
    has_spike: bool
    checked: dict[str, tuple] = field(default_factory=dict)
    """Thresholds of the small tests, checked once by the test itself (:func:`_checked`)."""


@dataclass
class Evaluation:
    """Result of :meth:`LiveQc.evaluate`: ``rows`` ``(tag_id, ts_s, value, flag)`` for
    :func:`db.readings.store_batch` (the same as columns: :meth:`arrays`, for
    :func:`db.readings.store_arrays`), ``reflags`` ``(tag_id, ts_ms, flag)``, and what the
    windows take on :meth:`LiveQc.commit`."""

    _chunks: list[tuple[int, np.ndarray, np.ndarray, np.ndarray]] = field(default_factory=list)
    reflags: list[tuple[int, int, int]] = field(default_factory=list)
    unknown: list[str] = field(default_factory=list)
    newest_ms: dict[str, int] = field(default_factory=dict)
    _append: dict[str, tuple[np.ndarray, np.ndarray, np.ndarray]] = field(default_factory=dict)
    _last_flag: dict[str, int] = field(default_factory=dict)

    def __len__(self) -> int:
        return sum(c[1].size for c in self._chunks)

    @property
    def rows(self) -> list[tuple[int, float, float, int]]:
        """The rows to store, ``(tag_id, ts_s, value, flag)`` (NaN value: missing)."""
        return [row for tag_id, ms, x, flags in self._chunks
                for row in zip([tag_id] * ms.size, (ms / 1000.0).tolist(), x.tolist(),
                               flags.tolist(), strict=True)]

    def arrays(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """The rows to store as columns: tag ids, times [epoch ms], values, flags."""
        if not self._chunks:
            empty = np.empty(0, dtype=np.int64)
            return empty, empty, np.empty(0), empty
        return (np.concatenate([np.full(c[1].size, c[0], dtype=np.int64) for c in self._chunks]),
                np.concatenate([c[1] for c in self._chunks]),
                np.concatenate([c[2] for c in self._chunks]),
                np.concatenate([c[3] for c in self._chunks]).astype(np.int64))


_RANK_OF = np.zeros(256, dtype=np.int8)
_RANK_OF[list(_RANK)] = list(_RANK.values())
_FLAG_OF = np.array(sorted(_RANK, key=_RANK.__getitem__), dtype=np.uint8)


def _aggregate(parts: list[np.ndarray], n: int) -> np.ndarray:
    """:func:`ops_logic.qc.qc_aggregate` of the flags the tests returned (valid QARTOD flags
    by construction, so its input checks are skipped): the highest ranked flag wins."""
    if not parts:
        return np.full(n, NOT_EVALUATED, dtype=np.uint8)
    rank = _RANK_OF[parts[0]]
    for p in parts[1:]:
        np.maximum(rank, _RANK_OF[p], out=rank)
    return _FLAG_OF[rank]


_MAX_EPOCH_S = 1e11
"""Largest epoch time [s] :func:`ops_logic.qc.epoch_seconds` takes (about year 5100)."""


def _checked(th: QcThresholds) -> dict[str, tuple]:
    """Thresholds of gross range, spike, rate of change and timing/gap that their test accepts
    (each test is called once on a tiny series to check them): the parameters of the test's
    kernel, which skips the per-call checks (``_gross_range_kernel``, ``_spike_kernel``,
    ``_rate_of_change_kernel``, ``_timing_gap_kernel`` of :mod:`ops_logic.qc`). A test whose
    thresholds it refuses is left out (then it is called as usual, and raises as usual)."""
    out: dict[str, tuple] = {}
    try:
        gross_range_test(np.zeros(1), th.fail_span, th.suspect_span)
        fail = (float(th.fail_span[0]), float(th.fail_span[1]))
        suspect = (None if th.suspect_span is None
                   else (float(th.suspect_span[0]), float(th.suspect_span[1])))
        out["gross_range"] = (fail, suspect)
    except (TypeError, ValueError):
        pass
    if th.spike_suspect is not None and th.spike_fail is not None:
        try:
            spike_test(np.zeros(1), th.spike_suspect, th.spike_fail)
            out["spike"] = (float(th.spike_suspect), float(th.spike_fail))
        except (TypeError, ValueError):
            pass
    if th.rate_suspect_per_s is not None:
        try:
            rate_of_change_test(np.zeros(1), np.zeros(1), th.rate_suspect_per_s,
                                th.rate_fail_per_s)
            out["rate_of_change"] = (float(th.rate_suspect_per_s),
                                     np.inf if th.rate_fail_per_s is None
                                     else float(th.rate_fail_per_s))
        except (TypeError, ValueError):
            pass
    if th.max_age_s is not None:
        try:
            timing_gap_test(np.zeros(1), 0.0, th.max_age_s, max_future_s=th.max_future_s)
            out["timing_gap"] = (float(th.max_age_s), float(th.max_future_s))
        except (TypeError, ValueError):
            pass
    return out


def _flat_line_tail(t_s: np.ndarray, x: np.ndarray, tolerance: float, suspect_s: float,
                    fail_s: float, n: int) -> np.ndarray:
    """``flat_line_test(t_s, x, tolerance, suspect_s, fail_s)[-n:]`` (:mod:`ops_logic.qc`,
    QARTOD flat line), computed for the last ``n`` readings only: the spread max − min of the
    valid readings from each one's anchor (the last at or before t − T) to it, by range
    queries on a sparse table of maxima and minima (exact), not rolling windows over the
    whole series. Times strictly increasing [s]; NaN values are MISSING."""
    finite = np.isfinite(x)
    out = np.full(n, MISSING, dtype=np.uint8)
    new = finite[x.size - n:]
    m = int(new.sum())
    if m == 0:
        return out
    tv, xv = t_s[finite], x[finite]
    j = np.arange(tv.size - m, tv.size)
    anchors = [np.searchsorted(tv, tv[j] - seconds, side="right") - 1
               for seconds in (suspect_s, fail_s)]
    lo = int(max(min(int(a.min()) for a in anchors), 0))
    longest = int(max(int((j - np.maximum(a, 0)).max()) for a in anchors)) + 1
    levels = max(longest.bit_length(), 1)
    size = xv.size - lo
    top = np.full((levels, size), -np.inf)
    bottom = np.full((levels, size), np.inf)
    top[0], bottom[0] = xv[lo:], xv[lo:]
    for k in range(1, levels):
        h = 1 << (k - 1)
        np.maximum(top[k - 1, :size - h], top[k - 1, h:], out=top[k, :size - h])
        np.minimum(bottom[k - 1, :size - h], bottom[k - 1, h:], out=bottom[k, :size - h])
    valid = np.full(m, PASS, dtype=np.uint8)
    for anchor, flag in zip(anchors, (SUSPECT, FAIL), strict=True):
        a = np.maximum(anchor, 0) - lo
        b = j - lo
        k = np.frexp((b - a + 1).astype(np.float64))[1] - 1  # floor(log2(length))
        c = b - (1 << k) + 1
        spread = (np.maximum(top[k, a], top[k, c]) - np.minimum(bottom[k, a], bottom[k, c]))
        valid[(anchor >= 0) & (spread < tolerance)] = flag
        if flag == SUSPECT:
            valid[anchor < 0] = NOT_EVALUATED
    out[new] = valid
    return out


class LiveQc:
    """Trailing windows and live QC for a set of tags.

    Parameters
    ----------
    tags : mapping
        Tag name → (tag id, :class:`~ops_logic.qc.QcThresholds`).
    tz : str
        Time zone of the climatology months (the site's).
    pairs : sequence of (name, name)
        Redundant gauge pairs (:func:`db.ingest.qc_config.redundant_pairs`).
    pair_thresholds : (suspect, fail)
        Allowed disagreement of a pair [m].
    pair_tolerance_ms : mapping or None
        Largest time difference of two readings compared as a pair, by primary tag name
        (default 5000 ms).
    """

    def __init__(self, tags: Mapping[str, tuple[int, QcThresholds]], *, tz: str = "UTC",
                 pairs: Sequence[tuple[str, str]] = (),
                 pair_thresholds: tuple[float, float] = (0.05, 0.15),
                 pair_tolerance_ms: Mapping[str, int] | None = None):
        self.tz = tz
        self.pairs = [(a, b) for a, b in pairs if a in tags and b in tags]
        self.pair_thresholds = pair_thresholds
        self.pair_tolerance_ms = dict(pair_tolerance_ms or {})
        self._month_ms = np.empty(0, dtype=np.int64)  # local month starts [epoch ms]
        self._month_no = np.empty(0, dtype=np.intp)   # and their calendar months
        self._now_seen: tuple[float, bool] | None = None
        self._tags: dict[str, _TagState] = {}
        for name, (tag_id, th) in tags.items():
            enabled = th.enabled_tests
            span = max(th.flat_fail_s if "flat_line" in enabled else 0.0, th.max_age_s or 0.0)
            tests = tuple(n for n in enabled if n not in ("flat_line", "timing_gap"))
            self._tags[name] = _TagState(int(tag_id), th, TrailingWindow(span), tests,
                                         "spike" in enabled, _checked(th))

    @property
    def names(self) -> list[str]:
        return list(self._tags)

    def window(self, name: str) -> TrailingWindow:
        return self._tags[name].window

    def thresholds(self, name: str) -> QcThresholds:
        return self._tags[name].thresholds

    # -- seeding from storage --------------------------------------------------------------
    def seed(self, name: str, ms: np.ndarray, x: np.ndarray, flags: np.ndarray) -> None:
        """Load stored readings (time order) into an empty window."""
        state = self._tags[name]
        if len(state.window):
            raise ValueError(f"the window of {name} is not empty")
        x = np.where(np.isfinite(x) & (np.asarray(flags) != MISSING), x, np.nan)
        state.window.extend(np.asarray(ms, dtype=np.int64), x, np.asarray(flags, np.uint8))

    def recheck_spikes(self, name: str) -> list[tuple[int, int, int]]:
        """Re-judge the spike verdict of every window reading but the newest (after a restart:
        a re-flag lost to a crash between a store and its re-flag is found again)."""
        state = self._tags[name]
        w = state.window
        if not state.has_spike or len(w) < 3:
            return []
        th = state.thresholds
        spike = run_qc_tests(w.ms / 1000.0, w.x, th, tests=["spike"], tz=self.tz)["spike"]
        worse = qc_aggregate([w.flags, spike])
        changed = np.flatnonzero((worse != w.flags) & np.isin(worse, (SUSPECT, FAIL)))
        changed = changed[changed < len(w) - 1]
        flags = w.flags
        flags[changed] = worse[changed]
        return [(state.tag_id, int(w.ms[i]), int(worse[i])) for i in changed.tolist()]

    # -- evaluation -----------------------------------------------------------------------
    def _months(self, ms: np.ndarray) -> np.ndarray:
        """Calendar months (1–12) in the site's time zone of sorted times [epoch ms], from a
        table of local month starts kept across batches (one look-up, not one per tag)."""
        lo, hi = int(ms[0]), int(ms[-1])
        bounds = self._month_ms
        if not bounds.size or lo < bounds[0] or hi >= bounds[-1]:
            first = pd.Timestamp(lo, unit="ms", tz="UTC").tz_convert(self.tz)
            last = pd.Timestamp(hi, unit="ms", tz="UTC").tz_convert(self.tz)
            starts = pd.date_range(pd.Timestamp(first.year, first.month, 1, tz=self.tz)
                                   - pd.DateOffset(months=1),
                                   pd.Timestamp(last.year, last.month, 1, tz=self.tz)
                                   + pd.DateOffset(months=3), freq="MS")
            self._month_ms = bounds = (starts.as_unit("ms").asi8).astype(np.int64)
            self._month_no = np.asarray(starts.month, dtype=np.intp)
        return self._month_no[np.searchsorted(bounds, ms, side="right") - 1]

    def evaluate(self, batch: Mapping[str, tuple[Sequence[int], Sequence[float],
                                                 Sequence[bool] | None]],
                 *, now_s: float | None = None,
                 timed: Mapping[str, np.ndarray] | None = None) -> Evaluation:
        """Flags for new readings, by tag name → (times [epoch ms], values, source_ok or
        None for all good). ``now_s`` [epoch s] is the arrival time for the timing test, run on
        the readings ``timed`` marks (default: all, when ``now_s`` is given)."""
        ev = Evaluation()
        judged: dict[str, tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]] = {}
        for name, (ms_in, x_in, ok_in) in batch.items():
            state = self._tags.get(name)
            if state is None:
                ev.unknown.append(name)
                continue
            ms = np.asarray(ms_in, dtype=np.int64)
            x = np.asarray(x_in, dtype=np.float64)
            ok = np.ones(ms.size, bool) if ok_in is None else np.asarray(ok_in, dtype=bool)
            tm = (np.ones(ms.size, bool) if timed is None or name not in timed
                  else np.asarray(timed[name], dtype=bool))
            if ms.size == 0:
                continue
            if ms.size > 1 and not (ms[1:] > ms[:-1]).all():  # else: sorted and unique
                order = np.argsort(ms, kind="stable")
                ms, x, ok, tm = ms[order], x[order], ok[order], tm[order]
                first = np.concatenate(([True], ms[1:] != ms[:-1]))
                ms, x, ok, tm = ms[first], x[first], ok[first], tm[first]
            elif ms is ms_in:
                ms = ms.copy()  # kept in the evaluation: not the caller's array
            last = state.window.last_ms
            if last is not None and ms[0] <= last:
                old = ms <= last
                late = old & ~np.isin(ms, state.window.ms)
                if late.any():
                    self._late(state, ms[late], x[late], ok[late], ev)
                ms, x, ok, tm = ms[~old], x[~old], ok[~old], tm[~old]
                if ms.size == 0:
                    continue
            finite = np.isfinite(x)
            x_eff = np.where(ok & finite, x, np.nan)
            flags = self._judge(state, name, ms, x_eff, tm, now_s, ev)
            flags[ok & ~finite] = MISSING
            flags[~ok] = np.where(finite[~ok], FAIL, MISSING)
            judged[name] = (ms, np.where(finite, x, np.nan), x_eff, flags)
        self._pairs(judged)
        for name, (ms, x, x_eff, flags) in judged.items():
            ev._chunks.append((self._tags[name].tag_id, ms, x, flags))
            ev._append[name] = (ms, x_eff, flags)
            ev.newest_ms[name] = int(ms[-1])
        return ev

    def _judge(self, state: _TagState, name: str, ms: np.ndarray, x: np.ndarray,
               timed: np.ndarray, now_s: float | None, ev: Evaluation) -> np.ndarray:
        w, th, n = state.window, state.thresholds, ms.size
        k = min(len(w), 2)
        tail_ms = np.concatenate((w.ms[len(w) - k:], ms))
        tail_x = np.concatenate((w.x[len(w) - k:], x))
        t_s = tail_ms / 1000.0
        checked = state.checked
        # times: sorted, unique, finite; the one check of epoch_seconds left is their range
        plain_times = t_s[0] >= -_MAX_EPOCH_S and t_s[-1] <= _MAX_EPOCH_S
        per = {}
        for test in state.tests:  # the tests run_qc_tests would run, called directly
            if test == "gross_range":
                per[test] = (_gross_range_kernel(tail_x, *checked[test]) if test in checked
                             else gross_range_test(tail_x, th.fail_span, th.suspect_span))
            elif test == "rate_of_change" and plain_times and test in checked:
                per[test] = _rate_of_change_kernel(t_s, tail_x, *checked[test])
            elif test == "spike":
                assert th.spike_suspect is not None and th.spike_fail is not None
                per[test] = (_spike_kernel(tail_x, *checked[test]) if test in checked
                             else spike_test(tail_x, th.spike_suspect, th.spike_fail))
            elif test == "climatology":
                per[test] = climatology_test(t_s, tail_x, th.seasonal_ranges, tz=self.tz,
                                             months=self._months(tail_ms))
            elif test == "rate_of_change":
                assert th.rate_suspect_per_s is not None
                per[test] = rate_of_change_test(t_s, tail_x, th.rate_suspect_per_s,
                                                th.rate_fail_per_s)
            else:
                per.update(run_qc_tests(t_s, tail_x, th, tests=[test], tz=self.tz))
        parts = [a[k:] for a in per.values()]
        if th.flat_tolerance is not None and self._might_be_flat(w, ms, x, th):
            all_ms = np.concatenate((w.ms, ms))
            all_x = np.concatenate((w.x, x))
            parts.append(_flat_line_tail(all_ms / 1000.0, all_x, th.flat_tolerance,
                                         th.flat_suspect_s, th.flat_fail_s, n))
        if now_s is not None and th.max_age_s is not None and timed.any():
            if (plain_times and "timing_gap" in checked
                    and self._now_checked(now_s) is not None):
                timing = _timing_gap_kernel(ms / 1000.0, float(now_s), *checked["timing_gap"])
            else:
                timing = timing_gap_test(ms / 1000.0, now_s, th.max_age_s,
                                         max_future_s=th.max_future_s)
            timing[~timed] = NOT_EVALUATED
            parts.append(timing)
        flags = _aggregate(parts, n)
        flags[np.isnan(x)] = MISSING
        if state.has_spike and k >= 1:
            old, verdict = int(w.flags[-1]), int(per["spike"][k - 1])
            new = verdict if _RANK[verdict] > _RANK[old] else old
            if new != old and new in (SUSPECT, FAIL):
                ev.reflags.append((state.tag_id, int(w.ms[-1]), new))
                ev._last_flag[name] = new
        return flags

    def _now_checked(self, now_s: float) -> float | None:
        """``now_s`` if :func:`ops_logic.qc.timing_gap_test` takes it as a plain finite epoch
        time [s] (checked once per value), else None."""
        if self._now_seen is None or self._now_seen[0] != now_s:
            ok = (isinstance(now_s, int | float) and not isinstance(now_s, bool)
                  and math.isfinite(now_s) and abs(now_s) <= _MAX_EPOCH_S)
            self._now_seen = (now_s, ok)
        return now_s if self._now_seen[1] else None

    @staticmethod
    def _might_be_flat(w: TrailingWindow, ms: np.ndarray, x: np.ndarray,
                       th: QcThresholds) -> bool:
        """False when every new reading moved by the tolerance or more within its last
        :data:`_FLAT_CHECK` valid readings, all inside ``flat_suspect_s`` (then the flat-line
        test cannot flag it)."""
        assert th.flat_tolerance is not None and th.flat_suspect_s is not None
        tail = slice(max(len(w) - 4 * _FLAT_CHECK, 0), len(w))  # enough valid ones, usually
        keep_w = np.isfinite(w.x[tail])
        keep = np.isfinite(x)
        m = int(keep.sum())
        if m == 0:
            return False
        all_x = np.concatenate((w.x[tail][keep_w][-(_FLAT_CHECK - 1):], x[keep]))
        all_ms = np.concatenate((w.ms[tail][keep_w][-(_FLAT_CHECK - 1):], ms[keep]))
        if all_x.size < _FLAT_CHECK:
            return True
        if m == 1:
            recent = all_ms[-1] - all_ms[-_FLAT_CHECK] < th.flat_suspect_s * 1000.0
            last = all_x[-_FLAT_CHECK:]
            return not (recent and last.max() - last.min() >= th.flat_tolerance)
        runs = all_x.size - _FLAT_CHECK + 1  # runs of _FLAT_CHECK readings: the last m
        s0 = max(runs - m, 0)
        m = runs - s0
        top = all_x[s0:s0 + m].copy()
        bottom = top.copy()
        for d in range(1, _FLAT_CHECK):
            np.maximum(top, all_x[s0 + d:s0 + d + m], out=top)
            np.minimum(bottom, all_x[s0 + d:s0 + d + m], out=bottom)
        spread = top - bottom
        last = s0 + _FLAT_CHECK - 1
        recent = (all_ms[last:last + m] - all_ms[s0:s0 + m]) < th.flat_suspect_s * 1000.0
        return bool(np.any(~recent | (spread < th.flat_tolerance)))

    def _late(self, state: _TagState, ms: np.ndarray, x: np.ndarray, ok: np.ndarray,
              ev: Evaluation) -> None:
        finite = np.isfinite(x)
        x_eff = np.where(ok & finite, x, np.nan)
        th = state.thresholds
        tests = list(state.tests) + (["flat_line"] if th.flat_tolerance is not None else [])
        flags = _aggregate(list(run_qc_tests(ms / 1000.0, x_eff, th, tests=tests,
                                             tz=self.tz).values()), ms.size)
        flags[np.isnan(x_eff)] = MISSING
        flags[~ok] = np.where(finite[~ok], FAIL, MISSING)
        ev._chunks.append((state.tag_id, ms, np.where(finite, x, np.nan), flags))

    def _pairs(self, judged: dict[str, tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]]
               ) -> None:
        suspect, fail = self.pair_thresholds
        for a, b in self.pairs:
            if a not in judged or b not in judged:
                continue
            ms_a, _, xa, fa = judged[a]
            ms_b, _, xb, fb = judged[b]
            tol = self.pair_tolerance_ms.get(a, 5000)
            last = ms_b.size - 1
            j = np.searchsorted(ms_b, ms_a)  # first reading of b at or after each of a
            before, after = np.clip(j - 1, 0, last), np.clip(j, 0, last)
            pick = np.where(np.abs(ms_b[after] - ms_a) < np.abs(ms_b[before] - ms_a),
                            after, before)
            near = np.abs(ms_b[pick] - ms_a) <= tol
            if not near.any():
                continue
            ia, ib = np.flatnonzero(near), pick[near]
            pf = redundant_pair_test(xa[ia], xb[ib], suspect, fail)
            fa[ia] = qc_aggregate([fa[ia], pf])
            fb[ib] = qc_aggregate([fb[ib], pf])

    def commit(self, ev: Evaluation) -> None:
        """Take an evaluation's readings into the windows (after they were stored)."""
        for name, flag in ev._last_flag.items():
            self._tags[name].window.set_last_flag(flag)
        for name, (ms, x, flags) in ev._append.items():
            self._tags[name].window.extend(ms, x, flags)
        ev._append, ev._last_flag = {}, {}

    # -- reading the windows ----------------------------------------------------------------
    def latest(self, name: str) -> Usable | None:
        """The newest reading of a tag in its window (any flag)."""
        w = self._tags[name].window
        if not len(w):
            return None
        return Usable(int(w.ms[-1]), float(w.x[-1]), int(w.flags[-1]))

    def latest_usable(self, name: str, now_ms: int, max_age_s: float) -> Usable | None:
        """The newest *settled* reading with flag PASS, else SUSPECT, no older than
        ``max_age_s``. Settled: its spike verdict is in (a later reading exists, or the tag has
        no spike test). FAIL and MISSING readings are never chosen."""
        state = self._tags[name]
        w = state.window
        end = len(w) - 1 if state.has_spike else len(w)
        if end <= 0:
            return None
        lo = int(np.searchsorted(w.ms[:end], now_ms - max_age_s * 1000.0, side="left"))
        flags, x = w.flags[lo:end], w.x[lo:end]
        for wanted in (PASS, SUSPECT):
            hits = np.flatnonzero((flags == wanted) & np.isfinite(x))
            if hits.size:
                i = lo + int(hits[-1])
                return Usable(int(w.ms[i]), float(w.x[i]), wanted)
        return None
