"""Counter-based random numbers for the simulated plant: deterministic in (key, time), vectorised.

The plant must give the same reading whenever the same instant is sampled again (a feed's
``history()`` re-samples the past), whatever order the instants are asked for in. A sequential
generator (``numpy.random.Generator``) cannot do that cheaply, so every random quantity here is a
*hash* of a key (the seed and what is being drawn) and an integer counter (a time in
milliseconds, a knot number, a day number): the SplitMix64 finaliser, applied element-wise to
``uint64`` arrays.

- :func:`uniform` — U(0, 1) from a key and counters;
- :func:`gaussian` — N(0, 1) by the Box–Muller transform of two uniforms;
- :func:`value_noise` — smooth noise in [−1, 1]: uniform knots every ``period_s`` joined by a
  cubic smoothstep, the slow "drift" of the environmental signals.

References
----------
.. [Steele2014] Steele, G. L., Lea, D. and Flood, C. H. (2014). "Fast splittable pseudorandom
   number generators." OOPSLA 2014 (the SplitMix64 finaliser constants).
.. [BoxMuller1958] Box, G. E. P. and Muller, M. E. (1958). "A note on the generation of random
   normal deviates." Annals of Mathematical Statistics 29(2), 610-611.
"""

from __future__ import annotations

import zlib

import numpy as np
import numpy.typing as npt

__all__ = ["gaussian", "key_of", "time_counter", "uniform", "value_noise"]

_GOLDEN = np.uint64(0x9E3779B97F4A7C15)
_M1 = np.uint64(0xBF58476D1CE4E5B9)
_M2 = np.uint64(0x94D049BB133111EB)
_S30, _S27, _S31, _S11 = np.uint64(30), np.uint64(27), np.uint64(31), np.uint64(11)
_TO_UNIT = 2.0 ** -53


def _mix(x: np.ndarray) -> np.ndarray:
    """SplitMix64 finaliser of a ``uint64`` array (wrapping arithmetic, no warnings)."""
    z = x + _GOLDEN
    z = (z ^ (z >> _S30)) * _M1
    z = (z ^ (z >> _S27)) * _M2
    return z ^ (z >> _S31)


def key_of(seed: int, *parts: str | int) -> int:
    """A 64-bit key from the seed and names (a tag name, ``"noise"``, ``"forebay"``).

    >>> key_of(0, "east.do") == key_of(0, "east.do"), key_of(0, "a") == key_of(1, "a")
    (True, False)
    """
    text = "\x1f".join(str(p) for p in parts).encode()
    lo, hi = zlib.crc32(text), zlib.adler32(text)
    base = np.array([(seed & 0xFFFFFFFF) << 32 | lo], dtype=np.uint64)
    return int(_mix(_mix(base) ^ np.uint64(hi))[0])


def time_counter(t_s: npt.ArrayLike) -> np.ndarray:
    """Integer counter for a time [s since the plant start]: the millisecond, as ``uint64``.

    >>> time_counter([0.0, 0.0004, 1.0]).tolist()
    [0, 0, 1000]
    """
    ms = np.round(np.asarray(t_s, dtype=float) * 1000.0).astype(np.int64)
    return ms.view(np.uint64)


def uniform(key: int, counter: npt.ArrayLike, stream: int = 0) -> np.ndarray:
    """U(0, 1) for each counter (``uint64`` or integer array), different for each stream.

    >>> u = uniform(7, np.arange(100_000, dtype=np.uint64))
    >>> bool(0.0 <= u.min() and u.max() < 1.0), round(float(u.mean()), 2)
    (True, 0.5)
    """
    c = np.asarray(counter).astype(np.uint64, copy=False)
    k = _mix(np.array([key ^ (stream * 0x632BE59BD9B4E019 & 0xFFFFFFFFFFFFFFFF)],
                      dtype=np.uint64))
    z = _mix(c ^ k)
    return (z >> _S11).astype(np.float64) * _TO_UNIT


def gaussian(key: int, counter: npt.ArrayLike) -> np.ndarray:
    r"""N(0, 1) for each counter by the Box–Muller transform:

    .. math:: z = \sqrt{-2\ln(1 - u_1)}\,\cos(2\pi u_2)

    >>> z = gaussian(11, np.arange(200_000, dtype=np.uint64))
    >>> abs(float(z.mean())) < 0.01, round(float(z.std()), 2)
    (True, 1.0)
    """
    u1 = uniform(key, counter, 1)
    u2 = uniform(key, counter, 2)
    return np.sqrt(-2.0 * np.log1p(-u1)) * np.cos(2.0 * np.pi * u2)


def value_noise(key: int, t_s: npt.ArrayLike, period_s: float) -> np.ndarray:
    r"""Smooth noise in [−1, 1]: knots u_k ~ U(−1, 1) at t = k·period joined by a smoothstep.

    .. math:: n(t) = u_k + (u_{k+1} - u_k)\,s(f), \quad s(f) = 3f^2 - 2f^3,
              \quad k = \lfloor t/T \rfloor, \; f = t/T - k

    Parameters
    ----------
    key : int
        What is drawn (from :func:`key_of`)
    t_s : array-like
        Times [s]
    period_s : float
        Knot spacing T [s], > 0

    >>> n = value_noise(3, np.linspace(0.0, 864000.0, 5001), 86400.0)
    >>> bool(-1.0 <= n.min() and n.max() <= 1.0), float(np.abs(np.diff(n)).max()) < 0.01
    (True, True)
    """
    if not period_s > 0.0:
        raise ValueError(f"period_s must be positive, got {period_s}")
    x = np.asarray(t_s, dtype=float) / period_s
    k = np.floor(x)
    f = x - k
    ki = k.astype(np.int64).view(np.uint64)
    u0 = 2.0 * uniform(key, ki) - 1.0
    u1 = 2.0 * uniform(key, ki + np.uint64(1)) - 1.0
    s = f * f * (3.0 - 2.0 * f)
    return u0 + (u1 - u0) * s
