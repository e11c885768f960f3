"""Sweeps: a base config, keys to vary, replications over seeds.

A sweep file is TOML with these tables (all names are memsim's own)::

    [sweep]
    name = "tidewater_schemes"      # results go to results/<name>/ (default: file stem)
    base = "demo.toml"              # run config, relative to this file (optional)
    replications = 3                # seeds per point (default 3), or seeds = [..]
    base_seed = 2024                # seeds derive from it (default: base run.seed)
    metrics = ["throughput_gbps"]   # summary keys to keep (default: all)
    tables = ["latency_histogram"]  # per-run tables to keep (default: this one)

    [fixed]                         # overrides applied to every point
    workload.requests = 4000

    [grid]                          # full product of these lists
    write.scheme = ["full_line", "flip_n_write"]
    workload.read_fraction = [0.5, 0.9]

    [[zipped]]                      # keys varied together (equal-length lists);
    array.banks = [4, 8]            # the product with the grid and other groups
    controller.write_queue = [16, 32]

Replication ``i`` uses the same seed at every point (common random numbers),
so differences between points are not blurred by different random streams.
The seed of replication ``i`` depends only on ``base_seed`` and ``i``: adding
replications keeps the earlier ones.

Each run (point x seed) is cached by a hash of its resolved config (see
:mod:`memsim.experiment.cache`), so a killed sweep redoes only what did not
finish and a grown grid reuses every point it shares with the old one.  The
loop that does this is shared with comparisons: :mod:`memsim.experiment.batch`.
"""
from __future__ import annotations

import itertools
import json
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from memsim.config import RunConfig
from memsim.config.load import read_toml
from memsim.errors import ConfigError
from memsim.experiment.batch import (
    RESERVED,
    choose_metrics,
    derive_seeds,
    execute,
    flatten,
    metric_hint,
    probe_metrics,
)
from memsim.experiment.batch import (
    check_key as _check_key,
)
from memsim.experiment.cache import RunCache, config_key, table_from_entry, write_frame
from memsim.experiment.executors import Task, check_workers
from memsim.metrics.files import atomic_write_text, dumps, save_or_rescue
from memsim.metrics.stats import summarize

SECTIONS = ("sweep", "fixed", "grid", "zipped")
SWEEP_KEYS = ("name", "base", "replications", "seeds", "base_seed", "metrics", "tables")
DEFAULT_TABLES = ("latency_histogram",)
_NAME = re.compile(r"^[A-Za-z0-9_.-]+$")


@dataclass
class SweepSpec:
    """A validated sweep: what to run, before anything runs."""

    name: str
    base: Any
    grid: dict[str, list]
    zipped: list[dict[str, list]] = field(default_factory=list)
    fixed: dict[str, Any] = field(default_factory=dict)
    seeds: list[int] = field(default_factory=list)
    base_seed: int = 0
    metrics: list[str] | None = None
    tables: tuple[str, ...] = DEFAULT_TABLES
    source: str = "<sweep>"

    @property
    def varied(self) -> list[str]:
        """Dotted keys that change between points, grid first, then zipped groups."""
        return [*self.grid, *(k for g in self.zipped for k in g)]

    def points(self) -> list[dict[str, Any]]:
        """Every point as ``{dotted key: value}``; the last grid key varies fastest."""
        axes: list[list[dict[str, Any]]] = [[{k: v} for v in vals] for k, vals in self.grid.items()]
        for group in self.zipped:
            n = len(next(iter(group.values())))
            axes.append([{k: vals[i] for k, vals in group.items()} for i in range(n)])
        return [dict(kv for part in combo for kv in part.items()) for combo in itertools.product(*axes)]

    def to_json(self) -> dict[str, Any]:
        base = str(self.base) if isinstance(self.base, (str, Path)) else (
            None if self.base is None else "<in memory>")
        return {"name": self.name, "base": base, "fixed": self.fixed, "grid": self.grid,
                "zipped": self.zipped, "seeds": self.seeds, "base_seed": self.base_seed,
                "metrics": self.metrics, "tables": list(self.tables), "varied": self.varied}


def check_key(key: str, where: str) -> None:
    """Raise ConfigError unless ``key`` names a field of a run config (``section.field``) a sweep may vary."""
    _check_key(key, where, "seeds come from sweep.replications/base_seed; the folder from sweep.name")


def _value_lists(table: Mapping[str, Any], where: str, same_length: bool = False) -> dict[str, list]:
    out: dict[str, list] = {}
    n: int | None = None
    for key, vals in flatten(table).items():
        w = f"{where}.{key}"
        check_key(key, w)
        if not isinstance(vals, list) or not vals:
            raise ConfigError(w, repr(vals), "a non-empty list of values")
        if not all(isinstance(v, (bool, int, float, str)) for v in vals):
            raise ConfigError(w, repr(vals), "a list of plain values (numbers, strings, booleans)")
        if len({json.dumps(v) for v in vals}) != len(vals):
            raise ConfigError(w, repr(vals), "distinct values (a repeated value would repeat a point)")
        if same_length and n is not None and len(vals) != n:
            raise ConfigError(w, f"{len(vals)} values", f"{n} values, as many as the other keys of the group")
        n = len(vals) if n is None else n
        out[key] = list(vals)
    return out


def make_spec(base: Any = None, grid: Mapping[str, Any] | None = None, *,
              seeds: int | Sequence[int] = 3, zipped: Sequence[Mapping[str, Any]] | None = None,
              fixed: Mapping[str, Any] | None = None, metrics: Sequence[str] | None = None,
              tables: Sequence[str] = DEFAULT_TABLES, name: str | None = None,
              base_seed: int | None = None, source: str = "sweep") -> SweepSpec:
    """Validate the parts of a sweep into a :class:`SweepSpec` (raises ConfigError).

    ``seeds`` is the number of replications (seeds derived from ``base_seed``)
    or an explicit list of seeds.  Keys are dotted (``write.scheme``) or use
    ``__`` for the dot.
    """
    grid_l = _value_lists(grid or {}, f"{source}: grid")
    zipped_l: list[dict[str, list]] = []
    for i, group in enumerate(zipped or []):
        if not isinstance(group, Mapping) or not group:
            raise ConfigError(f"{source}: zipped[{i}]", repr(group), "a table of key = [values]")
        zipped_l.append(_value_lists(group, f"{source}: zipped[{i}]", same_length=True))
    seen: set[str] = set()
    for key in [*grid_l, *(k for g in zipped_l for k in g)]:
        if key in seen:
            raise ConfigError(f"{source}: {key}", "the key varied twice", "each key in one place only")
        seen.add(key)
    fixed_d = flatten(fixed or {})
    for key in fixed_d:
        check_key(key, f"{source}: fixed.{key}")
        if key in seen:
            raise ConfigError(f"{source}: fixed.{key}", "a key that is also varied",
                              "a key either fixed or varied")
    try:
        base_cfg = load_base(base, fixed_d, source)
    except ConfigError as exc:
        raise _rewhere(exc, source, "fixed") from None
    if name is None:
        name = f"{base_cfg.run.name}_sweep"
    if not isinstance(name, str) or not _NAME.match(name):
        raise ConfigError(f"{source}: sweep.name", repr(name), "letters, digits, '_', '.', '-'")
    if base_seed is None:
        base_seed = base_cfg.run.seed
    if isinstance(base_seed, bool) or not isinstance(base_seed, int) or base_seed < 0:
        raise ConfigError(f"{source}: sweep.base_seed", repr(base_seed), "a whole number >= 0")
    if isinstance(seeds, bool):
        raise ConfigError(f"{source}: sweep.replications", repr(seeds), "a whole number >= 1")
    if isinstance(seeds, int):
        if seeds < 1:
            raise ConfigError(f"{source}: sweep.replications", repr(seeds), "a whole number >= 1")
        seed_list = derive_seeds(base_seed, seeds)
    else:
        seed_list = list(seeds)
        if (not seed_list or any(isinstance(s, bool) or not isinstance(s, int) or s < 0 for s in seed_list)
                or len(set(seed_list)) != len(seed_list)):
            raise ConfigError(f"{source}: sweep.seeds", repr(seeds), "a non-empty list of distinct whole numbers >= 0")
    if metrics is not None:
        if isinstance(metrics, str) or not all(isinstance(m, str) for m in metrics) or not metrics:
            raise ConfigError(f"{source}: sweep.metrics", repr(metrics), "a non-empty list of summary key names")
        metrics = list(dict.fromkeys(metrics))
    if isinstance(tables, str) or not all(isinstance(t, str) for t in tables):
        raise ConfigError(f"{source}: sweep.tables", repr(tables), "a list of table names")
    if not grid_l and not zipped_l:
        raise ConfigError(f"{source}: grid", "no key to vary (an empty [grid] and no [[zipped]])",
                          "at least one key with a list of values; a one-value list such as "
                          "write.scheme = [\"flip_n_write\"] runs one point over the seeds")
    return SweepSpec(name=name, base=base, grid=grid_l, zipped=zipped_l, fixed=fixed_d, seeds=seed_list,
                     base_seed=base_seed, metrics=metrics, tables=tuple(tables), source=source)


def load_base(base: Any, fixed: Mapping[str, Any], source: str) -> RunConfig:
    from memsim.experiment.run import resolve

    if isinstance(base, (str, Path)) and not Path(base).is_file():
        raise ConfigError(f"{source}: sweep.base", repr(str(base)),
                          "an existing run config file (a path relative to the sweep file)")
    return resolve(base, dict(fixed))


def load_sweep(path: str | Path) -> SweepSpec:
    """Read and validate a sweep file; every mistake is one ConfigError naming file and key."""
    path = Path(path)
    doc = read_toml(path)
    src = str(path)
    for key in doc:
        if key not in SECTIONS:
            raise ConfigError(f"{src}: {key}", f"unknown key '{key}'", "one of " + ", ".join(SECTIONS))
    head = doc.get("sweep", {})
    if not isinstance(head, dict):
        raise ConfigError(f"{src}: sweep", repr(head), "a table [sweep]")
    for key in head:
        if key not in SWEEP_KEYS:
            raise ConfigError(f"{src}: sweep.{key}", f"unknown key '{key}'", "one of " + ", ".join(SWEEP_KEYS))
    if "seeds" in head and "replications" in head:
        raise ConfigError(f"{src}: sweep.seeds", "both seeds and replications", "one of the two")
    for sec in ("grid", "fixed"):
        if not isinstance(doc.get(sec, {}), dict):
            raise ConfigError(f"{src}: {sec}", repr(doc[sec]), f"a table [{sec}]")
    zipped = doc.get("zipped", [])
    if not isinstance(zipped, list):
        raise ConfigError(f"{src}: zipped", repr(zipped), "tables [[zipped]]")
    base = head.get("base")
    if base is not None:
        if not isinstance(base, str):
            raise ConfigError(f"{src}: sweep.base", repr(base), "a path to a run config")
        base = str(path.parent / base)
    return make_spec(base, doc.get("grid", {}), seeds=head.get("seeds", head.get("replications", 3)),
                     zipped=zipped, fixed=doc.get("fixed", {}), metrics=head.get("metrics"),
                     tables=head.get("tables", DEFAULT_TABLES), name=head.get("name", path.stem),
                     base_seed=head.get("base_seed"), source=src)


def _rewhere(exc: ConfigError, source: str, section: str) -> ConfigError:
    """Point a ``--set key`` error at the sweep file's ``section.key`` instead."""
    if exc.where.startswith("--set "):
        return ConfigError(f"{source}: {section}.{exc.where[6:]}", exc.found, exc.allowed)
    return exc


@dataclass
class SweepOutcome:
    """What a sweep produced: the tidy table, its statistics, kept tables, counts."""

    runs: pd.DataFrame
    stats: pd.DataFrame
    tables: dict[str, pd.DataFrame]
    folder: Path | None
    ran: int
    reused: int
    failed: int
    tracebacks: list[str] = field(default_factory=list)
    executor: str = "the cache"
    save_error: str = ""                # why the results are not (all) where asked, if so


def plan(spec: SweepSpec) -> tuple[list[dict[str, Any]], list[Task], list[str]]:
    """Rows (point, seed, varied values), one task per row, and an empty error per row.

    Every point is resolved and validated here, before any runs: the first
    invalid point raises its ConfigError, naming the sweep file and the key.
    """
    from memsim.experiment.run import resolve

    rows: list[dict[str, Any]] = []
    tasks: list[Task] = []
    section = {k: "grid" for k in spec.grid} | {k: "zipped" for g in spec.zipped for k in g}
    for p, values in enumerate(spec.points()):
        try:
            # JSON types, so the task travels to any executor and hashes the same way.
            cfg = resolve(spec.base, {**spec.fixed, **values}).model_dump(mode="json")
        except ConfigError as exc:
            key = exc.where[6:] if exc.where.startswith("--set ") else ""
            err = _rewhere(exc, spec.source, section.get(key, "fixed"))
            if not err.where.startswith(spec.source):
                # Blamed on the base config: say which point of the sweep brought it out.
                point = ", ".join(f"{k} = {v!r}" for k, v in values.items())
                err = ConfigError(f"{spec.source}: point {p} ({point}): {err.where}", err.found, err.allowed)
            raise err from None
        for seed in spec.seeds:
            rows.append({"point": p, "seed": seed, **values})
            c = {**cfg, "run": {**cfg["run"], "seed": seed}}
            tasks.append(Task(config_key(c), c, spec.tables))
    return rows, tasks, [""] * len(rows)


def check_metrics(spec: SweepSpec, tasks: Sequence[Task], probe_points: int = 16) -> None:
    """Raise a ConfigError naming ``sweep.metrics`` when a requested metric is no summary key
    (short probe runs before the sweep: :func:`memsim.experiment.batch.probe_metrics`)."""
    probe_metrics(spec.metrics, tasks, f"{spec.source}: sweep.metrics", probe_points)


def run_sweep(spec: SweepSpec, *, workers: int | None = None, scheduler: str | None = None,
              out: str | Path | None = None, progress: bool | None = None,
              level: float = 0.95, check: bool = True) -> SweepOutcome:
    """Run every point x seed of ``spec``; cache and write results when ``out`` is given.

    Every point is validated before any run starts (the first invalid one
    raises its ConfigError), and, with ``check``, the names of
    ``sweep.metrics`` are checked against the keys of short probe runs.

    Parameters
    ----------
    workers:
        Local processes (None = every core, 1 = in this process).
    scheduler:
        Address of a Dask scheduler; when given the runs go there instead.
    out:
        Results folder: ``cache/`` (one JSON per finished run), ``runs`` and
        ``point_stats`` (Parquet and CSV), ``tables/``, ``sweep.json``.
        None keeps everything in memory (no cache).
    progress:
        Show a progress bar (None: only on a terminal).
    """
    check_workers(workers)
    rows, tasks, errors = plan(spec)
    folder = Path(out) if out is not None else None
    if check:
        check_metrics(spec, tasks)
    cache = RunCache(folder / "cache") if folder is not None else None
    done = execute(tasks, workers=workers, scheduler=scheduler, cache=cache, tables=spec.tables,
                   progress=progress, desc=spec.name)
    entries, failures = done.entries, done.failures
    for i, t in enumerate(tasks):
        if t.key in failures:
            errors[i] = failures[t.key]["error"]
    runs, metrics = assemble(spec, rows, tasks, errors, entries)
    stats = point_stats(runs, spec.varied, metrics, level=level)
    tables = gather_tables(spec, rows, tasks, entries)
    outcome = SweepOutcome(runs, stats, tables, folder, ran=done.ran, reused=done.reused_runs,
                           failed=sum(1 for e in errors if e), tracebacks=done.tracebacks,
                           executor=done.executor)
    if folder is not None:
        saved, err = save_or_rescue(lambda f: save(outcome, spec, metrics, level, f), folder, spec.name)
        outcome.folder = saved
        outcome.save_error = "; ".join(e for e in (done.cache_error, err) if e)
    return outcome


def assemble(spec: SweepSpec, rows: list[dict], tasks: list[Task | None], errors: list[str],
             entries: Mapping[str, Mapping]) -> tuple[pd.DataFrame, list[str]]:
    """The tidy table (row per point x seed) and the metric columns it holds."""
    summaries = [entries[t.key]["summary"] if t is not None and t.key in entries else None for t in tasks]
    metrics = choose_metrics(summaries, spec.metrics, f"{spec.source}: sweep.metrics")
    table = []
    for row, s, err, t in zip(rows, summaries, errors, tasks):
        r = dict(row)
        for m in metrics:
            v = s.get(m) if s else None
            r[m] = np.nan if v is None else v     # null in a cache entry: no meaningful value
        r["error"] = err
        r["key"] = t.key if t is not None else ""
        table.append(r)
    df = pd.DataFrame(table, columns=["point", "seed", *spec.varied, *metrics, "error", "key"])
    for col in spec.varied:
        df[col] = _plain_column(df[col])
    df.attrs.update(name=spec.name, varied=spec.varied, metrics=metrics)
    return df, metrics


def _plain_column(s: pd.Series) -> pd.Series:
    """One type per varied column (Parquet needs it): ints+floats -> float, mixed -> str."""
    kinds = {type(v) for v in s}
    if kinds <= {int, float} and len(kinds) > 1:
        return s.astype(float)
    if len(kinds) > 1:
        return s.astype(str)
    return s


def point_stats(runs: pd.DataFrame, varied: Sequence[str] | None = None,
                metrics: Sequence[str] | None = None, level: float = 0.95) -> pd.DataFrame:
    """Mean, std and Student-t confidence interval of each metric at each point.

    One row per point x metric (columns ``point``, the varied keys, ``metric,
    n, mean, std, ci_half, ci_low, ci_high``); failed runs do not count.
    Uses :func:`memsim.metrics.stats.summarize`.
    """
    varied = list(runs.attrs.get("varied", []) if varied is None else varied)
    metrics = list(runs.attrs.get("metrics", []) if metrics is None else metrics)
    numeric = [m for m in metrics if pd.api.types.is_numeric_dtype(runs[m])
               and not pd.api.types.is_bool_dtype(runs[m])]
    return summarize(runs, by=["point", *varied], metrics=numeric, level=level)


def gather_tables(spec: SweepSpec, rows: list[dict], tasks: list[Task | None],
                  entries: Mapping[str, Mapping]) -> dict[str, pd.DataFrame]:
    """Each kept per-run table, stacked over runs with point, seed and varied columns."""
    out = {}
    for name in spec.tables:
        parts = []
        for row, t in zip(rows, tasks):
            if t is None or t.key not in entries:
                continue
            tab = table_from_entry(entries[t.key], name)
            if tab is not None and len(tab):
                parts.append(tab.assign(**row)[[*row, *tab.columns]])
        if parts:
            df = pd.concat(parts, ignore_index=True)
            for col in spec.varied:
                df[col] = _plain_column(df[col])
            out[name] = df
    return out


def save(outcome: SweepOutcome, spec: SweepSpec, metrics: list[str], level: float = 0.95,
         folder: Path | None = None) -> None:
    """Write the sweep's tables and description into ``folder`` (default its own), each file atomically."""
    folder = folder or outcome.folder
    assert folder is not None
    write_frame(outcome.runs, folder, "runs")
    write_frame(outcome.stats, folder, "point_stats")
    for name, df in outcome.tables.items():
        write_frame(df, folder / "tables", name)
    doc = {**spec.to_json(), "metrics": metrics, "level": level, "runs": len(outcome.runs),
           "failed": outcome.failed}
    atomic_write_text(folder / "sweep.json", dumps(doc, indent=2, default=str))
    log = folder / "errors.txt"
    if outcome.tracebacks:
        atomic_write_text(log, "\n".join(outcome.tracebacks))
    elif log.exists():
        log.unlink()


def sweep(base: Any = None, grid: Mapping[str, Sequence[Any]] | None = None, *,
          seeds: int | Sequence[int] = 3, workers: int | None = None,
          zipped: Sequence[Mapping[str, Sequence[Any]]] | None = None,
          metrics: Sequence[str] | None = None, scheduler: str | None = None,
          out: str | Path | None = None, fixed: Mapping[str, Any] | None = None,
          tables: Sequence[str] = DEFAULT_TABLES, name: str | None = None,
          base_seed: int | None = None, progress: bool | None = None) -> pd.DataFrame:
    """Run a sweep from Python and return its tidy table (one row per point x seed).

    Parameters
    ----------
    base:
        Run config: TOML path, dict, RunConfig or None (defaults).
    grid:
        ``{"section.key": [values]}`` (or ``section__key``); the full product is run.
    seeds:
        Number of replications (seeds derived from ``base_seed``, default the
        base config's ``run.seed``) or an explicit list of seeds.
    workers:
        Local processes (None = every core, 1 = in this process).
    zipped:
        Groups of keys varied together: ``[{"a.x": [1, 2], "a.y": [3, 4]}]``.
    metrics:
        Summary keys to keep (default all).
    scheduler:
        Dask scheduler address; the runs go to that cluster.
    out:
        Results folder (with the cache); None keeps everything in memory.
    fixed:
        Overrides applied to every point.

    Returns
    -------
    DataFrame with columns ``point, seed``, the varied keys, the metrics,
    ``error`` (empty when the run succeeded) and ``key`` (the cache key).
    ``df.attrs`` holds ``name``, ``varied`` and ``metrics``; pass it to
    :func:`point_stats` for means and confidence intervals.

    Raises
    ------
    ConfigError
        Before any run: an invalid point, an unknown metric name, or a sweep
        that varies nothing.
    """
    spec = make_spec(base, grid, seeds=seeds, zipped=zipped, fixed=fixed, metrics=metrics,
                     tables=tables, name=name, base_seed=base_seed)
    return run_sweep(spec, workers=workers, scheduler=scheduler, out=out, progress=progress).runs


__all__ = ["DEFAULT_TABLES", "RESERVED", "SweepOutcome", "SweepSpec", "check_key", "derive_seeds", "flatten",
           "load_sweep", "make_spec", "metric_hint", "plan", "point_stats", "run_sweep", "sweep"]
