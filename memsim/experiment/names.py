"""Config fields that name a registered part, and the registries they name.

The schema (``config/``) keeps these fields as plain strings because the
registries live in outer layers (``policy/``).  Here, in the experiment layer,
which may import both, every such name is checked against its registry when a
run config is resolved, and the registered names are written into the
fields' descriptions, so neither the schema nor any message lists names by
hand.  ``memsim list`` (:func:`memsim.experiment.tools.available`) reads the
same table.
"""
from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from pydantic import BaseModel

from memsim.config import RunConfig
from memsim.config.schema import PRESETS
from memsim.policy.leveling import LEVELERS
from memsim.policy.refresh import REFRESH_POLICIES
from memsim.policy.victims import VICTIMS
from memsim.policy.write import SCHEMES
from memsim.registry import Registry

# Dotted config key -> (registry, the label of its list in `memsim list`).
NAMED_FIELDS: dict[str, tuple[Registry[Any], str]] = {
    "write.scheme": (SCHEMES, "write_schemes"),
    "leveling.scheme": (LEVELERS, "wear_levelers"),
    "refresh.policy": (REFRESH_POLICIES, "refresh_policies"),
    "erase.victim": (VICTIMS, "cleaner_victims"),
    "cell.preset": (PRESETS, "presets"),
}
# What each field is, before the names are added.
_WHAT = {"write.scheme": "Write scheme", "leveling.scheme": "Wear leveler",
         "refresh.policy": "Refresh policy", "erase.victim": "Cleaner's victim choice"}


def registries() -> Mapping[str, Registry[Any]]:
    """``{list label: registry}`` in the order ``memsim list`` shows them."""
    return {label: reg for reg, label in NAMED_FIELDS.values()}


def check_registered(cfg: RunConfig, where_prefix: str = "") -> None:
    """Raise ConfigError (bare dotted key) for the first config field naming no registered part."""
    for key in _WHAT:
        section, field = key.split(".")
        reg = NAMED_FIELDS[key][0]
        reg.check(getattr(getattr(cfg, section), field), f"{where_prefix}{key}")


def describe_named_fields() -> None:
    """Write each named field's registered names (and their one-line summaries) into its description."""
    for key, what in _WHAT.items():
        section, field = key.split(".")
        model: type[BaseModel] = RunConfig.model_fields[section].annotation
        reg = NAMED_FIELDS[key][0]
        parts = "; ".join(f"{n}: {s}" if s else n for n, s in reg.describe().items())
        model.model_fields[field].description = f"{what}, {reg.choices()} ({parts})."
        model.model_rebuild(force=True)
    RunConfig.model_rebuild(force=True)


describe_named_fields()
