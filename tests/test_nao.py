"""The NAO index and EOF-based indices `westerlies.nao`: eofs, scikit-learn, statsmodels, scipy."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import xarray as xr

from westerlies.data import open_dataset
from westerlies.errors import GridError, InputWarning
from westerlies.nao import AZORES, ICELAND, NAO, EOFIndex, eof_index

# The eofs sample covers 80W-40E: the Hurrell domain 20-80N, 90W-40E (from memory) is cut there.
OVERLAP = dict(latitude=slice(20, 80), longitude=slice(-80, 40))


def _open_quiet(source, **kwargs) -> xr.Dataset:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", InputWarning)
        return open_dataset(source, **kwargs)


@pytest.fixture(scope="module")
def hgt_anoms() -> xr.DataArray:
    """eofs sample (NCEP/NCAR DJF Z500, one value per winter) minus its time mean, in m."""
    from eofs.examples import example_data_path

    z = _open_quiet(example_data_path("hgt_djf.nc"))["z500"].load()
    out = z - z.mean("time")
    out.attrs["units"] = "m"
    return out


@pytest.fixture(scope="module")
def nao(hgt_anoms) -> NAO:
    with pytest.warns(InputWarning, match="80W-40E"):
        return NAO.fit(hgt_anoms)


def _aligned(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    return b * np.sign(np.nansum(a * b))


def test_domain_overlap_is_named(nao):
    assert nao.domain == (20.0, 80.0, -80.0, 40.0)
    assert "80W-40E" in nao.pattern.attrs["method"]
    assert nao.pattern["lat"].values.min() == 20 and nao.pattern["lat"].values.max() == 80


def test_nao_matches_eofs_xarray_on_the_overlap(nao):
    # Independent library: eofs.xarray.Eof, sqrt(cos(lat)) weights, 20-80N, 80W-40E.
    from eofs.examples import example_data_path
    from eofs.xarray import Eof

    raw = xr.open_dataset(example_data_path("hgt_djf.nc"))["z"].isel(pressure=0).sel(**OVERLAP)
    raw = raw - raw.mean("time")
    weights = np.sqrt(np.cos(np.deg2rad(raw["latitude"].values)))[:, None]
    ref = Eof(raw, weights=weights)
    pattern = ref.eofsAsCovariance(neofs=1, pcscaling=1).values[0]
    np.testing.assert_allclose(nao.pattern.values, _aligned(nao.pattern.values, pattern), atol=1e-8)
    pc = ref.pcs(npcs=1, pcscaling=1).values[:, 0]
    mine = nao.eof.pcs.isel(member=0, mode=0).values
    np.testing.assert_allclose(mine, _aligned(mine, pc), atol=1e-10)
    np.testing.assert_allclose(nao.variance_fraction, ref.varianceFraction(4), rtol=1e-10)


def test_nao_matches_sklearn_pca_on_weighted_data(nao, hgt_anoms):
    # Independent library: sklearn.decomposition.PCA on the sqrt(cos(lat))-weighted data.
    from sklearn.decomposition import PCA

    field = hgt_anoms.sel(lat=slice(20, 80), lon=slice(-80, 40)).isel(member=0)
    w = np.sqrt(np.cos(np.deg2rad(field["lat"].values)))[:, None]
    x = (field.values * w).reshape(field.sizes["time"], -1)
    pca = PCA(n_components=4, svd_solver="full").fit(x)
    assert nao.variance_fraction.values == pytest.approx(pca.explained_variance_ratio_, rel=1e-10)
    pc = pca.transform(x)[:, 0] / np.sqrt(pca.explained_variance_[0])
    index = nao.index(hgt_anoms).isel(member=0).values
    np.testing.assert_allclose(index, _aligned(index, pc), atol=1e-10)


def test_sign_convention_low_iceland_high_azores(nao, hgt_anoms):
    # Hurrell (1995) (from memory): positive NAO = low heights near Iceland, high near the Azores.
    assert float(nao.pattern.sel(lat=ICELAND[0], lon=ICELAND[1], method="nearest")) < -20
    assert float(nao.pattern.sel(lat=AZORES[0], lon=AZORES[1], method="nearest")) > 10
    # In the raw data: winters with a positive index have lower heights near Iceland.
    index = nao.index(hgt_anoms).isel(member=0)
    iceland = hgt_anoms.isel(member=0).sel(lat=65, lon=-20)
    assert float(iceland.where(index > 0.5).mean()) < -20
    assert float(iceland.where(index < -0.5).mean()) > 20


def test_index_independent_of_grid_conventions(nao, hgt_anoms):
    # By hand: latitude descending and longitude 0..360 (a different storage of the same field).
    flipped = hgt_anoms.isel(lat=slice(None, None, -1))
    flipped = flipped.assign_coords(lon=flipped["lon"] % 360).sortby("lon")
    assert flipped["lon"].values.max() > 300 and flipped["lat"].values[0] == 90
    np.testing.assert_allclose(nao.index(flipped), nao.index(hgt_anoms), atol=1e-10)
    with pytest.warns(InputWarning):
        refit = NAO.fit(flipped)
    np.testing.assert_allclose(refit.index(hgt_anoms), nao.index(hgt_anoms), atol=1e-10)
    np.testing.assert_allclose(refit.pattern, nao.pattern, atol=1e-8)


def test_index_normalized_by_fitting_data(nao, hgt_anoms):
    index = nao.index(hgt_anoms)
    assert index.dims == ("member", "time")
    assert float(index.std(ddof=1)) == pytest.approx(1.0, rel=1e-12)
    # Another dataset is expressed in the fitting data's units, not renormalized.
    np.testing.assert_allclose(nao.index(2.0 * hgt_anoms), 2.0 * index, atol=1e-10)
    for out in (index, nao.pattern, nao.variance_fraction, nao.variance_fraction_error):
        assert {"units", "long_name", "method"} <= set(out.attrs)
    assert nao.pattern.attrs["units"] == "m"
    assert nao.variance_fraction_error[0] > 0


def test_compare_pattern_against_statsmodels_and_scipy(nao, hgt_anoms):
    # Fit on the first 40 winters, compare with the last 25 winters' own EOF.
    from scipy.spatial.distance import cosine
    from statsmodels.stats.weightstats import DescrStatsW

    with pytest.warns(InputWarning):
        early = NAO.fit(hgt_anoms.isel(time=slice(0, 40)))
    late = hgt_anoms.isel(time=slice(40, None))
    out = early.compare_pattern(late)
    fitted = out["regression_map"].sel(pattern="fitted").values.ravel()
    own = out["regression_map"].sel(pattern="own").values.ravel()
    area = np.cos(np.deg2rad(out["lat"].values))[:, None] * np.ones(out.sizes["lon"])
    # statsmodels: area-weighted Pearson correlation (centred).
    centred = DescrStatsW(np.column_stack([fitted, own]), weights=area.ravel()).corrcoef[0, 1]
    assert float(out["pattern_correlation_centred"]) == pytest.approx(centred, rel=1e-10)
    # scipy: weighted cosine distance = 1 - uncentred correlation.
    uncentred = 1.0 - cosine(fitted, own, w=area.ravel())
    assert float(out["pattern_correlation_uncentred"]) == pytest.approx(uncentred, rel=1e-10)
    assert centred > 0.8  # the NAO is the leading mode in both periods
    # Own EOF through eofs on the late winters.
    from eofs.standard import Eof

    field = late.sel(lat=slice(20, 80), lon=slice(-80, 40)).isel(member=0)
    w = np.sqrt(np.cos(np.deg2rad(field["lat"].values)))[:, None]
    ref = Eof(field.values * w)
    assert float(out["variance_fraction"].sel(pattern="own")) == pytest.approx(
        ref.varianceFraction(1)[0], rel=1e-10
    )
    assert float(out["variance_fraction"].sel(pattern="fitted")) == pytest.approx(
        float(early.variance_fraction[0])
    )
    # Centres of action of the NAO: the positive (Azores) one south of the negative (Iceland).
    lat = out["centre_lat"]
    assert (lat.sel(centre="positive") < 55).all() and (lat.sel(centre="negative") > 55).all()
    for name in out.data_vars:
        assert {"units", "long_name", "method"} <= set(out[name].attrs)


def test_compare_pattern_on_fitting_data_is_identity(nao, hgt_anoms):
    out = nao.compare_pattern(hgt_anoms)
    assert float(out["pattern_correlation_centred"]) == pytest.approx(1.0, abs=1e-12)
    assert float(out["fitted_pattern_variance_fraction"]) == pytest.approx(
        float(nao.variance_fraction[0]), rel=1e-10
    )


def test_eof_index_on_the_eofs_sst_sample_crosses_the_date_line():
    # eofs ships NDJFM Pacific SST anomalies (117.5E-97.5W, 22.5S-62.5N), land masked: the
    # leading EOF index (an ENSO index) must match eofs.standard.Eof on the same data and
    # weights. Positive when the equatorial east Pacific is warm (sign point 0N, 120W).
    from eofs.examples import example_data_path
    from eofs.standard import Eof

    sst = _open_quiet(example_data_path("sst_ndjfm_anom.nc"))["sst"].load()
    assert sst["lon"].values.min() < -170 and sst["lon"].values.max() > 170  # split by -180
    domain = (-22.5, 62.5, 117.5, -97.5)
    with warnings.catch_warnings():
        warnings.simplefilter("error", InputWarning)  # the data cover the whole domain
        fitted = EOFIndex.fit(sst, domain=domain, sign=(0.0, -120.0), name="enso")
    index = eof_index(sst, domain, sign=(0.0, -120.0))
    np.testing.assert_allclose(index, fitted.index(sst), atol=1e-12)
    raw = xr.open_dataset(example_data_path("sst_ndjfm_anom.nc"))["sst"]
    w = np.sqrt(np.cos(np.deg2rad(raw["latitude"].values)))[:, None]
    ref = Eof(raw.values * w)
    pc = ref.pcs(npcs=1, pcscaling=1)[:, 0]
    mine = index.isel(member=0).values
    np.testing.assert_allclose(mine, _aligned(mine, pc), atol=1e-10)
    assert float(fitted.pattern.sel(lat=-2.5, lon=-117.5)) > 0.5  # K per unit index
    assert np.isnan(fitted.pattern).sum() == np.isnan(sst.isel(time=0, member=0)).sum()
    assert fitted.variance_fraction[0] == pytest.approx(ref.varianceFraction(1)[0], rel=1e-10)


def test_bad_domain_and_sign_point_raise(hgt_anoms):
    with pytest.raises(GridError, match="no data"):
        NAO.fit(hgt_anoms, domain=(-60, -20, 0, 40))
    with pytest.raises(GridError, match="sign point"):
        EOFIndex.fit(hgt_anoms, domain=(20, 80, -80, 40), sign=(0.0, 100.0))


# --- recovery of planted truth (invented demo data, westerlies.synthetic) -------------------


@pytest.fixture(scope="module")
def demo():
    from westerlies.anomalies import anomalies
    from westerlies.seasons import select_season
    from westerlies.synthetic import scenario

    sc = scenario(seed=3, members=6, winters=4)
    control = _open_quiet(sc["control"])  # raw: latitude descending, longitude 0..360
    season = select_season(control, "DJF")
    return {
        "z500": anomalies(season["z500"]),
        "sst": anomalies(season["sst"]),
        "truth": sc["truth"],
        "states": sc["truth"].states["control"].sel(time=season["time"]),
        "amplitude": sc["truth"].sst_amplitude["control"].sel(time=season["time"]),
    }


def test_demo_nao_pattern_is_recovered(demo):
    # Synthetic demo scenario (known truth): planted NAO low at 65N 20W, high at 40N 25W.
    fitted = NAO.fit(demo["z500"])
    pattern = fitted.pattern
    truth = demo["truth"].nao_pattern.sel(lat=pattern["lat"], lon=pattern["lon"])
    assert np.corrcoef(pattern.values.ravel(), truth.values.ravel())[0, 1] > 0.9
    centres = fitted.compare_pattern(demo["z500"])
    lat = centres["centre_lat"].sel(pattern="fitted").values
    lon = centres["centre_lon"].sel(pattern="fitted").values
    assert abs(lat[0] - 40) <= 7.5 and abs(lon[0] + 25) <= 15  # positive: Azores high
    assert abs(lat[1] - 65) <= 7.5 and abs(lon[1] + 20) <= 15  # negative: Icelandic low
    index = fitted.index(demo["z500"])
    assert "season_year" in index.coords
    states = demo["states"]
    assert float(index.where(states == 0).mean()) > 0.5  # NAO+ days
    assert float(index.where(states == 1).mean()) < -0.5  # NAO- days


def test_demo_sst_tripole_is_recovered_with_land_mask(demo):
    # Synthetic demo scenario (known truth): tripole -55N 35W, +38N 65W, -22N 35W; land NaN.
    truth = demo["truth"].sst_tripole
    fitted = EOFIndex.fit(
        demo["sst"],
        domain=(15, 85, -90, 40),
        sign=((38.0, -65.0), (55.0, -35.0)),
        name="sst_tripole",
    )
    pattern = fitted.pattern.sel(lat=truth["lat"], lon=truth["lon"])
    np.testing.assert_array_equal(np.isnan(pattern.values), np.isnan(truth.values))
    ok = np.isfinite(truth.values)
    assert np.corrcoef(pattern.values[ok], truth.values[ok])[0, 1] > 0.9
    index = fitted.index(demo["sst"])
    assert np.corrcoef(index.values.ravel(), demo["amplitude"].values.ravel())[0, 1] > 0.7
