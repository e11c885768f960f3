"""Write schemes, found by name.  Add one: a module with a WriteScheme
subclass, then one line in ``SCHEMES``."""
from __future__ import annotations

from memsim.policy.write.base import Encoded, WriteScheme
from memsim.policy.write.block_erase import BlockErase
from memsim.policy.write.data_comparison import DataComparison
from memsim.policy.write.flip_n_write import FlipNWrite
from memsim.policy.write.full_line import FullLine

SCHEMES: dict[str, type[WriteScheme]] = {
    cls.name: cls for cls in (FullLine, DataComparison, FlipNWrite, BlockErase)
}


def scheme_names() -> list[str]:
    return list(SCHEMES)


def make_scheme(name: str, line_bytes: int, word_bits: int = 32) -> WriteScheme:
    return SCHEMES[name](line_bytes, word_bits)


__all__ = ["SCHEMES", "Encoded", "WriteScheme", "make_scheme", "scheme_names"]
