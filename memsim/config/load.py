"""Load a run config from TOML, apply ``--set`` overrides, validate.

Every user mistake becomes one :class:`~memsim.errors.ConfigError` naming the
file, the dotted key, what was found and what is allowed.
"""
from __future__ import annotations

import copy
import tomllib
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from pydantic import BaseModel, ValidationError

from memsim.config.schema import RunConfig, load_preset, preset_names
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
    if not sep or "." not in key or not key.replace(".", "").replace("_", "").isalnum():
        raise ConfigError(source, repr(item), "section.key=value, e.g. write.scheme=flip_n_write")
    return key, parse_value(value.strip())


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
        field = model.model_fields.get(str(part))
        if field is None or not isinstance(field.annotation, type) or not issubclass(
            field.annotation, BaseModel
        ):
            return None
        model = field.annotation
    return model


def _allowed(err: dict) -> str:
    kind = err["type"]
    if kind == "extra_forbidden":
        model = _model_at(err["loc"])
        if model is not None:
            return "one of " + ", ".join(model.model_fields)
    msg = err["msg"]
    for prefix in ("Input should be ", "String should "):
        if msg.startswith(prefix):
            msg = msg[len(prefix):]
    return msg


def _where(source: str, key: str, overridden: set[str]) -> str:
    """Name the override when the bad key came from ``--set``, else the file."""
    if any(o == key or o.startswith(key + ".") or key.startswith(o + ".") for o in overridden):
        return f"--set {key}"
    return f"{source}: {key}"


def validate(data: dict, source: str = "<config>", overridden: set[str] | None = None) -> RunConfig:
    """Validate a plain dict into a :class:`RunConfig` or raise one ConfigError."""
    overridden = overridden or set()
    data = copy.deepcopy(data)
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
        key = ".".join(str(p) for p in err["loc"]) or "(top level)"
        found = repr(err.get("input")) if err["type"] != "missing" else "nothing"
        if err["type"] == "extra_forbidden":
            found = f"unknown key '{err['loc'][-1]}'"
        raise ConfigError(_where(source, key, overridden), found, _allowed(err)) from None
    check_consistency(cfg, source, overridden)
    return cfg


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


def read_toml(path: str | Path) -> dict:
    p = Path(path)
    try:
        with p.open("rb") as fh:
            return tomllib.load(fh)
    except FileNotFoundError:
        raise ConfigError(str(p), "no such file", "a path to a TOML run config") from None
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
    if isinstance(source, RunConfig):
        data, name = source.model_dump(), "<config>"
    elif isinstance(source, Mapping):
        data, name = copy.deepcopy(dict(source)), "<dict>"
    elif source is None:
        data, name = {}, "<defaults>"
    else:
        data, name = read_toml(source), str(source)
    items: list[tuple[str, Any]] = []
    if isinstance(overrides, Mapping):
        items = list(overrides.items())
    elif overrides:
        items = [parse_assignment(s) for s in overrides]
    for key, value in items:
        set_dotted(data, key, value)
    cfg = validate(data, name, {k for k, _ in items})
    trace = cfg.workload.trace
    from_file = not any(k == "workload.trace" for k, _ in items)
    if trace and from_file and isinstance(source, (str, Path)) and not Path(trace).is_absolute():
        # A trace named in a config file is found next to that file.
        cfg.workload.trace = str(Path(source).parent / trace)
    return cfg
