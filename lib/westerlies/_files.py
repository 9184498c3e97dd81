"""Small file helpers shared by the writers: atomic netCDF writes, public permissions."""

from __future__ import annotations

import os
from pathlib import Path

import xarray as xr


def _umask() -> int:
    current = os.umask(0)
    os.umask(current)
    return current


def publish_mode(path: str | os.PathLike, directory: bool = False) -> None:
    """Give a file or directory made by `tempfile` (private, 0600/0700) the usual permissions.

    tempfile creates private entries; a figure set is meant to be read by others like any file
    the user writes, so the mode becomes 0666 (files) or 0777 (directories) less the umask.
    """
    os.chmod(Path(path), (0o777 if directory else 0o666) & ~_umask())


def write_netcdf(ds: xr.Dataset, path: Path, dtype: str = "float32") -> None:
    """Write `ds` (data variables as `dtype`) under a temporary name beside `path`, then rename
    it into place: a reader never sees a half-written file, and a failure leaves none."""
    path.parent.mkdir(parents=True, exist_ok=True)
    temporary = path.with_name(f".{path.name}.{os.getpid()}.partial")
    encoding = {name: {"_FillValue": None} for name in ds.coords if name != "time"}
    encoding.update({name: {"dtype": dtype} for name in ds.data_vars})
    try:
        ds.to_netcdf(temporary, engine="netcdf4", format="NETCDF4", encoding=encoding)
        os.replace(temporary, path)
    finally:
        if temporary.exists():
            temporary.unlink()
