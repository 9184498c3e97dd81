"""The run configuration: one TOML file for `westerlies run`, the same options as `compare`.

Every key is documented in the README ("Configuration"); `examples/run.toml` is a complete
example. Unknown keys and wrong types raise `ConfigError` naming the key.
"""

from __future__ import annotations

import copy
import tomllib
from pathlib import Path
from typing import Any

from .errors import ConfigError

__all__ = ["DEFAULTS", "load_config", "resampling_keywords", "validate_options"]

_NUMBER = (int, float)

#: Option groups and their defaults. Types are taken from the defaults (None: see _TYPES).
DEFAULTS: dict[str, dict[str, Any]] = {
    "nao": {"domain": [20.0, 80.0, -90.0, 40.0]},
    "jet": {
        "levels": [925.0, 700.0],
        "sector": [-60.0, 0.0],
        "lat_range": [15.0, 75.0],
        "cutoff_days": 10.0,
        "n_weights": 61,
    },
    "regimes": {"n_regimes": 4, "n_pcs": 14, "domain": [20.0, 80.0, -90.0, 30.0], "n_init": 20},
    "memory": {"max_lag": 30},
    # positive tripole index: warm SST off the North American east coast (common practice)
    "sst": {"domain": [0.0, 70.0, -80.0, 0.0], "positive_at": [40.0, -60.0]},
    "anomalies": {"against": "own", "smoothing_days": 15.0, "persist_mb": 1000},
    "resampling": {"n_resamples": 1000, "alpha": 0.05, "seed": 0, "fdr": "wilks"},
    "output": {"formats": ["png"], "dpi": 150, "directory": "westerlies-out"},
}

_DATASET_KEYS = {
    "path": (str, list),
    "variables": (dict,),
    "member_dim": (str,),
    "daily": (str,),
    "chunks": (dict, int, str),
}
_TOP_KEYS = {"season": (str,), "baseline": (str,), "reference": (str,), "datasets": (dict,)}
_CHOICES = {
    ("anomalies", "against"): ("own", "baseline"),
    ("resampling", "fdr"): ("wilks", "bh"),
}


def _type_error(key: str, value: Any, expected: str) -> ConfigError:
    return ConfigError.make(
        f"configuration key {key!r}",
        f"{value!r} ({type(value).__name__})",
        expected,
        f"set {key} to {expected}",
    )


def _unknown(where: str, allowed, what: str = "key") -> ConfigError:
    return ConfigError.make(
        where, f"an unknown {what}", f"one of {sorted(allowed)}", f"correct or remove the {what}"
    )


def _check_value(key: str, value: Any, default: Any) -> Any:
    if isinstance(default, bool):
        if not isinstance(value, bool):
            raise _type_error(key, value, "true or false")
    elif isinstance(default, int):
        if isinstance(value, bool) or not isinstance(value, int):
            raise _type_error(key, value, "a whole number")
    elif isinstance(default, float):
        if isinstance(value, bool) or not isinstance(value, _NUMBER):
            raise _type_error(key, value, "a number")
        value = float(value)
    elif isinstance(default, str):
        if not isinstance(value, str):
            raise _type_error(key, value, "a string")
    elif isinstance(default, list):
        if not isinstance(value, list) or len(value) == 0:
            raise _type_error(key, value, f"a list like {default}")
        if all(isinstance(v, _NUMBER) for v in default):
            if not all(isinstance(v, _NUMBER) and not isinstance(v, bool) for v in value):
                raise _type_error(key, value, "a list of numbers")
            if len(default) in (2, 4) and len(value) != len(default):
                raise _type_error(key, value, f"a list of {len(default)} numbers")
            value = [float(v) for v in value]
    return value


def validate_options(options: dict[str, Any]) -> dict[str, dict[str, Any]]:
    """Merge option groups over `DEFAULTS`, checking every key and type.

    Parameters
    ----------
    options : group name -> {key: value}, e.g. ``{"jet": {"cutoff_days": 10}}``.

    Returns
    -------
    A complete option dict (a new copy of the defaults with the given values).
    """
    merged = copy.deepcopy(DEFAULTS)
    for group, values in options.items():
        if group not in DEFAULTS:
            raise _unknown(f"configuration section {group!r}", DEFAULTS, "section")
        if not isinstance(values, dict):
            raise _type_error(group, values, "a table of keys")
        for key, value in values.items():
            if key not in DEFAULTS[group]:
                raise _unknown(f"configuration key '{group}.{key}'", DEFAULTS[group])
            value = _check_value(f"{group}.{key}", value, DEFAULTS[group][key])
            choices = _CHOICES.get((group, key))
            if choices and value not in choices:
                raise _type_error(f"{group}.{key}", value, f"one of {list(choices)}")
            merged[group][key] = value
    res = merged["resampling"]
    if not 0 < res["alpha"] < 1:
        raise _type_error("resampling.alpha", res["alpha"], "a number between 0 and 1")
    if res["n_resamples"] < 99:
        raise _type_error("resampling.n_resamples", res["n_resamples"], "at least 99")
    return merged


def resampling_keywords(options: dict[str, dict[str, Any]]) -> dict[str, Any]:
    """``n_resamples`` and ``seed`` of validated options, as the resampling functions take them."""
    return {k: options["resampling"][k] for k in ("n_resamples", "seed")}


def load_config(path: str | Path) -> dict[str, Any]:
    """Read and check a run configuration file.

    Returns
    -------
    dict with ``datasets`` (label -> open_dataset keywords and ``path``), ``season``,
    ``baseline``, ``reference`` (labels or None) and ``options`` (from `validate_options`).
    Relative dataset paths are taken relative to the configuration file.
    """
    path = Path(path)
    try:
        raw = tomllib.loads(path.read_text())
    except FileNotFoundError as err:
        raise ConfigError.make(
            f"configuration {str(path)!r}", "no such file", "a TOML file", "check the path"
        ) from err
    except tomllib.TOMLDecodeError as err:
        raise ConfigError.make(
            f"configuration {str(path)!r}", f"invalid TOML ({err})", "valid TOML", "fix the syntax"
        ) from err
    top = {k: v for k, v in raw.items() if k not in DEFAULTS}
    for key, value in top.items():
        if key not in _TOP_KEYS:
            raise _unknown(f"configuration key {key!r}", [*_TOP_KEYS, *DEFAULTS])
        if not isinstance(value, _TOP_KEYS[key]):
            raise _type_error(key, value, "a string" if key != "datasets" else "a table")
    datasets = {}
    for label, entry in raw.get("datasets", {}).items():
        if not isinstance(entry, dict) or "path" not in entry:
            raise ConfigError.make(
                f"configuration table 'datasets.{label}'",
                repr(entry),
                "a table with at least a 'path' key",
                f'add path = "..." under [datasets.{label}]',
            )
        for key, value in entry.items():
            if key not in _DATASET_KEYS:
                raise _unknown(f"configuration key 'datasets.{label}.{key}'", _DATASET_KEYS)
            if not isinstance(value, _DATASET_KEYS[key]):
                raise _type_error(f"datasets.{label}.{key}", value, "see the README")
        entry = dict(entry)
        entry["path"] = _resolve(entry["path"], path.parent)
        datasets[label] = entry
    if not datasets:
        raise ConfigError.make(
            f"configuration {str(path)!r}",
            "no [datasets.*] tables",
            "at least one dataset",
            'add [datasets.NAME] with path = "..."',
        )
    for key in ("baseline", "reference"):
        if key in raw and raw[key] not in datasets:
            raise ConfigError.make(
                f"configuration key {key!r}",
                repr(raw[key]),
                f"one of the dataset labels {sorted(datasets)}",
                "name one of the [datasets.*] tables",
            )
    return {
        "datasets": datasets,
        "season": raw.get("season", "DJF"),
        "baseline": raw.get("baseline"),
        "reference": raw.get("reference"),
        "options": validate_options({k: v for k, v in raw.items() if k in DEFAULTS}),
    }


def _resolve(value: str | list, base: Path) -> str | list[str]:
    def one(p: str) -> str:
        return p if Path(p).is_absolute() else str(base / p)

    if isinstance(value, list):
        if not all(isinstance(p, str) for p in value):
            raise _type_error("datasets.*.path", value, "a string or a list of strings")
        return [one(p) for p in value]
    return one(value)
