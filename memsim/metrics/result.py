"""RunResult: the summary (flat dict, units in names), tables and provenance."""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from memsim.metrics.files import atomic_write_bytes, atomic_write_text, dumps
from memsim.workload.chunk import READ, WRITE

__all__ = ["RunResult", "atomic_write_bytes", "atomic_write_text", "latency_histogram", "latency_stats"]


def latency_stats(lat: np.ndarray, prefix: str) -> dict[str, float]:
    """Mean and percentiles of a latency sample, ns (NaN when empty)."""
    out = {}
    ok = lat[np.isfinite(lat)]
    q = np.percentile(ok, [50, 95, 99]) if ok.size else [np.nan] * 3
    out[f"{prefix}_mean_ns"] = float(ok.mean()) if ok.size else float("nan")
    out[f"{prefix}_p50_ns"] = float(q[0])
    out[f"{prefix}_p95_ns"] = float(q[1])
    out[f"{prefix}_p99_ns"] = float(q[2])
    return out


def latency_histogram(lat: np.ndarray, op: np.ndarray, bins_per_decade: int = 20) -> pd.DataFrame:
    """Log-binned latency histogram per operation (columns op, lo_ns, hi_ns, count)."""
    rows = []
    ok = np.isfinite(lat) & (lat > 0)
    if not ok.any():
        return pd.DataFrame(columns=["op", "lo_ns", "hi_ns", "count"])
    lo = np.floor(np.log10(lat[ok].min()) * bins_per_decade) / bins_per_decade
    hi = np.ceil(np.log10(lat[ok].max()) * bins_per_decade) / bins_per_decade + 1 / bins_per_decade
    edges = 10 ** np.arange(lo, hi + 1e-9, 1 / bins_per_decade)
    for code, name in ((READ, "read"), (WRITE, "write")):
        sel = ok & (op == code)
        counts, _ = np.histogram(lat[sel], edges)
        for a, b, c in zip(edges[:-1], edges[1:], counts):
            if c:
                rows.append((name, float(a), float(b), int(c)))
    return pd.DataFrame(rows, columns=["op", "lo_ns", "hi_ns", "count"])


@dataclass
class RunResult:
    """Outcome of one run.

    Attributes
    ----------
    summary:
        Flat dict of scalars, units in the names.
    tables:
        Named DataFrames (latency histogram, wear histogram, ...).
    config:
        The fully resolved config as a plain dict.
    """

    summary: dict[str, Any]
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)
    config: dict[str, Any] = field(default_factory=dict)
    seed: int = 0
    version: str = ""
    wall_s: float = 0.0

    def to_frame(self) -> pd.DataFrame:
        """The summary as a one-row DataFrame."""
        return pd.DataFrame([self.summary])

    def save(self, folder: str | Path) -> Path:
        """Write summary.json (strict JSON: null for NaN/infinity), summary.csv and each
        table as CSV, each file atomically."""
        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        doc = {"summary": self.summary, "config": self.config, "seed": self.seed,
               "version": self.version, "wall_s": self.wall_s}
        atomic_write_text(folder / "summary.json", dumps(doc, indent=2))
        atomic_write_text(folder / "summary.csv", self.to_frame().to_csv(index=False))
        for name, table in self.tables.items():
            atomic_write_text(folder / f"{name}.csv", table.to_csv(index=False))
        return folder

