"""westerlies: North Atlantic winter circulation diagnostics for ensemble experiments.

Top-level names are loaded on first use, so `import westerlies` stays quick and the command line
starts without importing plotting or clustering libraries it does not need.
"""

from __future__ import annotations

import importlib
from typing import Any

# The module `anomalies` shares its name with its main function: import the function eagerly so
# that `westerlies.anomalies` is always the function (the module stays importable by path).
from .anomalies import anomalies, climatology
from .errors import (
    CalendarError,
    ConfigError,
    CoordinateError,
    GridError,
    InputError,
    InputWarning,
    MissingValueError,
    TimeStepError,
    UnitsError,
)

__version__ = "0.1.0"

# public name -> submodule that defines it
_LAZY: dict[str, str] = {
    # data layer
    "open_dataset": "data",
    "check_input": "check",
    "select_season": "seasons",
    "season_months": "seasons",
    "block_ids": "seasons",
    "blocks": "seasons",
    # EOF and NAO
    "eof": "",
    "NAO": "nao",
    "eof_index": "nao",
    "EOFIndex": "nao",
    # jet
    "lanczos_weights": "filters",
    "lowpass": "filters",
    "lanczos_response": "filters",
    "select_filtered_season": "filters",
    "jet_index": "jet",
    "jet_modes": "density",
    # regimes
    "Regimes": "regimes",
    "occupancy": "regimes",
    "persistence": "regimes",
    "episodes": "regimes",
    "transitions": "regimes",
    "classifiability": "regimes",
    # memory and significance
    "acf": "timeseries",
    "ccf": "timeseries",
    "efolding_time": "timeseries",
    "bootstrap_ci": "resampling",
    "permutation_test": "resampling",
    "fdr_mask": "resampling",
    "reference_percentile": "resampling",
    "ks_test": "resampling",
    "map_difference_test": "resampling",
    "map_ks_test": "resampling",
    "BlockStatistic": "resampling",
    # main job
    "compare": "comparison",
    "Comparison": "comparison",
    "load_config": "config",
    "synthetic": "",
    "figures": "",
}

__all__ = [
    "CalendarError",
    "ConfigError",
    "CoordinateError",
    "GridError",
    "InputError",
    "InputWarning",
    "MissingValueError",
    "TimeStepError",
    "UnitsError",
    "anomalies",
    "climatology",
    *_LAZY,
]


def __getattr__(name: str) -> Any:
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'westerlies' has no attribute {name!r}")
    if module == "":  # a submodule exported under its own name
        return importlib.import_module(f".{name}", __name__)
    return getattr(importlib.import_module(f".{module}", __name__), name)


def __dir__() -> list[str]:
    return sorted(__all__)
