"""The written forms of a comparison's settings and workloads (``--vary``, ``--workload``).

Written forms of a setting (command line ``--vary``, or strings in Python)::

    write.scheme=full_line,data_comparison      one key, several values:
                                                one setting per value
    write.scheme=block_erase,controller.write_cancel=true
                                                several keys, one value each:
                                                one setting
    erase_ahead: write.scheme=block_erase,controller.write_cancel=true
                                                the same, labelled
    as_configured:                              a label alone: the config as is
    streams.web.interval_ns=50,100              one stream's field, the stream named
                                                by its name ...
    streams[1].interval_ns=50,100               ... or by its place in [[streams]]
                                                (from 0); an unknown stream or field
                                                is an error before anything runs

Values are TOML literals (``true``, ``38400``, ``"text"``) or bare text;
commas inside quotes or brackets do not split.  A workload is either a run
config file (its keys are applied over the base config; its ``run.name``,
``run.seed`` and ``run.out_dir`` are ignored) or a group of overrides in the
same form as a setting.  Overrides apply in the order base config, workload,
``fixed``, setting.  A workload file's ``[[streams]]`` replace the base
config's streams as a whole (their traces found next to that file).
"""
from __future__ import annotations

import itertools
import json
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from memsim.config.load import parse_value, read_toml
from memsim.errors import ConfigError
from memsim.experiment.batch import RESERVED, check_key, flatten

# section.key, or one stream's key: streams[I].key or streams.NAME.key (names may start with a digit).
_ASSIGN = re.compile(r"^\s*([A-Za-z_][A-Za-z0-9_]*(?:\[\d+\])?(?:\.[A-Za-z0-9_]+)+)\s*=(.*)$", re.DOTALL)


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
    check_key(key, origin, "seeds come from --seeds; the folder from --out")


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
        if key != "streams":          # a workload's own [[streams]] replace the base config's
            check_key(key, f"{p}: {key}")
    trace = flat.get("workload.trace")
    if isinstance(trace, str) and trace and not Path(trace).is_absolute():
        # As for a run config, a trace is found next to the file that names it.
        flat["workload.trace"] = str(p.parent / trace)
    streams = flat.get("streams")
    if isinstance(streams, list):
        flat["streams"] = [
            {**st, "trace": str(p.parent / st["trace"])}
            if isinstance(st, dict) and isinstance(st.get("trace"), str) and st["trace"]
            and not Path(st["trace"]).is_absolute() else st
            for st in streams]
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


__all__ = ["Group", "check_setting_key", "fill_labels", "parse_groups", "settings_from", "show_value",
           "split_top", "workload_file", "workloads_from"]
