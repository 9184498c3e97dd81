"""The NAO index and other EOF-based indices on a common basis.

Method: Hurrell (1995), Science 269, 676-679; Hurrell and Deser (2009), J. Marine Systems 78,
28-41: the leading EOF of winter pressure or height anomalies over 20-80N, 90W-40E (from memory),
samples pooled over members and time, area weights sqrt(cos(latitude)) (common practice). The
index of any dataset is its projection on the fitted EOF, divided by the standard deviation of
the fitting data's index, so the fitting data have unit variance (ddof=1) and other datasets are
in its units.

Sign convention: a positive NAO means low heights near Iceland and high heights near the Azores.
The sign is fixed by the regression pattern's difference between the grid points nearest the
Azores (38N, 25W) and Iceland (65N, 20W) (both from memory): pattern(Azores) - pattern(Iceland)
> 0 in the positive phase.

Fit once on the reference (`NAO.fit`), then apply `index` to every dataset; `compare_pattern`
puts a dataset's own leading EOF beside the fitted one. `EOFIndex` and `eof_index` do the same for
any EOF-based index (for example an SST tripole from winter SST anomalies).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import xarray as xr

from . import eof as _eof
from .errors import ConfigError, GridError, InputWarning

__all__ = ["AZORES", "HURRELL_DOMAIN", "ICELAND", "NAO", "EOFIndex", "eof_index"]

#: (lat_min, lat_max, lon_min, lon_max) after Hurrell (1995) (from memory).
HURRELL_DOMAIN = (20.0, 80.0, -90.0, 40.0)
#: (lat, lon) of the NAO's centres of action used for the sign (from memory).
ICELAND = (65.0, -20.0)
AZORES = (38.0, -25.0)

Point = tuple[float, float]
#: None (eof.fit's rule), a point where the pattern is positive, or (high point, low point).
Sign = Point | tuple[Point, Point] | None


@dataclass(frozen=True)
class EOFIndex:
    """An EOF-based index fitted on one dataset, to be applied to any dataset.

    Attributes
    ----------
    eof : EOFResult with the chosen sign applied to every mode it fixes.
    mode : the mode (1 = leading) that defines the index.
    domain : (lat_min, lat_max, lon_min, lon_max) actually used (the overlap of the asked domain
        with the data), degrees_north and degrees_east.
    name, long_name : names given to the index.
    method : text of the ``method`` attribute carried by every output.
    """

    eof: _eof.EOFResult
    mode: int
    domain: tuple[float, float, float, float]
    name: str
    long_name: str
    method: str

    @classmethod
    def fit(
        cls,
        anoms: xr.DataArray,
        *,
        domain: tuple[float, float, float, float],
        mode: int = 1,
        sign: Sign = None,
        n_modes: int = 4,
        weights: str | xr.DataArray | None = "sqrt_coslat",
        method: _eof.Method = "auto",
        missing: _eof.Missing = "raise",
        name: str = "eof_index",
        long_name: str | None = None,
        _stacklevel: int = 3,
    ) -> EOFIndex:
        """Fit the EOFs of `anoms` over `domain` and keep mode `mode` as the index pattern.

        Parameters
        ----------
        anoms : DataArray (member, time, lat, lon), anomalies (daily, monthly or one value per
            season), canonical form; samples pooled over member and time.
        domain : (lat_min, lat_max, lon_min, lon_max), degrees. lon_min > lon_max crosses the
            date line. Where the data cover only part of it the overlap is used, with an
            `InputWarning` naming it.
        mode : mode number (1 = leading) that defines the index.
        sign : None keeps `eof.fit`'s sign; a point (lat, lon) makes the pattern positive there;
            a pair (high, low) of points makes pattern(high) - pattern(low) positive.
        n_modes : modes fitted (at least `mode`; one more is computed for separability).
        weights, method, missing : as in `westerlies.eof.fit`.
        name, long_name : names of the index in the outputs.
        """
        if not isinstance(mode, (int, np.integer)) or mode < 1:
            raise ConfigError.make(
                "mode",
                repr(mode),
                "an integer >= 1 (1 = leading EOF)",
                "give the mode number counting from 1",
            )
        data = _eof._prepare(anoms, "anoms")
        data, used = _select_domain(data, domain, name, _stacklevel)
        result = _eof.fit(
            data, n_modes=max(n_modes, mode), weights=weights, method=method, missing=missing
        )
        signs = np.ones(result.n_modes)
        signs[mode - 1] = _sign_of(result.patterns.sel(mode=mode), sign, name)
        result = result.with_signs(signs)
        method_text = (
            f"{name}: EOF {mode} of anomalies over {_format_domain(used)}, "
            f"sign {_format_sign(sign)}; index = projection on the EOF divided by the fitting "
            f"data's index standard deviation; {result.method}"
        )
        return cls(result, int(mode), used, name, long_name or f"EOF {mode} index", method_text)

    # -------------------------------------------------------------------------- attributes

    @property
    def pattern(self) -> xr.DataArray:
        """Regression map of the fitting anomalies on the index, field units per unit index."""
        out = self.eof.patterns.sel(mode=self.mode, drop=True)
        out.name = f"{self.name}_pattern"
        out.attrs = {
            **self.eof.patterns.attrs,
            "method": self.method,
            "long_name": f"{self.long_name} pattern (regression map per unit index)",
        }
        return out

    @property
    def variance_fraction(self) -> xr.DataArray:
        """Fraction of the fitting data's weighted variance per mode (leading first)."""
        return self._with_method(self.eof.variance_fraction)

    @property
    def variance_fraction_error(self) -> xr.DataArray:
        """North et al. (1982) sampling error of `variance_fraction`."""
        return self._with_method(self.eof.variance_fraction_error)

    @property
    def separable(self) -> xr.DataArray:
        """North et al. (1982) separability of each mode from its neighbours."""
        return self._with_method(self.eof.separable)

    def _with_method(self, da: xr.DataArray) -> xr.DataArray:
        out = da.copy()
        out.attrs = {**da.attrs, "method": self.method}
        return out

    # ----------------------------------------------------------------------------- applying

    def index(self, anoms: xr.DataArray, *, missing: _eof.Missing = "raise") -> xr.DataArray:
        """The index of any dataset: its projection on the fitted pattern, in fitting-data units.

        Parameters
        ----------
        anoms : DataArray (member, time, lat, lon) covering the fitted grid points; latitude
            order and longitude convention do not matter.
        missing : as in `EOFResult.project`.

        Returns
        -------
        DataArray (member, time), 1, with `season_year` and other time coordinates carried.
        """
        out = self.eof.project(anoms, missing=missing).sel(mode=self.mode, drop=True)
        out.name = self.name
        out.attrs = {"units": "1", "long_name": self.long_name, "method": self.method}
        return out

    def compare_pattern(self, anoms: xr.DataArray) -> xr.Dataset:
        """A dataset's own EOF (same mode, grid and weights) beside the fitted one.

        Parameters
        ----------
        anoms : DataArray (member, time, lat, lon) covering the fitted grid points.

        Returns
        -------
        Dataset with, along ``pattern`` = ["fitted", "own"]: ``regression_map`` (lat, lon, field
        units per unit index; the own one signed to correlate positively with the fitted one),
        ``variance_fraction``
        and its North error, ``centre_lat`` / ``centre_lon`` along ``centre`` = ["positive",
        "negative"] (grid points of the map's maximum and minimum: for the NAO the Azores high
        and the Icelandic low); and scalars ``pattern_correlation_centred`` and
        ``pattern_correlation_uncentred`` (cos(latitude) area weights) and
        ``fitted_pattern_variance_fraction`` (share of the dataset's weighted variance along the
        fitted EOF).
        """
        data = _eof._match_grid(_eof._prepare(anoms, "anoms"), self.eof.eofs)
        data = data.where(np.isfinite(self.eof.eofs.isel(mode=0, drop=True)))
        own = _eof.fit(
            data, n_modes=self.mode, weights=self.eof.weights, method="auto", missing="raise"
        )
        fitted_map = self.pattern
        own_map = own.patterns.sel(mode=self.mode, drop=True)
        area = np.cos(np.deg2rad(fitted_map["lat"])) * xr.ones_like(fitted_map)
        if _weighted_corr(fitted_map, own_map, area, centred=True) < 0:
            own_map = -own_map
        centred = _weighted_corr(fitted_map, own_map, area, centred=True)
        uncentred = _weighted_corr(fitted_map, own_map, area, centred=False)

        raw = self.eof.project(data).sel(mode=self.mode) * np.sqrt(
            float(self.eof.eigenvalues.sel(mode=self.mode))
        )
        along = float(raw.var(ddof=1)) / own.total_variance

        label = xr.DataArray(["fitted", "own"], dims="pattern", name="pattern")
        centre = xr.DataArray(["positive", "negative"], dims="centre", name="centre")
        maps = xr.concat([fitted_map, own_map], dim=label)
        lat_c, lon_c = zip(*(_centres(m) for m in (fitted_map, own_map)), strict=True)

        def attrs(units: str, long_name: str) -> dict:
            return {"units": units, "long_name": long_name, "method": self.method}

        fractions = [
            float(self.eof.variance_fraction.sel(mode=self.mode)),
            float(own.variance_fraction.sel(mode=self.mode)),
        ]
        errors = [
            float(self.eof.variance_fraction_error.sel(mode=self.mode)),
            float(own.variance_fraction_error.sel(mode=self.mode)),
        ]
        units = self.eof.patterns.attrs.get("units", "unknown")
        ds = xr.Dataset(
            {
                "regression_map": maps.assign_attrs(
                    attrs(units, f"{self.long_name} regression map")
                ),
                "variance_fraction": (
                    "pattern",
                    fractions,
                    attrs("1", f"variance fraction of EOF {self.mode}"),
                ),
                "variance_fraction_error": (
                    "pattern",
                    errors,
                    attrs("1", "North et al. (1982) sampling error of the variance fraction"),
                ),
                "centre_lat": (
                    ("pattern", "centre"),
                    np.array(lat_c),
                    attrs("degrees_north", "latitude of the centre of action"),
                ),
                "centre_lon": (
                    ("pattern", "centre"),
                    np.array(lon_c),
                    attrs("degrees_east", "longitude of the centre of action"),
                ),
                "pattern_correlation_centred": (
                    (),
                    centred,
                    attrs("1", "area-weighted centred pattern correlation, fitted vs own"),
                ),
                "pattern_correlation_uncentred": (
                    (),
                    uncentred,
                    attrs("1", "area-weighted uncentred pattern correlation, fitted vs own"),
                ),
                "fitted_pattern_variance_fraction": (
                    (),
                    along,
                    attrs("1", "fraction of the dataset's weighted variance along the fitted EOF"),
                ),
            },
            coords={"pattern": label, "centre": centre},
        )
        ds.attrs = {"method": self.method}
        return ds


@dataclass(frozen=True)
class NAO(EOFIndex):
    """The North Atlantic Oscillation index (Hurrell 1995): fit once, apply to every dataset."""

    @classmethod
    def fit(  # type: ignore[override]
        cls,
        anoms: xr.DataArray,
        *,
        domain: tuple[float, float, float, float] = HURRELL_DOMAIN,
        n_modes: int = 4,
        weights: str | xr.DataArray | None = "sqrt_coslat",
        method: _eof.Method = "auto",
        missing: _eof.Missing = "raise",
    ) -> NAO:
        """Fit the NAO: leading EOF of height (or pressure) anomalies over `domain`.

        Parameters
        ----------
        anoms : DataArray (member, time, lat, lon), geopotential height anomalies in m (or
            pressure anomalies), daily, monthly or one value per winter; canonical form.
        domain : (lat_min, lat_max, lon_min, lon_max), default 20-80N, 90W-40E after Hurrell
            (1995) (from memory). A partial overlap is used with an `InputWarning`.
        n_modes : modes fitted (the NAO is mode 1; the others give North errors and context).
        weights, method, missing : as in `westerlies.eof.fit`.
        """
        return super().fit(
            anoms,
            domain=domain,
            mode=1,
            sign=(AZORES, ICELAND),
            n_modes=n_modes,
            weights=weights,
            method=method,
            missing=missing,
            name="nao",
            long_name="North Atlantic Oscillation index",
            _stacklevel=4,
        )


def eof_index(
    anoms: xr.DataArray,
    domain: tuple[float, float, float, float],
    mode: int = 1,
    sign: Sign = None,
    **options,
) -> xr.DataArray:
    """The EOF-based index of the fitting data itself (unit variance), e.g. an SST tripole.

    A shortcut for ``EOFIndex.fit(anoms, domain=domain, mode=mode, sign=sign,
    **options).index(anoms)``; fit an `EOFIndex` to apply the same pattern to other datasets.
    `options` are those of `EOFIndex.fit` (n_modes, weights, method, missing, name, long_name).
    """
    fitted = EOFIndex.fit(anoms, domain=domain, mode=mode, sign=sign, **options)
    return fitted.index(anoms)


# ----------------------------------------------------------------------------------- helpers


def _wrap(lon):
    return (np.asarray(lon, dtype=float) + 180.0) % 360.0 - 180.0


def _select_domain(data: xr.DataArray, domain, what: str, stacklevel: int = 4):
    """The grid points of `data` inside `domain`, and the domain they cover (warn if partial)."""
    try:
        lat_min, lat_max, lon_min, lon_max = (float(v) for v in domain)
    except (TypeError, ValueError):
        raise ConfigError.make(
            "domain",
            repr(domain),
            "(lat_min, lat_max, lon_min, lon_max)",
            "give four numbers in degrees",
        ) from None
    if not -90 <= lat_min < lat_max <= 90:
        raise ConfigError.make(
            "domain",
            repr(domain),
            "-90 <= lat_min < lat_max <= 90",
            "order the latitudes south to north",
        )
    full_circle = (lon_max - lon_min) >= 360
    west, east = float(_wrap(lon_min)), float(_wrap(lon_max))
    width = 360.0 if full_circle else (east - west) % 360.0
    lat, lon = data["lat"].values.astype(float), data["lon"].values.astype(float)
    eps = 1e-6
    in_lat = (lat >= lat_min - eps) & (lat <= lat_max + eps)
    rel = (lon - west) % 360.0
    in_lon = rel <= width + eps
    if not in_lat.any() or not in_lon.any():
        raise GridError.make(
            f"{what} domain",
            f"no data inside {_format_domain(domain)} (data span lat "
            f"{lat.min():g} to {lat.max():g}, lon {lon.min():g} to {lon.max():g})",
            "data overlapping the domain",
            "pass data covering the domain or change `domain`",
        )
    d_lat = _spacing(lat)
    d_lon = _spacing(lon)
    south = bool(np.any((lat >= lat_min - d_lat - eps) & (lat <= lat_min + d_lat / 2 + eps)))
    north = bool(np.any((lat <= lat_max + d_lat + eps) & (lat >= lat_max - d_lat / 2 - eps)))
    rel_east = (east - lon) % 360.0
    west_ok = full_circle or bool(np.any((rel <= d_lon / 2 + eps) | (rel >= 360 - d_lon - eps)))
    east_ok = full_circle or bool(
        np.any((rel_east <= d_lon / 2 + eps) | (rel_east >= 360 - d_lon - eps))
    )
    sel_lat, sel_lon = lat[in_lat], lon[in_lon]
    sel_rel = rel[in_lon]
    used = (
        lat_min if south else float(sel_lat.min()),
        lat_max if north else float(sel_lat.max()),
        lon_min if west_ok else float(sel_lon[sel_rel.argmin()]),
        lon_max if east_ok else float(sel_lon[sel_rel.argmax()]),
    )
    if not (south and north and west_ok and east_ok):
        warnings.warn(
            f"{what}: the data cover only part of the domain {_format_domain(domain)}; the "
            f"overlap {_format_domain(used)} is used",
            InputWarning,
            stacklevel=stacklevel,
        )
    return data.isel(lat=np.flatnonzero(in_lat), lon=np.flatnonzero(in_lon)), used


def _spacing(values: np.ndarray) -> float:
    steps = np.abs(np.diff(np.sort(values)))
    steps = steps[steps > 0]
    return float(np.median(steps)) if steps.size else 0.0


def _format_domain(domain) -> str:
    lat_min, lat_max, lon_min, lon_max = (float(v) for v in domain)

    def lat_text(v):
        return f"{abs(v):g}{'N' if v >= 0 else 'S'}"

    def lon_text(v):
        v = float(_wrap(v))
        return f"{abs(v):g}{'E' if v >= 0 else 'W'}" if v not in (0.0, -180.0) else f"{abs(v):g}"

    return f"{lat_text(lat_min)}-{lat_text(lat_max)}, {lon_text(lon_min)}-{lon_text(lon_max)}"


def _format_point(point) -> str:
    lat, lon = float(point[0]), float(_wrap(point[1]))
    return f"({abs(lat):g}{'N' if lat >= 0 else 'S'}, {abs(lon):g}{'E' if lon >= 0 else 'W'})"


def _format_sign(sign: Sign) -> str:
    if sign is None:
        return "largest-magnitude element of the weighted EOF positive"
    if np.ndim(sign[0]) == 0:
        return f"pattern positive at {_format_point(sign)}"
    return f"pattern{_format_point(sign[0])} - pattern{_format_point(sign[1])} positive"


def _value_at(pattern: xr.DataArray, point, what: str) -> float:
    lat, lon = float(point[0]), float(_wrap(point[1]))
    d_lat = _spacing(pattern["lat"].values) or 1.0
    d_lon = _spacing(pattern["lon"].values) or 1.0
    i = int(np.abs(pattern["lat"].values - lat).argmin())
    dist = np.abs((pattern["lon"].values - lon + 180.0) % 360.0 - 180.0)
    j = int(dist.argmin())
    value = float(pattern.values[i, j])
    if abs(pattern["lat"].values[i] - lat) > d_lat or dist[j] > d_lon or not np.isfinite(value):
        raise GridError.make(
            f"{what} sign point ({point[0]:g}, {point[1]:g})",
            "a point outside the fitted domain or on missing data",
            "a point inside the domain with data",
            "choose another sign point or domain",
        )
    return value


def _sign_of(pattern: xr.DataArray, sign: Sign, what: str) -> float:
    if sign is None:
        return 1.0
    if np.ndim(sign[0]) == 0:
        value = _value_at(pattern, sign, what)
    else:
        value = _value_at(pattern, sign[0], what) - _value_at(pattern, sign[1], what)
    return -1.0 if value < 0 else 1.0


def _weighted_corr(a: xr.DataArray, b: xr.DataArray, w: xr.DataArray, *, centred: bool) -> float:
    ok = np.isfinite(a.values) & np.isfinite(b.values)
    x, y, ww = a.values[ok], b.values[ok], w.values[ok]
    if centred:
        x = x - np.average(x, weights=ww)
        y = y - np.average(y, weights=ww)
    return float(np.sum(ww * x * y) / np.sqrt(np.sum(ww * x * x) * np.sum(ww * y * y)))


def _centres(pattern: xr.DataArray) -> tuple[list[float], list[float]]:
    """(lats, lons) of the grid points of the map's maximum and minimum."""
    values = np.where(np.isfinite(pattern.values), pattern.values, np.nan)
    i_max = np.unravel_index(np.nanargmax(values), values.shape)
    i_min = np.unravel_index(np.nanargmin(values), values.shape)
    lat, lon = pattern["lat"].values, pattern["lon"].values
    return [float(lat[i_max[0]]), float(lat[i_min[0]])], [
        float(lon[i_max[1]]),
        float(lon[i_min[1]]),
    ]
