"""Regime statistics from labels: occupancy, persistence, episodes, transitions.

Label series below are invented (Markov chains and small hand-made cases): known-truth checks.
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from westerlies.errors import InputError, MissingValueError
from westerlies.regime_stats import (
    NO_REGIME,
    OccupancyStatistic,
    PersistenceStatistic,
    apply_min_length,
    episodes,
    label_attrs,
    occupancy,
    persistence,
    transitions,
)
from westerlies.resampling import CategoryPersistence, bootstrap_ci, permutation_test


def _labels(values, season_year=None, start="2000-12-01", names=None) -> xr.DataArray:
    values = np.atleast_2d(np.asarray(values))
    time = xr.date_range(start, periods=values.shape[1], freq="D")
    da = xr.DataArray(
        values,
        dims=("member", "time"),
        coords={"member": np.arange(values.shape[0]), "time": time},
    )
    if season_year is not None:
        da = da.assign_coords(season_year=("time", np.asarray(season_year)))
    if names is not None:
        da.attrs.update(label_attrs(names))
    return da


def _chain(n_members, n_days, transition, seed) -> np.ndarray:
    """Markov chain of labels with the given transition matrix (rows: today, cols: tomorrow)."""
    rng = np.random.default_rng(seed)
    cum = np.cumsum(transition, axis=1)
    out = np.empty((n_members, n_days), dtype=int)
    out[:, 0] = rng.integers(len(transition), size=n_members)
    for t in range(1, n_days):
        u = rng.random(n_members)[:, None]
        out[:, t] = (u > cum[out[:, t - 1]]).sum(axis=1)
    return out


STAY = 0.8
P = np.array([[STAY, 0.15, 0.05], [0.1, STAY, 0.1], [0.05, 0.15, STAY]])


@pytest.fixture(scope="module")
def chain():
    return _labels(_chain(20, 3000, P, seed=4), names=["NAO+", "NAO-", "Atlantic ridge"])


def test_markov_mean_episode_length_is_one_over_one_minus_p(chain):
    # Analytic: episode lengths of a Markov chain with stay probability p are geometric with
    # mean 1 / (1 - p) and survival P(L >= d) = p**(d - 1).
    expected = 1.0 / (1.0 - STAY)
    pers = persistence(chain, edge="drop")
    np.testing.assert_allclose(pers.values, expected, rtol=0.04)
    assert pers.attrs["units"] == "days"
    eps = episodes(chain, edge="drop")
    np.testing.assert_allclose(
        eps["survival"].sel(length=[1, 2, 3, 5]).values,
        np.broadcast_to(STAY ** np.array([0, 1, 2, 4]), (3, 4)),
        atol=0.02,
    )
    np.testing.assert_allclose(eps["long_fraction"].values, STAY**4, atol=0.02)


def test_transitions_recover_the_chain_and_rows_sum_to_one(chain):
    # Known truth: the transition matrix the chain was drawn from; without self-transitions
    # P(i -> j | leave i) = P_ij / (1 - P_ii).
    tr = transitions(chain)
    np.testing.assert_allclose(tr["probability"].values, P, atol=0.01)
    np.testing.assert_allclose(tr["probability"].sum("next_regime"), 1.0)
    off = P * (1 - np.eye(3))
    np.testing.assert_allclose(
        tr["probability_no_self"].values, off / off.sum(1, keepdims=True), atol=0.03
    )
    np.testing.assert_allclose(tr["probability_no_self"].sum("next_regime"), 1.0)
    assert np.all(np.diag(tr["probability_no_self"].values) == 0)
    assert list(tr["regime"].values) == ["NAO+", "NAO-", "Atlantic ridge"]
    assert list(tr["next_regime"].values) == ["NAO+", "NAO-", "Atlantic ridge"]


def test_occupancy_sums_to_one_and_matches_stationary_distribution(chain):
    # Analytic: the stationary distribution is the left eigenvector of P for eigenvalue 1.
    occ = occupancy(chain)
    assert float(occ.sum()) == pytest.approx(1.0)
    val, vec = np.linalg.eig(P.T)
    pi = np.real(vec[:, np.argmin(np.abs(val - 1))])
    np.testing.assert_allclose(occ.values, pi / pi.sum(), atol=0.01)
    assert list(occ["regime"].values) == ["NAO+", "NAO-", "Atlantic ridge"]


def test_member_order_does_not_change_any_statistic(chain):
    small = chain.isel(time=slice(0, 200))
    shuffled = small.isel(member=np.random.default_rng(1).permutation(small.sizes["member"]))
    for f in (occupancy, persistence):
        np.testing.assert_allclose(f(shuffled).values, f(small).values)
    np.testing.assert_allclose(episodes(shuffled)["count"], episodes(small)["count"])
    np.testing.assert_allclose(transitions(shuffled)["count"], transitions(small)["count"])


def test_episodes_do_not_cross_block_edges():
    # Hand count: member 0 is [0 0 | 0 1] over winters 2001 | 2002, so regime 0 has two
    # episodes (lengths 2 and 1), both cut by a block edge; regime 1 one cut episode.
    lab = _labels([[0, 0, 0, 1]], season_year=[2001, 2001, 2002, 2002])
    np.testing.assert_allclose(persistence(lab).values, [1.5, 1.0])
    assert np.isnan(persistence(lab, edge="drop").values).all()
    tr = transitions(lab)
    np.testing.assert_allclose(tr["count"].values, [[1, 1], [0, 0]])  # 0->0 in 2001, 0->1 in 2002
    # A missing day ends an episode: [0 0 0 (gap) 0 0 0] is two episodes of 3 days.
    gap = _labels([[0] * 7]).isel(time=[0, 1, 2, 4, 5, 6])
    np.testing.assert_allclose(persistence(gap, names=["a", "b"]).values[0], 3.0)
    assert int(transitions(gap, names=["a", "b"])["count"].sum()) == 4


def test_min_length_rule_relabels_short_runs_as_no_regime():
    lab = _labels([[0, 0, 0, 1, 2, 2, 1, 1, 1, 1]])
    out = apply_min_length(lab, 2)
    np.testing.assert_array_equal(out.values, [[0, 0, 0, -1, 2, 2, 1, 1, 1, 1]])
    occ = occupancy(lab, min_length=3)
    assert list(occ["regime"].values) == ["regime 1", "regime 2", "regime 3", "no regime"]
    np.testing.assert_allclose(occ.values, [0.3, 0.4, 0.0, 0.3])
    # Neighbouring no-regime days form one episode: days 3-5 -> one no-regime run of 3.
    np.testing.assert_allclose(persistence(lab, min_length=3).values, [3.0, 4.0, np.nan, 3.0])


def test_names_from_attributes_and_no_regime_value():
    lab = _labels([[0, 1, -1, 1]], names=["NAO+", "Scandinavian blocking"])
    occ = occupancy(lab)
    assert list(occ["regime"].values) == ["NAO+", "Scandinavian blocking", "no regime"]
    assert list(occ["regime_label"].values) == [0, 1, NO_REGIME]
    np.testing.assert_allclose(occ.values, [0.25, 0.5, 0.25])


def test_block_statistics_through_the_resampling_engine(chain):
    small = chain.isel(time=slice(0, 90)).assign_coords(season_year=("time", np.full(90, 2001)))
    # The engine's own persistence (resampling.CategoryPersistence) counts episodes alike.
    ours = PersistenceStatistic().prepare(small)
    theirs = CategoryPersistence().prepare(small)
    np.testing.assert_allclose(
        ours.finish(ours.per_block(small).sum(0)), theirs.finish(theirs.per_block(small).sum(0))
    )
    ci = bootstrap_ci(small, OccupancyStatistic(), n_resamples=200, seed=0)
    np.testing.assert_allclose(ci["statistic"].values, occupancy(small).values)
    assert list(ci["regime"].values) == ["NAO+", "NAO-", "Atlantic ridge"]
    assert np.all(ci["low"].values <= ci["statistic"].values)
    # A planted occupancy change (second dataset spends more time in regime 0) is found.
    shifted = small.copy(data=np.where(small.values == 2, 0, small.values))
    test = permutation_test(small, shifted, OccupancyStatistic(), n_resamples=199, seed=0)
    assert float(test["p_value"].sel(regime="NAO+")) == pytest.approx(1 / 200)


def test_bad_labels_raise():
    with pytest.raises(InputError):
        occupancy(_labels([[0, 5, 1]]), names=["a", "b"])
    with pytest.raises(MissingValueError):
        occupancy(_labels([[0.0, np.nan, 1.0]]))
    with pytest.raises(InputError):
        persistence(_labels([[0, 1]]), edge="cut")
