"""Named random streams: reproducible, distinct by name, and the only source of randomness in memsim/."""
from __future__ import annotations

import ast
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from memsim.config import RunConfig
from memsim.experiment.build import build_path
from memsim.experiment.run import simulate
from memsim.policy.leveling import make_leveler
from memsim.seeds import STREAMS, stream, stream_key, stream_seed

PACKAGE = Path(__file__).resolve().parents[1] / "memsim"


def test_same_seed_and_name_give_the_same_draws() -> None:
    a, b = stream(7, "requests"), stream(7, "requests")
    np.testing.assert_array_equal(a.integers(0, 2**32, 100), b.integers(0, 2**32, 100))


def test_streams_are_distinct_by_name_by_seed_and_by_index() -> None:
    draws = {name: tuple(stream(7, name).integers(0, 2**32, 4)) for name in STREAMS}
    assert len(set(draws.values())) == len(STREAMS)
    assert len({stream_key(n) for n in STREAMS}) == len(STREAMS)
    assert tuple(stream(8, "requests").integers(0, 2**32, 4)) != draws["requests"]
    assert (stream(7, "replicas", 0).integers(0, 2**32, 4) != stream(7, "replicas", 1).integers(0, 2**32, 4)).any()


def test_unknown_name_is_refused() -> None:
    with pytest.raises(ValueError, match="unknown random stream"):
        stream(1, "request")


def test_keys_do_not_depend_on_the_process() -> None:
    # Regression pin: the key is SHA-256 of the name, not hash() (which is
    # salted per process); a change here changes every run's numbers.
    assert stream_key("requests") == 14897309385993908972
    code = ("from memsim.seeds import stream; "
            "print(stream(1, 'requests').integers(0, 2**32, 3).tolist())")
    outs = {subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True,
                           env={**os.environ, "PYTHONHASHSEED": h, "PYTHONPATH": str(PACKAGE.parent)}).stdout.strip() for h in ("1", "2")}
    assert outs == {str(stream(1, "requests").integers(0, 2**32, 3).tolist())}


def test_stream_seed_is_a_plain_seed_sequence() -> None:
    s = stream_seed(3, "endurance", 2)
    assert s.entropy == 3 and s.spawn_key == (stream_key("endurance"), 2)


def test_a_part_draws_the_same_whatever_else_is_on() -> None:
    # Each part of the write path has its own stream: a leveler that draws
    # keys does not shift the array's initial content.
    base = {"workload": {"footprint_lines": 256, "data": "random"}}
    plain = build_path(RunConfig(**base))
    keyed = build_path(RunConfig(**base, leveling={"scheme": "security_refresh"}))
    np.testing.assert_array_equal(plain.stored[:256], keyed.stored[:256])


def test_leveler_keys_come_from_the_seed() -> None:
    a, b = (build_path(RunConfig(run={"seed": s}, leveling={"scheme": "security_refresh"})).leveler
            for s in (1, 2))
    assert a.secret != b.secret


def test_a_leveler_that_draws_needs_a_generator() -> None:
    lv = make_leveler("security_refresh", 16, stream(1, "leveler"))
    assert lv.secret == make_leveler("security_refresh", 16, stream(1, "leveler")).secret
    with pytest.raises(ValueError, match="draws random keys"):
        make_leveler("security_refresh", 16, None)
    make_leveler("start_gap", 16, None, psi=4)          # draws nothing: no generator needed


def test_runs_repeat_and_differ_by_seed() -> None:
    kw = {"workload__requests": 800}
    a, b, c = simulate(**kw), simulate(**kw), simulate(**kw, run__seed=2)
    assert a.summary["write_latency_mean_ns"] == b.summary["write_latency_mean_ns"]
    assert a.summary["write_latency_mean_ns"] != c.summary["write_latency_mean_ns"]


# ---------------------------------------------------------------- no hidden seeds

# Outside memsim/seeds.py numpy's random module is used for its Generator type only.
_ALLOWED_NP_RANDOM = {"Generator"}


def _hidden_seeds(source: str, name: str) -> list[str]:
    found = []
    for node in ast.walk(ast.parse(source, filename=name)):
        where = f"{name}:{getattr(node, 'lineno', '?')}"
        if (isinstance(node, ast.Attribute) and isinstance(node.value, ast.Attribute)
                and node.value.attr == "random" and node.attr not in _ALLOWED_NP_RANDOM):
            found.append(f"{where} np.random.{node.attr}")
        elif isinstance(node, ast.ImportFrom) and node.module in ("numpy.random", "random"):
            found.append(f"{where} from {node.module} import ...")
        elif isinstance(node, ast.Import) and any(a.name == "random" for a in node.names):
            found.append(f"{where} import random")
        elif isinstance(node, ast.keyword) and node.arg in ("random_state", "seed") and (
                isinstance(node.value, (ast.Constant, ast.BinOp, ast.List, ast.Tuple))):
            found.append(f"{where} {node.arg}={ast.unparse(node.value)}")
    return found


def test_no_random_source_outside_the_seed_helper() -> None:
    helper = PACKAGE / "seeds.py"
    found = [f for p in sorted(PACKAGE.rglob("*.py")) if p != helper
             for f in _hidden_seeds(p.read_text(), str(p.relative_to(PACKAGE.parent)))]
    assert not found, "random draws not derived through memsim.seeds: " + "; ".join(found)


def test_the_check_sees_hidden_seeds() -> None:
    src = ("import numpy as np\nimport random\nfrom numpy.random import default_rng\n"
           "a = np.random.default_rng(seed + 1)\nb = np.random.default_rng()\n"
           "z = f(random_state=0)\nok = f(random_state=rng)\ng: np.random.Generator\n")
    assert [f.split(" ", 1)[1] for f in _hidden_seeds(src, "probe.py")] == [
        "import random", "from numpy.random import ...", "np.random.default_rng",
        "np.random.default_rng", "random_state=0"]
