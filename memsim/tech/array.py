"""Array organization: channels x banks x lines, and the address map.

Lines are interleaved across channels, then banks (line ``i`` goes to channel
``i % C``, bank ``(i // C) % B``).  With ``bank_hash`` the low row bits are
XORed into the bank index, which spreads strided streams over banks (common
practice; e.g. permutation-based interleaving, Zhang, Zhu and Zhang, MICRO
2000).  A row holds ``row_lines`` consecutive lines of one bank.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class AddressMap:
    channels: int
    banks: int
    row_lines: int = 0
    bank_hash: bool = False

    @property
    def total_banks(self) -> int:
        return self.channels * self.banks

    def locate(self, phys: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(channel, global bank index, row id) of physical lines (vectorized)."""
        phys = np.asarray(phys, dtype=np.int64)
        channel = phys % self.channels
        rest = phys // self.channels
        bank = rest % self.banks
        in_bank = rest // self.banks          # line index inside its bank
        if self.bank_hash:
            b = self.banks
            # XOR keeps the map a bijection for power-of-two bank counts;
            # a rotation does the same job otherwise.
            bank = bank ^ (in_bank & (b - 1)) if b & (b - 1) == 0 else (bank + in_bank) % b
        row = in_bank // self.row_lines if self.row_lines else np.full_like(phys, -1)
        return channel, channel * self.banks + bank, row
