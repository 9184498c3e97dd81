"""Benchmark workloads written as netCDF, one file per member (used by `benchmarks/run.py`).

A workload is a reference (one realization, ``winters`` winters, standard calendar) and two
experiments ("control", "perturbed") of ``members`` members each, one winter per member
(150 days, 1 November to 30 March, 360_day calendar), drawn from the demo scenario's generator
(`westerlies.synthetic.scenario`) in its raw conventions, float32. Variables: Z500 (as
geopotential) and zonal wind at 925, 850 and 700 hPa, as in the issue's workload; the generator's
SST is dropped.

`write_scenario` builds the whole scenario in memory; here the members are drawn in batches
(one `scenario` call per batch, each with its own seed) so that generation needs memory for one
batch only (about 14 MB per member pair, float32, plus the generator's temporaries). Each batch
member is written to its own file under its global member index. A manifest
(``workload.json``) records the parameters and is marked complete only at the end, so an
interrupted generation is never mistaken for a finished one.
"""

from __future__ import annotations

import json
import shutil
import time
from dataclasses import asdict, dataclass
from pathlib import Path

from westerlies._files import write_netcdf

MANIFEST = "workload.json"
EXPERIMENTS = ("control", "perturbed")
_DAYS = 150  # the generator's model winter (360_day, 1 Nov to 30 Mar)
_REFERENCE_DAYS = 151  # 1 Nov to 31 Mar, standard calendar (152 in leap winters)
_POINTS = 29 * 53  # the generator's 2.5-degree grid, 15-85N, 90W-40E
_FIELDS = 4  # Z500 and u at three levels
_OVERHEAD = 1.05  # netCDF metadata and coordinates, rounded up


@dataclass(frozen=True)
class Workload:
    """Parameters of one workload (what the manifest records)."""

    name: str
    members: int  # per experiment
    winters: int  # of the reference
    batch: int  # members drawn per generator call
    seed: int = 20261

    def expected_bytes(self) -> int:
        """Approximate size on disk of all files (float32, uncompressed)."""
        model = len(EXPERIMENTS) * self.members * _DAYS
        reference = self.winters * _REFERENCE_DAYS
        return int((model + reference) * _POINTS * _FIELDS * 4 * _OVERHEAD)


WORKLOADS = {
    "small": Workload("small", members=100, winters=40, batch=100),
    "large": Workload("large", members=1000, winters=40, batch=100),
}


def paths(workdir: Path, workload: Workload) -> dict[str, list[Path]]:
    """The files of a workload: "reference" (one file), "control" and "perturbed" (per member)."""
    width = max(3, len(str(workload.members - 1)))
    out = {"reference": [workdir / "reference.nc"]}
    for name in EXPERIMENTS:
        out[name] = [workdir / name / f"member_{i:0{width}d}.nc" for i in range(workload.members)]
    return out


def _manifest(workdir: Path) -> dict | None:
    path = workdir / MANIFEST
    if not path.exists():
        return None
    try:
        return json.loads(path.read_text())
    except (OSError, ValueError):
        return None


def is_complete(workdir: Path, workload: Workload) -> bool:
    """True when `workdir` holds exactly this workload, completely written."""
    found = _manifest(workdir)
    if found is None or not found.get("complete"):
        return False
    if found.get("parameters") != asdict(workload):
        return False
    return all(p.exists() for files in paths(workdir, workload).values() for p in files)


def check_workdir(workdir: Path, workload: Workload) -> bool:
    """True if the workload is already there (reuse it); raise if `workdir` holds other things.

    Raises
    ------
    SystemExit
        If `workdir` is not empty and does not hold this workload (an interrupted generation of
        the same workload, recognized by its manifest, is restarted instead).
    """
    if not workdir.exists() or not any(workdir.iterdir()):
        return False
    if is_complete(workdir, workload):
        return True
    found = _manifest(workdir)
    if found is not None and found.get("parameters") == asdict(workload):
        return False  # an interrupted generation of the same workload: written again
    raise SystemExit(
        f"benchmark: workdir {str(workdir)!r} is not empty and does not hold the "
        f"{workload.name!r} workload (no matching {MANIFEST}); choose a new or empty directory"
    )


def check_disk(workdir: Path, workload: Workload, margin_bytes: int = 2 * 1024**3) -> None:
    """Refuse (SystemExit) unless the filesystem of `workdir` has room for the workload."""
    probe = workdir
    while not probe.exists():
        probe = probe.parent
    free = shutil.disk_usage(probe).free
    need = workload.expected_bytes() + margin_bytes
    if free < need:
        raise SystemExit(
            f"benchmark: the {workload.name!r} workload needs about {need / 1e9:.1f} GB "
            f"(data {workload.expected_bytes() / 1e9:.1f} GB plus outputs and margin) but only "
            f"{free / 1e9:.1f} GB are free under {str(probe)!r}; free space or choose --workdir "
            "on another filesystem"
        )


def generate(workdir: Path, workload: Workload, say=print) -> dict[str, list[Path]]:
    """Write the workload's files into `workdir` (see the module docstring); returns the paths."""
    from westerlies.synthetic import scenario

    start = time.perf_counter()
    workdir.mkdir(parents=True, exist_ok=True)
    manifest = {"parameters": asdict(workload), "complete": False}
    (workdir / MANIFEST).write_text(json.dumps(manifest, indent=1))
    targets = paths(workdir, workload)

    if not targets["reference"][0].exists():
        reference = scenario(workload.seed, members=1, winters=workload.winters)["reference"]
        write_netcdf(reference.drop_vars("sst"), targets["reference"][0])
        del reference
    for first in range(0, workload.members, workload.batch):
        count = min(workload.batch, workload.members - first)
        todo = [targets[n][first + i] for n in EXPERIMENTS for i in range(count)]
        if all(p.exists() for p in todo):
            continue  # written by an earlier, interrupted generation
        batch = scenario(workload.seed * 1000 + 1 + first // workload.batch, count, winters=1)
        for name in EXPERIMENTS:
            ds = batch[name].drop_vars("tos")
            for i in range(count):
                member = ds.isel(realization=i, drop=True)
                member.attrs = {**ds.attrs, "realization_index": first + i}
                write_netcdf(member, targets[name][first + i])
        del batch, ds
        say(
            f"  generated members {first}..{first + count - 1} of {workload.members} "
            f"({time.perf_counter() - start:.0f} s)"
        )
    size = sum(p.stat().st_size for files in targets.values() for p in files)
    manifest.update(complete=True, bytes=size, seconds=round(time.perf_counter() - start, 1))
    (workdir / MANIFEST).write_text(json.dumps(manifest, indent=1))
    return targets


def size_on_disk(workdir: Path, workload: Workload) -> int:
    """Bytes of the workload's files."""
    return sum(p.stat().st_size for files in paths(workdir, workload).values() for p in files)
