"""Grouped bar chart of a comparison: one panel per metric, groups = workloads, bars = settings.

Takes the side-by-side table of :func:`memsim.experiment.compare.compare`
(one row per workload x setting, a mean column per metric and a
``<metric>_ci_half`` column beside it), as returned or read back from
``compare.csv``.  Error bars show the confidence interval of the mean where
there is one (more than one seed).
"""
from __future__ import annotations

import math
from collections.abc import Sequence
from pathlib import Path

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from memsim.report.figures import axis_label, save_figure

CI_SUFFIX = "_ci_half"
MAX_COLUMNS = 3
LEGEND_COLUMNS = 6


def table_metrics(table: pd.DataFrame) -> list[str]:
    """Metric columns of a side-by-side table: those with a ``_ci_half`` column beside them."""
    return [c for c in table.columns if not c.endswith(CI_SUFFIX) and c + CI_SUFFIX in table.columns]


def compare_figure(table: pd.DataFrame, metrics: Sequence[str] | None = None) -> Figure:
    """One panel per metric: bars of each setting's mean, grouped by workload, with interval error bars.

    With a single workload the group axis carries no labels; the legend
    names the settings once for all panels.
    """
    metrics = list(metrics) if metrics is not None else table_metrics(table)
    if not metrics:
        raise ValueError("the table has no metric columns (<metric> beside <metric>_ci_half)")
    settings = list(dict.fromkeys(table["setting"].astype(str)))
    workloads = list(dict.fromkeys(table["workload"].astype(str)))
    ncols = min(MAX_COLUMNS, len(metrics))
    nrows = math.ceil(len(metrics) / ncols)
    panel_w = max(3.6, 0.9 + 0.32 * len(settings) * len(workloads))
    legend_rows = math.ceil(len(settings) / LEGEND_COLUMNS)
    fig = Figure(figsize=(panel_w * ncols, 3.2 * nrows + 0.5 + 0.22 * legend_rows))
    FigureCanvasAgg(fig)
    width = 0.8 / len(settings)
    colors = _colors(len(settings))
    key = (table["workload"].astype(str) + "\0" + table["setting"].astype(str)).tolist()
    index = {k: i for i, k in enumerate(key)}
    handles = []
    for n, metric in enumerate(metrics):
        ax = fig.add_subplot(nrows, ncols, n + 1)
        for j, s in enumerate(settings):
            rows = [index.get(f"{w}\0{s}") for w in workloads]
            means = np.array([table[metric].iloc[i] if i is not None else np.nan for i in rows], float)
            halves = np.array([table[metric + CI_SUFFIX].iloc[i] if i is not None else np.nan
                               for i in rows], float)
            pos = np.arange(len(workloads)) + (j - (len(settings) - 1) / 2) * width
            err = np.where(np.isfinite(halves), halves, 0.0) if np.isfinite(halves).any() else None
            # A run without a value (e.g. null lifetime: run too short) gets no bar, not a zero.
            bars = ax.bar(pos, means, width, color=colors[j], label=s,
                          yerr=err, capsize=3 if err is not None else 0,
                          error_kw={"elinewidth": 1, "ecolor": "0.2"})
            if n == 0:
                handles.append(bars)
        vals = table[metric].to_numpy(float)
        if np.isfinite(vals).any() and (vals[np.isfinite(vals)] >= 0).all():
            # A wide interval of a positive quantity may reach below zero; the axis need not.
            ax.set_ylim(bottom=0)
        ax.set_title(axis_label(metric), fontsize="medium")
        ax.set_xticks(np.arange(len(workloads)), workloads if len(workloads) > 1 else [""],
                      rotation=20 if len(workloads) > 3 else 0,
                      ha="right" if len(workloads) > 3 else "center", fontsize="small")
        if len(workloads) == 1:
            ax.tick_params(axis="x", length=0)
        ax.grid(True, axis="y", alpha=0.3)
        ax.set_axisbelow(True)
    multi = table["seeds"].max() > 1 if "seeds" in table.columns else False
    level = float(table.attrs.get("level", 0.95))
    title = f"error bars: {level:.0%} CI of the mean over seeds" if multi else "one seed per run"
    fig.legend(handles, settings, loc="lower center", ncol=min(LEGEND_COLUMNS, len(settings)), fontsize="small",
               title=f"setting ({title})", title_fontsize="x-small", frameon=False)
    fig.tight_layout(rect=(0, (0.35 + 0.22 * legend_rows) / fig.get_figheight(), 1, 1))
    return fig


def _colors(n: int) -> list:
    from matplotlib import colormaps

    cmap = colormaps["tab10" if n <= 10 else "tab20"]
    return [cmap(i % cmap.N) for i in range(n)]


def save_compare_figure(table: pd.DataFrame, folder: str | Path, metrics: Sequence[str] | None = None,
                        stem: str = "compare") -> Path:
    """Draw :func:`compare_figure` and write it as ``<folder>/<stem>.png`` (atomically)."""
    fig = compare_figure(table, metrics)
    return save_figure(fig, Path(folder), stem, formats=("png",))[0]


__all__ = ["compare_figure", "save_compare_figure", "table_metrics"]
