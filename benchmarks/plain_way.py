"""Step (c) of the scaling benchmark: the suite's numbers computed the plain way.

The way a scientist would write it, with general-purpose libraries and every resample
recomputed from the daily values of the resampled blocks (one block = one member in one
winter; the reference's blocks are its winters):

- all Z500 in memory; daily climatology per calendar day, smoothed by a local quadratic fit
  with Gaussian weights (sd 15 days, one ``numpy.polyfit`` per day); DJF anomalies;
- NAO: a full SVD through ``eofs.standard.Eof`` for every dataset (own EOF 1: variance
  fraction with its North et al. 1982 error, pattern correlation with the reference's), the
  index = projection on the reference's EOF 1 over the reference PC's standard deviation;
- jet: u at 925-700 hPa per member file, sector mean 60W-0, trapezoidal mean in pressure,
  Lanczos low-pass (10 days, 61 weights) in each block with ``numpy.convolve``, the latitude
  and speed of each day's maximum refined by a parabola; DJF kept;
- jet modes: ``scipy.stats.gaussian_kde`` at Silverman's bandwidth, modes by
  ``scipy.signal.find_peaks`` (prominence 0.02 of the highest density), minima between modes
  as the category bounds; each bootstrap replicate's density recomputed (mode intervals);
  Silverman's critical bandwidths for at most 1 and 2 modes by bisection over KDEs, with the
  smoothed block bootstrap and Hall and York's calibration; the mode-shift permutation test;
  the KS statistic with ``scipy.stats.ks_2samp`` per block permutation;
- regimes: k-means (scikit-learn) on all days of the reference's 14 PCs, every dataset
  assigned; each dataset's own EOFs and k-means for the own-regime pattern correlations;
- every resampled quantity of the suite's summary (NAO mean, standard deviation, e-folding
  time; jet latitude mean and standard deviation, speed mean, latitude and speed e-folding
  times, category occupancy; regime occupancy and persistence) with a block bootstrap
  interval, the permutation test against the baseline and the reference's percentile in the
  model distribution for reference-sized samples; the ACF curves (lags 0..30) of the NAO, jet
  latitude and speed with bootstrap bands;
- the Z500 maps: bias of each model against the reference and response against the baseline,
  each tested by permuting blocks of daily fields, with the false-discovery-rate mask.

Loops whose every iteration costs the same are timed on a subset of their iterations
(`SUBSETS`) and extrapolated linearly to the suite's number of resamples; the result JSON
records each subset, its measured and extrapolated seconds, and their sum in
``extra_for_full_resamples_s``. p-values and intervals of those loops come from the subset.
"""

from __future__ import annotations

import json
import time
import warnings
from itertools import pairwise
from pathlib import Path

import numpy as np
import workloads  # sibling module (benchmarks/ is on the path, see run.py)

G0 = 9.80665  # m s-2
#: iterations timed (out of the suite's n_resamples) for the loops that are extrapolated;
#: loops not named here run in full
SUBSETS = {
    "jet mode intervals (bootstrap KDEs)": 100,  # per dataset
    "critical bandwidth tests (smoothed bootstrap, bisection of KDEs)": 50,  # per dataset, k
    "jet mode shift (permutation KDEs)": 100,
    "Z500 map permutations (daily fields)": 100,  # per map test (3 tests)
}
_CUM_NOLEAP = np.cumsum([0, 31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30])
_RESOLUTION = 0.1  # degrees: the latitude grid of the jet densities
_PROMINENCE = 0.02  # of the highest density: the mode rule of the suite


class _Clock:
    """Named timings, and the linear extrapolation of timed subsets of resampling loops."""

    def __init__(self, n_resamples: int):
        self.n = n_resamples
        self.timings: dict[str, float] = {}
        self.loops: dict[str, dict] = {}

    def step(self, name: str, t0: float) -> None:
        self.timings[name] = self.timings.get(name, 0.0) + time.perf_counter() - t0

    def loop(self, name: str, body, n_full: int | None = None) -> list:
        """`body()` repeated SUBSETS[name] times (or n_full, default n_resamples, in full)."""
        n_full = self.n if n_full is None else n_full
        n = min(SUBSETS.get(name, n_full), n_full)
        t0 = time.perf_counter()
        out = [body() for _ in range(n)]
        measured = time.perf_counter() - t0
        entry = self.loops.setdefault(name, {"iterations": 0, "full": 0, "measured_s": 0.0})
        entry["iterations"] += n
        entry["full"] += n_full
        entry["measured_s"] += measured
        return out

    def report(self) -> dict:
        loops = {}
        extra = 0.0
        for name, e in self.loops.items():
            full_s = e["measured_s"] * e["full"] / e["iterations"]
            extra += full_s - e["measured_s"]
            loops[name] = {
                "iterations_run": e["iterations"],
                "iterations_full": e["full"],
                "measured_s": round(e["measured_s"], 2),
                "extrapolated_s": round(full_s, 2),
            }
        return {"loops": loops, "extra_for_full_resamples_s": round(extra, 2)}


# ------------------------------------------------------------------------------ reading


def _season_day(month: np.ndarray, day: np.ndarray, year_days: int) -> np.ndarray:
    """Days since 1 November; 29 February shares 28 February's day (as the suite's slots)."""
    if year_days == 360:
        return ((month - 1) * 30 + day - 1 - 300) % 360
    slot = _CUM_NOLEAP[month - 1] + day - 1
    slot = np.where((month == 2) & (day == 29), 58, slot)
    return (slot - 304) % 365


def _jet_profile(u, plev_hpa, lat, lon, opts) -> tuple[np.ndarray, np.ndarray]:
    """Sector-mean, pressure-weighted u profile (time, lat) over the jet's latitudes."""
    bottom, top = sorted(opts["levels"])
    west, east = opts["sector"]
    south, north = opts["lat_range"]
    lev = np.flatnonzero((plev_hpa >= bottom - 1e-6) & (plev_hpa <= top + 1e-6))
    ilat = np.flatnonzero((lat >= south) & (lat <= north))
    ilon = np.flatnonzero((lon >= west) & (lon <= east))
    zonal = u[:, lev][:, :, ilat][..., ilon].mean(axis=-1)  # (time, level, lat)
    p = plev_hpa[lev]
    order = np.argsort(p)
    w = np.zeros(p.size)
    w[order[1:]] += 0.5 * np.diff(p[order])  # trapezoid in pressure
    w[order[:-1]] += 0.5 * np.diff(p[order])
    profile = np.einsum("tpl,p->tl", zonal, w / w.sum())
    sort = np.argsort(lat[ilat])
    return profile[:, sort], lat[ilat][sort]


def _plain_read(files: dict[str, list[Path]], jet_opts: dict) -> dict:
    """Z500 (m) and the jet's u profile of every dataset, Nov-Mar, with day numbers and blocks."""
    import xarray as xr

    out = {}
    with xr.open_dataset(files["reference"][0]) as ds:
        z = ds["hgt500"].values.astype(np.float64)
        u = ds["uwnd"].values.astype(np.float64)
        time_index = ds.indexes["time"]
        lat, lon, level = ds["lat"].values, ds["lon"].values, ds["level"].values
    profile, jet_lat = _jet_profile(u, level, lat, lon, jet_opts)
    del u
    month = time_index.month.to_numpy()
    winter = time_index.year.to_numpy() + (month >= 11)
    out["reference"] = {
        "z": z,
        "profile": profile,
        "day": _season_day(month, time_index.day.to_numpy(), 365),
        "month": month,
        "block": winter - winter.min(),
    }
    for name in workloads.EXPERIMENTS:
        fields, profiles = [], []
        for path in files[name]:
            with xr.open_dataset(path) as ds:
                fields.append(ds["phi"].values.astype(np.float64) / G0)
                u = ds["ua"].values.astype(np.float64)
                times = ds.indexes["time"]
                raw_lat, raw_lon = ds["latitude"].values, ds["longitude"].values
                plev = ds["plev"].values / 100.0  # Pa -> hPa
            lon_180 = np.where(raw_lon >= 180.0, raw_lon - 360.0, raw_lon)
            profiles.append(_jet_profile(u, plev, raw_lat, lon_180, jet_opts)[0])
        z = np.stack(fields)[:, :, ::-1]  # (member, time, lat, lon), lat ascending
        lon_180 = np.where(raw_lon >= 180.0, raw_lon - 360.0, raw_lon)
        z = z[..., np.argsort(lon_180)]
        assert np.allclose(raw_lat[::-1], lat) and np.allclose(np.sort(lon_180), lon)
        month = np.array([t.month for t in times])
        day = _season_day(month, np.array([t.day for t in times]), 360)
        members, days = z.shape[:2]
        out[name] = {
            "z": z.reshape(members * days, *z.shape[2:]),
            "profile": np.concatenate(profiles),
            "day": np.tile(day, members),
            "month": np.tile(month, members),
            "block": np.repeat(np.arange(members), days),
        }
    return {"data": out, "lat": lat, "lon": lon, "jet_lat": jet_lat}


def _plain_anomalies(d: dict, smoothing_days: float) -> dict:
    """DJF anomalies from a local-quadratic, Gaussian-weighted calendar-day climatology."""
    n_days = d["day"].max() + 1
    grid = d["z"].shape[1:]
    sums = np.zeros((n_days, *grid))
    np.add.at(sums, d["day"], d["z"])
    counts = np.bincount(d["day"], minlength=n_days).astype(float)
    have = np.flatnonzero(counts > 0)
    means = (sums[have] / counts[have, None, None]).reshape(have.size, -1)
    clim = np.empty((n_days, means.shape[1]))
    for t in range(n_days):
        offset = have - t
        near = np.abs(offset) <= 4 * smoothing_days
        w = counts[have[near]] * np.exp(-0.5 * (offset[near] / smoothing_days) ** 2)
        fit = np.polyfit(offset[near].astype(float), means[near], 2, w=np.sqrt(w))
        clim[t] = fit[-1]  # the local quadratic at offset 0
    keep = np.isin(d["month"], (12, 1, 2))
    z = d["z"][keep]
    return {
        "anoms": z - clim.reshape(n_days, *grid)[d["day"][keep]],
        "z": z,
        "block": d["block"][keep],
    }


def _plain_jet(d: dict, jet_lat: np.ndarray, opts: dict) -> dict:
    """Daily jet latitude and speed (Lanczos low-pass in each block, parabola-refined maximum)."""
    n = (opts["n_weights"] + 1) // 2
    k = np.arange(-(n - 1), n)
    fc = 1.0 / opts["cutoff_days"]
    weights = 2 * fc * np.sinc(2 * fc * k) * np.sinc(k / n)  # Duchon (1979) with sigma factors
    weights /= weights.sum()
    half = n - 1
    filtered = np.full(d["profile"].shape, np.nan)
    for rows in _blocks(np.arange(d["block"].size), d["block"]):
        for j in range(jet_lat.size):
            filtered[rows[half:-half], j] = np.convolve(d["profile"][rows, j], weights, "valid")
    keep = np.isin(d["month"], (12, 1, 2))
    y = filtered[keep]
    i = np.clip(np.argmax(y, axis=1), 1, jet_lat.size - 2)
    raw = np.argmax(y, axis=1)
    y0, y1, y2 = (y[np.arange(len(y)), i + s] for s in (-1, 0, 1))
    curvature = y0 - 2 * y1 + y2
    refine = (raw == i) & (curvature < 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        shift = np.where(refine, 0.5 * (y0 - y2) / curvature, 0.0)
    step = jet_lat[1] - jet_lat[0]
    latitude = np.where(refine, jet_lat[i] + shift * step, jet_lat[raw])
    speed = np.where(refine, y1 - 0.25 * (y0 - y2) * shift, y[np.arange(len(y)), raw])
    return {"latitude": latitude, "speed": speed}


def _box(lat, lon, domain):
    return np.flatnonzero((lat >= domain[0]) & (lat <= domain[1])), np.flatnonzero(
        (lon >= domain[2]) & (lon <= domain[3])
    )


def _blocks(values, block) -> list:
    """Daily values split into the blocks (one member in one winter)."""
    cuts = np.flatnonzero(np.diff(block)) + 1
    return np.split(values, cuts)


# ------------------------------------------------------------------------------ daily statistics


def _acf(x: np.ndarray, block: np.ndarray, max_lag: int) -> np.ndarray:
    """ACF lags 0..max_lag, pairs inside one block, global mean, pair-count adjusted."""
    a = x - x.mean()
    var = np.mean(a * a)
    r = np.ones(max_lag + 1)
    for lag in range(1, max_lag + 1):
        same = block[lag:] == block[:-lag]
        r[lag] = np.sum(a[lag:] * a[:-lag] * same) / same.sum() / var
    return r


def _efolding(r: np.ndarray) -> float:
    """First lag where the ACF falls below 1/e, linearly interpolated (days); inf if never."""
    below = np.flatnonzero(r < np.exp(-1.0))
    if below.size == 0:
        return np.inf
    j = max(below[0], 1)
    return j - 1 + (r[j - 1] - np.exp(-1.0)) / (r[j - 1] - r[j])


def _daily_statistics(blocks: list[dict], n_jet: int, n_regimes: int, max_lag: int) -> np.ndarray:
    """Every resampled quantity of the summary, then the three ACF curves, from daily values."""
    sizes = [b["nao"].size for b in blocks]
    block = np.repeat(np.arange(len(blocks)), sizes)
    cat = {k: np.concatenate([b[k] for b in blocks]) for k in blocks[0]}
    acfs = [_acf(cat[k], block, max_lag) for k in ("nao", "jet_latitude", "jet_speed")]
    lab = cat["regime"]
    new_episode = np.r_[True, (lab[1:] != lab[:-1]) | (block[1:] != block[:-1])]
    days = np.bincount(lab, minlength=n_regimes)
    episodes = np.bincount(lab[new_episode], minlength=n_regimes)
    with np.errstate(invalid="ignore", divide="ignore"):
        persistence = days / episodes
    values = [
        cat["nao"].mean(),
        cat["nao"].std(ddof=1),
        _efolding(acfs[0]),
        cat["jet_latitude"].mean(),
        cat["jet_latitude"].std(ddof=1),
        cat["jet_speed"].mean(),
        _efolding(acfs[1]),
        _efolding(acfs[2]),
    ]
    jet_occupancy = np.bincount(cat["jet_category"], minlength=n_jet) / lab.size
    return np.concatenate([values, jet_occupancy, days / lab.size, persistence, *acfs])


def _quantities(jet_names: list[str], regime_names: list[str]) -> list[tuple[str, str]]:
    """(diagnostic, quantity) of each entry of `_daily_statistics` before the ACF curves."""
    return [
        ("NAO", "index mean (1)"),
        ("NAO", "index standard deviation (1)"),
        ("NAO", "e-folding time (days)"),
        ("jet", "latitude mean (degrees_north)"),
        ("jet", "latitude standard deviation (degrees)"),
        ("jet", "speed mean (m s-1)"),
        ("jet", "latitude e-folding time (days)"),
        ("jet", "speed e-folding time (days)"),
        *[("jet", f"{n} (fraction of days)") for n in jet_names],
        *[("regimes", f"{n} (fraction of days)") for n in regime_names],
        *[("regimes", f"{n} mean episode length (days)") for n in regime_names],
    ]


def _percentiles(reps: np.ndarray) -> np.ndarray:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        return np.nanpercentile(reps, [2.5, 97.5], axis=0)


# ------------------------------------------------------------------------------ jet densities


def _silverman(x: np.ndarray) -> float:
    sd = np.std(x, ddof=1)
    q75, q25 = np.percentile(x, [75, 25])
    return float(0.9 * min(sd, (q75 - q25) / 1.34) * x.size ** (-0.2))


def _kde(x: np.ndarray, h: float, grid: np.ndarray) -> np.ndarray:
    """Gaussian KDE with kernel standard deviation h (degrees) at the grid points."""
    from scipy.stats import gaussian_kde

    return gaussian_kde(x, bw_method=h / np.std(x, ddof=1))(grid)


def _refine(grid: np.ndarray, dens: np.ndarray, i: int) -> tuple[float, float]:
    if i <= 0 or i >= dens.size - 1:
        return float(grid[i]), float(dens[i])
    y0, y1, y2 = dens[i - 1], dens[i], dens[i + 1]
    shift = 0.5 * (y0 - y2) / (y0 - 2 * y1 + y2)
    return float(grid[i] + shift * (grid[1] - grid[0])), float(y1 - 0.25 * (y0 - y2) * shift)


def _peaks(dens: np.ndarray) -> np.ndarray:
    from scipy.signal import find_peaks

    return find_peaks(dens, prominence=_PROMINENCE * dens.max())[0]


def _basin_modes(dens: np.ndarray, grid: np.ndarray, edges: np.ndarray) -> np.ndarray:
    """Latitude of the highest peak in each basin between `edges` (NaN where none)."""
    out = np.full(edges.size - 1, np.nan)
    best = np.full(edges.size - 1, -np.inf)
    for i in _peaks(dens):
        pos, value = _refine(grid, dens, i)
        m = int(np.searchsorted(edges, pos) - 1)
        if value > best[m]:
            best[m], out[m] = value, pos
    return out


def _grid(x: np.ndarray, h: float) -> np.ndarray:
    start = int(np.floor((x.min() - 3 * h) / _RESOLUTION))
    stop = int(np.ceil((x.max() + 3 * h) / _RESOLUTION))
    return np.arange(start, stop + 1) * _RESOLUTION


def _n_modes(x: np.ndarray, h: float, window: np.ndarray) -> int:
    """Local maxima of the KDE inside the test window (grid includes one point either side)."""
    d = _kde(x, h, window)
    mid = d[1:-1]
    return int(np.sum((mid > d[:-2]) & (mid >= d[2:]) & (mid > 1e-9 * d.max())))


def _critical_bandwidth(x, k, low, high, window, rtol=1e-4) -> float:
    """Smallest bandwidth with at most k modes in the window, by bisection in log h."""
    if _n_modes(x, low, window) <= k:
        return low
    n_iter = int(np.ceil(np.log2(np.log(high / low) / np.log1p(rtol)))) + 1
    for _ in range(max(n_iter, 1)):
        mid = np.sqrt(low * high)
        if _n_modes(x, mid, window) <= k:
            high = mid
        else:
            low = mid
    return high


def _hall_york_lambda(alpha: np.ndarray) -> np.ndarray:
    # Hall and York (2001), Statistica Sinica 11, 515-536 (from memory, as the suite)
    a = alpha
    return (0.94029 * a**3 - 1.59914 * a**2 + 0.17695 * a + 0.48971) / (
        a**3 - 1.77793 * a**2 + 0.36162 * a + 0.42423
    )


def _jet_modes(lat_blocks: list, rng, clock: _Clock) -> dict:
    """Modes, minima, bootstrap mode intervals and Silverman's tests of one dataset."""
    x = np.concatenate(lat_blocks)
    h = _silverman(x)
    grid = _grid(x, h)
    dens = _kde(x, h, grid)
    peaks = _peaks(dens)
    modes = [_refine(grid, dens, i)[0] for i in peaks]
    minima = [
        _refine(grid, -dens, p + int(np.argmin(dens[p : q + 1])))[0] for p, q in pairwise(peaks)
    ]
    edges = np.concatenate([[-np.inf], minima, [np.inf]])
    nb = len(lat_blocks)

    def replicate():
        y = np.concatenate([lat_blocks[i] for i in rng.integers(0, nb, nb)])
        return _basin_modes(_kde(y, h, grid), grid, edges)

    found = np.array(clock.loop("jet mode intervals (bootstrap KDEs)", replicate))
    interval = _percentiles(found).T
    # Silverman's test: critical bandwidths, smoothed block bootstrap, Hall-York calibration
    lo_q, hi_q = np.quantile(x, [0.01, 0.99])
    window = np.arange(np.ceil(lo_q / _RESOLUTION) - 1, np.floor(hi_q / _RESOLUTION) + 2)
    window = window * _RESOLUTION
    alphas = np.round(np.arange(1, 1001) * 0.001, 3)
    lam = _hall_york_lambda(alphas)
    mean, var = x.mean(), x.var(ddof=1)
    tests = []
    for k in (1, 2):
        h_k = _critical_bandwidth(x, k, 2 * _RESOLUTION, max(np.ptp(x), 4 * _RESOLUTION), window)
        low, high = max(2 * _RESOLUTION, 0.9 * h_k * lam.min()), 1.1 * h_k * lam.max()

        def smoothed(h_k=h_k, low=low, high=high, k=k):
            y = np.concatenate([lat_blocks[i] for i in rng.integers(0, nb, nb)])
            y = mean + (y - mean + h_k * rng.standard_normal(y.size)) / np.sqrt(1 + h_k**2 / var)
            h_star = _critical_bandwidth(y, k, low, high, window)
            return 0.0 if h_star <= low else h_star / h_k

        ratios = np.array(
            clock.loop("critical bandwidth tests (smoothed bootstrap, bisection of KDEs)", smoothed)
        )
        q = (1 + np.sum(ratios[None, :] >= lam[:, None], axis=1)) / (ratios.size + 1)
        reject = np.flatnonzero(q <= alphas)
        tests.append((h_k, float(alphas[reject[0]]) if reject.size else 1.0, ratios.size))
    return {
        "bandwidth": h,
        "modes": modes,
        "minima": minima,
        "interval": interval,
        "tests": tests,
        "n_boot": len(found),
    }


# ------------------------------------------------------------------------------ the plain way


def step_plain(
    workdir: Path,
    workload: workloads.Workload,
    suite_out: Path | None,
    *,
    labels: dict[str, str],
    n_resamples: int,
    seed: int,
) -> dict:
    """The plain way (see the module docstring); returns its numbers, timings and checks.

    `labels`: dataset key ("reference", "control", "perturbed") -> the suite's label;
    `n_resamples`, `seed`: as in the suite's configuration (the other options are the
    suite's defaults, `westerlies.config.DEFAULTS`).
    """
    from eofs.standard import Eof
    from scipy.optimize import linear_sum_assignment
    from scipy.stats import ks_2samp
    from sklearn.cluster import KMeans

    from westerlies.config import DEFAULTS

    opts = DEFAULTS
    n_regimes, n_pcs = opts["regimes"]["n_regimes"], opts["regimes"]["n_pcs"]
    n_init, max_lag = opts["regimes"]["n_init"], opts["memory"]["max_lag"]
    alpha = opts["resampling"]["alpha"]
    clock = _Clock(n_resamples)
    rng = np.random.default_rng(seed)
    t0 = time.perf_counter()
    loaded = _plain_read(workloads.paths(workdir, workload), opts["jet"])
    lat, lon = loaded["lat"], loaded["lon"]
    clock.step("read", t0)
    t0 = time.perf_counter()
    data = {
        k: _plain_anomalies(v, opts["anomalies"]["smoothing_days"])
        for k, v in loaded["data"].items()
    }
    clock.step("anomalies", t0)
    t0 = time.perf_counter()
    jet = {k: _plain_jet(v, loaded["jet_lat"], opts["jet"]) for k, v in loaded["data"].items()}
    del loaded
    clock.step("jet index", t0)
    rows: list[dict] = []

    def row(diagnostic, quantity, key, value, low=np.nan, high=np.nan, versus=None, p=np.nan, n=0):
        rows.append(
            {
                "diagnostic": diagnostic,
                "quantity": quantity,
                "dataset": labels[key],
                "value": float(value),
                "ci_low": float(low),
                "ci_high": float(high),
                "versus": None if versus is None else labels[versus],
                "p_value": float(p),
                "n_resamples": int(n),
            }
        )

    # NAO: full SVD per dataset (own EOF 1), index = projection on the reference's EOF 1
    t0 = time.perf_counter()
    ilat, ilon = _box(lat, lon, opts["nao"]["domain"])
    weights = np.sqrt(np.cos(np.deg2rad(lat[ilat])))[:, None] * np.ones(ilon.size)
    coslat = np.cos(np.deg2rad(lat[ilat]))[:, None] * np.ones(ilon.size)

    def pattern_corr(a, b, area):
        w = area / area.sum()
        a = a - (a * w).sum()
        b = b - (b * w).sum()
        return (a * b * w).sum() / np.sqrt((a * a * w).sum() * (b * b * w).sum())

    own_maps = {}
    for name, d in data.items():
        solver = Eof(d["anoms"][:, ilat][:, :, ilon], weights=weights)
        vf = float(solver.varianceFraction(neigs=1)[0])
        pc = solver.pcs(npcs=1)[:, 0]
        same = d["block"][1:] == d["block"][:-1]
        r1 = np.clip(np.sum(pc[1:] * pc[:-1] * same) / np.sum(pc * pc), 0.0, 0.999)
        sizes = np.bincount(d["block"])
        n_eff = np.maximum(sizes * (1 - r1) / (1 + r1), 1.0).sum()
        err = vf * np.sqrt(2.0 / n_eff)  # North et al. (1982), N_eff from the PC's lag-1 r
        row("NAO", "variance fraction of own EOF 1 (1)", name, vf, vf - 1.96 * err, vf + 1.96 * err)
        own_maps[name] = solver.eofsAsCovariance(neofs=1, pcscaling=1)[0]
        if name == "reference":
            ref = solver
    for name in data:
        corr = pattern_corr(own_maps["reference"], own_maps[name], coslat)
        row("NAO", "pattern correlation of own EOF 1 with the fitted NAO (1)", name, abs(corr))
    eof1 = ref.eofs(neofs=1)[0]
    at = {
        p: (np.argmin(abs(lat[ilat] - p[0])), np.argmin(abs(lon[ilon] - p[1])))
        for p in ((40.0, -25.0), (65.0, -20.0))
    }  # Azores and Iceland: positive NAO, high minus low
    sign = 1.0 if eof1[at[(40.0, -25.0)]] > eof1[at[(65.0, -20.0)]] else -1.0
    ref_mean = data["reference"]["anoms"][:, ilat][:, :, ilon].mean(axis=0)
    pc_sd = ref.pcs(npcs=1)[:, 0].std(ddof=1)
    nao_index = {
        name: sign
        * ref.projectField(d["anoms"][:, ilat][:, :, ilon] - ref_mean, neofs=1)[:, 0]
        / pc_sd
        for name, d in data.items()
    }
    del ref, own_maps
    clock.step("NAO (eofs SVD)", t0)

    # regimes: k-means on the reference's 14 PCs, every dataset assigned; each one's own fit
    t0 = time.perf_counter()
    ilat, ilon = _box(lat, lon, opts["regimes"]["domain"])
    weights = np.sqrt(np.cos(np.deg2rad(lat[ilat])))[:, None] * np.ones(ilon.size)
    coslat = np.cos(np.deg2rad(lat[ilat]))[:, None] * np.ones(ilon.size)
    sub = {k: d["anoms"][:, ilat][:, :, ilon] for k, d in data.items()}
    ref = Eof(sub["reference"], weights=weights)
    km = KMeans(n_regimes, n_init=n_init, random_state=seed).fit(ref.pcs(npcs=n_pcs))
    ref_mean = sub["reference"].mean(axis=0)
    regime = {}

    def composites(x, lab):
        return np.stack([x[lab == r].mean(axis=0) for r in range(n_regimes)])

    for name, x in sub.items():
        pcs = ref.projectField(x - ref_mean, neofs=n_pcs)
        dist = ((pcs[:, None, :] - km.cluster_centers_[None]) ** 2).sum(axis=2)
        regime[name] = dist.argmin(axis=1)
    # name the clusters as the suite does (its daily labels on the reference), else by number
    to_suite, regime_names = _suite_regime_names(suite_out, labels, regime["reference"], n_regimes)
    regime = {k: to_suite[v] for k, v in regime.items()}
    fitted_maps = composites(sub["reference"], regime["reference"])
    for name, x in sub.items():
        own = Eof(x, weights=weights)
        own_km = KMeans(n_regimes, n_init=n_init, random_state=seed).fit(own.pcs(npcs=n_pcs))
        own_comp = composites(x, own_km.labels_)
        corr = np.array([[pattern_corr(f, o, coslat) for o in own_comp] for f in fitted_maps])
        r_idx, c_idx = linear_sum_assignment(corr, maximize=True)
        for r, c in zip(r_idx, c_idx, strict=True):
            row(
                "regimes",
                f"{regime_names[r]}: pattern correlation of own regime (1)",
                name,
                corr[r, c],
            )
    del sub, ref
    clock.step("regimes (eofs SVD, k-means)", t0)

    # jet modes: KDEs of each dataset; categories from the reference's density minima
    t0 = time.perf_counter()
    lat_blocks = {k: _blocks(jet[k]["latitude"], d["block"]) for k, d in data.items()}
    modes = {}
    for key in data:
        m = _jet_modes(lat_blocks[key], rng, clock)
        modes[key] = m
        row("jet", "number of modes (1)", key, len(m["modes"]))
        for i, value in enumerate(m["modes"]):
            low, high = m["interval"][i]
            row(
                "jet",
                f"mode {i + 1} latitude (degrees_north)",
                key,
                value,
                low,
                high,
                n=m["n_boot"],
            )
        for k, (h_k, p, n) in zip((1, 2), m["tests"], strict=True):
            row("jet", f"critical bandwidth, at most {k} mode(s) (degrees)", key, h_k, p=p, n=n)
    fit = modes["reference"]
    bounds = np.asarray(fit["minima"])
    jet_names = {1: ["all"], 2: ["south", "north"], 3: ["south", "central", "north"]}.get(
        bounds.size + 1, [f"position_{i + 1}" for i in range(bounds.size + 1)]
    )
    edges = np.concatenate([[-np.inf], bounds, [np.inf]])
    ctl, exp = lat_blocks["control"], lat_blocks["perturbed"]
    pooled = ctl + exp
    everything = np.concatenate(pooled)
    shift_grid = _grid(everything, fit["bandwidth"])

    def basin(blocks):
        x = np.concatenate(blocks)
        return _basin_modes(_kde(x, fit["bandwidth"], shift_grid), shift_grid, edges)

    observed = basin(exp) - basin(ctl)

    def shift_permutation():
        perm = rng.permutation(len(pooled))
        first, second = perm[: len(ctl)], perm[len(ctl) :]
        return basin([pooled[i] for i in second]) - basin([pooled[i] for i in first])

    null = np.array(clock.loop("jet mode shift (permutation KDEs)", shift_permutation))
    exceed = (np.abs(null) >= np.abs(observed) - 1e-12).sum(axis=0)
    for i, diff in enumerate(observed):
        p = (exceed[i] + 1) / (len(null) + 1)
        row(
            "jet",
            f"mode {i + 1} latitude (degrees_north)",
            "perturbed",
            diff,
            versus="control",
            p=p,
            n=len(null),
        )
    # KS statistic, p-value by permuting blocks (scipy.stats.ks_2samp on every relabelling)
    d_obs = ks_2samp(np.concatenate(ctl), np.concatenate(exp)).statistic

    def ks_permutation():
        perm = rng.permutation(len(pooled))
        a = np.concatenate([pooled[i] for i in perm[: len(ctl)]])
        b = np.concatenate([pooled[i] for i in perm[len(ctl) :]])
        return ks_2samp(a, b).statistic

    d_null = np.array(clock.loop("KS permutations (scipy ks_2samp)", ks_permutation))
    p = (np.sum(d_null >= d_obs - 1e-12) + 1) / (len(d_null) + 1)
    row(
        "jet",
        "latitude distribution, KS statistic (1)",
        "perturbed",
        d_obs,
        versus="control",
        p=p,
        n=len(d_null),
    )
    clock.step("jet modes, KS (scipy KDEs)", t0)

    # every resampled index quantity: bootstrap, permutation against the baseline, reference
    # percentile; each replicate recomputed from the daily values of the resampled blocks
    t0 = time.perf_counter()
    blocks = {}
    for key, d in data.items():
        category = np.searchsorted(bounds, jet[key]["latitude"], side="right")
        series = {
            "nao": nao_index[key],
            "jet_latitude": jet[key]["latitude"],
            "jet_speed": jet[key]["speed"],
            "jet_category": category,
            "regime": regime[key],
        }
        split = {k: _blocks(v, d["block"]) for k, v in series.items()}
        blocks[key] = [{k: split[k][b] for k in series} for b in range(len(split["nao"]))]
    n_jet = len(jet_names)
    names = _quantities(jet_names, regime_names)
    n_q = len(names)

    def stats(chosen):
        return _daily_statistics(chosen, n_jet, n_regimes, max_lag)

    estimates, acf_bands = {}, {}
    for key, bl in blocks.items():
        estimates[key] = stats(bl)
        reps = np.array(
            clock.loop(
                "index bootstrap (daily values)",
                lambda bl=bl: stats([bl[i] for i in rng.integers(0, len(bl), len(bl))]),
            )
        )
        low, high = _percentiles(reps)
        for j, (diag, q) in enumerate(names):
            row(diag, q, key, estimates[key][j], low[j], high[j], n=len(reps))
        acf_bands[key] = {
            "acf": estimates[key][n_q:].reshape(3, -1),
            "low": low[n_q:].reshape(3, -1),
            "high": high[n_q:].reshape(3, -1),
        }
    pooled = blocks["control"] + blocks["perturbed"]
    n_ctl = len(blocks["control"])
    observed = estimates["perturbed"][:n_q] - estimates["control"][:n_q]

    def index_permutation():
        perm = rng.permutation(len(pooled))
        second = stats([pooled[i] for i in perm[n_ctl:]])
        return second[:n_q] - stats([pooled[i] for i in perm[:n_ctl]])[:n_q]

    null = np.array(clock.loop("index permutations (daily values)", index_permutation))
    with np.errstate(invalid="ignore"):
        exceed = (np.abs(null) >= np.abs(observed) - 1e-12).sum(axis=0)
    for j, (diag, q) in enumerate(names):
        p = (exceed[j] + 1) / (len(null) + 1) if np.isfinite(observed[j]) else np.nan
        row(diag, q, "perturbed", observed[j], versus="control", p=p, n=len(null))
    n_ref = len(blocks["reference"])
    for key in ("control", "perturbed"):
        bl = blocks[key]
        replace = len(bl) < n_ref

        def subsample(bl=bl, replace=replace):
            pick = rng.choice(len(bl), n_ref, replace=replace)
            return stats([bl[i] for i in pick])[:n_q]

        dist = np.array(clock.loop("reference percentile samples (daily values)", subsample))
        low, high = _percentiles(dist)
        ref_value = estimates["reference"][:n_q]
        below, equal = (dist < ref_value).sum(0), (dist == ref_value).sum(0)
        b = 2 * np.minimum(below + equal, len(dist) - below)
        p = np.minimum((b + 1.0) / (len(dist) + 1.0), 1.0)
        for j, (diag, q) in enumerate(names):
            row(
                diag, q, key, ref_value[j], low[j], high[j], versus="reference", p=p[j], n=len(dist)
            )
    clock.step("index resampling (bootstrap, permutation, reference percentile)", t0)

    # Z500 maps: bias against the reference and response against the baseline, each tested by
    # permuting blocks of daily fields; FDR mask (Benjamini-Hochberg, alpha_FDR = 2 alpha)
    t0 = time.perf_counter()
    maps = {}
    for kind, first, second in (
        ("bias", "reference", "control"),
        ("bias", "reference", "perturbed"),
        ("response", "control", "perturbed"),
    ):
        z = np.concatenate([data[first]["z"], data[second]["z"]])
        n_first = data[first]["block"].max() + 1
        block = np.concatenate([data[first]["block"], data[second]["block"] + n_first])
        rows_of = _blocks(np.arange(block.size), block)
        difference = data[second]["z"].mean(axis=0) - data[first]["z"].mean(axis=0)

        def map_permutation(z=z, rows_of=rows_of, n_first=n_first):
            perm = rng.permutation(len(rows_of))
            a = np.concatenate([rows_of[i] for i in perm[:n_first]])
            b = np.concatenate([rows_of[i] for i in perm[n_first:]])
            return z[b].mean(axis=0) - z[a].mean(axis=0)

        null = np.array(clock.loop("Z500 map permutations (daily fields)", map_permutation))
        p = ((np.abs(null) >= np.abs(difference) - 1e-9).sum(axis=0) + 1) / (len(null) + 1)
        maps[f"{kind} {labels[second]}"] = {
            "difference": difference,
            "p_value": p,
            "significant": _fdr(p, 2 * alpha),
            "n_resamples": len(null),
        }
    clock.step("Z500 maps (permutations of daily fields)", t0)

    result = {
        "timings_s": {k: round(v, 2) for k, v in clock.timings.items()},
        **clock.report(),
        "rows": rows,
        "acf": {
            labels[k]: {name: np.round(v, 4).tolist() for name, v in band.items()}
            for k, band in acf_bands.items()
        },
        "maps": {
            name: {
                "difference_range_m": [float(m["difference"].min()), float(m["difference"].max())],
                "significant_fraction": float(m["significant"].mean()),
                "n_resamples": m["n_resamples"],
            }
            for name, m in maps.items()
        },
    }
    if suite_out is not None:
        t0 = time.perf_counter()
        daily = {
            labels[k]: {
                "nao": nao_index[k],
                "jet_latitude": jet[k]["latitude"],
                "regime": regime[k],
                "block": data[k]["block"],
            }
            for k in data
        }
        result["checks"] = compare_with_suite(suite_out, rows, daily, acf_bands, labels, maps)
        result["checks_s"] = round(time.perf_counter() - t0, 2)
    return result


def _fdr(p: np.ndarray, alpha_fdr: float) -> np.ndarray:
    """Benjamini-Hochberg: p <= the largest sorted p_(i) with p_(i) <= i alpha_fdr / m."""
    flat = np.sort(p.ravel())
    ok = flat <= alpha_fdr * np.arange(1, flat.size + 1) / flat.size
    if not ok.any():
        return np.zeros(p.shape, dtype=bool)
    return p <= flat[np.flatnonzero(ok)[-1]]


def _suite_regime_names(suite_out, labels, reference_labels, n_regimes):
    """Map the plain clusters to the suite's regime numbers and names (best daily agreement)."""
    if suite_out is None:
        return np.arange(n_regimes), [f"regime {i + 1}" for i in range(n_regimes)]
    from scipy.optimize import linear_sum_assignment

    suite = _suite_indices(suite_out)[labels["reference"]]["regime"]
    confusion = np.zeros((n_regimes, n_regimes))
    np.add.at(confusion, (reference_labels, suite), 1)
    r_idx, c_idx = linear_sum_assignment(confusion, maximize=True)
    to_suite = np.zeros(n_regimes, dtype=int)
    to_suite[r_idx] = c_idx
    return to_suite, _flag_names(suite_out, labels["reference"])


def _suite_indices(out: Path) -> dict[str, dict[str, np.ndarray]]:
    """The suite's daily indices (indices.nc), per dataset label, flattened member-major."""
    import netCDF4
    import xarray as xr

    with netCDF4.Dataset(out / "indices.nc") as nc:
        groups = list(nc.groups)
    suite = {}
    for g in groups:
        with xr.open_dataset(out / "indices.nc", group=g) as ds:
            suite[ds.attrs["label"]] = {
                v: ds[v].transpose("member", "time").values.ravel()
                for v in ("nao", "jet_latitude", "jet_speed", "regime")
            }
    return suite


#: absolute tolerance on a value, by the start of the quantity's name (the first match counts)
_TOLERANCES = (
    ("variance fraction", 0.005),
    ("pattern correlation", 0.01),
    ("index mean", 0.02),
    ("index standard deviation", 0.02),
    ("latitude mean", 0.1),
    ("latitude standard deviation", 0.1),
    ("speed mean", 0.1),
    ("e-folding", 1.0),
    ("latitude e-folding", 1.0),
    ("speed e-folding", 1.0),
    ("number of modes", 0.0),
    ("mode ", 1.0),
    ("critical bandwidth", 0.2),
    ("KS statistic", 0.01),
    ("fraction of days", 0.01),
    ("mean episode length", 0.2),
)


def _tolerance(quantity: str) -> float:
    for key, tol in _TOLERANCES:
        if key in quantity:
            return tol
    return np.inf


def compare_with_suite(out: Path, rows, daily, acf_bands, labels, maps) -> dict:
    """Check the plain way's numbers against the suite's output (summary.json, indices.nc).

    Every summary row of the suite is matched to the plain row with the same diagnostic,
    quantity, dataset and versus: the value must agree within the quantity's tolerance
    (`_TOLERANCES`); intervals and p-values are resampled independently (different draws,
    some on a timed subset), so for them the agreement is reported, not required.
    """
    suite_rows = json.loads((out / "summary.json").read_text())
    plain = {(r["diagnostic"], r["quantity"], r["dataset"], r["versus"]): r for r in rows}
    failed, compared, missing = [], 0, []
    significance_same, significance_total = 0, 0
    ci_close, ci_total = 0, 0
    for s in suite_rows:
        key = (s["diagnostic"], s["quantity"], s["dataset"], s["versus"])
        r = plain.get(key)
        if r is None:
            missing.append(" | ".join(str(k) for k in key))
            continue
        compared += 1
        tol = _tolerance(s["quantity"])
        if "critical bandwidth" in s["quantity"]:
            tol = 0.1 * abs(s["value"])  # 10%: the suite's density is binned on 0.1 degree
        if not abs(r["value"] - s["value"]) <= tol + 1e-9:
            failed.append(
                {
                    "row": " | ".join(str(k) for k in key),
                    "plain": r["value"],
                    "suite": s["value"],
                    "tolerance": tol,
                }
            )
        if s["ci_low"] is not None and np.isfinite(r["ci_low"]):
            ci_total += 1
            width = abs(s["ci_high"] - s["ci_low"])
            slack = 0.25 * width + tol
            ci_close += (
                abs(r["ci_low"] - s["ci_low"]) <= slack
                and abs(r["ci_high"] - s["ci_high"]) <= slack
            )
        if s["p_value"] is not None and np.isfinite(r["p_value"]):
            significance_total += 1
            significance_same += (s["p_value"] <= 0.05) == (r["p_value"] <= 0.05)
    suite = _suite_indices(out)
    daily_checks = {}
    for label, d in daily.items():
        s = suite[label]
        daily_checks[label] = {
            "nao_correlation": round(float(np.corrcoef(d["nao"], s["nao"])[0, 1]), 6),
            "jet_latitude_max_abs_difference": round(
                float(np.max(np.abs(d["jet_latitude"] - s["jet_latitude"]))), 6
            ),
            "regime_label_agreement": round(float(np.mean(d["regime"] == s["regime"])), 4),
        }
    acf_diff = max(
        float(np.max(np.abs(band["acf"][0] - _acf(suite[labels[k]]["nao"], d_block, max_lag))))
        for k, band in acf_bands.items()
        for d_block, max_lag in [(daily[labels[k]]["block"], band["acf"].shape[1] - 1)]
    )
    return {
        "summary_rows_compared": compared,
        "summary_rows_missing_in_plain": missing,
        "values_within_tolerance": compared - len(failed),
        "values_outside_tolerance": failed,
        "intervals_close": f"{ci_close}/{ci_total} (ends within a quarter width + tolerance)",
        "significance_agreement": f"{significance_same}/{significance_total} (p <= 0.05 on both)",
        "daily_indices": daily_checks,
        "nao_acf_max_abs_difference (plain ACF vs the same ACF of the suite's daily NAO)": round(
            acf_diff, 4
        ),
        "maps": "the suite writes no map values (figures only): not compared",
        "tolerances": dict(_TOLERANCES) | {"critical bandwidth": "10%"},
        "ok": not failed and not missing,
    }


def _flag_names(out: Path, label: str) -> list[str]:
    """Regime names in label order, from the suite's summary rows (occupancy order)."""
    rows = json.loads((out / "summary.json").read_text())
    return [
        r["quantity"].removesuffix(" (fraction of days)")
        for r in rows
        if r["diagnostic"] == "regimes"
        and r["dataset"] == label
        and r["versus"] is None
        and r["quantity"].endswith("(fraction of days)")
    ]
