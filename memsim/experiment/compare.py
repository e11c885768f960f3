"""Side-by-side comparison: the same workload(s) under several settings.

A *setting* is a group of config overrides with a label, e.g. the label
``erase_ahead`` for ``write.scheme=block_erase, controller.cancel=true``.
Every setting runs on every workload with the same seeds (common random
numbers), so the differences between settings are not blurred by different
random streams.  The result is one row per workload x setting with the mean
of each metric over the seeds and the half-width of its confidence interval.

Written forms of a setting (command line ``--vary``, or strings in Python)::

    write.scheme=full_line,data_comparison      one key, several values:
                                                one setting per value
    write.scheme=block_erase,controller.cancel=true
                                                several keys, one value each:
                                                one setting
    erase_ahead: write.scheme=block_erase,controller.cancel=true
                                                the same, labelled
    as_configured:                              a label alone: the config as is

Values are TOML literals (``true``, ``38400``, ``"text"``) or bare text;
commas inside quotes or brackets do not split.  A workload is either a run
config file (its keys are applied over the base config; its ``run.name``,
``run.seed`` and ``run.out_dir`` are ignored) or a group of overrides in the
same form as a setting.  Overrides apply in the order base config, workload,
``fixed``, setting.

Runs go through the sweep machinery's executors (in process, local pool) and,
when an output folder is given, its cache of finished runs (``<out>/cache``),
so a repeated or extended comparison reruns nothing it already has.
"""
from __future__ import annotations

import itertools
import json
import math
import os
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from memsim.config.load import parse_value, read_toml
from memsim.errors import ConfigError, UserError
from memsim.experiment.cache import RunCache, config_key
from memsim.experiment.executors import Task, make_executor
from memsim.experiment.sweep import check_key, derive_seeds, flatten
from memsim.metrics.files import atomic_write_text, dumps, save_or_rescue
from memsim.metrics.stats import summarize

# Shown by default, in this order, when the runs report them.
SHOWN = ("throughput_gbps", "read_latency_p99_ns", "write_latency_p99_ns", "energy_per_bit_pj",
         "cells_programmed_per_write", "write_amplification", "lifetime_years")
# Seeds come from --seeds and the folder from the comparison's name.
RESERVED = ("run.seed", "run.name", "run.out_dir")
CI_SUFFIX = "_ci_half"
_NAME = re.compile(r"^[A-Za-z0-9_.-]+$")
_ASSIGN = re.compile(r"^\s*([A-Za-z_][A-Za-z0-9_]*(?:\.[A-Za-z_][A-Za-z0-9_]*)+)\s*=(.*)$", re.DOTALL)


@dataclass(frozen=True)
class Group:
    """A labelled group of config overrides: one setting, or one workload.

    ``origin`` names where it was written (``--vary '...'``, ``vary[2]``) for
    error messages; ``labelled`` says whether the user chose the label.
    """

    label: str
    overrides: dict[str, Any]
    origin: str
    labelled: bool = False

    def changes(self) -> str:
        """The overrides as one line: ``write.scheme=full_line, array.banks=16``."""
        return ", ".join(f"{k}={show_value(v)}" for k, v in self.overrides.items())


def show_value(v: Any) -> str:
    """A value as a user would write it: ``true``, ``38400``, ``0.15``, ``full_line``."""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float) and v.is_integer() and abs(v) < 1e15:
        return str(int(v))
    if isinstance(v, (list, dict)):
        return json.dumps(v)
    return str(v)


def split_top(text: str) -> list[str]:
    """Split at commas that are outside quotes and brackets."""
    parts, depth, quote, start = [], 0, "", 0
    for i, ch in enumerate(text):
        if quote:
            if ch == quote:
                quote = ""
        elif ch in "\"'":
            quote = ch
        elif ch in "[{":
            depth += 1
        elif ch in "]}":
            depth -= 1
        elif ch == "," and depth == 0:
            parts.append(text[start:i])
            start = i + 1
    parts.append(text[start:])
    return parts


def _split_label(text: str) -> tuple[str | None, str]:
    head, sep, rest = text.partition(":")
    if sep and "=" not in head:
        return head.strip(), rest
    return None, text


def parse_groups(text: str, origin: str) -> list[Group]:
    """One written setting -> its groups (several when one key lists several values).

    Labels of unlabelled groups are empty here; :func:`fill_labels` sets them.
    """
    syntax = ("[LABEL:] section.key=value[,section.key=value...] or section.key=v1,v2,... "
              "(one setting per value)")
    label, body = _split_label(text)
    if label is not None and not label:
        raise ConfigError(origin, "an empty label", "a label before ':', or no ':'")
    keys: dict[str, list] = {}
    if body.strip():
        current = None
        for piece in split_top(body):
            m = _ASSIGN.match(piece)
            if m:
                current = m.group(1)
                if current in keys:
                    raise ConfigError(origin, f"'{current}' set twice", "each key once per setting")
                keys[current] = [m.group(2).strip()]
            elif current is None or not piece.strip():
                raise ConfigError(origin, repr(piece.strip() or text), syntax)
            else:
                keys[current].append(piece.strip())
    elif label is None:
        raise ConfigError(origin, repr(text), syntax)
    for key in keys:
        check_setting_key(key, origin)
    values = {k: [parse_value(v) for v in vs] for k, vs in keys.items()}
    if any(not v for vs in keys.values() for v in vs):
        raise ConfigError(origin, repr(text), "a value after each '=' and between commas")
    multi = [k for k, vs in values.items() if len(vs) > 1]
    if not multi:
        return [Group(label or "", {k: vs[0] for k, vs in values.items()}, origin, label is not None)]
    if len(values) > 1:
        raise ConfigError(origin, f"several values for {multi[0]} beside other keys",
                          "several keys with one value each (one setting) or one key with several "
                          "values (one setting per value)")
    if label is not None:
        raise ConfigError(origin, f"the label '{label}' on {len(values[multi[0]])} settings",
                          "a label on a setting of one value per key")
    key = multi[0]
    _distinct(values[key], origin)
    return [Group("", {key: v}, origin) for v in values[key]]


def check_setting_key(key: str, origin: str) -> None:
    """Raise ConfigError unless ``key`` is a ``section.field`` of a run config that may vary."""
    if key in RESERVED:
        raise ConfigError(origin, key, "a key other than " + ", ".join(RESERVED)
                          + " (seeds come from --seeds; the folder from --out)")
    check_key(key, origin)


def _distinct(vals: Sequence[Any], origin: str) -> None:
    if len({json.dumps(v, sort_keys=True) for v in vals}) != len(vals):
        raise ConfigError(origin, repr(list(vals)), "distinct values (a repeated value repeats a setting)")


def _origin(source: str, i: int, item: Any) -> str:
    # On the command line the option and the item as typed name it best.
    return f"{source} {str(item)!r}" if source.startswith("--") else f"{source}[{i}]"


def _mapping_group(m: Mapping, origin: str, label: str | None = None) -> Group:
    flat = flatten(m)
    for key in flat:
        check_setting_key(key, origin)
    return Group(label or "", flat, origin, label is not None)


def settings_from(vary: Any, source: str = "vary") -> list[Group]:
    """The settings of ``vary``, labelled.

    Accepted: a list whose items are written settings (strings, see the module
    docstring) or override mappings; ``{key: [values]}`` (one setting per
    combination of values, the last key fastest); ``{label: {key: value}}``.
    """
    if isinstance(vary, str):
        vary = [vary]
    groups: list[Group] = []
    if isinstance(vary, Mapping):
        if not vary:
            raise ConfigError(source, "no settings", "at least one setting")
        kinds = {isinstance(v, Mapping) for v in vary.values()}
        if kinds == {True}:
            for label, m in vary.items():
                if not isinstance(label, str) or not label.strip():
                    raise ConfigError(f"{source}[{label!r}]", repr(label), "a non-empty label")
                groups.append(_mapping_group(m, f"{source}[{label!r}]", label.strip()))
        elif kinds == {False}:
            axes = []
            for key, vals in flatten(vary).items():
                origin = f"{source}[{key!r}]"
                check_setting_key(key, origin)
                vals = list(vals) if isinstance(vals, (list, tuple)) else [vals]
                if not vals:
                    raise ConfigError(origin, "[]", "a non-empty list of values")
                _distinct(vals, origin)
                axes.append([(key, v) for v in vals])
            groups = [Group("", dict(combo), source) for combo in itertools.product(*axes)]
        else:
            raise ConfigError(source, "labels mixed with keys",
                              "{section.key: [values]} or {label: {section.key: value}}")
    elif isinstance(vary, Sequence) and vary:
        for i, item in enumerate(vary):
            origin = _origin(source, i, item)
            if isinstance(item, str):
                groups.extend(parse_groups(item, origin))
            elif isinstance(item, Mapping):
                groups.append(_mapping_group(item, origin))
            else:
                raise ConfigError(origin, repr(item), "a setting string or a mapping of overrides")
    else:
        raise ConfigError(source, repr(vary), "at least one setting: a list of settings or a mapping")
    return fill_labels(groups, source)


def workload_file(path: str | Path, origin: str, label: str | None = None) -> Group:
    """A run config file as a workload: its keys, less ``run.name/seed/out_dir``."""
    p = Path(path)
    if not p.is_file():
        raise ConfigError(origin, "no such file", "a run config file (TOML) or overrides section.key=value")
    flat = {k: v for k, v in flatten(read_toml(p)).items() if k not in RESERVED}
    for key in flat:
        check_key(key, f"{p}: {key}")
    trace = flat.get("workload.trace")
    if isinstance(trace, str) and trace and not Path(trace).is_absolute():
        # As for a run config, a trace is found next to the file that names it.
        flat["workload.trace"] = str(p.parent / trace)
    return Group(label or p.stem, flat, str(p), True)


def workloads_from(workloads: Any, source: str = "workloads") -> list[Group]:
    """The workloads of ``workloads``: files, written override groups or mappings, labelled.

    A string without ``=`` names a file (``LABEL:PATH`` labels it); a
    ``{label: file or mapping}`` mapping labels each.
    """
    if isinstance(workloads, (str, Path)):
        workloads = [workloads]
    groups: list[Group] = []
    if isinstance(workloads, Mapping):
        items = [(str(k).strip(), v, f"{source}[{k!r}]") for k, v in workloads.items()]
    elif isinstance(workloads, Sequence) and workloads:
        items = [(None, v, _origin(source, i, v)) for i, v in enumerate(workloads)]
    else:
        raise ConfigError(source, repr(workloads), "a non-empty list of workload files or override groups")
    for label, item, origin in items:
        if label == "":
            raise ConfigError(origin, "an empty label", "a non-empty label")
        if isinstance(item, Path) or (isinstance(item, str) and "=" not in item):
            text = str(item)
            if label is None and not Path(text).is_file() and ":" in text:
                label, text = (s.strip() for s in text.split(":", 1))
            groups.append(workload_file(text, origin, label))
        elif isinstance(item, str):
            found = parse_groups(item, origin)
            if label is not None:
                if len(found) > 1:
                    raise ConfigError(origin, f"the label '{label}' on {len(found)} workloads",
                                      "a label on one group of overrides")
                found = [Group(label, found[0].overrides, origin, True)]
            groups.extend(found)
        elif isinstance(item, Mapping):
            groups.append(_mapping_group(item, origin, label))
        else:
            raise ConfigError(origin, repr(item), "a config file, a setting string or a mapping")
    return fill_labels(groups, source)


def fill_labels(groups: list[Group], source: str) -> list[Group]:
    """Give unlabelled groups a label; raise ConfigError on two equal labels.

    A group that sets one key to a word is labelled by the word
    (``full_line``); any other by its ``key=value`` pairs (``banks=16``), since
    a bare number or ``true`` says nothing.  Keys are shortened to their last
    part where that is unambiguous.
    """
    keys = {k for g in groups if not g.labelled for k in g.overrides}
    last = [k.rsplit(".", 1)[-1] for k in keys]

    def name(g: Group) -> str:
        if not g.overrides:
            return "base"
        if len(g.overrides) == 1 and isinstance(next(iter(g.overrides.values())), str):
            return next(iter(g.overrides.values()))
        return ",".join(f"{k.rsplit('.', 1)[-1] if last.count(k.rsplit('.', 1)[-1]) == 1 else k}"
                        f"={show_value(v)}" for k, v in g.overrides.items())

    out = [g if g.labelled else Group(name(g), g.overrides, g.origin) for g in groups]
    seen: dict[str, Group] = {}
    for g in out:
        if g.label in seen:
            raise ConfigError(g.origin, f"the label '{g.label}' again (also {seen[g.label].origin})",
                              f"distinct labels in {source}; write LABEL: before a setting to name it")
        seen[g.label] = g
    return out


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
class Execution:
    """Finished runs (cache entries by key), failed runs (error documents by key) and counts."""

    entries: dict[str, dict[str, Any]]
    failures: dict[str, dict[str, Any]]
    ran: int
    reused: int
    executor: str
    cache_error: str = ""


def execute(tasks: Sequence[Task], *, workers: int | None = None, cache: RunCache | None = None,
            progress: bool | None = None, desc: str = "compare") -> Execution:
    """Run the tasks not found in ``cache`` (each distinct config once); store what finishes."""
    from tqdm import tqdm

    if workers is not None and (isinstance(workers, bool) or workers < 1):
        raise UserError("--workers", repr(workers), "a whole number >= 1")
    entries: dict[str, dict[str, Any]] = {}
    if cache is not None:
        for t in tasks:
            if t.key not in entries and (e := cache.get(t.key)) is not None:
                entries[t.key] = e
    todo = list({t.key: t for t in tasks if t.key not in entries}.values())
    reused = len(entries)
    failures: dict[str, dict[str, Any]] = {}
    n = workers if workers is not None else min(os.cpu_count() or 1, max(1, len(todo)))
    executor = make_executor(n) if todo else None
    cache_error = ""
    bar = tqdm(total=len(todo) + reused, initial=reused, desc=desc, unit="run",
               disable=None if progress is None else not progress, dynamic_ncols=True)
    try:
        for _, text in (executor.run(todo) if executor else ()):
            doc = json.loads(text)
            if "error" in doc:
                failures[doc["key"]] = doc
            else:
                if cache is not None:
                    try:
                        cache.put_text(doc["key"], text)
                    except OSError as exc:
                        # Keep running: the results stay in memory and are saved at the end.
                        cache_error = (f"{cache.folder}: cache entries could not be written "
                                       f"({exc.strerror or exc}); the finished runs were kept in memory")
                        cache = None
                entries[doc["key"]] = doc
            bar.update(1)
    finally:
        bar.close()
        if executor is not None:
            executor.close()
    return Execution(entries, failures, len(todo) - len(failures), reused,
                     executor.name if executor is not None else "the cache", cache_error)


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
    def number(v: Any) -> bool:
        return isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(v, bool) \
            and math.isfinite(float(v))

    reported = list(dict.fromkeys(k for s in summaries for k, v in s.items() if number(v)))
    if asked is None:
        return [m for m in SHOWN if m in reported]
    bad = [m for m in asked if m not in reported]
    if bad:
        raise ConfigError(where, ", ".join(map(repr, bad)), "numeric summary keys: " + ", ".join(reported))
    return list(asked)


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
        ``"erase_ahead: write.scheme=block_erase,controller.cancel=true"``
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


__all__ = ["SHOWN", "CompareOutcome", "CompareSpec", "Group", "compare", "make_compare_spec",
           "parse_groups", "run_compare", "settings_from", "workloads_from"]
