"""A one-page Markdown report of a sweep: what was varied, the table, the figures.

Written as ``report.md`` into the results folder, beside the files it links
to, so the folder can be shared or viewed as it is.
"""
from __future__ import annotations

import math
from collections.abc import Sequence
from pathlib import Path

import pandas as pd

from memsim.metrics.result import atomic_write_text
from memsim.report.figures import SweepResults, axis_label, choose_metrics, load_results

MAX_ROWS = 60


def fmt_number(v: float) -> str:
    """Four significant digits, plain notation for everyday magnitudes."""
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "-"
    if 1e3 <= abs(v) < 1e6:
        return f"{v:.0f}"
    if v == 0 or 1e-3 <= abs(v) < 1e3:
        return f"{v:.4g}"
    return f"{v:.3e}"


def mean_ci_table(res: SweepResults, metrics: Sequence[str]) -> pd.DataFrame:
    """One row per point: the varied values, then ``mean ± half-width`` per metric."""
    st = res.stats[res.stats["metric"].isin(metrics)]
    keys = ["point", *res.varied]
    rows = []
    for _, g in st.groupby(keys, sort=False):
        row = {k: g[k].iloc[0] for k in res.varied}
        for m in metrics:
            r = g[g["metric"] == m]
            if not len(r):
                row[axis_label(m)] = "-"
                continue
            mean, half = float(r["mean"].iloc[0]), float(r["ci_half"].iloc[0])
            row[axis_label(m)] = fmt_number(mean) + (f" ± {fmt_number(half)}" if math.isfinite(half) else "")
        rows.append(row)
    return pd.DataFrame(rows)


def markdown_table(df: pd.DataFrame) -> str:
    head = "| " + " | ".join(map(str, df.columns)) + " |"
    rule = "|" + "|".join("---" for _ in df.columns) + "|"
    body = ["| " + " | ".join(str(v).replace("|", "/") for v in row) + " |" for row in df.to_numpy().tolist()]
    return "\n".join([head, rule, *body])


def write_page(folder: str | Path, figures: Sequence[Path] = (), metrics: Sequence[str] | None = None) -> Path:
    """Write ``report.md`` for the sweep results in ``folder``; return its path.

    ``figures`` are PNG paths inside the folder (from
    :func:`memsim.report.figures.standard_figures`).
    """
    res = load_results(folder)
    spec = res.spec
    level = float(spec.get("level", 0.95))
    metrics = choose_metrics(res, metrics) if metrics is None else list(metrics)
    seeds = spec.get("seeds", [])
    failed = res.runs[res.runs["error"] != ""]
    lines = [f"# Sweep `{spec.get('name', res.folder.name)}`", ""]
    lines += [f"- base config: `{spec.get('base')}`",
              (f"- replications: {len(seeds)} seeds per point (base seed {spec.get('base_seed')}, "
               "the same seeds at every point)"),
              f"- runs: {len(res.runs)} ({res.runs['point'].nunique()} points), failed: {len(failed)}"]
    for k, v in (spec.get("fixed") or {}).items():
        lines.append(f"- fixed `{k}` = {v}")
    for k, v in (spec.get("grid") or {}).items():
        lines.append(f"- grid `{k}`: {', '.join(map(str, v))}")
    for i, group in enumerate(spec.get("zipped") or []):
        parts = "; ".join(f"`{k}`: {', '.join(map(str, v))}" for k, v in group.items())
        lines.append(f"- varied together (group {i + 1}): {parts}")
    lines += ["", f"## Results (mean ± half-width of the {level:.0%} Student-t interval over seeds)", ""]
    table = mean_ci_table(res, metrics)
    if len(table) > MAX_ROWS:
        lines += [f"First {MAX_ROWS} of {len(table)} points; all in `point_stats.csv`.", ""]
        table = table.head(MAX_ROWS)
    lines += [markdown_table(table) if len(table) else "No finished runs.", ""]
    if figures:
        lines += ["## Figures", ""]
        for p in figures:
            rel = Path(p).resolve().relative_to(res.folder.resolve())
            lines += [f"![{Path(p).stem}]({rel.as_posix()})", ""]
    if len(failed):
        lines += ["## Failed runs", "", markdown_table(failed[["point", "seed", "error"]]), ""]
    lines += ["## Files", "",
              "- `runs.parquet`, `runs.csv`: one row per point x seed (varied keys, metrics, `error`)",
              "- `point_stats.parquet`, `point_stats.csv`: per point and metric: n, mean, std, interval",
              "- `tables/`: kept per-run tables stacked over runs; `cache/`: one JSON per finished run",
              "- `figures/`: PNG and SVG", ""]
    path = res.folder / "report.md"
    atomic_write_text(path, "\n".join(lines))
    return path


def plot_sweep(folder: str | Path, metrics: Sequence[str] | None = None) -> dict[str, object]:
    """Draw the standard figures of a sweep results ``folder`` and write its report.md.

    Returns ``{"figures": [PNG paths], "report": path of report.md}`` (an
    SVG sits beside each PNG).
    """
    from memsim.report.figures import standard_figures

    figures = standard_figures(folder, list(metrics) if metrics else None)
    page = write_page(folder, figures, list(metrics) if metrics else None)
    return {"figures": figures, "report": page}
