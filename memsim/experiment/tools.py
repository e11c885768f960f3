"""Python calls behind the smaller commands: ``trace make``, ``trace info``, ``list``.

Each returns data (a dict, with DataFrames where a table belongs) and prints
nothing; the CLI modules only format what these return.
"""
from __future__ import annotations

import os
from collections.abc import Iterable, Iterator, Mapping
from pathlib import Path
from typing import Any, get_args

import numpy as np

from memsim.errors import ConfigError, UserError

TRACE_SUFFIXES = (".csv", ".csv.gz", ".parquet")


def _counted(chunks: Iterable, counts: list[int]) -> Iterator:
    """Pass chunks through, adding their reads, writes and hints to ``counts``."""
    for ch in chunks:
        counts[:] = [a + int(b) for a, b in zip(counts, np.bincount(ch.op, minlength=3)[:3])]
        yield ch


def make_trace(spec: str | os.PathLike[str] | Mapping, out: str | os.PathLike[str], *,
               with_data: bool = False, overrides: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """Write the request stream a run config describes to the trace file ``out``.

    The config's synthetic ``[workload]`` and ``run.seed`` decide the
    requests; ``out`` ends in .csv, .csv.gz or .parquet.  Replaying the trace
    with the same seed and memory settings gives the same run as the config.
    With ``with_data`` every write's content is stored.  A workload sized in
    device lines (``workload.sizing = "device_lines"``) is written as device
    lines, which a replay with the same sizing folds as the config's run does.

    Returns ``{"path", "requests", "reads", "writes", "hints", "with_data",
    "closed_loop", "streams"}`` (streams: how many ``[[streams]]`` were merged).
    """
    from memsim.config import load_config
    from memsim.config.schema import WorkloadSection
    from memsim.experiment.build import build_source
    from memsim.metrics.files import check_folder
    from memsim.workload.trace import write_trace

    cfg = load_config(spec, dict(overrides or {}))
    where = f"{spec}: " if isinstance(spec, (str, os.PathLike)) else ""
    w = cfg.workload
    if w.pattern == "trace":
        synthetic = [p for p in get_args(WorkloadSection.model_fields["pattern"].annotation) if p != "trace"]
        raise ConfigError(f"{where}workload.pattern", "'trace'",
                          "a synthetic pattern to generate from: " + ", ".join(synthetic))
    if with_data and w.data == "flip":
        raise ConfigError(f"{where}workload.data", "'flip' with --with-data",
                          "random, zeros or ones (flip content depends on what the memory holds "
                          "at replay; leave out --with-data and the replay draws the flips)")
    path = Path(out)
    if not path.name.lower().endswith(TRACE_SUFFIXES):
        raise UserError(str(out), f"suffix {''.join(path.suffixes) or 'none'!r}",
                        ", ".join(TRACE_SUFFIXES) + " (the form follows the suffix)")
    if not path.parent.is_dir():
        raise UserError(str(out), f"no folder {str(path.parent)!r}", "a path in an existing folder")
    if path.is_dir():
        raise UserError(str(out), "a folder", "the path of a trace file to write")
    check_folder(path.parent, str(out))
    name = Path(spec).name if isinstance(spec, (str, os.PathLike)) else "a config"
    made_of = (f"streams {', '.join(f'{st.name} ({st.pattern})' for st in cfg.streams)}" if cfg.streams
               else f"pattern {w.pattern}")
    note = (f"made by memsim trace make from {name}: {made_of}, arrival "
            f"{w.arrival}, run.seed {cfg.run.seed}, line_bytes {cfg.array.line_bytes}; "
            + ("write content stored" if with_data else f"no write content (data model {w.data})"))
    counts = [0, 0, 0]
    source = build_source(cfg, content=with_data, front=False, fold=False)
    try:
        n = write_trace(path, _counted(source, counts), cfg.array.line_bytes, with_data, comment=note)
    except OSError as exc:
        raise UserError(str(out), f"a file that cannot be written ({exc.strerror})",
                        "a writable path") from None
    finally:
        source.close()
    return {"path": str(path), "requests": int(n), "reads": counts[0], "writes": counts[1],
            "hints": counts[2], "with_data": with_data, "closed_loop": w.arrival == "closed",
            "streams": len(cfg.streams)}


def trace_summary(file: str | os.PathLike[str], *, skip_bad: bool = False, line_bytes: int = 64,
                  footprint: int | None = None) -> dict[str, Any]:
    """Check a trace file and summarize it in one streaming pass.

    Returns the keys of :func:`memsim.workload.trace_info.trace_info` plus
    ``kind`` (text, gzip or parquet), ``columns``, ``has_data``,
    ``bad_examples`` (up to a few skipped lines, with ``skip_bad``) and
    ``reuse_histogram`` (a DataFrame of reuse distances).
    """
    from memsim.workload.trace import TraceReader, trace_info

    with TraceReader(file, skip_bad=skip_bad, line_bytes=line_bytes, footprint=footprint) as reader:
        info, hist = trace_info(reader)
    return {**info, "kind": reader.kind, "columns": list(reader.columns), "has_data": bool(reader.has_data),
            "line_bytes": reader.line_bytes, "skip_bad": reader.skip_bad,
            "bad_examples": list(reader.bad_examples), "reuse_histogram": hist}


def available() -> dict[str, list[str]]:
    """What a config may name, read from the registries (:mod:`memsim.experiment.names`):
    write schemes, wear levelers, refresh policies, cleaner victim policies and
    technology presets, each a list of names in registration order."""
    from memsim.experiment.names import registries

    return {label: reg.names() for label, reg in registries().items()}


def describe_available() -> dict[str, dict[str, str]]:
    """As :func:`available`, with each name's one-line summary: ``{list: {name: summary}}``."""
    from memsim.experiment.names import registries

    return {label: reg.describe() for label, reg in registries().items()}
