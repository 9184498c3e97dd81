"""Regime statistics from daily labels: occupancy, persistence, episodes and transitions.

Every statistic is built from additive per-block sums (counts of days, of episodes and of
day-to-day pairs inside one block; DESIGN.md principle 2), so the significance engine can
bootstrap or permute blocks with one matrix product. Labels come from any source: integers
0..k-1 on (member, time), with -1 for "no regime". Names are taken, in this order, from the
`names=` keyword, from CF flag attributes (`flag_values`, `flag_meanings`; spaces in names are
written as underscores there), or made up as "regime 1", "regime 2" ...

Definitions (common practice):

- occupancy: fraction of days in each regime.
- episode: a run of consecutive days in one regime inside one block. An episode is "cut" when
  the day before its first day or after its last day lies in another block, outside the data or
  is missing (a gap in the time axis); its true length is unknown. Block layout and gaps are
  those of `westerlies.resampling.block_array`, so both modules cut episodes alike.
- persistence: mean episode length in days. Cut episodes count with their observed length by
  default (`edge="keep"`); `edge="drop"` leaves them out.
- minimum episode length (`min_length=`): every run shorter than `min_length` days is relabelled
  "no regime" (-1) before any statistic is taken; neighbouring no-regime days then form one
  no-regime episode. A cut run is judged on its observed length like any other.
- transitions: P(i -> j) from pairs of consecutive days in one block. "With self-transitions"
  counts every pair; "without" counts only changes of regime (i != j), i.e. the probability of
  the next regime given that the current episode ends.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Literal

import numpy as np
import xarray as xr

from .errors import ConfigError, CoordinateError, InputError, MissingValueError
from .resampling import block_array

__all__ = [
    "NO_REGIME",
    "NO_REGIME_NAME",
    "OccupancyStatistic",
    "PersistenceStatistic",
    "apply_min_length",
    "episodes",
    "label_attrs",
    "occupancy",
    "persistence",
    "regime_names",
    "transitions",
]

#: Label value of the no-regime class (days left unclassified).
NO_REGIME = -1
#: Name of the no-regime class on the `regime` dimension.
NO_REGIME_NAME = "no regime"

Edge = Literal["keep", "drop"]


# ---------------------------------------------------------------------------------------------
# labels and names


def label_attrs(names: list[str] | tuple[str, ...], *, no_regime: bool = False) -> dict:
    """CF flag attributes that attach regime names to an integer label array.

    Parameters
    ----------
    names : regime names, in label order (label 0 first).
    no_regime : also declare the no-regime class (label -1).
    """
    values = list(range(len(names)))
    meanings = [str(n).replace(" ", "_") for n in names]
    if no_regime:
        values = [NO_REGIME, *values]
        meanings = [NO_REGIME_NAME.replace(" ", "_"), *meanings]
    return {
        "long_name": "weather regime",
        "units": "1",
        "flag_values": np.array(values, dtype=np.int64),
        "flag_meanings": " ".join(meanings),
    }


def regime_names(
    labels: xr.DataArray, names: list[str] | tuple[str, ...] | None = None
) -> tuple[list[str], bool]:
    """Names of regimes 0..k-1 and whether the no-regime class is present or declared.

    Names come from `names`, else from CF flag attributes, else "regime 1" ... "regime k" with k
    one more than the largest label.
    """
    values = np.asarray(labels.values)
    has_none = bool(np.any(values == NO_REGIME))
    flags = labels.attrs.get("flag_values")
    meanings = labels.attrs.get("flag_meanings")
    if names is None and flags is not None and meanings is not None:
        flags = [int(v) for v in np.atleast_1d(flags)]
        words = str(meanings).split()
        if len(words) != len(flags):
            raise CoordinateError.make(
                "labels attributes 'flag_values'/'flag_meanings'",
                f"{len(flags)} values and {len(words)} meanings",
                "one meaning per value",
                "fix the attributes or pass names= explicitly",
            )
        table = {v: w.replace("_", " ") for v, w in zip(flags, words, strict=True)}
        has_none = has_none or NO_REGIME in table
        k = max([v for v in table if v >= 0], default=-1) + 1
        names = [table.get(i, f"regime {i + 1}") for i in range(k)]
    if names is None:
        finite = values[np.isfinite(values)] if values.dtype.kind == "f" else values
        k = int(finite.max()) + 1 if finite.size else 0
        names = [f"regime {i + 1}" for i in range(max(k, 0))]
    names = [str(n) for n in names]
    if len(set(names)) != len(names) or NO_REGIME_NAME in names:
        raise ConfigError.make(
            "names",
            repr(names),
            f"distinct names, none of them {NO_REGIME_NAME!r}",
            "give each regime its own name",
        )
    return names, has_none


def _check_labels(labels: xr.DataArray, n_regimes: int, what: str) -> xr.DataArray:
    """Integer labels on (member, time), in -1..n_regimes-1. A missing member dim is added."""
    if not isinstance(labels, xr.DataArray):
        raise InputError.make(
            what,
            type(labels).__name__,
            "an xarray DataArray of integer labels on (member, time)",
            "wrap the labels in a DataArray with dims ('member', 'time')",
        )
    if "member" not in labels.dims:
        labels = labels.expand_dims(member=[0])
    if set(labels.dims) != {"member", "time"}:
        raise CoordinateError.make(
            f"{what} dims",
            repr(tuple(labels.dims)),
            "('member', 'time')",
            "select one value per member and day before computing regime statistics",
        )
    labels = labels.transpose("member", "time")
    values = np.asarray(labels.values)
    if values.dtype.kind == "f":
        if np.isnan(values).any():
            raise MissingValueError.make(
                what,
                "NaN labels",
                f"integers 0..k-1 or {NO_REGIME} for no regime",
                f"label unclassified days {NO_REGIME}",
            )
        if np.any(values != np.round(values)):
            raise InputError.make(what, "non-integer values", "integer labels", "round them")
    elif values.dtype.kind not in "iu":
        raise InputError.make(what, f"dtype {values.dtype}", "integer labels", "cast to int")
    bad = (values < NO_REGIME) | (values >= n_regimes)
    if bad.any():
        raise InputError.make(
            what,
            f"label values {sorted(set(values[bad].astype(int).tolist()))[:5]}",
            f"values in 0..{n_regimes - 1} or {NO_REGIME} for no regime",
            "pass names= (one per regime) or fix the labels",
        )
    return labels.copy(data=values.astype(np.int64))


@dataclass(frozen=True)
class _Categories:
    """Regime names and the internal code of each category (no regime is coded k)."""

    names: tuple[str, ...]
    no_regime: bool

    @property
    def size(self) -> int:
        return len(self.names) + int(self.no_regime)

    @property
    def all_names(self) -> list[str]:
        return [*self.names, *([NO_REGIME_NAME] if self.no_regime else [])]

    @property
    def label_values(self) -> list[int]:
        return [*range(len(self.names)), *([NO_REGIME] if self.no_regime else [])]

    def codes(self, values: np.ndarray) -> np.ndarray:
        return np.where(values == NO_REGIME, len(self.names), values)

    def coords(self, dim: str = "regime") -> dict:
        return {dim: self.all_names, f"{dim}_label": (dim, self.label_values)}


def _layout(labels: xr.DataArray) -> tuple[np.ndarray, np.ndarray]:
    """Labels and flat sample positions laid out (n_blocks, n_steps), NaN at gaps.

    Uses `westerlies.resampling.block_array`, so a missing day inside a block leaves a hole that
    ends an episode, exactly as in the significance engine.
    """
    a = block_array(labels)
    index = labels.copy(data=np.arange(labels.size).reshape(labels.shape))
    return a, block_array(index)


def _prepare(labels, names, min_length, no_regime: bool = False, what: str = "labels"):
    """Categories and the (n_blocks, n_steps) array of category codes (NaN at gaps)."""
    found, has_none = regime_names(labels, names)
    labels = _check_labels(labels, len(found), what)
    if min_length is not None:
        labels = apply_min_length(labels, min_length, names=found)
        has_none = True
    cats = _Categories(tuple(found), has_none or no_regime)
    a, _ = _layout(labels)
    return cats, np.where(a == NO_REGIME, len(found), a)


# ---------------------------------------------------------------------------------------------
# numpy kernels on (n_blocks, n_steps) arrays of category codes, NaN where no day


def _runs(a: np.ndarray):
    """Runs of equal codes along each row: (flat start, length, code, block, cut) arrays.

    A run is cut when the step before its first day or after its last day holds no day of the
    block (block edge or missing day).
    """
    nb, n = a.shape
    flat = np.concatenate([a, np.full((nb, 1), np.nan)], axis=1).ravel()
    ok = np.isfinite(flat)
    prev = np.r_[np.nan, flat[:-1]]
    starts = np.flatnonzero(ok & (prev != flat))
    ends = np.flatnonzero(ok & (np.r_[flat[1:], np.nan] != flat))
    cut = ~np.isfinite(prev[starts]) | ~np.isfinite(flat[ends + 1])
    length = ends - starts + 1
    return starts, length, flat[starts].astype(np.int64), starts // (n + 1), cut


def _day_counts(a: np.ndarray, m: int) -> np.ndarray:
    """Days per (block, category): (n_blocks, m)."""
    return np.stack([(a == c).sum(axis=1) for c in range(m)], axis=1).astype(float)


def _episode_sums(a: np.ndarray, m: int, edge: Edge) -> np.ndarray:
    """Per block and category: [number of episodes (m) | days in those episodes (m)]."""
    nb = a.shape[0]
    _, length, code, block, cut = _runs(a)
    keep = ~cut if edge == "drop" else np.ones(length.size, dtype=bool)
    idx = block[keep] * m + code[keep]
    count = np.bincount(idx, minlength=nb * m).reshape(nb, m)
    days = np.bincount(idx, weights=length[keep], minlength=nb * m).reshape(nb, m)
    return np.concatenate([count, days], axis=1).astype(float)


def _length_histogram(a: np.ndarray, m: int, edge: Edge, max_length: int) -> np.ndarray:
    """Episodes by category and length 1..max_length, summed over blocks: (m, max_length)."""
    _, length, code, _, cut = _runs(a)
    keep = ~cut if edge == "drop" else np.ones(length.size, dtype=bool)
    idx = code[keep] * max_length + (length[keep] - 1)
    return np.bincount(idx, minlength=m * max_length).reshape(m, max_length).astype(float)


def _pair_counts(a: np.ndarray, m: int) -> np.ndarray:
    """Per block: counts of consecutive-day pairs (i today, j tomorrow), (n_blocks, m * m)."""
    nb = a.shape[0]
    today, tomorrow = a[:, :-1], a[:, 1:]
    ok = np.isfinite(today) & np.isfinite(tomorrow)
    block = np.broadcast_to(np.arange(nb)[:, None], today.shape)[ok]
    idx = (block * m + today[ok].astype(np.int64)) * m + tomorrow[ok].astype(np.int64)
    return np.bincount(idx, minlength=nb * m * m).reshape(nb, m * m).astype(float)


def _ratio(num: np.ndarray, den: np.ndarray) -> np.ndarray:
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, num / np.where(den > 0, den, 1), np.nan)


# ---------------------------------------------------------------------------------------------
# per-block statistics for the significance engine (westerlies.resampling protocol)


def _common(datasets, names, min_length) -> tuple[tuple[str, ...], bool]:
    """Names and no-regime flag shared by all datasets compared (so every row has one shape)."""
    found, has_none = None, min_length is not None
    for x in datasets:
        n, h = regime_names(x, names if names is not None else found)
        if found is not None and tuple(n) != found:
            raise ConfigError.make(
                "regime labels compared",
                f"names {list(found)} and {n}",
                "the same regimes",
                "assign every dataset to the same fitted regimes (Regimes.assign)",
            )
        found, has_none = tuple(n), has_none or h
    return found, has_none


@dataclass(frozen=True)
class _RegimeStatistic:
    """What the regime block statistics share: the regimes compared and their coordinates."""

    names: tuple[str, ...] | None = None
    min_length: int | None = None
    no_regime: bool = False
    dim: str = "regime"

    @property
    def coords(self) -> list[str] | None:
        if self.names is None:
            return None
        return _Categories(self.names, self.no_regime).all_names

    def prepare(self, *datasets: xr.DataArray):
        """A copy with the regimes (and the no-regime class) fixed across all datasets."""
        names, has_none = _common(datasets, self.names, self.min_length)
        return replace(self, names=names, no_regime=self.no_regime or has_none)


@dataclass(frozen=True)
class OccupancyStatistic(_RegimeStatistic):
    """Occupancy as a block statistic: `per_block` gives days per regime, (n_blocks, k).

    `finish(sums)` turns summed counts (..., k) into fractions (..., k) on any leading shape, so
    all replicates W @ S finish at once. `prepare(*datasets)` fixes the regimes (and whether the
    no-regime class is counted) across all datasets compared.
    """

    name: str = "occupancy"
    long_name: str = "fraction of days in each regime"
    units: str = "1"

    def per_block(self, x: xr.DataArray) -> np.ndarray:
        cats, a = _prepare(x, self.names, self.min_length, self.no_regime)
        return _day_counts(a, cats.size)

    def finish(self, sums: np.ndarray) -> np.ndarray:
        sums = np.asarray(sums, dtype=float)
        return _ratio(sums, sums.sum(axis=-1, keepdims=True))


@dataclass(frozen=True)
class PersistenceStatistic(_RegimeStatistic):
    """Persistence as a block statistic: per block [episodes per regime | their days].

    `per_block` gives (n_blocks, 2k); `finish(sums)` gives the mean episode length (..., k) in
    days, NaN for a regime with no episode. `edge` and `min_length` as in `persistence`.
    """

    edge: Edge = "keep"
    name: str = "persistence"
    long_name: str = "mean regime episode length"
    units: str = "days"

    def per_block(self, x: xr.DataArray) -> np.ndarray:
        _check_edge(self.edge)
        cats, a = _prepare(x, self.names, self.min_length, self.no_regime)
        return _episode_sums(a, cats.size, self.edge)

    def finish(self, sums: np.ndarray) -> np.ndarray:
        sums = np.asarray(sums, dtype=float)
        m = sums.shape[-1] // 2
        return _ratio(sums[..., m:], sums[..., :m])


def _check_edge(edge: str) -> None:
    if edge not in ("keep", "drop"):
        raise ConfigError.make(
            "edge",
            repr(edge),
            "'keep' or 'drop'",
            "keep: count episodes cut by a block edge as observed; drop: leave them out",
        )


# ---------------------------------------------------------------------------------------------
# public functions


def apply_min_length(
    labels: xr.DataArray, min_length: int, *, names: list[str] | tuple[str, ...] | None = None
) -> xr.DataArray:
    """Relabel every regime run shorter than `min_length` days as no regime (-1).

    Runs are taken inside one block (see the module docstring); a run cut by a block edge or a
    missing day is judged on its observed length. The result declares the no-regime class.
    """
    if not isinstance(min_length, (int, np.integer)) or min_length < 1:
        raise ConfigError.make(
            "min_length",
            repr(min_length),
            "a whole number of days >= 1",
            "give e.g. min_length=5, or None for no minimum",
        )
    found, _ = regime_names(labels, names)
    labels = _check_labels(labels, len(found), "labels")
    a, index = _layout(labels)
    starts, length, code, _, _ = _runs(a)
    short = (length < min_length) & (code != NO_REGIME)
    n = a.shape[1] + 1
    mark = np.zeros(a.shape[0] * n + 1, dtype=np.int64)
    np.add.at(mark, starts[short], 1)
    np.add.at(mark, starts[short] + length[short], -1)
    relabel = (np.cumsum(mark)[:-1] > 0).reshape(a.shape[0], n)[:, :-1]
    values = np.asarray(labels.values).ravel().copy()
    values[index[relabel].astype(np.int64)] = NO_REGIME
    out = labels.copy(data=values.reshape(labels.shape))
    out.attrs = {**labels.attrs, **label_attrs(found, no_regime=True)}
    out.attrs["min_length"] = int(min_length)
    return out


def occupancy(
    labels: xr.DataArray,
    *,
    names: list[str] | tuple[str, ...] | None = None,
    min_length: int | None = None,
) -> xr.DataArray:
    """Fraction of days in each regime.

    Parameters
    ----------
    labels : int DataArray (member, time); 0..k-1, -1 for no regime; blocks from `season_year`.
    names : regime names in label order (default: from the labels' CF flag attributes).
    min_length : minimum episode length in days; shorter runs become no regime (module docstring).

    Returns
    -------
    DataArray on `regime` (names; `regime_label` holds the integer label), units 1; it sums to
    one over regimes (the no-regime class included when present).
    """
    cats, a = _prepare(labels, _names_tuple(names), min_length)
    stat = OccupancyStatistic(names=cats.names, min_length=min_length, no_regime=cats.no_regime)
    value = stat.finish(_day_counts(a, cats.size).sum(axis=0))
    return xr.DataArray(
        value,
        dims="regime",
        coords=cats.coords(),
        name="occupancy",
        attrs={
            "units": "1",
            "long_name": "fraction of days in each regime",
            "method": _method("days in regime / all days, summed over blocks", min_length),
        },
    )


def persistence(
    labels: xr.DataArray,
    *,
    edge: Edge = "keep",
    min_length: int | None = None,
    names: list[str] | tuple[str, ...] | None = None,
) -> xr.DataArray:
    """Mean episode length in days per regime (an episode is a run inside one block).

    Parameters
    ----------
    labels : int DataArray (member, time), as for `occupancy`.
    edge : "keep" counts episodes cut by a block edge with their observed length; "drop" leaves
        them out.
    min_length : minimum episode length in days (module docstring); None for no minimum.
    names : regime names in label order.

    Returns
    -------
    DataArray on `regime`, days; NaN where a regime has no episode.
    """
    _check_edge(edge)
    cats, a = _prepare(labels, _names_tuple(names), min_length)
    stat = PersistenceStatistic(
        names=cats.names, min_length=min_length, no_regime=cats.no_regime, edge=edge
    )
    value = stat.finish(_episode_sums(a, cats.size, edge).sum(axis=0))
    return xr.DataArray(
        value,
        dims="regime",
        coords=cats.coords(),
        name="persistence",
        attrs={
            "units": "days",
            "long_name": "mean regime episode length",
            "method": _method(f"runs of one regime inside one block, edge={edge}", min_length),
        },
    )


def episodes(
    labels: xr.DataArray,
    *,
    long_days: int = 5,
    edge: Edge = "keep",
    min_length: int | None = None,
    names: list[str] | tuple[str, ...] | None = None,
) -> xr.Dataset:
    """Episode-length distribution per regime: survival curve and fraction of long episodes.

    Parameters
    ----------
    labels, edge, min_length, names : as for `persistence`.
    long_days : threshold in days for `long_fraction` (default 5, common practice).

    Returns
    -------
    Dataset with `count` (regime, length: episodes of each length), `survival` (regime, length:
    fraction of episodes lasting at least `length` days), `n_episodes` (regime) and
    `long_fraction` (regime: fraction lasting at least `long_days` days).
    """
    _check_edge(edge)
    if not isinstance(long_days, (int, np.integer)) or long_days < 1:
        raise ConfigError.make(
            "long_days", repr(long_days), "a whole number of days >= 1", "give e.g. long_days=5"
        )
    cats, a = _prepare(labels, _names_tuple(names), min_length)
    max_length = max(a.shape[1], int(long_days))
    hist = _length_histogram(a, cats.size, edge, max_length)
    at_least = np.cumsum(hist[:, ::-1], axis=1)[:, ::-1]  # episodes with length >= d
    n = at_least[:, 0]
    coords = {**cats.coords(), "length": np.arange(1, max_length + 1)}
    method = _method(f"runs of one regime inside one block, edge={edge}", min_length)
    ds = xr.Dataset(
        {
            "count": (("regime", "length"), hist, {"units": "1", "long_name": "episodes"}),
            "survival": (
                ("regime", "length"),
                _ratio(at_least, n[:, None]),
                {"units": "1", "long_name": "fraction of episodes lasting at least length days"},
            ),
            "n_episodes": ("regime", n, {"units": "1", "long_name": "number of episodes"}),
            "long_fraction": (
                "regime",
                _ratio(at_least[:, long_days - 1], n),
                {
                    "units": "1",
                    "threshold_days": int(long_days),
                    "long_name": f"fraction of episodes lasting at least {long_days} days",
                },
            ),
        },
        coords=coords,
        attrs={"method": method},
    )
    ds["length"].attrs = {"units": "days", "long_name": "episode length"}
    for var in ds.data_vars.values():
        var.attrs["method"] = method
    return ds


def transitions(
    labels: xr.DataArray,
    *,
    min_length: int | None = None,
    names: list[str] | tuple[str, ...] | None = None,
) -> xr.Dataset:
    """Regime transition probabilities from consecutive days inside one block.

    Returns
    -------
    Dataset on (`regime`, `next_regime`), both carrying names: `count` (pairs of consecutive
    days), `probability` (with self-transitions; rows sum to one) and `probability_no_self`
    (only changes of regime, the diagonal is zero; rows sum to one). Rows with no data are NaN.
    """
    cats, a = _prepare(labels, _names_tuple(names), min_length)
    m = cats.size
    counts = _pair_counts(a, m).sum(axis=0).reshape(m, m)
    off = counts * (1 - np.eye(m))
    coords = {**cats.coords("regime"), **cats.coords("next_regime")}
    method = _method("consecutive days inside one block", min_length)
    prob_attrs = {"units": "1", "method": method}
    return xr.Dataset(
        {
            "count": (
                ("regime", "next_regime"),
                counts,
                {"units": "1", "long_name": "day-to-day pairs", "method": method},
            ),
            "probability": (
                ("regime", "next_regime"),
                _ratio(counts, counts.sum(1, keepdims=True)),
                {**prob_attrs, "long_name": "transition probability with self-transitions"},
            ),
            "probability_no_self": (
                ("regime", "next_regime"),
                _ratio(off, off.sum(1, keepdims=True)),
                {**prob_attrs, "long_name": "transition probability between different regimes"},
            ),
        },
        coords=coords,
        attrs={"method": method},
    )


def _names_tuple(names) -> tuple[str, ...] | None:
    return None if names is None else tuple(str(n) for n in names)


def _method(text: str, min_length: int | None) -> str:
    extra = f"; runs shorter than {min_length} days set to no regime" if min_length else ""
    return f"regime statistic from per-block counts ({text}){extra}"
