"""The command line of the main job: `westerlies run CONFIG` and `westerlies demo`."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from westerlies.config import DEFAULTS, load_config, validate_options
from westerlies.errors import ConfigError
from westerlies.synthetic import write_scenario

EXAMPLE = Path(__file__).parents[1] / "examples" / "run.toml"


def _cli(*args, cwd=None) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "westerlies", *map(str, args)],
        capture_output=True,
        text=True,
        cwd=cwd,
        timeout=900,
    )


@pytest.fixture(scope="module")
def example_dir(tmp_path_factory) -> Path:
    """The example configuration beside a small copy of the demo data it points to."""
    root = tmp_path_factory.mktemp("example")
    write_scenario(root / "data", members=6, winters=4)
    text = EXAMPLE.read_text()
    # the example as shipped, with fewer resamples and restarts so the test stays quick
    text = text.replace("n_resamples = 1000", "n_resamples = 199").replace(
        "n_init = 20", "n_init = 3"
    )
    (root / "run.toml").write_text(text)
    return root


def test_example_configuration_runs(example_dir, tree_digest):
    out = example_dir / "out"
    done = _cli("run", example_dir / "run.toml", "--out", out, "--quiet")
    assert done.returncode == 0, done.stderr
    assert done.stdout == ""  # --quiet
    assert (out / "report.html").exists() and (out / "indices.nc").exists()
    assert len(list((out / "figures").glob("*.png"))) >= 12
    # a second run into the same directory is refused and touches nothing
    before = tree_digest(out)
    again = _cli("run", example_dir / "run.toml", "--out", out, "--quiet")
    assert again.returncode == 2 and "--overwrite" in again.stderr
    assert tree_digest(out) == before


def test_example_configuration_is_complete():
    config = load_config(EXAMPLE)
    # every option the configuration knows is shown in the example file
    text = EXAMPLE.read_text()
    for group, keys in DEFAULTS.items():
        assert f"[{group}]" in text, group
        for key in keys:
            assert f"\n{key} =" in text, f"{group}.{key}"
    assert config["reference"] == "Gale reference" and config["baseline"] == "ctl-slab"
    assert config["datasets"]["ctl-slab"]["path"].endswith("data/control/member_*.nc")


@pytest.mark.parametrize(
    ("text", "key"),
    [
        ('[datasets.a]\npath = "x.nc"\n[jet]\ncutof_days = 3\n', "jet.cutof_days"),
        ('[datasets.a]\npath = "x.nc"\n[jet]\ncutoff_days = "ten"\n', "jet.cutoff_days"),
        ('[datasets.a]\npath = "x.nc"\nseasn = "DJF"\n', "seasn"),
        ('[datasets.a]\npath = "x.nc"\n[regimes]\nn_regimes = 4.5\n', "regimes.n_regimes"),
        ('[datasets.a]\npaht = "x.nc"\n', "datasets.a"),
        ('[datasets.a]\npath = "x.nc"\nbaseline = "b"\n', "baseline"),
        ('[datasets.a]\npath = "x.nc"\n[resampling]\nalpha = 2\n', "resampling.alpha"),
        ('[datasets.a]\npath = "x.nc"\n[nao]\ndomain = [20, 80]\n', "nao.domain"),
        ("[datasets.a\n", "invalid TOML"),
    ],
)
def test_bad_configuration_names_the_key(tmp_path, text, key):
    path = tmp_path / "bad.toml"
    path.write_text(text)
    with pytest.raises(ConfigError, match=key.replace(".", r"\.").replace("[", r"\[")):
        load_config(path)
    done = _cli("run", path, "--out", tmp_path / "out", "--quiet")
    assert done.returncode == 2 and key.split(".")[-1] in done.stderr
    assert not (tmp_path / "out").exists()


def test_options_merge_over_defaults():
    merged = validate_options({"jet": {"cutoff_days": 5}})
    assert merged["jet"]["cutoff_days"] == 5.0 and merged["jet"]["n_weights"] == 61
    assert DEFAULTS["jet"]["cutoff_days"] == 10.0  # defaults are not changed by a merge


def test_demo_command_writes_the_figure_set(tmp_path):
    out = tmp_path / "demo"
    done = _cli("demo", "--out", out, "--members", "4", "--winters", "3")
    assert done.returncode == 0, done.stderr
    assert "figure set written" in done.stdout  # progress shown without --quiet
    assert (out / "report.html").exists() and (out / "summary.json").exists()
    leftovers = [p for p in tmp_path.iterdir() if p.name != "demo"]
    assert leftovers == []  # the temporary demo data are gone
    refused = _cli("demo", "--out", out, "--members", "4", "--winters", "3", "--quiet")
    assert refused.returncode == 2
    shutil.rmtree(out)
