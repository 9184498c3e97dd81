"""The same numbers everywhere: in memory, with dask's threaded scheduler, and on a cluster.

DESIGN.md principles 5 and 7: dask-backed inputs are reduced before anything is loaded, and the
same inputs and seed give the same results however they are computed.
"""

from __future__ import annotations

import subprocess
import sys
import warnings

import dask
import numpy as np
import pytest

import westerlies as wl
from westerlies.synthetic import write_scenario


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    return write_scenario(tmp_path_factory.mktemp("scaling") / "data", members=5, winters=3)


def _compare(files, chunks=None):
    extra = {} if chunks is None else {"chunks": chunks}
    datasets = {
        "ctl": {"path": [str(p) for p in files["control"]], **extra},
        "exp": {"path": [str(p) for p in files["perturbed"]], **extra},
    }
    reference = {"path": str(files["reference"][0]), **extra}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return wl.compare(datasets, reference=reference, n_resamples=99, regimes={"n_init": 2})


def _assert_same(a, b):
    sa, sb = a.summary, b.summary
    assert list(sa["quantity"]) == list(sb["quantity"]) and list(sa["dataset"]) == list(
        sb["dataset"]
    )
    for column in ("value", "ci_low", "ci_high"):
        np.testing.assert_allclose(sb[column], sa[column], rtol=1e-6, atol=1e-9, err_msg=column)
    np.testing.assert_array_equal(sb["p_value"], sa["p_value"])  # exactly: same seed, same draws
    for label in a.indices:
        np.testing.assert_array_equal(b.indices[label]["regime"], a.indices[label]["regime"])


@pytest.fixture(scope="module")
def in_memory(files):
    return _compare(files)


def test_dask_threaded_gives_the_same_numbers(files, in_memory):
    with dask.config.set(scheduler="threads"):
        lazy = _compare(files, chunks={"time": 50})
    _assert_same(in_memory, lazy)


def test_process_cluster_gives_the_same_numbers(files, in_memory, monkeypatch):
    distributed = pytest.importorskip("distributed")
    from westerlies import diagnostics

    with (
        distributed.LocalCluster(
            n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None
        ) as cluster,
        distributed.Client(cluster),
    ):
        on_cluster = _compare(files, chunks={"time": 50})
        grouped = _compare(files, chunks={"member": 2, "time": 50})
        # every field counts as large: fits and per-dataset calls on chunked data, the
        # chunked passes on the workers
        monkeypatch.setattr(diagnostics, "WHOLE_TASK_BYTES", 0)
        chunked = _compare(files, chunks={"member": 2, "time": 50})
    _assert_same(in_memory, on_cluster)
    _assert_same(in_memory, grouped)
    _assert_same(in_memory, chunked)


def test_cluster_options_are_checked(tmp_path):
    config = tmp_path / "run.toml"
    config.write_text('[datasets.a]\npath = "x.nc"\n')
    run = [sys.executable, "-m", "westerlies", "run", str(config), "--out", str(tmp_path / "o")]
    both = subprocess.run(
        [*run, "--workers", "2", "--scheduler", "tcp://127.0.0.1:1"], capture_output=True, text=True
    )
    assert both.returncode == 2 and "not allowed with" in both.stderr
    zero = subprocess.run([*run, "--workers", "0"], capture_output=True, text=True)
    assert zero.returncode != 0 and not (tmp_path / "o").exists()


def test_member_groups_and_chunked_large_field_path_give_the_same_numbers(
    files, in_memory, monkeypatch
):
    from westerlies import diagnostics

    # every field counts as large: fits and per-dataset work stay on chunked data (the path
    # of ensembles too large to gather in one task)
    monkeypatch.setattr(diagnostics, "WHOLE_TASK_BYTES", 0)
    with dask.config.set(scheduler="threads"):
        lazy = _compare(files, chunks={"member": 2, "time": 50})  # member files read in groups
    _assert_same(in_memory, lazy)
    assert lazy.indices["ctl"]["nao"].sizes["member"] == 5


def test_own_cluster_workers_keep_the_adaptive_allocator():
    # dask sets MALLOC_TRIM_THRESHOLD_ for worker processes, which fixes glibc's mmap threshold
    # (glibc mallopt(3): setting M_TRIM_THRESHOLD disables the dynamic mmap threshold) and
    # measured twice the time of a member-group task; our own cluster's workers go without
    # it and keep dask's one-thread BLAS/OpenMP settings.
    pytest.importorskip("distributed")
    import os

    from distributed import get_client

    from westerlies.cli import _cluster

    with _cluster(1, None, None):
        environ = get_client().run(lambda: dict(os.environ))
    (worker_environ,) = environ.values()
    assert "MALLOC_TRIM_THRESHOLD_" not in worker_environ
    assert worker_environ.get("OMP_NUM_THREADS") == "1"
