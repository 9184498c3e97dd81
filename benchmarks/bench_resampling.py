"""Benchmark: the resampling engine against recomputing every statistic from the daily data.

Part 1, engine against recompute (issue 6: "at least 50x faster than the recompute").
Two ensembles of 1000 members x 90 days (one winter each: 1000 blocks each) of invented
series: an NAO-like AR(1) index; a jet latitude (a persistent three-state chain of preferred
positions near 37, 47 and 57 degrees_north plus AR(1) wander); a jet speed (AR(1) around
12 m s-1); 4 weather-regime labels (a persistent Markov chain) and 3 jet position categories
(the latitudes cut at the density minima of a `jet_modes` fit on the first ensemble). The
statistics are those the suite resamples (summary.py, diagnostics.py `_memory`):
mean, standard deviation, e-folding time (EfoldingTime, 30 lags), the ACF curve at lags 0..30
(Autocorrelation, the memory bands), the 0.9 quantile, occupancy (jet categories, regimes),
regime persistence (mean episode length), the jet mode latitudes (`JetModes.mode_statistic`)
and the two-sample KS statistic (`ks_test`). For each:

- engine: `permutation_test`, `bootstrap_ci` or `ks_test` with 2000 resamples, end to end
  (per-block sums, weight matrix, matrix product, finish, labelled output), best of
  `--repeat` calls. "cold": every call gets a new seed, so it pays for generating its weight
  matrix (the weight cache of `westerlies.resampling` cannot help); "warm": the seed of the
  previous call again, so the matrix comes from the cache. The line "shared seed" times all
  statistics in a row with one seed, as the suite calls them (one matrix per kind and size).
- recompute: for each resample, the daily values of the resampled blocks are gathered and the
  statistic is computed from them with plain numpy/scipy, vectorised within the resample
  (ACF by FFT of the blocks, as statsmodels' acf does by default; mode latitudes from a
  linear-binned Gaussian kernel density of the resampled days on the engine's grid and
  bandwidth, FFT convolution, `scipy.signal.find_peaks` with the same prominence rule; KS with
  `scipy.stats.ks_2samp` on the days of the relabelled blocks). The resamples are the first
  `--subset` rows of the very weight matrices the engine used (`bootstrap_weights` /
  `permutation_weights` with the engine's seed), timed and extrapolated linearly to 2000 (every
  resample costs the same). The replicate values of the engine's statistic for the same rows
  (`finish(W @ S)`) are compared with the recompute: max abs difference per statistic. Most of
  the KS recompute is scipy's p-value, which a permutation loop does not need: a last line
  gives the totals with D from np.sort + np.searchsorted instead.

Part 2, share of the suite (issue 6: "under 5 percent of the whole suite's time"), with
`--suite-share` (on by default; `--no-suite-share` skips it): by default `westerlies.compare`
on the demo scenario (`westerlies.synthetic.scenario`, in memory, `--members` per ensemble,
30 reference winters, 1000 resamples as in the default configuration) followed by writing the
report (`Comparison.write`); with `--suite-config CONFIG`, `westerlies run CONFIG` in this
process instead (e.g. the large workload's two 1000-member ensembles on disk: the bench.toml
that `benchmarks/run.py --workload large --keep` leaves in WORKDIR/runs). The engine's entry
points are wrapped by timers in this process only (outermost calls per thread counted, so
nested calls are not counted twice): resampling.bootstrap_ci, permutation_test,
reference_percentile, ks_test, map_difference_test, map_ks_test, timeseries.ccf_interval and
density.jet_modes (its block bootstrap of the density and modes and its multimodality test
resample inside it; the point estimate inside it is counted too, so the share is an upper
bound). The suite runs per-dataset work in parallel threads, so the headline is the engine's
thread CPU against the process CPU (the work the engine adds); the wall time during which at
least one thread is inside it (union of the call intervals) against the suite's wall time is
printed beside it, an upper bound (a call that waits for a core counts). With the demo the
data are handed over in memory, so no file reading is in the suite time: the share is larger
than for a run on files.

Run by hand: .venv/bin/python benchmarks/bench_resampling.py [--subset 100] [--repeat 2]
    [--members 20] [--no-suite-share] [--skip-engine] [--suite-config CONFIG]
"""

from __future__ import annotations

import argparse
import functools
import tempfile
import threading
import time
import warnings
from collections.abc import Callable
from pathlib import Path

import numpy as np
import xarray as xr
from scipy import fft, signal, stats

from westerlies import density, diagnostics, resampling, timeseries
from westerlies.resampling import (
    CategoryOccupancy,
    CategoryPersistence,
    Quantile,
    bootstrap_ci,
    bootstrap_weights,
    get_statistic,
    ks_test,
    permutation_test,
    permutation_weights,
)
from westerlies.timeseries import Autocorrelation, EfoldingTime

N_MEMBERS, N_DAYS, N_RESAMPLES, MAX_LAG = 1000, 90, 2000, 30
JET_POSITIONS = (37.0, 47.0, 57.0)  # degrees_north
KS_BINS = 1000  # ks_test's default max_bins


# --------------------------------------------------------------------------------- data


def ar1(rng: np.random.Generator, phi: float, shape: tuple[int, int]) -> np.ndarray:
    """Unit-variance AR(1) along the last axis, started from its stationary law."""
    noise = rng.standard_normal(shape) * np.sqrt(1 - phi**2)
    out = np.empty(shape)
    out[:, 0] = rng.standard_normal(shape[0])
    for t in range(1, shape[1]):
        out[:, t] = phi * out[:, t - 1] + noise[:, t]
    return out


def markov_chain(rng: np.random.Generator, stay: float, k: int, shape) -> np.ndarray:
    """Integer states of independent chains: stay with `stay`, else move uniformly."""
    matrix = np.full((k, k), (1 - stay) / (k - 1))
    np.fill_diagonal(matrix, stay)
    cumulative = np.cumsum(matrix, axis=1)
    u = rng.random(shape)
    out = np.empty(shape, dtype=np.int64)
    out[:, 0] = rng.integers(0, k, shape[0])  # the stationary law is uniform here
    for t in range(1, shape[1]):
        out[:, t] = np.minimum((u[:, t, None] > cumulative[out[:, t - 1]]).sum(1), k - 1)
    return out


def ensemble(rng: np.random.Generator, shift: float) -> dict[str, np.ndarray]:
    """One ensemble's daily series (N_MEMBERS, N_DAYS); `shift` plants small differences."""
    shape = (N_MEMBERS, N_DAYS)
    position = np.asarray(JET_POSITIONS)[markov_chain(rng, 0.9, 3, shape)] - shift
    return {
        "nao": ar1(rng, 0.8 + 0.03 * shift, shape) - 0.1 * shift,
        "jet_latitude": np.clip(position + 2.0 * ar1(rng, 0.6, shape), 20.0, 70.0),
        "jet_speed": 12.0 + 0.3 * shift + 2.0 * ar1(rng, 0.8, shape),
        "regime": markov_chain(rng, 0.88 + 0.02 * shift, 4, shape),
    }


def as_index(values: np.ndarray, units: str) -> xr.DataArray:
    """A (member, time) DataArray with daily dates of one winter (each member one block)."""
    time_axis = np.datetime64("2000-12-01") + np.arange(values.shape[1]).astype("timedelta64[D]")
    return xr.DataArray(
        values,
        dims=("member", "time"),
        coords={"member": np.arange(values.shape[0]), "time": time_axis},
        attrs={"units": units},
    )


# --------------------------------------------------------------------------------- recompute
# Plain numpy/scipy on (n_blocks, n_days) arrays of the resampled blocks' daily values.


def acf_curve(a: np.ndarray) -> np.ndarray:
    """Pooled ACF at lags 0..MAX_LAG: pairs inside a block, the mean of all days removed,
    r(k) = [C(k) / P(k)] / [C(0) / N] (the estimator of `westerlies.timeseries.acf`)."""
    d = a - a.mean()
    n_fft = fft.next_fast_len(2 * a.shape[1] - 1, real=True)
    power = np.abs(fft.rfft(d, n_fft, axis=1)) ** 2
    lagged = fft.irfft(power.sum(0), n_fft)[: MAX_LAG + 1]  # sum over blocks of lagged products
    pairs = a.shape[0] * (a.shape[1] - np.arange(MAX_LAG + 1))
    return (lagged / pairs) / (lagged[0] / a.size)


def efolding(a: np.ndarray) -> float:
    """First lag where the ACF drops below 1/e, linearly interpolated (inf if never)."""
    r = acf_curve(a)
    below = np.flatnonzero(r < np.exp(-1.0))
    if below.size == 0:
        return np.inf
    j = below[0]
    return float(j - 1 + (r[j - 1] - np.exp(-1.0)) / (r[j - 1] - r[j]))


def occupancy(k: int) -> Callable[[np.ndarray], np.ndarray]:
    return lambda a: np.bincount(a.ravel().astype(np.int64), minlength=k)[:k] / a.size


def persistence(k: int) -> Callable[[np.ndarray], np.ndarray]:
    """Mean episode length per category: days / episodes (runs inside one block)."""

    def compute(a: np.ndarray) -> np.ndarray:
        a = a.astype(np.int64)
        start = np.ones(a.shape, dtype=bool)
        start[:, 1:] = a[:, 1:] != a[:, :-1]
        days = np.bincount(a.ravel(), minlength=k)[:k]
        return days / np.bincount(a[start], minlength=k)[:k]

    return compute


class KernelModes:
    """Mode latitudes from a Gaussian kernel density of the days, on a prepared
    `ModeLatitudes`' grid, bandwidth, basin bounds and prominence rule."""

    def __init__(self, stat) -> None:
        self.stat = stat
        step, h = stat.resolution, stat.bandwidth
        half = int(np.ceil(6 * h / step))
        u = np.arange(-half, half + 1) * step
        self.kernel = np.exp(-0.5 * (u / h) ** 2) / (h * np.sqrt(2 * np.pi))
        self.centres = (stat.start + np.arange(stat.n_bins)) * step
        self.edges = np.concatenate([[-np.inf], stat.bounds, [np.inf]])

    def __call__(self, a: np.ndarray) -> np.ndarray:
        st = self.stat
        x = a.ravel()
        pos = np.clip(x / st.resolution - st.start, 0, st.n_bins - 1 - 1e-9)
        left = np.floor(pos).astype(np.int64)
        frac = pos - left
        counts = np.bincount(left, 1 - frac, st.n_bins) + np.bincount(left + 1, frac, st.n_bins)
        dens = signal.fftconvolve(counts, self.kernel, mode="same") / x.size
        peaks, _ = signal.find_peaks(dens, prominence=st.min_prominence * dens.max())
        out = np.full(self.edges.size - 1, np.nan)
        best = np.full(out.size, -np.inf)
        for i in peaks:  # parabola through the peak bin and its neighbours
            y0, y1, y2 = dens[i - 1], dens[i], dens[i + 1]
            shift = 0.5 * (y0 - y2) / (y0 - 2 * y1 + y2)
            lat, value = self.centres[i] + shift * st.resolution, y1 - 0.25 * (y0 - y2) * shift
            basin = int(np.searchsorted(self.edges, lat) - 1)
            if value > best[basin]:
                best[basin], out[basin] = value, lat
        return out


def ks_statistic(first: np.ndarray, second: np.ndarray) -> float:
    return float(stats.ks_2samp(first.ravel(), second.ravel()).statistic)


def ks_numpy(first: np.ndarray, second: np.ndarray) -> float:
    """The same D without scipy's p-value: both ECDFs at every pooled value."""
    a, b = np.sort(first.ravel()), np.sort(second.ravel())
    every = np.concatenate([a, b])
    cdf_a = np.searchsorted(a, every, side="right") / a.size
    return float(np.abs(cdf_a - np.searchsorted(b, every, side="right") / b.size).max())


# --------------------------------------------------------------------------------- engine path


def engine_replicates(spec, datasets, weights: np.ndarray, kind: str) -> np.ndarray:
    """The engine's replicate values for given weight rows: prepare, per-block sums, W @ S,
    finish (what bootstrap_ci / permutation_test do inside)."""
    stat = get_statistic(spec)
    prepare = getattr(stat, "prepare", None)
    stat = prepare(*datasets) if callable(prepare) else stat
    sums = np.concatenate([stat.per_block(d) for d in datasets])
    chosen = weights @ sums
    if kind == "bootstrap":
        return np.asarray(stat.finish(chosen))
    return np.asarray(stat.finish(sums.sum(0) - chosen)) - np.asarray(stat.finish(chosen))


def ks_replicates(x: xr.DataArray, y: xr.DataArray, weights: np.ndarray) -> np.ndarray:
    """KS D of relabelled blocks the way ks_test does it: ECDFs compared at 1001 pooled
    quantiles (its docstring), from per-block histograms and W @ H."""
    pooled = np.concatenate([x.values.ravel(), y.values.ravel()])
    edges = np.quantile(pooled, np.linspace(0, 1, KS_BINS + 1))
    hist = Quantile(edges=tuple(edges.tolist()))
    counts = np.concatenate([hist.per_block(x), hist.per_block(y)])
    first = weights @ counts
    second = counts.sum(0) - first
    cdf1 = np.cumsum(first, 1) / first.sum(1, keepdims=True)
    cdf2 = np.cumsum(second, 1) / second.sum(1, keepdims=True)
    return np.abs(cdf2 - cdf1).max(1)


# --------------------------------------------------------------------------------- part 1


class Seeds:
    """A fresh integer seed for every engine call (no weight matrix reused between calls)."""

    def __init__(self) -> None:
        self.next = 1000

    def __call__(self) -> int:
        self.next += 1
        return self.next


def best_of(repeat: int, seeds: Seeds | int, call: Callable, *args) -> tuple[float, int]:
    """Fastest of `repeat` calls `call(*args, n_resamples=2000, seed=...)`, with a new seed
    each time from `seeds` or always the seed given; returns (seconds, seed of the last)."""
    times = []
    for _ in range(repeat):
        seed = seeds if isinstance(seeds, int) else seeds()
        start = time.perf_counter()
        call(*args, n_resamples=N_RESAMPLES, seed=seed)
        times.append(time.perf_counter() - start)
    return min(times), seed


def max_difference(engine: np.ndarray, recompute: np.ndarray) -> str:
    engine, recompute = np.asarray(engine, float), np.asarray(recompute, float)
    same_missing = np.array_equal(~np.isfinite(engine), ~np.isfinite(recompute))
    both = np.isfinite(engine) & np.isfinite(recompute)
    diff = float(np.max(np.abs(engine[both] - recompute[both]))) if both.any() else np.nan
    return f"{diff:.1e}" + ("" if same_missing else " (NaN/inf differ)")


def recompute_bootstrap(values: np.ndarray, func, weights: np.ndarray):
    """Time `func` on the blocks drawn by each weight row; return (seconds, replicates)."""
    blocks = np.arange(values.shape[0])
    start = time.perf_counter()
    out = [func(values[np.repeat(blocks, w.astype(np.int64))]) for w in weights]
    return time.perf_counter() - start, np.array(out)


def recompute_permutation(x: np.ndarray, y: np.ndarray, func, weights: np.ndarray, two=False):
    """Time the relabelled difference func(second) - func(first) per weight row."""
    pooled = np.concatenate([x, y])
    start = time.perf_counter()
    out = []
    for w in weights:
        first, second = pooled[np.flatnonzero(w)], pooled[np.flatnonzero(w == 0)]
        out.append(func(first, second) if two else func(second) - func(first))
    return time.perf_counter() - start, np.array(out)


def part_one(args) -> None:
    rng = np.random.default_rng(0)
    raw = [ensemble(rng, 0.0), ensemble(rng, 1.0)]
    units = {"nao": "1", "jet_latitude": "degrees_north", "jet_speed": "m s-1", "regime": "1"}
    data = [{k: as_index(v, units[k]) for k, v in e.items()} for e in raw]

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fit = density.jet_modes(data[0]["jet_latitude"], n_resamples=10, seed=0)
    n_cat = len(fit.categories)
    for e, d in zip(raw, data, strict=True):
        d["jet_category"] = fit.categorize(d["jet_latitude"])
        e["jet_category"] = d["jet_category"].values
    modes = fit.mode_statistic()
    print(
        f"jet_modes fit on the first ensemble: modes {np.round(fit.modes.values, 2).tolist()} "
        f"degrees_north, bounds {np.round(fit.bounds, 2).tolist()}, bandwidth "
        f"{fit.bandwidth:.3f} degrees, {n_cat} categories"
    )

    # (label, series, statistic for the engine, recompute function)
    cases = [
        ("mean", "nao", "mean", np.mean),
        ("mean", "jet_latitude", "mean", np.mean),
        ("mean", "jet_speed", "mean", np.mean),
        ("std", "nao", "std", functools.partial(np.std, ddof=1)),
        ("std", "jet_latitude", "std", functools.partial(np.std, ddof=1)),
        ("efolding", "nao", EfoldingTime(max_lag=MAX_LAG), efolding),
        ("efolding", "jet_latitude", EfoldingTime(max_lag=MAX_LAG), efolding),
        ("efolding", "jet_speed", EfoldingTime(max_lag=MAX_LAG), efolding),
        ("acf 0..30", "nao", Autocorrelation(lags=tuple(range(MAX_LAG + 1))), acf_curve),
        ("acf 0..30", "jet_latitude", Autocorrelation(lags=tuple(range(MAX_LAG + 1))), acf_curve),
        ("acf 0..30", "jet_speed", Autocorrelation(lags=tuple(range(MAX_LAG + 1))), acf_curve),
        ("q0.9", "nao", "q0.9", functools.partial(np.quantile, q=0.9)),
        ("occupancy", "jet_category", CategoryOccupancy(tuple(range(n_cat))), occupancy(n_cat)),
        ("occupancy", "regime", CategoryOccupancy((0, 1, 2, 3)), occupancy(4)),
        ("persistence", "regime", CategoryPersistence((0, 1, 2, 3)), persistence(4)),
        ("mode latitudes", "jet_latitude", modes, None),
        ("KS statistic", "jet_latitude", None, ks_statistic),
    ]
    seeds = Seeds()
    scale = N_RESAMPLES / args.subset
    rows = []
    for label, series, spec, func in cases:
        x, y = data[0][series], data[1][series]
        xv, yv = raw[0][series], raw[1][series]
        n = xv.shape[0]
        if spec is None:  # KS: a permutation test only
            cold, seed = best_of(args.repeat, seeds, ks_test, x, y)
            warm = best_of(args.repeat, seed, ks_test, x, y)[0]
            w = permutation_weights(n, n, N_RESAMPLES, seed)[: args.subset]
            slow, rec = recompute_permutation(xv, yv, func, w, two=True)
            check = max_difference(ks_replicates(x, y, w), rec)
            rows.append((label, series, "permutation", cold, warm, slow * scale, check))
            fast, rec_numpy = recompute_permutation(xv, yv, ks_numpy, w, two=True)
            ks_plain = (fast * scale, max_difference(rec_numpy, rec))
            continue
        for kind, call, datasets in (
            ("permutation", permutation_test, [x, y]),
            ("bootstrap", bootstrap_ci, [x]),
        ):
            cold, seed = best_of(args.repeat, seeds, call, *datasets, spec)
            warm = best_of(args.repeat, seed, call, *datasets, spec)[0]
            if kind == "permutation":
                w = permutation_weights(n, n, N_RESAMPLES, seed)[: args.subset]
            else:
                w = bootstrap_weights(n, N_RESAMPLES, seed)[: args.subset]
            # mode latitudes: a kernel density on the grid the engine prepares for these data
            f = KernelModes(modes.prepare(*datasets)) if func is None else func
            if kind == "permutation":
                slow, rec = recompute_permutation(xv, yv, f, w)
            else:
                slow, rec = recompute_bootstrap(xv, f, w)
            check = max_difference(engine_replicates(spec, datasets, w, kind), rec)
            rows.append((label, series, kind, cold, warm, slow * scale, check))

    # Every statistic in a row with one seed, as the suite calls them (weight cache warm).
    start = time.perf_counter()
    for _label, series, spec, _ in cases:
        x, y = data[0][series], data[1][series]
        if spec is None:
            ks_test(x, y, n_resamples=N_RESAMPLES, seed=7)
            continue
        permutation_test(x, y, spec, n_resamples=N_RESAMPLES, seed=7)
        bootstrap_ci(x, spec, n_resamples=N_RESAMPLES, seed=7)
    shared = time.perf_counter() - start

    print(
        f"\n{N_RESAMPLES} resamples, two ensembles of {N_MEMBERS} members x {N_DAYS} days "
        f"(1000 blocks each).\nEngine, end to end, best of {args.repeat} call(s): 'cold' with a "
        f"new seed per call (pays for its weight matrix), 'warm' with the seed of the previous "
        f"call (matrix from the cache).\nRecompute: timed on the first {args.subset} resamples of "
        f"the engine's own weight matrix and extrapolated linearly (x{scale:g}).\n'max diff': "
        f"largest |engine replicate - recompute| on those resamples (KS: ks_test's binned D, "
        f"CDFs compared at {KS_BINS + 1} pooled quantiles, vs exact ks_2samp)."
    )
    head = (
        f"{'statistic':<15}{'series':<13}{'engine cold':>12}{'warm':>8}{'recompute':>11}"
        f"{'ratio cold':>11}{'warm':>7}{'max diff':>10}"
    )
    for kind in ("permutation", "bootstrap"):
        print(f"\n{kind} ({'permutation_test' if kind[0] == 'p' else 'bootstrap_ci'})")
        print(head)
        print("-" * len(head))
        chosen = [r for r in rows if r[2] == kind]
        for label, series, _, cold, warm, slow, check in chosen:
            print(
                f"{label:<15}{series:<13}{cold:>11.3f}s{warm:>7.3f}s{slow:>10.2f}s"
                f"{slow / cold:>10.0f}x{slow / warm:>6.0f}x{check:>10}"
            )
        print("-" * len(head))
        cold, warm, slow = (sum(r[i] for r in chosen) for i in (3, 4, 5))
        print(
            f"{'every statistic':<28}{cold:>11.3f}s{warm:>7.3f}s{slow:>10.1f}s"
            f"{slow / cold:>10.0f}x{slow / warm:>6.0f}x"
        )

    def total(selected) -> str:
        cold, warm, slow = (sum(r[i] for r in selected) for i in (3, 4, 5))
        return (
            f"engine {cold:.2f}s cold / {warm:.2f}s warm, recompute {slow:.1f}s: "
            f"{slow / cold:.0f}x cold, {slow / warm:.0f}x warm"
        )

    print(f"\nevery statistic, permutation and bootstrap: {total(rows)} (target >= 50x)")
    print(f"the same without the KS test: {total([r for r in rows if r[0] != 'KS statistic'])}")
    low_cold = min((r[5] / r[3], f"{r[0]}, {r[1]}, {r[2]}") for r in rows)
    low_warm = min((r[5] / r[4], f"{r[0]}, {r[1]}, {r[2]}") for r in rows)
    print(f"smallest single ratio: {low_cold[0]:.1f}x cold ({low_cold[1]}), ", end="")
    print(f"{low_warm[0]:.1f}x warm ({low_warm[1]})")
    slow_all = sum(r[5] for r in rows)
    print(
        f"shared seed (all statistics in a row with one seed, as the suite calls them): engine "
        f"{shared:.2f}s: {slow_all / shared:.0f}x"
    )
    ks_slow, ks_check = ks_plain
    others = sum(r[5] for r in rows if r[0] != "KS statistic")
    ks_2samp = sum(r[5] for r in rows if r[0] == "KS statistic")
    print(
        f"KS recomputed with D by np.sort + searchsorted instead of ks_2samp (no p-value; max diff "
        f"to ks_2samp {ks_check}): {ks_slow:.1f}s instead of {ks_2samp:.1f}s; every "
        f"statistic then {(others + ks_slow) / sum(r[3] for r in rows):.0f}x cold, "
        f"{(others + ks_slow) / sum(r[4] for r in rows):.0f}x warm"
    )


# --------------------------------------------------------------------------------- part 2

ENTRY_POINTS = (
    (resampling, "bootstrap_ci"),
    (resampling, "permutation_test"),
    (resampling, "reference_percentile"),
    (resampling, "ks_test"),
    (resampling, "map_difference_test"),
    (resampling, "map_ks_test"),
    (timeseries, "ccf_interval"),
    (diagnostics, "ccf_interval"),  # imported by name there
    (density, "jet_modes"),
)
# Timed on its own (already inside the jet_modes total): the multimodality test.
INNER = ((density, "_mode_tests"),)


Span = tuple[int, float, float]  # thread id, start, end (perf_counter seconds)


def merged(spans: list[tuple[float, float]]) -> list[tuple[float, float]]:
    """Union of intervals, as sorted disjoint intervals."""
    out: list[tuple[float, float]] = []
    for start, end in sorted(spans):
        if out and start <= out[-1][1]:
            out[-1] = (out[-1][0], max(out[-1][1], end))
        else:
            out.append((start, end))
    return out


def length(spans: list[tuple[float, float]]) -> float:
    return sum(end - start for start, end in merged(spans))


def without(outer: list[Span], holes: list[Span]) -> list[tuple[float, float]]:
    """The parts of each outer span not covered by a hole of the same thread."""
    out = []
    for thread, start, end in outer:
        cuts = merged([(a, b) for t, a, b in holes if t == thread and a < end and b > start])
        for a, b in cuts:
            if a > start:
                out.append((start, a))
            start = max(start, b)
        if start < end:
            out.append((start, end))
    return out


class EngineTimer:
    """Time inside the engine's entry points, safe with calls running in threads (the suite
    runs per-dataset work side by side): nesting is tracked per thread and only outermost
    calls count; every call's interval is kept, so the wall time during which any thread is
    in the engine (the union of the intervals) can be told from the summed thread time."""

    def __init__(self) -> None:
        self.local = threading.local()
        self.lock = threading.Lock()
        self.calls: list[tuple[str, Span, float]] = []  # name, span, thread CPU seconds
        self.inner: list[tuple[str, Span, float]] = []
        self.undo: list[tuple[object, str, object]] = []

    def _patch(self, module, name: str, outermost: bool) -> None:
        original = getattr(module, name, None)
        if original is None:
            return
        timer = self

        @functools.wraps(original)
        def timed(*args, **kwargs):
            depth = getattr(timer.local, "depth", 0)
            if outermost and depth:  # nested in another entry point: counted there
                return original(*args, **kwargs)
            timer.local.depth = depth + outermost
            start, cpu = time.perf_counter(), time.thread_time()
            try:
                return original(*args, **kwargs)
            finally:
                span = (threading.get_ident(), start, time.perf_counter())
                timer.local.depth = depth
                with timer.lock:
                    record = timer.calls if outermost else timer.inner
                    record.append((name, span, time.thread_time() - cpu))

        setattr(module, name, timed)
        self.undo.append((module, name, original))

    def __enter__(self) -> EngineTimer:
        for module, name in ENTRY_POINTS:
            self._patch(module, name, outermost=True)
        for module, name in INNER:
            self._patch(module, name, outermost=False)
        return self

    def __exit__(self, *exc) -> None:
        for module, name, original in reversed(self.undo):
            setattr(module, name, original)


def _demo_suite(args, out: Path) -> str:
    """`westerlies.compare` on the demo scenario in memory, then `Comparison.write`."""
    from westerlies import synthetic
    from westerlies.comparison import compare

    scenario = synthetic.scenario(0, members=args.members, winters=30)
    datasets = {
        "Gale reference": scenario["reference"],
        "ctl-slab": scenario["control"],
        "ohtx-plus": scenario["perturbed"],
    }
    start = time.perf_counter()
    result = compare(datasets, reference="Gale reference", baseline="ctl-slab", n_resamples=1000)
    compared = time.perf_counter() - start
    result.write(out)
    return f"compare {compared:.1f}s + write {time.perf_counter() - start - compared:.1f}s"


def _config_suite(args, out: Path) -> str:
    """`westerlies run CONFIG` in this process (the configuration's data read from files)."""
    from westerlies import cli

    if cli.main(["run", str(args.suite_config), "--out", str(out), "--quiet"]) != 0:
        raise SystemExit("bench_resampling: the suite run failed")
    return f"westerlies run {args.suite_config.name}"


def part_two(args) -> None:
    if args.suite_config:
        what = (
            f"`westerlies run {args.suite_config}` (data read from its files, dask's threaded "
            "scheduler)"
        )
        suite = _config_suite
    else:
        what = (
            f"westerlies.compare on the demo scenario ({args.members} members per ensemble x "
            "150 days, 30 reference winters, in memory), 1000 resamples, then Comparison.write"
        )
        suite = _demo_suite
    print(f"\nSuite share: {what}.")
    with EngineTimer() as timer, tempfile.TemporaryDirectory() as tmp:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            cpu = time.process_time()
            start = time.perf_counter()
            parts = suite(args, Path(tmp) / "report")
            total = time.perf_counter() - start
            cpu = time.process_time() - cpu
    print(f"{'entry point':<24}{'calls':>6}{'wall':>9}{'thread CPU':>12}")
    names = {name for name, _, _ in timer.calls}
    by_name = {n: [c for c in timer.calls if c[0] == n] for n in names}
    for name in sorted(names, key=lambda n: -sum(c[1][2] - c[1][1] for c in by_name[n])):
        calls = by_name[name]
        wall = sum(span[2] - span[1] for _, span, _ in calls)
        print(f"{name:<24}{len(calls):>6}{wall:>8.2f}s{sum(c[2] for c in calls):>11.2f}s")
    for name in {name for name, _, _ in timer.inner}:
        calls = [c for c in timer.inner if c[0] == name]
        wall = sum(span[2] - span[1] for _, span, _ in calls)
        label = f"({name}, inside)"
        print(f"{label:<24}{len(calls):>6}{wall:>8.2f}s{sum(c[2] for c in calls):>11.2f}s")
    spans = [span for _, span, _ in timer.calls]
    summed = sum(end - start for _, start, end in spans)
    engine_wall = length([(start, end) for _, start, end in spans])
    engine_cpu = sum(c[2] for c in timer.calls)
    print(f"suite: {parts} = {total:.1f}s wall, {cpu:.1f}s process CPU")
    print(
        f"engine CPU: {engine_cpu:.2f}s of the engine's threads = {100 * engine_cpu / cpu:.1f}% "
        "of the suite's process CPU (target < 5%; the work the engine adds, whatever runs "
        "beside it)"
    )
    print(
        f"engine wall: {engine_wall:.2f}s with at least one thread inside it = "
        f"{100 * engine_wall / total:.1f}% of the suite's wall time (an upper bound: a call "
        f"waiting for a core beside other threads counts; summed over threads {summed:.2f}s)"
    )
    inner = timer.inner
    if inner:
        rest = length(without(spans, [span for _, span, _ in inner]))
        rest_cpu = engine_cpu - sum(c[2] for c in inner)
        print(
            f"without jet_modes' multimodality test (a smoothed bootstrap of days, outside the "
            f"weight-matrix engine): CPU {rest_cpu:.2f}s = {100 * rest_cpu / cpu:.1f}%, wall "
            f"{rest:.2f}s = {100 * rest / total:.1f}%"
        )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--subset", type=int, default=100, help="recompute resamples timed")
    parser.add_argument("--repeat", type=int, default=2, help="engine calls per case (best)")
    parser.add_argument("--members", type=int, default=20, help="suite: members per ensemble")
    parser.add_argument(
        "--suite-share",
        action=argparse.BooleanOptionalAction,
        default=True,
        help="part 2: the engine's share of a whole suite run",
    )
    parser.add_argument("--skip-engine", action="store_true", help="part 2 only")
    parser.add_argument(
        "--suite-config",
        type=Path,
        default=None,
        help="part 2 on `westerlies run CONFIG` instead of the demo (e.g. the bench.toml that "
        "benchmarks/run.py --keep leaves in WORKDIR/runs)",
    )
    args = parser.parse_args()
    if not args.skip_engine:
        part_one(args)
    if args.suite_share:
        part_two(args)
    print(f"(process CPU time of this run: {time.process_time():.1f}s; times above are wall)")


if __name__ == "__main__":
    main()
