"""Climatologies and anomalies, pooled over all members and years.

- Daily data: a smoothed day-of-year climatology. The raw mean of each calendar day is smoothed by
  local quadratic regression with a Gaussian kernel (standard deviation ``smoothing_days``, 15 by
  default) over the days the data cover. Common practice is a 31-day running mean or a few annual
  harmonics; both are biased at the ends of a run that covers only part of the year (a November-
  March ensemble), where the local fit stays unbiased for a smooth seasonal cycle. Days of the
  year that no data come within two kernel widths of are NaN.
- Calendars: 360_day, noleap/365_day and all_leap/366_day use their own day of year; standard
  calendars use the 365-day position of the date (month and day), with 29 February sharing the
  slot of 28 February.
- Monthly data: the mean of each calendar month. One value per season: the time mean.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from . import timeaxis
from .errors import CalendarError, GridError, InputError

__all__ = ["anomalies", "climatology"]

_CUM_NOLEAP = np.cumsum([0, 31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30])


def _slots(time: xr.DataArray) -> tuple[np.ndarray, int]:
    """Day-of-year slot (0-based) of each time and the number of slots of the calendar."""
    cal = timeaxis.calendar(time)
    length = timeaxis.CALENDAR_YEAR_DAYS.get(cal)
    if cal not in timeaxis.CALENDAR_YEAR_DAYS:
        raise CalendarError.make(
            f"time axis (calendar {cal!r})",
            "an unsupported calendar",
            f"one of {sorted(timeaxis.CALENDAR_YEAR_DAYS)}",
            "convert the time axis to a supported calendar",
        )
    if length is not None:
        return time.dt.dayofyear.values.astype(int) - 1, length
    month = time.dt.month.values.astype(int)
    day = time.dt.day.values.astype(int)
    slot = _CUM_NOLEAP[month - 1] + day - 1
    slot[(month == 2) & (day == 29)] = 58  # 29 February shares 28 February's slot
    return slot, 365


def _local_quadratic_matrix(counts: np.ndarray, sigma: float, degree: int = 2) -> np.ndarray:
    """Smoother matrix H (L x L): smoothed = H @ raw_means for a circular axis of L slots.

    Row d is the local polynomial fit at slot d with weights counts_j * exp(-k^2 / 2 sigma^2),
    k the signed circular distance from d to j. Rows without data nearby are NaN.
    """
    n = counts.size
    offsets = (np.arange(n)[None, :] - np.arange(n)[:, None] + n // 2) % n - n // 2
    kernel = np.exp(-0.5 * (offsets / sigma) ** 2) * counts[None, :]
    kernel[np.abs(offsets) > 4 * sigma] = 0.0
    H = np.full((n, n), np.nan)
    for d in range(n):
        w = kernel[d]
        near = (np.abs(offsets[d]) <= 2 * sigma) & (counts > 0)
        if not near.any():
            continue
        used = np.flatnonzero(w > 0)
        deg = min(degree, np.unique(offsets[d, used]).size - 1)
        X = np.vander(offsets[d, used].astype(float) / sigma, deg + 1, increasing=True)
        XtW = X.T * w[used]
        row = np.linalg.solve(XtW @ X, XtW)[0]
        H[d] = 0.0
        H[d, used] = row
    return H


def climatology(da: xr.DataArray, *, smoothing_days: float = 15.0) -> xr.DataArray:
    """Climatology pooled over members and years, in the units of `da`.

    Parameters
    ----------
    da : DataArray in canonical form with a decoded time axis (daily, monthly or seasonal).
    smoothing_days : standard deviation of the Gaussian kernel for daily data, days.

    Returns
    -------
    DataArray over ``dayofyear`` (daily, 1-based), ``month`` (monthly) or no time dim (seasonal),
    with attributes ``climatology_kind``, ``calendar`` and ``method``.
    """
    if "time" not in da.dims:
        raise InputError.make(
            f"variable {da.name!r}",
            f"dims {da.dims}",
            "a time dimension",
            "open the data with westerlies.open_dataset",
        )
    kind = timeaxis.time_kind(da["time"])
    sample = [d for d in ("member", "time") if d in da.dims]
    cal = timeaxis.calendar(da["time"]) if timeaxis.has_dates(da["time"]) else "none"
    if kind in ("daily", "subdaily"):
        slots, length = _slots(da["time"])
        present = np.unique(slots)
        # A one-hot (time, slot) matrix turns the per-day-of-year sums into one product per
        # chunk: far fewer dask tasks than a groupby over hundreds of slots.
        onehot = xr.DataArray(
            (slots[:, None] == present[None, :]).astype(float),
            dims=("time", "slot"),
            coords={"slot": present},
        )
        other = [d for d in sample if d != "time"]  # reduce members first: cheap product
        sums = xr.dot(da.fillna(0.0).sum(other), onehot, dim="time")
        valid = xr.dot(da.notnull().sum(other).astype(float), onehot, dim="time")
        means = sums / valid.where(valid > 0)
        counts = np.zeros(length)
        np.add.at(counts, slots, 1.0)
        H = _local_quadratic_matrix(counts, smoothing_days)[:, present]
        smoother = xr.DataArray(
            np.nan_to_num(H),
            dims=("dayofyear", "slot"),
            coords={"dayofyear": np.arange(1, length + 1)},
        )
        clim = xr.dot(smoother, means.fillna(0.0), dim="slot")
        # Where the smoothed field has no support, or a grid point is always missing: NaN.
        supported = xr.DataArray(np.isfinite(H).all(axis=1), dims="dayofyear")
        always_missing = valid.sum("slot") == 0
        clim = clim.where(supported & ~always_missing)
        method = (
            f"local quadratic regression on day-of-year means, Gaussian kernel sd "
            f"{smoothing_days:g} days, {length}-day year ({cal} calendar)"
        )
    elif kind == "monthly":
        clim = da.groupby("time.month").mean(sample, skipna=True)
        method = "mean of each calendar month"
    else:
        clim = da.mean(sample, skipna=True)
        method = "time mean (one value per season)"
    clim = clim.drop_vars("season_year", errors="ignore")
    clim.name = da.name
    clim.attrs = {
        "units": da.attrs.get("units", ""),
        "long_name": f"climatology of {da.attrs.get('long_name', da.name)}",
        "climatology_kind": "daily" if kind in ("daily", "subdaily") else kind,
        "calendar": cal,
        "method": method,
    }
    return clim


def anomalies(da: xr.DataArray, climatology: xr.DataArray | None = None, **kwargs) -> xr.DataArray:
    """Departures from a climatology: `da` minus its own or a given climatology.

    Parameters
    ----------
    da : DataArray in canonical form (daily, monthly or one value per season).
    climatology : the result of `westerlies.climatology` on another dataset (for example a
        control ensemble, to get responses). Default: `da`'s own climatology.
    **kwargs : passed to `climatology` when it is computed here (``smoothing_days``).

    Returns
    -------
    DataArray like `da`, with ``units`` and ``long_name`` saying it is an anomaly.
    """
    clim = globals()["climatology"](da, **kwargs) if climatology is None else climatology
    kind = timeaxis.time_kind(da["time"])
    kind = "daily" if kind == "subdaily" else kind
    ckind = clim.attrs.get("climatology_kind")
    if ckind != kind and not (ckind == "seasonal" and kind == "single"):
        raise InputError.make(
            f"climatology of {da.name!r}",
            f"a {ckind} climatology",
            f"a {kind} climatology for {kind} data",
            "compute the climatology from data with the same time step",
        )
    _check_same_grid(da, clim)
    if kind == "daily":
        slots, length = _slots(da["time"])
        if clim.sizes["dayofyear"] != length:
            raise CalendarError.make(
                f"climatology of {da.name!r}",
                f"{clim.sizes['dayofyear']} days a year ({clim.attrs.get('calendar')} calendar)",
                f"{length} days a year like the data ({timeaxis.calendar(da['time'])})",
                "compute the climatology from data on the same calendar",
            )
        matched = clim.isel(dayofyear=xr.DataArray(slots, dims="time")).drop_vars("dayofyear")
        out = da - matched.assign_coords(time=da["time"])
    elif kind == "monthly":
        out = (da.groupby("time.month") - clim).drop_vars("month")
    else:
        out = da - clim
    out = out.transpose(*da.dims)
    out.name = da.name
    out.attrs = {
        **{k: v for k, v in da.attrs.items() if k in ("standard_name", "source_variable")},
        "units": da.attrs.get("units", ""),
        "long_name": f"{da.attrs.get('long_name', da.name)} anomaly",
        "method": f"departure from climatology: {clim.attrs.get('method', '')}",
    }
    return out


def _check_same_grid(da: xr.DataArray, clim: xr.DataArray) -> None:
    for dim in ("plev", "lat", "lon"):
        if (dim in da.dims) != (dim in clim.dims):
            raise GridError.make(
                f"climatology of {da.name!r}",
                f"dimension {dim!r} on one side",
                "the same dims as the data",
                "use a climatology of the same field",
            )
        if dim in da.dims and not np.array_equal(da[dim].values, clim[dim].values):
            raise GridError.make(
                f"climatology of {da.name!r}",
                f"a different {dim} coordinate",
                f"the data's {dim} values",
                "regrid one of them to the other",
            )
