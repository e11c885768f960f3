"""Array organization: channels x banks x lines, and the address map.

Two interleaving orders (``array.mapping``):

``line``
    Consecutive lines go to different channels, then banks: line ``i`` goes
    to channel ``i % C``, bank ``(i // C) % B``.  A sequential stream spreads
    over every bank at once, but consecutive lines of a bank are ``C * B``
    apart, so they meet in one row only if a row holds that many lines.
``row``
    A whole row of ``row_lines`` consecutive lines stays in one bank; rows
    are interleaved across channels, then banks (block ``i // row_lines``
    goes where ``line`` would send line ``i``).  A sequential stream then
    reads a row's lines one after the other and hits the open row (common
    practice: the "row interleaving" / "cache-line interleaving" choice of
    DRAM controllers, e.g. Jacob, Ng and Wang, "Memory Systems: Cache, DRAM,
    Disk", Morgan Kaufmann 2008, ch. 13).

With ``bank_hash`` the low bits of the line's position inside its bank
(``line`` order) or of its row (``row`` order) are XORed into the bank
index, which spreads strided streams over banks (permutation-based
interleaving, Zhang, Zhu and Zhang, MICRO 2000).  A row holds ``row_lines``
consecutive lines of one bank (by position inside the bank).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

MAPPINGS = ("line", "row")


@dataclass(frozen=True)
class AddressMap:
    channels: int
    banks: int
    row_lines: int = 0
    bank_hash: bool = False
    mapping: str = "line"

    def __post_init__(self) -> None:
        if self.mapping not in MAPPINGS:
            raise ValueError(f"unknown mapping {self.mapping!r}")
        if self.mapping == "row" and self.row_lines < 1:
            raise ValueError("row mapping needs row_lines >= 1")

    @classmethod
    def from_config(cls, a) -> AddressMap:
        """The map of an ``[array]`` config section."""
        return cls(a.channels, a.banks, a.row_lines, a.bank_hash, getattr(a, "mapping", "line"))

    @property
    def total_banks(self) -> int:
        return self.channels * self.banks

    def _hash(self, bank: np.ndarray, key: np.ndarray) -> np.ndarray:
        b = self.banks
        # XOR keeps the map a bijection for power-of-two bank counts;
        # a rotation does the same job otherwise.
        return bank ^ (key & (b - 1)) if b & (b - 1) == 0 else (bank + key) % b

    def locate(self, phys: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(channel, global bank index, row id) of physical lines (vectorized)."""
        phys = np.asarray(phys, dtype=np.int64)
        if self.mapping == "row":
            r = self.row_lines
            block = phys // r
            channel = block % self.channels
            rest = block // self.channels
            bank = rest % self.banks
            row = rest // self.banks            # row index inside its bank
            if self.bank_hash:
                bank = self._hash(bank, row)
            return channel, channel * self.banks + bank, row
        channel = _mod(phys, self.channels)
        rest = _div(phys, self.channels)
        bank = _mod(rest, self.banks)
        in_bank = _div(rest, self.banks)          # line index inside its bank
        if self.bank_hash:
            bank = self._hash(bank, in_bank)
        row = _div(in_bank, self.row_lines) if self.row_lines else np.full_like(phys, -1)
        return channel, channel * self.banks + bank, row

    def address(self, phys: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """(channel, global bank, row, column) of physical lines: the full device address.

        The column is the line's place inside its row (its position inside the
        bank when there is no row buffer), so the four together name one line.
        """
        phys = np.asarray(phys, dtype=np.int64)
        channel, bank, row = self.locate(phys)
        if self.mapping == "row":
            col = phys % self.row_lines
        else:
            in_bank = phys // self.channels // self.banks
            col = in_bank % self.row_lines if self.row_lines else in_bank
        return channel, bank, row, col


# Floor division and modulo by a power of two are a shift and a mask (the
# same values as // and % for every int64, negative ones included) and cost
# far less than an integer division per element.
def _div(x: np.ndarray, d: int) -> np.ndarray:
    d = int(d)
    return x >> (d.bit_length() - 1) if d > 0 and d & (d - 1) == 0 else x // d


def _mod(x: np.ndarray, d: int) -> np.ndarray:
    d = int(d)
    return x & (d - 1) if d > 0 and d & (d - 1) == 0 else x % d
