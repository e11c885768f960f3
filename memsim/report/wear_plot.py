"""Figure: how wear is spread over the lines of a lifetime run.

Left, the histogram of per-line wear (line writes in the measuring window,
leveler moves included); right, the share of lines at or below a wear
level, against wear relative to the mean (1 = perfectly even).  Takes the
``wear_histogram`` and ``wear_cdf`` tables of :func:`memsim.experiment.lifetime.lifetime`.

Both panels mark the end-of-life level: the wear of the hottest lines, as
many as are dead when the device's life ends (``lifetime_dead_lines``; the
first failure when ``lifetime.capacity_loss`` is 0).  The device dies when
lines at that level wear out, while the mean line has used ``1 / level``
of that wear: the gap is what uneven wear costs.  Lines of equal endurance
are assumed; with endurance variation the lines that fail are the weak
ones among the hot, so the level is where life ends on average.
"""
from __future__ import annotations

import io
import os
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from memsim.metrics.result import RunResult, atomic_write_bytes

FIGURE_NAME = "wear.png"


def end_of_life_share(summary: Mapping[str, Any], config: Mapping[str, Any]) -> float | None:
    """Share of the modeled lines worn out when the device's life ends; None if it never ends.

    ``lifetime_dead_lines`` counts device lines.  Under ``spread`` traffic
    every modeled line stands for the same number of device lines, so the
    share is of the device (``device_lines``); under ``focused`` traffic only
    the modeled region wears, so it is of the modeled lines (``array.lines``).
    """
    dead, years = summary.get("lifetime_dead_lines"), summary.get("lifetime_years")
    if dead is None or years is None or not np.isfinite(years) or not dead > 0:
        return None
    if summary.get("lifetime_traffic") == "focused":
        lines = config.get("array", {}).get("lines")
    else:
        lines = summary.get("device_lines")
    if not lines:
        return None
    return min(1.0, float(dead) / float(lines))


def end_of_life_level(cdf: pd.DataFrame, share: float) -> tuple[float, float]:
    """Wear (line writes in the window) and wear over the mean of the hottest ``share`` of lines."""
    q = 1.0 - share
    at = cdf["share_of_lines"].to_numpy(float)
    rel = float(np.interp(q, at, cdf["wear_over_mean"].to_numpy(float)))
    return float(np.interp(q, at, cdf["wear_writes"].to_numpy(float))), rel


def wear_figure(hist: pd.DataFrame, cdf: pd.DataFrame, title: str = "",
                dead_share: float | None = None) -> Figure:
    """Build the two-panel wear figure (Agg canvas, no display needed).

    ``dead_share`` (see :func:`end_of_life_share`): mark the end-of-life
    level; None leaves it out (a run whose life does not end).
    """
    for name, table, cols in (("wear_histogram", hist, ("lo_writes", "hi_writes", "count")),
                              ("wear_cdf", cdf, ("share_of_lines", "wear_over_mean"))):
        missing = set(cols) - set(table.columns)
        if missing:
            raise ValueError(f"{name} lacks columns {sorted(missing)}")
    fig = Figure(figsize=(10.0, 4.0))
    FigureCanvasAgg(fig)
    ax, bx = fig.subplots(1, 2)
    lo = hist["lo_writes"].to_numpy(float)
    width = hist["hi_writes"].to_numpy(float) - lo
    count = hist["count"].to_numpy(float)
    ax.bar(lo, count, width=width, align="edge", color="tab:blue", edgecolor="none")
    # A few worn-out lines beside thousands of even ones vanish on a linear axis.
    if count.max(initial=0) > 0 and count[count > 0].min() * 100 < count.max():
        ax.set_yscale("log")
    ax.set_xlabel("line wear in window (line writes)")
    ax.set_ylabel("lines (count)")
    ax.set_title("per-line wear", fontsize="medium")
    ax.grid(True, alpha=0.3)
    share = cdf["share_of_lines"].to_numpy(float)
    rel = cdf["wear_over_mean"].to_numpy(float)
    bx.plot(rel, share, drawstyle="steps-post", color="tab:blue")
    bx.axvline(1.0, color="grey", ls=":", lw=1.0)
    if np.nanmax(rel, initial=0) > 20:
        bx.set_xscale("symlog", linthresh=1.0)
    bx.set_xlabel("line wear / mean line wear (ratio)")
    bx.set_ylabel("share of lines at or below (fraction)")
    bx.set_ylim(0, 1.02)
    bx.set_title("wear CDF", fontsize="medium")
    bx.grid(True, alpha=0.3)
    if dead_share is not None and "wear_writes" in cdf.columns:
        writes, rel = end_of_life_level(cdf, dead_share)
        style = {"color": "tab:red", "ls": "--", "lw": 1.2}
        ax.axvline(writes, **style)
        mark = bx.axvline(rel, **style)
        fig.legend([mark], [f"end-of-life level: the hottest lines wear out at {rel:.4g} x mean wear; "
                            f"the mean line has then used {1 / rel:.1%} of that wear"],
                   loc="lower center", frameon=False, fontsize="small")
    if title:
        fig.suptitle(title, fontsize="medium")
    fig.tight_layout(rect=(0, 0.06 if dead_share is not None else 0, 1, 1))
    return fig


def plot_wear(tables: Mapping[str, pd.DataFrame], path: str | os.PathLike[str], title: str = "",
              dead_share: float | None = None) -> Path:
    """Draw :func:`wear_figure` from ``tables`` and write it to ``path`` as PNG, atomically."""
    out = Path(path)
    fig = wear_figure(tables["wear_histogram"], tables["wear_cdf"], title, dead_share)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=120)
    atomic_write_bytes(out, buf.getvalue())
    return out


def save_wear_figure(result: RunResult, folder: str | os.PathLike[str]) -> Path:
    """Write ``wear.png`` of a lifetime result into its results folder."""
    s = result.summary
    name = result.config.get("run", {}).get("name", "")
    title = f"{name}: leveling {result.config.get('leveling', {}).get('scheme', '?')}"
    if "wear_max_over_mean" in s:
        title += f", max/mean {s['wear_max_over_mean']:.3g}, CoV {s['wear_cov']:.3g}"
    share = end_of_life_share(s, result.config)
    if share is None and "lifetime_years" in s:
        title += "; end of life not reached (no end-of-life level)"
    return plot_wear(result.tables, Path(folder) / FIGURE_NAME, title, share)
