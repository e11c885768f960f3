"""Figure: raw bit error rate of a line versus its age, per level and for the
whole line, with the ECC limit and the refresh age marked.

Takes the table made by :func:`memsim.tech.drift.error_table`.
"""

from __future__ import annotations

import io
import math
import os
import re
from pathlib import Path

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from memsim.metrics.files import atomic_write_bytes
from memsim.metrics.result import RunResult

_LEVEL_COL = re.compile(r"^rber_level_(\d+)$")


def rber_figure(table: pd.DataFrame, ecc_limit: float, refresh_age_s: float | None,
                subtitle: str = "") -> Figure:
    """Build the figure (log-log).  Zero error rates are left out (log axis).

    ``ecc_limit`` is the raw bit error rate the line's ECC tolerates at the
    target failure probability; ``refresh_age_s`` may be ``None`` or inf when
    no refresh is due inside the drift window.
    """
    missing = {"age_s", "rber_line"} - set(table.columns)
    if missing:
        raise ValueError(f"table lacks columns {sorted(missing)}")
    age = table["age_s"].to_numpy(dtype=np.float64)
    fig = Figure(figsize=(7.0, 4.5))
    ax = fig.add_subplot()

    def positive(col: str) -> np.ndarray:
        y = table[col].to_numpy(dtype=np.float64)
        return np.where(y > 0, y, np.nan)

    # Rates far below the ECC limit do not matter for refresh; showing hundreds
    # of decades of Gaussian tail would squash the interesting part.
    floor = max(ecc_limit * 1e-12, 1e-300)
    levels = sorted((int(m.group(1)), c) for c in table.columns if (m := _LEVEL_COL.match(c)))
    silent = []
    for lv, col in levels:
        y = positive(col)
        if np.nanmax(y, initial=0.0) >= floor:
            ax.plot(age, y, lw=1.2, alpha=0.8, label=f"level {lv}")
        else:
            silent.append(str(lv))        # no error rate the axis can show: named, not drawn
    ax.plot(age, positive("rber_line"), color="black", lw=2.2, label="line (all levels)")
    ax.axhline(ecc_limit, color="tab:red", ls="--", lw=1.2, label=f"ECC limit ({ecc_limit:.2e})")
    if refresh_age_s is not None and math.isfinite(refresh_age_s):
        ax.axvline(
            refresh_age_s, color="tab:green", ls=":", lw=1.5, label=f"refresh age ({refresh_age_s:.3g} s)"
        )
        title = "Raw bit error rate vs line age"
    else:
        title = "Raw bit error rate vs line age (no refresh due in window)"
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_ylim(floor, 1.0)
    # Explicit x range: with no positive error rate at all, no line carries
    # x data and the log axis would have nothing to scale to.
    ax.set_xlim(float(np.nanmin(age)), float(np.nanmax(age)))
    if silent:
        ax.text(
            0.01,
            0.98,
            f"below {floor:.0e} at every age: level {', '.join(silent)}",
            transform=ax.transAxes,
            fontsize="small",
            va="top",
        )
    ax.set_xlabel("line age since last write (s)")
    ax.set_ylabel("raw bit error rate (errors per bit)")
    ax.set_title(title + (f"\n{subtitle}" if subtitle else ""), fontsize="medium")
    ax.grid(True, which="major", alpha=0.3)
    ax.legend(loc="best", fontsize="small")
    fig.tight_layout()
    return fig


def plot_rber(
    table: pd.DataFrame, ecc_limit: float, refresh_age_s: float | None, path: str | os.PathLike[str],
    subtitle: str = "",
) -> Path:
    """Draw :func:`rber_figure` and save it to ``path`` (format from the
    suffix, written to a temp file then renamed so a crash leaves no half file)."""
    out = Path(path)
    fig = rber_figure(table, ecc_limit, refresh_age_s, subtitle)
    buf = io.BytesIO()
    fig.savefig(buf, format=out.suffix.lstrip(".") or "png", dpi=120)
    atomic_write_bytes(out, buf.getvalue())
    return out


def save_drift_figure(result: RunResult, folder: str | Path) -> Path:
    """Draw ``drift_rber.png`` of a :func:`memsim.experiment.drift.drift_report` result into ``folder``."""
    s = result.summary
    age = s["refresh_age_s"] if s["refresh_age_s"] is not None else s["retention_refresh_age_s"]
    age = age if age is not None and math.isfinite(age) else None
    what = ("drift and crystallization" if s["refresh_age_s"] is not None and s["retention_median_years"]
            is not None else "crystallization only" if s["refresh_age_s"] is None else "drift only")
    return plot_rber(result.tables["drift_errors_dense"], s["rber_limit"], age,
                     Path(folder) / "drift_rber.png", subtitle=f"at {s['temperature_k']:g} K, {what}")
