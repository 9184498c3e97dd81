"""The input check (`westerlies.check.check_input`)."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from westerlies.check import check_input

G0 = 9.80665  # standard gravity, m s-2: CGPM (1901), as adopted by WMO
DIAGNOSTICS = {"nao", "jet", "regimes", "sst_index"}


def _model_like(raw_dataset, **kwargs) -> xr.Dataset:
    """A November-March 360_day ensemble in model conventions: lon 0..360, Pa, geopotential."""
    ds = raw_dataset(
        start="2003-11-01",
        periods=150,
        calendar="360_day",
        members=3,
        variables=("zg", "ua", "tos"),
        **kwargs,
    )
    z = (ds["zg"] * G0).assign_attrs(standard_name="geopotential", units="m2 s-2")
    ds = ds.drop_vars("zg").assign(z=z)
    ds = ds.assign_coords(
        lon=("lon", ds["lon"].values % 360, ds["lon"].attrs),
        plev=("plev", ds["plev"].values * 100, {**ds["plev"].attrs, "units": "Pa"}),
    ).sortby("lon")
    return ds


def test_eofs_sample_serves_the_nao_only(eofs_sample_path):
    # Source: NCEP/NCAR DJF-mean Z500 (Kalnay et al. 1996) in eofs' hgt_djf.nc: one value per
    # winter 1948-2012, no units attribute, no wind.
    report = check_input(str(eofs_sample_path))
    assert report.ok
    assert report.errors == []
    assert set(report.serves) == DIAGNOSTICS
    assert report.serves == {"nao": True, "jet": False, "regimes": False, "sst_index": False}
    joined = " ".join(report.warnings).lower()
    assert "daily" in joined  # the daily diagnostics need daily data
    assert "units" in joined  # the missing units attribute, taken from the standard_name
    text = str(report)
    for needle in ("z500", "standard", "1948", "2012", "65", "member", "missing"):
        assert needle in text, needle
    assert "20" in text and "90" in text and "-80" in text and "40" in text  # the grid


def test_model_ensemble_serves_every_diagnostic(raw_dataset, tmp_path):
    ds = _model_like(raw_dataset)
    path = tmp_path / "ensemble.nc"
    ds.to_netcdf(path)
    report = check_input(str(path))
    assert report.ok, str(report)
    assert report.errors == []
    assert report.serves == dict.fromkeys(DIAGNOSTICS, True)
    text = str(report)
    for needle in ("z500", "u", "sst", "360_day", "daily", "850", "block"):
        assert needle in text, needle
    # levels reported in hPa after conversion from Pa
    assert "85000" not in text


def test_members_as_files(raw_dataset, tmp_path):
    ds = _model_like(raw_dataset)
    paths = []
    for i in range(3):
        path = tmp_path / f"member_{i}.nc"
        ds.isel(member=i, drop=True).to_netcdf(path)
        paths.append(str(path))
    report = check_input(paths)
    assert report.ok, str(report)
    members_line = [line for line in str(report).splitlines() if "member" in line.lower()]
    assert any("3" in line for line in members_line)


def test_check_accepts_a_dataset(raw_dataset):
    report = check_input(raw_dataset(start="2003-12-01", periods=90, variables=("ua",)))
    assert report.ok
    assert report.serves["jet"] and not report.serves["nao"] and not report.serves["regimes"]


def test_curvilinear_grid_is_an_error_not_an_exception(raw_dataset):
    ds = (
        raw_dataset(members=None, variables=("zg",), start="2003-12-01")
        .rename({"lat": "y", "lon": "x"})
        .drop_vars(["y", "x"])
    )
    lat2d, lon2d = np.meshgrid(
        np.linspace(30, 70, ds.sizes["y"]), np.linspace(-180, 150, ds.sizes["x"]), indexing="ij"
    )
    ds = ds.assign_coords(
        lat=(
            ("y", "x"),
            lat2d + 0.2 * np.cos(np.radians(lon2d)),
            {"standard_name": "latitude", "units": "degrees_north"},
        ),
        lon=(("y", "x"), lon2d, {"standard_name": "longitude", "units": "degrees_east"}),
    )
    report = check_input(ds)
    assert not report.ok
    assert not any(report.serves.values())
    assert any("regrid" in e.lower() for e in report.errors)
    assert "regrid" in str(report).lower()


def test_missing_units_are_an_error(raw_dataset):
    ds = raw_dataset(variables=("zg",)).rename({"zg": "hgt"})
    ds["hgt"].attrs = {}
    report = check_input(ds, variables={"z500": "hgt"})
    assert not report.ok
    assert any("units" in e and "hgt" in e for e in report.errors)


def test_nonexistent_file(tmp_path):
    missing = tmp_path / "nowhere.nc"
    report = check_input(str(missing))
    assert not report.ok
    assert any("nowhere.nc" in e for e in report.errors)


def test_subdaily_data_need_daily_means(raw_dataset):
    ds = raw_dataset(start="2003-12-01", periods=8 * 4, freq="6h")
    report = check_input(ds)
    assert not report.serves["regimes"] and not report.serves["jet"]
    assert any("daily='mean'" in w for w in report.warnings + report.errors)
    daily = check_input(ds, daily="mean")
    assert daily.serves["regimes"] and daily.serves["jet"]


def test_missing_values_are_counted(raw_dataset):
    ds = raw_dataset(start="2003-12-01", periods=20, variables=("zg",))
    zg = ds["zg"].values.copy()
    # seven missing values at 500 hPa, at different times and points
    for k in range(7):
        zg[0, 2 * k, 3, k % 5, k] = np.nan
    report = check_input(ds.assign(zg=(ds["zg"].dims, zg, ds["zg"].attrs)))
    lines = [line for line in str(report).splitlines() if "missing" in line.lower()]
    assert any("7" in line for line in lines), lines
    assert any("missing" in w.lower() for w in report.warnings)


@pytest.mark.parametrize("calendar", ["standard", "noleap", "all_leap", "360_day"])
def test_calendar_is_reported(raw_dataset, calendar):
    report = check_input(raw_dataset(start="2003-12-01", periods=60, calendar=calendar))
    assert report.ok
    assert calendar in str(report)
