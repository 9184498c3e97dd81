"""Benchmark: resampling by weight matrices against recomputing from the daily data.

Two ensembles of 1000 members x 90 days (one winter each: 1000 blocks each), a daily index
(synthetic AR(1), phi = 0.8) and daily category labels (4 categories). For each statistic:

- engine: `permutation_test` and `bootstrap_ci` with 2000 resamples, end to end (per-block
  sums once, weight matrix, one matrix product, finish);
- recompute: for each resample, gather the resampled blocks' daily values and compute the
  statistic from them with plain numpy (no xarray overhead). Timed on a subset of resamples
  (`--subset`, default 100) and extrapolated linearly to 2000, as each resample costs the same.
- xarray recompute (bootstrap): the same, written the usual labelled way (select the resampled
  members of the DataArray, compute the statistic with xarray or `westerlies.acf`); timed on
  20 resamples and extrapolated.

Run by hand: .venv/bin/python benchmarks/bench_resampling.py [--subset 100]
Target (issue 6): engine at least 50x faster than the recompute.
"""

from __future__ import annotations

import argparse
import time
from functools import partial

import numpy as np
import xarray as xr

from westerlies.resampling import CategoryOccupancy, bootstrap_ci, permutation_test
from westerlies.timeseries import acf

N_MEMBERS, N_DAYS, N_RESAMPLES = 1000, 90, 2000


def ar1(shape, phi, rng):
    noise = rng.normal(size=shape)
    out = np.empty(shape)
    out[..., 0] = noise[..., 0] / np.sqrt(1 - phi**2)
    for t in range(1, shape[-1]):
        out[..., t] = phi * out[..., t - 1] + noise[..., t]
    return out


def acf1(a: np.ndarray) -> float:
    """Lag-1 ACF of (blocks, days), pairs within blocks, global mean (the engine's estimator)."""
    m = a.mean()
    d = a - m
    return float((d[:, :-1] * d[:, 1:]).mean() / (d * d).mean())


RECOMPUTE = {
    "mean": lambda a: a.mean(),
    "variance": lambda a: a.var(ddof=1),
    "acf1": acf1,
    "q0.9": lambda a: np.quantile(a, 0.9),
    "occupancy": lambda a: np.bincount(a.astype(int).ravel(), minlength=4) / a.size,
}


def recompute_permutation(x: np.ndarray, y: np.ndarray, func, n: int, rng) -> float:
    pooled = np.concatenate([x, y])
    start = time.perf_counter()
    for _ in range(n):
        order = rng.permutation(pooled.shape[0])
        first, second = pooled[order[: x.shape[0]]], pooled[order[x.shape[0] :]]
        _ = np.subtract(func(second), func(first))
    return time.perf_counter() - start


def recompute_bootstrap(x: np.ndarray, func, n: int, rng) -> float:
    start = time.perf_counter()
    for _ in range(n):
        _ = func(x[rng.integers(0, x.shape[0], x.shape[0])])
    return time.perf_counter() - start


# The same statistics the way they are usually written with xarray on a resampled ensemble.
LABELLED = {
    "mean": lambda da: float(da.mean()),
    "variance": lambda da: float(da.var(ddof=1)),
    "acf1": lambda da: float(acf(da, max_lag=1)[1]),
    "q0.9": lambda da: float(da.quantile(0.9)),
    "occupancy": lambda da: (da == xr.DataArray([0, 1, 2, 3], dims="c")).mean(("member", "time")),
}


def recompute_bootstrap_labelled(da: xr.DataArray, func, n: int, rng) -> float:
    start = time.perf_counter()
    for _ in range(n):
        picks = rng.integers(0, da.sizes["member"], da.sizes["member"])
        _ = func(da.isel(member=picks).assign_coords(member=np.arange(picks.size)))
    return time.perf_counter() - start


def timed(call) -> float:
    start = time.perf_counter()
    call()
    return time.perf_counter() - start


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--subset", type=int, default=100, help="recompute resamples timed")
    args = parser.parse_args()
    rng = np.random.default_rng(0)
    index = [ar1((N_MEMBERS, N_DAYS), 0.8, rng) for _ in range(2)]
    labels = [rng.integers(0, 4, size=(N_MEMBERS, N_DAYS)).astype(float) for _ in range(2)]

    def as_da(a):
        return xr.DataArray(a, dims=("member", "time"))

    rows = []
    for name, func in RECOMPUTE.items():
        data = labels if name == "occupancy" else index
        stat = CategoryOccupancy(categories=(0, 1, 2, 3)) if name == "occupancy" else name
        x, y = as_da(data[0]), as_da(data[1])
        engine_perm = timed(partial(permutation_test, x, y, stat, n_resamples=N_RESAMPLES))
        engine_boot = timed(partial(bootstrap_ci, x, stat, n_resamples=N_RESAMPLES))
        scale = N_RESAMPLES / args.subset
        slow_perm = scale * recompute_permutation(data[0], data[1], func, args.subset, rng)
        slow_boot = scale * recompute_bootstrap(data[0], func, args.subset, rng)
        labelled = N_RESAMPLES / 20 * recompute_bootstrap_labelled(x, LABELLED[name], 20, rng)
        rows.append((name, engine_perm, slow_perm, engine_boot, slow_boot, labelled))

    # Every statistic at once, as the comparison layer calls it: the index statistics share one
    # weight matrix and one product; occupancy needs the label series, so it is a second call.
    names = ["mean", "variance", "acf1", "q0.9"]
    x, y, lx, ly = (as_da(a) for a in (*index, *labels))
    occupancy = CategoryOccupancy(categories=(0, 1, 2, 3))
    together_perm = timed(partial(permutation_test, x, y, names, n_resamples=N_RESAMPLES))
    together_perm += timed(partial(permutation_test, lx, ly, occupancy, n_resamples=N_RESAMPLES))
    together_boot = timed(partial(bootstrap_ci, x, names, n_resamples=N_RESAMPLES))
    together_boot += timed(partial(bootstrap_ci, lx, occupancy, n_resamples=N_RESAMPLES))

    print(
        f"{N_RESAMPLES} resamples, two ensembles of {N_MEMBERS} members x {N_DAYS} days; "
        f"recompute timed on {args.subset} resamples and scaled x{N_RESAMPLES / args.subset:g}"
    )
    print(
        f"{'statistic':<10} {'perm engine':>12} {'perm recompute':>15} {'speed-up':>9} "
        f"{'boot engine':>12} {'boot recompute':>15} {'speed-up':>9} "
        f"{'xarray recompute':>17} {'speed-up':>9}"
    )
    for name, ep, sp, eb, sb, lb in rows:
        print(
            f"{name:<10} {ep:>11.3f}s {sp:>14.2f}s {sp / ep:>8.0f}x "
            f"{eb:>11.3f}s {sb:>14.2f}s {sb / eb:>8.0f}x {lb:>16.1f}s {lb / eb:>8.0f}x"
        )
    slow_perm, slow_boot = sum(r[2] for r in rows), sum(r[4] for r in rows)
    engine_perm, engine_boot = sum(r[1] for r in rows), sum(r[3] for r in rows)
    print(
        f"all, one call per statistic: permutation {engine_perm:.2f}s vs {slow_perm:.1f}s "
        f"= {slow_perm / engine_perm:.0f}x; bootstrap {engine_boot:.2f}s vs {slow_boot:.1f}s "
        f"= {slow_boot / engine_boot:.0f}x"
    )
    print(
        f"all, statistics together: permutation {together_perm:.2f}s vs {slow_perm:.1f}s "
        f"= {slow_perm / together_perm:.0f}x; bootstrap {together_boot:.2f}s vs "
        f"{slow_boot:.1f}s = {slow_boot / together_boot:.0f}x"
    )
    print(f"(process CPU time of this run: {time.process_time():.1f}s; wall times above)")


if __name__ == "__main__":
    main()
