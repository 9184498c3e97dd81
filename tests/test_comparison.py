"""The main job: `compare` on the demo scenario and the figure set it writes.

The demo scenario is invented data with known truth (westerlies.synthetic); here it serves only
to check that planted changes are found and that two samples of one generator mostly are not.
"""

from __future__ import annotations

import json
import warnings

import netCDF4
import numpy as np
import pytest
import xarray as xr

import westerlies as wl
from westerlies import report_figures
from westerlies.errors import ConfigError, InputError
from westerlies.report import safe_name
from westerlies.summary import COLUMNS

FAST = {"regimes": {"n_init": 4}, "resampling": {"alpha": 0.05}}
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), section 5.2


def _run(changes: bool, seed: int, members: int = 16, winters: int = 8) -> wl.Comparison:
    sc = wl.synthetic.scenario(seed=seed, members=members, winters=winters, changes=changes)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return wl.compare(
            {"ctl": sc["control"], "exp": sc["perturbed"]},
            reference=sc["reference"],
            n_resamples=299,
            seed=seed,
            **FAST,
        )


@pytest.fixture(scope="module")
def planted() -> wl.Comparison:
    return _run(changes=True, seed=0, members=30)


def _row(summary, diagnostic, quantity, dataset="exp", versus="ctl"):
    rows = summary[
        (summary["diagnostic"] == diagnostic)
        & (summary["quantity"] == quantity)
        & (summary["dataset"] == dataset)
        & (summary["versus"] == versus)
    ]
    assert len(rows) == 1, (diagnostic, quantity, dataset, versus)
    return rows.iloc[0]


def test_summary_is_tidy_and_stable(planted):
    summary = planted.summary
    assert tuple(summary.columns) == COLUMNS
    assert set(summary["dataset"]) == {"reference", "ctl", "exp"}
    assert set(summary["versus"].dropna()) == {"ctl", "reference"}
    # estimate rows: the interval brackets the value wherever both exist
    est = summary[summary["versus"].isna() & summary["ci_low"].notna()]
    assert (est["ci_low"] <= est["value"] + 1e-9).all() and (
        est["value"] <= est["ci_high"] + 1e-9
    ).all()
    tested = summary[summary["p_value"].notna()]
    assert ((tested["p_value"] > 0) & (tested["p_value"] <= 1)).all()  # (b + 1) / (B + 1)
    assert (tested["significant"] == (tested["p_value"] <= 0.05)).all()
    # the same inputs and seed give the same table
    again = _run(changes=True, seed=0, members=30)
    assert again.summary.equals(summary)


def test_planted_changes_are_significant(planted):
    # Known truth of the invented scenario: NAO- more frequent, jet further south, NAO more
    # persistent (westerlies.synthetic module docstring).
    summary = planted.summary
    nao_minus = _row(summary, "regimes", "NAO- (fraction of days)")
    assert nao_minus["value"] > 0.05 and nao_minus["significant"]
    jet = _row(summary, "jet", "latitude mean (degrees_north)")
    assert jet["value"] < -1.0 and jet["significant"]
    south = _row(summary, "jet", "south (fraction of days)")
    assert south["value"] > 0 and south["significant"]
    efold = _row(summary, "NAO", "e-folding time (days)")
    assert efold["value"] > 0


def test_same_generator_mostly_not_significant():
    summary = _run(changes=False, seed=3).summary
    versus_baseline = summary[summary["versus"] == "ctl"]
    assert len(versus_baseline) >= 15
    # ~20 correlated tests at alpha = 0.05: a handful may reject by chance, most must not
    assert versus_baseline["significant"].astype(bool).mean() <= 0.2


def test_common_basis_and_indices(planted):
    assert planted.fit_on == "reference" and planted.baseline == "ctl"
    for label, ds in planted.indices.items():
        assert {"nao", "jet_latitude", "jet_speed", "regime"} <= set(ds.data_vars), label
        assert ds["jet_latitude"].attrs["units"] == "degrees_north"
    # the fitting dataset's NAO index has unit variance (DESIGN.md: index normalization)
    ref = planted.indices["reference"]["nao"]
    assert float(ref.std()) == pytest.approx(1.0, rel=0.01)

    def tested(name):
        finite = planted.maps[name].notnull().any(("lat", "lon"))
        return set(planted.maps["dataset"].values[finite.values])

    assert tested("bias") == {"ctl", "exp"}
    assert tested("response") == {"exp"}


def test_write_every_output(planted, tmp_path):
    out = planted.write(tmp_path / "set")
    names = {p.name for p in out.iterdir()}
    assert {
        "report.html",
        "summary.json",
        "tables",
        "indices.nc",
        "figures",
        "provenance.json",
    } <= names
    figures = sorted((out / "figures").glob("*.png"))
    assert len(figures) >= 12
    for fig in figures:
        assert fig.read_bytes()[:8] == PNG_SIGNATURE, fig.name
    assert (out / "tables" / "summary.csv").exists()
    summary = json.loads((out / "summary.json").read_text())
    assert len(summary) == len(planted.summary)
    provenance = json.loads((out / "provenance.json").read_text())
    assert provenance["options"]["resampling"]["seed"] == 0 and "numpy" in provenance["versions"]
    with netCDF4.Dataset(out / "indices.nc") as nc:
        assert set(nc.groups) == {"reference", "ctl", "exp"}
        for group in nc.groups.values():
            assert {"nao", "jet_latitude", "jet_speed", "regime"} <= set(group.variables)
    tree = xr.open_datatree(out / "indices.nc")
    assert tree["exp"].to_dataset()["nao"].attrs["units"] == "1"
    html = (out / "report.html").read_text()
    assert html.count("data:image/png;base64,") == len(figures)
    assert "research diagnostics with sampling uncertainty" in html


def test_existing_output_refused_untouched(planted, tmp_path, tree_digest):
    out = tmp_path / "set"
    out.mkdir()
    (out / "keep.txt").write_text("mine")
    before = tree_digest(out)
    with pytest.raises(ConfigError, match="overwrite"):
        planted.write(out)
    assert tree_digest(out) == before
    planted.write(out, overwrite=True)
    assert not (out / "keep.txt").exists() and (out / "report.html").exists()
    assert [p.name for p in tmp_path.iterdir()] == ["set"]  # no temporary leftovers


def test_interrupted_write_leaves_nothing(planted, tmp_path, monkeypatch):
    original = report_figures.figure_recipes

    def interrupted(comparison):
        for i, item in enumerate(original(comparison)):
            if i == 3:
                raise KeyboardInterrupt
            yield item

    monkeypatch.setattr(report_figures, "figure_recipes", interrupted)
    with pytest.raises(KeyboardInterrupt):
        planted.write(tmp_path / "set")
    assert list(tmp_path.iterdir()) == []


def test_hostile_label_is_escaped_and_safe_on_disk(tmp_path):
    sc = wl.synthetic.scenario(seed=1, members=6, winters=4)
    hostile = '<script>alert("x")</script>/../../evil'
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = wl.compare(
            {hostile: sc["control"], "exp": sc["perturbed"]}, n_resamples=99, **FAST
        )
    out = result.write(tmp_path / "set")
    html = (out / "report.html").read_text()
    assert "<script>" not in html and "&lt;script&gt;" in html
    assert all(p.resolve().is_relative_to(out.resolve()) for p in out.rglob("*"))
    assert not (tmp_path / "evil").exists()
    with netCDF4.Dataset(out / "indices.nc") as nc:
        labels = {g.getncattr("label") for g in nc.groups.values()}
    assert hostile in labels
    assert safe_name(hostile) in {"script_alert_x_script_evil"}


def test_bad_arguments_raise():
    sc = wl.synthetic.scenario(seed=2, members=3, winters=2)
    with pytest.raises(ConfigError, match="baseline"):
        wl.compare({"a": sc["control"]}, baseline="nope")
    with pytest.raises(ConfigError, match="unknown"):
        wl.compare({"a": sc["control"]}, jet={"cutof_days": 10})
    with pytest.raises(InputError, match="z500"):
        wl.compare({"a": sc["control"].drop_vars("phi")})


def test_safe_names_are_unique():
    taken: set[str] = set()
    names = [safe_name(x, taken) for x in ["a/b", "a b", "a_b", "", "1x"]]
    assert len(set(names)) == 5
    assert all(np.all([c.isalnum() or c in "_-" for c in n]) for n in names)


def test_one_value_per_winter_reference(tmp_path):
    # The eofs sample (NCEP/NCAR DJF-mean Z500, Kalnay et al. 1996) as the reference: it serves
    # the NAO and the bias maps; the daily diagnostics are fitted on the baseline instead.
    import eofs.examples

    sc = wl.synthetic.scenario(seed=5, members=6, winters=2)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = wl.compare(
            {"ctl": sc["control"], "exp": sc["perturbed"]},
            reference=eofs.examples.example_data_path("hgt_djf.nc"),
            n_resamples=99,
            **FAST,
        )
    assert result.fit_on == "reference" and result.details["daily_fit_on"] == "ctl"
    assert "jet_latitude" not in result.indices["reference"]
    assert float(result.indices["reference"]["nao"].std()) == pytest.approx(1.0, rel=0.02)
    assert result.maps["bias"].sel(dataset="ctl").notnull().any()
    out = result.write(tmp_path / "set")
    assert (out / "figures" / "z500_bias.png").exists()
