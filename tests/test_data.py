"""Opening and normalizing data: `westerlies.data.open_dataset` and the canonical form."""

from __future__ import annotations

import datetime
import warnings
from pathlib import Path

import dask
import dask.array as dsa
import netCDF4
import numpy as np
import pytest
import xarray as xr

from westerlies import timeaxis
from westerlies.data import open_dataset
from westerlies.errors import (
    CoordinateError,
    GridError,
    InputError,
    InputWarning,
    TimeStepError,
    UnitsError,
)

G0 = 9.80665  # standard gravity, m s-2: CGPM (1901), as adopted by WMO


def _open_quiet(source, **kwargs) -> xr.Dataset:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", InputWarning)
        return open_dataset(source, **kwargs)


def _write_members(ds: xr.Dataset, directory: Path, stem: str = "member") -> list[Path]:
    """One file per member, without a member dimension inside (members as files)."""
    directory.mkdir(parents=True, exist_ok=True)
    member_dim = "realization" if "realization" in ds.dims else "member"
    paths = []
    for i in range(ds.sizes[member_dim]):
        path = directory / f"{stem}_{i:03d}.nc"
        ds.isel({member_dim: i}, drop=True).to_netcdf(path)
        paths.append(path)
    return paths


# --- the eofs reanalysis sample ----------------------------------------------------------------


def test_eofs_sample_opens_in_canonical_form(eofs_sample_path):
    # Source: NCEP/NCAR reanalysis DJF-mean Z500 (Kalnay et al. 1996), shipped by eofs as
    # hgt_djf.nc; its geopotential_height variable carries no units attribute.
    with pytest.warns(InputWarning, match=r"(?i)units"):
        ds = open_dataset(eofs_sample_path)
    z = ds["z500"]
    assert z.dims == ("member", "time", "lat", "lon")
    assert z.sizes == {"member": 1, "time": 65, "lat": 29, "lon": 49}
    np.testing.assert_array_equal(ds["member"].values, [0])
    np.testing.assert_allclose(ds["lat"].values, np.arange(20.0, 90.1, 2.5))
    np.testing.assert_allclose(ds["lon"].values, np.arange(-80.0, 40.1, 2.5))
    assert z.attrs["units"] == "m"
    assert z.attrs["standard_name"] == "geopotential_height"
    assert z.attrs.get("long_name")
    # The values are the file's own, read here with netCDF4 (independent of xarray): already
    # metres, lat 20..90 ascending and lon -80..40 in the file, so nothing is reordered.
    with netCDF4.Dataset(eofs_sample_path) as nc:
        raw = np.asarray(nc.variables["z"][:], dtype=float)[:, 0]
        lat = np.asarray(nc.variables["latitude"][:])
    assert np.all(np.diff(lat) > 0)
    np.testing.assert_allclose(z.isel(member=0).values, raw)
    # Z500 lies between about 4.8 and 6 km everywhere (common practice, a sanity range).
    assert 4700 < float(z.min()) and float(z.max()) < 6000


def test_eofs_sample_time_is_mid_january_one_per_winter(eofs_sample_path):
    # Source: hgt_djf.nc (eofs) dates each DJF mean in mid-January, 1948 to 2012.
    ds = _open_quiet(eofs_sample_path)
    assert timeaxis.time_kind(ds["time"]) == "seasonal"
    assert set(ds["time"].dt.month.values) == {1}
    np.testing.assert_array_equal(ds["time"].dt.year.values, np.arange(1948, 2013))


# --- normalization invariance ------------------------------------------------------------------


def _lat_descending(ds, tmp_path):
    return ds.isel(lat=slice(None, None, -1)), {}


def _lon_0_360(ds, tmp_path):
    lon = xr.DataArray(ds["lon"].values % 360.0, dims="lon", attrs=ds["lon"].attrs)
    return ds.assign_coords(lon=lon).sortby("lon"), {}


def _plev_pa(ds, tmp_path):
    plev = xr.DataArray(ds["plev"].values * 100.0, dims="plev", attrs={**ds["plev"].attrs})
    plev.attrs["units"] = "Pa"
    return ds.assign_coords(plev=plev), {}


def _geopotential(ds, tmp_path):
    # geopotential = g0 * geopotential height (WMO definition of geopotential height)
    z = (ds["zg"] * G0).assign_attrs(standard_name="geopotential", units="m2 s-2")
    return ds.drop_vars("zg").assign(z=z), {}


def _decametres(ds, tmp_path):
    zg = (ds["zg"] / 10.0).assign_attrs(standard_name="geopotential_height", units="dam")
    return ds.assign(zg=zg), {}


def _rename_coords(ds, names, keep):
    """Rename lat/lon/plev (and time) and keep only the attributes in `keep` on them."""
    out = ds.rename(names)
    for new in names.values():
        if new in out.coords:
            out[new].attrs = {k: v for k, v in out[new].attrs.items() if k in keep}
    return out


def _by_standard_name(ds, tmp_path):
    out = ds.rename({"zg": "field_a", "ua": "field_b"})
    out = _rename_coords(out, {"lat": "c_one", "lon": "c_two"}, keep={"standard_name"})
    out = _rename_coords(out, {"plev": "c_three"}, keep={"standard_name", "units"})
    return out, {}


def _by_axis(ds, tmp_path):
    out = ds.rename({"zg": "field_a", "ua": "field_b"})
    out = _rename_coords(
        out, {"lat": "yy", "lon": "xx", "plev": "zz", "time": "tt"}, keep={"axis", "units"}
    )
    return out, {}


def _by_units(ds, tmp_path):
    return _rename_coords(ds, {"lat": "q1", "lon": "q2"}, keep={"units"}), {}


def _plev_by_units(ds, tmp_path):
    return _rename_coords(ds, {"plev": "q3"}, keep={"units"}), {}


def _by_user_names(ds, tmp_path):
    out = ds.rename({"zg": "hgt", "ua": "uwnd"})
    for name in ("hgt", "uwnd"):
        out[name].attrs = {"units": out[name].attrs["units"]}
    return out, {"variables": {"z500": "hgt", "u": "uwnd"}}


def _realization(ds, tmp_path):
    return ds.rename({"member": "realization"}), {}


def _member_dim_named(ds, tmp_path):
    return ds.rename({"member": "run"}), {"member_dim": "run"}


def _files_list(ds, tmp_path):
    return [str(p) for p in _write_members(ds, tmp_path / "files")][::-1], {}


def _files_glob(ds, tmp_path):
    _write_members(ds, tmp_path / "glob")
    return str(tmp_path / "glob" / "member_*.nc"), {}


def _everything_at_once(ds, tmp_path):
    out, _ = _lat_descending(ds, tmp_path)
    out, _ = _lon_0_360(out, tmp_path)
    out, _ = _plev_pa(out, tmp_path)
    out, _ = _geopotential(out, tmp_path)
    out = out.rename({"z": "field_a", "ua": "field_b", "member": "realization"})
    out = _rename_coords(out, {"lat": "c_one", "lon": "c_two"}, keep={"standard_name"})
    return [str(p) for p in _write_members(out, tmp_path / "all")], {}


VARIANTS = [
    _lat_descending,
    _lon_0_360,
    _plev_pa,
    _geopotential,
    _decametres,
    _by_standard_name,
    _by_axis,
    _by_units,
    _plev_by_units,
    _by_user_names,
    _realization,
    _member_dim_named,
    _files_list,
    _files_glob,
    _everything_at_once,
]


@pytest.fixture
def base(raw_dataset):
    return raw_dataset(members=3, periods=6)


def test_canonical_form_of_cf_input(base):
    ds = _open_quiet(base)
    assert ds["z500"].dims == ("member", "time", "lat", "lon")
    assert ds["u"].dims == ("member", "time", "plev", "lat", "lon")
    # z500 is the 500 hPa level of the multi-level height
    np.testing.assert_allclose(ds["z500"].values, base["zg"].sel(plev=500.0).values)
    np.testing.assert_allclose(ds["u"].values, base["ua"].values)
    assert ds["z500"].attrs["units"] == "m"
    assert ds["z500"].attrs["standard_name"] == "geopotential_height"
    assert ds["u"].attrs["units"] == "m s-1"
    assert ds["u"].attrs["standard_name"] == "eastward_wind"
    assert ds["z500"].attrs.get("long_name") and ds["u"].attrs.get("long_name")
    assert np.all(np.diff(ds["lat"].values) > 0)
    assert np.all(np.diff(ds["lon"].values) > 0)
    assert ds["lon"].values.min() >= -180 and ds["lon"].values.max() < 180


@pytest.mark.parametrize("variant", VARIANTS, ids=lambda f: f.__name__.strip("_"))
def test_normalization_invariance(base, variant, tmp_path):
    # Analytic: every variant is the same field under another convention, so the canonical
    # form must not change (unit factors: g0 = 9.80665 m s-2, 1 hPa = 100 Pa, 1 dam = 10 m).
    want = _open_quiet(base)
    source, kwargs = variant(base, tmp_path)
    got = _open_quiet(source, **kwargs)
    for name in ("z500", "u"):
        a, b = got[name], want[name]
        if isinstance(source, (str, list)):  # members as files: numbered in sorted path order
            assert a.sizes["member"] == 3
            # (a `source` coordinate naming each member's file is allowed on top)
            a = a.drop_vars(["member", "source"], errors="ignore")
            b = b.drop_vars("member")
        xr.testing.assert_allclose(a, b, rtol=1e-6)
        assert got[name].attrs["units"] == want[name].attrs["units"]
    # a sector across the Greenwich meridian (60W-0) is contiguous in the canonical form
    np.testing.assert_allclose(got["lon"].sel(lon=slice(-60, 0)).values, [-60.0, -30.0, 0.0])


def test_normalization_is_idempotent(base):
    once = _open_quiet(base)
    xr.testing.assert_identical(_open_quiet(once), once)


def test_eofs_sample_is_idempotent(eofs_sample_path):
    once = _open_quiet(eofs_sample_path)
    with warnings.catch_warnings():
        warnings.simplefilter("error", InputWarning)  # canonical input needs no assumption
        twice = open_dataset(once)
    xr.testing.assert_identical(twice, once)


def test_eofs_sample_in_model_conventions(eofs_sample_path, tmp_path):
    # Source: eofs' hgt_djf.nc (NCEP/NCAR reanalysis, Kalnay et al. 1996) rewritten as a model
    # would: latitude descending, longitudes 0..360 (the sector 80W-40E then straddles the
    # seam), geopotential in m2 s-2 (g0 = 9.80665), pressure in Pa. Same canonical field.
    want = _open_quiet(eofs_sample_path)
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message="Ambiguous reference date string")
        raw = xr.open_dataset(eofs_sample_path).load()
    raw = raw.drop_vars(["bounds_time", "bounds_latitude", "bounds_longitude"])
    lon = raw["longitude"]
    raw = raw.assign_coords(
        longitude=("longitude", lon.values % 360.0, lon.attrs),
        pressure=("pressure", raw["pressure"].values * 100.0, {"units": "Pa", "axis": "Z"}),
    ).sortby("longitude")
    raw = raw.isel(latitude=slice(None, None, -1))
    raw["z"] = (raw["z"] * G0).assign_attrs(standard_name="geopotential", units="m2 s-2")
    path = tmp_path / "hgt_model_conventions.nc"
    raw.to_netcdf(path)
    got = _open_quiet(path)
    xr.testing.assert_allclose(got["z500"], want["z500"])


def test_files_are_members_in_sorted_path_order(raw_dataset, tmp_path):
    ds = raw_dataset(members=None, periods=4)
    offsets = {"b": 100.0, "a": 0.0, "c": 200.0}
    paths = []
    for key, offset in offsets.items():  # written in the order b, a, c
        path = tmp_path / f"run_{key}.nc"
        ds.assign(zg=ds["zg"].copy(data=ds["zg"].values + offset)).to_netcdf(path)  # keeps attrs
        paths.append(str(path))
    got = _open_quiet(paths)
    assert got.sizes["member"] == 3
    z0 = ds["zg"].sel(plev=500.0).values
    for i, offset in enumerate(sorted(offsets.values())):  # sorted names a, b, c -> 0, 100, 200
        np.testing.assert_allclose(got["z500"].isel(member=i).values, z0 + offset)


# --- members ---------------------------------------------------------------------------------


def test_single_realization_gets_size_one_member(raw_dataset):
    got = _open_quiet(raw_dataset(members=None))
    assert got["z500"].dims[0] == "member"
    np.testing.assert_array_equal(got["member"].values, [0])


@pytest.mark.parametrize("name", ["realization", "ensemble", "number", "ens", "realisation"])
def test_member_dimension_common_names(raw_dataset, name):
    got = _open_quiet(raw_dataset(members=2).rename({"member": name}))
    assert "member" in got.dims and name not in got.dims
    assert got.sizes["member"] == 2


# --- units -----------------------------------------------------------------------------------


def test_mslp_and_sst_units(raw_dataset):
    ds = raw_dataset(variables=("zg", "psl", "tos"))
    sst_c = (ds["tos"] - 273.15).assign_attrs(standard_name="sea_surface_temperature", units="degC")
    got = _open_quiet(ds.assign(tos=sst_c))
    # SI definitions: 1 hPa = 100 Pa; T(K) = T(degC) + 273.15
    np.testing.assert_allclose(got["mslp"].values, ds["psl"].values / 100.0)
    np.testing.assert_allclose(got["sst"].values, ds["tos"].values, rtol=1e-12)
    assert got["mslp"].attrs["units"] == "hPa"
    assert got["sst"].attrs["units"] == "K"
    assert got["mslp"].dims == got["sst"].dims == ("member", "time", "lat", "lon")


def test_missing_units_with_standard_name_warns(raw_dataset):
    ds = raw_dataset()
    ds["zg"].attrs = {"standard_name": "geopotential_height"}
    with pytest.warns(InputWarning, match=r"(?i)units"):
        got = open_dataset(ds)
    np.testing.assert_allclose(got["z500"].values, ds["zg"].sel(plev=500.0).values)
    assert got["z500"].attrs["units"] == "m"


def test_missing_units_without_standard_name_raises(raw_dataset):
    ds = raw_dataset().rename({"zg": "hgt"})
    ds["hgt"].attrs = {}
    with pytest.raises(UnitsError, match="hgt") as info:
        open_dataset(ds, variables={"z500": "hgt"})
    assert "units" in str(info.value).lower()
    assert issubclass(UnitsError, InputError)


def test_unknown_units_raise(raw_dataset):
    ds = raw_dataset()
    ds["zg"].attrs["units"] = "furlongs"
    with pytest.raises(UnitsError, match="furlongs"):
        open_dataset(ds)


# --- bad grids and missing variables ---------------------------------------------------------


def test_curvilinear_grid_is_refused(raw_dataset):
    ds = raw_dataset(members=None, variables=("zg",)).rename({"lat": "y", "lon": "x"})
    ds = ds.drop_vars(["y", "x"])
    lat2d, lon2d = np.meshgrid(
        np.linspace(30, 70, ds.sizes["y"]), np.linspace(-180, 150, 12), indexing="ij"
    )
    lat2d = lat2d + 0.3 * np.sin(np.radians(lon2d))  # a rotated/curvilinear grid
    ds = ds.assign_coords(
        lat=(("y", "x"), lat2d, {"standard_name": "latitude", "units": "degrees_north"}),
        lon=(("y", "x"), lon2d, {"standard_name": "longitude", "units": "degrees_east"}),
    )
    with pytest.raises(GridError, match=r"(?i)regrid"):
        open_dataset(ds)


def test_no_recognizable_variable(raw_dataset):
    ds = raw_dataset(variables=("zg",)).rename({"zg": "mystery"})
    ds["mystery"].attrs = {"units": "m"}
    with pytest.raises(InputError, match=r"(?i)(z500|geopotential)"):
        open_dataset(ds)


def test_named_variable_not_in_file(raw_dataset):
    with pytest.raises(InputError, match="not_there"):
        open_dataset(raw_dataset(), variables={"z500": "not_there"})


def test_height_without_500_hpa_is_not_dropped_silently(raw_dataset):
    # A height field on levels that miss 500 hPa cannot give z500: an error, or at least a
    # warning naming 500 hPa, never a dataset that just lacks z500 without a word.
    ds = raw_dataset(plev=(1000.0, 850.0, 700.0, 250.0))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            got = open_dataset(ds)
        except InputError as err:
            assert "500" in str(err)
            return
    assert "z500" not in got
    assert any(issubclass(w.category, InputWarning) and "500" in str(w.message) for w in caught), [
        str(w.message) for w in caught
    ]


def test_bad_options_raise(raw_dataset, tmp_path):
    ds = raw_dataset()
    with pytest.raises(InputError, match="zz"):
        open_dataset(ds, variables={"zz": "zg"})
    with pytest.raises(InputError, match="run"):
        open_dataset(ds, member_dim="run")
    with pytest.raises(InputError, match="nothing_here"):
        open_dataset(str(tmp_path / "nothing_here_*.nc"))
    with pytest.raises(InputError, match="absent"):
        open_dataset(tmp_path / "absent.nc")


# --- time axes -------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "calendar",
    ["standard", "proleptic_gregorian", "noleap", "365_day", "all_leap", "366_day", "360_day"],
)
def test_calendars_survive_files(raw_dataset, calendar, tmp_path):
    # CF Conventions section 4.4.1 (calendars): dates keep their year/month/day in every one.
    ds = raw_dataset(start="2003-12-20", periods=75, calendar=calendar, members=None)
    path = tmp_path / "cal.nc"
    ds.to_netcdf(path)
    got = _open_quiet(path)
    for field in ("year", "month", "day"):
        np.testing.assert_array_equal(
            getattr(got["time"].dt, field).values, getattr(ds["time"].dt, field).values
        )
    same = {
        "noleap": "365_day",
        "365_day": "noleap",
        "all_leap": "366_day",
        "366_day": "all_leap",
        "proleptic_gregorian": "standard",
    }
    assert timeaxis.calendar(got["time"]) in (calendar, same.get(calendar))
    assert timeaxis.time_kind(got["time"]) == "daily"


def test_daily_mean_of_subdaily_data(raw_dataset):
    ds = raw_dataset(start="2001-01-01", periods=4 * 5, freq="6h", members=2)
    got = _open_quiet(ds, daily="mean")
    assert timeaxis.time_kind(got["time"]) == "daily"
    assert got.sizes["time"] == 5
    assert got["z500"].dims == ("member", "time", "lat", "lon")  # canonical order kept
    assert got["u"].dims == ("member", "time", "plev", "lat", "lon")
    # daily mean = mean of the four 6-hourly values of each day (reshape, independent of xarray)
    z = ds["zg"].sel(plev=500.0).values  # member, time, lat, lon
    want = z.reshape(2, 5, 4, *z.shape[2:]).mean(axis=2)
    np.testing.assert_allclose(got["z500"].values, want)
    np.testing.assert_array_equal(got["time"].dt.day.values, [1, 2, 3, 4, 5])


def test_subdaily_data_refused_by_daily_function(raw_dataset):
    got = _open_quiet(raw_dataset(start="2001-01-01", periods=12, freq="6h"))
    with pytest.raises(TimeStepError, match=r"0\.25") as info:
        timeaxis.require_daily(got["time"], "jet latitude")
    message = str(info.value)
    assert "jet latitude" in message and "daily='mean'" in message


# --- laziness --------------------------------------------------------------------------------


def _no_compute(dsk, keys, **kwargs):
    raise AssertionError("open_dataset computed a dask graph; it should stay lazy")


def test_multifile_input_stays_lazy(raw_dataset, tmp_path):
    ds = raw_dataset(members=3, periods=12)
    _write_members(ds, tmp_path)
    pattern = str(tmp_path / "member_*.nc")
    with dask.config.set(scheduler=_no_compute):  # any compute inside raises
        got = _open_quiet(pattern, chunks={"time": 4})
    for name in ("z500", "u"):
        assert isinstance(got[name].data, dsa.Array), name
        assert got[name].chunks is not None
    assert max(got["z500"].chunks[got["z500"].dims.index("time")]) <= 4
    eager = _open_quiet(pattern)
    xr.testing.assert_allclose(got["z500"].compute(), eager["z500"])
    xr.testing.assert_allclose(got["u"].compute(), eager["u"])


def test_lazy_conversions_stay_lazy(raw_dataset, tmp_path):
    out, _ = _geopotential(raw_dataset(members=2, periods=8), tmp_path)
    out, _ = _lon_0_360(out, tmp_path)
    out = out.isel(lat=slice(None, None, -1))
    _write_members(out, tmp_path)
    with dask.config.set(scheduler=_no_compute):
        got = _open_quiet(str(tmp_path / "member_*.nc"), chunks={})
    assert isinstance(got["z500"].data, dsa.Array)
    assert got["z500"].attrs["units"] == "m"


# --- member files: times decoded once --------------------------------------------------------


def _per_file_reference(paths) -> xr.Dataset:
    """xarray's own reading, file by file (times decoded in each), concatenated on member."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        parts = [xr.open_dataset(p).load() for p in paths]
    return xr.concat(parts, dim="member", coords="minimal", compat="override", join="exact")


@pytest.mark.parametrize("chunks", [None, {"member": 2, "time": 5}])
def test_member_files_times_decoded_once_equal_xarray_per_file(raw_dataset, tmp_path, chunks):
    # Time bounds (CF 7.1) carry time units too: decoded as times, not read as a field.
    ds = raw_dataset(members=3, periods=10, calendar="noleap")
    ds["time_bnds"] = xr.concat([ds["time"], ds["time"] + datetime.timedelta(days=1)], "nv").T
    ds["time"].attrs["bounds"] = "time_bnds"
    ds["time"].encoding["units"] = ds["time_bnds"].encoding["units"] = "days since 1990-01-01"
    paths = _write_members(ds, tmp_path)
    got = _open_quiet(paths, chunks=chunks)
    want = _per_file_reference(paths)
    np.testing.assert_array_equal(got["time"].values, want["time"].values)
    assert got["time"].encoding["units"] == want["time"].encoding["units"]
    assert got["time"].encoding["calendar"] == want["time"].encoding["calendar"]
    np.testing.assert_allclose(got["z500"].values, want["zg"].sel(plev=500.0).values)


def test_member_files_with_differently_encoded_times(raw_dataset, tmp_path):
    # The same dates in other units in one file: decoded file by file, then they agree.
    ds = raw_dataset(members=3, periods=10, calendar="noleap")
    paths = _write_members(ds, tmp_path)
    other = xr.open_dataset(paths[1]).load()
    other.close()
    other["time"].encoding.update(units="hours since 1990-01-01", calendar="noleap")
    other.to_netcdf(paths[1])
    with netCDF4.Dataset(paths[1]) as nc:  # stored differently indeed
        assert nc["time"].units == "hours since 1990-01-01"
    got = _open_quiet(paths)
    np.testing.assert_array_equal(got["time"].values, _per_file_reference(paths)["time"].values)
    assert got.sizes["member"] == 3


# --- member files alike: read in groups without opening each with xarray ---------------------


def _packed_members(raw_dataset, tmp_path, scale_of_second=0.5) -> list[Path]:
    """Member files with zg packed as int16 (scale, offset, _FillValue) and missing values."""
    ds = raw_dataset(members=4, periods=12)
    zg = ds["zg"].values.copy()
    zg[1, 3, 3, 1, :] = np.nan
    zg[2, :, 3, 4, 5] = np.nan
    ds["zg"].values = zg
    paths = []
    for i in range(4):
        one = ds.isel(member=i, drop=True)
        scale = scale_of_second if i == 1 else 0.5
        one["zg"].encoding = {
            "dtype": "int16",
            "scale_factor": scale,
            "add_offset": 5000.0,
            "_FillValue": -32767,
        }
        path = tmp_path / f"member_{i:03d}.nc"
        one.to_netcdf(path)
        paths.append(path)
    return paths


def test_alike_member_files_read_in_groups_equal_xarray_per_file(
    raw_dataset, tmp_path, monkeypatch
):
    # Source of truth: xarray's own reading file by file (decoding of packed values, missing
    # values and times); only the first file is opened with xarray on the fast path.
    import westerlies.data as data
    from westerlies.member_files import FileStack

    paths = _packed_members(raw_dataset, tmp_path)
    opened = []
    real = data._open_lazy
    monkeypatch.setattr(data, "_open_lazy", lambda p, **kw: opened.append(p) or real(p, **kw))
    got = _open_quiet(paths, chunks={"member": 3, "time": 5})
    assert opened == [paths[0]]
    want = _per_file_reference(paths)
    np.testing.assert_array_equal(got["time"].values, want["time"].values)
    np.testing.assert_allclose(got["z500"].values, want["zg"].sel(plev=500.0).values)
    assert np.isnan(got["z500"].values).sum() == np.isnan(want["zg"].sel(plev=500.0)).sum() > 0
    np.testing.assert_allclose(got["u"].values, want["ua"].values)
    # the reader's own indexing against numpy's on the decoded values, key by key
    stack = FileStack(paths, "zg", want["zg"].shape[1:], {}, np.float64)
    with netCDF4.Dataset(paths[0]) as nc:
        stack.attrs = {k: nc["zg"].getncattr(k) for k in nc["zg"].ncattrs()}
    full = want["zg"].values
    keys = [
        (slice(None),),
        (slice(1, 3), slice(None, None, -1), 3),
        (2, slice(2, 11, 4), np.array([4, 0, 2]), slice(None, None, -2)),
        (np.array([3, 0]), -1, slice(None), slice(1, 2), np.array([-1, 0, 5])),
        (slice(0, 0), slice(None)),
    ]
    for key in keys:
        np.testing.assert_array_equal(stack[key], _numpy_outer(full, key), err_msg=str(key))


def test_alike_member_files_put_in_order_and_selected_inside_each_read(base, tmp_path, monkeypatch):
    # Analytic, as test_normalization_invariance: files with latitudes descending, longitudes
    # 0..360 (a sort), Pa, geopotential and other names hold the same canonical field.
    import dask

    import westerlies.data as data

    opened = []
    real = data._open_lazy
    monkeypatch.setattr(data, "_open_lazy", lambda p, **kw: opened.append(p) or real(p, **kw))
    source, _ = _everything_at_once(base, tmp_path)
    got = _open_quiet(source, chunks={"member": 2})
    assert len(opened) == 1  # the alike-files path
    want = _open_quiet(base)
    for name in ("z500", "u"):
        a = got[name].drop_vars(["member", "source"])
        xr.testing.assert_allclose(a, want[name].drop_vars("member"), rtol=1e-6)
    # the grid's reordering and the conversion to float64 are part of each group's read:
    # the reader and its chunks are the whole graph (no take or astype over whole chunks)
    assert len(got["u"].data.chunks[0]) == 2
    assert len(got["u"].data.dask.layers) == 2
    # and a later selection is made in the same task as the read
    sector = got["u"].sel(lat=slice(30, 60), lon=slice(-60, 0)).isel(plev=slice(0, 2))
    (optimized,) = dask.optimize(sector.data)
    assert len(optimized.dask.layers) == 1
    expected = want["u"].sel(lat=slice(30, 60), lon=slice(-60, 0)).isel(plev=slice(0, 2))
    np.testing.assert_allclose(optimized.compute(), expected.values, rtol=1e-6)


def _numpy_outer(values: np.ndarray, key: tuple) -> np.ndarray:
    """values[key] with every 1-D integer array taken along its own axis (outer indexing)."""
    out, axis = values, 0
    for index in key:
        if isinstance(index, np.ndarray):
            out = np.take(out, index, axis=axis)
            axis += 1
        else:
            out = out[(slice(None),) * axis + (index,)]
            axis += isinstance(index, slice)
    return out


def test_member_files_packed_differently_are_each_decoded(raw_dataset, tmp_path, monkeypatch):
    # One file packed with another scale factor: not alike, so every file is opened with
    # xarray and decoded with its own attributes (xarray's per-file reading is the truth).
    import westerlies.data as data

    paths = _packed_members(raw_dataset, tmp_path, scale_of_second=0.25)
    opened = []
    real = data._open_lazy
    monkeypatch.setattr(data, "_open_lazy", lambda p, **kw: opened.append(p) or real(p, **kw))
    got = _open_quiet(paths, chunks={"member": 2, "time": 5})
    assert len(opened) > len(paths) - 1  # the slow path opened each file
    want = _per_file_reference(paths)
    np.testing.assert_allclose(got["z500"].values, want["zg"].sel(plev=500.0).values)


def test_member_file_on_another_grid_is_refused_with_chunks(raw_dataset, tmp_path):
    ds = raw_dataset(members=3, periods=6)
    paths = _write_members(ds, tmp_path)
    other = ds.isel(member=2, drop=True).assign_coords(lat=ds["lat"] + 1.0)
    other.to_netcdf(paths[2])
    with pytest.raises(CoordinateError, match="grids or times that differ"):
        _open_quiet(paths, chunks={"member": 2, "time": 5})


def test_group_reads_and_xarray_reads_share_one_lock(raw_dataset, tmp_path):
    # netCDF-C and HDF5 are not thread-safe: the group reader takes xarray's own lock. Two
    # locks taken in different orders by xarray and by the reader deadlocked a threaded run
    # (found in tests/test_scaling.py); here threads read both ways side by side.
    import threading
    import time

    from westerlies.member_files import FileStack

    paths = _write_members(raw_dataset(members=2, periods=20), tmp_path)
    lazy = xr.open_dataset(paths[0])["ua"].variable  # xarray's lazy reads, under its lock
    stack = FileStack(paths, "ua", lazy.shape, {}, np.float64)
    done = []

    def work():
        for _ in range(100):
            assert lazy[:2].values.shape[0] == stack[1, :3].shape[0] - 1
        done.append(True)

    threads = [threading.Thread(target=work, daemon=True) for _ in range(6)]
    for thread in threads:
        thread.start()
    deadline = time.monotonic() + 60
    for thread in threads:
        thread.join(timeout=max(0.0, deadline - time.monotonic()))
    assert len(done) == len(threads), "reader threads still waiting: a lock-order deadlock"


def _lock_ids(stack, store) -> tuple[list[int], list[int]]:
    """Ids of the underlying locks of a reader and of an xarray netCDF4 file store."""
    return [id(x.lock) for x in stack.lock.locks], [id(x.lock) for x in store.lock.locks]


def test_group_reader_on_a_worker_shares_the_lock_of_xarray_files_sent_along(raw_dataset, tmp_path):
    # On a cluster's worker, xarray's file managers sent from the client close their files
    # when collected unless their (unpickled) lock is held; the reader must hold that same
    # lock, not the worker's own module-level one (HDF5 failed under reads with 2 workers).
    distributed = pytest.importorskip("distributed")
    from westerlies.member_files import FileStack

    paths = _write_members(raw_dataset(members=2, periods=5), tmp_path)
    lazy = xr.open_dataset(paths[0])["ua"].variable
    stack = FileStack(paths, "ua", lazy.shape, {}, np.float64)
    store = lazy._data
    while not hasattr(store, "datastore"):  # xarray's wrappers around the file's array
        store = store.array
    with (
        distributed.LocalCluster(
            n_workers=1, threads_per_worker=1, processes=True, dashboard_address=None
        ) as cluster,
        distributed.Client(cluster) as client,
    ):
        ours, xarrays = client.submit(_lock_ids, stack, store.datastore).result()
    assert ours == xarrays


def test_member_file_check_runs_on_a_cluster_with_the_same_verdict(
    raw_dataset, tmp_path, monkeypatch
):
    # On a cluster the workers check the member files in groups; the verdict (the first
    # file's raw field attributes, or None when a file differs) is the one of the check run
    # here file by file.
    distributed = pytest.importorskip("distributed")
    from westerlies import member_files

    (tmp_path / "alike").mkdir()
    (tmp_path / "differ").mkdir()
    alike = _packed_members(raw_dataset, tmp_path / "alike")
    differ = _packed_members(raw_dataset, tmp_path / "differ", scale_of_second=0.25)
    fields = ["zg", "ua"]
    monkeypatch.setattr(member_files, "CHECK_GROUP", 1)  # a group per file
    here = [member_files.same_layout(p[0], p[1:], fields) for p in (alike, differ)]
    with (
        distributed.LocalCluster(
            n_workers=1, threads_per_worker=1, processes=True, dashboard_address=None
        ) as cluster,
        distributed.Client(cluster),
        distributed.get_task_stream() as stream,
    ):
        there = [member_files.same_layout(p[0], p[1:], fields) for p in (alike, differ)]
    assert sum("_all_match" in str(task["key"]) for task in stream.data) == 2 * 3
    assert here[1] is None and there[1] is None
    assert there[0] is not None and there[0].keys() == here[0].keys() == set(fields)
    for name in fields:
        assert there[0][name].keys() == here[0][name].keys()
        for key, value in here[0][name].items():
            np.testing.assert_array_equal(there[0][name][key], value)
