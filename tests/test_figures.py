"""Behaviour tests of the figure set: panels, units, colour scales, stippling, saving, labels.

Inputs are small invented arrays (no science is checked here: the figures only draw what they
are given). Rendering uses the Agg backend.
"""

from __future__ import annotations

import io
import math
import warnings

import matplotlib

matplotlib.use("Agg")

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from cartopy.mpl.geoaxes import GeoAxes
from matplotlib import cbook
from matplotlib.collections import PathCollection, QuadMesh
from matplotlib.figure import Figure

from westerlies.errors import ConfigError, CoordinateError, InputError, InputWarning
from westerlies.figures import (
    cross_correlation,
    dataset_colors,
    difference_maps,
    index_distributions,
    jet_densities,
    jet_latitude_speed,
    memory_functions,
    nao_patterns,
    occupancy_bars,
    persistence_survival,
    regime_maps,
    save,
    scorecard,
)

HOSTILE = "<b>a/b</b> $x$"
LABELS = ["ctrl", "warm-sst", HOSTILE]
REGIMES = ["NAO+", "NAO-", "Scandinavian blocking", "Atlantic ridge"]
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), section 5.2
LAT = np.arange(20.0, 81.0, 10.0)
LON = np.arange(-90.0, 41.0, 10.0)


def _field(labels=LABELS, scale=1.0, seed=0, units="m") -> xr.DataArray:
    rng = np.random.default_rng(seed)
    data = scale * rng.standard_normal((len(labels), LAT.size, LON.size))
    return xr.DataArray(
        data,
        dims=("dataset", "lat", "lon"),
        coords={"dataset": labels, "lat": LAT, "lon": LON},
        attrs={"units": units},
    )


def _on_dataset(values, labels=LABELS) -> xr.DataArray:
    return xr.DataArray(values, dims="dataset", coords={"dataset": labels})


def _maps(fig: Figure) -> list[GeoAxes]:
    return [ax for ax in fig.axes if isinstance(ax, GeoAxes)]


def _meshes(fig: Figure) -> list[QuadMesh]:
    return [c for ax in _maps(fig) for c in ax.collections if isinstance(c, QuadMesh)]


def _colorbar_labels(fig: Figure) -> list[str]:
    return [ax.get_xlabel() for ax in fig.axes if not isinstance(ax, GeoAxes)]


def _render(fig: Figure) -> bytes:
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=40)
    return buffer.getvalue()


def _all_texts(fig: Figure) -> list:
    return [t for t in fig.findobj(matplotlib.text.Text) if t.get_text()]


def _legend_texts(ax) -> list[str]:
    legend = ax.get_legend()
    return [t.get_text() for t in legend.get_texts()] if legend else []


# ---------------------------------------------------------------------------------- colours


def test_dataset_colors_follow_okabe_ito_and_are_stable():
    colors = dataset_colors(["a", "b", "c"])
    # Okabe and Ito (2008) palette: blue #0072B2, vermillion #D55E00, bluish green #009E73.
    assert colors == {"a": "#0072B2", "b": "#D55E00", "c": "#009E73"}
    assert dataset_colors(["a", "b", "c"]) == colors
    assert dataset_colors(["c", "a"]) == {"c": "#0072B2", "a": "#D55E00"}  # order as given
    eight = dataset_colors([f"d{k}" for k in range(8)])
    assert len(set(eight.values())) == 8


def test_dataset_colors_beyond_palette_distinct_with_warning_and_repeats_refused():
    with pytest.warns(InputWarning):
        many = dataset_colors([f"d{k}" for k in range(12)])
    assert len(set(many.values())) == 12
    with pytest.raises(ConfigError, match="repeated"):
        dataset_colors(["a", "b", "a"])


def test_line_colours_follow_the_run_palette_for_a_subset():
    run = dataset_colors(["ref", *LABELS])
    lag = np.arange(-5, 6)
    ccf = xr.DataArray(
        np.zeros((2, lag.size)),
        dims=("dataset", "lag"),
        coords={"dataset": LABELS[1:], "lag": lag},
    )
    fig = cross_correlation(ccf, colors=run)
    lines = [line for line in fig.axes[0].get_lines() if len(line.get_xdata()) == lag.size]
    assert [matplotlib.colors.to_hex(line.get_color()) for line in lines] == [
        run[LABELS[1]].lower(),
        run[LABELS[2]].lower(),
    ]
    with pytest.raises(ConfigError, match="no colour"):
        cross_correlation(ccf, colors={"ref": "#000000"})


# ---------------------------------------------------------------------------------- maps


def test_nao_patterns_panels_symmetric_scale_units_and_titles():
    patterns = _field(scale=30.0, units="m per unit index")
    patterns[0, 2, 3] = 97.0  # the largest magnitude, positive: limits must still be symmetric
    fig = nao_patterns(patterns, _on_dataset([0.93, 0.81, 0.5]), _on_dataset([0.354, 0.3, 0.25]))
    assert isinstance(fig, Figure)
    assert len(_maps(fig)) == 3
    limits = {mesh.get_clim() for mesh in _meshes(fig)}
    assert len(limits) == 1  # one shared scale
    low, high = limits.pop()
    assert low == -high and high >= float(np.abs(patterns).max())
    assert any("m per unit index" in label for label in _colorbar_labels(fig))
    titles = [ax.get_title() for ax in _maps(fig)]
    assert "0.93" in titles[0] and "35.4%" in titles[0]
    assert all(mesh.get_cmap().name == "RdBu_r" for mesh in _meshes(fig))


def test_difference_maps_stipple_only_significant_points():
    diff = _field(scale=20.0)
    diff.attrs["versus"] = "reanalysis-like"
    significant = np.abs(diff) > 25.0
    significant[1] = False  # a panel with nothing significant draws no dots
    fig = difference_maps(diff, significant, kind="bias")
    counts = [
        sum(len(c.get_offsets()) for c in ax.collections if isinstance(c, PathCollection))
        for ax in _maps(fig)
    ]
    assert counts == [int(significant[k].sum()) for k in range(3)]
    assert counts[0] > 0 and counts[1] == 0
    # The dots sit on the significant grid points (lon, lat) and nowhere else.
    dots = next(c for c in _maps(fig)[0].collections if isinstance(c, PathCollection))
    where = significant[0].to_series()
    expected = {(lon, lat) for (lat, lon), flag in where.items() if flag}
    assert {tuple(xy) for xy in np.asarray(dots.get_offsets())} == expected
    assert _maps(fig)[0].get_title() == "ctrl minus reanalysis-like"
    low, high = _meshes(fig)[0].get_clim()
    assert low == -high
    assert any("(m)" in label for label in _colorbar_labels(fig))


def test_difference_maps_response_titles_and_bad_input():
    diff = _field(LABELS[1:])
    diff.attrs["versus"] = "ctrl"
    fig = difference_maps(diff, kind="response")
    assert [ax.get_title() for ax in _maps(fig)] == [
        "warm-sst minus ctrl",
        r"<b>a/b</b> \$x\$ minus ctrl",
    ]
    assert not any(isinstance(c, PathCollection) for ax in _maps(fig) for c in ax.collections)
    with pytest.raises(ConfigError, match="kind"):
        difference_maps(diff, kind="change")
    with pytest.raises(CoordinateError, match="dims"):
        difference_maps(diff.rename(lat="y"))
    shifted = (np.abs(diff) > 0).assign_coords(lat=LAT + 1.0)
    with pytest.raises(CoordinateError, match="'lat'"):
        difference_maps(diff, shifted)  # a mask on another grid is refused, not dropped
    nothing = xr.full_like(diff, np.nan)  # NaN flags count as not significant
    fig = difference_maps(diff, nothing)
    assert not any(isinstance(c, PathCollection) for ax in _maps(fig) for c in ax.collections)


def test_regime_maps_grid_shared_scale_and_occupancy_titles():
    rng = np.random.default_rng(3)
    centroids = xr.DataArray(
        rng.standard_normal((2, 4, LAT.size, LON.size)) * np.array([10, 40])[:, None, None, None],
        dims=("dataset", "regime", "lat", "lon"),
        coords={"dataset": LABELS[:2], "regime": REGIMES, "lat": LAT, "lon": LON},
        attrs={"units": "m"},
    )
    occupancy = xr.DataArray(
        [[0.3, 0.2, 0.25, 0.25], [0.1, 0.4, 0.2, 0.3]],
        dims=("dataset", "regime"),
        coords={"dataset": LABELS[:2], "regime": REGIMES},
    )
    fig = regime_maps(centroids, occupancy.isel(regime=[3, 2, 1, 0]))  # order does not matter
    assert len(_maps(fig)) == 8
    limits = {mesh.get_clim() for mesh in _meshes(fig)}
    assert len(limits) == 1 and next(iter(limits))[0] == -next(iter(limits))[1]
    titles = [ax.get_title() for ax in _maps(fig)]
    assert titles[0] == "NAO+ (30.0%)" and titles[5] == "NAO- (40.0%)"
    assert any("(m)" in label for label in _colorbar_labels(fig))


# ---------------------------------------------------------------------------------- distributions


def test_index_distributions_lines_per_dataset_in_their_colours():
    rng = np.random.default_rng(1)
    indices = {label: rng.standard_normal(500) for label in LABELS}
    indices["ctrl"][:5] = np.nan  # dropped, not fatal
    fig = index_distributions(indices)
    (ax,) = fig.axes
    colors = dataset_colors(LABELS)
    lines = ax.get_lines()
    assert [matplotlib.colors.to_hex(line.get_color()) for line in lines] == [
        colors[label].lower() for label in LABELS
    ]
    assert "standard deviations" in ax.get_xlabel()
    assert "(per unit index)" in ax.get_ylabel()
    assert "n = 495" in _legend_texts(ax)[0]
    labelled = {"a": xr.DataArray(rng.standard_normal(50), attrs={"units": "1"})}
    assert index_distributions(labelled).axes[0].get_xlabel() == "NAO index (1)"
    with pytest.raises(InputError):
        index_distributions({})


def test_jet_densities_bands_modes_bounds_and_units():
    lat = np.arange(20.0, 70.1, 1.0)
    curves = np.stack([np.exp(-((lat - m) ** 2) / 40) for m in (40, 48)])
    density = xr.DataArray(
        curves / curves.sum(axis=1, keepdims=True),
        dims=("dataset", "latitude"),
        coords={"dataset": LABELS[:2], "latitude": lat},
        attrs={"units": "per degree"},
    )
    density["latitude"].attrs["units"] = "degrees_north"
    fig = jet_densities(
        density,
        density * 0.9,
        density * 1.1,
        modes={"ctrl": [40.0], "warm-sst": [37.0, 48.0]},
        bounds=(41.5, 51.0),
    )
    (ax,) = fig.axes
    dashed = [line for line in ax.get_lines() if line.get_linestyle() == "--"]
    assert sorted(line.get_xdata()[0] for line in dashed) == [41.5, 51.0]
    markers = [line for line in ax.get_lines() if line.get_marker() == "v"]
    assert sum(len(m.get_xdata()) for m in markers) == 3
    assert len(ax.collections) == 2  # one shaded band per dataset
    assert "degrees_north" in ax.get_xlabel() and "per degree" in ax.get_ylabel()
    one = jet_densities(density, bounds=[45.0]).axes[0]  # a fit with two modes has one bound
    assert [ln.get_xdata()[0] for ln in one.get_lines() if ln.get_linestyle() == "--"] == [45.0]
    with pytest.raises(InputError, match="bounds"):
        jet_densities(density, bounds=["south"])


def test_jet_latitude_speed_points_limited_and_units():
    rng = np.random.default_rng(2)
    latitude = {label: 45 + 8 * rng.standard_normal(3000) for label in LABELS[:2]}
    speed = {label: 12 + 2 * rng.standard_normal(3000) for label in LABELS[:2]}
    fig = jet_latitude_speed(latitude, speed, max_points=1000)
    (ax,) = fig.axes
    points = [c for c in ax.collections if isinstance(c, PathCollection)]
    assert [len(p.get_offsets()) for p in points] == [1000, 1000]
    assert "(degrees_north)" in ax.get_xlabel() and "(m s-1)" in ax.get_ylabel()
    with pytest.raises(InputError, match="same days"):
        jet_latitude_speed({"a": [40.0, 50.0]}, {"a": [10.0]})


# ---------------------------------------------------------------------------------- regimes


def _occupancy(dim="regime"):
    values = np.array([[0.30, 0.20, 0.25, 0.25], [0.20, 0.35, 0.25, 0.20], [0.25] * 4])
    return xr.DataArray(values, dims=("dataset", dim), coords={"dataset": LABELS, dim: REGIMES})


def test_occupancy_bars_heights_error_bars_and_marks():
    occupancy = _occupancy()
    significant = xr.zeros_like(occupancy, dtype=bool)
    significant[1, 0] = significant[1, 1] = significant[2, 3] = True
    fig = occupancy_bars(occupancy, occupancy - 0.05, occupancy + 0.05, significant)
    (ax,) = fig.axes
    bars = [p for p in ax.patches if isinstance(p, matplotlib.patches.Rectangle)]
    assert len(bars) == 12
    assert np.allclose(sorted(b.get_height() for b in bars), sorted(100 * occupancy.values.ravel()))
    marks = [t for t in ax.texts if t.get_gid() == "significance"]
    assert len(marks) == 3
    assert "percent" in ax.get_ylabel()
    assert "Regime occupancy" == ax.get_title()


def test_occupancy_bars_accepts_category_dim_and_no_marks_without_flags():
    fig = occupancy_bars(_occupancy("category"), ylabel="days in category (percent)")
    (ax,) = fig.axes
    assert ax.get_title() == "Jet category occupancy"
    assert not [t for t in ax.texts if t.get_gid() == "significance"]
    with pytest.raises(CoordinateError, match="regime or category"):
        occupancy_bars(_occupancy("cluster"))


def test_persistence_survival_panels_log_axes_units():
    length = np.arange(1, 21)
    survival = xr.DataArray(
        np.stack([[0.7 ** (length - 1)] * 4, [0.8 ** (length - 1)] * 4]),
        dims=("dataset", "regime", "length"),
        coords={"dataset": LABELS[:2], "regime": REGIMES, "length": length},
    )
    fig = persistence_survival(survival)
    assert len(fig.axes) == 4
    assert all(ax.get_yscale() == "log" for ax in fig.axes)
    assert fig.axes[0].get_xlabel() == "episode length (days)"
    assert "(fraction)" in fig.axes[0].get_ylabel()
    assert all(len(ax.get_lines()) == 2 for ax in fig.axes)


# ---------------------------------------------------------------------------------- memory


def test_memory_functions_panels_efolding_marks_and_one_over_e():
    lag = np.arange(0, 21)
    names = ["nao", "jet_latitude", "jet_speed"]
    tau = np.array([[8.0, 5.0, 3.0], [6.0, 4.0, 2.0]])
    acf = xr.DataArray(
        np.exp(-lag / tau[..., None]),
        dims=("dataset", "index", "lag"),
        coords={"dataset": LABELS[:2], "index": names, "lag": lag},
    )
    acf["lag"].attrs["units"] = "days"
    efolding = xr.DataArray(tau, dims=("dataset", "index"), coords=acf.isel(lag=0).coords)
    fig = memory_functions(acf, acf - 0.1, acf + 0.1, efolding)
    assert len(fig.axes) == 3
    for k, ax in enumerate(fig.axes):
        marks = [line for line in ax.get_lines() if line.get_marker() == "o"]
        assert sorted(m.get_xdata()[0] for m in marks) == sorted(tau[:, k])
        assert all(math.isclose(m.get_ydata()[0], math.exp(-1)) for m in marks)
        dashed = [line for line in ax.get_lines() if line.get_linestyle() == "--"]
        assert [line.get_ydata()[0] for line in dashed] == [pytest.approx(math.exp(-1))]
        assert ax.get_xlabel() == "lag (days)"
        assert f"({tau[0, k]:.1f} days)" in _legend_texts(ax)[0]
    assert "(dimensionless)" in fig.axes[0].get_ylabel()
    assert [ax.get_title() for ax in fig.axes] == ["NAO", "jet latitude", "jet speed"]


def test_cross_correlation_lag_convention_note():
    lag = np.arange(-10, 11)
    ccf = xr.DataArray(
        np.stack([np.exp(-((lag - 2) ** 2) / 20)] * 2),
        dims=("dataset", "lag"),
        coords={"dataset": LABELS[:2], "lag": lag},
        attrs={"lag_convention": "positive lag: NAO leads SST"},
    )
    fig = cross_correlation(ccf, ccf - 0.1, ccf + 0.1, title="NAO and SST tripole")
    (ax,) = fig.axes
    assert "positive lag: NAO leads SST" in ax.get_xlabel() and "(days)" in ax.get_xlabel()
    assert ax.get_title() == "NAO and SST tripole"
    assert len(ax.collections) == 2


# ---------------------------------------------------------------------------------- scorecard


def _summary(n_quantities=6) -> pd.DataFrame:
    rng = np.random.default_rng(4)
    rows = []
    for q in range(n_quantities):
        diagnostic = "nao" if q < n_quantities // 2 else "jet"
        values = {"ref": 1.0, "ctrl": 2.0, HOSTILE: 0.5 + q}
        for dataset, value in values.items():
            versus = {"ref": [None], "ctrl": ["ref"], HOSTILE: ["ctrl", "ref"]}[dataset]
            for other in versus:
                # Significant on alternate quantities: both signs occur (values set above).
                p = (
                    (0.01 if (q + len(other)) % 2 == 0 else rng.uniform(0.2, 1))
                    if other
                    else np.nan
                )
                rows.append(
                    {
                        "diagnostic": diagnostic,
                        "quantity": f"q{q}",
                        "dataset": dataset,
                        "value": value,
                        "ci_low": value - 0.1,
                        "ci_high": value + 0.1,
                        "versus": other if other else np.nan,
                        "p_value": p,
                        "significant": (p < 0.05) if other else np.nan,
                    }
                )
    return pd.DataFrame(rows)


def test_scorecard_tints_follow_significance_and_sign():
    summary = _summary()
    fig = scorecard(summary)
    (ax,) = fig.axes
    gids = [p.get_gid() for p in ax.patches]
    # Independent count: a significant comparison is red where the value exceeds the versus
    # dataset's value for the same quantity, blue where it is below.
    values = summary.drop_duplicates(["quantity", "dataset"]).set_index(["quantity", "dataset"])
    higher = lower = 0
    for row in summary[summary["significant"] == True].itertuples():  # noqa: E712
        other = values.loc[(row.quantity, row.versus), "value"]
        higher += row.value > other
        lower += row.value < other
    assert gids.count("higher") == higher and gids.count("lower") == lower
    assert higher + lower == int((summary["significant"] == True).sum())  # noqa: E712
    assert higher > 0 and lower > 0
    # Every (quantity, dataset) cell has two strips (versus ref and versus ctrl).
    assert len(gids) == 2 * 3 * 6
    texts = [t.get_text() for t in ax.texts]
    assert texts.count("2") == 6 and "5.5" in texts


def test_scorecard_height_scales_and_bad_input():
    short = scorecard(_summary(4)).get_size_inches()[1]
    tall = scorecard(_summary(40)).get_size_inches()[1]
    assert tall > short + 5
    with pytest.raises(InputError, match="p_value"):
        scorecard(_summary().drop(columns="p_value"))


# ---------------------------------------------------------------------------------- saving


def test_save_writes_valid_files_atomically_and_closes(tmp_path):
    import matplotlib.pyplot as plt

    fig = occupancy_bars(_occupancy())
    written = save(fig, tmp_path / "sub" / "occupancy.png", formats=("png", "pdf"), dpi=50)
    assert [p.name for p in written] == ["occupancy.png", "occupancy.pdf"]
    assert written[0].read_bytes()[:8] == PNG_SIGNATURE
    assert written[1].read_bytes()[:5] == b"%PDF-"
    assert sorted(p.name for p in (tmp_path / "sub").iterdir()) == [
        "occupancy.pdf",
        "occupancy.png",
    ]
    dotted = save(occupancy_bars(_occupancy()), tmp_path / "model.v2_bias", dpi=30)
    assert dotted[0].name == "model.v2_bias.png"
    managed, _ = plt.subplots()
    save(managed, tmp_path / "managed", dpi=30)
    assert not plt.fignum_exists(managed.number)


def test_save_failure_leaves_no_partial_file(tmp_path, monkeypatch):
    fig = occupancy_bars(_occupancy())

    def broken(path, **kwargs):
        with open(path, "wb") as handle:
            handle.write(b"\x89PN")  # half a file, then the writer dies
        raise OSError("disk full")

    monkeypatch.setattr(fig, "savefig", broken)
    with pytest.raises(OSError, match="disk full"):
        save(fig, tmp_path / "figure")
    assert list(tmp_path.iterdir()) == []
    with pytest.raises(ConfigError, match="formats"):
        save(occupancy_bars(_occupancy()), tmp_path / "x", formats=("gif89",))
    assert list(tmp_path.iterdir()) == []


# ---------------------------------------------------------------------------------- labels


@pytest.mark.parametrize("label", [HOSTILE, "_hidden", "a\\b $ c"])
def test_hostile_labels_render_as_plain_text(label):
    labels = ["ctrl", label]
    lag = np.arange(-3, 4)
    ccf = xr.DataArray(
        np.zeros((2, lag.size)), dims=("dataset", "lag"), coords={"dataset": labels, "lag": lag}
    )
    line_fig = cross_correlation(ccf)
    diff = _field(labels)
    diff.attrs["versus"] = label
    map_fig = difference_maps(diff, np.abs(diff) > 1, kind="response")
    for fig in (line_fig, map_fig):
        assert _render(fig)[:8] == PNG_SIGNATURE
        texts = [t.get_text() for t in _all_texts(fig)]
        assert not any(cbook.is_math_text(t) for t in texts)
    shown = _legend_texts(line_fig.axes[0])
    assert len(shown) == 2  # a leading underscore does not hide the entry
    assert shown[1].replace("\\$", "$") == label


def test_every_figure_renders_without_warnings():
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        patterns = _field(scale=20.0, units="m per unit index")
        for fig in (
            nao_patterns(patterns),
            occupancy_bars(_occupancy()),
            scorecard(_summary()),
            index_distributions({"a": np.random.default_rng(0).standard_normal(100)}),
        ):
            assert _render(fig)[:8] == PNG_SIGNATURE
