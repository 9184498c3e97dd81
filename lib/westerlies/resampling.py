"""The significance engine: per-block sufficient statistics resampled through weight matrices.

Blocks (one member in one season, `westerlies.seasons.block_ids`) are the unit of independence
(DESIGN.md principle 2). Every statistic is written as additive per-block sums and a function of
their total (principle 3), so that a bootstrap replicate, a permutation and a sub-sample are all
rows of one weight matrix, and every replicate of every statistic is one matrix product.

The protocol
------------
A *block statistic* is any object with

``name : str``
    short name used in outputs.
``per_block(x) -> ndarray (n_blocks, k)``
    additive sufficient statistics of each block of a (member, time) DataArray `x`, rows in the
    order of `block_ids(x)`. Additive means: the statistics of a union of blocks are the column
    sums of their rows (counts, sums, sums of squares, lagged products, histogram counts,
    episode counts ...). Never combine days of different blocks here.
``finish(sums) -> ndarray (...,) or (..., m)``
    the statistic from summed rows, vectorized over leading axes: ``sums`` has shape (..., k).

and optionally

``prepare(*datasets) -> block statistic``
    a configured copy that depends on all the data being compared (e.g. common histogram edges
    or a common shift for numerical stability). The engine calls it on every dataset in a test
    before `per_block`. Without it the statistic is used as it is.
``units``, ``long_name`` : str
    attributes of the output.
``dim`` : str and ``coords`` : sequence
    name and labels of the last axis when `finish` returns (..., m).

With S the (n_blocks, k) rows and W a (B, n_blocks) weight matrix, ``finish(W @ S)`` gives B
replicates at once: W holds multinomial counts for a bootstrap, 0/1 group labels for a
permutation, and N ones per row for a sub-sample of N blocks.

Statistics are given by name or as objects. Names: "mean", "variance", "std", "median",
"q0.9" (any quantile), "acf1" (lag-1 autocorrelation; any lag), "efolding" (e-folding time
from the ACF up to 30 lags), "occupancy" (fraction of days per category of integer labels),
"persistence" (mean episode length per category). Other modules add names with
`register_statistic` or pass their own objects.

Conventions: p-values are (b + 1) / (B + 1) (Phipson and Smyth 2010, Stat. Appl. Genet. Mol.
Biol. 9(1)); intervals are bootstrap percentile intervals (Efron and Tibshirani 1993, An
Introduction to the Bootstrap); differences are second dataset minus first.
"""

from __future__ import annotations

import itertools
import re
import threading
from collections import OrderedDict
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
from typing import Any, Literal, Protocol, runtime_checkable

import numpy as np
import xarray as xr
from dask import compute as dask_compute

from . import timeaxis
from .errors import ConfigError, CoordinateError, InputError, TimeStepError
from .seasons import block_ids

__all__ = [
    "BlockStatistic",
    "CategoryOccupancy",
    "CategoryPersistence",
    "FieldBlockSums",
    "Mean",
    "PendingBlockSums",
    "Quantile",
    "StandardDeviation",
    "Statistic",
    "Statistics",
    "Variance",
    "block_array",
    "block_sums",
    "bootstrap_ci",
    "bootstrap_weights",
    "fdr_mask",
    "field_block_sums",
    "get_statistic",
    "ks_test",
    "lazy_field_block_sums",
    "map_difference_test",
    "map_ks_test",
    "permutation_test",
    "permutation_weights",
    "reference_percentile",
    "register_statistic",
    "subsample_weights",
]

Seed = int | np.random.Generator | None


@runtime_checkable
class BlockStatistic(Protocol):
    """A statistic made of additive per-block sums (see the module docstring)."""

    name: str

    def per_block(self, x: xr.DataArray) -> np.ndarray:
        """(n_blocks, k) additive sufficient statistics, rows in `block_ids` order."""
        ...

    def finish(self, sums: np.ndarray) -> np.ndarray:
        """(..., k) summed statistics -> (...,) or (..., m) values."""
        ...


Statistic = str | BlockStatistic


# ---------------------------------------------------------------------------------------------
# block layout


def _as_member_time(x: xr.DataArray, where: str) -> xr.DataArray:
    """Check a (member, time) index and return it with dims in that order."""
    if not isinstance(x, xr.DataArray):
        raise InputError.make(
            where,
            f"a {type(x).__name__}",
            "an xarray DataArray on (member, time)",
            "pass one daily index, e.g. ds['nao']",
        )
    if "time" not in x.dims:
        raise CoordinateError.make(
            f"{where} (dims {tuple(x.dims)})",
            "no 'time' dimension",
            "dims (member, time)",
            "open the data with westerlies.open_dataset, which names the time dimension",
        )
    if "member" not in x.dims:
        x = x.expand_dims(member=[0])
    extra = [d for d in x.dims if d not in ("member", "time")]
    if extra:
        raise CoordinateError.make(
            f"{where} (dims {tuple(x.dims)})",
            f"extra dimensions {extra}",
            "a single index on (member, time)",
            "select one series (e.g. .sel(regime=...)) or use map_difference_test for fields",
        )
    return x.transpose("member", "time")


def _time_positions(x: xr.DataArray) -> np.ndarray:
    """Position of each time inside its block, in time steps (gaps leave positions empty).

    With dates, each step between consecutive times is rounded to a whole number of typical
    steps (median step), so a missing day leaves a hole and monthly data count months.
    Without dates, consecutive entries are one step apart.
    """
    n_time = x.sizes["time"]
    if "season_year" in x.coords:
        _, segment = np.unique(np.asarray(x["season_year"].values), return_inverse=True)
    else:
        segment = np.zeros(n_time, dtype=int)
    segment = segment.ravel()
    if n_time > 1 and "time" in x.coords and timeaxis.has_dates(x["time"]):
        steps = timeaxis.step_days(x["time"])
        typical = np.median(steps[steps > 0]) if np.any(steps > 0) else 1.0
        whole = np.rint(steps / typical).astype(np.int64)
        if np.any(whole <= 0):
            raise TimeStepError.make(
                "coordinate 'time'",
                "times that repeat or go backwards",
                "strictly increasing times",
                "sort the data by time (obj.sortby('time'))",
            )
        overall = np.concatenate([[0], np.cumsum(whole)])
    else:
        overall = np.arange(n_time, dtype=np.int64)
    first = np.full(segment.max() + 1 if n_time else 0, np.iinfo(np.int64).max)
    np.minimum.at(first, segment, overall)
    return overall - first[segment]


def block_array(x: xr.DataArray) -> np.ndarray:
    """The index laid out one row per block, one column per time step: (n_blocks, n_steps).

    Rows follow `block_ids(x)`; column j is the j-th time step after the block's first time.
    Missing days (NaN, or times absent from the axis) are NaN, so lagged pairs formed along a
    row never cross a gap and never pair days of different blocks.
    """
    x = _as_member_time(x, "index")
    ids = block_ids(x).transpose("member", "time").values
    pos = _time_positions(x)
    values = np.asarray(x.values, dtype=float)
    n_blocks = int(ids.max()) + 1 if ids.size else 0
    out = np.full((n_blocks, int(pos.max()) + 1 if pos.size else 0), np.nan)
    out[ids, np.broadcast_to(pos, ids.shape)] = values
    return out


def _pooled_values(*datasets: xr.DataArray) -> np.ndarray:
    """All finite values of all datasets, one flat array."""
    parts = [np.asarray(d.values, dtype=float).ravel() for d in datasets]
    pooled = np.concatenate(parts) if parts else np.zeros(0)
    return pooled[np.isfinite(pooled)]


# ---------------------------------------------------------------------------------------------
# built-in statistics


def _ratio(num: np.ndarray, den: np.ndarray) -> np.ndarray:
    with np.errstate(invalid="ignore", divide="ignore"):
        return num / den


@dataclass(frozen=True)
class Mean:
    """Mean over all valid days. Sums: [count, sum of (x - shift)]."""

    name: str = "mean"
    shift: float = 0.0
    long_name: str = "mean"

    def prepare(self, *datasets: xr.DataArray) -> Mean:
        pooled = _pooled_values(*datasets)
        return replace(self, shift=float(pooled.mean()) if pooled.size else 0.0)

    def per_block(self, x: xr.DataArray) -> np.ndarray:
        a = block_array(x) - self.shift
        ok = np.isfinite(a)
        return np.stack([ok.sum(1), np.where(ok, a, 0).sum(1)], axis=1).astype(float)

    def finish(self, sums: np.ndarray) -> np.ndarray:
        return self.shift + _ratio(sums[..., 1], sums[..., 0])


@dataclass(frozen=True)
class Variance:
    """Variance over all valid days (divisor count - ddof). Sums: [count, sum, sum of squares].

    Values are shifted by the pooled mean before summing, so the sums of squares do not lose
    precision for indices far from zero (e.g. heights in m).
    """

    name: str = "variance"
    ddof: int = 1
    shift: float = 0.0
    long_name: str = "variance"

    def prepare(self, *datasets: xr.DataArray) -> Variance:
        pooled = _pooled_values(*datasets)
        return replace(self, shift=float(pooled.mean()) if pooled.size else 0.0)

    def per_block(self, x: xr.DataArray) -> np.ndarray:
        a = block_array(x) - self.shift
        ok = np.isfinite(a)
        a = np.where(ok, a, 0)
        return np.stack([ok.sum(1), a.sum(1), (a * a).sum(1)], axis=1).astype(float)

    def finish(self, sums: np.ndarray) -> np.ndarray:
        n, s1, s2 = sums[..., 0], sums[..., 1], sums[..., 2]
        return _ratio(s2 - _ratio(s1 * s1, n), n - self.ddof)


@dataclass(frozen=True)
class StandardDeviation(Variance):
    """Standard deviation over all valid days (square root of `Variance`)."""

    name: str = "std"
    long_name: str = "standard deviation"

    def finish(self, sums: np.ndarray) -> np.ndarray:
        return np.sqrt(np.maximum(super().finish(sums), 0.0))


@dataclass(frozen=True)
class Quantile:
    """Quantile(s) of all valid days from per-block histograms.

    `prepare` sets common bin edges at `n_bins` + 1 quantiles of the pooled data of every
    dataset compared, so each bin holds 1/n_bins of the pooled days; `finish` inverts the
    piecewise-linear cumulative distribution through the summed histogram. Resolution: the
    result lies inside the bin that holds the exact sample quantile, so the error is below one
    bin width (about 1/(n_bins * density) in the units of the index; for a standard normal
    index and the default 256 bins, under 0.023 at the 0.9 quantile) and usually far smaller
    because of the interpolation inside the bin. Values outside the prepared range are counted
    in the first or last bin.
    """

    q: float | tuple[float, ...] = 0.5
    n_bins: int = 256
    edges: tuple[float, ...] | None = None
    name: str = "quantile"
    long_name: str = "quantile"

    @property
    def dim(self) -> str | None:
        return None if np.ndim(self.q) == 0 else "quantile"

    @property
    def coords(self) -> tuple[float, ...] | None:
        return None if np.ndim(self.q) == 0 else tuple(self.q)

    def prepare(self, *datasets: xr.DataArray) -> Quantile:
        pooled = _pooled_values(*datasets)
        if pooled.size == 0:
            raise InputError.make(
                f"statistic '{self.name}'",
                "no valid values",
                "at least one finite value",
                "check the data for missing values",
            )
        edges = np.unique(np.quantile(pooled, np.linspace(0, 1, self.n_bins + 1)))
        if edges.size == 1:  # constant data: one bin of zero width
            edges = np.array([edges[0], edges[0]])
        return replace(self, edges=tuple(edges.tolist()))

    def per_block(self, x: xr.DataArray) -> np.ndarray:
        if self.edges is None:
            return self.prepare(x).per_block(x)
        edges = np.asarray(self.edges)
        a = block_array(x)
        n_blocks, nb = a.shape[0], edges.size - 1
        row, col = np.nonzero(np.isfinite(a))
        bins = np.clip(np.searchsorted(edges, a[row, col], side="left") - 1, 0, nb - 1)
        counts = np.bincount(row * nb + bins, minlength=n_blocks * nb)
        return counts.reshape(n_blocks, nb).astype(float)

    def finish(self, sums: np.ndarray) -> np.ndarray:
        edges = np.asarray(self.edges)
        cum = np.cumsum(sums, axis=-1)
        total = cum[..., -1:]
        qs = np.atleast_1d(np.asarray(self.q, dtype=float))
        out = []
        for q in qs:
            target = q * total
            j = np.minimum((cum < target).sum(axis=-1, keepdims=True), sums.shape[-1] - 1)
            below = np.take_along_axis(cum, j, -1) - np.take_along_axis(sums, j, -1)
            inside = np.take_along_axis(sums, j, -1)
            frac = np.clip(_ratio(target - below, inside), 0.0, 1.0)
            frac = np.where(inside > 0, frac, 0.0)
            value = edges[j] + frac * (edges[j + 1] - edges[j])
            out.append(np.where(total > 0, value, np.nan)[..., 0])
        result = np.stack(out, axis=-1)
        return result[..., 0] if np.ndim(self.q) == 0 else result


def _labels_array(x: xr.DataArray) -> np.ndarray:
    """Block layout of integer labels (NaN for missing)."""
    return block_array(x)


def _categories(datasets: Sequence[xr.DataArray], categories) -> tuple[int, ...]:
    if categories is not None:
        return tuple(int(c) for c in categories)
    pooled = _pooled_values(*datasets)
    return tuple(int(c) for c in np.unique(pooled))


@dataclass(frozen=True)
class CategoryOccupancy:
    """Fraction of valid days in each category of an integer label series.

    Sums per block: days in each category, then the number of valid days (last column); days
    whose label is not among `categories` count in the total only. Categories default to the
    labels present in the data compared (set by `prepare`).
    """

    categories: tuple[int, ...] | None = None
    name: str = "occupancy"
    long_name: str = "fraction of days in each category"
    units: str = "1"
    dim: str = "category"

    @property
    def coords(self) -> tuple[int, ...] | None:
        return self.categories

    def prepare(self, *datasets: xr.DataArray) -> CategoryOccupancy:
        return replace(self, categories=_categories(datasets, self.categories))

    def per_block(self, x: xr.DataArray) -> np.ndarray:
        cats = self.categories if self.categories is not None else _categories([x], None)
        a = _labels_array(x)
        ok = np.isfinite(a)
        out = np.zeros((a.shape[0], len(cats) + 1))
        for i, c in enumerate(cats):
            out[:, i] = (ok & (a == c)).sum(1)
        out[:, -1] = ok.sum(1)
        return out

    def finish(self, sums: np.ndarray) -> np.ndarray:
        return _ratio(sums[..., :-1], sums[..., -1:])


@dataclass(frozen=True)
class CategoryPersistence:
    """Mean episode length (time steps; days for daily data) of each category of a label series.

    An episode is a run of consecutive steps with the same label inside one block; a missing
    day or the block edge ends it (common practice). Sums per block: days in each category and
    number of episodes of each category; persistence = days / episodes.
    """

    categories: tuple[int, ...] | None = None
    name: str = "persistence"
    long_name: str = "mean episode length of each category"
    units: str = "days"
    dim: str = "category"

    @property
    def coords(self) -> tuple[int, ...] | None:
        return self.categories

    def prepare(self, *datasets: xr.DataArray) -> CategoryPersistence:
        return replace(self, categories=_categories(datasets, self.categories))

    def per_block(self, x: xr.DataArray) -> np.ndarray:
        cats = self.categories if self.categories is not None else _categories([x], None)
        a = _labels_array(x)
        previous = np.concatenate([np.full((a.shape[0], 1), np.nan), a[:, :-1]], axis=1)
        out = np.zeros((a.shape[0], 2 * len(cats)))
        for i, c in enumerate(cats):
            inside = a == c
            out[:, i] = inside.sum(1)
            out[:, len(cats) + i] = (inside & (previous != c)).sum(1)
        return out

    def finish(self, sums: np.ndarray) -> np.ndarray:
        n = sums.shape[-1] // 2
        return _ratio(sums[..., :n], sums[..., n:])


# ---------------------------------------------------------------------------------------------
# names

_REGISTRY: dict[str, Callable[[], BlockStatistic]] = {
    "mean": Mean,
    "variance": Variance,
    "std": StandardDeviation,
    "median": lambda: Quantile(q=0.5, name="median", long_name="median"),
    "occupancy": CategoryOccupancy,
    "persistence": CategoryPersistence,
}


def register_statistic(name: str, factory: Callable[[], BlockStatistic] | BlockStatistic) -> None:
    """Make a statistic available by name: a zero-argument factory or a ready object."""
    if not isinstance(name, str) or not name:
        raise ConfigError.make("statistic name", repr(name), "a non-empty string", "name it")
    _REGISTRY[name] = (
        factory if callable(factory) and not _is_statistic(factory) else (lambda: factory)
    )


def _is_statistic(obj: Any) -> bool:
    if isinstance(obj, type):
        return False
    return callable(getattr(obj, "per_block", None)) and callable(getattr(obj, "finish", None))


def get_statistic(spec: Statistic) -> BlockStatistic:
    """Resolve a statistic given by name (see the module docstring) or as an object."""
    if _is_statistic(spec):
        return spec  # type: ignore[return-value]
    if isinstance(spec, str):
        key = spec.strip().lower()
        if key in _REGISTRY:
            return _REGISTRY[key]()
        match = re.fullmatch(r"q(0?\.\d+|1(?:\.0*)?|0)", key)
        if match:
            q = float(match.group(1))
            return Quantile(q=q, name=key, long_name=f"{q:g} quantile")
        match = re.fullmatch(r"acf(\d+)", key)
        if match:
            from .timeseries import Autocorrelation

            return Autocorrelation(lags=(int(match.group(1)),), name=key)
        if key == "efolding":
            from .timeseries import EfoldingTime

            return EfoldingTime()
    known = ", ".join(sorted(_REGISTRY))
    raise ConfigError.make(
        "statistic",
        repr(spec),
        f"a block statistic object or one of {known}, 'q0.9' (any quantile), 'acf1' (any lag), "
        "'efolding'",
        "use one of these names or pass an object with per_block and finish",
    )


def _prepare(stat: BlockStatistic, *datasets: xr.DataArray) -> BlockStatistic:
    prepare = getattr(stat, "prepare", None)
    return prepare(*datasets) if callable(prepare) else stat


def block_sums(statistic: Statistic, x: xr.DataArray) -> np.ndarray:
    """Per-block sufficient statistics (n_blocks, k) of `x` (prepared on `x` alone)."""
    stat = _prepare(get_statistic(statistic), x)
    return _checked_sums(stat, x)


def _checked_sums(stat: BlockStatistic, x: xr.DataArray) -> np.ndarray:
    sums = np.asarray(stat.per_block(x), dtype=float)
    if sums.ndim != 2:
        raise InputError.make(
            f"statistic '{stat.name}'",
            f"per_block output of shape {sums.shape}",
            "a (n_blocks, k) array",
            "return one row of additive sums per block",
        )
    return sums


# ---------------------------------------------------------------------------------------------
# weight matrices


def _rng(seed: Seed) -> np.random.Generator:
    return seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)


def _check_resamples(n_resamples: int) -> int:
    if int(n_resamples) != n_resamples or n_resamples < 1:
        raise ConfigError.make(
            "n_resamples", repr(n_resamples), "a positive integer", "use e.g. n_resamples=1000"
        )
    return int(n_resamples)


# Every statistic of one dataset (or pair) is resampled with the same seed and sizes, so the
# same weight matrix serves them all: generating it (millions of random keys) costs more than
# the matrix product, so recent matrices are kept, read-only, under a memory bound.
_CACHE_BYTES = 128 * 1024**2
_cache: OrderedDict[tuple, np.ndarray] = OrderedDict()
_cache_lock = threading.Lock()


def _cached(key: tuple, seed: Seed, make: Callable[[np.random.Generator], np.ndarray]):
    """`make(rng)` for an integer seed through the cache; a Generator is never cached (its
    state moves on)."""
    if not isinstance(seed, (int, np.integer)) or isinstance(seed, bool):
        return make(_rng(seed))
    key = (*key, int(seed))
    with _cache_lock:
        if key in _cache:
            _cache.move_to_end(key)
            return _cache[key]
    weights = make(np.random.default_rng(seed))
    weights.flags.writeable = False
    if weights.nbytes <= _CACHE_BYTES:
        with _cache_lock:
            _cache[key] = weights
            while sum(w.nbytes for w in _cache.values()) > _CACHE_BYTES:
                _cache.popitem(last=False)
    return weights


def bootstrap_weights(
    n_blocks: int, n_resamples: int, seed: Seed = 0, *, n_draws: int | None = None
) -> np.ndarray:
    """(n_resamples, n_blocks) multinomial counts: `n_draws` (default n_blocks) blocks drawn
    with replacement per row. Read-only (shared between calls with the same integer seed)."""
    n_draws = n_blocks if n_draws is None else n_draws

    def make(rng: np.random.Generator) -> np.ndarray:
        picks = rng.integers(0, n_blocks, size=(n_resamples, n_draws))
        flat = picks + n_blocks * np.arange(n_resamples)[:, None]
        counts = np.bincount(flat.ravel(), minlength=n_resamples * n_blocks)
        return counts.reshape(n_resamples, n_blocks).astype(float)

    return _cached(("bootstrap", n_blocks, n_draws, n_resamples), seed, make)


def subsample_weights(n_blocks: int, n_draws: int, n_resamples: int, seed: Seed = 0) -> np.ndarray:
    """(n_resamples, n_blocks) 0/1 rows, each choosing `n_draws` distinct blocks. Read-only."""

    def make(rng: np.random.Generator) -> np.ndarray:
        weights = np.zeros((n_resamples, n_blocks))
        if n_draws >= n_blocks:
            weights[:] = 1.0
        elif n_draws > 0:
            # The positions of the n_draws smallest of n_blocks uniform keys: a uniformly random
            # subset per row. argpartition returns exactly n_draws distinct positions even when
            # keys tie, so single-precision keys are safe (ties only reorder equal keys) and
            # cheap.
            keys = rng.random((n_resamples, n_blocks), dtype=np.float32)
            chosen = np.argpartition(keys, n_draws - 1, axis=1)[:, :n_draws]
            np.put_along_axis(weights, chosen, 1.0, axis=1)
        return weights

    return _cached(("subsample", n_blocks, n_draws, n_resamples), seed, make)


def permutation_weights(n_first: int, n_second: int, n_resamples: int, seed: Seed = 0):
    """(n_resamples, n_first + n_second) 0/1 rows: 1 marks blocks relabelled as the first group.

    Each row is a random relabelling of the pooled blocks that keeps the group sizes. Read-only.
    """
    return subsample_weights(n_first + n_second, n_first, n_resamples, seed)


# ---------------------------------------------------------------------------------------------
# outputs


def _value_coords(stat: BlockStatistic, value: np.ndarray) -> tuple[tuple[str, ...], dict]:
    """Dims and coords of one value of the statistic (scalar or a vector on `stat.dim`)."""
    if np.ndim(value) == 0:
        return (), {}
    dim = getattr(stat, "dim", None) or "component"
    labels = getattr(stat, "coords", None)
    coords = {dim: list(labels)} if labels is not None and len(labels) == value.shape[-1] else {}
    return (dim,), coords


def _attrs(stat: BlockStatistic, method: str, **extra) -> dict:
    attrs = {
        "long_name": getattr(stat, "long_name", stat.name),
        "units": getattr(stat, "units", ""),
        "statistic": stat.name,
        "method": method,
    }
    attrs.update({k: v for k, v in extra.items() if v is not None})
    return attrs


def _percentile(values: np.ndarray, probs: Sequence[float]) -> np.ndarray:
    """Linear-interpolation percentiles along axis 0 that keep +-inf (no inf - inf = NaN)."""
    ordered = np.sort(values, axis=0)
    n = ordered.shape[0]
    out = []
    for p in probs:
        pos = p * (n - 1)
        lo, hi = int(np.floor(pos)), int(np.ceil(pos))
        a, b = ordered[lo], ordered[hi]
        with np.errstate(invalid="ignore"):
            mixed = a + (b - a) * (pos - lo)
        out.append(np.where((a == b) | (pos == lo), a, mixed))
    return np.stack(out)


def _as_seed_attr(seed: Seed) -> int | str:
    return seed if isinstance(seed, int) else "generator"


# ---------------------------------------------------------------------------------------------
# bootstrap, permutation, model against reference

Statistics = Statistic | Sequence[Statistic]


class _Stacked:
    """Several statistics side by side: their per-block sums share one matrix, so one weight
    matrix and one matrix product serve them all."""

    def __init__(self, statistic: Statistics, *datasets: xr.DataArray):
        self.single = isinstance(statistic, str) or _is_statistic(statistic)
        specs = [statistic] if self.single else list(statistic)  # type: ignore[arg-type]
        self.stats = [_prepare(get_statistic(spec), *datasets) for spec in specs]
        names = [st.name for st in self.stats]
        if len(set(names)) != len(names) or not names:
            raise ConfigError.make(
                "statistic",
                f"names {names}",
                "one or more statistics with distinct names",
                "give each statistic its own name",
            )
        self.slices: list[slice] = []

    def sums(self, x: xr.DataArray) -> np.ndarray:
        parts = [_checked_sums(st, x) for st in self.stats]
        edges = np.cumsum([0] + [p.shape[1] for p in parts])
        self.slices = [slice(a, b) for a, b in itertools.pairwise(edges)]
        return np.concatenate(parts, axis=1)

    def finish(self, sums: np.ndarray) -> list[np.ndarray]:
        return [
            np.asarray(st.finish(sums[..., sl]))
            for st, sl in zip(self.stats, self.slices, strict=True)
        ]

    def result(self, datasets: list[xr.Dataset]):
        if self.single:
            return datasets[0]
        return {st.name: ds for st, ds in zip(self.stats, datasets, strict=True)}


def bootstrap_ci(
    x: xr.DataArray,
    statistic: Statistics = "mean",
    *,
    n_resamples: int = 1000,
    confidence: float = 0.95,
    seed: Seed = 0,
):
    """Percentile bootstrap interval of a statistic, resampling whole blocks.

    Parameters
    ----------
    x : DataArray (member, time), a daily index (or labels) in canonical form.
    statistic : a name or a block statistic object (module docstring), or a sequence of them:
        then a dict of results keyed by statistic name, all from the same replicates (one
        matrix product for all).
    n_resamples : number of bootstrap replicates.
    confidence : coverage of the interval, e.g. 0.95.
    seed : int or numpy Generator.

    Returns
    -------
    Dataset with `statistic` (value on all data), `low` and `high` (interval ends), in the
    statistic's units. Method: percentile interval (Efron and Tibshirani 1993, ch. 13) with
    replicates drawing n_blocks blocks with replacement.
    """
    if not 0 < confidence < 1:
        raise ConfigError.make("confidence", repr(confidence), "a number in (0, 1)", "use 0.95")
    n_resamples = _check_resamples(n_resamples)
    stack = _Stacked(statistic, x)
    sums = stack.sums(x)
    _require_blocks(sums.shape[0], 2, "bootstrap_ci")
    weights = bootstrap_weights(sums.shape[0], n_resamples, seed)
    values, replicates = stack.finish(sums.sum(0)), stack.finish(weights @ sums)
    alpha = 1 - confidence
    method = (
        f"block bootstrap percentile interval (Efron and Tibshirani 1993), "
        f"confidence={confidence}, n_resamples={n_resamples}, blocks={sums.shape[0]}"
    )
    out = []
    for stat, value, reps in zip(stack.stats, values, replicates, strict=True):
        low, high = _percentile(reps, [alpha / 2, 1 - alpha / 2])
        dims, coords = _value_coords(stat, value)
        attrs = _attrs(stat, method)
        ds = xr.Dataset(
            {
                "statistic": (dims, value, attrs),
                "low": (dims, low, {**attrs, "long_name": f"lower end of {confidence:g} interval"}),
                "high": (
                    dims,
                    high,
                    {**attrs, "long_name": f"upper end of {confidence:g} interval"},
                ),
            },
            coords=coords,
        )
        ds.attrs = {
            "confidence": confidence,
            "n_resamples": n_resamples,
            "seed": _as_seed_attr(seed),
            "n_blocks": sums.shape[0],
            "method": method,
        }
        out.append(ds)
    return stack.result(out)


def _require_blocks(n: int, minimum: int, where: str) -> None:
    if n < minimum:
        raise InputError.make(
            where,
            f"{n} block(s)",
            f"at least {minimum} blocks (member-seasons)",
            "add members or seasons; blocks are the unit of independence",
        )


Alternative = Literal["two-sided", "greater", "less"]


def _p_values(observed: np.ndarray, null: np.ndarray, alternative: Alternative) -> np.ndarray:
    """(b + 1) / (B + 1) with b the replicates at least as extreme as observed (axis 0)."""
    tol = 1e-12 * np.maximum(np.abs(observed), 1.0)  # ties up to rounding count as extreme
    with np.errstate(invalid="ignore"):
        if alternative == "two-sided":
            extreme = np.abs(null) >= np.abs(observed) - tol
        elif alternative == "greater":
            extreme = null >= observed - tol
        elif alternative == "less":
            extreme = null <= observed + tol
        else:
            raise ConfigError.make(
                "alternative",
                repr(alternative),
                "'two-sided', 'greater' or 'less'",
                "use alternative='two-sided'",
            )
    p = (extreme.sum(axis=0) + 1.0) / (null.shape[0] + 1.0)
    return np.where(np.isfinite(observed), p, np.nan)


def permutation_test(
    x: xr.DataArray,
    y: xr.DataArray,
    statistic: Statistics = "mean",
    *,
    n_resamples: int = 1000,
    seed: Seed = 0,
    alternative: Alternative = "two-sided",
):
    """Difference of a statistic between two datasets, tested by permuting whole blocks.

    Parameters
    ----------
    x, y : DataArray (member, time): the first (e.g. control) and second (e.g. perturbed)
        dataset of the same index.
    statistic : a name or a block statistic object (module docstring), or a sequence of them:
        then a dict of results keyed by statistic name, all from the same relabellings.
    n_resamples : number of random relabellings of the pooled blocks.
    seed : int or numpy Generator.
    alternative : "two-sided" (|T*| >= |T|), "greater" (T* >= T) or "less".

    Returns
    -------
    Dataset with `statistic` = value(y) - value(x), `p_value` = (b + 1) / (B + 1) (Phipson and
    Smyth 2010), `first` and `second` (the value on each dataset), `null_low` and `null_high`
    (2.5 and 97.5 percentiles of the permutation distribution of the difference).
    """
    n_resamples = _check_resamples(n_resamples)
    stack = _Stacked(statistic, x, y)
    sx, sy = stack.sums(x), stack.sums(y)
    _require_blocks(min(sx.shape[0], sy.shape[0]), 1, "permutation_test")
    pooled = np.concatenate([sx, sy])
    weights = permutation_weights(sx.shape[0], sy.shape[0], n_resamples, seed)
    to_first = weights @ pooled
    to_second = pooled.sum(0) - to_first
    method = (
        f"block permutation test, {alternative}, n_resamples={n_resamples}, "
        f"blocks={sx.shape[0]}+{sy.shape[0]}, p=(b+1)/(B+1) (Phipson and Smyth 2010)"
    )
    out = []
    for stat, first, second, null_first, null_second in zip(
        stack.stats,
        stack.finish(sx.sum(0)),
        stack.finish(sy.sum(0)),
        stack.finish(to_first),
        stack.finish(to_second),
        strict=True,
    ):
        observed = second - first
        null = null_second - null_first
        p = _p_values(observed, null, alternative)
        low, high = _percentile(null, [0.025, 0.975])
        dims, coords = _value_coords(stat, observed)
        attrs = _attrs(stat, method)
        ds = xr.Dataset(
            {
                "statistic": (
                    dims,
                    observed,
                    {**attrs, "long_name": f"{stat.name}: second - first"},
                ),
                "p_value": (dims, p, {"long_name": "p-value", "units": "1", "method": method}),
                "first": (dims, first, {**attrs, "long_name": f"{stat.name} of first dataset"}),
                "second": (dims, second, {**attrs, "long_name": f"{stat.name} of second dataset"}),
                "null_low": (dims, low, {**attrs, "long_name": "2.5 percentile of the null"}),
                "null_high": (dims, high, {**attrs, "long_name": "97.5 percentile of the null"}),
            },
            coords=coords,
        )
        ds.attrs = {
            "n_resamples": n_resamples,
            "seed": _as_seed_attr(seed),
            "alternative": alternative,
            "method": method,
        }
        out.append(ds)
    return stack.result(out)


def reference_percentile(
    model: xr.DataArray,
    reference: xr.DataArray,
    statistic: Statistics = "mean",
    *,
    n_resamples: int = 1000,
    seed: Seed = 0,
    replace: bool = False,
    confidence: float = 0.95,
):
    """Is the reference inside the model's spread? Model distribution for reference-sized samples.

    The reference holds N blocks (e.g. 40 winters of a reanalysis). Each replicate draws N
    model blocks (distinct blocks by default; with replacement if `replace`), giving the
    model's sampling distribution of the statistic for an N-season record; the reference value
    is placed in it. `statistic` may be a sequence (then a dict keyed by name).

    Returns
    -------
    Dataset with `statistic` (reference value), `model` (value on all model blocks),
    `percentile` (0-100: share of replicates below the reference, ties counting half),
    `p_value` (two-sided, (b + 1) / (B + 1) with b = 2 min(#replicates <= ref, #>= ref), capped
    at 1), `low` and `high` (the model's central `confidence` range for N-season samples) and
    `distribution` (the replicates, on dim `resample`).
    """
    n_resamples = _check_resamples(n_resamples)
    stack = _Stacked(statistic, model, reference)
    sm, sr = stack.sums(model), stack.sums(reference)
    n_ref, n_model = sr.shape[0], sm.shape[0]
    if not replace and n_model < n_ref:
        raise InputError.make(
            "reference_percentile",
            f"{n_model} model blocks for a reference of {n_ref}",
            "at least as many model blocks as reference blocks",
            "pass replace=True",
        )
    weights = (
        bootstrap_weights(n_model, n_resamples, seed, n_draws=n_ref)
        if replace
        else subsample_weights(n_model, n_ref, n_resamples, seed)
    )
    alpha = 1 - confidence
    method = (
        f"model sampling distribution of {n_ref}-block samples "
        f"({'with' if replace else 'without'} replacement), n_resamples={n_resamples}"
    )
    out = []
    for stat, ref, whole, dist in zip(
        stack.stats,
        stack.finish(sr.sum(0)),
        stack.finish(sm.sum(0)),
        stack.finish(weights @ sm),
        strict=True,
    ):
        below, equal = (dist < ref).sum(0), (dist == ref).sum(0)
        percentile = 100.0 * (below + 0.5 * equal) / n_resamples
        b = 2 * np.minimum(below + equal, n_resamples - below)
        p = np.minimum((b + 1.0) / (n_resamples + 1.0), 1.0)
        low, high = _percentile(dist, [alpha / 2, 1 - alpha / 2])
        dims, coords = _value_coords(stat, ref)
        attrs = _attrs(stat, method)
        ds = xr.Dataset(
            {
                "statistic": (dims, ref, {**attrs, "long_name": f"{stat.name} of the reference"}),
                "model": (dims, whole, {**attrs, "long_name": f"{stat.name} of all model blocks"}),
                "percentile": (
                    dims,
                    percentile,
                    {
                        "long_name": "percentile of the reference in the model distribution",
                        "units": "percent",
                        "method": method,
                    },
                ),
                "p_value": (dims, p, {"long_name": "two-sided p-value", "units": "1"}),
                "low": (
                    dims,
                    low,
                    {**attrs, "long_name": f"lower end of model {confidence:g} range"},
                ),
                "high": (
                    dims,
                    high,
                    {**attrs, "long_name": f"upper end of model {confidence:g} range"},
                ),
                "distribution": (("resample", *dims), dist, attrs),
            },
            coords=coords,
        )
        ds.attrs = {
            "n_reference_blocks": n_ref,
            "n_model_blocks": n_model,
            "n_resamples": n_resamples,
            "seed": _as_seed_attr(seed),
            "method": method,
        }
        out.append(ds)
    return stack.result(out)


# ---------------------------------------------------------------------------------------------
# distributions: two-sample KS with a block-permutation p-value


def _ks_edges(pooled: np.ndarray, max_bins: int) -> np.ndarray:
    """Edges where the two empirical CDFs are compared: every distinct value when there are at
    most `max_bins` of them (exact statistic), else `max_bins` + 1 pooled quantiles."""
    distinct = np.unique(pooled)
    if distinct.size <= max_bins:
        return np.concatenate([[distinct[0] - 1.0], distinct])
    return np.quantile(pooled, np.linspace(0, 1, max_bins + 1))


def _ks_from_counts(first: np.ndarray, second: np.ndarray) -> np.ndarray:
    """Largest gap between the two CDFs at the bin edges: counts (..., n_bins) -> (...)."""
    f1 = np.cumsum(first, axis=-1)
    f2 = np.cumsum(second, axis=-1)
    f1 = _ratio(f1, f1[..., -1:])
    f2 = _ratio(f2, f2[..., -1:])
    return np.abs(f2 - f1).max(axis=-1)


def ks_test(
    x: xr.DataArray,
    y: xr.DataArray,
    *,
    n_resamples: int = 1000,
    seed: Seed = 0,
    method: Literal["permutation", "independent"] = "permutation",
    max_bins: int = 1000,
) -> xr.Dataset:
    """Two-sample Kolmogorov-Smirnov test of the distributions of two daily indices.

    The statistic D is `scipy.stats.ks_2samp` on all valid days. Days are not independent, so
    by default the p-value comes from permuting whole blocks: the permutation statistic is D
    evaluated at common bin edges (every distinct pooled value when there are at most
    `max_bins`, so exact; otherwise `max_bins` + 1 pooled quantiles, which can miss the exact
    supremum by about 2 / max_bins), and the observed D is evaluated the same way for the
    comparison. method="independent" returns scipy's p-value, which treats days as independent
    and is too small for autocorrelated data.

    Returns
    -------
    Dataset with `statistic` (D), `p_value`, and `p_value_independent_days` (scipy's).
    """
    from scipy.stats import ks_2samp

    x = _as_member_time(x, "ks_test: first dataset")
    y = _as_member_time(y, "ks_test: second dataset")
    xv, yv = _pooled_values(x), _pooled_values(y)
    if xv.size == 0 or yv.size == 0:
        raise InputError.make(
            "ks_test",
            "a dataset with no valid values",
            "values in both datasets",
            "check the inputs for missing values",
        )
    scipy_result = ks_2samp(xv, yv)
    d = float(scipy_result.statistic)
    p_days = float(scipy_result.pvalue)
    if method == "independent":
        p, detail = p_days, "p-value from scipy.stats.ks_2samp (days treated as independent)"
    elif method == "permutation":
        n_resamples = _check_resamples(n_resamples)
        edges = _ks_edges(np.concatenate([xv, yv]), max_bins)
        hist = Quantile(edges=tuple(edges.tolist()))
        hx, hy = hist.per_block(x), hist.per_block(y)
        pooled = np.concatenate([hx, hy])
        weights = permutation_weights(hx.shape[0], hy.shape[0], n_resamples, seed)
        to_first = weights @ pooled
        null = _ks_from_counts(to_first, pooled.sum(0) - to_first)
        observed = _ks_from_counts(hx.sum(0), hy.sum(0))
        p = float(_p_values(np.asarray(observed), null, "greater"))
        detail = (
            f"p-value by block permutation, n_resamples={n_resamples}, "
            f"{edges.size - 1} comparison bins, p=(b+1)/(B+1)"
        )
    else:
        raise ConfigError.make(
            "method", repr(method), "'permutation' or 'independent'", "use method='permutation'"
        )
    method_attr = f"two-sample Kolmogorov-Smirnov statistic (scipy.stats.ks_2samp); {detail}"
    ds = xr.Dataset(
        {
            "statistic": (
                (),
                d,
                {"long_name": "Kolmogorov-Smirnov D", "units": "1", "method": method_attr},
            ),
            "p_value": ((), p, {"long_name": "p-value", "units": "1", "method": method_attr}),
            "p_value_independent_days": (
                (),
                p_days,
                {
                    "long_name": "p-value if days were independent (too small for "
                    "autocorrelated data)",
                    "units": "1",
                },
            ),
        }
    )
    ds.attrs = {"method": method_attr, "seed": _as_seed_attr(seed)}
    return ds


# ---------------------------------------------------------------------------------------------
# maps: grid-point tests


def _as_field(x: xr.DataArray, where: str) -> tuple[xr.DataArray, list[str]]:
    if not isinstance(x, xr.DataArray) or "time" not in x.dims:
        raise CoordinateError.make(
            where,
            f"{type(x).__name__} with dims {getattr(x, 'dims', None)}",
            "a DataArray (member, time, lat, lon) or with other grid dims",
            "pass one variable of the canonical form",
        )
    if "member" not in x.dims:
        x = x.expand_dims(member=[0])
    space = [d for d in x.dims if d not in ("member", "time")]
    if not space:
        raise CoordinateError.make(
            where,
            "no grid dimensions",
            "a field with grid dims such as lat and lon",
            "use permutation_test for a single index",
        )
    return x.transpose("member", "time", *space), space


@dataclass(frozen=True)
class FieldBlockSums:
    """Per-block sums and counts of a field at every grid point, for `map_difference_test`.

    Computing them once per dataset lets several map tests (bias against a reference, response
    against a baseline) share one pass over the data.
    """

    sums: np.ndarray  # (n_blocks, n_points)
    counts: np.ndarray  # (n_blocks, n_points)
    template: xr.DataArray  # the grid (dims and coordinates)
    units: str


@dataclass(frozen=True)
class PendingBlockSums:
    """`field_block_sums` before computing: `sums` and `counts` are (block, grid...) DataArrays,
    lazy for dask-backed fields, so that they can join other work in one pass over the files
    (compute or persist ``(pending.sums, pending.counts)`` and `replace` them)."""

    sums: xr.DataArray
    counts: xr.DataArray
    space: tuple[str, ...]
    template: xr.DataArray
    units: str

    def result(self) -> FieldBlockSums:
        """The numpy (n_blocks, n_points) sums and counts (computes what is still lazy)."""
        sums, counts = xr.align(*dask_compute(self.sums, self.counts))
        n_points = int(np.prod([sums.sizes[d] for d in self.space]))
        s = np.asarray(sums.transpose("block", *self.space).values, dtype=float)
        n = np.asarray(counts.transpose("block", *self.space).values, dtype=float)
        return FieldBlockSums(
            s.reshape(-1, n_points), n.reshape(-1, n_points), self.template, self.units
        )


def lazy_field_block_sums(x: xr.DataArray) -> PendingBlockSums:
    """Per-block sums and valid-day counts of a (member, time, grid...) field, not yet computed.

    The reduction over time happens before loading (dask-friendly); rows follow `block_ids`.
    """
    x, space = _as_field(x, "field_block_sums: field")
    valid = x.notnull()
    filled = x.fillna(0.0)
    if "season_year" in x.coords:
        sums = filled.groupby("season_year").sum("time").stack(block=("member", "season_year"))
        counts = valid.groupby("season_year").sum("time").stack(block=("member", "season_year"))
    else:
        sums = filled.sum("time").rename(member="block")
        counts = valid.sum("time").rename(member="block")
    return PendingBlockSums(
        sums, counts, tuple(space), _template(x, space), x.attrs.get("units", "")
    )


def field_block_sums(x: xr.DataArray) -> FieldBlockSums:
    """Per-block sums and valid-day counts of a (member, time, grid...) field, in one pass."""
    return lazy_field_block_sums(x).result()


def _template(x: xr.DataArray, space: list[str]) -> xr.DataArray:
    """A (grid dims) DataArray carrying the coordinates of the grid."""
    keep = {name: c for name, c in x.coords.items() if set(c.dims) <= set(space)}
    return xr.DataArray(np.zeros([x.sizes[d] for d in space]), dims=space, coords=keep)


def _on_grid(values: np.ndarray, template: xr.DataArray, attrs: dict) -> xr.DataArray:
    return template.copy(data=values.reshape(template.shape)).assign_attrs(attrs)


def _lag1_moments(x: xr.DataArray, space: list[str]):
    """Count, mean, variance (ddof=1) and lag-1 autocorrelation at each grid point.

    Lag-1 pairs are consecutive time steps inside one block; the mean is removed over all
    days (as in `westerlies.timeseries.acf`).
    """
    dims = ("member", "time")
    n = x.count(dims)
    mean = x.mean(dims)
    anomaly = x - mean
    c0 = (anomaly**2).sum(dims)
    pos = _time_positions(x)
    pair = np.concatenate([[False], np.diff(pos) == 1])  # step t-1 -> t inside one block
    later = anomaly.isel(time=np.flatnonzero(pair))
    earlier = anomaly.isel(time=np.flatnonzero(pair) - 1)
    product = xr.DataArray(later.data * earlier.data, dims=later.dims)
    n_pairs = product.count(dims)
    c1 = product.sum(dims)
    r1 = _ratio(c1 / n_pairs, c0 / n)
    variance = c0 / (n - 1)
    flat = [
        np.asarray(v.transpose(*space).values, dtype=float).ravel() for v in (n, mean, variance, r1)
    ]
    return flat


def map_difference_test(
    x: xr.DataArray,
    y: xr.DataArray,
    *,
    method: Literal["permutation", "ttest"] = "permutation",
    n_resamples: int = 1000,
    seed: Seed = 0,
    chunk_size: int = 20_000_000,
) -> xr.Dataset:
    """Grid-point test of the difference of time means, y minus x.

    Parameters
    ----------
    x, y : DataArray (member, time, lat, lon) (any grid dims), same grid; for the permutation
        method also `FieldBlockSums` from `field_block_sums`, to share one pass over a field
        between several tests.
    method : "permutation" relabels whole blocks, the same relabellings at every grid point
        (per-block sums per grid point; all replicates are one matrix product). "ttest" is the
        faster Welch t-test with the effective sample size of Bretherton et al. (1999), J.
        Climate 12, 1990-2009: N_eff = N (1 - r1) / (1 + r1) from the pooled within-block lag-1
        autocorrelation r1 at each point (r1 < 0 is taken as 0: common practice), and
        Welch-Satterthwaite degrees of freedom from the N_eff.
    n_resamples, seed : for the permutation method.
    chunk_size : grid points are processed in chunks of n_resamples * points <= chunk_size.

    Returns
    -------
    Dataset on the grid with `difference` (mean y - mean x, units of the input) and `p_value`
    (two-sided; (b + 1) / (B + 1) for the permutation method).
    """
    if method == "permutation":
        # per-block sums: given (FieldBlockSums, shared between tests) or computed here
        fx = x if isinstance(x, FieldBlockSums) else field_block_sums(x)
        fy = y if isinstance(y, FieldBlockSums) else field_block_sums(y)
        if fx.template.shape != fy.template.shape:
            raise CoordinateError.make(
                "map_difference_test",
                f"grids {dict(fx.template.sizes)} and {dict(fy.template.sizes)}",
                "the same grid for both fields",
                "regrid one field to the other's grid",
            )
        template, units = fx.template, fx.units
        n_resamples = _check_resamples(n_resamples)
        sx, nx, sy, ny = fx.sums, fx.counts, fy.sums, fy.counts
        difference = _ratio(sy.sum(0), ny.sum(0)) - _ratio(sx.sum(0), nx.sum(0))
        sums, counts = np.concatenate([sx, sy]), np.concatenate([nx, ny])
        weights = permutation_weights(sx.shape[0], sy.shape[0], n_resamples, seed)
        p = np.empty_like(difference)
        step = max(1, chunk_size // n_resamples)
        for start in range(0, difference.size, step):
            cols = slice(start, start + step)
            s_first, n_first = weights @ sums[:, cols], weights @ counts[:, cols]
            null = _ratio(sums[:, cols].sum(0) - s_first, counts[:, cols].sum(0) - n_first)
            null = null - _ratio(s_first, n_first)
            p[cols] = _p_values(difference[cols], null, "two-sided")
        detail = (
            f"block permutation at each grid point, n_resamples={n_resamples}, "
            f"blocks={sx.shape[0]}+{sy.shape[0]}, p=(b+1)/(B+1)"
        )
    elif method == "ttest":
        from scipy.stats import t as student_t

        if isinstance(x, FieldBlockSums) or isinstance(y, FieldBlockSums):
            raise ConfigError.make(
                "map_difference_test",
                "per-block sums with method='ttest'",
                "the daily fields (the t-test needs lag-1 products)",
                "pass the DataArrays, or use method='permutation'",
            )
        x, space = _as_field(x, "map_difference_test: first field")
        y, space_y = _as_field(y, "map_difference_test: second field")
        if space != space_y or any(x.sizes[d] != y.sizes[d] for d in space):
            raise CoordinateError.make(
                "map_difference_test",
                f"grids {dict(x.sizes)} and {dict(y.sizes)}",
                "the same grid for both fields",
                "regrid one field to the other's grid",
            )
        template = _template(x, space)
        units = x.attrs.get("units", "")

        n1, m1, v1, r1 = _lag1_moments(x, space)
        n2, m2, v2, r2 = _lag1_moments(y, space)
        difference = m2 - m1
        e1 = n1 * _effective_fraction(r1)
        e2 = n2 * _effective_fraction(r2)
        a, b = v1 / e1, v2 / e2
        with np.errstate(invalid="ignore", divide="ignore"):
            t = difference / np.sqrt(a + b)
            dof = (a + b) ** 2 / (a**2 / (e1 - 1) + b**2 / (e2 - 1))
        p = 2 * student_t.sf(np.abs(t), dof)
        detail = (
            "Welch t-test with effective sample size N(1-r1)/(1+r1) "
            "(Bretherton et al. 1999, J. Climate 12, 1990-2009)"
        )
    else:
        raise ConfigError.make(
            "method", repr(method), "'permutation' or 'ttest'", "use method='permutation'"
        )
    out = xr.Dataset(
        {
            "difference": _on_grid(
                difference,
                template,
                {
                    "long_name": "difference of means (second - first)",
                    "units": units,
                    "method": detail,
                },
            ),
            "p_value": _on_grid(
                p, template, {"long_name": "p-value", "units": "1", "method": detail}
            ),
        }
    )
    out.attrs = {"method": detail, "seed": _as_seed_attr(seed)}
    return out


def _effective_fraction(r1: np.ndarray) -> np.ndarray:
    """(1 - r1) / (1 + r1) with r1 clipped to [0, 1): Bretherton et al. (1999) eq. for a mean."""
    r = np.clip(np.nan_to_num(r1, nan=0.0), 0.0, 1.0 - 1e-9)
    return (1 - r) / (1 + r)


def map_ks_test(
    x: xr.DataArray,
    y: xr.DataArray,
    *,
    n_resamples: int = 1000,
    seed: Seed = 0,
    n_bins: int = 50,
    chunk_size: int = 20_000_000,
) -> xr.Dataset:
    """Grid-point two-sample KS test with block-permutation p-values.

    At each grid point both empirical CDFs are compared at `n_bins` + 1 pooled quantiles of
    that point (D can fall short of the exact supremum by about 2 / n_bins); per-block
    histograms make every relabelling one matrix product, the same relabellings at every point.
    Cost grows as n_resamples x n_blocks x n_points x n_bins.

    Returns
    -------
    Dataset on the grid with `statistic` (D on the bins) and `p_value` ((b + 1) / (B + 1)).
    """
    x, space = _as_field(x, "map_ks_test: first field")
    y, _ = _as_field(y, "map_ks_test: second field")
    n_resamples = _check_resamples(n_resamples)
    template = _template(x, space)
    ids_x = block_ids(x).transpose("member", "time").values
    ids_y = block_ids(y).transpose("member", "time").values + ids_x.max() + 1
    ids = np.concatenate([ids_x.ravel(), ids_y.ravel()])
    n_x, n_blocks = int(ids_x.max()) + 1, int(ids.max()) + 1
    n_points = template.size
    values = np.concatenate(
        [
            np.asarray(x.values, dtype=float).reshape(-1, n_points),
            np.asarray(y.values, dtype=float).reshape(-1, n_points),
        ]
    )
    weights = permutation_weights(n_x, n_blocks - n_x, n_resamples, seed)
    statistic, p = np.full(n_points, np.nan), np.full(n_points, np.nan)
    step = max(1, chunk_size // (n_resamples * n_bins))
    for start in range(0, n_points, step):
        cols = range(start, min(start + step, n_points))
        hist = np.zeros((n_blocks, len(cols), n_bins))
        for j, col in enumerate(cols):
            v = values[:, col]
            ok = np.isfinite(v)
            if not ok.any():
                continue
            edges = np.quantile(v[ok], np.linspace(0, 1, n_bins + 1))
            bins = np.clip(np.searchsorted(edges, v[ok], side="left") - 1, 0, n_bins - 1)
            hist[:, j, :] = np.bincount(
                ids[ok] * n_bins + bins, minlength=n_blocks * n_bins
            ).reshape(n_blocks, n_bins)
        first, second = hist[:n_x].sum(0), hist[n_x:].sum(0)
        observed = _ks_from_counts(first, second)
        to_first = (weights @ hist.reshape(n_blocks, -1)).reshape(n_resamples, len(cols), n_bins)
        null = _ks_from_counts(to_first, hist.sum(0) - to_first)
        statistic[start : start + len(cols)] = observed
        p[start : start + len(cols)] = _p_values(observed, null, "greater")
    detail = (
        f"two-sample Kolmogorov-Smirnov D on {n_bins} pooled-quantile bins per grid point, "
        f"block permutation, n_resamples={n_resamples}, p=(b+1)/(B+1)"
    )
    out = xr.Dataset(
        {
            "statistic": _on_grid(
                statistic,
                template,
                {"long_name": "Kolmogorov-Smirnov D", "units": "1", "method": detail},
            ),
            "p_value": _on_grid(
                p, template, {"long_name": "p-value", "units": "1", "method": detail}
            ),
        }
    )
    out.attrs = {"method": detail, "seed": _as_seed_attr(seed)}
    return out


# ---------------------------------------------------------------------------------------------
# field significance


def fdr_mask(p_values, alpha: float = 0.05, *, wilks: bool = True):
    """Grid points significant under the false discovery rate (Benjamini and Hochberg 1995).

    Parameters
    ----------
    p_values : array or DataArray of p-values; NaN points are left out (and marked False).
    alpha : the global significance level.
    wilks : if True (default), control the FDR at alpha_FDR = 2 alpha, as Wilks (2016), Bull.
        Amer. Meteor. Soc. 97, 2263-2273, recommends for spatially correlated fields so that
        the global test has level about alpha; if False, plain Benjamini-Hochberg at alpha.

    Returns
    -------
    Boolean mask of the same shape (a DataArray if a DataArray was given): True where the
    p-value is at most the largest sorted p_(i) with p_(i) <= (i / N) alpha_FDR.
    """
    if not 0 < alpha < 1:
        raise ConfigError.make("alpha", repr(alpha), "a number in (0, 1)", "use alpha=0.05")
    level = 2 * alpha if wilks else alpha
    p = np.asarray(p_values, dtype=float)
    finite = np.isfinite(p)
    valid = p[finite]
    if np.any((valid < 0) | (valid > 1)):
        raise InputError.make(
            "p_values", "values outside [0, 1]", "p-values in [0, 1]", "check the input"
        )
    mask = np.zeros(p.shape, dtype=bool)
    if valid.size:
        ordered = np.sort(valid)
        passing = np.flatnonzero(ordered <= level * np.arange(1, valid.size + 1) / valid.size)
        if passing.size:
            mask = finite & (np.where(finite, p, np.inf) <= ordered[passing[-1]])
    if isinstance(p_values, xr.DataArray):
        return p_values.copy(data=mask).assign_attrs(
            long_name="significant under the false discovery rate",
            units="1",
            method=f"Benjamini-Hochberg at alpha_FDR={level:g}"
            + (f" (= 2 x alpha={alpha:g}, Wilks 2016)" if wilks else ""),
        )
    return mask
