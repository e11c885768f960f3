"""Write schemes, found by name in :data:`SCHEMES`.

Add one: a module with a :class:`WriteScheme` subclass (its ``name`` and a
docstring whose first sentence says what it does), then one line below.
``memsim list``, config validation and the description of ``write.scheme``
come from the registry.
"""
from __future__ import annotations

from memsim.policy.write.base import Encoded, WriteScheme
from memsim.policy.write.block_erase import BlockErase
from memsim.policy.write.data_comparison import DataComparison
from memsim.policy.write.flip_n_write import FlipNWrite
from memsim.policy.write.full_line import FullLine
from memsim.registry import Registry

SCHEMES: Registry[type[WriteScheme]] = Registry("write scheme", "write.scheme")
for _cls in (FullLine, DataComparison, FlipNWrite, BlockErase):
    SCHEMES.add(_cls)


def scheme_names() -> list[str]:
    """Registered write scheme names, in registration order."""
    return SCHEMES.names()


def make_scheme(name: str, line_bytes: int, word_bits: int = 32) -> WriteScheme:
    """Build write scheme ``name`` for lines of ``line_bytes`` (ConfigError naming write.scheme if unknown)."""
    return SCHEMES.get_part(name)(line_bytes, word_bits)


__all__ = ["SCHEMES", "Encoded", "WriteScheme", "make_scheme", "scheme_names"]
