"""Seasons, winter labels and blocks.

A season is any run of consecutive months named by their initials (DJF, NDJFM, JJA...). A season
that crosses the turn of the year is labelled by the year of its January (December 2009 to
February 2010 is winter 2010). A block is one member in one season: the unit of independence
for every statistic and every resampling test (DESIGN.md principle 2). Data with no season
label (no `season_year` coordinate) count each member as one block.
"""

from __future__ import annotations

import itertools
import warnings
from collections.abc import Sequence

import numpy as np
import pandas as pd
import xarray as xr

from . import timeaxis
from .errors import ConfigError, InputWarning, TimeStepError

_INITIALS = "JFMAMJJASOND"

__all__ = ["block_ids", "blocks", "season_months", "season_year", "select_season"]


def season_months(season: str | Sequence[int]) -> tuple[int, ...]:
    """Months (1-12) of a season given by initials ("DJF", "NDJFM") or a list of month numbers.

    Raises `ConfigError` for initials that are not a run of consecutive months or that could mean
    more than one run (a lone "J" or "M").
    """
    if not isinstance(season, str):
        months = tuple(int(m) for m in season)
        ok = len(months) > 0 and all(1 <= m <= 12 for m in months)
        ok = ok and all((b - a) % 12 == 1 for a, b in itertools.pairwise(months))
        if not ok or len(set(months)) != len(months):
            raise ConfigError.make(
                "season",
                f"months {list(season)}",
                "a run of consecutive months 1-12",
                "give e.g. [12, 1, 2] or initials such as 'DJF'",
            )
        return months
    text = season.strip().upper()
    starts = [
        s for s in range(12) if len(text) <= 12 and (_INITIALS * 2)[s : s + len(text)] == text
    ]
    if len(text) == 0 or not starts:
        raise ConfigError.make(
            "season",
            repr(season),
            "initials of consecutive months such as 'DJF' or 'NDJFM'",
            "write the months' initials in calendar order",
        )
    if len(starts) > 1 and len(text) < 12:
        raise ConfigError.make(
            "season",
            f"{season!r}, which fits {len(starts)} runs of months",
            "initials that name one run of months",
            "use more months or give month numbers, e.g. [6] for June",
        )
    return tuple((starts[0] + k) % 12 + 1 for k in range(len(text)))


def _season_name(months: Sequence[int]) -> str:
    return "".join(_INITIALS[m - 1] for m in months)


def season_year(time: xr.DataArray, season: str | Sequence[int]) -> xr.DataArray:
    """The season label of each time: the year of January for seasons that cross the year's turn.

    Times outside the season get -1 (they are dropped by `select_season`).
    """
    months = season_months(season)
    month = time.dt.month
    year = time.dt.year
    wraps = 1 in months and 12 in months and len(months) < 12
    # Months before the turn of the year belong to the following January's season.
    before_turn = [m for m in months[: months.index(1)]] if wraps else []
    label = year + month.isin(before_turn).astype(int)
    label = label.where(month.isin(list(months)), -1)
    label.name = "season_year"
    label.attrs = {
        "long_name": f"{_season_name(months)} season label (year of January for winters)",
        "units": "1",
    }
    return label


def select_season(obj: xr.DataArray | xr.Dataset, season: str | Sequence[int] = "DJF"):
    """Keep the times inside `season` and add a `season_year` coordinate along time.

    Parameters
    ----------
    obj : DataArray or Dataset in canonical form, with a decoded `time` coordinate.
    season : initials of consecutive months ("DJF", "NDJFM", "JJA") or month numbers.

    Returns
    -------
    The same kind of object, restricted to the season, with `season_year` (int) on `time` and
    attributes `season` and `incomplete_seasons` (labels of seasons cut short by the data).
    Seasons cut short are kept and reported with an `InputWarning`.
    """
    if "time" not in obj.dims:
        raise TimeStepError.make(
            "dimension 'time'",
            f"dims {tuple(obj.dims)}",
            "a time dimension",
            "open the data with westerlies.open_dataset first",
        )
    if not timeaxis.has_dates(obj["time"]):
        raise TimeStepError.make(
            "coordinate 'time'",
            "values without dates",
            "decoded dates (CF units and calendar)",
            "give the time coordinate CF 'units' such as 'days since 2000-01-01' and a calendar",
        )
    months = season_months(season)
    labels = season_year(obj["time"], months)
    keep = labels >= 0
    out = obj.isel(time=np.flatnonzero(keep.values))
    out = out.assign_coords(season_year=("time", labels.values[keep.values].astype(int)))
    out["season_year"].attrs = labels.attrs
    name = _season_name(months)
    incomplete = _incomplete_seasons(out, months)
    out.attrs = {**obj.attrs, "season": name, "incomplete_seasons": list(map(int, incomplete))}
    if incomplete:
        warnings.warn(
            f"season {name}: {len(incomplete)} season(s) cut short by the data were kept "
            f"(labels {', '.join(map(str, incomplete[:10]))}{'...' * (len(incomplete) > 10)})",
            InputWarning,
            stacklevel=2,
        )
    return out


def _incomplete_seasons(obj, months: Sequence[int]) -> list[int]:
    """Season labels whose time samples do not span the whole season."""
    if obj.sizes.get("time", 0) == 0:
        return []
    kind = timeaxis.time_kind(obj["time"]) if obj.sizes["time"] > 1 else "seasonal"
    frame = pd.DataFrame({"label": obj["season_year"].values, "month": obj["time"].dt.month.values})
    if kind == "seasonal":
        return []
    first, last = months[0], months[-1]
    out = []
    for label, group in frame.groupby("label", sort=True):
        present = set(group["month"])
        if not set(months) <= present:
            out.append(int(label))
            continue
        if kind in ("daily", "subdaily"):
            times = obj["time"].values[(frame["label"] == label).to_numpy()]
            start, end = times[0], times[-1]
            if _day(start) > 1 and _month(start) == first:
                out.append(int(label))
            elif _day(end) < _days_in_month(end) and _month(end) == last:
                out.append(int(label))
    return out


def _month(t) -> int:
    return int(pd.Timestamp(t).month) if isinstance(t, np.datetime64) else int(t.month)


def _day(t) -> int:
    return int(pd.Timestamp(t).day) if isinstance(t, np.datetime64) else int(t.day)


def _days_in_month(t) -> int:
    return (
        int(pd.Timestamp(t).days_in_month) if isinstance(t, np.datetime64) else int(t.daysinmonth)
    )


def block_ids(obj: xr.DataArray | xr.Dataset) -> xr.DataArray:
    """Integer block number of each (member, time) sample, 0..n_blocks-1.

    Blocks are (member, season_year) pairs numbered member by member, seasons in order. Without
    a `season_year` coordinate each member is one block. Without a `member` dimension the data
    are one member.
    """
    n_time = obj.sizes["time"]
    members = obj["member"].values if "member" in obj.dims else np.array([0])
    if "season_year" in obj.coords:
        seasons = np.asarray(obj["season_year"].values)
        uniq, inverse = np.unique(seasons, return_inverse=True)
    else:
        uniq, inverse = np.array([0]), np.zeros(n_time, dtype=int)
    ids = np.arange(len(members))[:, None] * len(uniq) + inverse[None, :]
    # Renumber so that only blocks present are counted, keeping the order.
    _, ids = np.unique(ids, return_inverse=True)
    ids = ids.reshape(len(members), n_time)
    coords = {"time": obj["time"]}
    if "member" in obj.dims:
        coords["member"] = obj["member"]
    da = xr.DataArray(ids, dims=("member", "time"), coords=coords, name="block")
    if "member" not in obj.dims:
        da = da.isel(member=0, drop=True)
    da.attrs = {"long_name": "block number (one member in one season)", "units": "1"}
    return da


def blocks(obj: xr.DataArray | xr.Dataset) -> pd.DataFrame:
    """One row per block: member, season_year, first and last time, number of time samples."""
    ids = block_ids(obj)
    if "member" not in ids.dims:
        ids = ids.expand_dims(member=[0])
    seasons = (
        np.asarray(obj["season_year"].values)
        if "season_year" in obj.coords
        else np.full(obj.sizes["time"], -1)
    )
    times = obj["time"].values
    rows = []
    for i, member in enumerate(ids["member"].values):
        row_ids = ids.values[i]
        for b in np.unique(row_ids):
            where = np.flatnonzero(row_ids == b)
            rows.append(
                {
                    "block": int(b),
                    "member": member,
                    "season_year": int(seasons[where[0]]),
                    "start": times[where[0]],
                    "end": times[where[-1]],
                    "n_times": int(where.size),
                }
            )
    return pd.DataFrame(rows).set_index("block")
