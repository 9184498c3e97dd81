"""The `westerlies` command line.

    westerlies check FILE... [--var NAME=VAR] [--member-dim DIM] [--daily-mean]
    westerlies demo-data OUT [--members N] [--winters N] [--seed S]
    westerlies demo [--out DIR] [--members N] [--overwrite] [--quiet]

Exit status: 0 success, 1 the input is not usable or the job failed on bad input, 2 usage errors.
"""

from __future__ import annotations

import argparse
import shutil
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
    demo.add_argument("--overwrite", action="store_true", help="replace an existing output")
    demo.add_argument("--quiet", action="store_true", help="no progress messages")
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


def _refuse_existing(out: Path, overwrite: bool) -> None:
    if out.exists() and (not out.is_dir() or any(out.iterdir())) and not overwrite:
        raise ConfigError.make(
            f"output {str(out)!r}",
            "an existing, non-empty path",
            "a new or empty directory",
            "choose another directory or pass --overwrite",
        )


def _demo_data(args) -> int:
    from . import synthetic

    _refuse_existing(args.out, overwrite=False)
    sizes = {k: v for k, v in (("members", args.members), ("winters", args.winters)) if v}
    written = synthetic.write_scenario(args.out, seed=args.seed, **sizes)
    for name, paths in written.items():
        print(f"{name}: {len(paths)} file(s) under {args.out}")
    return 0


def _demo(args) -> int:
    """Write the demo data into a temporary directory, check it, then move it into place."""
    from . import synthetic
    from .check import check_input

    out = args.out
    _refuse_existing(out, args.overwrite)
    out.parent.mkdir(parents=True, exist_ok=True)
    work = Path(tempfile.mkdtemp(prefix=f".{out.name}-", dir=out.parent))
    try:
        sizes = {"members": args.members} if args.members else {}
        if not args.quiet:
            print("writing the demo scenario ...", flush=True)
        written = synthetic.write_scenario(work / "data", **sizes)
        ok = True
        for name, paths in written.items():
            source = paths[0] if len(paths) == 1 else paths
            report = check_input(
                [str(p) for p in source] if isinstance(source, list) else str(source)
            )
            (work / f"check-{name}.txt").write_text(str(report).replace(str(work), str(out)))
            ok &= report.ok
            if not args.quiet:
                print(str(report).replace(str(work), str(out)), flush=True)
        if out.exists():
            shutil.rmtree(out)
        work.rename(out)
    except BaseException:
        shutil.rmtree(work, ignore_errors=True)
        raise
    if not args.quiet:
        print(f"demo written to {out}")
    return 0 if ok else 1


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit status."""
    args = _parser().parse_args(argv)
    try:
        return {"check": _check, "demo-data": _demo_data, "demo": _demo}[args.command](args)
    except ConfigError as err:
        print(f"westerlies: {err}", file=sys.stderr)
        return 2
    except InputError as err:
        print(f"westerlies: {err}", file=sys.stderr)
        return 1
