"""The EOF solver `westerlies.eof` against eofs, scikit-learn and statsmodels; fast vs exact."""

from __future__ import annotations

import warnings

import dask.array as dsa
import numpy as np
import pytest
import xarray as xr

from westerlies import eof
from westerlies.data import open_dataset
from westerlies.errors import ConfigError, CoordinateError, InputWarning, MissingValueError
from westerlies.seasons import select_season

N_MODES = 4


@pytest.fixture(scope="module")
def hgt_anoms() -> xr.DataArray:
    """eofs sample (NCEP/NCAR DJF Z500, one value per winter) minus its time mean, in m."""
    from eofs.examples import example_data_path

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", InputWarning)
        z = open_dataset(example_data_path("hgt_djf.nc"))["z500"].load()
    out = z - z.mean("time")
    out.attrs["units"] = "m"
    return out


def _sqrt_coslat(da: xr.DataArray) -> np.ndarray:
    coslat = np.cos(np.deg2rad(da["lat"].values)).clip(0, None)
    return np.sqrt(coslat)[:, None] * np.ones(da.sizes["lon"])


def _aligned(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """b with the sign that matches a (EOF signs are arbitrary between solvers)."""
    return b * np.sign(np.nansum(a * b))


@pytest.mark.parametrize("method", ["exact", "fast"])
def test_hgt_matches_eofs_xarray(hgt_anoms, method):
    # Independent library: eofs.xarray.Eof with sqrt(cos(lat)) weights on the raw eofs file
    # (same field and weights: the check covers normalization, weights and solver).
    from eofs.examples import example_data_path
    from eofs.xarray import Eof

    raw = xr.open_dataset(example_data_path("hgt_djf.nc"))["z"].isel(pressure=0)
    raw = raw - raw.mean("time")
    coslat = np.cos(np.deg2rad(raw["latitude"].values)).clip(0, None)
    ref = Eof(raw, weights=np.sqrt(coslat)[:, None])
    ours = eof.fit(hgt_anoms, n_modes=N_MODES, method=method)

    ref_patterns = ref.eofsAsCovariance(neofs=N_MODES, pcscaling=1).values  # m per unit PC
    ref_pcs = ref.pcs(npcs=N_MODES, pcscaling=1).values
    np.testing.assert_allclose(ours.variance_fraction, ref.varianceFraction(N_MODES), rtol=1e-10)
    np.testing.assert_allclose(ours.eigenvalues, ref.eigenvalues(N_MODES), rtol=1e-10)
    # eofs returns NaN at the pole, where the weight is zero; ours is the regression map there.
    assert np.isfinite(ours.patterns).all()
    ok = np.isfinite(ref_patterns[0])
    assert ok[:-1].all()
    for k in range(N_MODES):
        mine = ours.patterns.isel(mode=k).values  # same lat/lon order as the file
        np.testing.assert_allclose(mine[ok], _aligned(mine[ok], ref_patterns[k][ok]), atol=1e-8)
        pc = ours.pcs.isel(member=0, mode=k).values
        np.testing.assert_allclose(pc, _aligned(pc, ref_pcs[:, k]), atol=1e-10)


def test_hgt_matches_sklearn_pca(hgt_anoms):
    # Independent library: sklearn.decomposition.PCA on the sqrt(cos(lat))-weighted data matrix.
    from sklearn.decomposition import PCA

    x = (hgt_anoms.isel(member=0).values * _sqrt_coslat(hgt_anoms)).reshape(65, -1)
    pca = PCA(n_components=N_MODES, svd_solver="full").fit(x)
    scores = pca.transform(x) / np.sqrt(pca.explained_variance_)
    ours = eof.fit(hgt_anoms, n_modes=N_MODES, method="fast")
    np.testing.assert_allclose(ours.variance_fraction, pca.explained_variance_ratio_, rtol=1e-10)
    vectors = ours.eofs.values.reshape(N_MODES, -1)
    for k in range(N_MODES):
        np.testing.assert_allclose(vectors[k], _aligned(vectors[k], pca.components_[k]), atol=1e-10)
        pc = ours.pcs.isel(member=0, mode=k).values
        np.testing.assert_allclose(pc, _aligned(pc, scores[:, k]), atol=1e-10)


def test_pcs_have_unit_variance_and_projection_reproduces_them(hgt_anoms):
    # Definition (issue 3): PCs unit variance (ddof=1) on the fitting data; project() of the
    # fitting data returns them.
    ours = eof.fit(hgt_anoms, n_modes=N_MODES)
    np.testing.assert_allclose(ours.pcs.std(["member", "time"], ddof=1), 1.0, rtol=1e-12)
    np.testing.assert_allclose(ours.project(hgt_anoms), ours.pcs, atol=1e-10)
    # A flipped grid (lat descending, lon 0..360) gives the same PCs.
    flipped = hgt_anoms.isel(lat=slice(None, None, -1))
    flipped = flipped.assign_coords(lon=flipped["lon"] % 360).sortby("lon")
    np.testing.assert_allclose(ours.project(flipped), ours.pcs, atol=1e-10)
    for name in ("patterns", "pcs", "eigenvalues", "variance_fraction", "eigenvalue_error"):
        assert {"units", "long_name", "method"} <= set(getattr(ours, name).attrs)
    assert ours.patterns.attrs["units"] == "m"


def test_north_errors_match_eofs_north_test_for_independent_winters(hgt_anoms):
    # North et al. (1982) through eofs' northTest: with a season_year coordinate each winter is
    # its own block, so N_eff = N = 65 and the errors must equal eofs' lambda * sqrt(2 / N).
    from eofs.standard import Eof

    winters = select_season(hgt_anoms, "DJF")
    assert winters["season_year"].size == 65
    ours = eof.fit(winters, n_modes=N_MODES)
    x = hgt_anoms.isel(member=0).values * _sqrt_coslat(hgt_anoms)
    ref = Eof(x)
    np.testing.assert_allclose(ours.n_effective, 65.0)
    np.testing.assert_allclose(ours.eigenvalue_error, ref.northTest(N_MODES), rtol=1e-10)
    errors = ref.northTest(N_MODES + 1)
    values = ref.eigenvalues(N_MODES + 1)
    # North et al. (1982) rule of thumb: not separable where neighbouring error bars overlap.
    apart = values[:-1] - errors[:-1] > values[1:] + errors[1:]
    expected = np.r_[True, apart[:-1]] & apart
    np.testing.assert_array_equal(ours.separable, expected[:N_MODES])


def test_effective_samples_follow_bretherton_for_one_block(hgt_anoms):
    # Bretherton et al. (1999), J. Climate 12: N_eff = N (1 - r1) / (1 + r1) for an AR(1) mean;
    # r1 from statsmodels' acf of each PC (one member, no season label: one block).
    from statsmodels.tsa.stattools import acf

    ours = eof.fit(hgt_anoms, n_modes=N_MODES)
    for k in range(N_MODES):
        r1 = max(acf(ours.pcs.isel(member=0, mode=k).values, nlags=1)[1], 0.0)
        assert ours.lag1_autocorrelation[k] == pytest.approx(r1, abs=1e-10)
        assert ours.n_effective[k] == pytest.approx(65 * (1 - r1) / (1 + r1), rel=1e-10)
    assert float(ours.lag1_autocorrelation[0]) > 0.1  # the NAO PC has interannual memory


def _synthetic(n_member: int, n_time: int, n_lat: int, n_lon: int, seed: int = 0):
    """Known truth: 12 smooth modes with well separated variances plus white noise (m)."""
    rng = np.random.default_rng(seed)
    lat = np.linspace(20, 80, n_lat)
    lon = np.linspace(-90, 40, n_lon)
    yy, xx = np.meshgrid(np.deg2rad(lat - 20) * 1.5, np.deg2rad(lon + 90) * 1.3, indexing="ij")
    basis = np.array(
        [np.cos(a * yy + 0.3 * a) * np.sin(b * xx + 1) for a in range(1, 4) for b in range(1, 5)]
    )
    amplitude = 60.0 / np.arange(1, 13) ** 0.8
    series = rng.standard_normal((n_member * n_time, 12)) * amplitude
    field = series @ basis.reshape(12, -1) + 5.0 * rng.standard_normal(
        (n_member * n_time, n_lat * n_lon)
    )
    da = xr.DataArray(
        field.reshape(n_member, n_time, n_lat, n_lon),
        dims=("member", "time", "lat", "lon"),
        coords={
            "member": np.arange(n_member),
            "time": np.arange(n_time).astype("datetime64[D]"),
            "lat": lat,
            "lon": lon,
        },
        attrs={"units": "m"},
    )
    return da


def test_fast_path_matches_exact_path_on_large_field():
    # Analytic equivalence (issue 3): SVD (eofs) and the one-pass covariance/eigh path, and the
    # dask chunk-by-chunk path, must give the same leading ten modes.
    da = _synthetic(12, 400, 25, 41)
    exact = eof.fit(da, n_modes=10, method="exact")
    fast = eof.fit(da, n_modes=10, method="fast")
    lazy = eof.fit(da.chunk({"member": 3}), n_modes=10, method="fast")
    assert "eofs.standard.Eof" in exact.method and "covariance" in fast.method
    for other in (fast, lazy):
        a = exact.patterns.values.reshape(10, -1)
        b = other.patterns.values.reshape(10, -1)
        correlation = [np.corrcoef(a[k], b[k])[0, 1] for k in range(10)]
        assert min(correlation) > 0.9999
        np.testing.assert_allclose(other.variance_fraction, exact.variance_fraction, atol=1e-6)
        np.testing.assert_allclose(other.pcs, exact.pcs, atol=1e-6)


def test_chunk_kernels_on_dask_match_plain_numpy_sums():
    # The dask path runs the numpy kernels once per row chunk (uneven chunks here) and sums
    # the parts; checked against the sums written out directly in numpy (analytic
    # definitions: missing values count as zero, projection of centred data).
    rng = np.random.default_rng(3)
    x = rng.normal(size=(230, 17))
    x[rng.random(x.shape) < 0.05] = np.nan
    filled = np.where(np.isnan(x), 0.0, x)
    lazy = dsa.from_array(x, chunks=((50, 90, 7, 83), (10, 7)))
    total, xtx, count = eof._moments(lazy, cross=True)
    np.testing.assert_allclose(total, filled.sum(axis=0), rtol=1e-12)
    np.testing.assert_allclose(xtx, filled.T @ filled, rtol=1e-12)
    np.testing.assert_array_equal(count, np.isnan(x).sum(axis=0))
    valid = np.arange(17) % 4 != 0
    mean, vectors = rng.normal(size=valid.sum()), rng.normal(size=(valid.sum(), 3))
    out, bad = eof._project_matrix(lazy, valid, mean, vectors)
    np.testing.assert_allclose(out, filled[:, valid] @ vectors - mean @ vectors, rtol=1e-12)
    np.testing.assert_array_equal(bad, np.isnan(x[:, valid]).any(axis=1))


def test_land_mask_is_left_out_like_eofs(hgt_anoms):
    # eofs.standard.Eof drops grid points missing at every time; ours must agree there and put
    # NaN in the patterns.
    from eofs.standard import Eof

    masked = hgt_anoms.copy()
    masked[:, :, 3:7, 10:20] = np.nan
    ref = Eof(masked.isel(member=0).values * _sqrt_coslat(masked))
    for method in ("exact", "fast"):
        ours = eof.fit(masked, n_modes=3, method=method)
        assert np.isnan(ours.patterns.values[:, 3:7, 10:20]).all()
        assert np.isfinite(ours.patterns.values[:, 8:, :]).all()
        np.testing.assert_allclose(ours.variance_fraction, ref.varianceFraction(3), rtol=1e-10)
        pcs = ref.pcs(npcs=3, pcscaling=1)
        for k in range(3):
            mine = ours.pcs.isel(member=0, mode=k).values
            np.testing.assert_allclose(mine, _aligned(mine, pcs[:, k]), atol=1e-10)


def test_time_varying_missing_values_raise_unless_filled(hgt_anoms):
    gappy = hgt_anoms.copy()
    gappy[0, 5, 10, 10] = np.nan
    for method in ("exact", "fast"):
        with pytest.raises(MissingValueError, match="vary in time"):
            eof.fit(gappy, n_modes=2, method=method)
    filled = eof.fit(gappy, n_modes=2, missing="fill")
    zeroed = eof.fit(gappy.fillna(0.0), n_modes=2)  # "fill" means a zero anomaly
    np.testing.assert_allclose(filled.pcs, zeroed.pcs, atol=1e-10)
    fitted = eof.fit(hgt_anoms, n_modes=2)
    with pytest.raises(MissingValueError):
        fitted.project(gappy)


def test_bad_input_raises_input_errors(hgt_anoms):
    with pytest.raises(ConfigError, match="method"):
        eof.fit(hgt_anoms, method="svd")
    with pytest.raises(ConfigError, match="n_modes"):
        eof.fit(hgt_anoms, n_modes=65)
    with pytest.raises(CoordinateError):
        eof.fit(hgt_anoms.isel(lon=0))
    with pytest.raises(CoordinateError, match="extra"):
        eof.fit(hgt_anoms.expand_dims(plev=[500.0, 850.0]))
    weights = xr.DataArray(dsa.ones(3), dims="lat")
    with pytest.raises(ConfigError):
        eof.fit(hgt_anoms, weights=weights)
