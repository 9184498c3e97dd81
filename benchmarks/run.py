"""The scaling benchmark: the whole suite against a plain read and against the plain way.

    .venv/bin/python benchmarks/run.py --workload small|large [--workdir DIR] [--workers N ...]
        [--repeat K] [--keep] [--json OUT] [--timeout SECONDS] [--max-rss-gb GB]

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
       so the data stay dask-backed in chunks of 50 member files, the one-file reference as
       one chunk, ``chunks = {}``): once with dask's default
       threaded scheduler, then once per ``--workers N`` (a local dask.distributed cluster of N
       single-threaded worker processes), in ``--repeat K`` rounds (1, 2, 1, 2, ...): the
       speed-up of 2 workers over 1 is the median of the rounds' pairs, each pair run back to
       back (the machine is shared, and its speed drifts between runs).
   (c) ``plain`` (small workload only; `benchmarks/plain_way.py`): every number of the
       suite's summary.json computed the way a scientist would write it: all Z500 in memory,
       calendar-day climatology (local quadratic, Gaussian weights), a full SVD through
       ``eofs.standard.Eof`` for the NAO and the regimes' PCs of every dataset, scikit-learn
       k-means on all days (the fit on the reference and each dataset's own), the jet index
       (u at 925-700 hPa, sector mean, Lanczos low-pass per block, refined maximum), jet
       densities with ``scipy.stats.gaussian_kde`` (modes, minima, Silverman's critical
       bandwidth tests by bisection), KS with ``scipy.stats.ks_2samp``, and every bootstrap,
       permutation and reference-percentile resample (NAO, jet, regimes, ACF bands, mode
       intervals and shifts, KS, the Z500 bias and response maps with FDR masks) recomputed
       from the daily values of the resampled blocks. The costliest loops (KDE bootstraps and
       permutations, critical-bandwidth bootstraps, map permutations of daily fields) run a
       timed subset of the 1000 resamples, extrapolated linearly (recorded in the result).
       It checks every summary value against the suite's (tolerances per quantity) and the
       daily indices against indices.nc.
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
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from dataclasses import asdict
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import workloads  # the sibling module, found through the path set above
from plain_way import step_plain  # step (c), the plain way

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
chunks = {{}}

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
# in benchmarks/plain_way.py (`step_plain`, imported above)


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
    # the worker runs in rounds (1, 2, 1, 2, ...): a pair run back to back shares the
    # machine's state, so the speed-up is taken pair by pair (the machine is shared)
    plan = [(n, r) for r in range(1, max(1, args.repeat) + 1) for n in suite_runs if n or r == 1]
    for n, r in plan:
        key = _suite_key(n, r)
        out = runs / ("out" if n is None else f"out-workers-{n}")
        cmd = [sys.executable, "-m", "westerlies", "run", str(config), "--out", str(out)]
        cmd += ["--overwrite", "--quiet"] + ([] if n is None else ["--workers", str(n)])
        print(f"step {key} ...", flush=True)
        steps[key] = measure(cmd, runs / f"{key}.log", args.timeout, args.max_rss_gb)
        if steps[key]["status"] != "ok":
            break  # (a failed run's output directory may hold an earlier run's timings)
        steps[key]["timings_s"] = suite_timings(out)
    if workload.name == "small" and steps["suite"]["status"] == "ok" and not args.skip_plain:
        args.suite_out = runs / "out"
        steps["plain"] = internal("plain", runs)
    report["ratios"] = ratios(steps)
    return report


def ratios(steps: dict) -> dict:
    """The ratios the targets are stated in."""

    def wall(name: str) -> float | None:  # only a step that ran to the end counts
        step = steps.get(name, {})
        return step.get("wall_s") if step.get("status") == "ok" else None

    read, suite = wall("read"), wall("suite")
    out = {"suite_over_read": _ratio(suite, read)}
    plain = steps.get("plain", {})
    if plain.get("status") == "ok":
        full = plain["wall_s"] + plain["result"]["extra_for_full_resamples_s"]
        out["plain_wall_full_resamples_s"] = round(full, 1)
        out["plain_over_suite"] = _ratio(full, suite)
    pairs, r = [], 1
    while _suite_key(1, r) in steps:
        pair = _ratio(wall(_suite_key(1, r)), wall(_suite_key(2, r)))
        if pair is not None:
            pairs.append(pair)
        r += 1
    out["speedup_2_over_1"] = statistics.median(pairs) if pairs else None
    out["speedup_2_over_1_each_round"] = pairs
    return out


def _suite_key(workers: int | None, round_: int) -> str:
    if workers is None:
        return "suite"
    return f"suite_workers_{workers}" + ("" if round_ == 1 else f"_round{round_}")


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
        (
            "2 workers vs 1 (>= 1.6, median)",
            r.get("speedup_2_over_1"),
            ">=",
            TARGETS["speedup_2_over_1"],
        ),
    ]
    if large and suite.get("status") == "ok":
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
    if len(r.get("speedup_2_over_1_each_round", [])) > 1:
        each = ", ".join(f"{x:.2f}" for x in r["speedup_2_over_1_each_round"])
        print(f"2 workers vs 1, each round: {each}")
    checks = report["steps"].get("plain", {}).get("result", {}).get("checks")
    if checks:
        print(
            f"\nplain way against the suite: {checks['values_within_tolerance']} of "
            f"{checks['summary_rows_compared']} summary values within tolerance "
            f"({len(checks['summary_rows_missing_in_plain'])} rows missing); intervals close "
            f"{checks['intervals_close']}; significance agrees {checks['significance_agreement']}"
            f"; ok {checks['ok']}"
        )
        for row in checks["values_outside_tolerance"]:
            print(f"  outside: {row}")


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
    parser.add_argument(
        "--repeat",
        type=int,
        default=1,
        metavar="K",
        help="run the --workers runs K times, in turn (the speed-up is the median of the pairs)",
    )
    parser.add_argument("--keep", action="store_true", help="keep the workdir at the end")
    parser.add_argument(
        "--skip-plain", action="store_true", help="small: leave out the plain way (c)"
    )
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
            result = step_plain(
                args.workdir,
                workload,
                args.suite_out,
                labels=LABELS,
                n_resamples=N_RESAMPLES,
                seed=SEED,
            )
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
