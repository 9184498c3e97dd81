"""Lanczos low-pass filtering along time that never reaches across a block edge or a gap.

Method: Duchon (1979), J. Appl. Meteor. 18, 1016-1022. The weights of a low-pass filter with
cutoff frequency fc (cycles per time step) and 2n - 1 weights are

    w_k = [sin(2 pi fc k) / (pi k)] * [sin(pi k / n) / (pi k / n)],   w_0 = 2 fc,

the second factor being Lanczos' sigma factor. We normalize them to unit sum so a constant passes
unchanged. A filtered value needs the full window of (n_weights - 1) / 2 days on each side inside
one run of consecutive days of one block (DESIGN.md principle 2); by default days nearer an edge
of such a run are missing.
"""

from __future__ import annotations

import warnings
from typing import Literal

import numpy as np
import xarray as xr
from scipy import ndimage

from . import seasons, timeaxis
from .errors import ConfigError, InputError, InputWarning, TimeStepError

__all__ = ["lanczos_response", "lanczos_weights", "lowpass", "select_filtered_season"]

EdgeTreatment = Literal["nan", "shrink"]

#: A step longer than this many typical steps is a gap in the dates (common practice).
_GAP_FACTOR = 1.5


def lanczos_weights(n_weights: int, cutoff: float) -> np.ndarray:
    """Lanczos low-pass weights (Duchon 1979) with sigma factors, normalized to unit sum.

    Parameters
    ----------
    n_weights : odd number of weights (2n - 1 in Duchon's notation), at least 3.
    cutoff : cutoff frequency in cycles per time step (per day for daily data), 0 < cutoff < 0.5.
        A 10-day low-pass has cutoff 0.1.

    Returns
    -------
    Array of `n_weights` weights for lags -(n-1) .. n-1, symmetric, summing to 1.
    """
    if isinstance(n_weights, bool) or int(n_weights) != n_weights or n_weights < 3:
        raise ConfigError.make(
            "n_weights", repr(n_weights), "an odd integer of at least 3", "use e.g. 61"
        )
    if n_weights % 2 == 0:
        raise ConfigError.make(
            "n_weights", f"{n_weights} (even)", "an odd number of weights", "use e.g. 61"
        )
    if not 0 < cutoff < 0.5:
        raise ConfigError.make(
            "cutoff",
            repr(cutoff),
            "a frequency in cycles per day between 0 and 0.5",
            "give 1 / period, e.g. 0.1 for a 10-day low-pass",
        )
    n = (int(n_weights) + 1) // 2
    k = np.arange(-(n - 1), n, dtype=float)
    # np.sinc(x) = sin(pi x) / (pi x): both factors of Duchon's formula, with w_0 = 2 fc.
    weights = 2 * cutoff * np.sinc(2 * cutoff * k) * np.sinc(k / n)
    return weights / weights.sum()


def lanczos_response(weights: np.ndarray, frequency: np.ndarray | float) -> np.ndarray:
    """Frequency response R(f) = sum_k w_k cos(2 pi f k) of symmetric weights (Duchon 1979).

    `frequency` in cycles per time step.
    """
    weights = np.asarray(weights, dtype=float)
    k = np.arange(weights.size) - (weights.size - 1) / 2
    f = np.asarray(frequency, dtype=float)
    return np.cos(2 * np.pi * f[..., None] * k) @ weights


def _run_labels(valid: np.ndarray, breaks: np.ndarray) -> np.ndarray:
    """Label runs of valid samples along the last axis; -1 where invalid.

    `valid` (..., time) bool; `breaks` (..., time) bool, True where a new run must start (a block
    edge or a gap in the dates) whether or not the sample is valid.
    """
    start = breaks | (valid != np.roll(valid, 1, axis=-1))
    start[..., 0] = True
    labels = np.cumsum(start, axis=-1)
    return np.where(valid, labels, -1)


def _lowpass_kernel(
    values: np.ndarray, breaks: np.ndarray, weights: np.ndarray, edge: EdgeTreatment
) -> np.ndarray:
    """Filter along axis 1 of (member, time, ...) `values`, within runs only.

    `breaks` (member, time) marks the first sample of every block and the sample after every gap.
    NaN values also end a run. Kernel on plain arrays; no checks.
    """
    half = (weights.size - 1) // 2
    x = np.moveaxis(np.asarray(values, dtype=float), 1, -1)  # (member, ..., time)
    shape = x.shape
    brk = np.broadcast_to(
        breaks.reshape(breaks.shape[:1] + (1,) * (x.ndim - 2) + breaks.shape[1:]), shape
    )
    valid = ~np.isnan(x)
    labels = _run_labels(valid, brk)
    filled = np.where(valid, x, 0.0)
    n_time = shape[-1]
    pad = [(0, 0)] * (x.ndim - 1) + [(half, half)]
    filled = np.pad(filled, pad)
    lab = np.pad(labels, pad, constant_values=-1)
    if edge == "nan":
        out = ndimage.correlate1d(filled[..., half:-half], weights, axis=-1, mode="constant")
        # Runs are contiguous, so the window lies in one run when both its ends do.
        inside = (lab[..., :n_time] == labels) & (lab[..., 2 * half :] == labels) & valid
        out = np.where(inside, out, np.nan)
    else:  # "shrink": truncated window, weights renormalized to unit sum
        out = np.zeros(shape)
        norm = np.zeros(shape)
        for j, w in enumerate(weights):
            same = lab[..., j : j + n_time] == labels
            out += np.where(same, w * filled[..., j : j + n_time], 0.0)
            norm += np.where(same, w, 0.0)
        out = np.where(valid, out / np.where(valid, norm, 1.0), np.nan)
    return np.moveaxis(out, -1, 1)


def _time_breaks(da: xr.DataArray) -> np.ndarray:
    """(member, time) bool: True at the first day of each block and the day after each date gap."""
    ids = seasons.block_ids(da).transpose("member", "time").values
    breaks = np.zeros(ids.shape, dtype=bool)
    breaks[:, 0] = True
    breaks[:, 1:] = ids[:, 1:] != ids[:, :-1]
    steps = timeaxis.step_days(da["time"])
    if steps.size:
        typical = timeaxis.median_step_days(da["time"])
        breaks[:, 1:] |= (steps > _GAP_FACTOR * typical)[None, :]
    return breaks


def _edge_days(breaks: np.ndarray, half: int) -> tuple[int, int, int]:
    """Days within `half` of a block edge or date gap, the longest run, runs shorter than a window.

    Counts over (member, time) from the block and date structure alone (no data needed).
    """
    n_member, n_time = breaks.shape
    labels = np.cumsum(breaks, axis=1) + (np.arange(n_member) * (n_time + 1))[:, None]
    _, lengths = np.unique(labels, return_counts=True)
    window = 2 * half + 1
    lost = np.minimum(lengths, 2 * half).sum()
    return int(lost), int(lengths.max()), int((lengths < window).sum())


def _check_time(da: xr.DataArray, what: str) -> None:
    if "time" not in da.dims or "member" not in da.dims:
        raise InputError.make(
            what,
            f"dims {tuple(da.dims)}",
            "dims including 'member' and 'time' (canonical form)",
            "open the data with westerlies.open_dataset, or add a member dimension of size 1",
        )
    if not timeaxis.has_dates(da["time"]):
        raise TimeStepError.make(
            f"{what}: coordinate 'time'",
            "values without dates",
            "decoded daily dates",
            "give the time coordinate CF units such as 'days since 2000-01-01'",
        )
    steps = timeaxis.step_days(da["time"])
    if np.any(steps <= 0):
        raise TimeStepError.make(
            f"{what}: coordinate 'time'",
            "times not strictly increasing",
            "increasing, unique times",
            "sort the data by time and drop duplicate times",
        )
    if da.sizes["time"] < 2:
        raise TimeStepError.make(
            f"{what}: coordinate 'time'",
            f"{da.sizes['time']} time(s)",
            "a daily series",
            "give a daily series longer than the filter window",
        )
    timeaxis.require_daily(da["time"], what)


def lowpass(
    da: xr.DataArray,
    cutoff_days: float = 10,
    n_weights: int = 61,
    edge: EdgeTreatment = "nan",
) -> xr.DataArray:
    """Lanczos low-pass along time, separately in each block and each run of consecutive days.

    Parameters
    ----------
    da : DataArray with dims (member, time, ...) and a daily, decoded time axis. Blocks come from
        `westerlies.seasons.block_ids` (each member is one block unless a `season_year`
        coordinate exists). Gaps in the dates (a step over 1.5 typical steps) and NaN values also
        end a run. numpy- or dask-backed; dask chunks may split `member`, not `time`.
    cutoff_days : cutoff period in days (the cutoff frequency is 1 / cutoff_days cycles per day).
    n_weights : odd number of Lanczos weights (Duchon 1979).
    edge : "nan" (default): days closer than (n_weights - 1) / 2 to the edge of a run are NaN.
        "shrink": near an edge the window is cut at the edge and the remaining weights are
        renormalized to unit sum; those days are kept but their response differs from Duchon's.

    Returns
    -------
    Filtered DataArray of the same shape, coordinates and attributes, plus `method`,
    `filter_cutoff_days`, `filter_n_weights`, `filter_edge` and `filter_edge_days`: the number of
    (member, time) days within half a window of a block edge or a date gap (NaN when
    edge="nan"). Days lost next to NaN values in the data come on top of these.
    """
    _check_time(da, "lowpass")
    if edge not in ("nan", "shrink"):
        raise ConfigError.make("edge", repr(edge), "'nan' or 'shrink'", "use edge='nan'")
    if not cutoff_days or cutoff_days <= 2:
        raise ConfigError.make(
            "cutoff_days",
            repr(cutoff_days),
            "a period longer than 2 days",
            "use e.g. cutoff_days=10",
        )
    weights = lanczos_weights(n_weights, 1.0 / cutoff_days)
    half = (weights.size - 1) // 2
    breaks = _time_breaks(da)
    lost, longest, short_runs = _edge_days(breaks, half)
    if edge == "nan" and longest < weights.size:
        raise InputError.make(
            "lowpass: blocks",
            f"the longest run of consecutive days in a block is {longest}",
            f"at least one run of {weights.size} days (the filter window)",
            "give longer daily series per block (e.g. November-March for DJF), "
            "use fewer weights, or edge='shrink'",
        )
    if edge == "nan" and short_runs:
        warnings.warn(
            f"lowpass: {short_runs} run(s) of consecutive days are shorter than the "
            f"{weights.size}-day window and are entirely missing after filtering",
            InputWarning,
            stacklevel=2,
        )
    order = ("member", "time", *[d for d in da.dims if d not in ("member", "time")])
    x = da.transpose(*order)
    if x.chunks is not None:
        x = x.chunk({"time": -1})
    brk = xr.DataArray(breaks, dims=("member", "time"), coords={"member": x["member"]})
    if x.chunks is not None:
        brk = brk.chunk({"member": x.chunks[0]})
    out = xr.apply_ufunc(
        _lowpass_kernel,
        x,
        brk,
        kwargs={"weights": weights, "edge": edge},
        input_core_dims=[list(order[1:]), ["time"]],
        output_core_dims=[list(order[1:])],
        dask="parallelized",
        output_dtypes=[float],
        keep_attrs=True,
    )
    out = out.transpose(*da.dims)
    out.attrs = {
        **da.attrs,
        "method": (
            f"Lanczos low-pass (Duchon 1979), cutoff {cutoff_days:g} days, {weights.size} "
            f"weights with sigma factors, normalized to unit sum; within blocks and runs of "
            f"consecutive days only; edge treatment '{edge}'"
        ),
        "filter_cutoff_days": float(cutoff_days),
        "filter_n_weights": int(weights.size),
        "filter_edge": edge,
        "filter_edge_days": lost,
    }
    return out


def select_filtered_season(obj: xr.DataArray | xr.Dataset, season: str = "DJF"):
    """Select `season` from filtered data and warn when season days have no filtered value.

    Filter a longer period first (e.g. November-March), then select the season: the days a
    filter loses at the edges then fall outside the season. This helper calls
    `westerlies.seasons.select_season` and counts the season's (member, time) days that are NaN,
    warning with `InputWarning` and setting the attribute `season_days_missing`.
    """
    out = seasons.select_season(obj, season)
    data = out if isinstance(out, xr.DataArray) else out[next(iter(out.data_vars))]
    other = [d for d in data.dims if d not in ("member", "time")]
    missing = data.isnull()
    if other:
        missing = missing.any(other)
    n_missing = int(missing.sum())
    out.attrs["season_days_missing"] = n_missing
    if n_missing:
        half = ""
        n_weights = data.attrs.get("filter_n_weights")
        if n_weights:
            half = f" (the filter needs {(int(n_weights) - 1) // 2} days on each side)"
        warnings.warn(
            f"season {out.attrs.get('season', season)}: {n_missing} of {missing.size} "
            f"(member, time) days have no filtered value, from block edges, gaps or missing "
            f"data{half}; give data extending beyond the season on both sides",
            InputWarning,
            stacklevel=2,
        )
    return out
