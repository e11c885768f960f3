"""Figures of the lumped cell model: the capping-layer trade-off and energy
scaling with cell size.  Take the tables made by
:func:`memsim.experiment.cell.cell_model`."""
from __future__ import annotations

import os
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from memsim.metrics.result import RunResult, atomic_write_text

CAUTION_SHORT = "architecture estimate (lumped thermal model), not a device design"


def _save(fig: Figure, path: str | os.PathLike[str]) -> Path:
    out = Path(path)
    out.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=out.parent, prefix=f".{out.stem}.", suffix=out.suffix)
    try:
        with os.fdopen(fd, "wb") as fh:
            fig.savefig(fh, format=out.suffix.lstrip(".") or "png", dpi=120)
        os.replace(tmp, out)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return out


def capping_figure(table: pd.DataFrame, spec_conductivity: float | None = None,
                   current_limit_ua: float | None = None) -> Figure:
    """RESET energy and current (left) and quench time against the critical
    crystallization time (right) against capping-layer conductivity; the
    spec's own conductivity and the access device's current limit are marked."""
    k = table["capping_conductivity_w_mk"].to_numpy(float)
    fig = Figure(figsize=(10.0, 4.2))
    ax1, ax2 = fig.subplots(1, 2)
    ax1.plot(k, table["reset_pj"], "o-", color="tab:red", label="RESET energy (pJ)")
    ax1.set_xscale("log")
    ax1.set_yscale("log")
    ax1.set_xlabel("capping-layer conductivity (W/(m K))")
    ax1.set_ylabel("RESET energy per cell (pJ)", color="tab:red")
    tw = ax1.twinx()
    tw.plot(k, table["reset_current_ua"], "s--", color="tab:blue", ms=3, label="RESET current (uA)")
    tw.set_yscale("log")
    tw.set_ylabel("RESET current (uA)", color="tab:blue")
    if current_limit_ua is not None:
        tw.axhline(current_limit_ua, color="tab:blue", ls=":", lw=1.2)
        tw.annotate("access device limit", (k[0], current_limit_ua), textcoords="offset points",
                    xytext=(2, 3), fontsize="small", color="tab:blue")
    if spec_conductivity is not None:
        for ax in (ax1, ax2):
            ax.axvline(spec_conductivity, color="grey", ls="-.", lw=1.0)
        ax1.annotate("this cell", (spec_conductivity, ax1.get_ylim()[0]), textcoords="offset points",
                     xytext=(3, 5), fontsize="small", color="grey")
    ax1.set_title("RESET cost: less conductive capping keeps heat in")
    ax1.grid(True, which="both", alpha=0.3)

    ok = table["quench_fast_enough"].to_numpy(bool)
    ax2.plot(k, table["quench_ns"], "o-", color="black", label="quench time Tm -> Tx (ns)")
    ax2.plot(k, table["critical_quench_ns"], "--", color="tab:orange", label="critical crystallization time (ns)")
    if (~ok).any():
        ax2.plot(k[~ok], table["quench_ns"].to_numpy(float)[~ok], "x", color="tab:red", ms=9, mew=2,
                 label="too slow: recrystallizes")
    ax2.set_xscale("log")
    ax2.set_yscale("log")
    ax2.set_xlabel("capping-layer conductivity (W/(m K))")
    ax2.set_ylabel("time (ns)")
    ax2.set_title("Quench: less conductive capping cools slower")
    ax2.grid(True, which="both", alpha=0.3)
    ax2.legend(fontsize="small", loc="upper right")
    fig.suptitle(f"Capping-layer trade-off: {CAUTION_SHORT}", fontsize="medium")
    fig.tight_layout()
    return fig


def scaling_figure(table: pd.DataFrame) -> Figure:
    """SET and RESET energy per cell against the cell's linear scale, log-log,
    with the fitted power-law slope in the legend."""
    s = table["size_scale"].to_numpy(float)
    fig = Figure(figsize=(6.5, 4.5))
    ax = fig.add_subplot()
    for col, color, name in (("reset_pj", "tab:red", "RESET"), ("set_pj", "tab:green", "SET")):
        y = table[col].to_numpy(float)
        slope = float(np.polyfit(np.log(s), np.log(y), 1)[0])
        ax.plot(s, y, "o-", color=color, label=f"{name} energy (slope {slope:.2f})")
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("cell size s relative to the spec (volume x s^3, contact area x s^2, cap fixed)")
    ax.set_ylabel("energy per cell (pJ)")
    ax.set_title(f"Energy scaling with cell size\n{CAUTION_SHORT}", fontsize="medium")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize="small")
    fig.tight_layout()
    return fig


def plot_capping(table: pd.DataFrame, path: str | os.PathLike[str], spec_conductivity: float | None = None,
                 current_limit_ua: float | None = None) -> Path:
    return _save(capping_figure(table, spec_conductivity, current_limit_ua), path)


def plot_scaling(table: pd.DataFrame, path: str | os.PathLike[str]) -> Path:
    return _save(scaling_figure(table), path)


def save_cell(result: RunResult, folder: str | Path) -> list[Path]:
    """Write a :func:`memsim.experiment.cell.cell_model` result into ``folder``: summary, tables, the preset, both figures."""
    folder = Path(folder)
    result.save(folder)
    name = result.summary["cell"]
    preset = folder / f"{name}_preset.toml"
    atomic_write_text(preset, result.config["preset_toml"])
    spec = result.config["spec"]
    return [preset, plot_capping(result.tables["capping_sweep"], folder / "cell_capping.png",
                                 spec["capping.conductivity_w_mk"], spec["access.current_limit_ua"]),
            plot_scaling(result.tables["size_sweep"], folder / "cell_scaling.png")]
