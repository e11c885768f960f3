"""Energy beyond the cells: background power, peripheral circuits, bus and I/O,
row-buffer hits, and the DRAM cache in front (``[energy]``, ``[cache]``).

Every part is a count the run made times a price from the config, so the
parts add up to ``energy_pj`` by construction.  With the ``[energy]`` terms
at their defaults (zero, and row hits charged as full array reads) and no
cache, the total is the cells' energy alone, as before these terms existed.
"""
from __future__ import annotations

from typing import Any

# Summary keys whose sum is energy_pj (energy_erase_pj comes with block erase).
ENERGY_PARTS = ("energy_read_pj", "energy_set_pj", "energy_reset_pj", "energy_mlc_program_pj",
                "energy_cancelled_pj", "energy_preset_pj", "energy_refresh_pj", "energy_erase_pj",
                "energy_row_hit_pj", "energy_background_pj", "energy_peripheral_pj", "energy_io_pj",
                "energy_cache_pj")


def periphery_energy(cfg, *, read_pj: float, read_bits: int, row_hits: int, user_reads: int,
                     user_writes: int, moves: int, refreshes: int, span_ns: float) -> dict[str, Any]:
    """Energy keys beyond the cells, and the array-read energy with row hits taken out.

    Parameters
    ----------
    read_pj, read_bits:
        The cells' read energy and the bits it counts (every read a full array read).
    row_hits:
        User reads served from the open row.
    user_reads, user_writes:
        Line transfers over the data bus (the PCM side).
    moves, refreshes:
        Array accesses that stay inside a bank (leveler moves, refreshes).
    span_ns:
        Time the memory was powered: the run's simulated time.
    """
    e = cfg.energy
    line_bits = cfg.array.line_bytes * 8
    hit_bits = row_hits * line_bits
    out = {"row_hits": row_hits,
           "row_hit_rate": row_hits / user_reads if user_reads and cfg.array.row_lines else None}
    if e.row_hit_pj_per_bit is None or read_bits == 0:
        out["energy_read_pj"] = read_pj
        out["energy_row_hit_pj"] = 0.0
    else:
        # The hits' bits leave the array-read count and are priced as row reads.
        out["energy_read_pj"] = read_pj * (read_bits - hit_bits) / read_bits
        out["energy_row_hit_pj"] = hit_bits * e.row_hit_pj_per_bit
    banks = cfg.array.channels * cfg.array.banks
    # mW x ns = 1e-3 J/s x 1e-9 s = 1 pJ.
    out["energy_background_pj"] = e.background_mw_per_bank * banks * span_ns
    out["energy_peripheral_pj"] = e.peripheral_pj_per_access * (user_reads + user_writes + moves + refreshes)
    out["energy_io_pj"] = e.io_pj_per_bit * (user_reads + user_writes) * line_bits
    return out
