"""Input check: what was found in the data, and every problem, before any diagnostic runs.

`check_input` opens the source the way every diagnostic will (`open_dataset`), then reports the
variables and units, grid, levels, calendar, time step, seasons, blocks, members and missing
values, and says which diagnostics the input serves.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np
import xarray as xr

from . import timeaxis
from .data import Source, open_dataset
from .errors import InputError
from .seasons import select_season

__all__ = ["CheckReport", "check_input"]

#: What each diagnostic needs: variable, time step, and the domain it must overlap.
_NEEDS = {
    "nao": ("z500", ("daily", "monthly", "seasonal", "single"), (20, 80, -90, 40)),
    "jet": ("u", ("daily",), (15, 75, -60, 0)),
    "regimes": ("z500", ("daily",), (20, 80, -90, 30)),
    "sst_index": ("sst", ("daily", "monthly", "seasonal", "single"), (0, 80, -90, 20)),
}


@dataclass
class CheckReport:
    """The outcome of `check_input`.

    Attributes
    ----------
    ok : True when the input serves at least one diagnostic and no error was found.
    errors, warnings : problems found, each a sentence naming what and how to fix it.
    serves : diagnostic name ("nao", "jet", "regimes", "sst_index") -> whether the input serves it.
    found : what was found, as (topic, text) lines.
    """

    source: str
    errors: list[str] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    serves: dict[str, bool] = field(default_factory=dict)
    found: list[tuple[str, str]] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not self.errors and any(self.serves.values())

    def __str__(self) -> str:
        lines = [f"westerlies input check: {self.source}"]
        width = max((len(t) for t, _ in self.found), default=0)
        lines += [f"  {topic:<{width}}  {text}" for topic, text in self.found]
        if self.serves:
            served = [k for k, v in self.serves.items() if v]
            lines.append(f"  serves: {', '.join(served) if served else 'no diagnostic'}")
        lines += [f"  ERROR: {e}" for e in self.errors]
        lines += [f"  warning: {w}" for w in self.warnings]
        lines.append("  result: " + ("usable" if self.ok else "NOT usable"))
        return "\n".join(lines)


def check_input(source: Source | xr.Dataset, **open_kwargs) -> CheckReport:
    """Open `source` as `open_dataset` would and report what was found and every problem.

    Parameters
    ----------
    source : anything `open_dataset` accepts.
    **open_kwargs : `variables`, `member_dim`, `daily`, `chunks`, as for `open_dataset`.

    Returns
    -------
    CheckReport; nothing is raised for bad data, the problems are in ``report.errors``.
    """
    label = source if isinstance(source, (str, list)) else type(source).__name__
    report = CheckReport(source=str(label))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            ds = open_dataset(source, **open_kwargs)
        except InputError as err:
            report.errors.append(str(err))
            report.serves = dict.fromkeys(_NEEDS, False)
            return report
        _describe(ds, report)
    report.warnings[:0] = [str(w.message) for w in caught]
    return report


def _describe(ds: xr.Dataset, report: CheckReport) -> None:
    def add(topic: str, text: str) -> None:
        report.found.append((topic, text))

    for name, da in ds.data_vars.items():
        add(
            f"variable {name}",
            f"{dict(da.sizes)} in {da.attrs.get('units')} "
            f"(from {da.attrs.get('source_variable')!r} in "
            f"{da.attrs.get('source_units')!r})",
        )
    lat, lon = ds["lat"].values, ds["lon"].values
    add(
        "grid",
        f"lat {lat.min():g}..{lat.max():g} ({lat.size} points), "
        f"lon {lon.min():g}..{lon.max():g} ({lon.size} points)",
    )
    for role, values in (("lat", lat), ("lon", lon)):
        steps = np.diff(values)
        if steps.size and np.ptp(steps) > 0.05 * np.abs(steps).mean():
            report.warnings.append(
                f"coordinate {role}: irregular spacing ({steps.min():g} to "
                f"{steps.max():g} degrees); area weights use the actual "
                "latitudes, but a regular grid is expected"
            )
    if "plev" in ds.coords:
        add("levels", f"{ds['plev'].values.tolist()} hPa")
    time = ds["time"]
    kind = timeaxis.time_kind(time) if timeaxis.has_dates(time) else "undated"
    if timeaxis.has_dates(time):
        add("calendar", timeaxis.calendar(time))
        add(
            "time",
            f"{time.size} steps from {_day(time.values[0])} to {_day(time.values[-1])}, "
            f"{kind} (typical step {timeaxis.median_step_days(time):g} days)",
        )
    else:
        report.warnings.append(
            "time: values without dates; seasons cannot be selected, each "
            "member counts as one block"
        )
    add("members", f"{ds.sizes['member']}")
    if kind == "subdaily":
        report.warnings.append(
            "time: sub-daily data; the daily diagnostics need "
            "open_dataset(..., daily='mean') (westerlies check --daily-mean)"
        )
    if kind in ("daily", "monthly", "seasonal", "single") and timeaxis.has_dates(time):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            winter = select_season(ds[next(iter(ds.data_vars))].isel(lat=0, lon=0), "DJF")
        years = np.unique(winter["season_year"].values)
        if years.size:
            add(
                "seasons (DJF)",
                f"{years.size} winters {years.min()}..{years.max()}; "
                f"{years.size * ds.sizes['member']} blocks (member x winter)",
            )
            cut = winter.attrs.get("incomplete_seasons", [])
            if cut:
                report.warnings.append(
                    f"season DJF: {len(cut)} winter(s) cut short by the data (kept): {cut[:10]}"
                )
        else:
            report.errors.append(
                "time: no December, January or February dates; the winter "
                "diagnostics need DJF. Give data that cover the winter."
            )
    for name, da in ds.data_vars.items():
        _missing(name, da, report)
    for diag, (var, kinds, domain) in _NEEDS.items():
        report.serves[diag] = _serves(ds, var, kinds, domain, kind)
    if report.serves["nao"] and not report.serves["regimes"] and kind != "daily":
        report.warnings.append(
            f"time: {kind} data serve the NAO; the jet, regimes and daily "
            "index memory need daily data"
        )


def _day(t) -> str:
    """A date as YYYY-MM-DD, for numpy and cftime dates alike."""
    if isinstance(t, np.datetime64):
        return str(np.datetime_as_string(t, unit="D"))
    return f"{t.year:04d}-{t.month:02d}-{t.day:02d}"


def _missing(name: str, da: xr.DataArray, report: CheckReport) -> None:
    """Count missing values; say whether they are a fixed mask or vary in time."""
    space = [d for d in da.dims if d not in ("member", "time")]
    sample = [d for d in ("member", "time") if d in da.dims]
    n_missing = da.isnull().sum(sample)
    total = int(n_missing.sum())
    if total == 0:
        report.found.append((f"missing {name}", "none"))
        return
    n_samples = int(np.prod([da.sizes[d] for d in sample]))
    constant = bool(((n_missing == 0) | (n_missing == n_samples)).all())
    masked = int((n_missing == n_samples).sum())
    text = (
        f"{total} values; {masked} of {int(np.prod([da.sizes[d] for d in space]))} points "
        "always missing"
    )
    report.found.append((f"missing {name}", text + (" (a fixed mask)" if constant else "")))
    if not constant:
        report.warnings.append(
            f"variable {name}: missing values that vary in time; EOF-based "
            "diagnostics refuse them unless asked to fill them"
        )


def _serves(ds: xr.Dataset, var: str, kinds, domain, kind: str) -> bool:
    if var not in ds.data_vars or kind not in kinds:
        return False
    lat_min, lat_max, lon_min, lon_max = domain
    lat, lon = ds["lat"].values, ds["lon"].values
    return bool(
        ((lat >= lat_min) & (lat <= lat_max)).sum() >= 3
        and ((lon >= lon_min) & (lon <= lon_max)).sum() >= 3
    )
