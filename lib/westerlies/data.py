"""Opening files and turning them into westerlies' one canonical form.

Canonical form (DESIGN.md principle 1): dims ``member, time, plev, lat, lon`` (each variable has
the subset it needs), latitude ascending, longitude ascending in [-180, 180), pressure in hPa,
geopotential height in m (``z500``), zonal wind in m s-1 (``u``), mean sea-level pressure in hPa
(``mslp``) and sea-surface temperature in K (``sst``).

Choice: data with no member dimension (a reanalysis) get a size-1 ``member`` dimension with
coordinate ``[0]``, so every diagnostic handles one realization and an ensemble alike.
Normalization is idempotent: opening a canonical dataset returns it unchanged.
"""

from __future__ import annotations

import glob
import os
import warnings
from collections.abc import Mapping, Sequence
from pathlib import Path

import cftime
import numpy as np
import xarray as xr

from . import member_files, timeaxis, units
from .errors import CoordinateError, GridError, InputError, InputWarning, TimeStepError, UnitsError

__all__ = ["CANONICAL_VARIABLES", "canonicalize", "open_dataset"]

Source = str | os.PathLike | Sequence[str | os.PathLike] | xr.Dataset

_MEMBER_NAMES = (
    "member",
    "realization",
    "realisation",
    "ensemble",
    "ens",
    "number",
    "member_id",
    "ensemble_member",
    "ens_mem",
)
_COORD_NAMES = {
    "lat": ("lat", "latitude", "nav_lat", "y_lat"),
    "lon": ("lon", "longitude", "nav_lon", "x_lon"),
    "plev": (
        "plev",
        "level",
        "lev",
        "pressure",
        "pressure_level",
        "isobaricinhpa",
        "pres",
        "air_pressure",
        "p",
    ),
    "time": ("time", "t", "valid_time", "date"),
}
_COORD_UNITS = {
    "lat": ("degrees_north", "degree_north", "degree_n", "degrees_n", "degreen", "degreesn"),
    "lon": ("degrees_east", "degree_east", "degree_e", "degrees_e", "degreee", "degreese"),
}
_AXIS = {"lat": "Y", "lon": "X", "time": "T"}


# One entry per canonical variable: standard names (with the quantity their units must be),
# fallback variable names, and the quantities its units may express.
CANONICAL_VARIABLES: dict[str, dict] = {
    "z500": {
        "standard_names": {"geopotential_height": "height", "geopotential": "geopotential"},
        "names": ("z500", "zg500", "hgt500", "z", "zg", "hgt", "gh", "phi", "geopotential"),
        "quantities": ("height", "geopotential"),
        "long_name": "geopotential height at 500 hPa",
        "standard_name": "geopotential_height",
        "level": 500.0,
    },
    "u": {
        "standard_names": {"eastward_wind": "wind"},
        "names": ("u", "ua", "uwnd", "u_wind", "uas_plev"),
        "quantities": ("wind",),
        "long_name": "eastward wind",
        "standard_name": "eastward_wind",
        "level": None,
    },
    "mslp": {
        "standard_names": {
            "air_pressure_at_mean_sea_level": "pressure",
            "air_pressure_at_sea_level": "pressure",
        },
        "names": ("mslp", "psl", "msl", "slp", "prmsl"),
        "quantities": ("pressure",),
        "long_name": "air pressure at mean sea level",
        "standard_name": "air_pressure_at_mean_sea_level",
        "level": None,
    },
    "sst": {
        "standard_names": {
            "sea_surface_temperature": "temperature",
            "sea_surface_skin_temperature": "temperature",
        },
        "names": ("sst", "tos", "sea_surface_temperature"),
        "quantities": ("temperature",),
        "long_name": "sea surface temperature",
        "standard_name": "sea_surface_temperature",
        "level": None,
    },
}


def open_dataset(
    source: Source,
    *,
    variables: Mapping[str, str] | None = None,
    member_dim: str | None = None,
    daily: str | None = None,
    chunks: Mapping[str, int] | str | int | None = None,
) -> xr.Dataset:
    """Open files or a Dataset and return the canonical form.

    Parameters
    ----------
    source : a path, a glob pattern, a list of paths (one member per file, concatenated along
        ``member`` in sorted order), or an ``xarray.Dataset``.
    variables : canonical name -> name in the data, e.g. ``{"z500": "zg", "u": "ua"}``, for
        variables that carry no CF ``standard_name``.
    member_dim : name of the member dimension when it is not one of the common names
        (member, realization, ensemble, number, ...).
    daily : ``"mean"`` averages sub-daily data to daily means; None keeps the time step.
    chunks : dask chunks passed to ``xarray.open_dataset``; with chunks nothing is loaded.

    Returns
    -------
    Dataset with canonical variables among ``z500`` (m), ``u`` (m s-1), ``mslp`` (hPa), ``sst`` (K).

    Raises
    ------
    InputError (or a subclass) naming the file or variable, what was found and the fix.
    """
    raw, label, files, later = _read(source, chunks=chunks, member_dim=member_dim)
    ds = canonicalize(raw, variables=variables, member_dim=member_dim, label=label, chunks=later)
    if files is not None:
        ds = ds.assign_coords(source=("member", [str(f) for f in files]))
        ds["source"].attrs = {"long_name": "file each member was read from"}
    if daily is not None:
        ds = _to_daily(ds, daily, label)
    return ds


# --------------------------------------------------------------------------------- reading


def _paths(source) -> list[Path]:
    if isinstance(source, (str, os.PathLike)):
        text = os.fspath(source)
        if any(ch in text for ch in "*?["):
            found = sorted(glob.glob(text))
            if not found:
                raise InputError.make(
                    f"glob {text!r}",
                    "no matching files",
                    "at least one file",
                    "check the pattern and the current directory",
                )
            return [Path(p) for p in found]
        return [Path(text)]
    return sorted(Path(os.fspath(p)) for p in source)


def _open_one(path: Path, chunks) -> xr.Dataset:
    """Open one file; with a mapping of chunks, only the dims the file has are chunked (the
    canonical names, such as ``member`` for files concatenated later, may not be there yet)."""
    return _chunked(_open_lazy(path), chunks)


def _open_lazy(path: Path, decode_times: bool = True) -> xr.Dataset:
    """One file opened without dask: metadata read, values read lazily (under xarray's file
    locks) when indexed."""
    if not path.exists():
        raise InputError.make(
            f"file {str(path)!r}", "no such file", "an existing netCDF file", "check the path"
        )
    try:
        with warnings.catch_warnings():
            warnings.filterwarnings("ignore", message="Ambiguous reference date string")
            return xr.open_dataset(path, decode_times=decode_times)
    except (OSError, ValueError) as err:
        raise InputError.make(
            f"file {str(path)!r}",
            f"a file xarray cannot open ({err})",
            "a netCDF file with CF time units",
            "check the file, or open it yourself and pass the Dataset",
        ) from err


def _chunked(ds: xr.Dataset, chunks) -> xr.Dataset:
    if chunks is None:
        return ds
    if isinstance(chunks, Mapping):
        return ds.chunk({}).chunk({k: v for k, v in chunks.items() if k in ds.dims})
    return ds.chunk(chunks)


def _read(source, *, chunks, member_dim):
    """Raw dataset, a label for messages, the member files (None unless one per member), and
    the chunks still to apply once the grid is in order (None when the data are chunked)."""
    if isinstance(source, xr.Dataset):
        return (source.chunk(chunks) if chunks is not None else source), "dataset", None, None
    paths = _paths(source)
    if len(paths) == 1:
        return _open_one(paths[0], chunks), f"file {str(paths[0])!r}", None, None
    label = f"{len(paths)} files like {str(paths[0])!r}"
    grouped = isinstance(chunks, Mapping) and "member" in chunks
    if grouped:
        merged = _alike_member_files(paths, member_dim)
        if merged is not None:
            return merged, label, paths, chunks
    # Times stay encoded while the files are opened and concatenated, then are decoded once:
    # decoding every file's times and indexing them is 40% of the cost of opening thousands
    # of member files. Member files whose times are encoded differently are decoded one by one.
    lazies = []
    for path in paths:
        lazy = _open_lazy(path, decode_times=False)
        found = _find_member_dim(lazy, member_dim)
        if found is not None:
            if lazy.sizes[found] != 1:
                raise CoordinateError.make(
                    f"file {str(path)!r}",
                    f"{lazy.sizes[found]} members along {found!r}",
                    "one member per file when several files are given",
                    "pass one file holding all members, or one file per member",
                )
            lazy = lazy.isel({found: 0}, drop=True)
        lazies.append(lazy)
    encodings = {_time_encoding(lazy) for lazy in lazies}
    if len(encodings) > 1:
        lazies = [_decode_times(lazy) for lazy in lazies]
    # Grouped: the numeric fields are read by groups of files (`_grouped`); the rest (times,
    # grid, bounds) is concatenated here, which checks that every file has the same grid and
    # times. Otherwise every variable is concatenated from the files, chunked as asked.
    encoded = {name for name, _, _ in next(iter(encodings))} if len(encodings) == 1 else set()
    fields = [n for n in _numeric_fields(lazies, paths) if n not in encoded] if grouped else []
    parts = [lazy.drop_vars(fields) if grouped else _chunked(lazy, chunks) for lazy in lazies]
    try:
        merged = xr.concat(
            parts, dim="member", data_vars="all", coords="minimal", compat="override", join="exact"
        )
    except ValueError as err:
        raise CoordinateError.make(
            f"{len(paths)} member files",
            f"grids or times that differ ({err})",
            "the same time axis and grid in every member file",
            "regrid or align the members before opening them together",
        ) from err
    merged = merged.assign_coords(member=np.arange(len(paths)))
    if grouped:
        # one task per group of chunks["member"] files, not one per file: reductions over the
        # ensemble then work on a few large chunks instead of thousands of small ones
        merged = _grouped(merged, lazies, fields, int(chunks["member"])).chunk(
            {k: v for k, v in chunks.items() if k in merged.dims}
        )
    if len(encodings) == 1:
        merged = _decode_times(merged)
    return merged, label, paths, None


def _alike_member_files(paths: list[Path], member_dim) -> xr.Dataset | None:
    """Member files read without opening every file with xarray (see
    `westerlies.member_files`), when the files hold no member dimension and all have the
    first file's variables, attributes, grid and times; else None (each file is then opened
    with xarray, which also says what differs). The fields are lazily indexed, not yet
    chunked: `canonicalize` chunks them once the grid is in order."""
    first = _open_lazy(paths[0], decode_times=False)
    if _find_member_dim(first, member_dim) is not None:
        return None
    encoded = {name for name, _, _ in _time_encoding(first)}
    fields = [n for n in _numeric_fields([first], paths[:1]) if n not in encoded]
    raw = member_files.same_layout(paths[0], paths[1:], fields)
    if raw is None:
        return None
    # in memory (grid, times, bounds: small), so no xarray file manager of the first file
    # travels to a cluster's workers with the graph
    merged = first.drop_vars(fields).load()
    # every file has the same values of these: as concatenating the files would give them
    for name in list(merged.data_vars):
        merged[name] = merged[name].expand_dims(member=len(paths))
    merged = merged.assign_coords(member=np.arange(len(paths)))
    return _decode_times(member_files.lazy_fields(merged, first, paths, raw))


def _time_encoding(ds: xr.Dataset) -> frozenset[tuple[str, str, str | None]]:
    """(name, units, calendar) of every variable with CF time units ("<unit> since <date>")."""
    return frozenset(
        (str(name), str(var.attrs["units"]), var.attrs.get("calendar"))
        for name, var in ds.variables.items()
        if " since " in str(var.attrs.get("units", ""))
    )


def _decode_times(ds: xr.Dataset) -> xr.Dataset:
    """CF times decoded as `xarray.open_dataset` decodes them (the rest is decoded already)."""
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message="Ambiguous reference date string")
        return xr.decode_cf(ds, mask_and_scale=False)


def _numeric_fields(lazies: list[xr.Dataset], paths: list[Path]) -> list[str]:
    """Names of the numeric data variables, checked to have the same dims and shape in every
    member file."""
    first = lazies[0]
    names = [str(n) for n, v in first.data_vars.items() if v.dtype.kind in "fiu"]
    for lazy, path in zip(lazies[1:], paths[1:], strict=True):
        for name in names:
            var, ref = lazy.variables.get(name), first[name]
            if var is None or var.dims != ref.dims or var.shape != ref.shape:
                found = "missing" if var is None else f"dims {var.dims} shape {var.shape}"
                raise CoordinateError.make(
                    f"file {str(path)!r}: variable {name!r}",
                    found,
                    f"dims {ref.dims} shape {ref.shape}, as in {str(paths[0])!r}",
                    "give member files with the same variables on the same grid and times",
                )
    return names


def _grouped(
    merged: xr.Dataset, lazies: list[xr.Dataset], fields: list[str], size: int
) -> xr.Dataset:
    """`merged` with the numeric `fields` of the member files (`lazies`: opened without dask)
    added, each read by one task per group of `size` member files.

    Concatenating lazily opened files makes one task per file and variable, then merges them
    into groups: thousands of tiny tasks for a large ensemble, whose overhead dominates on a
    cluster. Here each group of member files is one chunk read by one task, through the same
    lazy (decoded, locked) reads; a selection made later (a sector, a level) is still read
    alone, as dask hands the combined slice to the reader.
    """
    out = merged.copy()
    for name in fields:
        ref = lazies[0][name]
        # one reader per group: a task then carries only its own files' handles
        stacks = [
            member_files.MemberStack(
                [lazy[name].variable for lazy in lazies[i : i + size]],
                member_files.read_dtype(ref.dtype),
            )
            for i in range(0, len(lazies), size)
        ]
        out[name] = xr.Variable(
            ("member", *ref.dims), member_files.stacked(stacks), ref.attrs, ref.encoding
        )
    return out


# ---------------------------------------------------------------------------- coordinates


def _find_member_dim(ds: xr.Dataset, member_dim: str | None) -> str | None:
    if member_dim is not None:
        if member_dim not in ds.dims:
            raise CoordinateError.make(
                f"dimension {member_dim!r}",
                f"dims {sorted(map(str, ds.dims))}",
                "the member dimension named by member_dim",
                "check member_dim",
            )
        return member_dim
    for name in ds.dims:
        lowered = str(name).lower()
        attrs = ds[name].attrs if name in ds.variables else {}
        if lowered in _MEMBER_NAMES or attrs.get("standard_name") == "realization":
            return str(name)
    return None


def _is_role(var: xr.DataArray, name: str, role: str) -> bool:
    attrs = var.attrs
    lowered = name.lower()
    if role == "time":
        return (
            lowered in _COORD_NAMES["time"]
            or attrs.get("standard_name") == "time"
            or attrs.get("axis") == "T"
            or np.issubdtype(var.dtype, np.datetime64)
            or (
                var.dtype == object
                and var.size > 0
                and isinstance(var.values.flat[0], cftime.datetime)
            )
        )
    if role == "plev":
        unit_ok = units.conversion("pressure", str(attrs.get("units", ""))) is not None
        return (
            lowered in _COORD_NAMES["plev"]
            or attrs.get("standard_name") == "air_pressure"
            # a 1-D coordinate in pressure units is a pressure axis whatever its name
            or (unit_ok and var.ndim == 1 and var.dims == (name,))
        )
    unit_key = str(attrs.get("units", "")).lower().replace(" ", "")
    return (
        lowered in _COORD_NAMES[role]
        or attrs.get("standard_name") in ("latitude" if role == "lat" else "longitude",)
        or attrs.get("axis") == _AXIS[role]
        or unit_key in _COORD_UNITS[role]
    )


def _find_coord(ds: xr.Dataset, role: str, label: str, required: bool) -> str | None:
    hits = [str(n) for n in ds.coords if _is_role(ds[n], str(n), role)]
    hits += [str(n) for n in ds.dims if n not in ds.coords and str(n).lower() in _COORD_NAMES[role]]
    # Prefer dimension coordinates; a 2-D latitude means a curvilinear grid.
    dims = [h for h in hits if h in ds.dims]
    if role in ("lat", "lon"):
        two_d = [h for h in hits if h in ds.coords and ds[h].ndim > 1]
        if two_d and not dims:
            raise GridError.make(
                f"{label}: coordinate {two_d[0]!r}",
                f"a {ds[two_d[0]].ndim}-D {role} coordinate",
                "a regular latitude-longitude grid with 1-D lat and lon",
                "regrid the data to a regular latitude-longitude grid first",
            )
    candidates = dims or [h for h in hits if ds[h].ndim == 0]
    if not candidates:
        if required:
            raise CoordinateError.make(
                f"{label}: {role} coordinate",
                f"coordinates {sorted(map(str, ds.coords))}",
                f"a {role} coordinate found by name, standard_name, axis or units",
                f"add CF attributes (standard_name/units) to the {role} coordinate",
            )
        return None
    return candidates[0]


# ------------------------------------------------------------------------- normalization


def canonicalize(
    ds: xr.Dataset,
    *,
    variables: Mapping[str, str] | None = None,
    member_dim: str | None = None,
    label: str = "dataset",
    chunks: Mapping[str, int] | None = None,
) -> xr.Dataset:
    """Normalize an opened Dataset to the canonical form (see the module docstring).

    `chunks` (dims by their names in `ds` or canonical names) are applied once the grid is in
    order: for lazily indexed data, reordering the grid is then part of each chunk's read
    instead of passes over whole chunks, and later selections (a sector, a level) run in the
    same task as the read.
    """
    variables = dict(variables or {})
    unknown = set(variables) - set(CANONICAL_VARIABLES)
    if unknown:
        raise InputError.make(
            "variables",
            f"keys {sorted(unknown)}",
            f"canonical names among {sorted(CANONICAL_VARIABLES)}",
            "map canonical names to the names in the file, e.g. {'z500': 'zg'}",
        )
    ds = ds.drop_vars(
        [
            v
            for v in ds.data_vars
            if str(v).endswith(("_bnds", "_bounds")) or str(v).startswith("bounds_")
        ],
        errors="ignore",
    )
    renames = {}
    mdim = _find_member_dim(ds, member_dim)
    if mdim is not None and mdim != "member":
        renames[mdim] = "member"
    for role in ("lat", "lon", "time", "plev"):
        name = _find_coord(ds, role, label, required=role in ("lat", "lon", "time"))
        if name is not None and name != role:
            renames[name] = role
    ds = ds.rename(renames)
    if "member" not in ds.dims:
        ds = ds.expand_dims(member=[0])
    elif "member" not in ds.coords:
        ds = ds.assign_coords(member=np.arange(ds.sizes["member"]))
    ds = _normalize_grid(ds, label)
    if chunks is not None:
        wanted = {renames.get(k, k): v for k, v in chunks.items()}
        ds = ds.chunk({k: v for k, v in wanted.items() if k in ds.dims})
    out = {}
    for name, spec in CANONICAL_VARIABLES.items():
        source_name = variables.get(name) or _find_variable(ds, name, spec, set(out.values()))
        if source_name is None:
            continue
        if source_name not in ds.data_vars:
            raise InputError.make(
                f"{label}: variable {source_name!r} (given for {name!r})",
                "no such variable",
                f"one of {sorted(map(str, ds.data_vars))}",
                "check the variables mapping",
            )
        out[name] = source_name
    if not out:
        raise InputError.make(
            label,
            f"variables {sorted(map(str, ds.data_vars))}",
            "at least one of z500 (geopotential height or geopotential), u (eastward wind), "
            "mslp or sst, found by CF standard_name",
            "add standard_name attributes or name them, e.g. variables={'z500': 'zg'}",
        )
    result = xr.Dataset({name: _convert(ds[src], name, label) for name, src in out.items()})
    keep = [c for c in ds.coords if "time" in ds[c].dims and ds[c].dims == ("time",)]
    result = result.assign_coords({c: ds[c] for c in keep if c not in result.coords})
    result.attrs = dict(ds.attrs)
    for role, attrs in _COORD_ATTRS.items():
        if role in result.coords:
            result[role].attrs = {
                **{k: v for k, v in result[role].attrs.items() if k in ("calendar",)},
                **attrs,
            }
    return result


_COORD_ATTRS = {
    "lat": {
        "units": "degrees_north",
        "standard_name": "latitude",
        "long_name": "latitude",
        "axis": "Y",
    },
    "lon": {
        "units": "degrees_east",
        "standard_name": "longitude",
        "long_name": "longitude",
        "axis": "X",
    },
    "plev": {
        "units": "hPa",
        "standard_name": "air_pressure",
        "long_name": "pressure",
        "positive": "down",
        "axis": "Z",
    },
    "member": {"long_name": "ensemble member", "standard_name": "realization"},
    "time": {"standard_name": "time", "axis": "T"},
}


def _normalize_grid(ds: xr.Dataset, label: str) -> xr.Dataset:
    """Latitude ascending, longitude in [-180, 180) ascending, pressure in hPa, no duplicates."""
    for role in ("lat", "lon"):
        if ds[role].ndim != 1:
            raise GridError.make(
                f"{label}: coordinate {role!r}",
                f"{ds[role].ndim}-D values",
                "1-D coordinates",
                "regrid to a regular latitude-longitude grid",
            )
    lon = ds["lon"].values.astype(float)
    wrapped = (lon + 180.0) % 360.0 - 180.0
    if not np.array_equal(wrapped, lon):
        ds = ds.assign_coords(lon=("lon", wrapped, ds["lon"].attrs))
    _, first = np.unique(ds["lon"].values, return_index=True)
    if first.size != ds.sizes["lon"]:  # a cyclic point repeated (0 and 360)
        ds = ds.isel(lon=np.sort(first))
    for role in ("lat", "lon"):
        values = ds[role].values
        if values.size > 1 and np.all(np.diff(values) < 0):
            # a reversal, not a sorting take: lazily indexed files get it in the key they are
            # read with, and dask chunks stay views instead of copies
            ds = ds.isel({role: slice(None, None, -1)})
        elif values.size > 1 and not np.all(np.diff(values) > 0):
            ds = ds.sortby(role)
    if "plev" in ds.coords:
        plev_units = str(ds["plev"].attrs.get("units", "hPa"))
        conv = units.conversion("pressure", plev_units)
        if conv is None:
            raise UnitsError.make(
                f"{label}: pressure coordinate",
                f"units {plev_units!r}",
                "Pa or hPa",
                "set the pressure coordinate's units attribute",
            )
        if conv != (1.0, 0.0):
            ds = ds.assign_coords(plev=ds["plev"] * conv[0])
    return ds


def _find_variable(ds: xr.Dataset, name: str, spec: dict, taken: set) -> str | None:
    free = [v for v in ds.data_vars if v not in taken]
    by_standard_name = [
        v for v in free if ds[v].attrs.get("standard_name") in spec["standard_names"]
    ]
    by_name = [
        v for v in free if str(v).lower() in spec["names"] and "standard_name" not in ds[v].attrs
    ]
    for var in [*by_standard_name, *by_name]:
        if name == "z500" and not _has_level(ds[var], 500.0):
            levels = np.atleast_1d(ds[var]["plev"].values).tolist()
            warnings.warn(
                f"variable {var!r} looks like geopotential but has no 500 hPa level "
                f"(levels {levels} hPa), so no z500 is taken from it; give a field that "
                "includes 500 hPa for the NAO and the weather regimes",
                InputWarning,
                stacklevel=4,
            )
            continue
        return str(var)
    return None


def _has_level(da: xr.DataArray, level: float) -> bool:
    if "plev" in da.coords:
        return bool(np.any(np.isclose(np.atleast_1d(da["plev"].values), level)))
    return True  # no level information: checked in _select_level


def _units_of(da: xr.DataArray, name: str, spec: dict, label: str) -> tuple[str, str]:
    """(quantity, units) of a variable, from its units or, failing that, its standard_name."""
    where = f"{label}: variable {da.name!r} (taken as {name!r})"
    text = da.attrs.get("units")
    std = da.attrs.get("standard_name")
    if text is None or str(text).strip() in ("", "1", "none", "unknown"):
        if std in spec["standard_names"]:
            quantity = spec["standard_names"][std]
            assumed = {
                "height": "m",
                "geopotential": "m2 s-2",
                "wind": "m s-1",
                "pressure": "Pa",
                "temperature": "K",
            }[quantity]
            warnings.warn(
                f"{where} has no units; its standard_name {std!r} fixes them, taken as "
                f"{assumed!r}. Set the units attribute to silence this warning.",
                InputWarning,
                stacklevel=4,
            )
            return quantity, assumed
        raise UnitsError.make(
            where,
            "no units attribute and no standard_name that fixes them",
            f"units such as {units.known_spellings(spec['quantities'][0])}",
            f"set ds[{str(da.name)!r}].attrs['units'] before opening",
        )
    if std in spec["standard_names"]:
        quantity = spec["standard_names"][std]
        if units.conversion(quantity, str(text)) is None:
            other = units.quantity_of_units(str(text), spec["quantities"])
            if other is None:
                raise UnitsError.make(
                    where,
                    f"units {text!r} for standard_name {std!r}",
                    f"units such as {units.known_spellings(quantity)}",
                    "correct the units attribute",
                )
            quantity = other
        return quantity, str(text)
    quantity = units.quantity_of_units(str(text), spec["quantities"])
    if quantity is None:
        raise UnitsError.make(
            where,
            f"units {text!r}",
            f"units such as {units.known_spellings(spec['quantities'][0])}",
            "correct the units attribute or name another variable",
        )
    return quantity, str(text)


def _select_level(da: xr.DataArray, name: str, level: float | None, label: str) -> xr.DataArray:
    where = f"{label}: variable {da.name!r} (taken as {name!r})"
    if level is None:  # a field on pressure levels (u) or a surface field
        if name == "u" and "plev" not in da.dims:
            if "plev" in da.coords and da["plev"].ndim == 0:
                return da.expand_dims("plev")
            raise CoordinateError.make(
                where,
                f"dims {da.dims} and no pressure coordinate",
                "zonal wind on pressure levels (a plev dimension or scalar coordinate)",
                "add a pressure coordinate in hPa or Pa",
            )
        return da
    if "plev" in da.dims:
        match = np.flatnonzero(np.isclose(da["plev"].values, level))
        if match.size == 0:
            raise CoordinateError.make(
                where,
                f"pressure levels {da['plev'].values.tolist()} hPa",
                f"the {level:g} hPa level",
                f"give a field that includes {level:g} hPa",
            )
        return da.isel(plev=int(match[0]), drop=True)
    if "plev" in da.coords:
        if not np.isclose(float(da["plev"]), level):
            raise CoordinateError.make(
                where,
                f"a single level at {float(da['plev']):g} hPa",
                f"{level:g} hPa",
                f"give the {level:g} hPa field",
            )
        return da.drop_vars("plev")
    text = f"{da.name} {da.attrs.get('long_name', '')}"
    if str(int(level)) not in text:
        raise CoordinateError.make(
            where,
            "no pressure coordinate and no level in its name or long_name",
            f"a field at {level:g} hPa",
            "add a pressure coordinate or select 500 hPa first",
        )
    return da


def _convert(da: xr.DataArray, name: str, label: str) -> xr.DataArray:
    spec = CANONICAL_VARIABLES[name]
    quantity, text = _units_of(da, name, spec, label)
    da = _select_level(da, name, spec["level"], label)
    extra = [d for d in da.dims if d not in ("member", "time", "plev", "lat", "lon")]
    for dim in extra:
        if da.sizes[dim] != 1:
            raise CoordinateError.make(
                f"{label}: variable {da.name!r}",
                f"an extra dimension {dim!r} of size {da.sizes[dim]}",
                "only member, time, plev, lat, lon",
                f"select one value along {dim!r} or name it as the member dimension",
            )
        da = da.isel({dim: 0}, drop=True)
    if "member" not in da.dims:
        da = da.expand_dims("member")
    order = [d for d in ("member", "time", "plev", "lat", "lon") if d in da.dims]
    da = da.transpose(*order)
    original = dict(da.attrs)
    # float64 inside (lazily, chunk by chunk for dask): the same numbers whether the data are in
    # memory or on a cluster, and sums over many days without single-precision round-off
    scale, offset = units.conversion(quantity, text)
    if da.dtype != np.float64 or (scale, offset) != (1.0, 0.0):
        da = xr.apply_ufunc(
            _to_canonical,
            da,
            kwargs={"scale": scale, "offset": offset},
            dask="parallelized",
            output_dtypes=[np.float64],
        )
    da.attrs = {
        "units": units.CANONICAL_UNITS[quantity],
        "standard_name": spec["standard_name"],
        "long_name": spec["long_name"],
        # kept through a second normalization, so opening a canonical dataset is idempotent
        "source_variable": original.get("source_variable", str(da.name)),
        "source_units": original.get("source_units", text),
    }
    da.encoding = {}
    return da.rename(name)


def _to_canonical(values: np.ndarray, scale: float, offset: float) -> np.ndarray:
    """``float64(values) * scale + offset`` in one new array (float32 fields are converted
    as they are scaled, not in a pass of their own): the same numbers, less memory traffic."""
    out = np.multiply(values, scale, dtype=np.float64)
    if offset != 0.0:
        out += offset
    return out


def _to_daily(ds: xr.Dataset, daily: str, label: str) -> xr.Dataset:
    if daily != "mean":
        raise InputError.make(
            "daily",
            repr(daily),
            "'mean' or None",
            "pass daily='mean' to average sub-daily data to daily means",
        )
    kind = timeaxis.time_kind(ds["time"])
    if kind == "daily":
        return ds
    if kind != "subdaily":
        raise TimeStepError.make(
            f"{label}: time axis",
            f"{kind} data",
            "sub-daily data to average to daily means",
            "leave daily=None for data that are already daily or coarser",
        )
    out = ds.resample(time="1D").mean(keep_attrs=True)
    for name in ds.data_vars:
        out[name] = out[name].transpose(*ds[name].dims)  # resample moves time first
        out[name].attrs = {**ds[name].attrs, "cell_methods": "time: mean (daily)"}
    return out
