"""Wear levelers: logical -> physical line maps, found by name in :data:`LEVELERS`.

Every scheme follows the contract in :mod:`memsim.policy.leveling.base`.
Add a scheme by writing one module and one line below; ``memsim list``,
config validation and the description of ``leveling.scheme`` come from the
registry, and its keyword-only constructor parameters are its
``[leveling]`` keys.
"""
from __future__ import annotations

import inspect

import numpy as np

from memsim.errors import ConfigError
from memsim.policy.leveling.base import Leveler, LevelResult, Moves
from memsim.policy.leveling.bit_rotation import BitRotation
from memsim.policy.leveling.hot_cold_swap import HotColdSwap
from memsim.policy.leveling.none import NoLeveling
from memsim.policy.leveling.randomized_start_gap import RandomizedStartGap
from memsim.policy.leveling.region_start_gap import RegionStartGap
from memsim.policy.leveling.security_refresh import SecurityRefresh
from memsim.policy.leveling.start_gap import StartGap
from memsim.registry import Registry

LEVELERS: Registry[type[Leveler]] = Registry("wear leveler", "leveling.scheme")
# Listed by name (memsim list and error messages show them in this order).
for _cls in sorted((NoLeveling, StartGap, RandomizedStartGap, RegionStartGap, SecurityRefresh, HotColdSwap,
                    BitRotation), key=lambda c: c.name):
    LEVELERS.add(_cls)

__all__ = [
    "LEVELERS",
    "LevelResult",
    "Leveler",
    "Moves",
    "leveler_names",
    "leveler_params",
    "make_leveler",
]


def leveler_names() -> list[str]:
    """Registered scheme names, sorted."""
    return sorted(LEVELERS)


def leveler_params(name: str) -> dict[str, object]:
    """Keyword parameters of a scheme and their defaults."""
    cls = _lookup(name)
    sig = inspect.signature(cls.__init__)
    return {p.name: p.default for p in sig.parameters.values()
            if p.kind is inspect.Parameter.KEYWORD_ONLY}


def _lookup(name: str) -> type[Leveler]:
    return LEVELERS.get_part(name)


def make_leveler(name: str, n_logical: int, rng: np.random.Generator | None,
                 **params: object) -> Leveler:
    """Build scheme ``name`` over ``n_logical`` lines.

    ``bit_rotation`` also takes ``inner`` (a scheme name) and
    ``inner_params`` (a dict) for the line remapper underneath it.
    Unknown parameters raise :class:`ConfigError`.
    """
    cls = _lookup(name)
    params = dict(params)
    if cls is BitRotation and "inner" in params:
        inner_name = params.pop("inner")
        inner_params = params.pop("inner_params", None) or {}
        if not isinstance(inner_name, str) or inner_name == BitRotation.name:
            raise ConfigError("leveling.inner", repr(inner_name),
                              "a line remapping scheme name")
        if not isinstance(inner_params, dict):
            raise ConfigError("leveling.inner_params", repr(inner_params),
                              "a table of parameters")
        params["inner"] = make_leveler(inner_name, n_logical, rng, **inner_params)
    allowed = leveler_params(name)
    for key in params:
        if key not in allowed:
            raise ConfigError(f"leveling.{key}", repr(key),
                              ", ".join(sorted(allowed)) or "no parameters")
    return cls(n_logical, rng, **params)
