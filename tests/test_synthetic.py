"""Tests of the demo scenario (westerlies.synthetic).

Invented data: every check here is a recovery test of the scenario's own known truth (planted
transition matrices, patterns, jet latitudes, lag), or an analytic property of the stochastic
model (Markov chain episode lengths, stationary distribution), or a check of the documented raw
file conventions. None of them is evidence about the real atmosphere.
"""

from __future__ import annotations

import re

import numpy as np
import pytest
import xarray as xr
from scipy.stats import gaussian_kde

from westerlies.errors import ConfigError
from westerlies.synthetic import (
    G0,
    LAT,
    LON,
    REGIME_NAMES,
    _markov_chain,
    _stationary,
    scenario,
    write_scenario,
)

MEMBERS = 30


@pytest.fixture(scope="module")
def demo() -> dict:
    return scenario(seed=0, members=MEMBERS, winters=3)


# ------------------------------------------------------------------------------- helpers


def _canonical(da: xr.DataArray) -> xr.DataArray:
    """Raw model field -> lat ascending, lon in [-180, 180) ascending (done by hand here)."""
    lon = da["longitude"].values
    da = da.assign_coords(longitude=np.where(lon >= 180.0, lon - 360.0, lon))
    return da.sortby("latitude").sortby("longitude")


def _daily_jet_latitude(ua: xr.DataArray) -> np.ndarray:
    """Latitude of the maximum of the 60W-0, 925-700 hPa mean wind, parabola-refined.

    Written here from the definition (Woollings et al. 2010, from memory, without the low-pass
    filter), independently of westerlies.jet.
    """
    u = _canonical(ua).sel(longitude=slice(-60.0, 0.0)).mean(("longitude", "plev"))
    lat = u["latitude"].values
    prof = u.values
    i = np.clip(prof.argmax(axis=-1), 1, lat.size - 2)
    a, b, c = (np.take_along_axis(prof, (i + k)[..., None], -1)[..., 0] for k in (-1, 0, 1))
    step = lat[1] - lat[0]
    return lat[i] + step * 0.5 * (a - c) / (a - 2.0 * b + c)


def _runs(states: np.ndarray, value: int) -> np.ndarray:
    """Lengths of complete runs of ``value`` in each row, dropping runs that touch an edge."""
    lengths = []
    for row in states:
        inside = np.r_[0, (row == value).astype(int), 0]
        edges = np.flatnonzero(np.diff(inside))
        starts, ends = edges[0::2], edges[1::2]
        ok = (starts > 0) & (ends < row.size)
        lengths.append(ends[ok] - starts[ok])
    return np.concatenate(lengths)


def _transition_counts(states: np.ndarray) -> np.ndarray:
    counts = np.zeros((4, 4))
    np.add.at(counts, (states[:, :-1].ravel(), states[:, 1:].ravel()), 1.0)
    return counts


def _occupancy_difference(a: np.ndarray, b: np.ndarray, k: int) -> tuple[float, float]:
    """Difference of regime-k occupancy and its standard error from between-block spread."""
    oa, ob = (a == k).mean(axis=1), (b == k).mean(axis=1)
    se = np.sqrt(oa.var(ddof=1) / oa.size + ob.var(ddof=1) / ob.size)
    return float(ob.mean() - oa.mean()), float(se)


# --------------------------------------------------------------------------- determinism


def test_same_seed_gives_identical_data_and_other_seed_differs():
    first = scenario(seed=7, members=2, winters=1)
    again = scenario(seed=7, members=2, winters=1)
    other = scenario(seed=8, members=2, winters=1)
    for name in ("reference", "control", "perturbed"):
        xr.testing.assert_identical(first[name], again[name])
        assert not np.array_equal(
            first[name].to_array().values, other[name].to_array().values, equal_nan=True
        )
    np.testing.assert_array_equal(
        first["truth"].states["control"], again["truth"].states["control"]
    )
    # An int seed and a fresh Generator seeded alike give the same stream.
    from_generator = scenario(seed=np.random.default_rng(7), members=2, winters=1)
    xr.testing.assert_equal(first["control"], from_generator["control"])


def test_changes_false_keeps_control_and_draws_perturbed_from_control_generator():
    planted = scenario(seed=3, members=2, winters=1)
    plain = scenario(seed=3, members=2, winters=1, changes=False)
    xr.testing.assert_identical(planted["control"], plain["control"])
    truth = plain["truth"]
    np.testing.assert_array_equal(truth.transition["perturbed"], truth.transition["control"])
    assert truth.jet_latitudes["perturbed"] == truth.jet_latitudes["control"]
    assert truth.changes == {}
    assert plain["perturbed"].attrs["synthetic_changes_planted"] == "no"
    assert not np.array_equal(plain["perturbed"]["phi"].values, plain["control"]["phi"].values)


def test_bad_sizes_raise_config_error():
    with pytest.raises(ConfigError, match="members"):
        scenario(members=0)
    with pytest.raises(ConfigError, match="winters"):
        scenario(winters=2.5)


# ---------------------------------------------------------------------------- conventions


def test_reference_has_the_documented_raw_conventions(demo):
    ref = demo["reference"]
    assert set(ref.data_vars) == {"hgt500", "uwnd", "sst"}
    assert ref["hgt500"].dims == ("time", "lat", "lon")
    assert ref["uwnd"].dims == ("time", "level", "lat", "lon")
    assert ref["hgt500"].attrs["standard_name"] == "geopotential_height"
    assert ref["hgt500"].attrs["units"] == "m"
    assert ref["uwnd"].attrs["standard_name"] == "eastward_wind"
    assert ref["uwnd"].attrs["units"] == "m s-1"
    assert ref["sst"].attrs["standard_name"] == "sea_surface_temperature"
    assert ref["sst"].attrs["units"] == "K"
    assert ref["level"].attrs["units"] == "hPa"
    np.testing.assert_array_equal(ref["level"], [925.0, 850.0, 700.0])
    assert np.all(np.diff(ref["lat"]) > 0) and ref["lat"][0] == 15.0 and ref["lat"][-1] == 85.0
    assert ref["lon"][0] == -90.0 and ref["lon"][-1] == 40.0
    assert all(ref[v].dtype == np.float32 for v in ref.data_vars)
    # Standard calendar, only November-March, one block per winter with gaps between winters.
    time = ref.indexes["time"]
    assert np.issubdtype(ref["time"].dtype, np.datetime64)
    assert ref["time"].encoding["calendar"] == "standard"
    assert set(time.month) == {11, 12, 1, 2, 3}
    gaps = np.flatnonzero(np.diff(time.values) > np.timedelta64(1, "D"))
    assert gaps.size == 2  # 3 winters
    # Winters 1991-1993 (Nov-Mar): 151 days, 1992 is a leap year (152 days).
    assert ref.sizes["time"] == 151 + 152 + 151
    assert 4800.0 < float(ref["hgt500"].min()) and float(ref["hgt500"].max()) < 6200.0


def test_ensembles_have_the_documented_raw_conventions(demo):
    for name, experiment in (("control", "ctl-slab"), ("perturbed", "ohtx-plus")):
        ds = demo[name]
        assert set(ds.data_vars) == {"phi", "ua", "tos"}  # not the canonical names
        assert ds["phi"].dims == ("realization", "time", "latitude", "longitude")
        assert ds["ua"].dims == ("realization", "time", "plev", "latitude", "longitude")
        assert ds.sizes["realization"] == MEMBERS and ds.sizes["time"] == 150
        assert ds["realization"].attrs["standard_name"] == "realization"
        assert ds["phi"].attrs == {
            "standard_name": "geopotential",
            "units": "m2 s-2",
            "long_name": "geopotential at 500 hPa",
        }
        assert ds["plev"].attrs["units"] == "Pa"
        np.testing.assert_array_equal(ds["plev"], [92500.0, 85000.0, 70000.0])
        assert np.all(np.diff(ds["latitude"]) < 0)  # descending
        lon = ds["longitude"].values
        assert np.all(np.diff(lon) > 0) and lon.min() >= 0.0 and lon.max() < 360.0
        assert {0.0, 40.0, 270.0, 357.5} <= set(lon.tolist())
        assert not np.any((lon > 40.0) & (lon < 270.0))
        times = ds.indexes["time"]
        assert times.calendar == "360_day"
        assert (times[0].month, times[0].day) == (11, 1) and (times[-1].month, times[-1].day) == (
            3,
            30,
        )
        assert ds.attrs["experiment_id"] == experiment and ds.attrs["synthetic"] == "yes"
        assert "SYNTHETIC" in ds.attrs["comment"]
        # Geopotential, not height: divided by g0 it is a plausible 500 hPa height (m).
        height = ds["phi"] / G0
        assert 4800.0 < float(height.min()) and float(height.max()) < 6200.0


def test_model_grid_is_the_canonical_grid_reordered_and_land_mask_is_constant(demo):
    tos = _canonical(demo["control"]["tos"])
    np.testing.assert_array_equal(tos["latitude"], LAT)
    np.testing.assert_array_equal(tos["longitude"], LON)
    missing = np.isnan(tos.values)
    assert np.all(missing == missing[:1, :1])  # same mask every day and member
    np.testing.assert_array_equal(missing[0, 0], demo["truth"].land_mask.values)
    assert 0.1 < missing[0, 0].mean() < 0.6
    ocean = tos.values[~missing]
    assert 270.0 < ocean.min() and ocean.max() < 300.0


# ----------------------------------------------------------------------------- regimes


def test_long_chain_recovers_planted_transition_matrix_and_stationary_distribution(demo):
    # Analytic: the empirical transition frequencies of a Markov chain converge to P, and its
    # occupancy to the stationary distribution pi = pi P.
    matrix = demo["truth"].transition["perturbed"]
    states = _markov_chain(matrix, 50, 4000, np.random.default_rng(11))
    counts = _transition_counts(states)
    rows = counts.sum(axis=1, keepdims=True)
    se = np.sqrt(matrix * (1 - matrix) / rows)
    assert np.max(np.abs(counts / rows - matrix) / se) < 5.0
    pi = _stationary(matrix)
    np.testing.assert_allclose(pi @ matrix, pi, atol=1e-12)
    np.testing.assert_allclose(
        np.bincount(states.ravel(), minlength=4) / states.size, pi, atol=0.02
    )


def test_scenario_chain_recovers_planted_transition_matrix(demo):
    truth = demo["truth"]
    for name in ("control", "perturbed"):
        counts = _transition_counts(truth.states[name].values)
        matrix = truth.transition[name]
        rows = counts.sum(axis=1, keepdims=True)
        se = np.sqrt(matrix * (1 - matrix) / rows)  # binomial standard error per entry
        assert np.max(np.abs(counts / rows - matrix) / se) < 4.5, name


def test_episode_length_matches_analytic_geometric_mean():
    # Analytic: a Markov chain with stay probability p has geometric episodes of mean
    # 1 / (1 - p) and standard deviation sqrt(p) / (1 - p).
    matrix = scenario(members=1, winters=1)["truth"].transition["perturbed"]
    states = _markov_chain(matrix, 20, 20000, np.random.default_rng(5))
    for k in range(4):
        p = matrix[k, k]
        runs = _runs(states, k)
        se = np.sqrt(p) / (1 - p) / np.sqrt(runs.size)
        assert abs(runs.mean() - 1 / (1 - p)) < 4 * se, REGIME_NAMES[k]


def test_planted_regime_changes_are_recovered(demo):
    truth = demo["truth"]
    control, perturbed = truth.states["control"].values, truth.states["perturbed"].values
    # NAO more persistent: the stay probability of NAO+ and NAO- (pooled), estimated from the
    # day-to-day transitions (unaffected by episodes cut at block ends), rises by the planted
    # amount (0.88 -> 0.93) within 3.5 binomial standard errors.
    stay, se2 = [], 0.0
    for states in (control, perturbed):
        counts = _transition_counts(states)
        p = (counts[0, 0] + counts[1, 1]) / counts[:2].sum()
        stay.append(p)
        se2 += p * (1 - p) / counts[:2].sum()
    planted = truth.transition["perturbed"][0, 0] - truth.transition["control"][0, 0]
    assert abs(stay[1] - stay[0] - planted) < 3.5 * np.sqrt(se2)
    assert stay[1] - stay[0] > 0.015
    # NAO- occupancy up by the planted amount, within 3.5 standard errors.
    diff, se = _occupancy_difference(control, perturbed, 1)
    assert abs(diff - truth.changes["occupancy_change"]) < 3.5 * se
    assert diff > 0.03


def test_no_planted_change_gives_no_occupancy_difference():
    plain = scenario(seed=4, members=MEMBERS, winters=1, changes=False)["truth"]
    for k in range(4):
        diff, se = _occupancy_difference(
            plain.states["control"].values, plain.states["perturbed"].values, k
        )
        assert abs(diff) < 3.5 * se, REGIME_NAMES[k]


def test_z500_composites_recover_the_regime_centroids(demo):
    truth = demo["truth"]
    height = _canonical(demo["control"]["phi"] / G0).values
    anomaly = height - height.mean(axis=0, keepdims=True)  # removes the climatology exactly
    states = truth.states["control"].values
    for k, name in enumerate(REGIME_NAMES):
        composite = anomaly[states == k].mean(axis=0)
        expected = truth.centroids["control"].values[k]
        r = np.corrcoef(composite.ravel(), expected.ravel())[0, 1]
        assert r > 0.95, name
        ratio = composite.std() / expected.std()
        assert 0.8 < ratio < 1.2, name
    # DESIGN.md convention: positive NAO = low near Iceland, high near the Azores.
    nao = truth.nao_pattern
    assert float(nao.sel(lat=65.0, lon=-20.0)) < -100.0
    assert float(nao.sel(lat=40.0, lon=-25.0)) > 80.0


# --------------------------------------------------------------------------------- jet


def test_wind_maximum_recovers_jet_latitude_and_preferred_positions(demo):
    truth = demo["truth"]
    latitude = _daily_jet_latitude(demo["control"]["ua"])
    residual = latitude - truth.jet_latitude["control"].values
    assert abs(residual.mean()) < 0.3 and residual.std() < 1.0
    states = truth.states["control"].values
    for k, name in enumerate(REGIME_NAMES):
        assert abs(latitude[states == k].mean() - truth.jet_latitudes["control"][name]) < 0.8
    # Three peaks in the daily distribution (scipy.stats.gaussian_kde, independent of the
    # package), each within 1.5 degrees of a planted preferred latitude.
    grid = np.linspace(25.0, 68.0, 431)
    density = gaussian_kde(latitude.ravel())(grid)
    peaks = grid[1:-1][(density[1:-1] > density[:-2]) & (density[1:-1] > density[2:])]
    assert peaks.size == 3
    np.testing.assert_allclose(peaks, truth.preferred_jet_latitudes["control"], atol=1.5)


def test_decoy_jet_lies_outside_the_sector(demo):
    # A wrong sector (0-40E instead of 60W-0) finds the fixed decoy near 30N, not the jet.
    u = _canonical(demo["control"]["ua"]).sel(longitude=slice(25.0, 40.0))
    profile = u.mean(("longitude", "plev", "realization", "time"))
    assert abs(float(profile["latitude"][int(profile.argmax("latitude"))]) - 30.0) <= 2.5


def test_perturbed_jet_is_one_degree_further_south_within_each_regime(demo):
    truth = demo["truth"]
    preferred = np.array([truth.jet_latitudes["control"][n] for n in REGIME_NAMES])
    offsets = {}
    for name in ("control", "perturbed"):
        latitude = _daily_jet_latitude(demo[name]["ua"])
        offsets[name] = latitude - preferred[truth.states[name].values]
    # Per-day noise is AR(1) (lag-1 0.6, sd about 2): standard error from the block means.
    block = {k: v.mean(axis=1) for k, v in offsets.items()}
    shift = block["perturbed"].mean() - block["control"].mean()
    se = np.sqrt(sum(b.var(ddof=1) / b.size for b in block.values()))
    assert abs(shift - truth.changes["jet_shift_degrees"]) < max(3.5 * se, 0.2)
    assert se < 0.25


# --------------------------------------------------------------------------------- SST


def test_sst_tripole_follows_the_nao_with_the_planted_lag(demo):
    truth = demo["truth"]
    sst = _canonical(demo["control"]["tos"]).values
    anomaly = sst - sst.mean(axis=0, keepdims=True)
    tripole = truth.sst_tripole.values
    ocean = np.isfinite(tripole)
    index = (anomaly[..., ocean] * tripole[ocean]).sum(axis=-1)  # (member, time)
    states = truth.states["control"].values
    forcing = (states == 0).astype(float) - (states == 1)
    forcing -= forcing.mean(axis=0)
    index -= index.mean(axis=0)

    def corr(lag: int) -> float:  # NAO at t against SST at t + lag
        if lag >= 0:
            a, b = forcing[:, : forcing.shape[1] - lag], index[:, lag:]
        else:
            a, b = forcing[:, -lag:], index[:, : index.shape[1] + lag]
        return float(np.corrcoef(a.ravel(), b.ravel())[0, 1])

    lags = np.arange(-20, 31)
    c = np.array([corr(int(k)) for k in lags])
    best = int(lags[np.argmax(c)])
    assert abs(best - truth.sst_lag_days["control"]) <= 4
    assert c.max() > 0.4
    lag = truth.sst_lag_days["control"]
    assert corr(lag) > corr(-lag) + 0.1  # SST lags the NAO, it does not lead it


# ------------------------------------------------------------------------------- files


def test_write_scenario_writes_one_member_per_file_and_reopens_raw(tmp_path):
    out = tmp_path / "demo"
    paths = write_scenario(out, seed=2, members=2, winters=1)
    assert paths["reference"] == [out / "reference.nc"]
    assert paths["control"] == [out / "control" / f"member_{i:03d}.nc" for i in range(2)]
    assert paths["perturbed"] == [out / "perturbed" / f"member_{i:03d}.nc" for i in range(2)]
    written = sorted(p.relative_to(out).as_posix() for p in out.rglob("*") if p.is_file())
    assert written == [
        "control/member_000.nc",
        "control/member_001.nc",
        "perturbed/member_000.nc",
        "perturbed/member_001.nc",
        "reference.nc",
    ]
    memory = scenario(seed=2, members=2, winters=1)
    with xr.open_dataset(paths["control"][1], engine="netcdf4") as member:
        assert "realization" not in member.dims
        assert member.attrs["realization_index"] == 1
        assert member.indexes["time"].calendar == "360_day"
        assert member["phi"].attrs["units"] == "m2 s-2"
        assert member["plev"].attrs["units"] == "Pa"
        assert np.all(np.diff(member["latitude"]) < 0)
        np.testing.assert_array_equal(
            member["phi"].values, memory["control"]["phi"].isel(realization=1).values
        )
        np.testing.assert_array_equal(
            member["tos"].values, memory["control"]["tos"].isel(realization=1).values
        )
    with xr.open_dataset(paths["reference"][0], engine="netcdf4") as ref:
        assert np.issubdtype(ref["time"].dtype, np.datetime64)
        assert ref["hgt500"].attrs["standard_name"] == "geopotential_height"
        np.testing.assert_array_equal(ref["uwnd"].values, memory["reference"]["uwnd"].values)


def test_write_scenario_refuses_to_overwrite(tmp_path):
    out = tmp_path / "demo"
    paths = write_scenario(out, seed=0, members=1, winters=1)
    before = paths["reference"][0].stat().st_mtime_ns
    with pytest.raises(ConfigError, match=re.escape("reference.nc")) as info:
        write_scenario(out, seed=1, members=1, winters=1)
    assert "another" in str(info.value)
    assert paths["reference"][0].stat().st_mtime_ns == before
    # One clashing member file stops the whole write before anything is written.
    fresh = tmp_path / "fresh"
    (fresh / "perturbed").mkdir(parents=True)
    (fresh / "perturbed" / "member_000.nc").write_bytes(b"")
    with pytest.raises(ConfigError, match=re.escape("member_000.nc")):
        write_scenario(fresh, members=1, winters=1)
    assert not (fresh / "reference.nc").exists()
    assert not list(fresh.rglob("*.partial"))
