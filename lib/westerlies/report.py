"""Writing a comparison to disk: the figure set, tables, indices, provenance and one HTML page.

Everything is written into a temporary directory beside the target and moved into place at the
end, so an interrupted run leaves no half-written output. An existing output directory is
refused unless ``overwrite=True``; a refused run touches nothing.

    OUT/
      report.html        one self-contained page: summary table, every figure, methods, provenance
      summary.json       every number in the summary, machine-readable
      tables/*.csv       the summary and the other tables
      indices.nc         daily indices, one netCDF group per dataset
      figures/*.png      one file per figure (and .pdf where asked)
      provenance.json    configuration, seed, package versions, input files and sizes
"""

from __future__ import annotations

import base64
import html
import json
import math
import re
import shutil
import tempfile
from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Any, Protocol

import numpy as np
import pandas as pd
import xarray as xr

from ._files import publish_mode
from .errors import ConfigError

__all__ = ["safe_name", "write_report"]

CAUTION = (
    "These are research diagnostics with sampling uncertainty. Every number is an estimate from "
    "a finite ensemble and a finite reference; intervals and p-values are themselves estimates, "
    "and with many quantities tested some differences will look significant by chance. They are "
    "not forecasts, and not engineering or policy guidance."
)


class Reportable(Protocol):
    """What `write_report` needs from a comparison."""

    summary: pd.DataFrame
    indices: Mapping[str, xr.Dataset]

    def tables(self) -> dict[str, pd.DataFrame]: ...

    def figures(self) -> Iterable[tuple[str, str, Any]]: ...

    def methods(self) -> list[tuple[str, str]]: ...

    def provenance(self) -> dict[str, Any]: ...


def safe_name(label: str, taken: set[str] | None = None) -> str:
    """A file- and netCDF-safe name for a dataset label (letters, digits, '-', '_'), unique."""
    name = re.sub(r"[^A-Za-z0-9_-]+", "_", str(label)).strip("_-") or "dataset"
    if name[0].isdigit():
        name = f"d_{name}"
    base, k = name, 2
    while taken is not None and name in taken:
        name = f"{base}_{k}"
        k += 1
    if taken is not None:
        taken.add(name)
    return name


def _refuse(out: Path, overwrite: bool) -> None:
    if out.exists() and not overwrite:
        raise ConfigError.make(
            f"output directory {str(out)!r}",
            "an existing path",
            "a directory that does not exist yet",
            "choose another output directory or pass overwrite=True (--overwrite)",
        )


def write_report(
    comparison: Reportable,
    out_dir: str | Path,
    *,
    overwrite: bool = False,
    formats: Iterable[str] = ("png",),
    dpi: int = 150,
    progress=None,
) -> Path:
    """Write the figure set of `comparison` into `out_dir` (see the module docstring).

    Returns
    -------
    The output directory.
    """
    out = Path(out_dir)
    _refuse(out, overwrite)
    formats = tuple(formats)
    bad = set(formats) - {"png", "pdf", "svg"}
    if bad or "png" not in formats:
        raise ConfigError.make(
            "output formats",
            repr(list(formats)),
            "'png' and optionally 'pdf' or 'svg'",
            "set formats to ['png'] or ['png', 'pdf']",
        )
    out.parent.mkdir(parents=True, exist_ok=True)
    work = Path(tempfile.mkdtemp(prefix=f".{out.name}.partial-", dir=out.parent))
    publish_mode(work, directory=True)
    try:
        _write_all(comparison, work, formats, dpi, progress)
        if out.exists():
            old = Path(tempfile.mkdtemp(prefix=f".{out.name}.old-", dir=out.parent))
            out.rename(old / out.name)
            work.rename(out)
            shutil.rmtree(old, ignore_errors=True)
        else:
            work.rename(out)
    except BaseException:
        shutil.rmtree(work, ignore_errors=True)
        raise
    return out


def _say(progress, text: str) -> None:
    if progress is not None:
        progress(text)


def _write_all(comparison: Reportable, work: Path, formats, dpi: int, progress) -> None:
    (work / "figures").mkdir()
    (work / "tables").mkdir()
    shown = _draw_figures(comparison, work / "figures", formats, dpi, progress)
    tables = comparison.tables()
    for name, table in tables.items():
        table.to_csv(work / "tables" / f"{name}.csv", index=False)
    _write_json(work / "summary.json", _records(comparison.summary))
    _write_indices(comparison.indices, work / "indices.nc")
    provenance = comparison.provenance()
    _write_json(work / "provenance.json", provenance)
    page = _html(comparison.summary, shown, comparison.methods(), provenance)
    (work / "report.html").write_text(page, encoding="utf-8")


def _draw_figures(comparison, where: Path, formats, dpi: int, progress) -> list:
    """Draw and save every figure; (name, caption, png path) in figure order.

    On a dask.distributed cluster the figures are drawn by the workers (each returns its
    files' bytes, written here), otherwise here, one at a time (matplotlib's font and text
    caches are not safe to share between threads).
    """
    from . import figures
    from .report_figures import figure_recipes

    recipes = list(figure_recipes(comparison))
    from ._scheduler import cluster_client

    client = cluster_client()
    if client is None:
        for name, _, make in recipes:
            _say(progress, f"figure {name}")
            figures.save(make(), where / f"{name}.png", formats=formats, dpi=dpi)
    else:
        _say(progress, f"drawing {len(recipes)} figures on the cluster")
        futures = client.map(
            _drawn, [make for _, _, make in recipes], formats=formats, dpi=dpi, pure=False
        )
        for (name, _, _), future in zip(recipes, futures, strict=True):
            for fmt, data in future.result().items():
                (where / f"{name}.{fmt}").write_bytes(data)  # the set is published whole
    return [(name, caption, where / f"{name}.png") for name, caption, _ in recipes]


def _drawn(make, formats, dpi: int) -> dict[str, bytes]:
    """Draw one figure and return its files' contents by format (runs on a worker)."""
    import io

    from .figures._common import close

    fig = make()
    try:
        out = {}
        for fmt in formats:
            buffer = io.BytesIO()
            fig.savefig(buffer, format=fmt, dpi=dpi)
            out[fmt] = buffer.getvalue()
        return out
    finally:
        close(fig)


def _clean(value: Any) -> Any:
    """JSON-safe: NaN -> null, numpy scalars -> Python, timestamps -> text."""
    if isinstance(value, Mapping):
        return {str(k): _clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_clean(v) for v in value]
    if isinstance(value, (np.bool_, bool)):
        return bool(value)
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return None if not math.isfinite(float(value)) else float(value)
    if isinstance(value, (str, int)) or value is None:
        return value
    return str(value)


def _records(summary: pd.DataFrame) -> list[dict]:
    return [_clean(row) for row in summary.to_dict(orient="records")]


def _write_json(path: Path, data: Any) -> None:
    path.write_text(json.dumps(_clean(data), indent=1, allow_nan=False), encoding="utf-8")


def _write_indices(indices: Mapping[str, xr.Dataset], path: Path) -> None:
    taken: set[str] = set()
    groups = {}
    for label, ds in indices.items():
        name = safe_name(label, taken)
        ds = ds.copy()
        ds.attrs = {**ds.attrs, "label": str(label), "Conventions": "CF-1.10"}
        for var in ds.variables.values():
            var.encoding = {}
        groups[name] = ds
    root = xr.Dataset(
        attrs={
            "title": "westerlies daily indices",
            "Conventions": "CF-1.10",
            "comment": "one group per dataset; the group attribute 'label' is the dataset label",
        }
    )
    tree = xr.DataTree.from_dict({"/": root, **{f"/{k}": v for k, v in groups.items()}})
    tree.to_netcdf(path, engine="netcdf4")


def _format(value: Any) -> str:
    if isinstance(value, (float, np.floating)):
        if not math.isfinite(float(value)):
            return ""
        return f"{float(value):.3g}"
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    return "" if value is None else str(value)


def _html(summary: pd.DataFrame, shown, methods, provenance) -> str:
    esc = html.escape
    head = "".join(f"<th>{esc(str(c))}</th>" for c in summary.columns)
    rows = []
    for record in summary.itertuples(index=False):
        cells = "".join(f"<td>{esc(_format(v))}</td>" for v in record)
        cls = ' class="sig"' if getattr(record, "significant", False) is True else ""
        rows.append(f"<tr{cls}>{cells}</tr>")
    figs = []
    for name, caption, path in shown:
        data = base64.b64encode(path.read_bytes()).decode("ascii")
        figs.append(
            f'<figure id="{esc(name)}"><img alt="{esc(caption)}" '
            f'src="data:image/png;base64,{data}"><figcaption>{esc(caption)}</figcaption></figure>'
        )
    method_items = "".join(f"<dt>{esc(n)}</dt><dd>{esc(t)}</dd>" for n, t in methods)
    prov = esc(json.dumps(_clean(provenance), indent=1))
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>westerlies report</title>
<style>
body {{ font-family: sans-serif; margin: 2em auto; max-width: 72em; color: #222; }}
table {{ border-collapse: collapse; font-size: 0.85em; }}
td, th {{ border: 1px solid #ccc; padding: 2px 6px; text-align: left; }}
tr.sig td {{ background: #fff3c4; }}
figure {{ margin: 1.5em 0; }} img {{ max-width: 100%; }}
.caution {{ border-left: 4px solid #b35806; padding: 0.5em 1em; background: #fdf3e7; }}
pre {{ background: #f6f6f6; padding: 1em; overflow-x: auto; font-size: 0.8em; }}
</style></head><body>
<h1>westerlies: North Atlantic winter diagnostics</h1>
<p class="caution">{esc(CAUTION)}</p>
<h2>Summary</h2>
<p>Rows with <em>versus</em> empty are estimates with 95% block-bootstrap intervals; rows versus
the baseline give the difference (dataset minus baseline) with a block-permutation p-value; rows
versus the reference give the reference value, the model's 2.5-97.5 percentile range for samples
as long as the reference, and a two-sided p-value from the reference's percentile.
Highlighted rows are significant at the configured level.</p>
<table><thead><tr>{head}</tr></thead><tbody>{"".join(rows)}</tbody></table>
<h2>Figures</h2>
{"".join(figs)}
<h2>Methods</h2>
<dl>{method_items}</dl>
<h2>Provenance</h2>
<pre>{prov}</pre>
</body></html>
"""
