"""Shared pieces of the figure set: dataset colours, safe text, input checks, atomic saving.

Colours: the qualitative palette of Okabe and Ito (2008), "Color Universal Design (CUD): how to
make figures and presentations that are friendly to colorblind people" (J*FLY), in an order that
puts the low-contrast yellow last. Anomaly maps use matplotlib's "RdBu_r" (ColorBrewer's
colour-blind-safe diverging map, Harrower and Brewer 2003, Cartogr. J. 40, 27-37) with limits
symmetric about zero; other fields use "viridis".
"""

from __future__ import annotations

import math
import os
import tempfile
import warnings
from collections.abc import Hashable, Mapping, Sequence
from pathlib import Path

import numpy as np
import xarray as xr
from matplotlib.figure import Figure

from .._files import publish_mode
from ..errors import ConfigError, CoordinateError, InputError, InputWarning

# Okabe and Ito (2008): blue, vermillion, bluish green, reddish purple, orange, sky blue, black,
# yellow (yellow last: it is hard to see on white).
OKABE_ITO: tuple[str, ...] = (
    "#0072B2",
    "#D55E00",
    "#009E73",
    "#CC79A7",
    "#E69F00",
    "#56B4E9",
    "#000000",
    "#F0E442",
)
DIVERGING_CMAP = "RdBu_r"
SEQUENTIAL_CMAP = "viridis"
DATASET_DIM = "dataset"


def dataset_colors(labels: Sequence[str]) -> dict[str, str]:
    """One colour per dataset label, stable for a given order of labels.

    Parameters
    ----------
    labels : dataset labels, in the order of the run (the first gets the first colour).

    Returns
    -------
    dict label -> hex colour. Up to eight labels take the Okabe and Ito (2008) palette; beyond
    eight, distinct colours are sampled from "viridis" (with an `InputWarning`: more than eight
    lines are hard to tell apart whatever the palette).
    """
    labels = [str(label) for label in labels]
    if len(set(labels)) != len(labels):
        repeated = sorted({label for label in labels if labels.count(label) > 1})
        raise ConfigError.make(
            "dataset labels", f"repeated labels {repeated}", "distinct labels", "rename datasets"
        )
    if len(labels) <= len(OKABE_ITO):
        return dict(zip(labels, OKABE_ITO, strict=False))
    warnings.warn(
        f"{len(labels)} datasets: more than the {len(OKABE_ITO)} colour-blind-safe colours; "
        "using colours sampled from viridis",
        InputWarning,
        stacklevel=2,
    )
    from matplotlib import colormaps
    from matplotlib.colors import to_hex

    cmap = colormaps[SEQUENTIAL_CMAP]
    return {label: to_hex(cmap(i / (len(labels) - 1))) for i, label in enumerate(labels)}


def colors_for(labels: Sequence[str], colors: Mapping[str, str] | None) -> dict[str, str]:
    """Colours for `labels`: from `colors` (a run's `dataset_colors`) or a fresh palette."""
    if colors is None:
        return dataset_colors(labels)
    missing = [label for label in labels if label not in colors]
    if missing:
        raise ConfigError.make(
            "colors",
            f"no colour for datasets {missing}",
            "a colour for every dataset shown",
            "build colors with dataset_colors(all labels of the run)",
        )
    return {label: colors[label] for label in labels}


def plain(text: object) -> str:
    """Text shown as typed: escape '$' so matplotlib never reads it as mathtext."""
    return str(text).replace("$", r"\$")


def with_units(name: str, units: object) -> str:
    """An axis label 'name (units)'."""
    return f"{name} ({plain(units)})"


def units_of(obj: object, default: str) -> str:
    """The `units` attribute of an xarray object, or `default`."""
    attrs = getattr(obj, "attrs", None) or {}
    units = attrs.get("units")
    return str(units) if units not in (None, "") else default


def require_dims(da: object, name: str, dims: Sequence[str | tuple[str, ...]]) -> xr.DataArray:
    """Check a DataArray has exactly the named dims and return it transposed to that order.

    Each entry of `dims` is a dim name or a tuple of accepted alternatives (e.g.
    ("regime", "category")). A DataArray without the `dataset` dim is taken as one dataset
    labelled by its name.
    """
    if not isinstance(da, xr.DataArray):
        raise InputError.make(
            name, f"a {type(da).__name__}", "an xarray DataArray", "pass a labelled DataArray"
        )
    if DATASET_DIM in dims and DATASET_DIM not in da.dims:
        da = da.expand_dims({DATASET_DIM: [str(da.name) if da.name is not None else "data"]})
    order: list[Hashable] = []
    for want in dims:
        options = (want,) if isinstance(want, str) else want
        found = [d for d in options if d in da.dims]
        if len(found) != 1:
            break
        order.append(found[0])
    if len(order) != len(dims) or da.ndim != len(dims):
        expected = ", ".join(w if isinstance(w, str) else " or ".join(w) for w in dims)
        raise CoordinateError.make(
            f"{name} dims",
            str(tuple(da.dims)),
            f"dims ({expected})",
            "select or rename dimensions to match",
        )
    da = da.transpose(*order)
    if DATASET_DIM in da.dims:
        if DATASET_DIM not in da.coords:
            raise CoordinateError.make(
                f"{name} dim 'dataset'",
                "no labels",
                "a coordinate of dataset labels",
                "assign_coords(dataset=[...labels...])",
            )
        labels = [str(v) for v in da[DATASET_DIM].values]
        if len(set(labels)) != len(labels):
            raise CoordinateError.make(
                f"{name} dim 'dataset'",
                f"repeated labels {labels}",
                "distinct labels",
                "rename datasets",
            )
        da = da.assign_coords({DATASET_DIM: labels})
    return da


def matching(
    other: xr.DataArray | None, name: str, like: xr.DataArray, dims: Sequence[object]
) -> xr.DataArray | None:
    """`other` checked for `dims` and put in the order of `like`'s labels (None stays None).

    The labels along every dim must be the same as `like`'s (any order; numeric coordinates
    equal within rounding): a band or mask on another grid is refused, not silently dropped.
    """
    if other is None:
        return None
    other = require_dims(other, name, dims)
    other = other.rename({o: d for o, d in zip(other.dims, like.dims, strict=True) if o != d})
    for dim in like.dims:
        theirs, ours = other[dim].values, like[dim].values
        if theirs.shape == ours.shape and _same_labels(theirs, ours):
            other = other.assign_coords({dim: ours})
        elif not (theirs.size == ours.size and set(theirs.tolist()) == set(ours.tolist())):
            raise CoordinateError.make(
                f"{name} coordinate '{dim}'",
                f"labels {_preview(theirs)}",
                f"the labels of the main input {_preview(ours)}",
                "pass arrays on the same grid and datasets",
            )
    return other.reindex({dim: like[dim].values for dim in like.dims})


def _same_labels(a: np.ndarray, b: np.ndarray) -> bool:
    if np.issubdtype(a.dtype, np.number) and np.issubdtype(b.dtype, np.number):
        return bool(np.allclose(a, b, rtol=0, atol=1e-6))
    return bool(np.array_equal(a.astype(str), b.astype(str)))


def _preview(values: np.ndarray) -> str:
    shown = ", ".join(str(v) for v in values[:4])
    return f"[{shown}{', ...' if values.size > 4 else ''}] ({values.size})"


def value_at(da: xr.DataArray | None, **index: object) -> float | None:
    """One number from `da` at the given labels, or None where absent or not finite."""
    if da is None:
        return None
    try:
        value = float(da.sel(index).values)
    except (KeyError, ValueError, TypeError):
        return None
    return value if math.isfinite(value) else None


def symmetric_limit(*arrays: object) -> float:
    """A round positive number at or above the largest absolute finite value (1 if none)."""
    largest = 0.0
    for array in arrays:
        values = np.abs(np.asarray(array, dtype=float))
        if np.isfinite(values).any():
            largest = max(largest, float(np.nanmax(values)))
    if largest <= 0.0:
        return 1.0
    # Round up to 1, 1.5, 2, 2.5, 3, 4, 5, 6, 8 or 10 times a power of ten: readable tick ends.
    scale = 10.0 ** math.floor(math.log10(largest))
    for step in (1.0, 1.5, 2.0, 2.5, 3.0, 4.0, 5.0, 6.0, 8.0, 10.0):
        if largest <= step * scale * (1 + 1e-12):
            return step * scale
    return 10.0 * scale


def new_figure(width: float, height: float) -> Figure:
    """A figure outside pyplot's registry (no double display in notebooks, no global state)."""
    return Figure(figsize=(width, height), layout="constrained")


def save(
    fig: Figure,
    path: str | os.PathLike[str],
    formats: Sequence[str] = ("png",),
    dpi: float = 150,
) -> list[Path]:
    """Write `fig` once per format, atomically, then close it.

    Each file is written to a temporary name in the target directory and renamed into place, so
    a reader never sees a half-written file.

    Parameters
    ----------
    fig : the figure (closed afterwards when pyplot manages it; a figure built by this package
        is not registered with pyplot and is simply released).
    path : target path; the suffix of each format is added (a suffix naming one of `formats`
        is replaced, any other dot in the name is kept).
    formats : file formats matplotlib can write, e.g. ("png", "pdf").
    dpi : resolution for raster formats, dots per inch.

    Returns
    -------
    The paths written, in the order of `formats`.
    """
    formats = [
        str(f).lower().lstrip(".") for f in ([formats] if isinstance(formats, str) else formats)
    ]
    if not formats:
        raise ConfigError.make("formats", "none", "at least one format", "pass e.g. ('png',)")
    supported = fig.canvas.get_supported_filetypes()
    unknown = [f for f in formats if f not in supported]
    if unknown:
        raise ConfigError.make(
            "formats", str(unknown), f"one of {sorted(supported)}", "choose a supported format"
        )
    path = Path(path)
    if path.suffix.lower().lstrip(".") in formats:
        path = path.with_suffix("")
    written: list[Path] = []
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        for fmt in formats:
            target = path.parent / f"{path.name}.{fmt}"
            handle, temporary = tempfile.mkstemp(
                prefix=f".{path.name}.", suffix=f".{fmt}.part", dir=path.parent
            )
            os.close(handle)
            try:
                fig.savefig(temporary, format=fmt, dpi=dpi)
                publish_mode(temporary)
                os.replace(temporary, target)
            finally:
                if os.path.exists(temporary):
                    os.remove(temporary)
            written.append(target)
    finally:
        close(fig)
    return written


def close(fig: Figure) -> None:
    """Release a figure: pyplot-managed figures are closed; others are left to the collector."""
    if getattr(fig.canvas, "manager", None) is not None:
        import matplotlib.pyplot as plt

        plt.close(fig)
