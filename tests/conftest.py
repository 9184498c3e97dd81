"""Shared fixtures: the eofs reanalysis sample and a factory of small raw (CF-named) datasets."""

from __future__ import annotations

import hashlib
from collections.abc import Callable, Sequence
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

G0 = 9.80665  # standard gravity, m s-2: CGPM (1901), as adopted by WMO


def _tree_digest(path: Path) -> str:
    """SHA-256 of every name and file content under `path` (did anything change?)."""
    digest = hashlib.sha256()
    for item in sorted(path.rglob("*")):
        digest.update(str(item.relative_to(path)).encode())
        if item.is_file():
            digest.update(item.read_bytes())
    return digest.hexdigest()


@pytest.fixture(scope="session")
def tree_digest() -> Callable[[Path], str]:
    """The digest function above: tests check that refused runs leave outputs untouched."""
    return _tree_digest


@pytest.fixture(scope="session")
def eofs_sample_path() -> Path:
    """DJF-mean 500 hPa height, NCEP/NCAR reanalysis (Kalnay et al. 1996), shipped by eofs."""
    from eofs.examples import example_data_path

    return Path(example_data_path("hgt_djf.nc"))


def make_raw_dataset(
    *,
    start: str = "2000-11-01",
    periods: int = 30,
    freq: str = "D",
    calendar: str = "standard",
    members: int | None = 2,
    lat: Sequence[float] = (30.0, 40.0, 50.0, 60.0, 70.0),
    lon: Sequence[float] = tuple(np.arange(-180.0, 180.0, 30.0)),
    plev: Sequence[float] = (1000.0, 850.0, 700.0, 500.0, 250.0),
    variables: Sequence[str] = ("zg", "ua"),
    seed: int = 0,
) -> xr.Dataset:
    """A small dataset in CF form: lat ascending, lon -180..180, plev in hPa, height in m.

    Variables (any of): ``zg`` geopotential height (m) and ``ua`` eastward wind (m s-1) on
    (member, time, plev, lat, lon); ``psl`` sea-level pressure (Pa) and ``tos`` SST (K) on
    (member, time, lat, lon). ``members=None`` leaves out the member dimension. Values are
    random but plausible; they only serve tests of known truth (conversions, round trips).
    """
    rng = np.random.default_rng(seed)
    time = xr.date_range(
        start, periods=periods, freq=freq, calendar=calendar, use_cftime=calendar != "standard"
    )
    lat = np.asarray(lat, dtype=float)
    lon = np.asarray(lon, dtype=float)
    plev = np.asarray(plev, dtype=float)
    n_m = members or 1
    coords = {
        "member": ("member", np.arange(n_m), {"long_name": "ensemble member"}),
        "time": ("time", time, {"standard_name": "time", "axis": "T"}),
        "plev": (
            "plev",
            plev,
            {"standard_name": "air_pressure", "units": "hPa", "axis": "Z", "positive": "down"},
        ),
        "lat": ("lat", lat, {"standard_name": "latitude", "units": "degrees_north", "axis": "Y"}),
        "lon": ("lon", lon, {"standard_name": "longitude", "units": "degrees_east", "axis": "X"}),
    }
    shape4 = (n_m, periods, lat.size, lon.size)
    shape5 = (n_m, periods, plev.size, lat.size, lon.size)
    # Height falls with pressure (about 8 km scale height); noise makes every value distinct.
    base_z = 8000.0 * np.log(1013.0 / plev)[None, None, :, None, None]
    data: dict[str, tuple] = {}
    if "zg" in variables:
        zg = base_z + 50.0 * rng.standard_normal(shape5)
        attrs = {"standard_name": "geopotential_height", "units": "m"}
        data["zg"] = (("member", "time", "plev", "lat", "lon"), zg, attrs)
    if "ua" in variables:
        ua = 10.0 + 5.0 * rng.standard_normal(shape5)
        attrs = {"standard_name": "eastward_wind", "units": "m s-1"}
        data["ua"] = (("member", "time", "plev", "lat", "lon"), ua, attrs)
    if "psl" in variables:
        psl = 101325.0 + 800.0 * rng.standard_normal(shape4)
        attrs = {"standard_name": "air_pressure_at_mean_sea_level", "units": "Pa"}
        data["psl"] = (("member", "time", "lat", "lon"), psl, attrs)
    if "tos" in variables:
        tos = 285.0 + 3.0 * rng.standard_normal(shape4)
        attrs = {"standard_name": "sea_surface_temperature", "units": "K"}
        data["tos"] = (("member", "time", "lat", "lon"), tos, attrs)
    ds = xr.Dataset(data, coords=coords)
    if members is None:
        ds = ds.isel(member=0, drop=True)
    return ds


@pytest.fixture
def raw_dataset() -> Callable[..., xr.Dataset]:
    """The factory `make_raw_dataset` (keyword arguments as documented there)."""
    return make_raw_dataset
