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
  The two tests share each replicate's drawn blocks and normal deviates (Box and Muller 1958):
  drawing them is much of the smoothed bootstrap's cost, the costliest step with many members.
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


# Transfer-function terms below exp(-_NEGLIGIBLE) = 2e-22 of the zero-frequency term are dropped.
_NEGLIGIBLE = 50.0


def _fft_length(n_bins: int, max_bandwidth: float, step: float) -> int:
    """FFT length for `n_bins` bins: zero padding of 6 bandwidths keeps the convolution linear."""
    half = int(np.ceil(6 * max_bandwidth / step))
    return fft.next_fast_len(n_bins + 2 * half + 1, real=True)


def _n_frequencies(min_bandwidth: float, n_fft: int, step: float) -> int:
    """Number of rfft frequencies f_j = j / (n_fft step) with 2 pi^2 h^2 f_j^2 <= _NEGLIGIBLE."""
    f_max = np.sqrt(_NEGLIGIBLE / 2) / (np.pi * min_bandwidth)
    return min(n_fft // 2 + 1, int(f_max * n_fft * step) + 2)


def _transfer(bandwidth: np.ndarray, n_fft: int, step: float, n_freq: int) -> np.ndarray:
    """DFT of the Gaussian kernel sampled every `step`, at the first `n_freq` rfft frequencies.

    Exactly it is sum_m G(f + m / step), G(f) = exp(-2 pi^2 h^2 f^2), the aliases of the
    continuous transform; |m| >= 3 is below exp(-2 pi^2 (2.5 h / step)^2), nothing for h >=
    step. For 0 <= f <= 1 / (2 step) and h >= 2 step only m = 0 and m = -1 are kept: every
    other m has |f + m / step| >= 1 / step, a term below exp(-8 pi^2) = 5e-35, while m = -1
    reaches exp(-pi^2 h^2 / (2 step^2)) at the Nyquist frequency (3e-9 at h = 2 step). Below
    h = 2 step the terms m = -2..2 are all summed. Frequencies where G(f) < exp(-_NEGLIGIBLE)
    are left out by the caller (the m = -1 alias is below G there). As |spectrum| <= total
    count, the density per unit x changes by at most (1 + 2 / n_fft) (2 exp(-50) + 1e-34) /
    step: below 1e-20 per degree on a 0.1-degree grid, far under FFT round-off (1e-16 of the
    maximum). `bandwidth` has the leading shape; the result has shape (..., n_freq).
    """
    h = np.asarray(bandwidth, dtype=float)[..., None]
    freq = np.arange(n_freq) * (1.0 / (n_fft * step))  # as scipy.fft.rfftfreq
    aliases = (-1, 0) if np.min(h) >= 2 * step else (-2, -1, 0, 1, 2)
    total = 0.0
    for m in aliases:  # summed in this order, as a sum over m = -2..2 would be
        total = total + np.exp(-2 * np.pi**2 * (h * (freq + m / step)) ** 2)
    return total


#: Values per FFT pass (rows x FFT length): small arrays reused across passes are much
#: cheaper than fresh large ones.
_FFT_VALUES = 2**16


def _smooth(counts: np.ndarray, bandwidth: np.ndarray | float, step: float) -> np.ndarray:
    """Gaussian kernel density (per unit x) from binned counts along the last axis.

    `bandwidth` scalar or one per row (shape counts.shape[:-1]), at least 2 `step`. The result
    is the discrete convolution of the counts with K_h(j step) (see `_transfer` for the sampled
    kernel's DFT and what is neglected); the zero padding keeps the circular convolution from
    wrapping. Rows are transformed a few at a time through reused zero-padded buffers.
    """
    n_bins = counts.shape[-1]
    h = np.asarray(bandwidth, dtype=float)
    n_fft = _fft_length(n_bins, float(np.max(h)), step)
    n_freq = _n_frequencies(float(np.min(h)), n_fft, step)
    rows = counts.reshape(-1, n_bins)
    out = np.empty(rows.shape)
    chunk = max(1, _FFT_VALUES // n_fft)
    padded = np.zeros((min(chunk, rows.shape[0]), n_fft))
    spectrum = np.zeros((padded.shape[0], n_fft // 2 + 1), dtype=complex)  # zero above n_freq
    if h.ndim == 0:
        transfer = _transfer(h, n_fft, step, n_freq)
    else:
        row_h = np.broadcast_to(h, counts.shape[:-1]).reshape(-1)
    for a in range(0, rows.shape[0], chunk):
        part = rows[a : a + chunk]
        m = part.shape[0]
        if h.ndim:
            transfer = _transfer(row_h[a : a + m], n_fft, step, n_freq)
        padded[:m, :n_bins] = part
        np.multiply(fft.rfft(padded[:m], axis=-1)[:, :n_freq], transfer, out=spectrum[:m, :n_freq])
        dens = fft.irfft(spectrum[:m], n_fft, axis=-1)[:, :n_bins]
        np.divide(dens, part.sum(axis=-1, keepdims=True) * step, out=out[a : a + m])
    return out.reshape(counts.shape)


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
    settle: tuple[float, np.ndarray] | None = None,
) -> np.ndarray:
    """Smallest bandwidth at which each row's density has at most `k` modes, by bisection.

    `counts` is (rows, bins). Rows whose density has at most k modes at `low` get `low`; rows
    with more than k modes at `high` get `high` (the caller chooses `high` large enough or
    treats it as 'above'). The counts are transformed once; each bisection step only applies
    the transfer function of its bandwidths and transforms back. Only the bins between the
    first and last nonzero count (and the window) are kept: the density elsewhere is lower
    than at the nearest kept bin, so neither the mode count nor the row maximum changes.

    settle : (reference, thresholds), thresholds sorted. If given, a row stops as soon as no
        threshold t satisfies lo / reference <= t <= hi / reference for its bracket [lo, hi];
        its result is then the current hi. The full bisection's result lies in (lo, hi], so
        every comparison `result / reference >= t` comes out as with the full bisection; only
        use the result for such comparisons.
    """
    n_rows = counts.shape[0]
    lo = np.broadcast_to(np.asarray(low, dtype=float), (n_rows,)).copy()
    hi = np.broadcast_to(np.asarray(high, dtype=float), (n_rows,)).copy()
    used = np.flatnonzero(counts.any(axis=0))
    keep_lo = min(int(used[0]), window[0] - 1) if used.size else window[0] - 1
    keep_hi = max(int(used[-1]), window[1] + 1) if used.size else window[1] + 1
    counts = counts[:, keep_lo : keep_hi + 1]
    first, last = window[0] - keep_lo, window[1] - keep_lo
    n_keep = counts.shape[1]
    n_fft = _fft_length(n_keep, float(max(hi.max(), lo.max())), step)
    n_freq = _n_frequencies(float(min(lo.min(), hi.min())), n_fft, step)
    spectrum = fft.rfft(counts, n_fft, axis=-1)[:, :n_freq]
    norm = counts.sum(axis=-1) * step

    def at_most_k(rows: np.ndarray, h: np.ndarray) -> np.ndarray:
        dens = fft.irfft(spectrum[rows] * _transfer(h, n_fft, step, n_freq), n_fft, axis=-1)
        dens = dens[:, :n_keep] / norm[rows, None]
        return _count_modes(dens, first, last) <= k

    everything = np.arange(n_rows)
    ok_lo = at_most_k(everything, lo)
    n_iter = int(np.ceil(np.log2(np.log(np.max(hi / lo)) / np.log1p(rtol)))) + 1
    active = np.flatnonzero(~ok_lo) if settle is not None else everything
    for _ in range(max(n_iter, 1)):
        if settle is not None:
            reference, thresholds = settle
            below = np.searchsorted(thresholds, lo[active] / reference, side="left")
            above = np.searchsorted(thresholds, hi[active] / reference, side="right")
            active = active[below < above]
        if not active.size:
            break
        mid = np.sqrt(lo[active] * hi[active])
        ok = at_most_k(active, mid)
        hi[active] = np.where(ok, mid, hi[active])
        lo[active] = np.where(ok, lo[active], mid)
    return np.where(ok_lo, np.broadcast_to(np.asarray(low, dtype=float), (n_rows,)), hi)


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


def _refine_peaks(
    grid: np.ndarray, dens: np.ndarray, rows: np.ndarray, idx: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """`_refine` at interior bins `idx` of rows `rows` of a 2-D `dens`: same arithmetic."""
    y0, y1, y2 = dens[rows, idx - 1], dens[rows, idx], dens[rows, idx + 1]
    denom = y0 - 2 * y1 + y2
    flat = denom == 0
    shift = 0.5 * (y0 - y2) / np.where(flat, 1.0, denom)
    step = grid[1] - grid[0]
    pos = np.where(flat, grid[idx], grid[idx] + shift * step)
    value = np.where(flat, y1, y1 - 0.25 * (y0 - y2) * shift)
    return pos, value


def _prominences(dens: np.ndarray, rows: np.ndarray, idx: np.ndarray) -> np.ndarray:
    """Prominence of the strict local maxima (rows, idx) of a 2-D `dens`, given (in row, then
    bin order) every strict local maximum of each row that is at least as high as any of them.

    A peak's base on one side is the lowest point before higher ground (or the row's end).
    The higher ground nearest to a peak is always another listed maximum: between the lowest
    point and that ground, the highest point is a strict local maximum above the peak (rows
    with flat tops are excluded by the caller). So each base is the minimum of the stretches
    between neighbouring listed maxima, up to the nearest higher one.
    """
    n_rows, n = dens.shape
    per_row = np.bincount(rows, minlength=n_rows)
    col = np.arange(rows.size) - (np.cumsum(per_row) - per_row)[rows]  # place in its row
    # Minimum of the stretches [0, c_0), [c_0, c_1), ..., [c_last, n) of every row: each
    # maximum has the stretch before it and the one after it.
    starts = np.sort(np.concatenate([np.arange(n_rows) * n, rows * n + idx]))
    stretch = np.minimum.reduceat(dens.ravel(), starts)
    before = stretch[np.arange(rows.size) + rows]
    after = stretch[np.arange(rows.size) + rows + 1]
    height = dens[rows, idx]
    bases = []
    for side, stretches, reach in ((-1, before, col), (1, after, per_row[rows] - 1 - col)):
        base = stretches.copy()
        scan, d = np.flatnonzero(reach > 0), 1  # maxima still walking to that side
        while scan.size:
            j = scan + side * d
            lower = height[j] <= height[scan]  # not yet higher ground
            scan, j = scan[lower], j[lower]
            base[scan] = np.minimum(base[scan], stretches[j])
            d += 1
            scan = scan[reach[scan] >= d]
        bases.append(base)
    return height - np.maximum(bases[0], bases[1])


def _prominent_peaks(dens: np.ndarray, min_prominence: float) -> tuple[np.ndarray, np.ndarray]:
    """Rows and bins of the local maxima with prominence >= `min_prominence` x the row maximum.

    The rule of `scipy.signal.find_peaks(row, prominence=min_prominence * row.max())` on every
    row of a 2-D array, vectorized (see `_prominences`). A prominence is at most the height
    above the row minimum, so only strict local maxima at least the threshold above it are
    candidates. Rows with two equal neighbouring values that high (a flat top, which
    find_peaks reports once at its middle) go through find_peaks itself. Results are in row,
    then bin order.
    """
    dens = np.ascontiguousarray(dens)
    n_rows, n = dens.shape
    flat = dens.ravel()  # neighbours compared along the flattened rows: much faster than 2-D
    top, bottom = dens.max(axis=1), dens.min(axis=1)
    threshold = min_prominence * top
    mid = flat[1:-1]
    idx = np.flatnonzero((mid > flat[:-2]) & (mid > flat[2:])) + 1
    rows, idx = np.divmod(idx, n)
    keep = (idx > 0) & (idx < n - 1)  # not across a row boundary
    keep &= (dens[rows, idx] - bottom[rows]) >= threshold[rows]
    rows, idx = rows[keep], idx[keep]
    flat_top = np.zeros(n_rows, dtype=bool)
    same = flat[1:] == flat[:-1]
    if same.any():
        at_rows, at = np.divmod(np.flatnonzero(same), n)
        high = (at < n - 1) & ((dens[at_rows, at] - bottom[at_rows]) >= threshold[at_rows])
        flat_top[at_rows[high]] = True
        keep = ~flat_top[rows]
        rows, idx = rows[keep], idx[keep]
    if rows.size:
        keep = _prominences(dens, rows, idx) >= threshold[rows]
        rows, idx = rows[keep], idx[keep]
    if flat_top.any():
        found = [
            (r, signal.find_peaks(dens[r], prominence=threshold[r])[0])
            for r in np.flatnonzero(flat_top)
        ]
        rows = np.concatenate([rows, *(np.full(p.size, r) for r, p in found)])
        idx = np.concatenate([idx, *(p for _, p in found)])
        order = np.lexsort((idx, rows))
        rows, idx = rows[order], idx[order]
    return rows, idx


def _find_modes(dens: np.ndarray, min_prominence: float) -> np.ndarray:
    """Indices of local maxima whose prominence is at least `min_prominence` x the maximum."""
    return _prominent_peaks(dens[None, :], min_prominence)[1]


def _basin_modes(
    dens: np.ndarray, centres: np.ndarray, edges: np.ndarray, min_prominence: float
) -> np.ndarray:
    """Per row: the latitude of the highest qualifying peak in each basin between `edges`.

    Ties go to the southmost peak. Vectorized over rows (see `_prominent_peaks`).
    """
    n_basins = edges.size - 1
    out = np.full((dens.shape[0], n_basins), np.nan)
    rows, idx = _prominent_peaks(dens, min_prominence)
    pos, value = _refine_peaks(centres, dens, rows, idx)
    basin = np.searchsorted(edges, pos) - 1
    # Peaks come in row, then bin order, and |shift| < 1/2 bin keeps positions in that order,
    # so each (row, basin) group is one run; guard the order anyway.
    group = rows * n_basins + basin
    if np.any(group[1:] < group[:-1]):
        order = np.argsort(group, kind="stable")
        group, pos, value = group[order], pos[order], value[order]
    if group.size:
        starts = np.flatnonzero(np.r_[True, group[1:] != group[:-1]])
        best = np.maximum.reduceat(value, starts)
        run = np.cumsum(np.r_[False, group[1:] != group[:-1]])  # run number of each peak
        top = np.flatnonzero(value == best[run])
        first = top[np.r_[True, run[top[1:]] != run[top[:-1]]]]  # the first highest in a run
        out.flat[group[first]] = pos[first]
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


#: Days per pass of the smoothed bootstrap (several replicates when they are short).
_PASS_DAYS = 2**16
#: Replicates per batch of critical-bandwidth bisections.
_BATCH = 250


def _box_muller(u1: np.ndarray, u2: np.ndarray, out1: np.ndarray, out2: np.ndarray) -> None:
    """Standard normal deviates from float32 uniforms on [0, 1) (Box and Muller 1958, Ann.
    Math. Stat. 29, 610-611): r = sqrt(-2 ln(1 - u1)), out1 = r cos(2 pi u2),
    out2 = r sin(2 pi u2), two independent deviates per pair.

    About three times faster than numpy's ziggurat here, which matters when every day of
    every replicate needs a deviate (contiguous arrays: strided ones lose the vectorized
    log). `u1` and `u2` are overwritten; |out| <= 5.8 (float32 uniforms have 24 bits).
    """
    np.subtract(1, u1, out=u1)  # in (0, 1]: the logarithm is finite
    np.log(u1, out=u1)
    u1 *= -2
    np.sqrt(u1, out=u1)
    u2 *= 2 * np.pi
    np.cos(u2, out=out1)
    np.sin(u2, out=out2)
    out1 *= u1
    out2 *= u1


def _smoothed_bootstrap_counts(
    x: np.ndarray,
    blocks: np.ndarray,
    n_blocks: int,
    n_rows: int,
    rng: np.random.Generator,
    *,
    hs: Sequence[float],
    start: int,
    step: float,
    n_bins: int,
) -> np.ndarray:
    """(len(hs), n_rows, n_bins) linear-binned smoothed-bootstrap samples, one set per
    bandwidth in `hs` (see `_mode_tests`, step 2).

    The days are laid out as a table of n_blocks rows (blocks in order, each block's days in
    their order in `x`) and L columns, L the longest block; shorter rows are padded. Per
    replicate, in this order from `rng`: the drawn blocks (n_blocks integers; the replicate
    is their rows in the order drawn, M = n_blocks L slots), then q = ceil(M / 2) float32
    uniforms u1 and q uniforms u2, made standard normal by `_box_muller`; the slots' deviates
    are the q cosine ones, then the first M - q sine ones (a padding slot's deviate is
    drawn and not used). Every bandwidth uses the same drawn blocks and deviates. Member-
    seasons are nearly equal in length; blocks of very unequal length cost the longest one's
    length each.

    Positions in bins are (x - mean) a + eps b + c with a = 1 / (scale step),
    b = h / (scale step), c = mean / step - start: the same as
    `_linear_bins(mean + (x - mean + h eps) / scale, ...)` up to rounding, in fewer passes
    over buffers that are reused across replicates (fresh large arrays cost more than the
    arithmetic). Instead of clipping every position to the grid, the positions are binned
    on a grid widened to hold them all (|eps| <= 5.8) and the bins beyond the ends are added
    to the end bins, which is what clipping does; padding lands beyond the widened grid and
    is left out. A bin's right-hand shares are the sum of its positions less the bin number
    times its count (one weighted count instead of computing every fraction).
    """
    hs = np.asarray(hs, dtype=float)
    mean, var = x.mean(), x.var(ddof=1)
    scales = np.sqrt(1 + hs**2 / var)
    a_terms, b_terms = 1 / (scales * step), hs / (scales * step)
    c_term = mean / step - start
    centred = x - mean
    # Widened grid per bandwidth: wide bin = grid bin + shift, every day's position in
    # [0, width - 2] (deviates are at most 5.8 in size, `_box_muller`; 6 with a margin).
    reach = 6.0 * b_terms + 2
    shift = np.maximum(0, np.ceil(reach - c_term - centred.min() * a_terms)).astype(int)
    top = np.maximum(np.ceil(centred.max() * a_terms + c_term + reach), n_bins)
    width = (top + shift).astype(int) + 2
    # The table: gathering whole rows costs far less than repeating days one by one.
    sizes = np.bincount(blocks, minlength=n_blocks)
    length = int(sizes.max())
    padding = float(np.max((width + reach - c_term - shift) / a_terms))  # beyond every grid
    table = np.full((n_blocks, length), padding)
    order = np.argsort(blocks, kind="stable")
    slot = np.arange(x.size) - np.repeat(np.cumsum(sizes) - sizes, sizes)
    table[blocks[order], slot] = centred[order]

    slots = n_blocks * length
    pairs = (slots + 1) // 2
    per_pass = max(1, _PASS_DAYS // slots)
    days = np.empty((per_pass, n_blocks, length))
    u1, u2 = np.empty((per_pass, pairs), np.float32), np.empty((per_pass, pairs), np.float32)
    normal = np.empty((2, per_pass, pairs), np.float32)
    noise = np.empty((per_pass, slots), np.float32)
    pos, left = np.empty(per_pass * slots), np.empty(per_pass * slots, dtype=np.intp)
    term = np.empty(per_pass * slots, np.float32)
    bin_numbers = np.arange(width.max(), dtype=float)
    out = np.empty((hs.size, n_rows, n_bins))
    for first in range(0, n_rows, per_pass):
        n = min(per_pass, n_rows - first)
        for r in range(n):
            np.take(table, rng.integers(0, n_blocks, n_blocks), axis=0, out=days[r])
            rng.random(out=u1[r], dtype=np.float32)
            rng.random(out=u2[r], dtype=np.float32)
        _box_muller(u1[:n], u2[:n], normal[0, :n], normal[1, :n])
        noise[:n, :pairs] = normal[0, :n]
        noise[:n, pairs:] = normal[1, :n, : slots - pairs]
        m = n * slots
        for i in range(hs.size):
            v = np.multiply(days[:n].reshape(-1), a_terms[i], out=pos[:m])
            v += np.multiply(noise[:n].reshape(-1), float(b_terms[i]), out=term[:m])  # float32
            v += c_term + shift[i]
            np.copyto(left[:m], v, casting="unsafe")  # truncation = floor, positions are >= 0
            for r in range(n):
                at = slice(r * slots, (r + 1) * slots)
                count = np.bincount(left[at], None, width[i])[: width[i]]
                # right-hand shares: the sum of (position - left bin) over each bin's days;
                # the left bin gets the rest of each day, the next bin up its share
                right = (
                    np.bincount(left[at], v[at], width[i])[: width[i]]
                    - bin_numbers[: width[i]] * count
                )
                hist = count - right
                hist[1:] += right[:-1]
                row = out[i, first + r]
                row[1:-1] = hist[shift[i] + 1 : shift[i] + n_bins - 1]
                row[0] = hist[: shift[i] + 1].sum()  # folded: clipped to the first bin
                row[-1] = hist[shift[i] + n_bins - 1 :].sum()  # and to the last
    return out


def _mode_tests(
    x: np.ndarray,
    blocks: np.ndarray,
    n_blocks: int,
    *,
    ks: Sequence[int],
    start: int,
    step: float,
    n_bins: int,
    window: tuple[int, int],
    n_resamples: int,
    rng: np.random.Generator,
    alphas: np.ndarray,
) -> list[tuple[float, float, float]]:
    """Silverman's test of 'at most k modes' with block resampling and Hall-York calibration.

    For each k in `ks`:

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

    Returns (h_k, Silverman's p, calibrated p) per k.

    Computation: the tests for the different k share each replicate's drawn blocks and
    noise eps (common random numbers: each test on its own is the smoothed bootstrap above;
    the draws are made once instead of once per test). Replicates are drawn from `rng` one
    after another and binned in batches (`_smoothed_bootstrap_counts`); each batch's
    bisections share one FFT of the counts and a replicate stops bisecting once its
    comparisons with 1 and the lambda grid are settled (`_critical_bandwidth`, `settle`),
    which does not change the p-values.
    """
    counts = _linear_bins(x, start, step, n_bins)[None, :]
    h_hi = max(np.ptp(x), 4 * step)
    h = [float(_critical_bandwidth(counts, k, 2 * step, h_hi, step, window)[0]) for k in ks]
    if n_resamples == 0 or n_blocks < 2:
        return [(h_k, np.nan, np.nan) for h_k in h]
    lam = hall_york_lambda(alphas)
    # The p-values only compare h*_k / h_k with 1 and the lambda grid: stop bisecting a
    # replicate once those comparisons are settled.
    thresholds = np.unique(np.append(lam, 1.0))
    ratios = np.empty((len(ks), n_resamples))
    for first in range(0, n_resamples, _BATCH):
        n = min(_BATCH, n_resamples - first)
        rows = _smoothed_bootstrap_counts(
            x, blocks, n_blocks, n, rng, hs=h, start=start, step=step, n_bins=n_bins
        )
        for i, (k, h_k) in enumerate(zip(ks, h, strict=True)):
            low, high = max(2 * step, 0.9 * h_k * lam.min()), 1.1 * h_k * lam.max()
            h_star = _critical_bandwidth(
                rows[i], k, low, high, step, window, settle=(h_k, thresholds)
            )
            # h* reported at `low` means 'at most k modes at low', i.e. below every threshold.
            ratios[i, first : first + n] = np.where(h_star <= low, 0.0, h_star / h_k)
    out = []
    for h_k, ratio in zip(h, ratios, strict=True):
        p_silverman = (1 + np.sum(ratio >= 1)) / (n_resamples + 1)
        q = (1 + np.sum(ratio[None, :] >= lam[:, None], axis=1)) / (n_resamples + 1)
        reject = np.flatnonzero(q <= alphas)
        p_calibrated = float(alphas[reject[0]]) if reject.size else 1.0
        out.append((h_k, float(p_silverman), p_calibrated))
    return out


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
        band[:, out_idx] = np.quantile(replicate[:, out_idx], [tail, 1 - tail], axis=0)
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
    results = _mode_tests(
        x,
        blocks,
        n_blocks,
        ks=(1, 2),
        start=start,
        step=resolution,
        n_bins=n_bins,
        window=window,
        n_resamples=n_resamples,
        rng=rng,
        alphas=alphas,
    )

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
            "method": _mode_tests.__doc__.split("\n")[0],
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
