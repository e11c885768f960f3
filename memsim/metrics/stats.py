"""Statistics over replications (seeds): mean, spread and confidence intervals.

A sweep's tidy result table has one row per point x seed and one column per
metric.  :func:`summarize` turns it into one row per point x metric with the
number of replications, mean, sample standard deviation and a Student-t
confidence interval for the mean.
"""
from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd
from scipy import stats

from memsim.errors import ConfigError

SUMMARY_COLUMNS = ("metric", "n", "mean", "std", "ci_half", "ci_low", "ci_high")


def t_half_width(std: np.ndarray | float, n: np.ndarray | int,
                 level: float = 0.95) -> np.ndarray:
    """Half-width of the Student-t interval for a mean: ``t * std / sqrt(n)``.

    ``t`` is the ``(1 + level) / 2`` quantile of Student's t with ``n - 1``
    degrees of freedom.  NaN where ``n < 2``.

    References
    ----------
    Student (W. S. Gosset), "The probable error of a mean", Biometrika 6(1),
    1908.
    """
    _check_level(level)
    std = np.asarray(std, dtype=float)
    n = np.asarray(n, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        q = stats.t.ppf((1.0 + level) / 2.0, np.where(n >= 2, n - 1, np.nan))
        return np.where(n >= 2, q * std / np.sqrt(n), np.nan)


def mean_interval(values: Sequence[float] | np.ndarray,
                  level: float = 0.95) -> tuple[float, float, float]:
    """``(mean, low, high)`` of the Student-t interval for the mean of ``values``.

    NaN values are ignored; low and high are NaN with fewer than two values.
    """
    x = np.asarray(values, dtype=float)
    x = x[~np.isnan(x)]
    if x.size == 0:
        return np.nan, np.nan, np.nan
    mean = float(x.mean())
    half = float(t_half_width(x.std(ddof=1) if x.size > 1 else np.nan, x.size, level))
    return mean, mean - half, mean + half


def summarize(df: pd.DataFrame, by: str | Sequence[str] = (),
              metrics: Sequence[str] | None = None, *, level: float = 0.95,
              exclude: Sequence[str] = ("seed",)) -> pd.DataFrame:
    """Summarize replications: one row per group (point) and metric.

    Parameters
    ----------
    df:
        Tidy table, one row per replication, metrics as columns.
    by:
        Column(s) naming the point a row belongs to; empty for one group.
    metrics:
        Metric columns to summarize; default all numeric columns that are
        neither in ``by`` nor in ``exclude``.
    level:
        Confidence level of the interval, in (0, 1).
    exclude:
        Columns never taken as metrics by default (the seed).

    Returns
    -------
    DataFrame with the ``by`` columns then ``metric, n, mean, std, ci_half,
    ci_low, ci_high``.  ``n`` counts non-missing values; ``std`` uses
    ``ddof=1``; the interval is ``mean +/- t_{(1+level)/2, n-1} std/sqrt(n)``
    (Student's t).  With ``n < 2`` std and interval are NaN.

    Raises
    ------
    ConfigError
        For an unknown or non-numeric column, or a level outside (0, 1).
    """
    _check_level(level)
    keys = [by] if isinstance(by, str) else list(by)
    for k in keys:
        if k not in df.columns:
            raise ConfigError("summarize: by", repr(k), f"columns {list(df.columns)}")
    if metrics is None:
        metrics = [c for c in df.columns if c not in keys and c not in exclude
                   and pd.api.types.is_numeric_dtype(df[c]) and not pd.api.types.is_bool_dtype(df[c])]
    else:
        metrics = list(metrics)
        for m in metrics:
            if m not in df.columns:
                raise ConfigError("summarize: metrics", repr(m), f"columns {list(df.columns)}")
            if not pd.api.types.is_numeric_dtype(df[m]):
                raise ConfigError("summarize: metrics", f"{m!r} of type {df[m].dtype}",
                                  "numeric columns")
    out_cols = [*keys, *SUMMARY_COLUMNS]
    if not metrics or df.empty:
        return pd.DataFrame({c: [] for c in out_cols})
    long = df.melt(id_vars=keys, value_vars=metrics, var_name="metric", value_name="value")
    long["value"] = long["value"].astype(float)
    grouped = long.groupby([*keys, "metric"], sort=False, dropna=False)["value"]
    res = grouped.agg(n="count", mean="mean", std="std").reset_index()
    res["n"] = res["n"].astype(np.int64)
    res.loc[res["n"] < 2, "std"] = np.nan
    res["ci_half"] = t_half_width(res["std"].to_numpy(), res["n"].to_numpy(), level)
    res["ci_low"] = res["mean"] - res["ci_half"]
    res["ci_high"] = res["mean"] + res["ci_half"]
    # Keep the point order of the input and the metric order asked for.
    order = {m: i for i, m in enumerate(metrics)}
    res["_m"] = res["metric"].map(order)
    first_seen = long.drop_duplicates(keys)[keys].reset_index(drop=True) if keys else None
    if first_seen is not None:
        first_seen["_p"] = np.arange(len(first_seen))
        res = res.merge(first_seen, on=keys, how="left")
        res = res.sort_values(["_p", "_m"], kind="stable")
    else:
        res = res.sort_values("_m", kind="stable")
    return res[out_cols].reset_index(drop=True)


def _check_level(level: float) -> None:
    if not 0.0 < level < 1.0:
        raise ConfigError("confidence level", repr(level), "a number strictly between 0 and 1")
