"""Load a run config from TOML, apply ``--set`` overrides, validate.

Every user mistake becomes one :class:`~memsim.errors.ConfigError` naming the
file, the dotted key, what was found and what is allowed.
"""
from __future__ import annotations

import copy
import re
import tomllib
import typing
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from pydantic import BaseModel, ValidationError

from memsim.config.schema import (
    LIMIT_NOTES,
    MAX_MODELED_BYTES,
    MAX_REQUESTS,
    RunConfig,
    StreamSection,
    load_preset,
    preset_names,
)
from memsim.errors import ConfigError


def parse_value(text: str) -> Any:
    """A ``--set`` value: a TOML literal if it parses as one, else a string."""
    try:
        return tomllib.loads(f"v = {text}")["v"]
    except tomllib.TOMLDecodeError:
        return text


def parse_assignment(item: str, source: str = "--set") -> tuple[str, Any]:
    """Split ``section.key=value`` into its dotted key and parsed value."""
    key, sep, value = item.partition("=")
    key = key.strip()
    bare = key.replace(".", "").replace("_", "").replace("[", "").replace("]", "")
    if not sep or "." not in key or not bare.isalnum():
        raise ConfigError(source, repr(item), "section.key=value, e.g. write.scheme=flip_n_write")
    return key, parse_value(value.strip())


_STREAM_KEY = re.compile(r"^streams(?:\[(\d+)\]|\.([A-Za-z0-9_]+))\.([A-Za-z_][A-Za-z0-9_]*)$")


def stream_key(key: str) -> tuple[int | str, str] | None:
    """``streams[I].FIELD`` -> ``(I, FIELD)``; ``streams.NAME.FIELD`` -> ``(NAME, FIELD)``; else None.

    These are the written forms of one stream's setting in overrides
    (``--set``, ``--vary``, sweep keys): by position (0-based, as error
    messages name a stream) or by the stream's name.
    """
    m = _STREAM_KEY.match(key.strip())
    if m is None:
        return None
    index, name, field = m.groups()
    return (int(index) if index is not None else name), field


def check_stream_field(key: str, where: str) -> None:
    """Raise ConfigError unless ``key`` is a stream key whose field a setting may change."""
    parsed = stream_key(key)
    fields = [f for f in StreamSection.model_fields if f != "name"]
    if parsed is None:
        raise ConfigError(where, f"unknown key '{key}'", "streams[I].FIELD (I from 0) or streams.NAME.FIELD")
    if parsed[1] not in fields:
        raise ConfigError(where, f"unknown stream field '{parsed[1]}'", "one of " + ", ".join(fields))


def _set_stream(data: dict, key: str, value: Any) -> str:
    """Apply one stream override to ``data``; return its key as ``streams[I].FIELD``."""
    selector, field = stream_key(key)
    where = f"--set {key}"
    streams = data.get("streams")
    if not isinstance(streams, list) or not all(isinstance(s, dict) for s in streams) or not streams:
        raise ConfigError(where, "a config without [[streams]]", "a key of an existing stream")
    names = [str(s.get("name")) for s in streams]
    if isinstance(selector, int):
        if selector >= len(streams):
            raise ConfigError(where, f"stream index {selector}",
                              f"streams[0] to streams[{len(streams) - 1}] (or streams.NAME with NAME one "
                              f"of {', '.join(names)})")
        i = selector
    else:
        if selector not in names:
            raise ConfigError(where, f"no stream named '{selector}'",
                              f"streams.NAME with NAME one of {', '.join(names)} (or streams[I], I from 0 "
                              f"to {len(streams) - 1})")
        i = names.index(selector)
    check_stream_field(key, where)
    streams[i][field] = value
    return f"streams[{i}].{field}"


def set_dotted(data: dict, key: str, value: Any) -> None:
    parts = key.split(".")
    node = data
    for p in parts[:-1]:
        nxt = node.setdefault(p, {})
        if not isinstance(nxt, dict):
            raise ConfigError(f"--set {key}", repr(value), f"'{p}' is a value, not a section")
        node = nxt
    node[parts[-1]] = value


def get_dotted(data: Mapping, key: str) -> Any:
    node: Any = data
    for p in key.split("."):
        node = node[p]
    return node


def _model_at(loc: tuple) -> type[BaseModel] | None:
    """The pydantic model class that owns the field at ``loc[:-1]``."""
    model: type[BaseModel] = RunConfig
    for part in loc[:-1]:
        if isinstance(part, int):        # the item of a list of tables: same model
            continue
        field = model.model_fields.get(str(part))
        if field is not None and _item_model(field.annotation) is not None:
            model = _item_model(field.annotation)
            continue
        if field is None or not isinstance(field.annotation, type) or not issubclass(
            field.annotation, BaseModel
        ):
            return None
        model = field.annotation
    return model


def _item_model(ann: Any) -> type[BaseModel] | None:
    """The table type of a ``list[Model]`` annotation, else None."""
    args = typing.get_args(ann)
    if typing.get_origin(ann) is list and args and isinstance(args[0], type) and issubclass(args[0], BaseModel):
        return args[0]
    return None


def _key_of_in(model: type[BaseModel], loc: tuple) -> str:
    """The field name at the head of ``loc`` inside one table of a list (no deeper nesting there)."""
    return str(loc[0]) if loc and str(loc[0]) in model.model_fields else ""


def _key_of(loc: tuple) -> str:
    """The dotted config key of an error location, without pydantic's union branch tags.

    ``("cell", "pulse_ns", "constrained-float")`` -> ``cell.pulse_ns``;
    ``("cell", "level_log10_ohm", 2)`` -> ``cell.level_log10_ohm[2]``.
    """
    model: Any = RunConfig
    parts: list[str] = []
    for i, part in enumerate(loc):
        fields = getattr(model, "model_fields", None)
        if fields is None or str(part) not in fields:
            break
        parts.append(str(part))
        ann = fields[str(part)].annotation
        model = ann if isinstance(ann, type) and issubclass(ann, BaseModel) else None
        if model is None:
            rest = loc[i + 1:]
            if rest and isinstance(rest[0], int):
                parts[-1] += f"[{rest[0]}]"
                model = _item_model(ann)
                if model is not None:         # a list of tables: go on into the item
                    loc = loc[:i + 1] + loc[i + 2:]
                    return ".".join(parts + [_key_of_in(model, loc[i + 1:])]).rstrip(".")
            break
    if not parts:
        return ".".join(str(p) for p in loc) or "(top level)"
    return ".".join(parts)


# Pydantic's wording -> ours, after "Input should be " is cut off.
_WORDING = (
    ("a valid boolean", "true or false"),
    ("a valid number", "a number (not true/false or a string)"),
    ("a valid integer", "an integer (not true/false or a string)"),
    ("a valid string", "a string in quotes"),
    ("a finite number", "a finite number (no nan or inf)"),
)


def _bounds(loc: tuple) -> str:
    """`` >= lo``, `` <= hi`` of the field at ``loc`` as written in the schema."""
    model = _model_at(loc)
    field = model.model_fields.get(str(loc[-1])) if model is not None else None
    parts = []
    for m in field.metadata if field is not None else ():
        for attr, sign in (("ge", ">="), ("gt", ">"), ("le", "<="), ("lt", "<")):
            if getattr(m, attr, None) is not None:
                parts.append(f"{sign} {getattr(m, attr)}")
    return " and ".join(parts)


def _allowed(err: dict, key: str = "") -> str:
    kind = err["type"]
    if kind == "extra_forbidden":
        model = _model_at(err["loc"])
        if model is not None:
            return "one of " + ", ".join(model.model_fields)
    if kind == "int_type" and isinstance(err.get("input"), float):
        # 1e5 is a float in TOML; say how to write the number instead.
        bounds = _bounds(err["loc"])
        note = f" ({LIMIT_NOTES[key]})" if key in LIMIT_NOTES else ""
        return f"an integer{' ' + bounds if bounds else ''}, written without a decimal point or exponent{note}"
    msg = err["msg"]
    for prefix in ("Input should be ", "String should "):
        msg = msg.removeprefix(prefix)
    for theirs, ours in _WORDING:
        if msg.startswith(theirs):
            msg = ours + msg[len(theirs):]
            break
    note = LIMIT_NOTES.get(key)
    if note and kind in ("less_than_equal", "less_than"):
        msg += f" ({note})"
    return msg


def _where(source: str, key: str, overridden: set[str]) -> str:
    """Name the override when the bad key came from ``--set``, else the file."""
    base = key.split("[", 1)[0]
    if key in overridden or any(o == base or o.startswith(base + ".") or base.startswith(o + ".")
                                for o in overridden):
        return f"--set {key}"
    return f"{source}: {key}"


def locate(exc: ConfigError, source: str, overridden: set[str] | None = None) -> ConfigError:
    """``exc`` with the file (or ``--set``) in front of a bare dotted key.

    Checks that run on the parts built from a config (cell models, levelers,
    the erase pool) know the key but not the file; every path from a user's
    file passes their errors through here.  An error that already names its
    place is returned as it is.
    """
    where = exc.where
    section = where.split(".", 1)[0]
    if ":" in where or where.startswith("--") or section not in RunConfig.model_fields:
        return exc
    return type(exc)(_where(source, where, overridden or set()), exc.found, exc.allowed)


def source_name(source: Any) -> str:
    """How errors name a config source: its path, or what kind of object it was."""
    if isinstance(source, RunConfig):
        return "<config>"
    if isinstance(source, Mapping):
        return "<dict>"
    if source is None:
        return "<defaults>"
    return str(source)


def validate(data: dict, source: str = "<config>", overridden: set[str] | None = None) -> RunConfig:
    """Validate a plain dict into a :class:`RunConfig` or raise one ConfigError."""
    overridden = overridden or set()
    data = copy.deepcopy(data)
    for section, values in data.items():
        if section == "streams":
            if not isinstance(values, list) or not all(isinstance(v, dict) for v in values):
                raise ConfigError(_where(source, section, overridden), repr(values),
                                  "a list of tables [[streams]]")
            continue
        if section in RunConfig.model_fields and not isinstance(values, dict):
            raise ConfigError(_where(source, section, overridden), repr(values), f"a table [{section}]")
    cell = data.get("cell")
    if isinstance(cell, dict) and "preset" in cell:
        name = cell["preset"]
        if name not in preset_names():
            raise ConfigError(_where(source, "cell.preset", overridden), repr(name),
                              "one of " + ", ".join(preset_names()))
        # Every section of the preset file supplies defaults under the user's values.
        for section, values in load_preset(name).items():
            if isinstance(values, dict):
                data[section] = {**values, **data.get(section, {})}
    try:
        cfg = RunConfig.model_validate(data)
    except ValidationError as exc:
        err = exc.errors()[0]
        if err["type"] in ("extra_forbidden", "missing"):
            key = ".".join(str(p) for p in err["loc"]) or "(top level)"
        else:
            key = _key_of(err["loc"])
        found = repr(err.get("input")) if err["type"] != "missing" else "nothing"
        if err["type"] == "extra_forbidden":
            found = f"unknown key '{err['loc'][-1]}'"
        raise ConfigError(_where(source, key, overridden), found, _allowed(err, key)) from None
    check_consistency(cfg, source, overridden)
    return cfg


# Stream fields of synthetic streams only (a trace stream takes them from its trace).
_SYNTHETIC_ONLY = ("requests", "read_fraction", "arrival", "interval_ns", "zipf_exponent", "hot_fraction",
                   "hot_share", "stride_lines")

# Per-level cell fields: one number, or exactly one value per level.
PER_LEVEL = ("program_sigma_decades", "pv_mean_iterations", "pulse_ns", "pulse_pj", "drift_nu")


def _check_sizing(cfg: RunConfig, source: str, overridden: set[str]) -> None:
    """Workloads sized in device lines: the patterns and sizes that have a device layout."""
    w = cfg.workload
    if w.sizing != "device_lines":
        return
    if w.pattern not in ("uniform", "zipf", "hotspot", "trace"):
        raise ConfigError(_where(source, "workload.sizing", overridden), f"device_lines with pattern {w.pattern}",
                          "device_share, or device_lines with pattern uniform, zipf, hotspot or trace")
    if w.footprint_lines:
        raise ConfigError(_where(source, "workload.footprint_lines", overridden), str(w.footprint_lines),
                          "0 with workload.sizing = device_lines (the traffic spans the device)")
    if w.size_lines != 1 and w.pattern != "trace":
        raise ConfigError(_where(source, "workload.size_lines", overridden), str(w.size_lines),
                          "1 with workload.sizing = device_lines")
    device = cfg.device_lines
    if w.pattern == "hotspot" and w.hot_lines >= device:
        raise ConfigError(_where(source, "workload.hot_lines", overridden), str(w.hot_lines),
                          f"fewer than the device's {device} lines (workload.sizing = device_lines)")


def check_consistency(cfg: RunConfig, source: str, overridden: set[str]) -> None:
    """Rules that tie several fields together."""
    c = cfg.controller
    if c.drain_high > c.write_queue:
        raise ConfigError(_where(source, "controller.drain_high", overridden), str(c.drain_high),
                          f"at most controller.write_queue ({c.write_queue})")
    if c.drain_low >= c.drain_high:
        raise ConfigError(_where(source, "controller.drain_low", overridden), str(c.drain_low),
                          f"less than controller.drain_high ({c.drain_high})")
    a = cfg.array
    if a.line_bytes not in (8, 16, 32, 64, 128, 256):
        raise ConfigError(_where(source, "array.line_bytes", overridden), str(a.line_bytes),
                          "one of 8, 16, 32, 64, 128, 256")
    if cfg.write.word_bits > a.line_bytes * 8:
        raise ConfigError(_where(source, "write.word_bits", overridden), str(cfg.write.word_bits),
                          f"at most the line size in bits ({a.line_bytes * 8})")
    if a.lines * a.line_bytes > MAX_MODELED_BYTES:
        raise ConfigError(_where(source, "array.lines", overridden), f"{a.lines} lines of {a.line_bytes} bytes",
                          f"at most {MAX_MODELED_BYTES >> 30} GiB of modeled lines (array.lines x "
                          "array.line_bytes; every modeled line is held in memory with its state; "
                          "array.capacity_gib scales results to a larger device)")
    if a.mapping == "row" and a.row_lines < 1:
        raise ConfigError(_where(source, "array.mapping", overridden), repr(a.mapping),
                          "line when array.row_lines is 0 (row interleaving keeps a row of "
                          "row_lines lines in one bank)")
    names = set()
    for i, st in enumerate(cfg.streams):
        key = f"streams[{i}]"
        if st.name in names:
            raise ConfigError(_where(source, f"{key}.name", overridden), repr(st.name),
                              "a name no other stream has")
        names.add(st.name)
        if st.pattern == "trace":
            if not st.trace:
                raise ConfigError(_where(source, f"{key}.trace", overridden), "nothing",
                                  "the path of a trace file when the stream's pattern is 'trace'")
            # The trace decides these; a value given for them would do nothing.
            for field in _SYNTHETIC_ONLY:
                if getattr(st, field) == type(st).model_fields[field].default:
                    continue
                raise ConfigError(_where(source, f"{key}.{field}", overridden), repr(getattr(st, field)),
                                  "no value with pattern 'trace' (the trace gives each request's "
                                  "time, operation and line; time_scale and start_ns shape its timing)")
        else:
            for field, bad in (("trace", bool(st.trace)), ("time_scale", st.time_scale != 1.0)):
                if bad:
                    raise ConfigError(_where(source, f"{key}.{field}", overridden), repr(getattr(st, field)),
                                      "only with the stream's pattern 'trace'")
        if st.offset_lines + max(st.footprint_lines, 1) > cfg.footprint:
            raise ConfigError(_where(source, f"{key}.offset_lines", overridden),
                              f"{st.offset_lines} + footprint {st.footprint_lines}",
                              f"a range inside the footprint ({cfg.footprint} lines)")
    if cfg.streams:
        for bad, key, allowed in (
                (cfg.workload.pattern == "trace", "workload.pattern",
                 "a synthetic pattern with [[streams]] (a trace is a stream of its own: pattern = 'trace' "
                 "in [[streams]])"),
                (cfg.workload.hint_lead_ns > 0, "workload.hint_lead_ns", "0 with [[streams]]"),
                (cfg.controller.hint_preset, "controller.hint_preset",
                 "false with [[streams]] (the streams carry no hints)"),
                (sum(st.requests for st in cfg.streams if st.pattern != "trace") > MAX_REQUESTS, "streams",
                 f"at most {MAX_REQUESTS} requests over all streams")):
            if bad:
                raise ConfigError(_where(source, key, overridden), "this setting", allowed)
    k = cfg.cache
    if k.enabled:
        if k.capacity_lines * a.line_bytes > MAX_MODELED_BYTES:
            raise ConfigError(_where(source, "cache.capacity_lines", overridden), str(k.capacity_lines),
                              f"at most {MAX_MODELED_BYTES >> 30} GiB of cached lines (capacity_lines x "
                              "array.line_bytes; the content of dirty lines is held in memory)")
        if k.capacity_lines % k.ways:
            raise ConfigError(_where(source, "cache.ways", overridden), str(k.ways),
                              f"a divisor of cache.capacity_lines ({k.capacity_lines})")
        if cfg.workload.arrival == "closed" and cfg.workload.pattern != "trace":
            raise ConfigError(_where(source, "cache.enabled", overridden), "true",
                              "false with workload.arrival closed (the cache acts on arrival times "
                              "known before the run)")
        if cfg.controller.hint_preset:
            raise ConfigError(_where(source, "cache.enabled", overridden), "true",
                              "false with controller.hint_preset (a write reaches the PCM at its "
                              "eviction, not after its hint)")
    _check_sizing(cfg, source, overridden)
    if cfg.footprint > a.lines:
        raise ConfigError(_where(source, "workload.footprint_lines", overridden),
                          str(cfg.workload.footprint_lines), f"at most array.lines ({a.lines})")
    if 0 < cfg.power.budget_ua < cfg.cell.reset_ua:
        raise ConfigError(_where(source, "power.budget_ua", overridden), str(cfg.power.budget_ua),
                          f"0 (off) or at least cell.reset_ua ({cfg.cell.reset_ua})")
    for key in ("bank_budget_ua",):
        if a.bank_budget_ua < cfg.cell.reset_ua:
            raise ConfigError(_where(source, f"array.{key}", overridden), str(a.bank_budget_ua),
                              f"at least cell.reset_ua ({cfg.cell.reset_ua}) so one cell can be reset")
    w = cfg.workload
    if w.hint_lead_ns > 0 and w.arrival == "closed":
        # Closed-loop arrival times are decided while running; a hint cannot precede them.
        raise ConfigError(_where(source, "workload.hint_lead_ns", overridden), f"{w.hint_lead_ns} with "
                          "workload.arrival = 'closed'",
                          "0 with closed arrivals (hints need arrival times: poisson, fixed or onoff)")
    cell = cfg.cell
    n = 3 if cell.tri_level else 1 << cell.bits_per_cell
    verified = cell.bits_per_cell > 1 or cell.tri_level or cell.technology != "pcm"
    if c.write_pause and verified:
        # Pausing is modelled between the SET/RESET rounds of single-level PCM
        # writes; a program-and-verify write (multi-level or tri-level cells,
        # ReRAM, STT-MRAM) is one sequence that would ignore the switch.
        cause = next(k for k, on in (("cell.bits_per_cell", cell.bits_per_cell > 1),
                                     ("cell.tri_level", cell.tri_level),
                                     ("cell.technology", cell.technology != "pcm")) if on)
        key = "controller.write_pause" if "controller.write_pause" in overridden or \
            cause not in overridden else cause
        found = {"cell.bits_per_cell": f"cell.bits_per_cell = {cell.bits_per_cell}",
                 "cell.tri_level": "cell.tri_level = true",
                 "cell.technology": f"cell.technology = {cell.technology!r}"}[cause]
        raise ConfigError(_where(source, key, overridden), f"write_pause = true with {found}",
                          "write_pause only with single-level PCM cells (bits_per_cell = 1, "
                          "tri_level = false, technology = 'pcm')")
    if c.coalesce_writes and verified:
        # A replaced write's cells are taken back from the wear ledger; a
        # program-and-verify write's pulses are not kept per queued write.
        raise ConfigError(_where(source, "controller.coalesce_writes", overridden),
                          "true with program-and-verify cells (multi-level, tri-level, ReRAM or STT-MRAM)",
                          "coalesce_writes only with single-level PCM cells (bits_per_cell = 1, "
                          "tri_level = false, technology = 'pcm')")

    def level_key(name: str) -> str:
        # A level count changed by --set is the thing to blame for a list left from the file.
        if "cell.bits_per_cell" in overridden and f"cell.{name}" not in overridden:
            return "--set cell.bits_per_cell"
        return _where(source, f"cell.{name}", overridden)

    if len(cell.level_log10_ohm) != n:
        raise ConfigError(level_key("level_log10_ohm"),
                          f"{len(cell.level_log10_ohm)} values",
                          f"{n} values, one per level of " + (
                              "tri-level cells" if cell.tri_level else
                              f"cell.bits_per_cell = {cell.bits_per_cell}"))
    th = cell.read_thresholds_log10_ohm
    if th is not None and len(th) != n - 1:
        raise ConfigError(level_key("read_thresholds_log10_ohm"), f"{len(th)} values",
                          f"{n - 1} values, one between each two of the {n} levels")
    for name in PER_LEVEL:
        value = getattr(cell, name)
        if isinstance(value, list) and len(value) != n:
            raise ConfigError(level_key(name), f"{len(value)} values {value}",
                              f"one number or {n} values (one per level of " + (
                                  "tri-level cells)" if cell.tri_level else
                                  f"cell.bits_per_cell = {cell.bits_per_cell})"))


def read_toml(path: str | Path) -> dict:
    """Parse a TOML file; a UTF-8 byte-order mark at its start is allowed."""
    p = Path(path)
    try:
        raw = p.read_bytes()
    except FileNotFoundError:
        raise ConfigError(str(p), "no such file", "a path to a TOML file") from None
    except IsADirectoryError:
        raise ConfigError(str(p), "a folder", "a path to a TOML file") from None
    except OSError as exc:
        raise ConfigError(str(p), f"a file that cannot be read ({exc.strerror})",
                          "a readable TOML file") from None
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[:exc.start].count(b"\n") + 1
        raise ConfigError(f"{p}:{line}", f"the byte 0x{raw[exc.start]:02x}, which is not UTF-8",
                          "UTF-8 text (save the file as UTF-8)") from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(str(p), f"invalid TOML ({exc})", "TOML syntax") from None


def load_config(
    source: str | Path | Mapping | RunConfig | None = None,
    overrides: Mapping[str, Any] | list[str] | None = None,
) -> RunConfig:
    """Build a validated :class:`RunConfig`.

    Parameters
    ----------
    source:
        A TOML path, a plain dict, an existing RunConfig or ``None`` (defaults).
    overrides:
        ``{"section.key": value}`` or a list of ``"section.key=value"`` strings.
    """
    name = source_name(source)
    if isinstance(source, RunConfig):
        data = source.model_dump()
    elif isinstance(source, Mapping):
        data = copy.deepcopy(dict(source))
    elif source is None:
        data = {}
    else:
        data = read_toml(source)
    items: list[tuple[str, Any]] = []
    if isinstance(overrides, Mapping):
        items = list(overrides.items())
    elif overrides:
        items = [parse_assignment(s) for s in overrides]
    written: dict[str, str] = {}          # streams[I].FIELD -> the form the user wrote
    for key, value in items:
        if stream_key(key) is not None:
            written[_set_stream(data, key, value)] = key
        elif key.startswith(("streams.", "streams[")):
            check_stream_field(key, f"--set {key}")
        else:
            set_dotted(data, key, value)
    try:
        cfg = validate(data, name, {k for k, _ in items} | set(written))
    except ConfigError as exc:
        for canon, key in written.items():
            if exc.where == f"--set {canon}":
                raise ConfigError(f"--set {key}", exc.found, exc.allowed) from None
        raise
    for st in cfg.streams:
        if st.trace and isinstance(source, (str, Path)) and not Path(st.trace).is_absolute() and \
                not any(canon.endswith(".trace") and cfg.streams[int(canon[8:canon.index("]")])] is st
                        for canon in written):
            st.trace = str(Path(source).parent / st.trace)
    trace = cfg.workload.trace
    from_file = not any(k == "workload.trace" for k, _ in items)
    if trace and from_file and isinstance(source, (str, Path)) and not Path(trace).is_absolute():
        # A trace named in a config file is found next to that file.
        cfg.workload.trace = str(Path(source).parent / trace)
    return cfg
