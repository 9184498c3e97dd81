"""Benchmark: jet index of a large ensemble from netCDF files, against a plain read.

Writes M members x 151 days (1 November - 31 March) x 3 levels (925, 850, 700 hPa) of zonal
wind on a 2.5-degree grid to netCDF files in a temporary directory (canonical form, float32,
`--per-file` members per file), opens them lazily with xarray/dask, and times

1. a plain read: every value of `u` read and summed (`u.sum().compute()`);
2. `jet_index(u)`: levels and sector reduced lazily, then the small profile filtered and searched.

Run by hand (not part of the tests):

    .venv/bin/python benchmarks/bench_jet.py                 # 200 members, North Atlantic grid
    .venv/bin/python benchmarks/bench_jet.py --members 1000  # the full size
    .venv/bin/python benchmarks/bench_jet.py --domain global # 73 x 144 points per level

The data are random wind with a Gaussian jet (invented, for timing only). The files are read
right after being written, so the operating system's file cache is warm for both timings.
"""

from __future__ import annotations

import argparse
import tempfile
import time
import warnings
from pathlib import Path

import dask
import numpy as np
import xarray as xr

from westerlies.errors import InputWarning
from westerlies.jet import jet_index

DOMAINS = {  # lat south, lat north, lon west, lon east (degrees), 2.5-degree spacing
    "atlantic": (0.0, 90.0, -90.0, 40.0),
    "global": (-90.0, 90.0, -180.0, 177.5),
}


def write_files(out: Path, members: int, per_file: int, domain: str, seed: int = 0) -> list[Path]:
    """Write `members` members in files of `per_file` members; return the paths."""
    south, north, west, east = DOMAINS[domain]
    lat = np.arange(south, north + 0.1, 2.5)
    lon = np.arange(west, east + 0.1, 2.5)
    plev = np.array([925.0, 850.0, 700.0])
    time_ = xr.date_range("2000-11-01", "2001-03-31", freq="D")
    rng = np.random.default_rng(seed)
    paths = []
    for first in range(0, members, per_file):
        n = min(per_file, members - first)
        centre = 45 + 8 * rng.standard_normal((n, time_.size, 1, 1, 1)).astype(np.float32)
        jet = 15 * np.exp(-0.5 * ((lat[:, None] - centre) / 8) ** 2)
        noise = rng.standard_normal((n, time_.size, plev.size, lat.size, lon.size), np.float32)
        u = (jet + 3 * noise).astype(np.float32)
        ds = xr.Dataset(
            {"u": (("member", "time", "plev", "lat", "lon"), u, {"units": "m s-1"})},
            coords={
                "member": np.arange(first, first + n),
                "time": time_,
                "plev": ("plev", plev, {"units": "hPa"}),
                "lat": ("lat", lat, {"units": "degrees_north"}),
                "lon": ("lon", lon, {"units": "degrees_east"}),
            },
        )
        path = out / f"u_{first:04d}.nc"
        ds.to_netcdf(path, engine="netcdf4", encoding={"u": {"dtype": "float32"}})
        paths.append(path)
    return paths


def open_lazy(paths: list[Path], per_file: int) -> xr.DataArray:
    ds = xr.open_mfdataset(
        paths,
        combine="nested",
        concat_dim="member",
        chunks={"member": per_file},
        engine="netcdf4",
        data_vars="all",
    )
    return ds["u"]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--members", type=int, default=200)
    parser.add_argument("--per-file", type=int, default=10, help="members per file")
    parser.add_argument("--domain", choices=sorted(DOMAINS), default="atlantic")
    parser.add_argument("--dir", type=Path, default=None, help="where to write (default: temp)")
    args = parser.parse_args()

    with tempfile.TemporaryDirectory(dir=args.dir) as tmp:
        out = Path(tmp)
        t0 = time.perf_counter()
        paths = write_files(out, args.members, args.per_file, args.domain)
        size = sum(p.stat().st_size for p in paths) / 1e9
        print(f"wrote {len(paths)} files, {size:.2f} GB in {time.perf_counter() - t0:.1f} s")
        u = open_lazy(paths, args.per_file)
        print(
            f"u: {dict(u.sizes)}, {u.nbytes / 1e9:.2f} GB as float32, dask chunks "
            f"{u.data.chunksize}, {dask.config.get('scheduler', 'threads')} scheduler"
        )

        t0 = time.perf_counter()
        total = float(open_lazy(paths, args.per_file).sum().compute())
        t_read = time.perf_counter() - t0
        print(f"plain read (sum of every value): {t_read:.2f} s  [{total:.3g}]")

        t0 = time.perf_counter()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", InputWarning)
            jet = jet_index(open_lazy(paths, args.per_file))
        t_jet = time.perf_counter() - t0
        valid = int(jet["latitude"].notnull().sum())
        print(
            f"jet_index: {t_jet:.2f} s ({valid} valid member-days, "
            f"mean latitude {float(jet['latitude'].mean()):.2f})"
        )
        print(f"ratio jet_index / plain read: {t_jet / t_read:.2f}")


if __name__ == "__main__":
    main()
