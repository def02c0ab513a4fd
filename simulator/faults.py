"""Measurement noise and sensor faults applied to a tag's true values (vectorised).

Noise is Gaussian with the standard deviation of :data:`NOISE_SIGMA` for the tag's quantity,
drawn from the counter-based generator of :mod:`simulator.noise` (deterministic in the seed, tag
and millisecond). The figures are half the usual "±" accuracy of each instrument (so ±
is about two standard deviations; common practice for these instruments, not a published
specification): level and head-differential gauges ±3 mm, temperature ±0.05 °C, dissolved
oxygen ±0.05 mg/L, gate position ±2 mm, valve position ±0.2 %, flow meters ±1 % of reading
(+ ±2 L/s). Counts and status flags carry no noise.

Faults (see :class:`simulator.scenario.Fault`): *stuck* holds one value, *spike* adds a
magnitude, *drift* adds an offset growing linearly from the fault start, *dropout* gives NaN
with ``source_ok`` False (or no reading at all with ``omit=1``). Outages act on the whole feed
and are handled by the feed, not here.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import NamedTuple

import numpy as np

from ops_logic.tags import TagDef
from simulator.noise import gaussian, time_counter

__all__ = [
    "DRIFT_RATE_PER_H",
    "NOISE_SIGMA",
    "SPIKE_MAGNITUDE",
    "ActiveFault",
    "Samples",
    "add_noise",
    "apply_faults",
]

NOISE_SIGMA: dict[str, float] = {
    "water_level": 0.0015, "head_differential": 0.0015, "temperature": 0.025,
    "dissolved_oxygen": 0.025, "position": 0.001, "opening": 0.1, "count": 0.0,
    "status": 0.0, "flow": 0.001,
}
"""Standard deviation of the measurement noise by quantity, in the tag's SI unit (flow: plus
0.5 % of the reading)."""
FLOW_RELATIVE_SIGMA = 0.005

SPIKE_MAGNITUDE: dict[str, float] = {
    "water_level": 0.5, "head_differential": 0.3, "temperature": 4.0, "dissolved_oxygen": 3.0,
    "position": 0.5, "opening": 20.0, "count": 2.0, "status": 1.0, "flow": 0.5,
}
"""Default spike size by quantity (tag units)."""

DRIFT_RATE_PER_H: dict[str, float] = {
    "water_level": 0.02, "head_differential": 0.01, "temperature": 0.2,
    "dissolved_oxygen": 0.15, "position": 0.02, "opening": 1.0, "count": 0.5, "status": 0.0,
    "flow": 0.02,
}
"""Default drift rate by quantity (tag units per hour)."""


class Samples(NamedTuple):
    """Readings of one tag at many times: value, the source's good flag, and whether a reading
    exists at all (False in an omitting dropout)."""

    values: np.ndarray
    ok: np.ndarray
    present: np.ndarray


class ActiveFault(NamedTuple):
    """A fault in plant time: ``start_s``/``end_s`` [s since the plant start]."""

    tag: str
    kind: str
    start_s: float
    end_s: float
    params: dict[str, float]


def add_noise(tag: TagDef, key: int, t_s: np.ndarray, values: np.ndarray) -> np.ndarray:
    """True values plus the tag's measurement noise at times ``t_s`` [s since start].

    >>> from ops_logic.tags import TagDef
    >>> tag = TagDef("x.do", "x", "dissolved_oxygen", "mg/L", "do", "plant", "ns=2;i=1", 10.0)
    >>> t = np.arange(0.0, 50_000.0, 1.0)
    >>> noisy = add_noise(tag, 1, t, np.full(t.size, 8.0))
    >>> round(float(np.std(noisy - 8.0)), 3)
    0.025
    """
    sigma = NOISE_SIGMA.get(tag.quantity, 0.0)
    if tag.quantity == "flow":
        sigma = sigma + FLOW_RELATIVE_SIGMA * np.abs(values)
    elif sigma == 0.0:
        return values
    return values + sigma * gaussian(key, time_counter(t_s))


def apply_faults(tag: TagDef, faults: Sequence[ActiveFault], t_s: np.ndarray,
                 values: np.ndarray, value_at: Callable[[float], float]) -> Samples:
    """Apply the tag's faults, in the order given, to measured ``values`` at ``t_s``.

    ``value_at(t)`` gives the measured value (noise, no faults) at one time: what a stuck
    sensor holds when no ``value`` is given.

    >>> from ops_logic.tags import TagDef
    >>> tag = TagDef("x.t", "x", "temperature", "degC", "water_temp", "plant", "ns=2;i=1", 10.0)
    >>> t = np.arange(0.0, 7200.0, 600.0)
    >>> f = [ActiveFault("x.t", "drift", 1800.0, 5400.0, {"rate_per_h": 1.0})]
    >>> s = apply_faults(tag, f, t, np.full(t.size, 10.0), lambda t: 10.0)
    >>> s.values.round(2).tolist()
    [10.0, 10.0, 10.0, 10.0, 10.17, 10.33, 10.5, 10.67, 10.83, 10.0, 10.0, 10.0]
    """
    values = np.array(values, dtype=float)
    ok = np.ones(values.shape, dtype=bool)
    present = np.ones(values.shape, dtype=bool)
    for f in faults:
        inside = (t_s >= f.start_s) & (t_s < f.end_s)
        if not inside.any():
            continue
        if f.kind == "stuck":
            held = f.params.get("value")
            values[inside] = value_at(f.start_s) if held is None else float(held)
        elif f.kind == "spike":
            values[inside] += f.params.get("magnitude", SPIKE_MAGNITUDE.get(tag.quantity, 1.0))
        elif f.kind == "drift":
            rate = f.params.get("rate_per_h", DRIFT_RATE_PER_H.get(tag.quantity, 0.0)) / 3600.0
            values[inside] += rate * (t_s[inside] - f.start_s)
        elif f.kind == "dropout":
            values[inside] = np.nan
            ok[inside] = False
            if f.params.get("omit", 0.0):
                present[inside] = False
    return Samples(values, ok, present)
