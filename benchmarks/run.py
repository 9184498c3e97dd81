"""The scaling benchmark: the whole suite against a plain read and against the plain way.

    .venv/bin/python benchmarks/run.py --workload small|large [--workdir DIR] [--workers N ...]
        [--keep] [--json OUT] [--timeout SECONDS] [--max-rss-gb GB]

1. Writes the workload (`benchmarks/workloads.py`, in a measured subprocess) as netCDF, one
   file per member, into the
   workdir (default: ``bench-data-WORKLOAD`` beside the repository), after checking the free
   disk space; a workdir already holding the same workload (its ``workload.json`` manifest) is
   reused, any other non-empty workdir is refused. small = 2 experiments x 100 members, large =
   2 x 1000 members; each member one winter of 150 days (360_day, November-March), Z500 and u at
   925, 850 and 700 hPa on the 2.5-degree North Atlantic grid; plus a 40-winter reference.
2. Measures, each step in a fresh subprocess (so memory is the step's own):
   (a) ``read``: the floor. Opens every file with xarray (one dask chunk per member file) and
       sums every variable.
   (b) ``suite``: ``westerlies run CONFIG --out DIR --overwrite --quiet`` with a generated TOML
       configuration (DJF, 1000 resamples, seed 0; ``chunks = { member = 50, time = 150 }``
       so the data stay dask-backed in chunks of 50 member files): once with dask's default
       threaded scheduler, then once per ``--workers N`` (a local dask.distributed cluster of N
       single-threaded worker processes).
   (c) ``plain`` (small workload only): the same numbers the way a scientist would write them:
       all Z500 loaded in memory, daily climatology by calendar day (Gaussian-smoothed), a full
       SVD through ``eofs.standard.Eof`` for the NAO and the regimes' PCs of every dataset,
       scikit-learn k-means on all days (the fit on the reference and each dataset's own),
       every bootstrap and permutation resample recomputed from the daily values of the
       resampled blocks, and the Z500 response map tested by permuting daily fields (a timed
       subset of those permutations, extrapolated). The jet index is not part of it (so the
       plain way does less work than the suite: the ratio is conservative). It checks that the
       results reproduce the suite's (NAO variance fraction, index standard deviation, regime
       occupancy, daily labels).
   Wall time is measured by the parent around the subprocess (Python start-up included). Peak
   resident memory is reported twice: the largest single process (``ru_maxrss`` from
   ``os.wait4``, which covers the step and its descendants one process at a time) and the
   process tree's total (psutil, sampled every 0.2 s: with worker processes this is the one
   that counts).
3. Prints a table with the targets of the issue beside the measurements, and writes JSON with
   ``--json``. The workdir is deleted at the end unless ``--keep``.

The page cache is warm for every step (the files were just written or read): the comparison
between steps is fair, the absolute read speed is that of memory, not of the disk.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import shutil
import signal
import subprocess
import sys
import tempfile
import threading
import time
from dataclasses import asdict
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import workloads  # the sibling module, found through the path set above

REPO = Path(__file__).resolve().parents[1]
#: members per dask chunk in the suite's configuration (one file per member, grouped)
MEMBER_CHUNK = 50
LABELS = {"reference": "Gale reference", "control": "ctl-slab", "perturbed": "ohtx-plus"}
N_RESAMPLES = 1000
SEED = 0
GIB = 1024**3

TARGETS = {
    "suite_over_read": 3.0,  # large: suite within 3x the plain read
    "peak_rss_gb": 3.0,  # large: peak resident memory under 3 GB
    "plain_over_suite": 10.0,  # small: suite at least 10x faster than the plain way
    "speedup_2_over_1": 1.6,  # 2 workers at least 1.6x faster than 1
}


# ------------------------------------------------------------------------------ measuring


def measure(cmd: list[str], log: Path, timeout: float | None, max_rss_gb: float) -> dict:
    """Run `cmd` in its own session; wall time, peak RSS (largest process and process tree).

    The whole process group is ended if it runs longer than `timeout` seconds or its tree
    holds more than `max_rss_gb` GB (``status`` then says why).
    """
    import psutil

    with log.open("w") as out:
        start = time.perf_counter()
        proc = subprocess.Popen(cmd, stdout=out, stderr=subprocess.STDOUT, start_new_session=True)
        state = {"tree_peak": 0, "stopped": None}
        done = threading.Event()

        def sample() -> None:
            try:
                root = psutil.Process(proc.pid)
            except psutil.NoSuchProcess:
                return
            while not done.is_set():
                total = 0
                try:
                    for p in [root, *root.children(recursive=True)]:
                        try:
                            total += p.memory_info().rss
                        except psutil.Error:
                            pass
                except psutil.Error:
                    break
                state["tree_peak"] = max(state["tree_peak"], total)
                over_time = timeout is not None and time.perf_counter() - start > timeout
                if total > max_rss_gb * GIB or over_time:
                    state["stopped"] = "timeout" if over_time else "memory limit"
                    try:
                        os.killpg(proc.pid, signal.SIGTERM)  # our own child's group only
                    except ProcessLookupError:
                        pass
                    break
                done.wait(0.2)

        sampler = threading.Thread(target=sample, daemon=True)
        sampler.start()
        _, status, usage = os.wait4(proc.pid, 0)
        wall = time.perf_counter() - start
        done.set()
        sampler.join()
        proc.returncode = os.waitstatus_to_exitcode(status)
    return {
        "wall_s": round(wall, 2),
        "peak_rss_process_gb": round(usage.ru_maxrss * 1024 / 1e9, 3),  # ru_maxrss is in KiB
        "peak_rss_tree_gb": round(state["tree_peak"] / 1e9, 3),
        "returncode": proc.returncode,
        "status": state["stopped"] or ("ok" if proc.returncode == 0 else "failed"),
        "log": str(log),
    }


def _internal(step: str, args: argparse.Namespace, result: Path) -> list[str]:
    """Command line running one internal step of this script in a fresh interpreter."""
    return [
        sys.executable,
        str(Path(__file__).resolve()),
        "--workload",
        args.workload,
        "--workdir",
        str(args.workdir),
        "--step",
        step,
        "--result",
        str(result),
    ] + (["--suite-out", str(args.suite_out)] if args.suite_out else [])


# ------------------------------------------------------------------------------ (a) read


def step_read(workdir: Path, workload: workloads.Workload) -> dict:
    """Open every file (one dask chunk per member file) and sum every variable."""
    import dask
    import xarray as xr

    files = workloads.paths(workdir, workload)
    sums = {}
    for name, paths in files.items():
        if len(paths) == 1:
            ds = xr.open_dataset(paths[0], chunks={})
        else:
            ds = xr.open_mfdataset(
                paths,
                combine="nested",
                concat_dim="member",
                chunks={},
                data_vars="all",
                coords="minimal",
                compat="override",
                join="override",
            )
        for var in ds.data_vars:
            sums[f"{name}/{var}"] = ds[var].sum(dtype="float64")
    values = dask.compute(sums)[0]
    return {"sums": {k: float(v) for k, v in values.items()}}


# ------------------------------------------------------------------------------ (b) suite


def write_config(workdir: Path, workload: workloads.Workload, path: Path) -> Path:
    """A TOML configuration for `westerlies run` on the workload's files (data dask-backed)."""
    files = workloads.paths(workdir, workload)
    text = f"""# generated by benchmarks/run.py for the {workload.name!r} workload
season = "DJF"
reference = "{LABELS["reference"]}"
baseline = "{LABELS["control"]}"

[datasets."{LABELS["reference"]}"]
path = "{files["reference"][0]}"
chunks = {{ time = 151 }}

[datasets."{LABELS["control"]}"]
path = "{workdir / "control" / "member_*.nc"}"
chunks = {{ member = {MEMBER_CHUNK}, time = 150 }}

[datasets."{LABELS["perturbed"]}"]
path = "{workdir / "perturbed" / "member_*.nc"}"
chunks = {{ member = {MEMBER_CHUNK}, time = 150 }}

[resampling]
n_resamples = {N_RESAMPLES}
seed = {SEED}
"""
    path.write_text(text)
    return path


def has_option(option: str) -> bool:
    """Whether `westerlies run` knows `option` (the cluster options are recent)."""
    out = subprocess.run(
        [sys.executable, "-m", "westerlies", "run", "--help"],
        capture_output=True,
        text=True,
        check=False,
    )
    return option in out.stdout


def suite_timings(out_dir: Path) -> dict:
    """Per-step timings recorded by the run in provenance.json (seconds)."""
    try:
        provenance = json.loads((out_dir / "provenance.json").read_text())
    except (OSError, ValueError):
        return {}
    return {k: round(v, 2) for k, v in provenance.get("timings_seconds", {}).items()}


# ------------------------------------------------------------------------------ (c) plain way

G0 = 9.80665  # m s-2
NAO_DOMAIN = (20.0, 80.0, -90.0, 40.0)
REGIME_DOMAIN = (20.0, 80.0, -90.0, 30.0)
N_REGIMES, N_PCS, N_INIT, MAX_LAG = 4, 14, 20, 30
MAP_PERMUTATIONS_TIMED = 100


def _plain_read(files: dict[str, list[Path]]) -> dict[str, dict]:
    """Z500 (m) of every dataset in memory, lat ascending, lon -90..40, with day numbers."""
    import numpy as np
    import xarray as xr

    out = {}
    with xr.open_dataset(files["reference"][0]) as ds:
        z = ds["hgt500"].values.astype(np.float64)
        time_index = ds.indexes["time"]
        lat, lon = ds["lat"].values, ds["lon"].values
    month = time_index.month.to_numpy()
    winter = time_index.year.to_numpy() + (month >= 11)
    start = np.array([np.datetime64(f"{y - 1}-11-01") for y in winter])
    day = (time_index.to_numpy().astype("datetime64[D]") - start).astype(int)
    out["reference"] = {"z": z, "day": day, "month": month, "block": winter - winter.min()}
    for name in workloads.EXPERIMENTS:
        fields = []
        for path in files[name]:
            with xr.open_dataset(path) as ds:
                fields.append(ds["phi"].values.astype(np.float64) / G0)
                times = ds.indexes["time"]
                raw_lat, raw_lon = ds["latitude"].values, ds["longitude"].values
        z = np.stack(fields)  # (member, time, lat, lon)
        z = z[:, :, ::-1]
        lon_180 = np.where(raw_lon >= 180.0, raw_lon - 360.0, raw_lon)
        z = z[..., np.argsort(lon_180)]
        month = np.array([t.month for t in times])
        day = np.array([((t.month - 11) % 12) * 30 + t.day - 1 for t in times])
        members, days = z.shape[:2]
        out[name] = {
            "z": z.reshape(members * days, *z.shape[2:]),
            "day": np.tile(day, members),
            "month": np.tile(month, members),
            "block": np.repeat(np.arange(members), days),
        }
        assert np.allclose(raw_lat[::-1], lat) and np.allclose(np.sort(lon_180), lon)
    return {"data": out, "lat": lat, "lon": lon}


def _plain_anomalies(d: dict) -> dict:
    """Anomalies from a Gaussian-smoothed (sd 15 days) calendar-day climatology; DJF kept."""
    import numpy as np
    from scipy.ndimage import gaussian_filter1d

    n_days = d["day"].max() + 1
    total = np.zeros((n_days, *d["z"].shape[1:]))
    np.add.at(total, d["day"], d["z"])
    counts = np.bincount(d["day"], minlength=n_days)
    clim = gaussian_filter1d(total / counts[:, None, None], 15.0, axis=0, mode="nearest")
    keep = np.isin(d["month"], (12, 1, 2))
    return {
        "anoms": (d["z"] - clim[d["day"]])[keep],
        "z": d["z"][keep],
        "block": d["block"][keep],
    }


def _box(lat, lon, domain):
    import numpy as np

    return np.flatnonzero((lat >= domain[0]) & (lat <= domain[1])), np.flatnonzero(
        (lon >= domain[2]) & (lon <= domain[3])
    )


def _blocks(values, block) -> list:
    """Daily values split into the blocks (one member in one winter)."""
    import numpy as np

    cuts = np.flatnonzero(np.diff(block)) + 1
    return np.split(values, cuts)


def _daily_statistics(nao: list, labels: list):
    """NAO std and e-folding time, regime occupancy and mean episode length, from daily data."""
    import numpy as np

    x = np.concatenate(nao)
    lab = np.concatenate(labels)
    block = np.repeat(np.arange(len(nao)), [b.size for b in nao])
    xm = x - x.mean()
    denom = np.sum(xm * xm)
    efold = np.nan
    for lag in range(1, MAX_LAG + 1):
        same = block[lag:] == block[:-lag]
        if np.sum(xm[lag:] * xm[:-lag] * same) / denom < np.exp(-1.0):
            efold = lag
            break
    new_episode = np.r_[True, (lab[1:] != lab[:-1]) | (block[1:] != block[:-1])]
    days = np.bincount(lab, minlength=N_REGIMES)
    episodes = np.bincount(lab[new_episode], minlength=N_REGIMES)
    return np.concatenate([[x.std(ddof=1), efold], days / lab.size, days / np.maximum(episodes, 1)])


def step_plain(workdir: Path, workload: workloads.Workload, suite_out: Path | None) -> dict:
    """The plain way (see the module docstring); returns its numbers, timings and checks."""
    import numpy as np
    from eofs.standard import Eof
    from scipy.optimize import linear_sum_assignment
    from sklearn.cluster import KMeans

    timings: dict[str, float] = {}
    t0 = time.perf_counter()
    loaded = _plain_read(workloads.paths(workdir, workload))
    lat, lon = loaded["lat"], loaded["lon"]
    data = {k: _plain_anomalies(v) for k, v in loaded["data"].items()}
    del loaded
    timings["read and anomalies"] = time.perf_counter() - t0

    # NAO: full SVD per dataset (own EOF 1), index = projection on the reference's EOF 1
    t0 = time.perf_counter()
    ilat, ilon = _box(lat, lon, NAO_DOMAIN)
    weights = np.sqrt(np.cos(np.deg2rad(lat[ilat])))[:, None] * np.ones(ilon.size)
    nao_vf, nao_index = {}, {}
    solvers = {}
    for name, d in data.items():
        x = d["anoms"][:, ilat][:, :, ilon]
        solvers[name] = Eof(x, weights=weights)
        nao_vf[name] = float(solvers[name].varianceFraction(neigs=1)[0])
    ref = solvers["reference"]
    eof1 = ref.eofs(neofs=1)[0]
    at = {
        p: (np.argmin(abs(lat[ilat] - p[0])), np.argmin(abs(lon[ilon] - p[1])))
        for p in ((40.0, -25.0), (65.0, -20.0))
    }  # Azores and Iceland: positive NAO, high minus low
    sign = 1.0 if eof1[at[(40.0, -25.0)]] > eof1[at[(65.0, -20.0)]] else -1.0
    ref_x = data["reference"]["anoms"][:, ilat][:, :, ilon]
    ref_mean = ref_x.mean(axis=0)
    pc_sd = ref.pcs(npcs=1)[:, 0].std(ddof=1)
    for name, d in data.items():
        x = d["anoms"][:, ilat][:, :, ilon] - ref_mean
        nao_index[name] = sign * ref.projectField(x, neofs=1)[:, 0] / pc_sd
    del solvers
    timings["NAO (eofs SVD)"] = time.perf_counter() - t0

    # regimes: k-means on the reference's 14 PCs, every dataset assigned; each one's own fit
    t0 = time.perf_counter()
    ilat, ilon = _box(lat, lon, REGIME_DOMAIN)
    weights = np.sqrt(np.cos(np.deg2rad(lat[ilat])))[:, None] * np.ones(ilon.size)
    sub = {k: d["anoms"][:, ilat][:, :, ilon] for k, d in data.items()}
    ref = Eof(sub["reference"], weights=weights)
    km = KMeans(N_REGIMES, n_init=N_INIT, random_state=SEED).fit(ref.pcs(npcs=N_PCS))
    ref_mean = sub["reference"].mean(axis=0)
    labels, own_corr = {}, {}
    coslat = np.cos(np.deg2rad(lat[ilat]))[:, None] * np.ones(ilon.size)

    def composites(x, lab):
        return np.stack([x[lab == r].mean(axis=0) for r in range(N_REGIMES)])

    def pattern_corr(a, b):
        w = coslat / coslat.sum()
        a = a - (a * w).sum()
        b = b - (b * w).sum()
        return (a * b * w).sum() / np.sqrt((a * a * w).sum() * (b * b * w).sum())

    for name, x in sub.items():
        pcs = ref.projectField(x - ref_mean, neofs=N_PCS)
        dist = ((pcs[:, None, :] - km.cluster_centers_[None]) ** 2).sum(axis=2)
        labels[name] = dist.argmin(axis=1)
    fitted_maps = composites(sub["reference"], labels["reference"])
    for name, x in sub.items():
        own = Eof(x, weights=weights)
        own_km = KMeans(N_REGIMES, n_init=N_INIT, random_state=SEED).fit(own.pcs(npcs=N_PCS))
        own_maps = composites(x, own_km.labels_)
        corr = np.array([[pattern_corr(f, o) for o in own_maps] for f in fitted_maps])
        rows, cols = linear_sum_assignment(corr, maximize=True)
        own_corr[name] = corr[rows, cols]
    timings["regimes (eofs SVD, k-means)"] = time.perf_counter() - t0

    # resampling: every replicate recomputed from the daily values of the resampled blocks
    t0 = time.perf_counter()
    rng = np.random.default_rng(SEED)
    blocks = {
        k: (_blocks(nao_index[k], d["block"]), _blocks(labels[k], d["block"]))
        for k, d in data.items()
    }
    estimates, intervals = {}, {}
    for name, (nao, lab) in blocks.items():
        estimates[name] = _daily_statistics(nao, lab)
        reps = []
        for _ in range(N_RESAMPLES):
            pick = rng.integers(0, len(nao), len(nao))
            reps.append(_daily_statistics([nao[i] for i in pick], [lab[i] for i in pick]))
        intervals[name] = np.nanpercentile(np.array(reps), [2.5, 97.5], axis=0)
    ctl, exp = blocks["control"], blocks["perturbed"]
    pooled_nao, pooled_lab = ctl[0] + exp[0], ctl[1] + exp[1]
    n_ctl = len(ctl[0])
    observed = estimates["perturbed"] - estimates["control"]
    exceed = np.zeros_like(observed)
    for _ in range(N_RESAMPLES):
        perm = rng.permutation(len(pooled_nao))
        a, b = perm[:n_ctl], perm[n_ctl:]
        diff = _daily_statistics([pooled_nao[i] for i in b], [pooled_lab[i] for i in b])
        diff -= _daily_statistics([pooled_nao[i] for i in a], [pooled_lab[i] for i in a])
        exceed += np.abs(diff) >= np.abs(observed) - 1e-12
    p_values = (exceed + 1) / (N_RESAMPLES + 1)
    timings["index resampling (bootstrap + permutation)"] = time.perf_counter() - t0

    # Z500 response map: permutations of daily fields (a timed subset, extrapolated)
    t0 = time.perf_counter()
    z = np.concatenate([data["control"]["z"], data["perturbed"]["z"]])
    block = np.concatenate([data["control"]["block"], data["perturbed"]["block"] + n_ctl])
    rows_of = _blocks(np.arange(block.size), block)
    response = data["perturbed"]["z"].mean(axis=0) - data["control"]["z"].mean(axis=0)
    count = np.zeros(response.shape)
    for _ in range(MAP_PERMUTATIONS_TIMED):
        perm = rng.permutation(len(rows_of))
        first = np.concatenate([rows_of[i] for i in perm[:n_ctl]])
        second = np.concatenate([rows_of[i] for i in perm[n_ctl:]])
        count += np.abs(z[second].mean(axis=0) - z[first].mean(axis=0)) >= np.abs(response)
    measured = time.perf_counter() - t0
    timings["Z500 response map permutations (timed subset)"] = measured
    map_extrapolated = measured * N_RESAMPLES / MAP_PERMUTATIONS_TIMED

    result = {
        "timings_s": {k: round(v, 2) for k, v in timings.items()},
        "map_permutations_timed": MAP_PERMUTATIONS_TIMED,
        "map_permutations_extrapolated_s": round(map_extrapolated, 2),
        "extra_for_full_resamples_s": round(map_extrapolated - measured, 2),
        "numbers": {
            LABELS[k]: {
                "nao_variance_fraction": nao_vf[k],
                "nao_index_std": float(estimates[k][0]),
                "nao_index_std_ci": [float(v) for v in intervals[k][:, 0]],
                "nao_efolding_days": float(estimates[k][1]),
                "regime_occupancy": [float(v) for v in estimates[k][2 : 2 + N_REGIMES]],
                "own_regime_pattern_correlation": [float(v) for v in own_corr[k]],
            }
            for k in data
        },
        "permutation_p_values": {
            "nao_index_std": float(p_values[0]),
            "regime_occupancy": [float(v) for v in p_values[2 : 2 + N_REGIMES]],
        },
    }
    if suite_out is not None:
        result["checks"] = compare_with_suite(suite_out, nao_vf, nao_index, labels, estimates)
    return result


def compare_with_suite(out: Path, nao_vf, nao_index, labels, estimates) -> dict:
    """Check the plain way's numbers against the suite's output (summary.json, indices.nc)."""
    import netCDF4
    import numpy as np
    import xarray as xr
    from scipy.optimize import linear_sum_assignment

    rows = json.loads((out / "summary.json").read_text())

    def value(diagnostic, quantity, dataset):
        for r in rows:
            if (r["diagnostic"], r["quantity"], r["dataset"], r["versus"]) == (
                diagnostic,
                quantity,
                dataset,
                None,
            ):
                return r["value"]
        return float("nan")

    suite = {}
    with netCDF4.Dataset(out / "indices.nc") as nc:
        groups = list(nc.groups)
    for g in groups:
        with xr.open_dataset(out / "indices.nc", group=g) as ds:
            suite[ds.attrs["label"]] = {
                "nao": ds["nao"].transpose("member", "time").values.ravel(),
                "regime": ds["regime"].transpose("member", "time").values.ravel(),
            }
    # name the plain clusters by the suite's daily labels on the reference (best matching)
    ref = suite[LABELS["reference"]]
    confusion = np.zeros((N_REGIMES, N_REGIMES))
    np.add.at(confusion, (labels["reference"], ref["regime"]), 1)
    rows_, cols = linear_sum_assignment(confusion, maximize=True)
    to_suite = dict(zip(rows_, cols, strict=True))
    checks = {}
    for key, label in LABELS.items():
        s = suite[label]
        ours = np.vectorize(to_suite.get)(labels[key])
        occupancy_plain = np.bincount(ours, minlength=N_REGIMES) / ours.size
        occupancy_suite = np.array(
            [value("regimes", f"{n} (fraction of days)", label) for n in _flag_names(out, label)]
        )
        vf_suite = value("NAO", "variance fraction of own EOF 1 (1)", label)
        std_suite = value("NAO", "index standard deviation (1)", label)
        checks[label] = {
            "nao_variance_fraction": [nao_vf[key], vf_suite],
            "nao_index_std": [float(estimates[key][0]), std_suite],
            "nao_index_correlation_daily": float(np.corrcoef(nao_index[key], s["nao"])[0, 1]),
            "regime_occupancy_plain": occupancy_plain.round(4).tolist(),
            "regime_occupancy_suite": occupancy_suite.round(4).tolist(),
            "regime_daily_label_agreement": float(np.mean(ours == s["regime"])),
            "ok": bool(
                abs(nao_vf[key] - vf_suite) < 0.005
                and abs(estimates[key][0] - std_suite) < 0.01 * std_suite
                and np.max(np.abs(occupancy_plain - occupancy_suite)) < 0.01
            ),
        }
    checks["tolerances"] = (
        "NAO variance fraction within 0.005, NAO index std within 1%, regime occupancy within "
        "0.01 (the plain climatology differs slightly from the suite's)"
    )
    return checks


def _flag_names(out: Path, label: str) -> list[str]:
    """Regime names in label order, from the suite's summary rows (occupancy order)."""
    rows = json.loads((out / "summary.json").read_text())
    names = [
        r["quantity"].removesuffix(" (fraction of days)")
        for r in rows
        if r["diagnostic"] == "regimes"
        and r["dataset"] == label
        and r["versus"] is None
        and r["quantity"].endswith("(fraction of days)")
    ]
    return names


# ------------------------------------------------------------------------------ orchestration


def _ratio(a: float | None, b: float | None) -> float | None:
    return round(a / b, 2) if a and b else None


def run_benchmark(args: argparse.Namespace, reuse: bool) -> dict:
    """Generate (or reuse) the workload, run every step, return the report."""
    workload = workloads.WORKLOADS[args.workload]
    workdir: Path = args.workdir
    report: dict = {
        "workload": {**asdict(workload), "variables": "z500, u (925, 850, 700 hPa)"},
        "machine": f"{os.cpu_count()} cores, {platform.platform()}, shared with other work",
        "python": sys.version.split()[0],
        "workdir": str(workdir),
        "steps": {},
    }
    steps = report["steps"]

    def internal(step: str, where: Path) -> dict:
        result = where / f"{step}.json"
        result.unlink(missing_ok=True)
        print(f"step {step} ...", flush=True)
        m = measure(
            _internal(step, args, result), where / f"{step}.log", args.timeout, args.max_rss_gb
        )
        if result.exists():
            m["result"] = json.loads(result.read_text())
        return m

    if reuse:
        print(f"reusing the {workload.name} workload in {workdir}")
    else:
        # in a subprocess too: its memory is measured, and this process stays small (a child's
        # ru_maxrss starts from its parent's high-water mark at fork)
        workloads.check_disk(workdir, workload)
        with tempfile.TemporaryDirectory() as tmp:
            steps["generate"] = internal("generate", Path(tmp))
            steps["generate"]["log"] = None
        if steps["generate"]["status"] != "ok":
            raise SystemExit(f"benchmark: generation stopped ({steps['generate']['status']})")
    report["input_bytes"] = workloads.size_on_disk(workdir, workload)
    runs = workdir / "runs"
    runs.mkdir(exist_ok=True)

    steps["read"] = internal("read", runs)
    config = write_config(workdir, workload, runs / "bench.toml")
    workers_ok = has_option("--workers")
    report["workers_option"] = workers_ok
    suite_runs = [None] + (list(args.workers) if workers_ok else [])
    if args.workers and not workers_ok:
        print("note: `westerlies run` has no --workers option yet; running without it")
    for n in suite_runs:
        key = "suite" if n is None else f"suite_workers_{n}"
        out = runs / ("out" if n is None else f"out-workers-{n}")
        cmd = [sys.executable, "-m", "westerlies", "run", str(config), "--out", str(out)]
        cmd += ["--overwrite", "--quiet"] + ([] if n is None else ["--workers", str(n)])
        print(f"step {key} ...", flush=True)
        steps[key] = measure(cmd, runs / f"{key}.log", args.timeout, args.max_rss_gb)
        steps[key]["timings_s"] = suite_timings(out)
        if steps[key]["status"] != "ok":
            break
    if workload.name == "small" and steps["suite"]["status"] == "ok":
        args.suite_out = runs / "out"
        steps["plain"] = internal("plain", runs)
    report["ratios"] = ratios(steps)
    return report


def ratios(steps: dict) -> dict:
    """The ratios the targets are stated in."""
    read = steps.get("read", {}).get("wall_s")
    suite = steps.get("suite", {}).get("wall_s")
    out = {"suite_over_read": _ratio(suite, read)}
    plain = steps.get("plain", {})
    if plain.get("status") == "ok":
        full = plain["wall_s"] + plain["result"]["extra_for_full_resamples_s"]
        out["plain_wall_full_resamples_s"] = round(full, 1)
        out["plain_over_suite"] = _ratio(full, suite)
    one = steps.get("suite_workers_1", {}).get("wall_s")
    two = steps.get("suite_workers_2", {}).get("wall_s")
    out["speedup_2_over_1"] = _ratio(one, two)
    return out


def print_table(report: dict) -> None:
    """The measurements, with the issue's targets beside them."""
    print(f"\nworkload {report['workload']['name']}: {report['input_bytes'] / 1e9:.2f} GB input")
    print(f"machine: {report['machine']}")
    print(f"{'step':<22}{'status':>9}{'wall s':>10}{'RSS max proc GB':>17}{'RSS tree GB':>13}")
    for name, m in report["steps"].items():
        print(
            f"{name:<22}{m['status']:>9}{m['wall_s']:>10.1f}"
            f"{m['peak_rss_process_gb']:>17.2f}{m['peak_rss_tree_gb']:>13.2f}"
        )
        if m.get("timings_s"):
            print("    " + ", ".join(f"{k} {v:.1f} s" for k, v in m["timings_s"].items()))
    r = report["ratios"]
    large = report["workload"]["name"] == "large"
    suite = report["steps"].get("suite", {})
    rows = [
        ("suite / read (large: <= 3)", r.get("suite_over_read"), "<=", TARGETS["suite_over_read"]),
        (
            "plain / suite (small: >= 10)",
            r.get("plain_over_suite"),
            ">=",
            TARGETS["plain_over_suite"],
        ),
        ("2 workers vs 1 (>= 1.6)", r.get("speedup_2_over_1"), ">=", TARGETS["speedup_2_over_1"]),
    ]
    if large and suite:
        peak = max(suite.get("peak_rss_tree_gb", 0), suite.get("peak_rss_process_gb", 0))
        rows.append(("suite peak RSS GB (large: < 3)", peak, "<", TARGETS["peak_rss_gb"]))
    print(f"\n{'target':<34}{'measured':>10}{'target':>10}  met")
    for name, got, op, want in rows:
        met = (
            "n/a"
            if got is None
            else str({"<=": got <= want, ">=": got >= want, "<": got < want}[op])
        )
        print(f"{name:<34}{'-' if got is None else got:>10}{op + str(want):>10}  {met}")
    checks = report["steps"].get("plain", {}).get("result", {}).get("checks")
    if checks:
        print("\nplain way against the suite (plain, suite):")
        for label, c in checks.items():
            if isinstance(c, dict):
                print(
                    f"  {label}: NAO variance fraction {c['nao_variance_fraction'][0]:.4f} "
                    f"{c['nao_variance_fraction'][1]:.4f}; index std "
                    f"{c['nao_index_std'][0]:.4f} {c['nao_index_std'][1]:.4f}; daily index "
                    f"correlation {c['nao_index_correlation_daily']:.5f}; occupancy "
                    f"{c['regime_occupancy_plain']} {c['regime_occupancy_suite']}; daily labels "
                    f"agree {c['regime_daily_label_agreement']:.4f}; ok {c['ok']}"
                )


def cleanup(workdir: Path, workload: workloads.Workload) -> None:
    """Remove what the benchmark wrote (workload files, manifest, runs/), then the workdir."""
    for files in workloads.paths(workdir, workload).values():
        for path in files:
            path.unlink(missing_ok=True)
    for sub in workloads.EXPERIMENTS:
        if (workdir / sub).is_dir() and not any((workdir / sub).iterdir()):
            (workdir / sub).rmdir()
    shutil.rmtree(workdir / "runs", ignore_errors=True)
    (workdir / workloads.MANIFEST).unlink(missing_ok=True)
    if workdir.is_dir() and not any(workdir.iterdir()):
        workdir.rmdir()


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--workload", choices=sorted(workloads.WORKLOADS), required=True)
    parser.add_argument("--workdir", type=Path, default=None, help="where the data are written")
    parser.add_argument(
        "--workers",
        type=int,
        nargs="+",
        default=[],
        metavar="N",
        help="also run the suite with --workers N (e.g. --workers 1 2 for the speed-up)",
    )
    parser.add_argument("--keep", action="store_true", help="keep the workdir at the end")
    parser.add_argument("--json", type=Path, default=None, help="write the report as JSON here")
    parser.add_argument("--timeout", type=float, default=None, help="seconds per step, then stop")
    parser.add_argument(
        "--max-rss-gb", type=float, default=16.0, help="stop a step whose processes exceed this"
    )
    parser.add_argument("--step", choices=("generate", "read", "plain"), help=argparse.SUPPRESS)
    parser.add_argument("--result", type=Path, help=argparse.SUPPRESS)
    parser.add_argument("--suite-out", type=Path, default=None, help=argparse.SUPPRESS)
    return parser


def main() -> int:
    args = _parser().parse_args()
    workload = workloads.WORKLOADS[args.workload]
    if args.workdir is None:
        args.workdir = REPO.parent / f"bench-data-{workload.name}"
    args.workdir = args.workdir.resolve()
    if args.step:  # internal: one measured step, in its own interpreter
        if args.step == "generate":
            workloads.generate(args.workdir, workload)
            result = {"bytes": workloads.size_on_disk(args.workdir, workload)}
        elif args.step == "read":
            result = step_read(args.workdir, workload)
        else:
            result = step_plain(args.workdir, workload, args.suite_out)
        args.result.write_text(json.dumps(result, indent=1))
        return 0
    reuse = workloads.check_workdir(args.workdir, workload)  # refuses before touching anything
    try:
        report = run_benchmark(args, reuse)
    finally:
        if not args.keep:
            cleanup(args.workdir, workload)
    print_table(report)
    if args.json:
        args.json.write_text(json.dumps(report, indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main())
