"""One registry convention: every part a config names is found by name, listed and described from it."""
from __future__ import annotations

import numpy as np
import pytest

from memsim.config import RunConfig
from memsim.errors import ConfigError
from memsim.experiment.names import NAMED_FIELDS, registries
from memsim.experiment.run import resolve
from memsim.experiment.tools import available, describe_available
from memsim.policy.erase import BlockPool
from memsim.policy.victims import VICTIMS
from memsim.registry import Registry


def test_registry_lookup_and_error() -> None:
    class Part:
        """A part. More words."""

        name = "alpha"

    reg: Registry[type] = Registry("test part", "sec.key")
    reg.add(Part)
    assert reg.names() == ["alpha"] and reg["alpha"] is Part and "alpha" in reg
    assert reg.describe() == {"alpha": "A part"}
    with pytest.raises(ConfigError, match="sec.key.*'beta'.*one of alpha"):
        reg.get_part("beta")
    with pytest.raises(ValueError):
        reg.add(Part)


def test_list_is_the_registries() -> None:
    parts = available()
    assert parts == {label: reg.names() for label, reg in registries().items()}
    assert set(parts) == {"write_schemes", "wear_levelers", "refresh_policies", "cleaner_victims", "presets"}
    assert all(all(describe_available()[k].values()) for k in parts), "every part has a summary"


@pytest.mark.parametrize("key", [k for k in NAMED_FIELDS if k != "cell.preset"])
def test_named_field_checked_and_described_from_its_registry(key: str) -> None:
    reg = NAMED_FIELDS[key][0]
    section, field = key.split(".")
    desc = RunConfig.model_fields[section].annotation.model_fields[field].description
    assert all(name in desc for name in reg.names())
    with pytest.raises(ConfigError) as exc:
        resolve(None, {key: "no_such_part"})
    assert key in exc.value.where and all(n in exc.value.allowed for n in reg.names())


@pytest.mark.parametrize("victim", VICTIMS.names())
def test_victim_policy_picks_what_its_rule_says(victim: str) -> None:
    rng = np.random.default_rng(5)
    pool = BlockPool(256, 8, 0.25, "set", victim, 2)
    sealed_at: dict[int, int] = {}      # block -> step at which it was sealed

    def track(step: int) -> None:
        now = set(np.flatnonzero(pool._state == 2).tolist())
        for b in list(sealed_at):
            if b not in now:
                del sealed_at[b]
        for b in now - set(sealed_at):
            sealed_at[b] = step

    track(0)
    for step in range(1, 3000):
        pool.place(int(rng.integers(256)))
        track(step)
        v = pool.pick_victim()
        cand = np.flatnonzero((pool._state == 2) & (pool._live < 8))
        if v is not None:
            if victim == "greedy":
                # Greedy (Rosenblum and Ousterhout, ACM TOCS 1992): fewest live lines among candidates.
                assert pool._live[v] == pool._live[cand].min()
            elif victim == "fifo":
                # FIFO cleans in seal order, whatever the block holds (Desnoyers, SYSTOR 2012).
                assert sealed_at[v] == min(sealed_at.values())
            else:
                assert v in cand
        while pool.need_erase():
            job = pool.clean()
            if job is None:
                break
            track(step)
            pool.mark_initialized(job.block)
            track(step)
