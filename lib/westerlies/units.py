"""Units of the canonical variables and their conversion.

A small table on purpose: the quantities westerlies reads are few (heights, winds, pressures,
temperatures), and a table states exactly which spellings are understood.
"""

from __future__ import annotations

import re

#: Standard gravity (CGPM 1901, as adopted by WMO), m s-2: geopotential to geopotential height.
G0 = 9.80665


def _key(units: str) -> str:
    """Fold spelling variants: case, spaces, '**', '^', '.', '/s' forms."""
    text = units.strip().lower()
    text = text.replace("**", "").replace("^", "")
    text = re.sub(r"\s+", " ", text)
    text = text.replace("/s2", " s-2").replace("/s", " s-1").replace(".", " ")
    return re.sub(r"\s+", " ", text).strip()


# (canonical quantity, unit key) -> (scale, offset) so that canonical = value * scale + offset
_TABLE: dict[str, dict[str, tuple[float, float]]] = {
    "height": {
        "m": (1.0, 0.0),
        "meter": (1.0, 0.0),
        "meters": (1.0, 0.0),
        "metre": (1.0, 0.0),
        "metres": (1.0, 0.0),
        "gpm": (1.0, 0.0),
        "m gpm": (1.0, 0.0),
        "dam": (10.0, 0.0),
        "dagpm": (10.0, 0.0),
        "decameters": (10.0, 0.0),
        "decametres": (10.0, 0.0),
        "km": (1000.0, 0.0),
    },
    "geopotential": {
        "m2 s-2": (1.0 / G0, 0.0),
        "m2s-2": (1.0 / G0, 0.0),
        "j kg-1": (1.0 / G0, 0.0),
        "j/kg": (1.0 / G0, 0.0),
    },
    "wind": {
        "m s-1": (1.0, 0.0),
        "ms-1": (1.0, 0.0),
        "m/s": (1.0, 0.0),
        "meters s-1": (1.0, 0.0),
        "metres s-1": (1.0, 0.0),
        "meter s-1": (1.0, 0.0),
        "metre s-1": (1.0, 0.0),
        "knots": (0.514444, 0.0),
        "knot": (0.514444, 0.0),
        "kt": (0.514444, 0.0),
        "km h-1": (1 / 3.6, 0.0),
        "km/h": (1 / 3.6, 0.0),
    },
    "pressure": {
        "hpa": (1.0, 0.0),
        "mbar": (1.0, 0.0),
        "mb": (1.0, 0.0),
        "millibar": (1.0, 0.0),
        "millibars": (1.0, 0.0),
        "pa": (0.01, 0.0),
        "kpa": (10.0, 0.0),
        "bar": (1000.0, 0.0),
    },
    "temperature": {
        "k": (1.0, 0.0),
        "kelvin": (1.0, 0.0),
        "degk": (1.0, 0.0),
        "deg_k": (1.0, 0.0),
        "degc": (1.0, 273.15),
        "deg_c": (1.0, 273.15),
        "c": (1.0, 273.15),
        "celsius": (1.0, 273.15),
        "degrees_c": (1.0, 273.15),
        "degree_c": (1.0, 273.15),
        "degrees c": (1.0, 273.15),
    },
}

#: The units each quantity is given in after conversion (CF spelling).
CANONICAL_UNITS = {
    "height": "m",
    "geopotential": "m",  # converted to geopotential height
    "wind": "m s-1",
    "pressure": "hPa",
    "temperature": "K",
}


def conversion(quantity: str, units: str) -> tuple[float, float] | None:
    """(scale, offset) turning `units` of `quantity` into canonical units, or None if unknown."""
    return _TABLE[quantity].get(_key(units))


def quantity_of_units(units: str, candidates: tuple[str, ...]) -> str | None:
    """The first of `candidates` whose table knows `units`."""
    key = _key(units)
    for quantity in candidates:
        if key in _TABLE[quantity]:
            return quantity
    return None


def known_spellings(quantity: str) -> str:
    """A short list of the understood spellings, for error messages."""
    return ", ".join(sorted(_TABLE[quantity])[:8])
