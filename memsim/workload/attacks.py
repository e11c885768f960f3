"""Malicious and adversarial write-address streams for wear studies.

Each generator has the signature ``f(rng, n, footprint, **params)`` and
returns ``n`` logical line indices (int64) in ``[0, footprint)``.  They model
streams that try to wear out one line as fast as possible.

References
----------
M. K. Qureshi et al., "Enhancing lifetime and security of PCM-based main
memory with Start-Gap wear leveling", MICRO 2009 (repeated address attack).
N. H. Seong, D. H. Woo and H.-H. S. Lee, "Security Refresh", ISCA 2010
(birthday paradox attack: random addresses, each written many times).
"""
from __future__ import annotations

from collections.abc import Callable, Iterator

import numpy as np

from memsim.errors import ConfigError, require_int


def _check(key: str, value: object, lo: int, hi: int | None = None) -> int:
    return require_int(f"workload.{key}", value, lo, hi)


def repeated_address(rng: np.random.Generator, n: int, footprint: int, *,
                     line: int = 0) -> np.ndarray:
    """Every write goes to one logical line, ``line``."""
    _check("footprint", footprint, 1)
    line = _check("line", line, 0, footprint - 1)
    return np.full(_check("n", n, 0), line, dtype=np.int64)


def birthday_attack(rng: np.random.Generator, n: int, footprint: int, *,
                    burst: int = 1000, phase: int = 0) -> np.ndarray:
    """Random lines, each hammered by ``burst`` consecutive writes in turn.

    ``phase`` is how many writes of the current burst were already issued
    (lets a caller continue a burst across calls).
    """
    _check("footprint", footprint, 1)
    n = _check("n", n, 0)
    burst = _check("burst", burst, 1)
    phase = _check("phase", phase, 0, burst - 1)
    bursts = -(-(n + phase) // burst)
    lines = rng.integers(0, footprint, size=bursts, dtype=np.int64)
    return np.repeat(lines, burst)[phase:phase + n]


def hot_set(rng: np.random.Generator, n: int, footprint: int, *,
            hot_lines: int = 8, hot_fraction: float = 0.9, hot_base: int = 0,
            hot_stride: int = 1) -> np.ndarray:
    """A fixed small hot set takes ``hot_fraction`` of writes; the rest are uniform.

    The hot lines are ``hot_base + i * hot_stride`` (mod ``footprint``),
    ``i < hot_lines``, the same on every call.
    """
    _check("footprint", footprint, 1)
    n = _check("n", n, 0)
    hot_lines = _check("hot_lines", hot_lines, 1, footprint)
    if not 0 <= hot_fraction <= 1:
        raise ConfigError("workload.hot_fraction", repr(hot_fraction), "a number in [0, 1]")
    hot = (_check("hot_base", hot_base, 0)
           + np.arange(hot_lines, dtype=np.int64) * _check("hot_stride", hot_stride, 1)
           ) % footprint
    out = rng.integers(0, footprint, size=n, dtype=np.int64)
    is_hot = rng.random(n) < hot_fraction
    out[is_hot] = hot[rng.integers(0, hot_lines, size=int(is_hot.sum()))]
    return out


ATTACKS: dict[str, Callable[..., np.ndarray]] = {
    "repeated_address": repeated_address,
    "birthday_attack": birthday_attack,
    "hot_set": hot_set,
}


def attack_stream(name: str, rng: np.random.Generator, total: int, footprint: int, *,
                  chunk: int = 1 << 20, **params: object) -> Iterator[np.ndarray]:
    """Chunks of an attack stream, ``total`` writes in all.

    Bursts of :func:`birthday_attack` continue across chunk boundaries.
    """
    if name not in ATTACKS:
        raise ConfigError("workload.attack", repr(name), ", ".join(sorted(ATTACKS)))
    f = ATTACKS[name]
    chunk = _check("chunk", chunk, 1)
    done, last = 0, -1
    while done < total:
        m = min(chunk, total - done)
        if name == "birthday_attack":
            burst = int(params.get("burst", 1000))
            extra = {k: v for k, v in params.items() if k != "phase"}
            # Finish the burst the previous chunk left open before drawing
            # fresh lines.
            head = np.full(min(m, (burst - done % burst) % burst), last, dtype=np.int64)
            rest = f(rng, m - head.size, footprint, **extra)
            out = np.concatenate([head, rest])
            last = int(out[-1])
        else:
            out = f(rng, m, footprint, **params)
        done += m
        yield out
