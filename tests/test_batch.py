"""The batch loop shared by sweep and compare: each distinct config runs once, the cache serves the rest."""
from __future__ import annotations

import pytest
from conftest import DEMO, SMALL

from memsim.errors import ConfigError, UserError
from memsim.experiment.batch import RESERVED, check_key, choose_metrics, execute
from memsim.experiment.cache import RunCache, config_key
from memsim.experiment.executors import Task
from memsim.experiment.run import resolve


def task(seed: int) -> Task:
    cfg = resolve(DEMO, SMALL).model_dump(mode="json")
    cfg["run"]["seed"] = seed
    return Task(config_key(cfg), cfg)


def test_each_distinct_config_runs_once_then_comes_from_the_cache(tmp_path) -> None:
    tasks = [task(1), task(2), task(1)]          # the third repeats the first
    cache = RunCache(tmp_path / "cache")
    first = execute(tasks, workers=1, cache=cache, progress=False)
    assert (first.ran, first.reused, first.reused_runs, first.failures) == (2, 0, 0, {})
    assert set(first.entries) == {tasks[0].key, tasks[1].key}
    again = execute(tasks, workers=1, cache=RunCache(tmp_path / "cache"), progress=False)
    assert (again.ran, again.reused, again.reused_runs, again.executor) == (0, 2, 3, "the cache")
    assert again.entries[tasks[0].key]["summary"] == first.entries[tasks[0].key]["summary"]


@pytest.mark.parametrize("workers", [0, -1, True, 1.5])
def test_one_workers_check(workers) -> None:
    with pytest.raises(UserError, match="--workers"):
        execute([], workers=workers)


def test_reserved_keys_and_metric_choice() -> None:
    for key in RESERVED:
        with pytest.raises(ConfigError, match="a key other than"):
            check_key(key, "here", "why")
    summaries = [{"a_ns": 1.0, "b": "text", "c": float("nan")}, {"d_pj": 2}]
    assert choose_metrics(summaries, None, "m") == ["a_ns", "b", "c", "d_pj"]
    assert choose_metrics(summaries, None, "m", numbers_only=True) == ["a_ns", "d_pj"]
    assert choose_metrics(summaries, None, "m", shown=["d_pj", "zz"], numbers_only=True) == ["d_pj"]
    with pytest.raises(ConfigError, match="a_nz.*a_ns"):
        choose_metrics(summaries, ["a_nz"], "m")
    assert choose_metrics([None], ["anything"], "m") == ["anything"]   # every run failed: kept as asked
