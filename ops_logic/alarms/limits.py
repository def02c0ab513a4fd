"""Limit checks with a deadband, and on/off delays: what keeps an alarm from chattering.

A high alarm on limit L with deadband d (ISA-18.2 [ISA182] and EEMUA 191 [EEMUA191]) comes on
when the value rises above L and goes off only when it falls below L − d; a low alarm mirrors
this; a band alarm is a low and a high on the two ends of the band. The on-delay requires the
condition for ``on_delay_s`` before the alarm activates, so a short excursion raises nothing;
the off-delay requires the return for ``off_delay_s`` before it clears, so a short dip back
inside the limit does not clear it. Delays are measured between evaluations: the condition is
taken to hold between two evaluations that both see it.

.. math::
    \\text{high: on if } v > L,\\quad \\text{off if } v < L - d;\\qquad
    \\text{low: on if } v < L,\\quad \\text{off if } v > L + d

>>> [limit_condition(v, high=10.0, deadband=0.5, latched=lat)
...  for v, lat in [(10.2, False), (9.8, True), (9.4, True)]]
[True, True, False]
>>> alarm_intervals([0, 60, 120, 180, 240], [9, 11, 11, 9, 9], high=10.0, on_delay_s=60.0)
[(120.0, 180.0)]

References
----------
.. [ISA182] ANSI/ISA-18.2-2016, Management of Alarm Systems for the Process Industries:
   alarm deadband, on-delay and off-delay.
.. [EEMUA191] EEMUA Publication 191, Alarm Systems: a guide to design, management and
   procurement: deadbands and delays against chattering alarms.
"""
from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, replace
from datetime import datetime

__all__ = ["DelayState", "alarm_intervals", "limit_condition", "step_delays"]


def _finite(name: str, x: float) -> float:
    x = float(x)
    if not math.isfinite(x):
        raise ValueError(f"{name} must be a finite number, got {x!r}")
    return x


def limit_condition(value: float, *, high: float | None = None, low: float | None = None,
                    deadband: float = 0.0, latched: bool = False) -> bool:
    """Whether a value is beyond its limit(s), with a deadband on the way back.

    Raw (not latched): ``value > high`` or ``value < low`` (a value on a limit is inside,
    as in the profile's criteria). Latched (the alarm is on): the condition holds until
    ``value < high − deadband`` and ``value > low + deadband``; a band narrower than two
    deadbands clears at its middle.

    Parameters
    ----------
    value : the measured or computed value [unit of the limits]
    high : upper limit, or ``None`` [same unit]
    low : lower limit, or ``None`` [same unit]
    deadband : return margin, ≥ 0 [same unit]
    latched : whether the alarm condition is on now

    Validity: finite numbers, at least one limit, ``low < high``, ``deadband ≥ 0``;
    otherwise ``ValueError``.

    >>> limit_condition(4.9, low=5.0)
    True
    >>> limit_condition(5.1, low=5.0, deadband=0.2, latched=True)
    True

    Reference: [ISA182] alarm deadband.
    """
    value = _finite("value", value)
    deadband = _finite("deadband", deadband)
    if deadband < 0:
        raise ValueError(f"deadband must be ≥ 0, got {deadband!r}")
    if high is None and low is None:
        raise ValueError("give a high limit, a low limit or both")
    hi = None if high is None else _finite("high", high)
    lo = None if low is None else _finite("low", low)
    if hi is not None and lo is not None and not lo < hi:
        raise ValueError(f"low limit {lo!r} must be below high limit {hi!r}")
    if not latched:
        return (hi is not None and value > hi) or (lo is not None and value < lo)
    back_hi = None if hi is None else hi - deadband
    back_lo = None if lo is None else lo + deadband
    if back_hi is not None and back_lo is not None and back_lo > back_hi:
        back_hi = back_lo = 0.5 * (lo + hi)  # type: ignore[operator]
    return (back_hi is not None and value >= back_hi) or (back_lo is not None
                                                          and value <= back_lo)


@dataclass(frozen=True)
class DelayState:
    """The on/off-delay memory of one alarm (times in epoch seconds or datetimes)."""

    active: bool = False
    pending_since: float | datetime | None = None
    clearing_since: float | datetime | None = None


def _elapsed(now: float | datetime, since: float | datetime) -> float:
    if isinstance(now, datetime):
        assert isinstance(since, datetime)
        return (now - since).total_seconds()
    return float(now) - float(since)  # type: ignore[arg-type]


def step_delays(state: DelayState, condition: bool, now: float | datetime, *,
                on_delay_s: float = 0.0, off_delay_s: float = 0.0) -> DelayState:
    """Advance the delay memory by one evaluation at ``now`` that sees ``condition``.

    Inactive: the condition must have been seen continuously for ``on_delay_s`` (from the
    first evaluation that saw it) before the alarm activates; with no delay it activates at
    once. Active: likewise the absence of the condition for ``off_delay_s`` clears it. Any
    evaluation that sees the opposite restarts the timer.

    Parameters
    ----------
    state : the memory after the previous evaluation
    condition : the limit condition now (from :func:`limit_condition`, latched by
        ``state.active``)
    now : time of this evaluation [s since epoch, or a tz-aware datetime]
    on_delay_s, off_delay_s : delays [s], ≥ 0

    >>> s = step_delays(DelayState(), True, 0.0, on_delay_s=30.0)
    >>> s.active, step_delays(s, True, 30.0, on_delay_s=30.0).active
    (False, True)

    Reference: [ISA182] on-delay and off-delay.
    """
    if on_delay_s < 0 or off_delay_s < 0:
        raise ValueError("delays must be ≥ 0 s")
    if not state.active:
        if not condition:
            return replace(state, pending_since=None, clearing_since=None)
        since = state.pending_since if state.pending_since is not None else now
        if _elapsed(now, since) < 0:
            raise ValueError("time went backwards: evaluations must come in time order")
        if _elapsed(now, since) >= on_delay_s:
            return DelayState(True, None, None)
        return DelayState(False, since, None)
    if condition:
        return replace(state, clearing_since=None, pending_since=None)
    since = state.clearing_since if state.clearing_since is not None else now
    if _elapsed(now, since) < 0:
        raise ValueError("time went backwards: evaluations must come in time order")
    if _elapsed(now, since) >= off_delay_s:
        return DelayState(False, None, None)
    return DelayState(True, None, since)


def alarm_intervals(times_s: Sequence[float], values: Sequence[float], *,
                    high: float | None = None, low: float | None = None,
                    deadband: float = 0.0, on_delay_s: float = 0.0,
                    off_delay_s: float = 0.0) -> list[tuple[float, float | None]]:
    """The alarm intervals a limit with deadband and delays gives on a sampled signal.

    Runs :func:`limit_condition` and :func:`step_delays` over the samples, as the engine does
    evaluation by evaluation: useful to try a deadband or delay on a stored history.

    Parameters
    ----------
    times_s : strictly increasing sample times [s]
    values : the signal [unit of the limits]
    high, low, deadband : as in :func:`limit_condition`
    on_delay_s, off_delay_s : as in :func:`step_delays` [s]

    Returns
    -------
    intervals : list of ``(activated_s, cleared_s)``; ``cleared_s`` is ``None`` when the alarm
        is still on at the last sample.

    >>> alarm_intervals([0, 1, 2, 3], [1, 3, 1, 3], high=2.0)
    [(1.0, 2.0), (3.0, None)]
    >>> alarm_intervals([0, 1, 2, 3], [1, 3, 1.5, 3], high=2.0, deadband=1.0)
    [(1.0, None)]

    Reference: [ISA182], [EEMUA191].
    """
    if len(times_s) != len(values):
        raise ValueError("times_s and values must have the same length")
    out: list[tuple[float, float | None]] = []
    state = DelayState()
    previous = -math.inf
    for t_given, v in zip(times_s, values, strict=True):
        t = _finite("time", t_given)
        if not t > previous:
            raise ValueError("times_s must be strictly increasing")
        previous = t
        cond = limit_condition(v, high=high, low=low, deadband=deadband, latched=state.active)
        new = step_delays(state, cond, t, on_delay_s=on_delay_s, off_delay_s=off_delay_s)
        if new.active and not state.active:
            out.append((t, None))
        elif state.active and not new.active:
            out[-1] = (out[-1][0], t)
        state = new
    return out
