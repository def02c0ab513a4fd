"""The river and the dam around a simulated fishway: closed-form signals of time, vectorised.

Everything here is a function of the time ``t`` [s since the plant start] (a numpy array) and of
the plant's seed, so any instant can be evaluated again with the same result and a day of data
costs one array expression. The shapes are our own invention, tuned to look like a run-of-river
dam with a powerhouse on a daily generation pattern; no published data set is reproduced:

- **forebay**: drawn down while generation exceeds inflow (the cumulative of the daily
  generation pattern), plus slow drift, plus sudden drops (scheduled or random, recovering
  exponentially); mapped into each fishway's ``forebay_range`` and occasionally leaving it;
- **tailwater**: a stage–discharge power law of river flow (seasonal, slow hydrograph) plus
  powerhouse discharge, whose daily pattern arrives ``POWERHOUSE_LAG_S`` later;
- **water temperature**: seasonal and daily cycles, drift, and warm spells;
- **dissolved oxygen**: saturation at the water temperature and site pressure (Benson & Krause
  through :func:`ops_logic.water_quality.oxygen_solubility`) times a daily photosynthesis cycle,
  with low-oxygen events;
- **debris** at trash racks and pickets: a load accumulating at a base rate (faster in debris
  pulses) and reset by cleanings; the head loss follows :func:`screen_head_loss_m`.

References
----------
.. [Blevins1984] Blevins, R. D. (1984). Applied Fluid Dynamics Handbook. Van Nostrand Reinhold
   (loss coefficient of square-edged grills and bar screens, as implemented in
   ``fluids.square_edge_grill``).
"""

from __future__ import annotations

import bisect
import math
from datetime import datetime
from zoneinfo import ZoneInfo

import numpy as np
import numpy.typing as npt

from ops_logic.hydraulics import G
from ops_logic.site import Site
from ops_logic.water_quality import barometric_pressure_kpa, oxygen_solubility
from simulator.noise import key_of, uniform, value_noise
from simulator.scenario import Scenario, seasonal_temperature_c

__all__ = [
    "POWERHOUSE_LAG_S",
    "Environment",
    "blockage_fraction",
    "screen_head_loss_m",
    "smooth_window",
]

DAY_S = 86400.0
YEAR_DAYS = 365.2425
POWERHOUSE_LAG_S = 2700.0
"""Delay of the powerhouse discharge pattern in the tailwater [s] (an invented value)."""
BLOCKAGE_MAX = 0.85
"""Largest blocked share of a rack's open area (a fully clogged rack still passes water)."""
_BASE_DEBRIS_RATE_PER_S = {"trash_rack": 1.0 / (4.0 * DAY_S), "picket": 1.0 / (6.0 * DAY_S)}


def screen_head_loss_m(flow_m3s: npt.ArrayLike, gross_area_m2: float,
                       open_fraction: npt.ArrayLike) -> np.ndarray:
    r"""Head loss across a square-edged bar rack or grill (Blevins 1984).

    .. math::
        \Delta h = K \frac{V^2}{2g}, \quad V = \frac{Q}{A},
        \quad K = \frac{0.5(1 - \alpha) + (1 - \alpha^2)}{\alpha^2}

    Parameters
    ----------
    flow_m3s : array-like
        Flow through the rack, Q [m³/s], ≥ 0
    gross_area_m2 : float
        Gross (approach) area of the rack, A [m²], > 0
    open_fraction : array-like
        Open share of the area after blockage, α [-], within [0.05, 1]

    Returns
    -------
    head_loss_m : numpy.ndarray
        Δh [m]

    Validity: as for the source's thin-grill form (no friction term); outside the limits above a
    ``ValueError`` is raised.

    >>> round(float(screen_head_loss_m(1.0, 2.0, 0.45)), 5)
    0.06751

    References: [Blevins1984]_; the same K as ``fluids.square_edge_grill(alpha)``.
    """
    q = np.asarray(flow_m3s, dtype=float)
    a = np.asarray(open_fraction, dtype=float)
    if not gross_area_m2 > 0.0:
        raise ValueError(f"gross_area_m2 must be positive, got {gross_area_m2}")
    if np.any(q < 0.0) or not np.all(np.isfinite(q)):
        raise ValueError("flow_m3s must be finite and ≥ 0")
    if np.any(a < 0.05) or np.any(a > 1.0) or not np.all(np.isfinite(a)):
        raise ValueError("open_fraction must be within [0.05, 1]")
    k = (0.5 * (1.0 - a) + (1.0 - a * a)) / (a * a)
    v = q / gross_area_m2
    return k * v * v / (2.0 * G)


def blockage_fraction(debris_load: npt.ArrayLike) -> np.ndarray:
    r"""Blocked share of a rack's open area for an accumulated debris load D [-] ≥ 0.

    .. math:: b = b_{max}\,(1 - e^{-D}), \quad b_{max} = 0.85

    An invented saturating form (no published source): the first debris blocks the most.

    >>> [round(float(b), 3) for b in blockage_fraction([0.0, 1.0, 10.0])]
    [0.0, 0.537, 0.85]
    """
    d = np.asarray(debris_load, dtype=float)
    if np.any(d < 0.0):
        raise ValueError("debris_load must be ≥ 0")
    return BLOCKAGE_MAX * -np.expm1(-d)


def smooth_window(t: npt.ArrayLike, start: float, end: float, ramp: float) -> np.ndarray:
    r"""Weight 0 → 1 → 0: smoothstep ramps of ``ramp`` [s] after ``start`` and before ``end``.

    .. math:: w = s\!\left(\min\!\left(\frac{t - t_0}{r}, \frac{t_1 - t}{r}, 1\right)\right),
              \quad s(x) = 3x^2 - 2x^3 \text{ on } [0, 1]

    >>> smooth_window([0.0, 5.0, 10.0, 50.0, 100.0], 0.0, 100.0, 10.0).tolist()
    [0.0, 0.5, 1.0, 1.0, 0.0]
    """
    x = np.clip(np.minimum((np.asarray(t, dtype=float) - start) / ramp,
                           (end - np.asarray(t, dtype=float)) / ramp), 0.0, 1.0)
    return x * x * (3.0 - 2.0 * x)


def _generation_pattern() -> tuple[np.ndarray, np.ndarray]:
    """Daily generation g(h) in [0, 1] (morning and evening peaks) and the normalised
    cumulative storage change F(h) in [−1, 1] on a one-minute grid."""
    h = np.arange(1441) / 60.0

    def bump(centre: float, width: float) -> np.ndarray:
        d = (h - centre + 12.0) % 24.0 - 12.0
        return np.exp(-0.5 * (d / width) ** 2)

    g = 0.2 + 0.5 * bump(8.5, 1.8) + 0.65 * bump(19.0, 2.2)
    g = g / g.max()
    f = np.concatenate([[0.0], np.cumsum(g[:-1] - g[:-1].mean())])
    f = f - 0.5 * (f.max() + f.min())
    return g, f / np.abs(f).max()


_GEN, _STORAGE = _generation_pattern()
_GRID_H = np.arange(1441) / 60.0


class Environment:
    """Closed-form signals of one site for a plant start, seed and scenario.

    Times are float seconds since the plant start (arrays); levels are SI [m]. Cleanings may be
    added while the plant runs (:meth:`add_cleaning`); nothing else changes after construction.
    """

    def __init__(self, site: Site, start: datetime, seed: int, scenario: Scenario):
        self.site = site
        self.seed = seed
        self.start = start
        self.start_epoch_s = start.timestamp()
        offset = ZoneInfo(site.site.time_zone).utcoffset(start)
        self.utc_offset_s = offset.total_seconds() if offset is not None else 0.0
        self.pressure_kpa = float(barometric_pressure_kpa(site.site.elevation))
        self.scenario = scenario

        def rel(t: datetime) -> float:
            return (t - start).total_seconds()

        self._drops = [(rel(d.at), d.depth_m, d.fall_s, d.recovery_s)
                       for d in scenario.forebay_drops]
        self._warm = [(rel(w.start), rel(w.end), w.peak_c, w.ramp_s)
                      for w in scenario.warm_spells]
        self._low_do = [(rel(e.start), rel(e.end), e.min_do_mg_l, e.ramp_s)
                        for e in scenario.low_oxygen]
        self._pulses = [(rel(p.start), rel(p.end), p.rate_factor, p.where, p.fishway_id)
                        for p in scenario.debris]
        ids = {f.id for f in site.fishways}
        for p in scenario.debris:
            if p.fishway_id is not None and p.fishway_id not in ids:
                raise ValueError(f"debris pulse: no fishway {p.fishway_id!r} at this site")
        self._cleanings: dict[tuple[str, str], list[float]] = {
            (f.id, w): [0.0] for f in site.fishways for w in ("trash_rack", "picket")}
        for c in scenario.cleanings:
            self.add_cleaning(c.where, rel(c.at), c.fishway_id)
        self._interval = {"trash_rack": scenario.rack_cleaning_interval_s,
                          "picket": scenario.picket_cleaning_interval_s}
        self._k = {name: key_of(seed, "environment", name) for name in (
            "forebay", "forebay_fast", "river", "river_fast", "day", "temp", "temp_fast",
            "do", "drops")}

    # -- clocks -------------------------------------------------------------------------------
    def local_hour(self, t: np.ndarray) -> np.ndarray:
        """Hour of the local day [h] (the site's UTC offset at the plant start)."""
        return ((self.start_epoch_s + self.utc_offset_s + t) % DAY_S) / 3600.0

    def day_of_year(self, t: np.ndarray) -> np.ndarray:
        """Day of the year (0 at 1 January) as a float, of local time."""
        days = (self.start_epoch_s + self.utc_offset_s + t) / DAY_S
        return (days - 0.0) % YEAR_DAYS

    def generation(self, t: np.ndarray) -> np.ndarray:
        """Powerhouse generation share [0–1]: the daily pattern times a day-to-day factor."""
        day_factor = 0.85 + 0.15 * value_noise(self._k["day"], t, DAY_S)
        return np.interp(self.local_hour(t), _GRID_H, _GEN) * day_factor

    # -- levels -------------------------------------------------------------------------------
    def forebay_drop_m(self, t: np.ndarray) -> np.ndarray:
        """Total depth of the sudden drops in force at ``t`` [m] (scheduled and random)."""
        out = np.zeros_like(t)
        drops = list(self._drops)
        rate = self.scenario.random_forebay_drops_per_day
        if rate > 0.0 and t.size:
            first = max(int(math.floor((float(t.min()) - 30 * 3600.0) / 3600.0)), 0)
            last = int(math.floor(float(t.max()) / 3600.0))
            if last >= first:
                slots = np.arange(first, last + 1, dtype=np.int64).view(np.uint64)
                k = self._k["drops"]
                hit = uniform(k, slots, 0) < rate / 24.0
                for s in slots[hit]:
                    c = np.array([s], dtype=np.uint64)
                    u = [float(uniform(k, c, i)[0]) for i in range(1, 5)]
                    drops.append((float(s) * 3600.0 + 3600.0 * u[0], 0.2 + 0.35 * u[1],
                                  300.0 + 900.0 * u[2], 7200.0 + 10800.0 * u[3]))
        for t0, depth, fall, rec in drops:
            dt = t - t0
            falling = np.clip(dt / fall, 0.0, 1.0)
            recovering = np.exp(-np.maximum(dt - fall, 0.0) / rec)
            out += np.where(dt > 0.0, depth * falling * recovering, 0.0)
        return out

    def forebay_m(self, fishway_id: str, t: np.ndarray) -> np.ndarray:
        """Forebay level [m] at the fishway: normalised signal mapped into its range."""
        lo, hi = self.site.fishway(fishway_id).forebay_range
        x = (0.55 - 0.25 * np.interp(self.local_hour(t), _GRID_H, _STORAGE)
             + 0.22 * value_noise(self._k["forebay"], t, 2.5 * DAY_S)
             + 0.05 * value_noise(self._k["forebay_fast"], t, 5 * 3600.0))
        return lo + x * (hi - lo) - self.forebay_drop_m(t)

    def river_flow_m3s(self, t: np.ndarray) -> np.ndarray:
        """River inflow [m³/s]: seasonal high flow in late spring, a slow hydrograph."""
        season = 1.0 + 0.35 * np.cos(2.0 * np.pi * (self.day_of_year(t) - 135.0) / YEAR_DAYS)
        drift = (1.0 + 0.3 * value_noise(self._k["river"], t, 4 * DAY_S)
                 + 0.08 * value_noise(self._k["river_fast"], t, 12 * 3600.0))
        return 900.0 * season * drift

    def tailwater_m(self, fishway_id: str, t: np.ndarray,
                    forebay_m: np.ndarray | None = None) -> np.ndarray:
        r"""Tailwater level [m]: a power-law rating of river plus lagged powerhouse flow,

        .. math:: y = 0.08 + 0.85\,(Q / Q_{ref})^{0.6}, \quad z = z_{lo} + y\,(z_{hi} - z_{lo})

        kept at least 0.5 m below the forebay (``forebay_m`` if already computed)."""
        f = self.site.fishway(fishway_id)
        lo, hi = f.tailwater_range
        q = self.river_flow_m3s(t) + 700.0 * self.generation(t - POWERHOUSE_LAG_S)
        z = lo + (0.08 + 0.85 * (q / 2600.0) ** 0.6) * (hi - lo)
        fb = self.forebay_m(fishway_id, t) if forebay_m is None else forebay_m
        return np.minimum(z, fb - 0.5)

    # -- water quality ------------------------------------------------------------------------
    def temperature_c(self, t: np.ndarray) -> np.ndarray:
        """Water temperature [°C]: seasonal (4 °C late January to 18 °C late July), daily
        (±0.4 °C, warmest at 16:00), drift, and warm spells (daily mean → ``peak_c``, ±0.9 °C
        daily)."""
        doy = self.day_of_year(t)
        hour = self.local_hour(t)
        season = seasonal_temperature_c(doy)
        daily = np.cos(2.0 * np.pi * (hour - 16.0) / 24.0)
        drift = (0.6 * value_noise(self._k["temp"], t, 3 * DAY_S)
                 + 0.15 * value_noise(self._k["temp_fast"], t, 8 * 3600.0))
        temp = season + 0.4 * daily + drift
        for t0, t1, peak, ramp in self._warm:
            w = smooth_window(t, t0, t1, ramp)
            temp = (1.0 - w) * temp + w * (peak + 0.9 * daily + 0.5 * drift)
        return np.clip(temp, 0.05, 35.0)

    def do_mg_l(self, t: np.ndarray, temperature_c: np.ndarray) -> np.ndarray:
        """Dissolved oxygen [mg/L]: saturation × (0.93 ± 0.05 daily photosynthesis, highest at
        15:00, ± drift), pulled to about ``min_do_mg_l`` in low-oxygen events."""
        sat = oxygen_solubility(temperature_c, self.pressure_kpa)
        cycle = np.sin(2.0 * np.pi * (self.local_hour(t) - 9.0) / 24.0)
        do = sat * (0.93 + 0.05 * cycle + 0.02 * value_noise(self._k["do"], t, 2 * DAY_S))
        for t0, t1, low, ramp in self._low_do:
            w = smooth_window(t, t0, t1, ramp)
            do = (1.0 - w) * do + w * (low + 0.125 * (1.0 + cycle))
        return do

    # -- debris -------------------------------------------------------------------------------
    def add_cleaning(self, where: str, t: float, fishway_id: str | None = None) -> None:
        """Record a cleaning of the trash rack or pickets at ``t`` (None: every fishway)."""
        ids = [f.id for f in self.site.fishways] if fishway_id is None else [fishway_id]
        for fid in ids:
            if (fid, where) not in self._cleanings:
                raise ValueError(f"cleaning: no fishway {fid!r} or place {where!r}")
            bisect.insort(self._cleanings[(fid, where)], float(t))

    def last_cleaning_s(self, fishway_id: str, where: str, t: np.ndarray) -> np.ndarray:
        """Time of the last cleaning at or before each ``t`` [s since start]."""
        times = np.asarray(self._cleanings[(fishway_id, where)])
        last = times[np.maximum(np.searchsorted(times, t, side="right") - 1, 0)]
        interval = self._interval[where]
        if interval is not None:
            last = np.maximum(last, np.floor(np.maximum(t, 0.0) / interval) * interval)
        return last

    def debris_load(self, fishway_id: str, where: str, t: np.ndarray) -> np.ndarray:
        r"""Debris load D [-] since the last cleaning t_c: the base rate r₀ integrated with
        each pulse's factor,

        .. math:: D(t) = r_0\Big[(t - t_c) + \sum_i (f_i - 1)\,
                  \big|[t_c, t] \cap [a_i, b_i]\big|\Big]
        """
        tc = self.last_cleaning_s(fishway_id, where, t)
        d = t - tc
        for a, b, factor, w, fid in self._pulses:
            if w == where and (fid is None or fid == fishway_id):
                d = d + (factor - 1.0) * np.maximum(np.minimum(t, b) - np.maximum(tc, a), 0.0)
        return _BASE_DEBRIS_RATE_PER_S[where] * np.maximum(d, 0.0)
