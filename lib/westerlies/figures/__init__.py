"""The figure set: one function per figure kind, each returning a matplotlib Figure.

Functions take plain labelled inputs (xarray DataArrays with a `dataset` dim of string labels,
dicts label -> array, a pandas summary table), never save and never show; `save` writes a
figure atomically. Pass one run's `dataset_colors(all labels)` as `colors=` to keep each
dataset's colour across figures that show different subsets of datasets.
"""

from __future__ import annotations

from ._common import dataset_colors, save
from .distributions import index_distributions, jet_densities, jet_latitude_speed
from .maps import difference_maps, nao_patterns, regime_maps
from .memory import cross_correlation, memory_functions
from .regimes import occupancy_bars, persistence_survival
from .scorecard import scorecard

__all__ = [
    "cross_correlation",
    "dataset_colors",
    "difference_maps",
    "index_distributions",
    "jet_densities",
    "jet_latitude_speed",
    "memory_functions",
    "nao_patterns",
    "occupancy_bars",
    "persistence_survival",
    "regime_maps",
    "save",
    "scorecard",
]
