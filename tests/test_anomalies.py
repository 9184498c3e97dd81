"""Climatologies and anomalies (`westerlies.anomalies`)."""

from __future__ import annotations

import warnings

import dask
import dask.array as dsa
import netCDF4
import numpy as np
import pytest
import xarray as xr

from westerlies.anomalies import anomalies, climatology
from westerlies.errors import InputError, InputWarning
from westerlies.seasons import select_season

# Days before each month in a 365-day year (calendar definition, CF Conventions 4.4.1).
_CUM_365 = np.cumsum([0, 31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30])

NOISE_SD = 1.0
AMPLITUDE = 10.0  # of the annual harmonic: ten times the noise


def _year_fraction(time: xr.DataArray, calendar: str) -> np.ndarray:
    """Position of each date in its year, 0..1, from month and day alone."""
    month = time.dt.month.values
    day = time.dt.day.values
    if calendar == "360_day":
        return (30 * (month - 1) + day - 1) / 360.0
    return (_CUM_365[month - 1] + np.minimum(day, 28 + (month != 2) * 3) - 1) / 365.0


def _annual_cycle(fraction: np.ndarray) -> np.ndarray:
    """A known seasonal cycle: annual harmonic (coldest in mid-January) plus a semi-annual one."""
    return -AMPLITUDE * np.cos(2 * np.pi * (fraction - 0.04)) + 2.0 * np.sin(4 * np.pi * fraction)


def _daily_field(start, end, calendar, members, seed=0, shift=0.0):
    """(member, time, lat, lon) field: known cycle + Gaussian noise; returns (field, noise)."""
    time = xr.date_range(start, end, freq="D", calendar=calendar, use_cftime=calendar != "standard")
    time = xr.DataArray(time, dims="time")
    rng = np.random.default_rng(seed)
    shape = (members, time.size, 2, 3)
    noise = NOISE_SD * rng.standard_normal(shape)
    cycle = _annual_cycle(_year_fraction(time, calendar))
    values = cycle[None, :, None, None] + noise + shift
    coords = {
        "member": np.arange(members),
        "time": time.values,
        "lat": [40.0, 50.0],
        "lon": [-30.0, -20.0, -10.0],
    }
    da = xr.DataArray(
        values,
        dims=("member", "time", "lat", "lon"),
        coords=coords,
        name="z500",
        attrs={"units": "m", "long_name": "geopotential height at 500 hPa"},
    )
    noise = xr.DataArray(noise, dims=da.dims, coords=da.coords)
    return da, noise


# Tolerances (stated): noise sd 1, so an error of 0.1 rms is 10% of the noise; a climatology
# that ignored the calendar or was biased at the ends of a November-March run by the seasonal
# slope (about 0.17 per day here) would exceed them.
RMS_TOL = 0.1
MAX_DAY_TOL = 0.25


def _check_recovers_noise(anom, noise):
    error = anom - noise  # = truth - estimated climatology
    assert np.isfinite(anom.values).all()
    rms = float(np.sqrt((error**2).mean()))
    assert rms < RMS_TOL, f"rms error {rms:.3f}"
    per_day = np.abs(error.mean(("member", "lat", "lon"))).max()
    assert float(per_day) < MAX_DAY_TOL, f"worst day-of-year error {float(per_day):.3f}"
    corr = np.corrcoef(anom.values.ravel(), noise.values.ravel())[0, 1]
    assert corr > 0.98


@pytest.mark.parametrize("calendar", ["standard", "360_day"])
def test_daily_anomalies_recover_noise_full_years(calendar):
    # Analytic case: the field is a known smooth annual cycle plus white noise, so the anomalies
    # must be the noise up to the climatology's estimation error. Years 2003-2008 (two leap
    # years in the standard calendar).
    end = "2008-12-30" if calendar == "360_day" else "2008-12-31"
    da, noise = _daily_field("2003-01-01", end, calendar, members=3)
    anom = anomalies(da)
    _check_recovers_noise(anom, noise)


@pytest.mark.parametrize("calendar", ["standard", "360_day"])
def test_daily_anomalies_recover_noise_november_to_march(calendar):
    # Analytic case: an ensemble of November-March runs (20 members, one winter 2003/04 that
    # includes 29 February in the standard calendar). The seasonal cycle is steep at both ends
    # of the run, where a plain running mean would be biased.
    end = "2004-03-30" if calendar == "360_day" else "2004-03-31"
    da, noise = _daily_field("2003-11-01", end, calendar, members=20, seed=1)
    anom = anomalies(da)
    assert anom.sizes == da.sizes
    _check_recovers_noise(anom, noise)


def test_climatology_is_pooled_over_members_and_years():
    da, _ = _daily_field("2003-11-01", "2005-03-30", "360_day", members=4, seed=2)
    clim = climatology(da)
    assert "member" not in clim.dims and "time" not in clim.dims
    assert clim.attrs["units"] == "m"
    assert clim.attrs.get("method")
    # A member-swapped copy has the same pooled climatology.
    swapped = da.isel(member=[3, 2, 1, 0]).assign_coords(member=da["member"].values)
    xr.testing.assert_allclose(climatology(swapped), clim)


def test_anomalies_against_a_control_climatology():
    # Analytic case: the perturbed runs are the control's cycle shifted by +2 m, so their
    # response against the control climatology is +2 on average, and 0 against their own.
    control, _ = _daily_field("2003-11-01", "2004-03-30", "360_day", members=20, seed=3)
    perturbed, _ = _daily_field(
        "2003-11-01", "2004-03-30", "360_day", members=20, seed=4, shift=2.0
    )
    response = anomalies(perturbed, climatology=climatology(control))
    assert abs(float(response.mean()) - 2.0) < 0.05
    assert abs(float(anomalies(perturbed).mean())) < 0.05


def test_climatology_on_another_calendar_is_refused():
    control, _ = _daily_field("2003-11-01", "2004-03-30", "360_day", members=2)
    other, _ = _daily_field("2003-11-01", "2004-03-31", "standard", members=2)
    with pytest.raises(InputError):
        anomalies(other, climatology=climatology(control))


def test_monthly_anomalies_against_monthly_means():
    # Independent computation: monthly means pooled over members and years, by numpy reshape.
    time = xr.date_range("2001-01-01", periods=120, freq="MS", calendar="noleap", use_cftime=True)
    rng = np.random.default_rng(5)
    values = 20 * np.cos(2 * np.pi * np.arange(120) / 12)[None, :, None, None]
    values = values + rng.standard_normal((3, 120, 2, 2))
    da = xr.DataArray(
        values,
        dims=("member", "time", "lat", "lon"),
        coords={"member": [0, 1, 2], "time": time, "lat": [40.0, 50.0], "lon": [0.0, 10.0]},
        attrs={"units": "K"},
        name="sst",
    )
    monthly = values.reshape(3, 10, 12, 2, 2).mean(axis=(0, 1))  # month, lat, lon
    want = values - np.tile(monthly, (10, 1, 1))[None]
    anom = anomalies(da)
    assert anom.dims == da.dims
    np.testing.assert_allclose(anom.values, want, atol=1e-10)
    assert anom.attrs["units"] == "K"


def test_seasonal_anomalies_of_the_eofs_sample(eofs_sample_path):
    # Source: NCEP/NCAR DJF-mean Z500 (Kalnay et al. 1996) from eofs' hgt_djf.nc, read with
    # netCDF4; one value per winter, so the anomaly is the departure from the time mean (as
    # in the eofs examples, from memory).
    from westerlies.data import open_dataset

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", InputWarning)
        z = select_season(open_dataset(eofs_sample_path)["z500"], "DJF")
    anom = anomalies(z)
    with netCDF4.Dataset(eofs_sample_path) as nc:
        raw = np.asarray(nc.variables["z"][:], dtype=float)[:, 0]
    np.testing.assert_allclose(anom.isel(member=0).values, raw - raw.mean(axis=0), atol=1e-8)
    # dims, coordinates (season_year included) and attributes kept
    assert anom.dims == z.dims
    for name in ("member", "time", "lat", "lon", "season_year"):
        np.testing.assert_array_equal(anom[name].values, z[name].values)
    assert anom.attrs["units"] == "m"
    assert "anomal" in anom.attrs["long_name"].lower()


def _no_compute(dsk, keys, **kwargs):
    raise AssertionError("a dask graph was computed; anomalies should stay lazy")


def test_anomalies_of_dask_input_stay_lazy():
    da, _ = _daily_field("2003-11-01", "2004-03-30", "360_day", members=2, seed=6)
    lazy = da.chunk({"member": 1, "time": 75})
    with dask.config.set(scheduler=_no_compute):
        anom = anomalies(lazy)
    assert isinstance(anom.data, dsa.Array)
    assert anom.chunks is not None
    xr.testing.assert_allclose(anom.compute(), anomalies(da))
