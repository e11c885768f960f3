"""The layer order of the architecture: no module imports one of an outer layer.

Layers, inner to outer (DESIGN.md): units/errors < config < tech < workload <
policy < engine < metrics < experiment < report < cli.  Imports are read from
the source (ast), including those inside functions, since a deferred import
still ties the inner layer to the outer one.  Inside a layer the import graph
must have no cycle.
"""
from __future__ import annotations

import ast
from pathlib import Path

PACKAGE = Path(__file__).resolve().parents[1] / "memsim"
LAYERS = ["", "config", "tech", "workload", "policy", "engine", "metrics", "experiment", "report", "cli"]
RANK = {name: i for i, name in enumerate(LAYERS)}
# The run <-> lifetime cycle is being taken apart (lifetime no longer needs run's helpers).
KNOWN_CYCLES = {frozenset({"memsim.experiment.run", "memsim.experiment.lifetime"})}


def module_name(path: Path) -> str:
    rel = path.relative_to(PACKAGE.parent).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def layer(module: str) -> str:
    parts = module.split(".")
    # memsim, memsim.units, memsim.errors: the innermost layer.
    return parts[1] if len(parts) > 2 or (len(parts) == 2 and parts[1] in RANK) else ""


def imports_of(path: Path) -> set[str]:
    """The memsim modules ``path`` imports (``from memsim.x import y`` gives memsim.x.y if a module)."""
    tree = ast.parse(path.read_text(), filename=str(path))
    me = module_name(path)
    package = me if path.name == "__init__.py" else me.rpartition(".")[0]
    found: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found.update(a.name for a in node.names if a.name.split(".")[0] == "memsim")
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")[: len(package.split(".")) - node.level + 1]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if target.split(".")[0] != "memsim":
                continue
            found.add(target)
            for a in node.names:
                if (PACKAGE.parent / (target + "." + a.name).replace(".", "/")).with_suffix(".py").exists():
                    found.add(f"{target}.{a.name}")
    found.discard(me)
    return found


GRAPH = {module_name(p): imports_of(p) for p in sorted(PACKAGE.rglob("*.py"))}


def test_every_module_has_a_layer() -> None:
    assert len(GRAPH) > 50
    unknown = {m for m in GRAPH if layer(m) not in RANK}
    assert not unknown, f"modules outside the known layers: {sorted(unknown)}"


def test_the_walk_sees_imports() -> None:
    # The check can fail: the CLI imports experiment code, the engine policy code.
    assert any(layer(t) == "experiment" for t in GRAPH["memsim.cli.sweep"])
    assert "memsim.experiment.batch" in GRAPH["memsim.experiment.sweep"]


def test_no_inner_layer_imports_an_outer_one() -> None:
    bad = sorted(f"{m} ({layer(m) or 'units/errors'}) imports {t} ({layer(t)})"
                 for m, targets in GRAPH.items() for t in targets
                 if RANK[layer(t)] > RANK[layer(m)])
    assert not bad, "\n".join(bad)


def _cycles() -> set[frozenset[str]]:
    """Pairs of modules that import each other, directly or through other modules (by SCC)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on: set[str] = set()
    out: set[frozenset[str]] = set()
    counter = [0]

    def visit(v: str) -> None:
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on.add(v)
        for w in GRAPH.get(v, ()):
            if w not in GRAPH:
                continue
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = set()
            while True:
                w = stack.pop()
                on.discard(w)
                comp.add(w)
                if w == v:
                    break
            if len(comp) > 1:
                out.add(frozenset(comp))

    for v in GRAPH:
        if v not in index:
            visit(v)
    return out


def _package_edges(cycle: frozenset[str]) -> bool:
    # A package's __init__ importing its own modules (registries) is not a cycle of two modules' jobs.
    return any(m + "." in n for m in cycle for n in cycle if m != n)


def test_no_import_cycle_besides_the_known_one() -> None:
    others = {c for c in _cycles() if c not in KNOWN_CYCLES and not _package_edges(c)}
    assert not others, [sorted(c) for c in others]


def test_run_and_lifetime_do_not_import_each_other() -> None:
    assert not any(c >= {"memsim.experiment.run", "memsim.experiment.lifetime"} for c in _cycles())


# Private helpers shared between the trace modules, left for their owners to make public.
KNOWN_PRIVATE = {"memsim.workload.trace", "memsim.workload.trace_reader", "memsim.workload.trace_shape",
                 "memsim.workload.trace_writer"}


def test_no_module_imports_another_modules_private_names() -> None:
    # A helper two modules share is public in one of them (an underscore
    # name is that module's own business).
    bad = []
    for path in sorted(PACKAGE.rglob("*.py")):
        me = module_name(path)
        if me in KNOWN_PRIVATE:
            continue
        for node in ast.walk(ast.parse(path.read_text(), filename=str(path))):
            if isinstance(node, ast.ImportFrom) and (node.module or "").startswith("memsim"):
                bad += [f"{me} imports {node.module}.{a.name}" for a in node.names
                        if a.name.startswith("_") and not a.name.startswith("__")]
    assert not bad, "\n".join(bad)


def test_lifetime_does_not_dispatch_on_leveler_names() -> None:
    # Each leveler reports its own device-scale evaluation
    # (Leveler.device_model); the lifetime modules name none of them.
    from memsim.policy.leveling import leveler_names

    names = set(leveler_names()) - {"none"}       # "none" is also a method value there
    found = []
    for mod in ("experiment/lifetime.py", "experiment/wear_life.py", "experiment/fixed_lifetime.py"):
        tree = ast.parse((PACKAGE / mod).read_text())
        found += [f"{mod}: {n.value!r}" for n in ast.walk(tree)
                  if isinstance(n, ast.Constant) and isinstance(n.value, str) and n.value in names]
        # No test of a leveler's name or configured scheme at all.
        found += [f"{mod}: line {n.lineno}" for n in ast.walk(tree) if isinstance(n, ast.Compare)
                  and any(isinstance(x, ast.Attribute) and x.attr in ("name", "scheme")
                          for x in [n.left, *n.comparators])]
    assert not found, found
