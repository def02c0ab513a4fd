"""Seven-day average of the daily maximum water temperature (7DADM).

.. math::
    \\mathrm{7DADM}_d = \\frac{1}{7}\\sum_{k=d-6}^{d} \\max_{t \\in \\text{day } k} T(t)

Days are calendar days in the site's time zone. The 7DADM of day *d* exists only when all seven
days *d − 6 … d* have a daily maximum (each with at least ``min_readings_per_day`` readings); it
is NaN otherwise, never averaged over fewer days. This is the metric of the US EPA Region 10
(2003) temperature guidance, EPA 910-B-03-002 (from memory), whose criteria are in
:data:`ops_logic.alarms.config.TEMPERATURE_7DADM_C`.

>>> import pandas as pd
>>> t = pd.date_range("2026-07-01", periods=7 * 24, freq="h", tz="UTC")
>>> temps = [10.0 + (i // 24) + (i % 24) / 23 for i in range(len(t))]  # max of day k = 11 + k
>>> seven_day_average_daily_max(t, temps).iloc[-1]
np.float64(14.0)
"""
from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

__all__ = ["seven_day_average_daily_max"]


def seven_day_average_daily_max(times: pd.DatetimeIndex | Sequence[object],
                                temperature_c: ArrayLike, *, time_zone: str = "UTC",
                                min_readings_per_day: int = 1) -> pd.Series:
    """The 7DADM for each local day of a temperature series; see the module docstring.

    Parameters
    ----------
    times : tz-aware time stamps of the readings (naive ones are refused as ambiguous)
    temperature_c : water temperature readings [°C]; NaN readings are left out
    time_zone : IANA zone whose calendar days are used (the site's ``time_zone``)
    min_readings_per_day : readings a day needs for its maximum to count (≥ 1)

    Returns
    -------
    temp_7dadm_c : ``pandas.Series`` indexed by local date (every day from the first to the
        last reading), NaN where a 7-day window is incomplete [°C]

    Validity: -5 to 45 °C readings (wider than any fresh water; outside raises ``ValueError``).

    Reference: US EPA Region 10 (2003), EPA 910-B-03-002 (definition, from memory).
    """
    idx = pd.DatetimeIndex(times)
    if idx.tz is None:
        raise ValueError("times must be time-zone aware (naive time stamps are ambiguous)")
    values = np.asarray(temperature_c, dtype=float)
    if values.shape != (len(idx),):
        raise ValueError("times and temperature_c must have the same length")
    if min_readings_per_day < 1:
        raise ValueError("min_readings_per_day must be ≥ 1")
    finite = values[np.isfinite(values)]
    if finite.size and (finite.min() < -5.0 or finite.max() > 45.0):
        raise ValueError("temperature_c outside -5 to 45 °C: not a water temperature in °C")
    if len(idx) == 0:
        return pd.Series([], dtype=float, name="temp_7dadm_c")
    days = idx.tz_convert(time_zone).normalize().tz_localize(None)
    s = pd.Series(values, index=days).dropna()
    grouped = s.groupby(level=0)
    daily_max = grouped.max().where(grouped.count() >= min_readings_per_day)
    full = pd.date_range(days.min(), days.max(), freq="D")
    daily_max = daily_max.reindex(full)
    out = daily_max.rolling(7, min_periods=7).mean()
    out.index = out.index.date
    return out.rename("temp_7dadm_c")
