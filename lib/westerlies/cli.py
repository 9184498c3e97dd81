"""The `westerlies` command line.

    westerlies check FILE... [--var NAME=VAR] [--member-dim DIM] [--daily-mean]
    westerlies demo-data OUT [--members N] [--winters N] [--seed S]
    westerlies demo [--out DIR] [--members N] [--winters N] [--overwrite] [--quiet]
    westerlies run CONFIG.toml [--out DIR] [--overwrite] [--quiet] [--workers N | --scheduler ADDR]

Exit status: 0 success, 1 the input is not usable or the job failed on bad input, 2 usage errors.
"""

from __future__ import annotations

import argparse
import contextlib
import os
import sys
import tempfile
from collections.abc import Sequence
from pathlib import Path

from .errors import ConfigError, InputError


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="westerlies",
        description="North Atlantic winter circulation diagnostics for ensemble experiments.",
    )
    sub = parser.add_subparsers(dest="command", required=True)

    check = sub.add_parser("check", help="report what an input holds and every problem")
    check.add_argument("files", nargs="+", help="netCDF files (several files: one member each)")
    check.add_argument(
        "--var",
        action="append",
        default=[],
        metavar="NAME=VAR",
        help="canonical name = name in the file, e.g. --var z500=zg",
    )
    check.add_argument("--member-dim", help="name of the member dimension")
    check.add_argument("--daily-mean", action="store_true", help="average sub-daily data to days")

    data = sub.add_parser("demo-data", help="write the demo scenario as netCDF files")
    data.add_argument("out", type=Path, help="new directory to write into")
    data.add_argument("--members", type=int, default=None, help="members per ensemble")
    data.add_argument("--winters", type=int, default=None, help="winters in the reference")
    data.add_argument("--seed", type=int, default=0)

    demo = sub.add_parser("demo", help="the whole job on the built-in demo scenario")
    demo.add_argument(
        "--out",
        type=Path,
        default=Path("westerlies-demo"),
        help="output directory (default: westerlies-demo)",
    )
    demo.add_argument("--members", type=int, default=None, help="members per ensemble")
    demo.add_argument("--winters", type=int, default=None, help="winters in the reference")
    demo.add_argument("--overwrite", action="store_true", help="replace an existing output")
    demo.add_argument("--quiet", action="store_true", help="no progress messages")

    run = sub.add_parser("run", help="the whole job on the datasets of a configuration file")
    run.add_argument("config", type=Path, help="TOML configuration file (see the README)")
    run.add_argument("--out", type=Path, default=None, help="output directory")
    run.add_argument("--overwrite", action="store_true", help="replace an existing output")
    run.add_argument("--quiet", action="store_true", help="no progress messages")
    cluster = run.add_mutually_exclusive_group()
    cluster.add_argument(
        "--workers",
        type=int,
        default=None,
        help="start a local dask.distributed cluster with N worker processes",
    )
    cluster.add_argument(
        "--scheduler",
        default=None,
        metavar="ADDRESS",
        help="use a running dask.distributed scheduler, e.g. tcp://host:8786",
    )
    return parser


def _variables(pairs: Sequence[str]) -> dict[str, str]:
    out = {}
    for pair in pairs:
        name, sep, var = pair.partition("=")
        if not sep or not name or not var:
            raise ConfigError.make(
                "--var",
                repr(pair),
                "NAME=VAR, e.g. z500=zg",
                "write the canonical name, '=', and the name in the file",
            )
        out[name.strip()] = var.strip()
    return out


def _check(args) -> int:
    from .check import check_input

    source = args.files[0] if len(args.files) == 1 else list(args.files)
    report = check_input(
        source,
        variables=_variables(args.var) or None,
        member_dim=args.member_dim,
        daily="mean" if args.daily_mean else None,
    )
    print(report)
    return 0 if report.ok else 1


def _refuse_existing(out: Path, overwrite: bool, allow_empty: bool = False) -> None:
    empty = out.is_dir() and not any(out.iterdir())
    if out.exists() and not overwrite and not (allow_empty and empty):
        raise ConfigError.make(
            f"output {str(out)!r}",
            "an existing, non-empty path",
            "a new or empty directory",
            "choose another directory or pass --overwrite",
        )


def _demo_data(args) -> int:
    from . import synthetic

    _refuse_existing(args.out, overwrite=False, allow_empty=True)
    sizes = {k: v for k, v in (("members", args.members), ("winters", args.winters)) if v}
    written = synthetic.write_scenario(args.out, seed=args.seed, **sizes)
    for name, paths in written.items():
        print(f"{name}: {len(paths)} file(s) under {args.out}")
    return 0


def _progress(quiet: bool):
    """A progress printer for the long steps, or None when quiet."""
    if quiet:
        return None
    return lambda text: print(text, flush=True)


def _dask_progress(enabled: bool):
    """dask's progress bar around the work when asked (it prints only for dask-backed data)."""
    import contextlib

    if not enabled:
        return contextlib.nullcontext()
    from dask.diagnostics import ProgressBar

    return ProgressBar(minimum=2.0)


def _worker_settings() -> None:
    """Our own cluster's workers: the diagnostics' expected InputWarnings stay quiet there as
    they do in the threaded run. (xarray's file cache stays at its default: keeping thousands
    of member files open costs each file's HDF5 chunk cache, measured 3.6 GB against 2 GB for
    2000 files.)"""
    import warnings

    from .errors import InputWarning

    warnings.simplefilter("ignore", InputWarning)


@contextlib.contextmanager
def _adaptive_malloc():
    """Worker processes started inside this block go without dask's MALLOC_TRIM_THRESHOLD_.

    Setting that variable switches off glibc's adaptive mmap threshold, so every array over
    128 kB is mapped fresh and returned on release: measured on a chunk of 50 member files,
    6-7x the page faults and about twice the time of the same task in the client. Without it
    freed arrays are reused, as in a threaded run. dask's nannies also leave the variable in
    this process's environment for later workers, so it is taken out for the block, then
    put back as it was.
    """
    import dask

    name = "MALLOC_TRIM_THRESHOLD_"
    before = os.environ.pop(name, None)
    try:
        with dask.config.set({f"distributed.nanny.pre-spawn-environ.{name}": None}):
            yield
    finally:
        if before is not None:
            os.environ[name] = before


def _cluster(workers: int | None, scheduler: str | None, say):
    """A dask.distributed client for the run (closed at the end), or nothing."""
    import contextlib

    if workers is None and scheduler is None:
        return contextlib.nullcontext()
    from distributed import Client, LocalCluster

    stack = contextlib.ExitStack()  # closes the client, then our own cluster
    if scheduler is not None:
        client = Client(scheduler)
    else:
        if workers < 1:
            raise ConfigError.make("--workers", str(workers), "at least 1", "pass --workers 2")
        # one thread per worker process: the numerical kernels are already vectorized
        with _adaptive_malloc():
            cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True)
        stack.callback(cluster.close)
        client = Client(cluster)
        client.run(_worker_settings)
    stack.callback(client.close)
    if say:
        say(f"dask cluster: {client.dashboard_link}")
    return stack


def _compare_and_write(
    config: dict,
    out: Path,
    overwrite: bool,
    quiet: bool,
    workers: int | None = None,
    scheduler: str | None = None,
) -> int:
    from .comparison import compare

    _refuse_existing(out, overwrite)  # before any work: a refused run touches nothing
    options = dict(config["options"])
    resampling = options.pop("resampling")
    say = _progress(quiet)
    distributed = workers is not None or scheduler is not None
    with _cluster(workers, scheduler, say), _dask_progress(not quiet and not distributed):
        result = compare(
            config["datasets"],
            reference=config["reference"],
            baseline=config["baseline"],
            season=config["season"],
            n_resamples=resampling["n_resamples"],
            seed=resampling["seed"],
            progress=say or False,
            resampling={k: v for k, v in resampling.items() if k not in ("n_resamples", "seed")},
            **options,
        )
        result.write(out, overwrite=overwrite, progress=say)
    if say:
        say(f"figure set written to {out}")
    return 0


def _run(args) -> int:
    from .config import load_config

    config = load_config(args.config)
    out = args.out or Path(args.config).parent / config["options"]["output"]["directory"]
    return _compare_and_write(
        config, out, args.overwrite, args.quiet, workers=args.workers, scheduler=args.scheduler
    )


def _demo(args) -> int:
    """The whole job on the demo scenario, read back from netCDF files like any user's data."""
    from . import synthetic
    from .config import validate_options

    out = args.out
    _refuse_existing(out, args.overwrite)
    out.parent.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory(prefix=".westerlies-demo-data-", dir=out.parent) as tmp:
        if not args.quiet:
            print("writing the demo scenario as netCDF files ...", flush=True)
        sizes = {k: v for k, v in (("members", args.members), ("winters", args.winters)) if v}
        files = synthetic.write_scenario(Path(tmp), **sizes)
        config = {
            "datasets": {
                "Gale reference": str(files["reference"][0]),
                "ctl-slab": [str(p) for p in files["control"]],
                "ohtx-plus": [str(p) for p in files["perturbed"]],
            },
            "reference": "Gale reference",
            "baseline": "ctl-slab",
            "season": "DJF",
            "options": validate_options({}),
        }
        return _compare_and_write(config, out, args.overwrite, args.quiet)


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit status."""
    args = _parser().parse_args(argv)
    try:
        commands = {"check": _check, "demo-data": _demo_data, "demo": _demo, "run": _run}
        return commands[args.command](args)
    except ConfigError as err:
        print(f"westerlies: {err}", file=sys.stderr)
        return 2
    except InputError as err:
        print(f"westerlies: {err}", file=sys.stderr)
        return 1
