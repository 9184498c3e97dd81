"""Kernel density of jet latitudes: modes, a multimodality test, bands and position categories.

Methods
-------
- Gaussian kernel density, bandwidth by Silverman's rule (Silverman 1986, Density Estimation for
  Statistics and Data Analysis, eq. 3.31): h = 0.9 min(sd, IQR / 1.34) n^(-1/5), or a fixed h.
- Multimodality test after Silverman (1981), J. R. Stat. Soc. B 43, 97-99, calibrated after
  Hall and York (2001), Statistica Sinica 11, 515-536. What is done, for k = 1 and k = 2:
  the critical bandwidth h_k is the smallest bandwidth whose density has at most k local maxima
  inside a fixed interval (by default between the 1st and 99th percentiles of the data; Hall and
  York count modes on a fixed interval); a smoothed bootstrap draws whole blocks with
  replacement and adds kernel noise with Silverman's variance correction,
  y = mean + (x - mean + h_k eps) / sqrt(1 + h_k^2 / var); each replicate's critical bandwidth
  h*_k is found by bisection. Silverman's p-value is (1 + #{h*_k >= h_k}) / (B + 1). The
  calibrated test at level alpha rejects when (1 + #{h*_k >= lambda(alpha) h_k}) / (B + 1) <=
  alpha, with Hall and York's lambda(alpha) (`hall_york_lambda`, from memory); the calibrated
  p-value is the smallest alpha (grid step 0.001) at which it rejects. Hall and York derived
  lambda for k = 1; using it for k = 2 is an extension their derivation does not cover.
- Block bootstrap (Efron and Tibshirani 1993, percentile intervals): whole blocks are resampled
  (DESIGN.md principles 2 and 3), never days.

The density is computed from histograms on a fine latitude grid (linear binning, then a Gaussian
convolution by FFT), one histogram per block, so a bootstrap replicate is a weighted sum of block
histograms (W @ H) and costs one FFT.
"""

from __future__ import annotations

import itertools
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from dataclasses import replace as replace_dataclass

import numpy as np
import xarray as xr
from scipy import fft, signal

from . import seasons
from .errors import ConfigError, InputError, InputWarning, MissingValueError

__all__ = ["JetModes", "ModeLatitudes", "hall_york_lambda", "jet_modes", "silverman_bandwidth"]

#: Local maxima below this fraction of the row maximum are FFT round-off, not modes.
_TINY = 1e-9


def silverman_bandwidth(x: np.ndarray) -> float:
    """Silverman's rule of thumb (Silverman 1986, eq. 3.31): 0.9 min(sd, IQR/1.34) n^(-1/5).

    Same units as `x` (degrees for latitudes). The sample sd uses n - 1. If the IQR is zero the
    sd alone is used.
    """
    x = np.asarray(x, dtype=float)
    sd = np.std(x, ddof=1)
    q75, q25 = np.percentile(x, [75, 25])
    spread = min(sd, (q75 - q25) / 1.34) if q75 > q25 else sd
    return float(0.9 * spread * x.size ** (-0.2))


def hall_york_lambda(alpha: np.ndarray | float) -> np.ndarray:
    """Hall and York (2001) calibration factor for Silverman's test at nominal level alpha.

    lambda(alpha) = (0.94029 a^3 - 1.59914 a^2 + 0.17695 a + 0.48971)
                    / (a^3 - 1.77793 a^2 + 0.36162 a + 0.42423)          (from memory)
    about 1.13 at alpha = 0.05.
    """
    a = np.asarray(alpha, dtype=float)
    return (0.94029 * a**3 - 1.59914 * a**2 + 0.17695 * a + 0.48971) / (
        a**3 - 1.77793 * a**2 + 0.36162 * a + 0.42423
    )


# --- numpy kernels ---------------------------------------------------------------------------


def _linear_bins(x: np.ndarray, start: int, step: float, n_bins: int, weights=None) -> np.ndarray:
    """Linear binning of `x` onto centres (start + j) * step, j = 0..n_bins-1 (Wand 1994 style)."""
    pos = np.clip(x / step - start, 0, n_bins - 1 - 1e-9)
    left = np.floor(pos).astype(int)
    frac = pos - left
    w = np.ones_like(x) if weights is None else weights
    return np.bincount(left, w * (1 - frac), n_bins) + np.bincount(left + 1, w * frac, n_bins)


def _smooth(counts: np.ndarray, bandwidth: np.ndarray | float, step: float) -> np.ndarray:
    """Gaussian kernel density (per unit x) from binned counts along the last axis.

    `bandwidth` scalar or one per row (shape counts.shape[:-1]), at least `step`. The transfer
    function is the exact DFT of the sampled kernel (the Gaussian's transform summed over its
    aliases), so the result is the discrete convolution of the counts with K_h(j step); the
    zero padding keeps the circular convolution from wrapping.
    """
    n_bins = counts.shape[-1]
    h = np.asarray(bandwidth, dtype=float)
    half = int(np.ceil(6 * np.max(h) / step))
    n_fft = fft.next_fast_len(n_bins + 2 * half + 1, real=True)
    spectrum = fft.rfft(counts, n_fft, axis=-1)
    freq = fft.rfftfreq(n_fft, d=step)
    alias = freq[:, None] + np.arange(-2, 3) / step  # (freq, alias); 2 aliases suffice for h>=step
    transfer = np.exp(-2 * np.pi**2 * (h[..., None, None] * alias) ** 2).sum(axis=-1)
    dens = fft.irfft(spectrum * transfer, n_fft, axis=-1)[..., :n_bins]
    total = counts.sum(axis=-1, keepdims=True)
    return dens / (total * step)


def _count_modes(dens: np.ndarray, first: int, last: int) -> np.ndarray:
    """Local maxima per row within bins first..last (1 <= first, last <= n - 2)."""
    d = dens[..., first - 1 : last + 2]
    mid = d[..., 1:-1]
    tiny = _TINY * dens.max(axis=-1, keepdims=True)
    peak = (mid > d[..., :-2]) & (mid >= d[..., 2:]) & (mid > tiny)
    return peak.sum(axis=-1)


def _critical_bandwidth(
    counts: np.ndarray,
    k: int,
    low: np.ndarray | float,
    high: np.ndarray | float,
    step: float,
    window: tuple[int, int],
    rtol: float = 1e-4,
) -> np.ndarray:
    """Smallest bandwidth at which each row's density has at most `k` modes, by bisection.

    Rows whose density has at most k modes at `low` get `low`; rows with more than k modes at
    `high` get `high` (the caller chooses `high` large enough or treats it as 'above').
    """
    rows = counts.shape[:-1]
    lo = np.broadcast_to(np.asarray(low, dtype=float), rows).copy()
    hi = np.broadcast_to(np.asarray(high, dtype=float), rows).copy()
    ok_lo = _count_modes(_smooth(counts, lo, step), *window) <= k
    n_iter = int(np.ceil(np.log2(np.log(np.max(hi / lo)) / np.log1p(rtol)))) + 1
    for _ in range(max(n_iter, 1)):
        mid = np.sqrt(lo * hi)
        ok = _count_modes(_smooth(counts, mid, step), *window) <= k
        hi = np.where(ok, mid, hi)
        lo = np.where(ok, lo, mid)
    return np.where(ok_lo, np.broadcast_to(np.asarray(low, dtype=float), rows), hi)


def _refine(grid: np.ndarray, dens: np.ndarray, i: int) -> tuple[float, float]:
    """Parabola through bin i and its neighbours on a uniform grid: (position, value)."""
    if i <= 0 or i >= dens.size - 1:
        return float(grid[i]), float(dens[i])
    y0, y1, y2 = dens[i - 1], dens[i], dens[i + 1]
    denom = y0 - 2 * y1 + y2
    if denom == 0:
        return float(grid[i]), float(y1)
    shift = 0.5 * (y0 - y2) / denom
    step = grid[1] - grid[0]
    return float(grid[i] + shift * step), float(y1 - 0.25 * (y0 - y2) * shift)


def _find_modes(dens: np.ndarray, min_prominence: float) -> np.ndarray:
    """Indices of local maxima whose prominence is at least `min_prominence` x the maximum."""
    peaks, _ = signal.find_peaks(dens, prominence=min_prominence * dens.max())
    return peaks


def _basin_modes(
    dens: np.ndarray, centres: np.ndarray, edges: np.ndarray, min_prominence: float
) -> np.ndarray:
    """Per row: the latitude of the highest qualifying peak in each basin between `edges`."""
    out = np.full((dens.shape[0], edges.size - 1), np.nan)
    for r in range(dens.shape[0]):
        best = np.full(edges.size - 1, -np.inf)
        for i in _find_modes(dens[r], min_prominence):
            pos, value = _refine(centres, dens[r], i)
            m = int(np.searchsorted(edges, pos) - 1)
            if value > best[m]:
                best[m], out[r, m] = value, pos
    return out


@dataclass(frozen=True)
class ModeLatitudes:
    """Block statistic (`westerlies.resampling` protocol): the latitudes of the density's modes.

    Sums per block are linear-binned histograms of the block's jet latitudes on a common fine
    grid (set by `prepare` from all datasets compared), so a replicate's density is one smoothing
    of W @ H. In each replicate, mode k is the highest qualifying peak (prominence rule of
    `jet_modes`) between the fitted category bounds on either side; NaN where a basin has none.
    Make one from a fit with `JetModes.mode_statistic()`: same bandwidth, bounds and rule.
    """

    bounds: tuple[float, ...]
    bandwidth: float
    resolution: float = 0.1
    min_prominence: float = 0.02
    start: int | None = None
    n_bins: int | None = None
    name: str = "mode_latitude"
    long_name: str = "latitude of each jet density mode"
    units: str = "degrees_north"
    dim: str = "mode"

    @property
    def coords(self) -> tuple[int, ...]:
        return tuple(range(1, len(self.bounds) + 2))

    def prepare(self, *datasets: xr.DataArray) -> ModeLatitudes:
        values = np.concatenate([np.ravel(np.asarray(d.values, dtype=float)) for d in datasets])
        values = values[np.isfinite(values)]
        pad = 6 * self.bandwidth
        start = int(np.floor((values.min() - pad) / self.resolution))
        stop = int(np.ceil((values.max() + pad) / self.resolution))
        return replace_dataclass(self, start=start, n_bins=stop - start + 1)

    def per_block(self, x: xr.DataArray) -> np.ndarray:
        from .resampling import block_array

        rows = block_array(x)
        out = np.zeros((rows.shape[0], self.n_bins))
        for b, row in enumerate(rows):
            row = row[np.isfinite(row)]
            if row.size:
                out[b] = _linear_bins(row, self.start, self.resolution, self.n_bins)
        return out

    def finish(self, sums: np.ndarray) -> np.ndarray:
        sums = np.asarray(sums, dtype=float)
        flat = sums.reshape(-1, self.n_bins)
        dens = _smooth(flat, self.bandwidth, self.resolution)
        centres = (self.start + np.arange(self.n_bins)) * self.resolution
        edges = np.concatenate([[-np.inf], self.bounds, [np.inf]])
        modes = _basin_modes(dens, centres, edges, self.min_prominence)
        return modes.reshape(*sums.shape[:-1], edges.size - 1)


# --- input handling --------------------------------------------------------------------------


def _samples_by_block(latitudes) -> tuple[np.ndarray, np.ndarray, int, int]:
    """Finite latitudes, their block numbers (0..n_blocks-1), n_blocks, number of NaN dropped."""
    if not isinstance(latitudes, xr.DataArray) or "time" not in latitudes.dims:
        raise InputError.make(
            "jet_modes: latitudes",
            type(latitudes).__name__
            + (f" with dims {tuple(latitudes.dims)}" if hasattr(latitudes, "dims") else ""),
            "a DataArray on (member, time) such as jet_index(u)['latitude']",
            "pass the 'latitude' variable of jet_index, or wrap values in a DataArray with "
            "dims ('member', 'time')",
        )
    extra = set(latitudes.dims) - {"member", "time"}
    if extra:
        raise InputError.make(
            "jet_modes: latitudes",
            f"extra dims {sorted(extra)}",
            "dims (member, time) only",
            "select or stack the extra dimensions first",
        )
    da = latitudes if "member" in latitudes.dims else latitudes.expand_dims(member=[0])
    da = da.transpose("member", "time")
    values = np.asarray(da.values, dtype=float)
    ids = seasons.block_ids(da).transpose("member", "time").values
    finite = np.isfinite(values)
    x, blocks = values[finite], ids[finite]
    _, blocks = np.unique(blocks, return_inverse=True)
    n_blocks = int(blocks.max()) + 1 if blocks.size else 0
    return x, blocks.ravel(), n_blocks, int((~finite).sum())


# --- the result ------------------------------------------------------------------------------


def _category_names(n: int) -> tuple[str, ...]:
    names = {1: ("all",), 2: ("south", "north"), 3: ("south", "central", "north")}
    return names.get(n, tuple(f"position_{i + 1}" for i in range(n)))


@dataclass(frozen=True)
class JetModes:
    """Kernel density of jet latitudes with its modes, test, bands and categories.

    Attributes
    ----------
    density : DataArray on `latitude` (degrees_north), probability density per degree.
    density_band : DataArray (bound, latitude): block-bootstrap percentile band of the density
        at the same bandwidth, bound = "lower", "upper".
    modes : DataArray on `mode`: latitudes (degrees_north) of the local maxima whose prominence
        is at least `min_prominence` x the highest density, south to north.
    mode_density : DataArray on `mode`, density at each mode (per degree).
    mode_interval : DataArray (mode, bound): block-bootstrap percentile interval of each mode
        latitude; in each replicate the mode is the highest qualifying peak between the fitted
        minima on either side.
    mode_support : DataArray on `mode`: fraction of replicates with such a peak.
    minima : DataArray on `minimum`: latitudes of the lowest density between neighbouring modes;
        they bound the position categories.
    test : Dataset on `max_modes` (1, 2): `critical_bandwidth` (degrees), `p_value`
        (Hall-York calibrated) and `p_value_silverman` (uncalibrated) for the null hypothesis
        "at most max_modes modes".
    bandwidth : kernel bandwidth in degrees.
    n_samples, n_blocks, n_missing : days used, blocks, NaN days dropped.
    """

    density: xr.DataArray
    density_band: xr.DataArray
    modes: xr.DataArray
    mode_density: xr.DataArray
    mode_interval: xr.DataArray
    mode_support: xr.DataArray
    minima: xr.DataArray
    test: xr.Dataset
    bandwidth: float
    n_samples: int
    n_blocks: int
    n_missing: int
    confidence: float
    min_prominence: float

    @property
    def categories(self) -> tuple[str, ...]:
        """Names of the position categories, south to north."""
        return _category_names(self.minima.size + 1)

    @property
    def bounds(self) -> np.ndarray:
        """Category bounds in degrees_north (the density minima of the fitting dataset)."""
        return np.asarray(self.minima.values, dtype=float)

    def categorize(self, latitudes: xr.DataArray) -> xr.DataArray:
        """Category number (0 = southmost) of each latitude; -1 where the latitude is NaN.

        A latitude equal to a bound goes to the category north of it.
        """
        values = np.asarray(latitudes.values, dtype=float)
        label = np.searchsorted(self.bounds, values, side="right")
        label = np.where(np.isfinite(values), label, -1)
        out = latitudes.copy(data=label)
        out.attrs = {
            "long_name": "jet position category",
            "units": "1",
            "categories": list(self.categories),
            "bounds_degrees_north": list(map(float, self.bounds)),
        }
        out.name = "jet_category"
        return out

    def occupancy(self, latitudes: xr.DataArray, *, per_block: bool = False) -> xr.DataArray:
        """Fraction of days in each category, on the bounds of this fit.

        Parameters
        ----------
        latitudes : DataArray (member, time), any dataset (e.g. another experiment).
        per_block : if True, return day counts per (block, category) instead: the additive
            per-block statistic for resampling tests.
        """
        x, blocks, n_blocks, _ = _samples_by_block(latitudes)
        label = np.searchsorted(self.bounds, x, side="right")
        n_cat = len(self.categories)
        attrs = {
            "categories": list(self.categories),
            "bounds_degrees_north": list(map(float, self.bounds)),
            "method": "jet position categories bounded by the kernel-density minima of the "
            "fitting dataset",
        }
        if per_block:
            counts = np.zeros((n_blocks, n_cat), dtype=int)
            np.add.at(counts, (blocks, label), 1)
            return xr.DataArray(
                counts,
                dims=("block", "category"),
                coords={"category": list(self.categories)},
                name="days",
                attrs={"long_name": "days in each jet position category", "units": "1", **attrs},
            )
        counts = np.bincount(label, minlength=n_cat).astype(float)
        frac = counts / counts.sum() if counts.sum() else counts * np.nan
        return xr.DataArray(
            frac,
            dims="category",
            coords={"category": list(self.categories)},
            name="occupancy",
            attrs={"long_name": "jet position occupancy", "units": "1", **attrs},
        )

    def mode_statistic(self) -> ModeLatitudes:
        """The mode latitudes as a block statistic on this fit's bandwidth, bounds and rule, for
        `bootstrap_ci` and `permutation_test` (e.g. the shift of each mode between datasets)."""
        return ModeLatitudes(
            tuple(map(float, self.bounds)),
            float(self.bandwidth),
            min_prominence=self.min_prominence,
        )

    def three_modes_supported(self, alpha: float = 0.05) -> bool:
        """Three fitted modes and the calibrated test rejects 'at most two modes' at `alpha`."""
        p = float(self.test["p_value"].sel(max_modes=2))
        return self.modes.size >= 3 and p <= alpha

    def to_dataset(self) -> xr.Dataset:
        """Everything in one Dataset (writable to netCDF)."""
        ds = xr.Dataset(
            {
                "density": self.density,
                "density_band": self.density_band,
                "mode_latitude": self.modes,
                "mode_density": self.mode_density,
                "mode_interval": self.mode_interval,
                "mode_support": self.mode_support,
                "minimum_latitude": self.minima,
                **{name: self.test[name] for name in self.test.data_vars},
            }
        )
        ds.attrs = {
            "method": self.density.attrs["method"],
            "bandwidth_degrees": self.bandwidth,
            "n_samples": self.n_samples,
            "n_blocks": self.n_blocks,
            "n_missing": self.n_missing,
            "confidence": self.confidence,
            "min_prominence": self.min_prominence,
        }
        return ds


# --- the public function ---------------------------------------------------------------------


def _mode_test(
    x: np.ndarray,
    blocks: np.ndarray,
    n_blocks: int,
    *,
    k: int,
    start: int,
    step: float,
    n_bins: int,
    window: tuple[int, int],
    n_resamples: int,
    rng: np.random.Generator,
    alphas: np.ndarray,
) -> tuple[float, float, float]:
    """Silverman's test of 'at most k modes' with block resampling and Hall-York calibration.

    1. h_k: smallest Gaussian-kernel bandwidth with at most k modes inside the test interval
       (Hall and York count modes on a fixed interval, which keeps tail bumps out).
    2. Smoothed bootstrap with Silverman's variance correction: draw n_blocks blocks with
       replacement and, for every day of the drawn blocks,
       y = mean + (x - mean + h_k eps) / sqrt(1 + h_k^2 / var), eps ~ N(0, 1),
       mean and var those of the data. For each replicate, its critical bandwidth h*_k.
    3. Silverman's p-value: (1 + #{h*_k >= h_k}) / (B + 1).
       Calibrated p-value (Hall and York 2001): the test at level alpha rejects when
       (1 + #{h*_k >= lambda(alpha) h_k}) / (B + 1) <= alpha; the p-value reported is the
       smallest alpha on a grid of 0.001 at which it rejects (1 if none).
    """
    counts = _linear_bins(x, start, step, n_bins)[None, :]
    h_hi = max(np.ptp(x), 4 * step)
    h_k = float(_critical_bandwidth(counts, k, 2 * step, h_hi, step, window)[0])
    if n_resamples == 0 or n_blocks < 2:
        return h_k, np.nan, np.nan
    mean, var = x.mean(), x.var(ddof=1)
    scale = np.sqrt(1 + h_k**2 / var)
    lam = hall_york_lambda(alphas)
    low, high = max(2 * step, 0.9 * h_k * lam.min()), 1.1 * h_k * lam.max()
    ratios = np.empty(n_resamples)
    chunk = 50
    for first in range(0, n_resamples, chunk):
        rows = []
        for _ in range(min(chunk, n_resamples - first)):
            # Whole blocks with replacement: each day repeated as often as its block is drawn.
            drawn = np.bincount(rng.integers(0, n_blocks, n_blocks), minlength=n_blocks)
            resampled = np.repeat(x, drawn[blocks])
            noise = rng.standard_normal(resampled.size, dtype=np.float32)
            y = mean + (resampled - mean + h_k * noise) / scale
            rows.append(_linear_bins(y, start, step, n_bins))
        h_star = _critical_bandwidth(np.array(rows), k, low, high, step, window)
        # h* reported at `low` means 'at most k modes at low', i.e. below every threshold.
        ratios[first : first + len(rows)] = np.where(h_star <= low, 0.0, h_star / h_k)
    p_silverman = (1 + np.sum(ratios >= 1)) / (n_resamples + 1)
    q = (1 + np.sum(ratios[None, :] >= lam[:, None], axis=1)) / (n_resamples + 1)
    reject = np.flatnonzero(q <= alphas)
    p_calibrated = float(alphas[reject[0]]) if reject.size else 1.0
    return h_k, float(p_silverman), p_calibrated


def jet_modes(
    latitudes: xr.DataArray,
    bandwidth: str | float = "silverman",
    *,
    grid: Sequence[float] | None = None,
    resolution: float = 0.1,
    min_prominence: float = 0.02,
    n_resamples: int = 1000,
    confidence: float = 0.95,
    test_interval: Sequence[float] = (0.01, 0.99),
    seed: int | np.random.Generator | None = 0,
) -> JetModes:
    """Kernel density of daily jet latitudes, its modes and a test for the number of modes.

    Parameters
    ----------
    latitudes : DataArray on (member, time), degrees_north, e.g. `jet_index(u)["latitude"]`
        after season selection. NaN days are dropped. Blocks: `westerlies.seasons.block_ids`
        (one member in one season; each member is one block without `season_year`).
    bandwidth : "silverman" (Silverman 1986, eq. 3.31) or a fixed bandwidth in degrees.
    grid : (south, north) of the returned density in degrees_north; default the data range
        widened by three bandwidths.
    resolution : spacing of the latitude grid and histogram bins in degrees (0.1 by default,
        well below any sensible bandwidth; the bandwidth must be at least twice it).
    min_prominence : a local maximum is a mode when its prominence (height above the higher of
        the two lowest points separating it from higher ground, `scipy.signal.find_peaks`) is
        at least this fraction of the highest density. A choice of this package.
    n_resamples : block-bootstrap replicates for the bands, mode intervals and the test; 0 skips
        them (NaN results).
    confidence : level of the percentile bands and intervals.
    test_interval : quantiles of the data bounding the interval on which the test counts modes.
    seed : int or numpy Generator.

    Returns
    -------
    JetModes (see its attributes); `occupancy(latitudes)` applies its categories to any dataset.
    """
    x, blocks, n_blocks, n_missing = _samples_by_block(latitudes)
    if x.size < 10 or np.ptp(x) == 0:
        raise MissingValueError.make(
            "jet_modes: latitudes",
            f"{x.size} finite value(s)" + (" all equal" if x.size and np.ptp(x) == 0 else ""),
            "at least 10 finite, varying latitudes",
            "check the jet index for missing days",
        )
    if not 0 < resolution <= 1:
        raise ConfigError.make(
            "resolution", repr(resolution), "a grid spacing in degrees in (0, 1]", "use 0.1"
        )
    if isinstance(bandwidth, str):
        if bandwidth != "silverman":
            raise ConfigError.make(
                "bandwidth",
                repr(bandwidth),
                "'silverman' or a number of degrees",
                "use bandwidth='silverman'",
            )
        h = silverman_bandwidth(x)
        h_text = f"Silverman (1986) rule, {h:.3f} degrees"
    else:
        h = float(bandwidth)
        h_text = f"fixed, {h:g} degrees"
    if not h >= 2 * resolution:
        raise ConfigError.make(
            "bandwidth",
            f"{h:g} degrees",
            f"at least twice the resolution ({resolution:g})",
            "use a finer 'resolution' or a wider bandwidth",
        )
    if not 0 < confidence < 1 or n_resamples < 0:
        raise ConfigError.make(
            "confidence / n_resamples",
            f"{confidence!r} / {n_resamples!r}",
            "a level in (0, 1) and a non-negative number of replicates",
            "use e.g. confidence=0.95, n_resamples=1000",
        )
    if n_resamples and n_blocks < 2:
        warnings.warn(
            "jet_modes: the data are a single block (one member, one season), so no block "
            "bootstrap is possible; bands, intervals and p-values are NaN",
            InputWarning,
            stacklevel=2,
        )
    rng = np.random.default_rng(seed)

    # Fine grid of bin centres j * resolution, wide enough for the kernel and the bootstrap.
    sd = float(np.std(x, ddof=1))
    south, north = (x.min() - 3 * h, x.max() + 3 * h) if grid is None else sorted(grid)
    pad = 6 * max(h, sd)
    start = int(np.floor(min(south, x.min() - pad) / resolution))
    stop = int(np.ceil(max(north, x.max() + pad) / resolution))
    n_bins = stop - start + 1
    centres = (start + np.arange(n_bins)) * resolution
    out_idx = np.flatnonzero(
        (centres >= south - 1e-9 * resolution) & (centres <= north + 1e-9 * resolution)
    )
    block_counts = np.zeros((n_blocks, n_bins))
    for b in range(n_blocks):
        block_counts[b] = _linear_bins(x[blocks == b], start, resolution, n_bins)
    total = block_counts.sum(axis=0)
    dens = _smooth(total, h, resolution)

    # Modes, minima between them, categories.
    peaks = _find_modes(dens, min_prominence)
    mode_pos = [_refine(centres, dens, i) for i in peaks]
    minima_idx = [p + int(np.argmin(dens[p : q + 1])) for p, q in itertools.pairwise(peaks)]
    minima_pos = [_refine(centres, -dens, i)[0] for i in minima_idx]

    # Block bootstrap: W @ H, one density per replicate at the fitted bandwidth.
    band = np.full((2, n_bins), np.nan)
    interval = np.full((len(peaks), 2), np.nan)
    support = np.full(len(peaks), np.nan)
    tail = (1 - confidence) / 2
    if n_resamples and n_blocks >= 2:
        weights = rng.multinomial(n_blocks, np.full(n_blocks, 1 / n_blocks), size=n_resamples)
        replicate = _smooth(weights @ block_counts, h, resolution)
        band = np.quantile(replicate, [tail, 1 - tail], axis=0)
        edges = np.concatenate([[-np.inf], minima_pos, [np.inf]])
        found = _basin_modes(replicate, centres, edges, min_prominence)  # per fitted basin
        support = np.mean(np.isfinite(found), axis=0)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN columns stay NaN
            interval = np.nanquantile(found, [tail, 1 - tail], axis=0).T

    # Multimodality test on the interval between the chosen quantiles of the data.
    lo_q, hi_q = np.quantile(x, sorted(test_interval))
    window = (
        max(1, int(np.searchsorted(centres, lo_q))),
        min(n_bins - 2, int(np.searchsorted(centres, hi_q))),
    )
    alphas = np.round(np.arange(1, 1001) * 0.001, 3)
    results = [
        _mode_test(
            x,
            blocks,
            n_blocks,
            k=k,
            start=start,
            step=resolution,
            n_bins=n_bins,
            window=window,
            n_resamples=n_resamples,
            rng=rng,
            alphas=alphas,
        )
        for k in (1, 2)
    ]

    lat_attrs = {"units": "degrees_north", "long_name": "jet latitude"}
    grid_coord = {"latitude": ("latitude", np.round(centres[out_idx], 10), lat_attrs)}
    method = (
        f"Gaussian kernel density of jet latitudes, bandwidth {h_text}, linear binning on a "
        f"{resolution:g}-degree grid; modes: local maxima with prominence >= "
        f"{min_prominence:g} x the highest density; block bootstrap ({n_resamples} "
        f"replicates, {n_blocks} blocks, percentile {confidence:g}); multimodality test after "
        "Silverman (1981) with Hall and York (2001) calibration"
    )
    density = xr.DataArray(
        dens[out_idx],
        dims="latitude",
        coords=grid_coord,
        name="density",
        attrs={
            "units": "degree-1",
            "long_name": "probability density of jet latitude",
            "method": method,
            "bandwidth_degrees": h,
        },
    )
    bound = {"bound": ["lower", "upper"]}
    density_band = xr.DataArray(
        band[:, out_idx],
        dims=("bound", "latitude"),
        coords={**bound, **grid_coord},
        name="density_band",
        attrs={
            "units": "degree-1",
            "long_name": f"block-bootstrap {confidence:g} band of the jet latitude density",
        },
    )
    mode_coord = {"mode": np.arange(len(peaks))}
    modes = xr.DataArray(
        [p for p, _ in mode_pos],
        dims="mode",
        coords=mode_coord,
        name="mode_latitude",
        attrs={**lat_attrs, "long_name": "latitude of a density mode"},
    )
    test = xr.Dataset(
        {
            "critical_bandwidth": (
                "max_modes",
                [r[0] for r in results],
                {"units": "degrees", "long_name": "critical bandwidth"},
            ),
            "p_value": (
                "max_modes",
                [r[2] for r in results],
                {
                    "units": "1",
                    "long_name": "p-value of 'at most max_modes modes', "
                    "Hall and York (2001) calibration",
                },
            ),
            "p_value_silverman": (
                "max_modes",
                [r[1] for r in results],
                {
                    "units": "1",
                    "long_name": "p-value of 'at most max_modes "
                    "modes', Silverman (1981), uncalibrated",
                },
            ),
        },
        coords={"max_modes": [1, 2]},
        attrs={
            "method": _mode_test.__doc__.split("\n")[0],
            "n_resamples": n_resamples,
            "interval_degrees_north": [float(lo_q), float(hi_q)],
        },
    )
    return JetModes(
        density=density,
        density_band=density_band,
        modes=modes,
        mode_density=xr.DataArray(
            [v for _, v in mode_pos],
            dims="mode",
            coords=mode_coord,
            name="mode_density",
            attrs={"units": "degree-1", "long_name": "density at the mode"},
        ),
        mode_interval=xr.DataArray(
            interval,
            dims=("mode", "bound"),
            coords={**mode_coord, **bound},
            name="mode_interval",
            attrs={
                **lat_attrs,
                "long_name": f"block-bootstrap {confidence:g} interval of the mode latitude",
            },
        ),
        mode_support=xr.DataArray(
            support,
            dims="mode",
            coords=mode_coord,
            name="mode_support",
            attrs={"units": "1", "long_name": "fraction of bootstrap replicates with the mode"},
        ),
        minima=xr.DataArray(
            minima_pos,
            dims="minimum",
            coords={"minimum": np.arange(len(minima_pos))},
            name="minimum_latitude",
            attrs={**lat_attrs, "long_name": "latitude of the density minimum between modes"},
        ),
        test=test,
        bandwidth=h,
        n_samples=int(x.size),
        n_blocks=n_blocks,
        n_missing=n_missing,
        confidence=confidence,
        min_prominence=min_prominence,
    )
