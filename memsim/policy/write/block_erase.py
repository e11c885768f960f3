"""Block erase-ahead: writes go out of place into pre-initialized lines.

As a write scheme it decides only the fallback: a line written in place (no
initialized line free) is programmed like a data-comparison write.  The
placement itself (logical -> physical map, erase blocks, cleaning) is
:class:`memsim.policy.erase.BlockPool`, run by the timing engine.

References
----------
Qureshi, Franceschini, Jagmohan and Lastras, "PreSET: improving performance
of phase change memories by exploiting asymmetry in write times", ISCA 2012
(lines brought to the slow state ahead of the write).
"""
from __future__ import annotations

from memsim.policy.write.data_comparison import DataComparison


class BlockErase(DataComparison):
    name = "block_erase"
    pre_read = True
    out_of_place = True
