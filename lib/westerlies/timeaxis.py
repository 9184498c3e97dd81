"""Facts about a time axis: calendar, time step, and the kind of sampling.

Works the same for numpy datetime64 and cftime axes (360_day, noleap, all_leap, ...).
"""

from __future__ import annotations

from typing import Literal

import numpy as np
import pandas as pd
import xarray as xr

from .errors import TimeStepError

TimeKind = Literal["subdaily", "daily", "monthly", "seasonal", "single"]

#: Days in a year for each CF calendar name (None: varies, leap years).
CALENDAR_YEAR_DAYS: dict[str, int | None] = {
    "standard": None,
    "gregorian": None,
    "proleptic_gregorian": None,
    "julian": None,
    "noleap": 365,
    "365_day": 365,
    "all_leap": 366,
    "366_day": 366,
    "360_day": 360,
}


def calendar(time: xr.DataArray) -> str:
    """CF calendar name of a decoded time coordinate ("standard" for numpy datetime64)."""
    if np.issubdtype(time.dtype, np.datetime64):
        return "standard"
    cal = getattr(time.dt, "calendar", None) or "standard"
    return "standard" if cal == "gregorian" else cal


def has_dates(time: xr.DataArray) -> bool:
    """True when the time coordinate holds decoded dates (not plain numbers)."""
    return np.issubdtype(time.dtype, np.datetime64) or time.dtype == object


def step_days(time: xr.DataArray) -> np.ndarray:
    """Differences between consecutive times, in days (float). Empty for fewer than two times."""
    if time.size < 2:
        return np.zeros(0)
    index = time.to_index()
    deltas = pd.TimedeltaIndex(index[1:] - index[:-1])
    return np.asarray(deltas / pd.Timedelta(days=1), dtype=float)


def median_step_days(time: xr.DataArray) -> float:
    """The typical time step in days (median of positive steps); NaN for a single time."""
    steps = step_days(time)
    steps = steps[steps > 0]
    return float(np.median(steps)) if steps.size else float("nan")


def time_kind(time: xr.DataArray) -> TimeKind:
    """Classify the sampling: sub-daily, daily, monthly, seasonal (one value per season or year).

    Thresholds on the median step (common practice): below 0.9 day sub-daily, up to 1.5 days
    daily, 27 to 32 days monthly, above 32 days seasonal.
    """
    step = median_step_days(time)
    if np.isnan(step):
        return "single"
    if step < 0.9:
        return "subdaily"
    if step <= 1.5:
        return "daily"
    if 27 <= step <= 32:
        return "monthly"
    if step > 32:
        return "seasonal"
    raise TimeStepError.make(
        "time axis",
        f"a typical step of {step:g} days",
        "sub-daily, daily, monthly or one value per season",
        "resample the data to daily or monthly means before using westerlies",
    )


def require_daily(time: xr.DataArray, what: str) -> None:
    """Raise `TimeStepError` unless the time axis is daily, naming the detected step."""
    kind = time_kind(time)
    if kind != "daily":
        step = median_step_days(time)
        fix = (
            "open the data with westerlies.open_dataset(..., daily='mean') for daily means"
            if kind == "subdaily"
            else "give daily data for this diagnostic"
        )
        raise TimeStepError.make(
            f"{what}: time axis", f"{kind} data (typical step {step:g} days)", "daily data", fix
        )
