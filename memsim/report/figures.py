"""Standard figures of a sweep's results folder.

- a metric against a swept numeric key, mean over seeds with its confidence
  band, one line per value of the other varied keys;
- grouped bars of a metric per value of a categorical key (a policy), with
  confidence intervals as error bars;
- a CDF for every kept ``*_histogram`` table (latency, wear, ...), pooled over
  seeds, one line per value of a categorical key.

When too many combinations of the other varied keys would crowd a figure, the
keys beyond the first are held at their middle value and the title says so.
Axis labels take their unit from the metric name (``_ns`` -> ns, ``_pj`` ->
pJ, ``_gbps`` -> GB/s, ``_years`` -> years).  Every figure is written as PNG
and SVG with the Agg renderer, each file atomically.
"""
from __future__ import annotations

import io
import json
import re
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

from memsim.errors import UserError
from memsim.metrics.result import atomic_write_bytes
from memsim.units import split_unit

# Shown first when a sweep kept every summary key.
PREFERRED = ("throughput_gbps", "read_latency_p99_ns", "write_latency_p99_ns", "energy_per_bit_pj",
             "lifetime_years")
MAX_LINES = 8
MAX_GROUPS = 12
FORMATS = ("png", "svg")


def axis_label(name: str) -> str:
    """Readable label with the unit from the name: ``energy_per_bit_pj`` -> ``energy per bit (pJ)``."""
    stem, unit = split_unit(name)
    # A config key stays as written, so it can be found in the sweep file.
    text = name if "." in name else stem.replace("_", " ")
    return f"{text} ({unit})" if unit else text


def short(key: str) -> str:
    """``write.scheme`` -> ``scheme`` (for legends)."""
    return key.rsplit(".", 1)[-1]


@dataclass
class SweepResults:
    """A results folder read back: description, tidy table, statistics, kept tables."""

    folder: Path
    spec: dict[str, Any]
    runs: pd.DataFrame
    stats: pd.DataFrame
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)

    @property
    def varied(self) -> list[str]:
        return list(self.spec.get("varied", []))

    @property
    def axes(self) -> list[str]:
        """Varied keys that can be drawn on their own: in a zipped group only the first
        key, since the others move with it."""
        followers = {k for g in self.spec.get("zipped") or [] for k in list(g)[1:]}
        return [k for k in self.varied if k not in followers]

    @property
    def metrics(self) -> list[str]:
        return [m for m in self.spec.get("metrics", []) if m in set(self.stats["metric"])]

    def followers(self, key: str) -> list[str]:
        """Keys zipped with ``key`` (when it leads a zipped group)."""
        for g in self.spec.get("zipped") or []:
            if next(iter(g)) == key:
                return list(g)[1:]
        return []

    def numeric_keys(self) -> list[str]:
        return [k for k in self.axes if _is_numeric(self.runs[k]) and self.runs[k].nunique() > 1]

    def categorical_keys(self) -> list[str]:
        return [k for k in self.axes if not _is_numeric(self.runs[k]) and self.runs[k].nunique() > 1]


def _is_numeric(s: pd.Series) -> bool:
    return pd.api.types.is_numeric_dtype(s) and not pd.api.types.is_bool_dtype(s)


def load_results(folder: str | Path) -> SweepResults:
    """Read a sweep results folder written by ``memsim sweep`` (raises UserError if it is not one)."""
    folder = Path(folder)
    need = ["sweep.json", "runs.parquet", "point_stats.parquet"]
    missing = [n for n in need if not (folder / n).is_file()]
    if missing:
        raise UserError(str(folder), "no " + ", ".join(missing),
                        "a sweep results folder (made by memsim sweep)")
    spec = json.loads((folder / "sweep.json").read_text())
    tables = {p.stem: pd.read_parquet(p) for p in sorted((folder / "tables").glob("*.parquet"))}
    return SweepResults(folder, spec, pd.read_parquet(folder / "runs.parquet"),
                        pd.read_parquet(folder / "point_stats.parquet"), tables)


def middle(values: pd.Series) -> Any:
    """The middle one of the sorted distinct values (the reference a crowded figure holds fixed)."""
    u = sorted(values.dropna().unique().tolist(), key=lambda v: (str(type(v)), v))
    return u[len(u) // 2]


def narrow(df: pd.DataFrame, keys: Sequence[str], limit: int) -> tuple[list[str], dict[str, Any]]:
    """Keep the first keys whose combinations are at most ``limit``; the rest get fixed values.

    Categorical keys come first (they are usually the policies compared).
    """
    order = sorted(keys, key=lambda k: _is_numeric(df[k]))
    free = list(order)
    while free and int(np.prod([df[k].nunique() for k in free])) > limit:
        free.pop()
    fixed = {k: middle(df[k]) for k in order if k not in free}
    return free, fixed


def select(df: pd.DataFrame, fixed: dict[str, Any]) -> pd.DataFrame:
    mask = np.ones(len(df), dtype=bool)
    for k, v in fixed.items():
        mask &= (df[k] == v).to_numpy()
    return df[mask]


def setting_text(v: Any) -> str:
    """A setting's value as a reader expects it: ``4`` for a whole number stored as ``4.0``."""
    if isinstance(v, (float, np.floating)) and float(v).is_integer():
        return str(int(v))
    return str(v)


def _fixed_note(fixed: dict[str, Any]) -> str:
    return (" [" + ", ".join(f"{short(k)}={setting_text(v)}" for k, v in fixed.items()) + "]") if fixed else ""


def _combo_label(keys: Sequence[str], values: Sequence[Any]) -> str:
    return ", ".join(f"{short(k)}={setting_text(v)}" for k, v in zip(keys, values)) or "all"


MARKERS = ("o", "s", "^", "D", "v", "P")
LINESTYLES = ("-", "--", ":", "-.")


def _styles(hue: Sequence[str], combos: Sequence[tuple]) -> list[dict[str, Any]]:
    """Line styles that keep series apart even where they coincide.

    The first key picks the colour; the other keys pick line style and
    marker, drawn hollow after the first.  Series drawn earlier are wider,
    so one lying exactly on a later one still shows as its outline.
    """
    firsts = list(dict.fromkeys(c[0] for c in combos)) if hue else []
    rests = list(dict.fromkeys(c[1:] for c in combos)) if hue else []
    out = []
    for n, c in enumerate(combos):
        if len(hue) >= 2:
            i, j = firsts.index(c[0]), rests.index(c[1:])
        else:
            i, j = n, n
        k = (len(combos) - 1 - n) / max(1, len(combos) - 1)      # 1 for the first, 0 for the last
        out.append({"color": f"C{i % 10}", "linestyle": LINESTYLES[j % len(LINESTYLES)],
                    "marker": MARKERS[j % len(MARKERS)], "lw": 1.2 + 2.4 * k, "ms": 4.5 + 4.0 * k,
                    "mfc": None if j == 0 else "none"})
    return out


def _outside_legend(ax, **kw: Any) -> None:
    ax.legend(loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0.0, fontsize="small", **kw)


def wide_range(values: np.ndarray) -> bool:
    """Positive values over more than two decades read best on a log axis."""
    v = values[np.isfinite(values)]
    return bool(v.size and (v > 0).all() and v.max() > 100 * v.min())


def clipped_interval(mean: np.ndarray, lo: np.ndarray, hi: np.ndarray, log: bool,
                      nonneg: bool) -> tuple[np.ndarray, np.ndarray, bool]:
    """Interval ends kept inside what the metric and the axis can show.

    A positive metric's interval can reach below zero (a t interval over
    few seeds is symmetric); it is cut at zero, or on a log axis at a tenth
    of the smallest mean.  Returns the ends and whether any was cut.
    """
    floor = None
    if log:
        m = mean[np.isfinite(mean) & (mean > 0)]
        floor = 0.1 * m.min() if m.size else None
    elif nonneg:
        floor = 0.0
    if floor is None:
        return lo, hi, False
    cut = np.isfinite(lo) & (lo < floor)
    return np.where(cut, floor, lo), hi, bool(cut.any())


def line_figure(stats: pd.DataFrame, metric: str, x: str, others: Sequence[str],
                level: float = 0.95, followers: Sequence[str] = ()) -> Figure:
    """``metric`` against numeric key ``x``: mean and confidence band, one line per combination of ``others``.

    ``followers`` are keys zipped with ``x`` (named under the axis).  Axes
    turn logarithmic when the values span a wide range (x: values in even
    ratios such as 4, 8, 16 banks, or two decades; y: more than two decades).
    Bands are cut at zero (or at the log axis' floor), and the legend says so.
    """
    st = stats[stats["metric"] == metric]
    hue, fixed = narrow(st, others, MAX_LINES)
    st = select(st, fixed)
    fig = Figure(figsize=(7.6 if hue else 6.0, 4.2), layout="constrained")
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    means_all = st["mean"].to_numpy(float)
    log_y = wide_range(means_all)
    nonneg = bool(np.nanmin(means_all) >= 0) if np.isfinite(means_all).any() else False
    groups = list(st.groupby(hue, sort=False)) if hue else [((), st)]
    combos = [v if isinstance(v, tuple) else (v,) for v, _ in groups]
    any_cut = False
    for style, values, (_, g) in zip(_styles(hue, combos), combos, groups):
        g = g.sort_values(x)
        xs = g[x].to_numpy(float)
        mean = g["mean"].to_numpy(float)
        ax.plot(xs, mean, label=_combo_label(hue, values), **style)
        lo, hi, cut = clipped_interval(mean, g["ci_low"].to_numpy(float), g["ci_high"].to_numpy(float),
                                        log_y, nonneg)
        any_cut |= cut
        if np.isfinite(lo).any():
            ax.fill_between(xs, lo, hi, color=style["color"], alpha=0.12, lw=0)
    _scale_axes(ax, st[x].to_numpy(float), means_all)
    ax.set_xlabel(axis_label(x) + (f"\n(moves with {', '.join(map(short, followers))})" if followers else ""))
    ax.set_ylabel(axis_label(metric))
    ax.set_title(f"{axis_label(metric)} vs {short(x)}{_fixed_note(fixed)}", fontsize="medium")
    ax.grid(True, alpha=0.3)
    note = f"band: {level:.0%} CI of the mean" + (" (cut at the axis floor)" if any_cut else "")
    if hue:
        _outside_legend(ax, title=note, title_fontsize="x-small")
    else:
        ax.text(0.99, 0.99, note, transform=ax.transAxes, ha="right", va="top", fontsize="x-small")
    return fig


def _scale_axes(ax, xs: np.ndarray, ys: np.ndarray) -> None:
    xs, ys = xs[np.isfinite(xs)], ys[np.isfinite(ys)]
    u = np.unique(xs)
    ratios = u[1:] / u[:-1] if u.size > 1 and (u > 0).all() else np.array([])
    # Doubling steps (4, 8, 16 banks) read best on a log axis, as does a wide range.
    geometric = ratios.size >= 2 and ratios.min() > 1.5 and ratios.max() < 1.1 * ratios.min()
    if u.size > 1 and (u > 0).all() and (geometric or u[-1] >= 100 * u[0]):
        ax.set_xscale("log")
        ticks = np.unique(xs)
        if ticks.size <= 12:
            ax.set_xticks(ticks, [f"{v:g}" for v in ticks])
            ax.xaxis.set_minor_formatter(NullFormatter())
    if wide_range(ys):
        ax.set_yscale("log")
    elif ys.size and (ys >= 0).all():
        # A wide interval of a positive quantity may reach below zero; the axis need not.
        ax.set_ylim(bottom=0)


MAX_PANEL_GROUPS = 4


def bar_figure(stats: pd.DataFrame, metric: str, key: str, others: Sequence[str]) -> Figure:
    """Grouped bars of ``metric`` per value of categorical ``key``; groups are combinations of ``others``.

    With more than a few groups the figure becomes small multiples: one
    panel per value of the first other key, sharing the metric axis.  Error
    bars are the interval of the mean, cut at zero (or at the log axis'
    floor) where they would leave the metric's range; the title says so.
    """
    st = stats[stats["metric"] == metric]
    group_keys, fixed = narrow(st, others, MAX_GROUPS)
    st = select(st, fixed)
    bars = list(dict.fromkeys(st[key]))
    groups = list(dict.fromkeys(map(tuple, st[group_keys].to_numpy().tolist()))) if group_keys else [()]
    if len(groups) > MAX_PANEL_GROUPS and len(group_keys) >= 2:
        panel_key, inner_keys = group_keys[0], group_keys[1:]
    else:
        panel_key, inner_keys = None, group_keys
    panels = list(dict.fromkeys(st[panel_key])) if panel_key else [None]
    inner = list(dict.fromkeys(map(tuple, st[inner_keys].to_numpy().tolist()))) if inner_keys else [()]
    ncols = min(len(panels), 3)
    nrows = -(-len(panels) // ncols)
    width_in = 1.6 + ncols * max(2.6, 0.35 * len(bars) * len(inner) + 0.6)
    fig = Figure(figsize=(width_in, 0.6 + 3.2 * nrows), layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(nrows, ncols, sharey=True, squeeze=False).ravel()
    means_all = st["mean"].to_numpy(float)
    log_y = wide_range(means_all)
    nonneg = bool(np.nanmin(means_all) >= 0) if np.isfinite(means_all).any() else False
    width = 0.8 / len(bars)
    any_cut = False
    for ax, pv in zip(axes, panels):
        sub = st if panel_key is None else select(st, {panel_key: pv})
        for j, b in enumerate(bars):
            rows = [select(sub, {key: b, **dict(zip(inner_keys, gv))}) for gv in inner]
            mean = np.array([float(r["mean"].iloc[0]) if len(r) else np.nan for r in rows])
            lo = np.array([float(r["ci_low"].iloc[0]) if len(r) else np.nan for r in rows])
            hi = np.array([float(r["ci_high"].iloc[0]) if len(r) else np.nan for r in rows])
            lo, hi, cut = clipped_interval(mean, lo, hi, log_y, nonneg)
            any_cut |= cut
            err = np.vstack([np.where(np.isfinite(lo), mean - lo, 0.0), np.where(np.isfinite(hi), hi - mean, 0.0)])
            pos = np.arange(len(inner)) + (j - (len(bars) - 1) / 2) * width
            ax.bar(pos, mean, width, label=setting_text(b), color=f"C{j % 10}", yerr=err, capsize=3)
        labels = [_combo_label(inner_keys, g) if inner_keys else "" for g in inner]
        crowded = len(inner) > 3 or max((len(t) for t in labels), default=0) > 14
        ax.set_xticks(np.arange(len(inner)), labels, rotation=25 if crowded else 0,
                      ha="right" if crowded else "center", fontsize="small")
        if panel_key is not None:
            ax.set_title(f"{short(panel_key)}={setting_text(pv)}", fontsize="small")
        ax.grid(True, axis="y", alpha=0.3)
        if log_y:
            ax.set_yscale("log")
    for ax in axes[len(panels):]:
        ax.set_visible(False)
    for r in range(nrows):
        axes[r * ncols].set_ylabel(axis_label(metric))
    note = " (error bars: CI of the mean, cut at the axis floor)" if any_cut else ""
    fig.suptitle(f"{axis_label(metric)} by {short(key)}{_fixed_note(fixed)}{note}", fontsize="medium")
    _outside_legend(axes[ncols - 1] if len(panels) >= ncols else axes[len(panels) - 1], title=short(key))
    return fig


def histogram_value(table: pd.DataFrame) -> str | None:
    """The value a histogram table bins (``lo_ns``/``hi_ns`` -> ``ns``), or None if it is not one."""
    for col in table.columns:
        if col.startswith("lo_") and f"hi_{col[3:]}" in table.columns and "count" in table.columns:
            return col[3:]
    return None


def cdf_figure(table: pd.DataFrame, name: str, hue_keys: Sequence[str], others: Sequence[str]) -> Figure:
    """Empirical CDF from a binned histogram table, pooled over seeds.

    The pooled CDF at the upper edge of each bin is the share of all counted
    values (every seed of the point) in bins ending at or below it.
    """
    value = histogram_value(table)
    if value is None:
        raise ValueError(f"{name} has no lo_*/hi_*/count columns")
    hi = f"hi_{value}"
    hue = list(hue_keys)
    fixed = {k: middle(table[k]) for k in others}
    tab = select(table, fixed)
    panels = list(dict.fromkeys(tab["op"])) if "op" in tab.columns else [None]
    fig = Figure(figsize=(5.2 * len(panels) + (1.8 if hue else 0.0), 4.0))
    FigureCanvasAgg(fig)
    log_x = bool((tab[hi] > 0).all() and tab[hi].max() > 10 * tab[hi].min())
    stem, unit = split_unit(name.removesuffix("_histogram") + "_" + value)
    for n, panel in enumerate(panels):
        ax = fig.add_subplot(1, len(panels), n + 1)
        part = tab if panel is None else tab[tab["op"] == panel]
        groups = part.groupby(hue, sort=False) if hue else [((), part)]
        for values, g in groups:
            values = values if isinstance(values, tuple) else (values,)
            g = g.sort_values(hi)
            c = g["count"].to_numpy(float)
            if c.sum() <= 0:
                continue
            # Start at 0 at the lowest bin edge, then step up at each bin's upper edge.
            xs = np.concatenate([[g[f"lo_{value}"].min()], g[hi].to_numpy(float)])
            ys = np.concatenate([[0.0], np.cumsum(c) / c.sum()])
            ax.step(xs, ys, where="post", label=_combo_label(hue, values))
        if log_x:
            ax.set_xscale("log")
            ax.xaxis.set_major_locator(LogLocator(subs=(1.0, 2.0, 5.0), numticks=12))
            ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
            ax.xaxis.set_minor_formatter(NullFormatter())
        ax.set_xlabel(f"{stem.replace('_', ' ')} ({unit})" if unit else stem.replace("_", " "))
        ax.set_ylabel("share at or below")
        ax.set_ylim(0, 1.02)
        ax.grid(True, alpha=0.3)
        ax.set_title((f"{panel}s " if panel else "") + f"CDF{_fixed_note(fixed)}", fontsize="medium")
        if hue and n == len(panels) - 1:
            _outside_legend(ax)
    fig.tight_layout()
    return fig


def save_figure(fig: Figure, folder: Path, stem: str, formats: Sequence[str] = FORMATS) -> list[Path]:
    """Write ``fig`` as ``<stem>.<fmt>`` for each format, each file atomically."""
    paths = []
    for fmt in formats:
        buf = io.BytesIO()
        fig.savefig(buf, format=fmt, dpi=120)
        p = folder / f"{stem}.{fmt}"
        atomic_write_bytes(p, buf.getvalue())
        paths.append(p)
    return paths


def _stem(*parts: str) -> str:
    return re.sub(r"[^A-Za-z0-9_-]+", "-", "_".join(parts))


def choose_metrics(res: SweepResults, metrics: Sequence[str] | None = None) -> list[str]:
    """The metrics to draw: those asked for, else the kept ones (a preferred few if many were kept)."""
    have = res.metrics
    if metrics:
        bad = [m for m in metrics if m not in have]
        if bad:
            raise UserError("--metric", ", ".join(bad), "metrics in the sweep: " + ", ".join(have))
        return list(metrics)
    if len(have) <= 6:
        return have
    pref = [m for m in PREFERRED if m in have]
    return pref or have[:4]


def standard_figures(folder: str | Path, metrics: Sequence[str] | None = None,
                     formats: Sequence[str] = FORMATS) -> list[Path]:
    """Draw the standard figures of a sweep results folder into ``<folder>/figures/``.

    Returns the PNG paths (an SVG sits beside each).
    """
    res = load_results(folder)
    out = res.folder / "figures"
    level = float(res.spec.get("level", 0.95))
    num, cat = res.numeric_keys(), res.categorical_keys()
    drawn: list[Path] = []
    for metric in choose_metrics(res, metrics):
        for x in num:
            fig = line_figure(res.stats, metric, x, [k for k in [*cat, *num] if k != x], level,
                              res.followers(x))
            drawn.append(save_figure(fig, out, _stem(metric, "vs", x), formats)[0])
        for key in cat:
            fig = bar_figure(res.stats, metric, key, [k for k in [*cat, *num] if k != key])
            drawn.append(save_figure(fig, out, _stem(metric, "by", key), formats)[0])
    for name, table in res.tables.items():
        if not name.endswith("_histogram") or histogram_value(table) is None:
            continue
        hue = cat[:1] or (num[:1] if num else [])
        others = [k for k in [*cat, *num] if k not in hue]
        fig = cdf_figure(table, name, hue, others)
        drawn.append(save_figure(fig, out, _stem(name.removesuffix("_histogram"), "cdf"), formats)[0])
    return drawn


def varied_values(res: SweepResults) -> dict[str, list]:
    return {k: list(dict.fromkeys(res.runs[k].tolist())) for k in res.varied}


__all__ = [
    "SweepResults",
    "axis_label",
    "bar_figure",
    "cdf_figure",
    "line_figure",
    "load_results",
    "save_figure",
    "split_unit",
    "standard_figures",
]
