"""Ensembles stored one member per file, read in groups of files by dask tasks.

`westerlies.data.open_dataset` opens the first member file with xarray and, when every other
file has the same variables, attributes, grid and times (checked on the raw netCDF values, by
the workers in groups when a dask.distributed client is active), reads nothing more from them
while opening. The fields become lazily indexed xarray variables over one reader of all the
files (`lazy_fields`): putting the grid in order composes into the key each file is read
with, and they are chunked only then, so each dask task opens its group of files, reads the
selected part of each, in order, decodes it as xarray decodes the first file
(`xarray.conventions.decode_cf_variable` with that file's attributes) and converts it to
float64, with no pass over whole chunks to sort or convert them. Opening thousands of member
files with xarray costs about 5 ms each (indexes, decoding) against about 1 ms for this check;
files that differ in any of these are opened one by one with xarray instead.
"""

from __future__ import annotations

from pathlib import Path

import netCDF4
import numpy as np
import xarray as xr
from xarray.backends.common import BackendArray

# xarray's own lock for the netCDF-C and HDF5 libraries, which are not thread-safe: the same
# lock object keeps these reads from running beside xarray's in other threads. (The same
# object, not its two parts taken in turn: xarray takes them in an order of its own, and two
# orders deadlock.)
from xarray.backends.netCDF4_ import NETCDF4_PYTHON_LOCK as _NETCDF_LOCK

from ._scheduler import cluster_client

__all__ = ["FileStack", "MemberStack", "lazy_fields", "read_dtype", "same_layout", "stacked"]


def same_layout(first: Path, others: list[Path], fields: list[str]) -> dict[str, dict] | None:
    """The raw netCDF attributes of the `fields` of `first` when every file in `others` has
    its dimensions, its `fields` with the same dims, shape, type and attributes, and its other
    variables with the same attributes and values (coordinates, times as encoded, bounds);
    else None. Raw netCDF values, nothing decoded.
    """
    with _NETCDF_LOCK, netCDF4.Dataset(first) as nc:
        reference = _layout(nc, fields)
    groups = [others[i : i + CHECK_GROUP] for i in range(0, len(others), CHECK_GROUP)]
    client = cluster_client()
    if client is not None and len(groups) > 1:
        # on a cluster the workers check groups of files side by side (each opening is a
        # few ms of serial work in this process otherwise); the lock travels with the task
        # as FileStack's does
        import dask

        checks = [
            dask.delayed(_all_match, pure=True)(group, reference, fields, _NETCDF_LOCK)
            for group in groups
        ]
        alike = all(dask.compute(*checks))
    else:
        alike = all(_all_match(group, reference, fields, _NETCDF_LOCK) for group in groups)
    return {name: reference["vars"][name][3] for name in fields} if alike else None


#: member files checked by one task on a cluster (about 2 ms each)
CHECK_GROUP = 100


def _all_match(paths: list[Path], reference: dict, fields: list[str], lock) -> bool:
    """Whether every file at `paths` has the `reference` layout (see `same_layout`)."""
    for path in paths:
        try:
            with lock, netCDF4.Dataset(path) as nc:
                if not _matches(nc, reference, fields):
                    return False
        except (OSError, KeyError, ValueError, RuntimeError):
            return False  # opened one by one with xarray, which says what is wrong
    return True


def _layout(nc: netCDF4.Dataset, fields: list[str]) -> dict:
    """Dimension sizes, every variable's (dims, shape, dtype, attributes) and the values of
    the variables that are not fields."""
    out = {"dims": {name: len(dim) for name, dim in nc.dimensions.items()}, "vars": {}}
    for name, var in nc.variables.items():
        var.set_auto_maskandscale(False)
        values = None if name in fields else np.asarray(var[...])
        out["vars"][name] = (var.dimensions, var.shape, var.dtype, _attrs(var), values)
    return out


def _matches(nc: netCDF4.Dataset, reference: dict, fields: list[str]) -> bool:
    if {name: len(dim) for name, dim in nc.dimensions.items()} != reference["dims"]:
        return False
    if set(nc.variables) != set(reference["vars"]):
        return False
    for name, (dims, shape, dtype, attrs, values) in reference["vars"].items():
        var = nc.variables[name]
        if (var.dimensions, var.shape, var.dtype) != (dims, shape, dtype):
            return False
        if not _same_attrs(_attrs(var), attrs):
            return False
        if values is not None:
            var.set_auto_maskandscale(False)
            if not _equal(np.asarray(var[...]), values):
                return False
    return True


def _attrs(var) -> dict:
    return {name: var.getncattr(name) for name in var.ncattrs()}


def _same_attrs(a: dict, b: dict) -> bool:
    return a.keys() == b.keys() and all(_equal(a[k], b[k]) for k in a)


def _equal(a, b) -> bool:
    """Same values, NaN equal to NaN (a NaN _FillValue), for numbers and text alike."""
    try:
        return bool(np.array_equal(a, b, equal_nan=True))
    except TypeError:  # text
        return bool(np.array_equal(a, b))


def lazy_fields(
    merged: xr.Dataset, first: xr.Dataset, paths: list[Path], raw: dict[str, dict]
) -> xr.Dataset:
    """`merged` with the numeric fields of the member files at `paths` added (`raw`: field
    name -> its raw netCDF attributes, from `same_layout`), lazily indexed (xarray, no dask
    yet): reorderings made before chunking (a latitude reversal, a longitude sort) compose into
    the key each file is later read with, and chunking afterwards makes each chunk one task
    that reads its own files, already in order. `first`: the first file opened lazily by xarray
    (without dask), whose decoded types and attributes the fields take."""
    out = merged.copy()
    for name, raw_attrs in raw.items():
        ref = first[name]
        files = FileStack(paths, name, ref.shape, raw_attrs, read_dtype(ref.dtype))
        data = xr.core.indexing.LazilyIndexedArray(_OuterIndexed(files))
        out[name] = xr.Variable(("member", *ref.dims), data, ref.attrs, ref.encoding)
    return out


class _OuterIndexed(BackendArray):
    """A reader as an xarray backend array: xarray hands it keys of slices, integers and 1-D
    integer arrays, one per axis (outer indexing), which the reader splits per file."""

    def __init__(self, reader: _Stack) -> None:
        self.reader = reader
        self.shape = reader.shape
        self.dtype = reader.dtype

    def __getitem__(self, key):
        indexing = xr.core.indexing
        if isinstance(key, (indexing.BasicIndexer, indexing.OuterIndexer)):
            # as they are: the reader applies reversals and picks to each file's values, not
            # to the whole group's array afterwards (as xarray's decomposition of the key would)
            return self.reader[key.tuple]
        return indexing.explicit_indexing_adapter(
            key, self.shape, indexing.IndexingSupport.OUTER, self.reader.__getitem__
        )


def read_dtype(dtype: np.dtype) -> np.dtype:
    """The type a reader returns a field in: float64 for numbers (the canonical type, see
    `westerlies.data`), so converting is part of each file's read, not a pass of its own over
    whole chunks."""
    return np.dtype(np.float64) if np.dtype(dtype).kind in "fiu" else np.dtype(dtype)


def stacked(stacks: list):
    """Readers of groups of members as one dask array, one chunk per reader."""
    import dask.array as da

    return da.concatenate([da.from_array(s, chunks=s.shape, asarray=False) for s in stacks], axis=0)


class _Stack:
    """Members seen as one (member, ...) array of `shape` and `dtype`: indexing picks the
    members, and `_member(i, rest)` reads the rest of the key from member i."""

    shape: tuple
    dtype: np.dtype

    @property
    def ndim(self) -> int:
        return len(self.shape)

    def __getitem__(self, key) -> np.ndarray:
        key = key if isinstance(key, tuple) else (key,)
        key = key + (slice(None),) * (self.ndim - len(key))
        first, rest = key[0], key[1:]
        picked = np.arange(self.shape[0])[first]
        members = np.atleast_1d(picked)
        out = np.empty((members.size, *_outer_shape(rest, self.shape[1:])), self.dtype)
        for j, i in enumerate(members):
            out[j] = self._member(int(i), rest)  # each file's values straight into place
        return out[0] if np.ndim(picked) == 0 else out

    def _member(self, i: int, rest: tuple) -> np.ndarray:
        raise NotImplementedError


class FileStack(_Stack):
    """The variable `name` of several member files seen as one (member, ...) array, read
    from the files when indexed: slices (and single indices) are read as such, so a
    selection reads only its part of each selected file.

    Values are decoded as xarray decodes them (`xarray.conventions.decode_cf_variable` on
    the raw values with the raw attributes `attrs`: missing values, scale and offset; times
    are not decoded here) and returned as `dtype`.
    """

    def __init__(
        self, paths: list[Path], name: str, shape: tuple, attrs: dict, dtype: np.dtype
    ) -> None:
        self.paths = [str(p) for p in paths]
        # Travels with the reader to a cluster's workers: unpickled, xarray's lock is the one
        # of the file managers sent from the same client, which close their files when they
        # are garbage collected (in any thread) unless this lock is held. The worker's own
        # module-level lock would be another lock there, and HDF5 then failed under reads.
        self.lock = _NETCDF_LOCK
        self.name = name
        self.attrs = attrs
        self.dtype = np.dtype(dtype)
        self.shape = (len(self.paths), *shape)

    def _member(self, i: int, rest: tuple) -> np.ndarray:
        read, after = _read_key(rest, self.shape[1:])
        with self.lock, netCDF4.Dataset(self.paths[i]) as nc:
            var = nc.variables[self.name]
            var.set_auto_maskandscale(False)
            raw = np.asarray(var[read] if read is not None else var[...])
        if read is None:
            raw = raw[rest]  # a key this reader does not split: numpy indexing of the whole
        else:
            for axis, index in after:
                raw = (
                    np.take(raw, index, axis=axis)
                    if isinstance(index, np.ndarray)
                    else raw[(slice(None),) * axis + (index,)]
                )
        dims = tuple(f"dim_{i}" for i in range(raw.ndim))
        # as the first file was opened (decode_times=False, which also leaves time spans)
        decoded = xr.conventions.decode_cf_variable(
            self.name,
            xr.Variable(dims, raw, self.attrs),
            decode_times=False,
            decode_timedelta=False,
        )
        return np.asarray(decoded.values, dtype=self.dtype)


def _outer_shape(key: tuple, shape: tuple) -> tuple:
    """The shape `key` selects from `shape`, each index applying to its own axis (outer
    indexing: slices, integers, which drop their axis, and 1-D integer arrays)."""
    out = []
    for index, n in zip(key, shape, strict=True):
        if isinstance(index, slice):
            out.append(len(range(*index.indices(n))))
        elif not isinstance(index, (int, np.integer)):
            out.append(len(index))
    return tuple(out)


def _read_key(key: tuple, shape: tuple) -> tuple[tuple | None, list]:
    """A key of slices, integers and 1-D integer arrays, split into what netCDF4 reads
    (slices with positive steps and integers) and what is applied to the values read
    (reversals, picks from a range): (read, [(axis, index), ...]). (None, []) for keys with
    anything else (the whole variable is read and indexed by numpy)."""
    read, after, axis = [], [], 0
    for index, n in zip(key, shape, strict=True):
        if isinstance(index, slice):
            start, stop, step = index.indices(n)
            span = range(start, stop, step)
            if step > 0 or len(span) == 0:
                read.append(slice(start, stop, step) if len(span) else slice(0, 0))
            else:
                read.append(slice(span[-1], span[0] + 1, -step))
                after.append((axis, slice(None, None, -1)))
            axis += 1
        elif isinstance(index, (int, np.integer)):
            read.append(int(index) % n)  # dimension dropped
        elif isinstance(index, np.ndarray) and index.ndim == 1 and index.dtype.kind in "iu":
            picks = index % n
            if picks.size == 0:
                return None, []
            low = int(picks.min())
            read.append(slice(low, int(picks.max()) + 1))
            after.append((axis, picks - low))
            axis += 1
        else:
            return None, []
    return tuple(read), after


class MemberStack(_Stack):
    """Several member files' lazily opened variables (xarray, without dask) seen as one
    (member, ...) array: indexing with slices reads only the selected part of each selected
    file. For member files opened one by one with xarray."""

    def __init__(self, variables: list[xr.Variable], dtype) -> None:
        self.variables = variables
        self.dtype = np.dtype(dtype)
        self.shape = (len(variables), *variables[0].shape)

    def _member(self, i: int, rest: tuple) -> np.ndarray:
        return np.asarray(self.variables[i][rest].values, dtype=self.dtype)
