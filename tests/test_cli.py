"""The command line: `westerlies check` and `westerlies demo-data`, run as real processes."""

from __future__ import annotations

import subprocess
import sys
import warnings
from pathlib import Path

import numpy as np
import pytest

from westerlies import timeaxis
from westerlies.data import open_dataset
from westerlies.errors import InputWarning


def _run(*args: str, cwd: Path) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "westerlies", *args],
        capture_output=True,
        text=True,
        cwd=cwd,
        timeout=120,
        check=False,
    )


def test_check_good_file_exits_zero(eofs_sample_path, tmp_path):
    # Source: eofs' hgt_djf.nc (NCEP/NCAR reanalysis, Kalnay et al. 1996) serves the NAO.
    result = _run("check", str(eofs_sample_path), cwd=tmp_path)
    assert result.returncode == 0, result.stdout + result.stderr
    assert "z500" in result.stdout
    assert "nao" in result.stdout.lower()


def test_check_bad_files_exit_one(raw_dataset, tmp_path):
    ds = raw_dataset(variables=("zg",), start="2003-12-01").rename({"zg": "hgt"})
    ds["hgt"].attrs = {}  # no units and no standard_name: nothing says what it is
    bad = tmp_path / "no_units.nc"
    ds.to_netcdf(bad)
    result = _run("check", str(bad), "--var", "z500=hgt", cwd=tmp_path)
    assert result.returncode == 1, result.stdout + result.stderr
    assert "units" in (result.stdout + result.stderr).lower()
    missing = _run("check", str(tmp_path / "nowhere.nc"), cwd=tmp_path)
    assert missing.returncode == 1
    assert "nowhere.nc" in missing.stdout + missing.stderr


@pytest.mark.parametrize(
    "args",
    [
        (),
        ("check", "--no-such-option", "x.nc"),
        ("check", "x.nc", "--var", "z500"),
    ],
    ids=["no-command", "unknown-option", "bad-var"],
)
def test_usage_errors_exit_two(args, tmp_path):
    result = _run(*args, cwd=tmp_path)
    assert result.returncode == 2, result.stdout + result.stderr
    assert result.stderr.strip()


def test_console_script_installed(tmp_path):
    script = Path(sys.executable).parent / "westerlies"
    if not script.exists():
        pytest.skip("console script not installed next to this interpreter")
    result = subprocess.run(
        [str(script), "--help"],
        capture_output=True,
        text=True,
        cwd=tmp_path,
        timeout=60,
        check=False,
    )
    assert result.returncode == 0
    assert "check" in result.stdout and "demo-data" in result.stdout


def test_demo_data_written_checked_and_not_overwritten(tmp_path):
    out = tmp_path / "demo"
    result = _run("demo-data", str(out), "--members", "2", "--winters", "1", cwd=tmp_path)
    assert result.returncode == 0, result.stdout + result.stderr
    assert (out / "reference.nc").is_file()
    control = sorted((out / "control").glob("member_*.nc"))
    perturbed = sorted((out / "perturbed").glob("member_*.nc"))
    assert len(control) == 2 and len(perturbed) == 2

    # The files go through the whole path: the check command accepts the members as files.
    checked = _run("check", *map(str, control), cwd=tmp_path)
    assert checked.returncode == 0, checked.stdout + checked.stderr
    assert "360_day" in checked.stdout
    assert any("member" in line and "2" in line for line in checked.stdout.splitlines())

    # Normalization of the model-convention members (360_day, lon 0..360 in the files).
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", InputWarning)
        ds = open_dataset([str(p) for p in control])
        ref = open_dataset(out / "reference.nc")
    assert ds.sizes["member"] == 2
    assert timeaxis.calendar(ds["time"]) == "360_day"
    assert ds["lon"].values.min() >= -180 and ds["lon"].values.max() < 180
    assert np.all(np.diff(ds["lat"].values) > 0)
    assert ds["z500"].attrs["units"] == "m"
    assert ref.sizes["member"] == 1
    assert timeaxis.calendar(ref["time"]) in ("standard", "proleptic_gregorian")

    # An existing, non-empty OUT is refused and left as it was.
    before = {p: p.stat().st_mtime_ns for p in out.rglob("*")}
    again = _run("demo-data", str(out), "--members", "2", "--winters", "1", cwd=tmp_path)
    assert again.returncode != 0
    assert str(out) in again.stderr
    assert {p: p.stat().st_mtime_ns for p in out.rglob("*")} == before


def test_demo_data_into_a_file_path_is_refused(tmp_path):
    target = tmp_path / "taken"
    target.write_text("not a directory")
    result = _run("demo-data", str(target), "--members", "2", "--winters", "1", cwd=tmp_path)
    assert result.returncode != 0
    assert target.read_text() == "not a directory"
