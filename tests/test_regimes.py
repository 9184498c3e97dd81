"""Weather regimes: fit, assign, match, names and classifiability (westerlies.regimes).

Synthetic fields below are invented data with planted regimes: used only for recovery tests of
known truth. External references are named beside each check.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
import xarray as xr
from sklearn.cluster import KMeans
from sklearn.decomposition import PCA
from sklearn.metrics import adjusted_rand_score
from threadpoolctl import threadpool_limits

from westerlies.errors import ConfigError, GridError, InputWarning, TimeStepError
from westerlies.regime_stats import NO_REGIME, occupancy, persistence
from westerlies.regimes import Regimes, _name_and_order, _red_noise, classifiability

LAT = np.arange(20.0, 81.0, 5.0)
LON = np.arange(-90.0, 31.0, 5.0)


def _blob(lat0: float, lon0: float, width: float = 12.0) -> np.ndarray:
    la, lo = np.meshgrid(LAT, LON, indexing="ij")
    d2 = (la - lat0) ** 2 + ((lo - lon0) * np.cos(np.deg2rad(lat0))) ** 2
    return np.exp(-d2 / (2 * width**2))


# Planted regimes (invented), m: the centres of action the naming rules look for.
PLANTED = {
    "NAO+": 150 * (_blob(40, -25) - _blob(65, -20)),
    "NAO-": 150 * (_blob(65, -20) - _blob(40, -25)),
    "Scandinavian blocking": 150 * (_blob(60, 10) - 0.5 * _blob(70, -40)),
    "Atlantic ridge": 150 * (_blob(52, -25) - 0.5 * _blob(55, 15)),
}


def _markov(n_members, n_days, k, stay, rng) -> np.ndarray:
    move = (1 - stay) / (k - 1)
    labels = np.empty((n_members, n_days), dtype=int)
    labels[:, 0] = rng.integers(k, size=n_members)
    for t in range(1, n_days):
        jump = rng.random(n_members) > stay
        step = rng.integers(1, k, size=n_members)
        labels[:, t] = np.where(jump, (labels[:, t - 1] + step) % k, labels[:, t - 1])
    assert move > 0
    return labels


def _field(values: np.ndarray, n_days: int) -> xr.DataArray:
    time = xr.date_range("2000-12-01", periods=n_days, freq="D")
    return xr.DataArray(
        values,
        dims=("member", "time", "lat", "lon"),
        coords={"member": np.arange(values.shape[0]), "time": time, "lat": LAT, "lon": LON},
        name="z500",
        attrs={"units": "m"},
    )


def planted(n_members=12, n_days=90, noise=60.0, amplitude=1.0, seed=1):
    """Daily anomalies from 4 planted regimes (Markov chain, stay 0.9) plus white noise."""
    rng = np.random.default_rng(seed)
    truth = _markov(n_members, n_days, 4, 0.9, rng)
    maps = amplitude * np.stack(list(PLANTED.values()))
    z = maps[truth] + noise * rng.standard_normal((n_members, n_days, LAT.size, LON.size))
    return _field(z, n_days), truth


def smooth_noise(n_members=6, n_days=90, seed=2):
    """Gaussian fields without clusters: random blobs of several widths (invented)."""
    rng = np.random.default_rng(seed)
    centres = [(rng.uniform(25, 75), rng.uniform(-85, 25), rng.uniform(8, 25)) for _ in range(12)]
    basis = np.stack([_blob(a, b, w) for a, b, w in centres])
    amp = rng.standard_normal((n_members, n_days, len(centres))) * np.linspace(100, 20, 12)
    z = np.einsum("mtc,cij->mtij", amp, basis) + 5 * rng.standard_normal(
        (n_members, n_days, LAT.size, LON.size)
    )
    return _field(z, n_days)


@pytest.fixture(scope="module", autouse=True)
def _one_thread():
    # Small k-means fits run much faster on one thread on a shared machine; results are equal.
    with threadpool_limits(1):
        yield


@pytest.fixture(scope="module")
def fitted():
    anoms, truth = planted()
    return anoms, truth, Regimes.fit(anoms, n_init=10, seed=0)


def _weighted_pcs(anoms: xr.DataArray, n: int) -> np.ndarray:
    """Un-normalized PCs of sqrt(cos(lat))-weighted maps, by scikit-learn's PCA (independent)."""
    w = np.sqrt(np.cos(np.deg2rad(anoms["lat"].values)))[:, None]
    x = (anoms.values * w).reshape(-1, anoms.sizes["lat"] * anoms.sizes["lon"])
    return PCA(n_components=n).fit_transform(x)


def test_labels_equal_sklearn_kmeans_on_weighted_pcs():
    # Reference: sklearn.cluster.KMeans on PCs from sklearn.decomposition.PCA of the weighted
    # data, same seed and n_init. Data without clusters, so the partition depends on the space.
    anoms = smooth_noise()
    reg = Regimes.fit(anoms, n_regimes=4, n_pcs=8, n_init=5, seed=3)
    ref = KMeans(n_clusters=4, n_init=5, random_state=3).fit(_weighted_pcs(anoms, 8)).labels_
    ours = reg.labels.values.ravel()
    assert adjusted_rand_score(ref, ours) == pytest.approx(1.0)
    # One-to-one: each of our regimes is exactly one reference cluster.
    assert len(set(zip(ours, ref, strict=True))) == 4
    # The space matters: unit-variance PCs give another partition (the test has power).
    unit = _weighted_pcs(anoms, 8)
    unit = unit / unit.std(axis=0)
    other = KMeans(n_clusters=4, n_init=5, random_state=3).fit(unit).labels_
    assert adjusted_rand_score(other, ours) < 0.95


def test_planted_regimes_recovered_and_named(fitted):
    # Reference: sklearn.metrics.adjusted_rand_score against the planted truth (known truth).
    _, truth, reg = fitted
    assert adjusted_rand_score(truth.ravel(), reg.labels.values.ravel()) > 0.98
    assert reg.names == tuple(PLANTED)  # planted in the trade's order, so names keep it
    agree = (reg.labels.values == truth).mean()
    assert agree > 0.99
    # Centroids are the planted maps (m): truncated cluster means are close to them.
    for i, name in enumerate(PLANTED):
        err = np.abs(reg.centroids.sel(regime=name).values - PLANTED[name]).max()
        assert err < 25.0, (name, err)
        assert reg.centroids["regime_label"].values[i] == i
    assert reg.centroids.attrs["units"] == "m"
    # New data assigned to the fitted regimes.
    new, new_truth = planted(n_members=6, seed=7)
    labels = reg.assign(new)
    assert adjusted_rand_score(new_truth.ravel(), labels.values.ravel()) > 0.98


def test_assign_on_fitting_data_reproduces_labels(fitted):
    anoms, _, reg = fitted
    np.testing.assert_array_equal(reg.assign(anoms).values, reg.labels.values)


def test_min_correlation_no_regime_matches_numpy_weighted_correlation(fitted):
    anoms, _, reg = fitted
    corr = reg.correlations(anoms)
    # Reference: numpy.cov with cos(lat) weights (aweights), a centred weighted correlation.
    w = np.broadcast_to(np.cos(np.deg2rad(LAT))[:, None], (LAT.size, LON.size)).ravel()
    day = anoms.isel(member=2, time=5).values.ravel()
    cen = reg.centroids.isel(regime=1).values.ravel()
    c = np.cov(day, cen, aweights=w)
    assert corr.isel(member=2, time=5, regime=1) == pytest.approx(
        c[0, 1] / np.sqrt(c[0, 0] * c[1, 1]), abs=1e-10
    )
    labels = reg.assign(anoms, min_correlation=0.6)
    best = corr.values.max(axis=-1)
    low = best < 0.6
    assert low.any() and (~low).any()
    np.testing.assert_array_equal(labels.values == NO_REGIME, low)
    assert "no regime" in list(occupancy(labels)["regime"].values)
    assert float(occupancy(labels).sum()) == pytest.approx(1.0)


def test_results_do_not_depend_on_member_order(fitted):
    anoms, _, reg = fitted
    order = np.random.default_rng(0).permutation(anoms.sizes["member"])
    other = Regimes.fit(anoms.isel(member=order), n_init=10, seed=0)
    assert other.names == reg.names
    np.testing.assert_allclose(other.centroids.values, reg.centroids.values, atol=1e-8)
    np.testing.assert_array_equal(
        other.labels.sel(member=reg.labels["member"]).values, reg.labels.values
    )
    np.testing.assert_allclose(occupancy(other.labels), occupancy(reg.labels))
    np.testing.assert_allclose(persistence(other.labels), persistence(reg.labels))


def test_own_regimes_hungarian_matches_brute_force(fitted):
    # Reference: brute force over all permutations (Kuhn 1955 assignment maximises the sum).
    _, _, reg = fitted
    new, _ = planted(n_members=8, seed=11, noise=90.0)
    match = reg.own_regimes(new)
    corr = match.correlation_matrix.values
    best = max(itertools.permutations(range(4)), key=lambda p: sum(corr[i, p[i]] for i in range(4)))
    assert match.order == best
    assert np.all(match.correlation.values > 0.95)  # planted patterns are the same
    # Reference: numpy.cov with cos(lat) aweights for one entry of the matrix.
    w = np.broadcast_to(np.cos(np.deg2rad(LAT))[:, None], (LAT.size, LON.size)).ravel()
    a = reg.centroids.isel(regime=0).values.ravel()
    b = match.own.centroids.isel(regime=2).values.ravel()
    c = np.cov(a, b, aweights=w)
    assert corr[0, 2] == pytest.approx(c[0, 1] / np.sqrt(c[0, 0] * c[1, 1]), abs=1e-10)
    np.testing.assert_array_equal(match.labels.values, reg.assign(new).values)


def test_naming_rules_on_analytic_patterns():
    # Analytic maps with one centre of action each (rules in the module docstring); shuffled
    # order, plus a pattern that fits no trade name (high over the subtropical west Atlantic).
    maps = [PLANTED[n] for n in ("Atlantic ridge", "NAO-", "Scandinavian blocking", "NAO+")]
    maps.append(150 * _blob(30, -70))
    order, names = _name_and_order(np.stack(maps), LAT, LON, np.array([0.2] * 4 + [0.2]))
    assert names == ["NAO+", "NAO-", "Scandinavian blocking", "Atlantic ridge", "regime 5"]
    assert order == [3, 1, 2, 0, 4]


def test_variance_fraction_keyword_matches_sklearn_pca(fitted):
    anoms, _, _ = fitted
    reg = Regimes.fit(anoms, variance_fraction=0.5, n_init=2)
    w = np.sqrt(np.cos(np.deg2rad(LAT)))[:, None]
    x = (anoms.values * w).reshape(-1, LAT.size * LON.size)
    # Reference: sklearn.decomposition.PCA explained_variance_ratio_ of the weighted data.
    ratio = PCA(n_components=60, svd_solver="full").fit(x).explained_variance_ratio_
    expected = int(np.searchsorted(np.cumsum(ratio), 0.5) + 1)
    assert reg.pcs_used == expected
    np.testing.assert_allclose(reg.variance_fraction.values, ratio[:expected], rtol=1e-8)
    assert reg.variance_explained >= 0.5


def test_red_noise_surrogate_keeps_lag1_and_variance():
    # Reference: statsmodels.tsa.stattools.acf; analytic AR(1) with phi = 0.8.
    from statsmodels.tsa.stattools import acf

    rng = np.random.default_rng(5)
    x = np.zeros((20000, 2))
    for t in range(1, x.shape[0]):
        x[t] = np.array([0.8, 0.3]) * x[t - 1] + rng.standard_normal(2)
    blocks = np.repeat(np.arange(200), 100)
    y = _red_noise(x, blocks, rng)
    for j, phi in enumerate((0.8, 0.3)):
        assert acf(y[:, j], nlags=1)[1] == pytest.approx(phi, abs=0.03)
        assert y[:, j].std() == pytest.approx(x[:, j].std(), rel=0.05)


def test_classifiability_finds_planted_number_of_regimes():
    # Michelangeli, Vautard and Legras (1995): planted, well separated regimes are found by
    # every partition (index near 1) and beat AR(1) red-noise surrogates. Known truth: k = 4.
    anoms, _ = planted(n_members=8, amplitude=2.0, seed=3)
    ci = classifiability(anoms, (3, 4), n_pcs=6, n_partitions=6, n_surrogates=9, seed=0)
    assert float(ci["classifiability"].sel(n_regimes=4)) > 0.99
    assert bool(ci["significant"].sel(n_regimes=4))
    assert float(ci["p_value"].sel(n_regimes=4)) == pytest.approx(0.1)
    assert float(ci["classifiability"].sel(n_regimes=3)) < float(
        ci["classifiability"].sel(n_regimes=4)
    )


def test_bad_input_raises(fitted):
    anoms, _, reg = fitted
    with pytest.raises(ConfigError):
        Regimes.fit(anoms, n_regimes=1)
    with pytest.raises(ConfigError):
        Regimes.fit(anoms, variance_fraction=1.5)
    monthly = anoms.isel(time=slice(0, 4)).assign_coords(
        time=xr.date_range("2000-01-01", periods=4, freq="MS")
    )
    with pytest.raises(TimeStepError):
        Regimes.fit(monthly)
    with pytest.raises(GridError), pytest.warns(InputWarning, match="overlap"):
        reg.assign(anoms.isel(lat=slice(0, 8)))


def test_demo_scenario_planted_occupancy_change_is_found():
    # Invented demo scenario (westerlies.synthetic, known truth): the perturbed ensemble has
    # NAO- more frequent (stationary occupancy 0.259 -> 0.444) and the other regimes less.
    from westerlies.anomalies import anomalies, climatology
    from westerlies.data import open_dataset
    from westerlies.regime_stats import OccupancyStatistic
    from westerlies.resampling import permutation_test
    from westerlies.seasons import select_season
    from westerlies.synthetic import scenario

    sc = scenario(seed=0, members=40, winters=2)
    control = open_dataset(sc["control"])["z500"]
    perturbed = open_dataset(sc["perturbed"])["z500"]
    clim = climatology(control)  # responses against the control climatology
    ctl = select_season(anomalies(control, clim), "DJF")
    per = select_season(anomalies(perturbed, clim), "DJF")
    reg = Regimes.fit(ctl, n_init=5, seed=0)
    assert reg.names == tuple(sc["truth"].regime_names)
    test = permutation_test(
        reg.assign(ctl), reg.assign(per), OccupancyStatistic(), n_resamples=199, seed=0
    )
    planted = sc["truth"].changes["occupancy_change"]  # +0.185
    change = float(test["statistic"].sel(regime="NAO-"))
    assert planted / 2 < change < planted * 1.5
    assert float(test["p_value"].sel(regime="NAO-")) <= 0.05
    assert float(test["statistic"].sel(regime="Scandinavian blocking")) < 0
