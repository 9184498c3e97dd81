"""Eddy-driven jet latitude and speed (`westerlies.jet`): analytic jets of known position."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import xarray as xr

from westerlies.errors import (
    CoordinateError,
    GridError,
    InputError,
    InputWarning,
    MissingValueError,
    TimeStepError,
)
from westerlies.filters import lanczos_response, lanczos_weights, select_filtered_season
from westerlies.jet import _profile_maximum, jet_index

LAT = np.arange(0.0, 90.1, 2.5)  # a 2.5-degree grid
LON = np.arange(-90.0, 60.0, 2.5)
PLEV = np.array([1000.0, 925.0, 850.0, 700.0, 500.0])
WIDTH = 7.0  # jet half-width (Gaussian sd) in degrees: an analytic profile


def _gaussian(lat, centre, peak=20.0, width=WIDTH):
    return peak * np.exp(-0.5 * ((lat - centre) / width) ** 2)


def _wind(centres: np.ndarray, *, start="2000-11-01", level_factor=None, decoy=None):
    """u (member, time, plev, lat, lon) with a Gaussian jet at `centres` (member, time), 60W-0.

    Outside 60W-0 the wind is a weak uniform 3 m s-1, or a strong `decoy` jet at that latitude.
    """
    n_m, n_t = centres.shape
    factor = np.ones(PLEV.size) if level_factor is None else np.asarray(level_factor)
    prof = _gaussian(LAT[None, None, :], centres[..., None])  # (member, time, lat)
    in_sector = (LON >= -60) & (LON <= 0)
    outside = np.full(LAT.size, 3.0) if decoy is None else _gaussian(LAT, decoy, peak=40.0)
    horiz = np.where(in_sector, prof[..., None], outside[None, None, :, None])
    u = factor[None, None, :, None, None] * horiz[:, :, None]
    time = xr.date_range(start, periods=n_t, freq="D")
    return xr.DataArray(
        u,
        dims=("member", "time", "plev", "lat", "lon"),
        coords={"member": np.arange(n_m), "time": time, "plev": PLEV, "lat": LAT, "lon": LON},
        name="u",
        attrs={"units": "m s-1"},
    )


def test_parabola_finds_gaussian_jets_between_grid_points():
    # Analytic case: a Gaussian profile on a 2.5-degree grid, peak anywhere between points.
    centres = np.random.default_rng(0).uniform(25, 65, 500)
    profiles = _gaussian(LAT[None, :], centres[:, None], peak=17.0)
    lat, speed = _profile_maximum(profiles, LAT)
    np.testing.assert_allclose(lat, centres, atol=0.1)
    np.testing.assert_allclose(speed, 17.0, atol=0.2)
    # Any spacing works: a stretched grid gives the same vertex to the same accuracy.
    grid = np.cumsum(np.r_[0, np.linspace(1.5, 3.0, 40)])
    lat2, _ = _profile_maximum(_gaussian(grid[None, :], centres[:, None]), grid)
    np.testing.assert_allclose(lat2, centres, atol=0.1)


def test_daily_jets_recovered_without_filter():
    centres = np.random.default_rng(1).uniform(25, 65, (2, 40))
    ds = jet_index(_wind(centres), cutoff_days=None)
    assert ds["latitude"].dims == ("member", "time")
    np.testing.assert_allclose(ds["latitude"].values, centres, atol=0.1)
    np.testing.assert_allclose(ds["speed"].values, 20.0, atol=0.25)
    assert ds["latitude"].attrs["units"] == "degrees_north"
    assert ds["speed"].attrs["units"] == "m s-1"
    assert "Woollings" in ds["latitude"].attrs["method"]
    assert ds["latitude"].attrs["levels_hPa"] == [925.0, 850.0, 700.0]


def test_decoy_jet_outside_sector_is_ignored():
    centres = np.full((1, 30), 48.3)
    ds = jet_index(_wind(centres, decoy=30.0), cutoff_days=None)  # twice as strong, 30N, east
    np.testing.assert_allclose(ds["latitude"].values, 48.3, atol=0.1)
    # Sanity of the case: over all longitudes the decoy would win.
    wide = jet_index(_wind(centres, decoy=30.0), sector=(-90, 57.5), cutoff_days=None)
    assert np.all(np.abs(wide["latitude"].values - 48.3) > 5)


def test_mass_weighted_mean_is_trapezoidal_in_pressure():
    # Speed = trapezoidal mean over 925-700 hPa of a level-dependent factor (numpy.trapezoid
    # as the independent integral), times the 20 m s-1 jet.
    factor = np.array([0.5, 0.8, 1.0, 1.4, 2.0])
    ds = jet_index(_wind(np.full((1, 5), 45.0), level_factor=factor), cutoff_days=None)
    p = PLEV[1:4]
    expected = 20.0 * np.trapezoid(factor[1:4], p) / (p[-1] - p[0])
    np.testing.assert_allclose(ds["speed"].values, expected, rtol=2e-3)
    one = jet_index(
        _wind(np.full((1, 5), 45.0), level_factor=factor), levels=(850, 850), cutoff_days=None
    )
    np.testing.assert_allclose(one["speed"].values, 20.0, rtol=2e-3)  # a single level


def test_slow_wander_passes_filter_and_fast_wobble_does_not():
    # 151 days (November-March): latitude = 45 + 6 sin(2 pi t / 60) + 4 sin(2 pi t / 3).
    t = np.arange(151)
    slow = 45 + 6 * np.sin(2 * np.pi * t / 60)
    fast = 4 * np.sin(2 * np.pi * t / 3)
    ds = jet_index(_wind((slow + fast)[None, :]))
    lat = ds["latitude"].values[0]
    assert np.isnan(lat[:30]).all() and np.isnan(lat[-30:]).all()
    # Duchon (1979) response at a 60-day period is about 1, at 3 days about 0: the jet follows
    # the slow wander to within a tenth of a degree.
    assert lanczos_response(lanczos_weights(61, 0.1), 1 / 60) == pytest.approx(1, abs=0.01)
    np.testing.assert_allclose(lat[30:-30], slow[30:-30], atol=0.1)
    assert np.max(np.abs(lat[30:-30] - (slow + fast)[30:-30])) > 3  # wobble removed
    assert ds["latitude"].attrs["filter_edge_days"] == 60


def test_november_march_gives_complete_djf():
    centres = np.full((2, 151), 50.0)
    ds = jet_index(_wind(centres))
    with warnings.catch_warnings():
        warnings.simplefilter("error", InputWarning)
        djf = select_filtered_season(ds, "DJF")
    assert djf.sizes["time"] == 90 and int(djf["latitude"].isnull().sum()) == 0
    np.testing.assert_allclose(djf["latitude"].values, 50.0, atol=0.1)


def test_season_selected_before_filtering_warns():
    from westerlies.seasons import select_season

    u = _wind(np.full((1, 151), 50.0))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", InputWarning)
        djf = select_season(u, "DJF")
    with pytest.warns(InputWarning, match="already restricted to a season"):
        ds = jet_index(djf)
    assert int(ds["latitude"].notnull().sum()) == 90 - 60


def test_dask_input_matches_numpy():
    centres = 45 + 5 * np.sin(np.arange(100) / 10)[None, :].repeat(3, axis=0)
    u = _wind(centres)
    eager = jet_index(u)
    lazy = jet_index(u.chunk({"member": 1, "time": 50}))
    np.testing.assert_allclose(lazy["latitude"].values, eager["latitude"].values, equal_nan=True)


def test_missing_days_give_nan_with_warning_not_a_wrong_latitude():
    u = _wind(np.full((1, 100), 50.0))
    u[0, 50, :, 20, :] = np.nan  # one latitude of one day missing at every level
    with pytest.warns(InputWarning, match="missing wind"):
        ds = jet_index(u, cutoff_days=None)
    lat = ds["latitude"].values[0]
    assert np.isnan(lat[50]) and np.isfinite(lat).sum() == 99
    assert ds["latitude"].attrs["days_missing_profile"] == 1


def test_bad_inputs_raise():
    u = _wind(np.full((1, 80), 50.0))
    with pytest.raises(CoordinateError, match="925"):
        jet_index(u.sel(plev=[1000.0, 500.0]))  # no level between the bounds
    with pytest.raises(GridError, match="sector"):
        jet_index(u, sector=(100, 150))  # sector outside the data
    with pytest.raises(GridError, match="lat_range"):
        jet_index(u.sel(lat=slice(30, 90)))  # latitude range not covered
    with pytest.raises(InputError, match="longest run"):
        jet_index(u.isel(time=slice(0, 40)))  # every block shorter than the window
    monthly = u.assign_coords(time=xr.date_range("2000-01-01", periods=80, freq="MS"))
    with pytest.raises(TimeStepError):
        jet_index(monthly)
    with pytest.raises(MissingValueError):
        jet_index(u * np.nan)
    with pytest.raises(CoordinateError):
        jet_index(u.isel(plev=0, drop=True))  # no plev dimension while levels are asked for
    with pytest.raises(InputError):
        jet_index(u.to_dataset())


@pytest.fixture(scope="module")
def demo_jets():
    """Jet index of the demo scenario (invented data, known truth: westerlies.synthetic)."""
    from westerlies.data import open_dataset
    from westerlies.seasons import select_season
    from westerlies.synthetic import scenario

    data = scenario(seed=0, members=30, winters=1)
    truth = data["truth"]
    out = {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", InputWarning)
        for name in ("control", "perturbed"):
            jet = jet_index(open_dataset(data[name])["u"])
            realized = truth.jet_latitude[name].assign_coords(time=jet["time"])
            out[name] = (
                select_filtered_season(jet, "DJF")["latitude"],
                select_season(realized, "DJF"),
            )
    return out, truth


@pytest.mark.slow
def test_demo_scenario_preferred_latitudes_and_shift_recovered(demo_jets):
    # Recovery of known truth on invented data (westerlies.synthetic): three preferred
    # latitudes (37, 46, 56N in control; each 1 degree further south in perturbed).
    from westerlies.density import jet_modes

    jets, truth = demo_jets
    modes = {}
    for name, (latitude, realized) in jets.items():
        assert int(latitude.isnull().sum()) == 0  # November-March input: complete DJF
        # Daily jet latitude follows the planted one (the filter smooths regime jumps).
        diff = latitude.values - realized.values
        assert abs(diff.mean()) < 0.2 and np.median(np.abs(diff)) < 1.5
        fit = jet_modes(latitude, n_resamples=99 if name == "control" else 0, seed=1)
        assert fit.modes.size == 3
        np.testing.assert_allclose(fit.modes.values, truth.preferred_jet_latitudes[name], atol=1.0)
        modes[name] = fit.modes.values
        if name == "control":
            assert fit.three_modes_supported(0.05)
    shift = np.mean(modes["perturbed"] - modes["control"])
    assert shift == pytest.approx(truth.changes["jet_shift_degrees"], abs=0.5)
