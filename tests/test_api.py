"""The top-level API: every advertised name resolves, and imports stay light."""

from __future__ import annotations

import subprocess
import sys

import westerlies


def test_every_public_name_resolves():
    missing = [name for name in westerlies.__all__ if not hasattr(westerlies, name)]
    assert missing == []


def test_anomalies_is_the_function_even_after_importing_the_module():
    import westerlies.anomalies  # the module shares the function's name

    assert callable(westerlies.anomalies) and westerlies.anomalies.__name__ == "anomalies"


def test_import_does_not_load_plotting_or_clustering():
    heavy = "('matplotlib', 'sklearn', 'cartopy')"
    code = f"import sys, westerlies; print(sorted(m for m in {heavy} if m in sys.modules))"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"
