"""Units used throughout memsim and small conversion helpers.

Time is in nanoseconds, energy in picojoules, current in microamperes, sizes
in bytes and addresses are line indices.  Metric names carry their unit
(``read_latency_p99_ns``, ``energy_per_bit_pj``).
"""
from __future__ import annotations

NS_PER_S = 1e9
S_PER_YEAR = 365.25 * 24 * 3600.0
PJ_PER_J = 1e12
BITS_PER_BYTE = 8
GIB = 1024**3


def gbps(bytes_moved: float, ns: float) -> float:
    """Throughput in GB/s (1e9 bytes per second) for ``bytes_moved`` over ``ns``."""
    return bytes_moved / ns if ns > 0 else 0.0


def ns_to_years(ns: float) -> float:
    return ns / NS_PER_S / S_PER_YEAR


def years_to_ns(years: float) -> float:
    return years * S_PER_YEAR * NS_PER_S


# Unit suffixes of metric names and how a reader sees them.
NAME_UNITS = {"ns": "ns", "pj": "pJ", "gbps": "GB/s", "years": "years", "per_s": "1/s", "per_ns": "1/ns",
              "s": "s", "ua": "uA", "bytes": "bytes", "writes": "writes", "lines": "lines"}


def split_unit(name: str) -> tuple[str, str | None]:
    """``read_latency_p99_ns`` -> (``read_latency_p99``, ``ns``); no unit -> (name, None)."""
    for suffix in sorted(NAME_UNITS, key=len, reverse=True):
        if name.endswith("_" + suffix):
            return name[: -len(suffix) - 1], NAME_UNITS[suffix]
    return name, None
