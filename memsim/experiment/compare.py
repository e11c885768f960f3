"""Side-by-side comparison: the same workload(s) under several settings.

A *setting* is a group of config overrides with a label, e.g. the label
``erase_ahead`` for ``write.scheme=block_erase, controller.write_cancel=true``.
Every setting runs on every workload with the same seeds (common random
numbers), so the differences between settings are not blurred by different
random streams.  The result is one row per workload x setting with the mean
of each metric over the seeds and the half-width of its confidence interval.

The written forms of settings and workloads are described in
:mod:`memsim.experiment.vary`.  Runs go through the batch loop shared with
sweeps (:mod:`memsim.experiment.batch`: executors, and, when an output folder
is given, the cache of finished runs in ``<out>/cache``), so a repeated or
extended comparison reruns nothing it already has.
"""
from __future__ import annotations

import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from memsim.errors import ConfigError, UserError
from memsim.experiment.batch import (
    RESERVED,
    Execution,
    derive_seeds,
    execute,
    flatten,
    probe_metrics,
)
from memsim.experiment.batch import (
    choose_metrics as _choose_metrics,
)
from memsim.experiment.cache import RunCache, config_key
from memsim.experiment.executors import Task
from memsim.experiment.vary import (
    Group,
    check_setting_key,
    parse_groups,
    settings_from,
    split_top,
    workloads_from,
)
from memsim.metrics.files import atomic_write_text, dumps, save_or_rescue
from memsim.metrics.stats import summarize

# Shown by default, in this order, when the runs report them.
SHOWN = ("throughput_gbps", "read_latency_p99_ns", "write_latency_p99_ns", "energy_per_bit_pj",
         "cells_programmed_per_write", "write_amplification", "lifetime_years")
CI_SUFFIX = "_ci_half"
_NAME = re.compile(r"^[A-Za-z0-9_.-]+$")


@dataclass
class CompareSpec:
    """A validated comparison: settings x workloads x seeds, before anything runs."""

    name: str
    base: Any
    settings: list[Group]
    workloads: list[Group]
    fixed: dict[str, Any] = field(default_factory=dict)
    seeds: list[int] = field(default_factory=list)
    metrics: list[str] | None = None
    level: float = 0.95
    fixed_origin: str = "fixed"

    def to_json(self) -> dict[str, Any]:
        base = str(self.base) if isinstance(self.base, (str, Path)) else (
            None if self.base is None else "<in memory>")

        def groups(gs: list[Group]) -> list[dict]:
            return [{"label": g.label, "overrides": g.overrides, "origin": g.origin} for g in gs]

        return {"name": self.name, "base": base, "settings": groups(self.settings),
                "workloads": groups(self.workloads), "fixed": self.fixed, "seeds": self.seeds,
                "metrics": self.metrics, "level": self.level}


def make_compare_spec(config: Any, vary: Any, *, seeds: int | Sequence[int] = 1,
                      fixed: Mapping[str, Any] | None = None, workloads: Any = None,
                      metrics: Sequence[str] | None = None, name: str | None = None,
                      level: float = 0.95, source: str = "",
                      fixed_origin: str = "fixed") -> CompareSpec:
    """Validate the parts of a comparison into a :class:`CompareSpec` (raises ConfigError).

    ``source`` prefixes the names of the parts in messages (``--vary`` on
    the command line).  ``seeds`` is a count (the first seed is the base
    config's ``run.seed``, so one seed reproduces ``memsim run``; the others
    derive from it) or an explicit list.
    """
    from memsim.experiment.run import resolve

    settings = settings_from(vary, source or "vary")
    fixed_d = flatten(fixed or {})
    varied = {k for g in settings for k in g.overrides}
    for key in fixed_d:
        origin = f"{fixed_origin} {key}"
        check_setting_key(key, origin)
        if key in varied:
            raise ConfigError(origin, "a key that a setting also sets", "a key either fixed or varied")
    wl = (workloads_from(workloads, "--workload" if source else "workloads") if workloads
          else None)
    try:
        base_cfg = resolve(config, fixed_d)
    except ConfigError as exc:
        if exc.where.startswith("--set "):
            raise ConfigError(f"{fixed_origin} {exc.where[6:]}", exc.found, exc.allowed) from None
        raise
    if wl is None:
        wl = [Group(base_cfg.run.name, {}, "the base config", True)]
    if name is None:
        name = f"{base_cfg.run.name}_compare"
    if not isinstance(name, str) or not _NAME.match(name):
        raise ConfigError("compare name", repr(name), "letters, digits, '_', '.', '-'")
    seed_list = seed_list_of(seeds, base_cfg.run.seed, "--seeds" if source else "seeds")
    if metrics is not None:
        if isinstance(metrics, str) or not metrics or not all(isinstance(m, str) for m in metrics):
            raise ConfigError("--metric" if source else "metrics", repr(metrics),
                              "a non-empty list of summary key names")
        metrics = list(dict.fromkeys(metrics))
    if not 0.0 < level < 1.0:
        raise ConfigError("confidence level", repr(level), "a number strictly between 0 and 1")
    return CompareSpec(name, config, settings, wl, fixed_d, seed_list, metrics, level, fixed_origin)


def seed_list_of(seeds: int | Sequence[int], base_seed: int, where: str) -> list[int]:
    """Seeds of the replications: ``[base_seed, derived...]`` for a count, or the list given."""
    if isinstance(seeds, bool):
        raise ConfigError(where, repr(seeds), "a whole number >= 1 or a list of seeds")
    if isinstance(seeds, (int, np.integer)):
        if seeds < 1:
            raise ConfigError(where, repr(seeds), "a whole number >= 1")
        return [base_seed, *derive_seeds(base_seed, int(seeds) - 1)]
    out = list(seeds)
    if (not out or any(isinstance(s, bool) or not isinstance(s, (int, np.integer)) or s < 0 for s in out)
            or len(set(out)) != len(out)):
        raise ConfigError(where, repr(seeds), "a non-empty list of distinct whole numbers >= 0")
    return [int(s) for s in out]


def _blame(exc: ConfigError, wl: Group, setting: Group, fixed: Mapping[str, Any],
           fixed_origin: str) -> ConfigError:
    """Point an error about an overridden key at the setting, fixed part or workload that set it."""
    where = exc.where
    key = where[6:] if where.startswith("--set ") else where.rsplit(": ", 1)[-1]
    for overrides, origin in ((setting.overrides, setting.origin), (fixed, f"{fixed_origin} {key}"),
                              (wl.overrides, wl.origin)):
        if key in overrides:
            return ConfigError(origin if origin.endswith(key) else f"{origin}: {key}",
                               exc.found, exc.allowed)
    return exc


def plan(spec: CompareSpec) -> tuple[list[dict[str, Any]], list[Task]]:
    """One row (workload, setting, seed) and one task per run; every config is validated first."""
    from memsim.experiment.run import resolve

    rows: list[dict[str, Any]] = []
    tasks: list[Task] = []
    for wl in spec.workloads:
        for st in spec.settings:
            try:
                cfg = resolve(spec.base, {**wl.overrides, **spec.fixed, **st.overrides})
            except ConfigError as exc:
                raise _blame(exc, wl, st, spec.fixed, spec.fixed_origin) from None
            # JSON types, so the task travels to any executor and hashes the same way.
            doc = cfg.model_dump(mode="json")
            for seed in spec.seeds:
                c = {**doc, "run": {**doc["run"], "seed": seed, "name": spec.name}}
                rows.append({"workload": wl.label, "setting": st.label, "seed": seed})
                tasks.append(Task(config_key(c), c, ()))
    return rows, tasks


class RunFailed(UserError):
    """A run stopped on a user mistake found only while running (a bad trace line, say)."""

    def __init__(self, where: str, message: str) -> None:
        Exception.__init__(self, where, message)
        self.where, self.found, self.allowed = where, message, ""

    def __str__(self) -> str:
        return f"{self.where}: {self.found}"


@dataclass
class CompareOutcome:
    """What a comparison produced.

    ``table`` has one row per workload x setting (``workload, setting,
    changes, seeds``, then per metric its mean and ``<metric>_ci_half``);
    ``stats`` one row per workload x setting x metric (mean, std, interval);
    ``runs`` one row per run (workload, setting, seed, metrics, cache key).
    """

    spec: CompareSpec
    table: pd.DataFrame
    stats: pd.DataFrame
    runs: pd.DataFrame
    metrics: list[str]
    folder: Path | None = None
    ran: int = 0
    reused: int = 0
    executor: str = "the cache"
    save_error: str = ""                # why the results are not (all) where asked, if so


def choose_metrics(summaries: Sequence[Mapping[str, Any]], asked: Sequence[str] | None,
                   where: str = "metrics") -> list[str]:
    """Metrics to show: those asked for (each reported by some run), else :data:`SHOWN` as reported.

    A key counts as reported when some run gives it a finite number.
    """
    return _choose_metrics(summaries, asked, where, shown=SHOWN, numbers_only=True)


def assemble(spec: CompareSpec, rows: list[dict[str, Any]], tasks: list[Task],
             done: Execution, where: str = "metrics") -> CompareOutcome:
    """Per-run table, statistics over seeds and the side-by-side table."""
    for row, t in zip(rows, tasks):
        doc = done.failures.get(t.key)
        if doc is None:
            continue
        place = f"workload {row['workload']}, setting {row['setting']}, seed {row['seed']}"
        if doc.get("traceback"):
            raise RuntimeError(f"the run of {place} failed; the other finished runs are cached.\n"
                               f"{doc['traceback']}")
        raise RunFailed(place, doc["error"])
    summaries = [done.entries[t.key]["summary"] for t in tasks]
    metrics = choose_metrics(summaries, spec.metrics, where)
    runs = pd.DataFrame([{**row, **{m: _num(s.get(m)) for m in metrics}, "key": t.key}
                         for row, s, t in zip(rows, summaries, tasks)],
                        columns=["workload", "setting", "seed", *metrics, "key"])
    stats = summarize(runs, by=["workload", "setting"], metrics=metrics, level=spec.level)
    changes = {g.label: g.changes() for g in spec.settings}
    table = []
    for (wl, st), g in stats.groupby(["workload", "setting"], sort=False):
        r: dict[str, Any] = {"workload": wl, "setting": st, "changes": changes[st], "seeds": len(spec.seeds)}
        for m, mean, half in zip(g["metric"], g["mean"], g["ci_half"]):
            r[m] = float(mean)
            r[m + CI_SUFFIX] = float(half)
        table.append(r)
    cols = ["workload", "setting", "changes", "seeds", *(c for m in metrics for c in (m, m + CI_SUFFIX))]
    wide = pd.DataFrame(table, columns=cols)
    wide.attrs.update(name=spec.name, metrics=metrics, level=spec.level,
                      settings=[g.label for g in spec.settings], workloads=[g.label for g in spec.workloads])
    return CompareOutcome(spec, wide, stats, runs, metrics, ran=done.ran, reused=done.reused,
                          executor=done.executor)


def _num(v: Any) -> float:
    if isinstance(v, bool) or not isinstance(v, (int, float, np.integer, np.floating)):
        return float("nan")
    return float(v)


def run_compare(spec: CompareSpec, *, workers: int | None = None, out: str | Path | None = None,
                progress: bool | None = None, where: str = "metrics") -> CompareOutcome:
    """Run every workload x setting x seed of ``spec``; with ``out``, cache runs and save the tables.

    Parameters
    ----------
    workers:
        Local processes (None = one per core, at most one per run; 1 = in this process).
    out:
        Results folder: ``cache/`` (one JSON per finished run), ``compare.csv``
        (the side-by-side table), ``compare_runs.csv``, ``compare.json``.
    progress:
        Show a progress bar (None: only on a terminal).
    """
    rows, tasks = plan(spec)
    probe_metrics(spec.metrics, tasks, where)     # a misspelt metric fails before any real run
    folder = Path(out) if out is not None else None
    cache = RunCache(folder / "cache") if folder is not None else None
    done = execute(tasks, workers=workers, cache=cache, progress=progress, desc=spec.name)
    outcome = assemble(spec, rows, tasks, done, where)
    if folder is not None:
        outcome.folder = folder
        saved, err = save_or_rescue(lambda f: save(outcome, f), folder, spec.name)
        outcome.folder = saved
        outcome.save_error = "; ".join(e for e in (done.cache_error, err) if e)
    return outcome


def save(outcome: CompareOutcome, folder: Path | None = None) -> list[Path]:
    """Write the comparison's tables and description into ``folder`` (default its own), atomically."""
    folder = folder or outcome.folder
    assert folder is not None
    paths = [folder / "compare.csv", folder / "compare_runs.csv", folder / "compare.json"]
    atomic_write_text(paths[0], outcome.table.to_csv(index=False))
    atomic_write_text(paths[1], outcome.runs.to_csv(index=False))
    doc = {**outcome.spec.to_json(), "metrics": outcome.metrics, "runs": len(outcome.runs)}
    atomic_write_text(paths[2], dumps(doc, indent=2, default=str))
    return paths


def compare(config: Any, vary: Mapping[str, Any] | Sequence[Any] | str, *, seeds: int | Sequence[int] = 1,
            workers: int | None = None, fixed: Mapping[str, Any] | None = None,
            workloads: Sequence[Any] | Mapping[str, Any] | None = None,
            metrics: Sequence[str] | None = None, out: str | Path | None = None,
            name: str | None = None, level: float = 0.95,
            progress: bool | None = False) -> pd.DataFrame:
    """Run the same workload(s) under each setting and return the side-by-side table.

    Parameters
    ----------
    config:
        Base run config: TOML path, dict, RunConfig or None (defaults).
    vary:
        The settings compared.  A list of written settings
        (``"write.scheme=full_line,data_comparison"`` gives two settings,
        ``"erase_ahead: write.scheme=block_erase,controller.write_cancel=true"``
        one labelled setting) or override mappings; ``{key: [values]}`` (one
        setting per combination); or ``{label: {key: value}}``.
    seeds:
        Replications per run: a count (the first is the config's
        ``run.seed``, the others derive from it; every setting and workload
        gets the same seeds) or a list of seeds.
    workers:
        Local processes (None = one per core; 1 = in this process).
    fixed:
        Overrides applied to every run (``{"workload.requests": 4000}``).
    workloads:
        Run config files (applied over ``config``), written override groups
        or mappings; ``{label: file or overrides}`` names them.  None: the
        workload of ``config``.
    metrics:
        Summary keys to show; default those of :data:`SHOWN` that the runs report.
    out:
        Results folder with the run cache and ``compare.csv``; None keeps
        everything in memory.
    level:
        Confidence level of the interval (Student t over seeds).

    Returns
    -------
    DataFrame, one row per workload x setting: ``workload, setting, changes,
    seeds``, then for each metric its mean over seeds and
    ``<metric>_ci_half`` (half-width of the interval, NaN with one seed).
    ``df.attrs`` holds ``name, metrics, level, settings, workloads``.
    """
    spec = make_compare_spec(config, vary, seeds=seeds, fixed=fixed, workloads=workloads,
                             metrics=metrics, name=name, level=level)
    return run_compare(spec, workers=workers, out=out, progress=progress).table


__all__ = ["RESERVED", "SHOWN", "CompareOutcome", "CompareSpec", "Execution", "Group", "choose_metrics",
           "compare", "make_compare_spec", "parse_groups", "run_compare", "settings_from", "split_top",
           "workloads_from"]
