"""Offline coastlines for maps: never downloaded at run time.

Looks for installed GSHHS shapefiles (Debian's ``python-cartopy-data`` puts coarse ones under
/usr/share/cartopy/data) and cartopy's own data directories; ``WESTERLIES_COASTLINES`` may name a
shapefile directly. Where none is found, maps draw without coastlines and say so once.
"""

from __future__ import annotations

import functools
import logging
import os
import warnings
from pathlib import Path

from .errors import InputWarning

_RELATIVE = Path("shapefiles") / "gshhs" / "c" / "GSHHS_c_L1.shp"
_SYSTEM_DIRS = (Path("/usr/share/cartopy/data"), Path("/usr/local/share/cartopy/data"))


def coastline_path() -> Path | None:
    """Path of an installed coarse GSHHS coastline shapefile, or None."""
    named = os.environ.get("WESTERLIES_COASTLINES")
    if named:
        return Path(named) if Path(named).is_file() else None
    dirs = list(_SYSTEM_DIRS)
    try:
        import cartopy

        dirs = [
            Path(d)
            for d in (cartopy.config.get("pre_existing_data_dir"), cartopy.config.get("data_dir"))
            if d
        ] + dirs
    except ImportError:  # cartopy is a dependency; this only keeps the lookup side-effect free
        pass
    for base in dirs:
        if (base / _RELATIVE).is_file():
            return base / _RELATIVE
    return None


@functools.cache
def coastlines():
    """A cartopy feature of the coastlines read from disk, or None (warned once)."""
    path = coastline_path()
    if path is None:
        warnings.warn(
            "no offline coastline data found (install Debian's python-cartopy-data or set "
            "WESTERLIES_COASTLINES to a GSHHS shapefile); maps are drawn without coastlines",
            InputWarning,
            stacklevel=2,
        )
        return None
    import cartopy.crs as ccrs
    import cartopy.feature as cfeature
    import cartopy.io.shapereader as shapereader

    # pyshp logs a note for each ring-only polygon of the coarse GSHHS file; they draw fine
    shapefile_log = logging.getLogger("shapefile")
    level = shapefile_log.level
    shapefile_log.setLevel(logging.ERROR)
    try:
        geometries = list(shapereader.Reader(str(path)).geometries())
    finally:
        shapefile_log.setLevel(level)
    return cfeature.ShapelyFeature(
        geometries, ccrs.PlateCarree(), facecolor="none", edgecolor="0.3", linewidth=0.6
    )
