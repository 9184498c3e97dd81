"""Benchmark of the EOF solver: exact path (SVD through eofs) against the fast path.

Pooled daily Z500 anomalies of 1000 members x 90 days on a 2.5-degree NAO domain (20-80N,
90W-40E: 25 x 53 = 1325 points); a synthetic random smooth field (40 smooth modes with decaying
variances, red in time, plus white noise), in m. Each case runs in its own process (fresh
memory): wall time of `westerlies.eof.fit`, peak traced memory (tracemalloc, numpy allocations)
and the process's peak resident size. The parent compares the leading ten patterns and variance
fractions and prints one JSON document. Run by hand (not part of the tests):

    .venv/bin/python benchmarks/bench_eof.py [--members 1000] [--days 90] [--threads 1]

Cases: ``exact`` (numpy input, eofs SVD), ``fast`` (numpy input, one-pass covariance and eigh),
``fast_dask`` (the same field generated lazily by dask in chunks of 50 members: never held in
memory whole; its wall time includes generating the field twice, since the fast path reads the
data once for the covariance and once for the PCs).
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

N_MODES = 10
LAT = np.arange(20.0, 80.0 + 1e-9, 2.5)
LON = np.arange(-90.0, 40.0 + 1e-9, 2.5)


def _basis(n_basis: int = 40) -> np.ndarray:
    """Smooth random spatial patterns (Gaussian bumps of 1000-2500 km), (n_basis, lat*lon)."""
    rng = np.random.default_rng(12345)
    lat, lon = np.meshgrid(np.deg2rad(LAT), np.deg2rad(LON), indexing="ij")
    out = np.empty((n_basis, lat.size))
    for k in range(n_basis):
        c_lat, c_lon = np.deg2rad(rng.uniform(20, 80)), np.deg2rad(rng.uniform(-90, 40))
        cos_d = np.sin(lat) * np.sin(c_lat) + np.cos(lat) * np.cos(c_lat) * np.cos(lon - c_lon)
        dist = 6371.0 * np.arccos(np.clip(cos_d, -1, 1))
        out[k] = np.exp(-0.5 * (dist / rng.uniform(1000, 2500)) ** 2).ravel()
    return out


def _members(first: int, count: int, days: int, basis: np.ndarray) -> np.ndarray:
    """Anomalies (count, days, lat, lon) in m; member m always draws the same numbers."""
    out = np.empty((count, days, LAT.size * LON.size))
    amplitude = 80.0 / np.arange(1, basis.shape[0] + 1) ** 0.7
    for i in range(count):
        rng = np.random.default_rng([2024, first + i])
        shocks = rng.standard_normal((days, basis.shape[0]))
        series = np.empty_like(shocks)
        series[0] = shocks[0]
        for t in range(1, days):  # AR(1), lag-1 0.8, unit variance
            series[t] = 0.8 * series[t - 1] + 0.6 * shocks[t]
        out[i] = (series * amplitude) @ basis + 3.0 * rng.standard_normal((days, basis.shape[1]))
    return out.reshape(count, days, LAT.size, LON.size)


def _field(members: int, days: int, lazy: bool):
    import dask.array as da
    import xarray as xr

    basis = _basis()
    if lazy:
        chunk = 50
        data = da.map_blocks(
            lambda block, block_info=None: _members(
                block_info[None]["array-location"][0][0], block.shape[0], days, basis
            ),
            da.empty((members, days, LAT.size, LON.size), chunks=(chunk, days, LAT.size, LON.size)),
            dtype=float,
        )
    else:
        data = _members(0, members, days, basis)
    time_axis = np.arange(days).astype("datetime64[D]")
    return xr.DataArray(
        data,
        dims=("member", "time", "lat", "lon"),
        attrs={"units": "m"},
        coords={"member": np.arange(members), "time": time_axis, "lat": LAT, "lon": LON},
    )


def run_case(case: str, members: int, days: int, out: Path) -> dict:
    import resource
    import tracemalloc

    from westerlies import eof

    field = _field(members, days, lazy=case == "fast_dask")
    tracemalloc.start()
    start = time.perf_counter()
    result = eof.fit(field, n_modes=N_MODES, method="exact" if case == "exact" else "fast")
    wall = time.perf_counter() - start
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    np.savez(out, patterns=result.patterns.values, fractions=result.variance_fraction.values)
    return {
        "case": case,
        "wall_seconds": round(wall, 3),
        "peak_traced_MB": round(peak / 2**20, 1),
        "max_rss_MB": round(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024, 1),
        "solver": (
            "svd (eofs)"
            if "eofs" in result.method
            else "gram + eigh"
            if "Gram" in result.method
            else "covariance + eigh"
        ),
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--members", type=int, default=1000)
    parser.add_argument("--days", type=int, default=90)
    parser.add_argument(
        "--threads",
        type=int,
        default=1,
        help="BLAS threads for every case (1: steady timings on a shared machine)",
    )
    parser.add_argument("--cases", default="exact,fast,fast_dask")
    parser.add_argument("--case", help=argparse.SUPPRESS)
    parser.add_argument("--out", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.case:
        print(json.dumps(run_case(args.case, args.members, args.days, Path(args.out))))
        return

    env = {
        **os.environ,
        **{
            k: str(args.threads)
            for k in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")
        },
    }
    results, arrays = {}, {}
    with tempfile.TemporaryDirectory() as tmp:
        for case in args.cases.split(","):
            out = Path(tmp) / f"{case}.npz"
            proc = subprocess.run(
                [
                    sys.executable,
                    __file__,
                    "--case",
                    case,
                    "--out",
                    str(out),
                    "--members",
                    str(args.members),
                    "--days",
                    str(args.days),
                ],
                env=env,
                capture_output=True,
                text=True,
                check=True,
            )
            results[case] = json.loads(proc.stdout.strip().splitlines()[-1])
            with np.load(out) as saved:
                arrays[case] = {k: saved[k] for k in saved.files}

    report = {
        "field": {
            "members": args.members,
            "days": args.days,
            "lat": int(LAT.size),
            "lon": int(LON.size),
            "samples": args.members * args.days,
            "points": int(LAT.size * LON.size),
            "blas_threads": args.threads,
        },
        "cases": results,
    }
    if "exact" in arrays:
        ref = arrays["exact"]
        for case, got in arrays.items():
            if case == "exact":
                continue
            a = ref["patterns"].reshape(N_MODES, -1)
            b = got["patterns"].reshape(N_MODES, -1)
            correlation = [float(np.corrcoef(a[k], b[k])[0, 1]) for k in range(N_MODES)]
            results[case]["speedup_vs_exact"] = round(
                results["exact"]["wall_seconds"] / results[case]["wall_seconds"], 1
            )
            results[case]["min_pattern_correlation_vs_exact"] = min(correlation)
            results[case]["max_variance_fraction_difference"] = float(
                np.abs(ref["fractions"] - got["fractions"]).max()
            )
    print(json.dumps(report, indent=2))


if __name__ == "__main__":
    main()
