"""The scorecard: every quantity for every dataset on one page, tinted where significant."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from matplotlib import colormaps
from matplotlib.figure import Figure
from matplotlib.patches import Patch, Rectangle

from ..errors import InputError
from ..summary import COLUMNS
from ._common import DIVERGING_CMAP, new_figure, plain

__all__ = ["scorecard"]

_CMAP = colormaps[DIVERGING_CMAP]
# Cell tints: light ends of the diverging map, so the numbers stay legible on top.
TINTS = {
    "higher": _CMAP(0.7),
    "lower": _CMAP(0.3),
    "significant": "0.72",  # significant, but the sign is unknown (versus has no value here)
    "not significant": "white",
    "not tested": "0.93",
}
_ROW_HEIGHT = 0.22  # inches per table row


def _compact(value: float) -> str:
    """A short, readable number: 3 significant digits, scientific when very large or small."""
    if not math.isfinite(value):
        return "-"
    if value != 0 and (abs(value) >= 1e4 or abs(value) < 1e-3):
        return f"{value:.2e}"
    return f"{value:.3g}"


def _first_finite(values: pd.Series) -> float:
    values = pd.to_numeric(values, errors="coerce").dropna()
    return float(values.iloc[0]) if len(values) else math.nan


def _is_true(flag: object) -> bool | None:
    """True/False for a significance flag; None where the difference was not tested."""
    if flag is None or (isinstance(flag, float) and math.isnan(flag)) or flag is pd.NA:
        return None
    return bool(flag)


def _status(rows: pd.DataFrame, versus: str, own: float, table: dict) -> str:
    """The tint name of one comparison of one cell."""
    tested = rows[rows["versus"].astype(str) == versus]
    flags = [_is_true(f) for f in tested["significant"]]
    flags = [f for f in flags if f is not None]
    if not flags:
        return "not tested"
    if not any(flags):
        return "not significant"
    other = table.get(versus, math.nan)
    if math.isfinite(own) and math.isfinite(other) and own != other:
        return "higher" if own > other else "lower"
    return "significant"


def scorecard(summary: pd.DataFrame, *, title: str | None = "Scorecard") -> Figure:
    """One table-like page: rows are quantities, columns datasets, cells tinted by significance.

    Parameters
    ----------
    summary : DataFrame with columns diagnostic, quantity, dataset, value, ci_low, ci_high,
        versus, p_value, significant (numbers NaN where they do not apply). One row per
        (diagnostic, quantity, dataset, versus); a dataset compared with two others (baseline
        and reference) has two rows for a quantity.
    title : figure title, or None.

    Returns
    -------
    Figure with one axes. Rows are grouped by diagnostic under a bold heading, in order of first
    appearance; columns are the datasets in order of first appearance. Each cell shows the
    value and is split into one strip per `versus` dataset (left to right in order of first
    appearance): red where the value is significantly higher than the versus dataset's value for
    the same quantity, blue where lower, grey where significant with no versus value to compare,
    white where not significant, light grey where not tested. Patches carry the tint name as
    their `gid`.
    """
    if not isinstance(summary, pd.DataFrame):
        raise InputError.make(
            "summary", type(summary).__name__, "a pandas DataFrame", "pass Comparison.summary"
        )
    missing = [c for c in COLUMNS if c not in summary.columns]
    if missing:
        raise InputError.make(
            "summary columns",
            f"missing {missing}",
            f"columns {list(COLUMNS)}",
            "pass the summary table of a comparison",
        )
    data = summary.reset_index(drop=True).copy()
    for column in ("diagnostic", "quantity", "dataset"):
        data[column] = data[column].astype(str)
    tested = data["versus"].notna()
    data["versus"] = data["versus"].astype(object).where(~tested, data["versus"].astype(str))
    keys = list(dict.fromkeys(zip(data["diagnostic"], data["quantity"], strict=True)))
    datasets = list(dict.fromkeys(data["dataset"]))
    versus_labels = list(dict.fromkeys(data.loc[tested, "versus"]))
    n_strips = max(len(versus_labels), 1)

    # Table layout: a heading line before each diagnostic's first quantity.
    lines: list[tuple[str, tuple[str, str] | None]] = []
    for diagnostic in dict.fromkeys(data["diagnostic"]):
        lines.append((diagnostic, None))
        lines.extend((key[1], key) for key in keys if key[0] == diagnostic)
    grouped = {key: frame for key, frame in data.groupby(["diagnostic", "quantity"], sort=False)}

    n_lines, n_cols = len(lines), len(datasets)
    fig = new_figure(2.6 + 1.05 * max(n_cols, 2), 1.3 + _ROW_HEIGHT * n_lines)
    ax = fig.subplots()
    for y, (_, key) in enumerate(lines):
        if key is None:
            ax.axhline(y, color="0.5", lw=0.6)
            continue
        rows = grouped[key]
        values = {d: _first_finite(f["value"]) for d, f in rows.groupby("dataset", sort=False)}
        for x, dataset in enumerate(datasets):
            cell = rows[rows["dataset"] == dataset]
            if cell.empty:
                continue
            own = values.get(dataset, math.nan)
            for s in range(n_strips):
                status = (
                    _status(cell, versus_labels[s], own, values) if versus_labels else "not tested"
                )
                ax.add_patch(
                    Rectangle(
                        (x + s / n_strips, y),
                        1 / n_strips,
                        1,
                        facecolor=TINTS[status],
                        edgecolor="white",
                        linewidth=0.8,
                        gid=status,
                    )
                )
            ax.text(x + 0.5, y + 0.5, _compact(own), ha="center", va="center", fontsize=7)
    for x in range(n_cols + 1):
        ax.axvline(x, color="0.8", lw=0.5)
    ax.set_xlim(0, max(n_cols, 1))
    ax.set_ylim(n_lines, 0)
    ax.xaxis.tick_top()
    ax.set_xticks(
        np.arange(n_cols) + 0.5, [plain(d) for d in datasets], fontsize=8, rotation=30, ha="left"
    )
    ax.set_yticks(np.arange(n_lines) + 0.5, [plain(text) for text, _ in lines], fontsize=7)
    for tick, (_, key) in zip(ax.get_yticklabels(), lines, strict=True):
        if key is None:
            tick.set_fontweight("bold")
    ax.tick_params(length=0)
    for spine in ax.spines.values():
        spine.set_visible(False)
    legend = [Patch(facecolor=TINTS[name], edgecolor="0.6") for name in TINTS]
    names = [
        "significantly higher",
        "significantly lower",
        "significant (no sign)",
        "not significant",
        "not tested",
    ]
    if len(versus_labels) > 1:
        order = ", ".join(f"vs {plain(v)}" for v in versus_labels)
        note = f"cell strips, left to right: {order}"
    elif versus_labels:
        note = f"compared with {plain(versus_labels[0])}"
    else:
        note = "no comparisons"
    fig.legend(
        legend,
        names,
        loc="outside lower center",
        ncols=3,
        fontsize=7,
        frameon=False,
        title=note,
        title_fontsize=7,
    )
    if title:
        fig.suptitle(plain(title))
    return fig
