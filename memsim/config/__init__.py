"""Typed run configuration: schema, TOML loading, ``--set`` overrides, presets."""
from memsim.config.load import load_config, parse_assignment, validate
from memsim.config.schema import RunConfig, load_preset, preset_names

__all__ = ["RunConfig", "load_config", "load_preset", "parse_assignment", "preset_names", "validate"]
