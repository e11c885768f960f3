"""Named random streams, each derived from a run's ``run.seed``.

Every random draw of the model comes from a generator made here: the stream
``name`` of seed ``s`` is ``SeedSequence(s, spawn_key=(key(name), *index))``,
with ``key(name)`` the first 8 bytes of the name's SHA-256.  The key is a
pure function of the name (not Python's ``hash()``, which changes between
processes), so a stream is the same on every run, process and Python
version, and adding a stream never shifts the draws of another.

Streams are independent by construction (NumPy's SeedSequence mixes the
spawn key into the state), so e.g. a trace made from the request stream
and replayed leaves the write path's draws exactly as they were.

Names are registered in :data:`STREAMS`; an unknown name is a bug and
raises ``ValueError``.

Draws that belong to one event (the program-and-verify attempts of the cells
of one write) come from :func:`keyed_uniforms`: a counter-based uniform of
(salt, event key, index), so they do not depend on the order in which
batches of events happen to be processed (the chunk size, or refreshes
interleaved with writes).
"""
from __future__ import annotations

import hashlib

import numpy as np

# name -> what draws from it
STREAMS: dict[str, str] = {
    "requests": "addresses, operations and arrival times of the synthetic workload",
    "write_content": "content of user writes whose data model does not depend on the old content",
    "array_content": "initial content of the array, and flip-model write content",
    "leveler": "keys of randomized wear levelers",
    "mlc_program": "program-and-verify attempts of multi-level cells",
    "refresh": "refresh start offsets and the scrub's error draws",
    "refresh_demand": "the pre-run estimate of how long a refresh holds a bank",
    "endurance": "cell endurance and line death draws of the lifetime estimate",
    "profile": "the lifetime's short write-scheme pass that measures cells per write",
    "replicas": "seeds of the replications of a sweep or compare",
    "hot_layout": "where a hot region of fixed size sits on the device (workload.sizing device_lines)",
}


def stream_key(name: str) -> int:
    """Spawn key of stream ``name``: 64 bits of its SHA-256, stable everywhere."""
    if name not in STREAMS:
        raise ValueError(f"unknown random stream {name!r}; registered: {', '.join(STREAMS)}")
    return int.from_bytes(hashlib.sha256(name.encode()).digest()[:8], "little")


def stream_seed(seed: int, name: str, *index: int) -> np.random.SeedSequence:
    """SeedSequence of stream ``name`` (and sub-stream ``index``, e.g. a replication) of ``seed``."""
    return np.random.SeedSequence(int(seed), spawn_key=(stream_key(name), *map(int, index)))


def stream(seed: int, name: str, *index: int) -> np.random.Generator:
    """A fresh, owned Generator of stream ``name`` of ``seed`` (see :func:`stream_seed`)."""
    return np.random.default_rng(stream_seed(seed, name, *index))


_GOLDEN = np.uint64(0x9E3779B97F4A7C15)
_MIX1 = np.uint64(0xBF58476D1CE4E5B9)
_MIX2 = np.uint64(0x94D049BB133111EB)


def _mix64(z: np.ndarray) -> np.ndarray:
    # The splitmix64 finalizer (Steele, Lea and Flood, OOPSLA 2014): a
    # bijection on 64 bits whose output bits pass BigCrush when fed a counter.
    z = (z ^ (z >> np.uint64(30))) * _MIX1
    z = (z ^ (z >> np.uint64(27))) * _MIX2
    return z ^ (z >> np.uint64(31))


def keyed_uniforms(salt: int, keys: np.ndarray, index: np.ndarray) -> np.ndarray:
    """Uniforms in (0, 1), one per element of ``keys`` and ``index`` (broadcast).

    A pure function of (salt, key, index): the draw of cell ``index`` of
    event ``key`` is the same whenever and in whatever batch it is made.
    """
    with np.errstate(over="ignore"):
        k = np.asarray(keys).astype(np.uint64, copy=False)
        i = np.asarray(index).astype(np.uint64, copy=False)
        z = _mix64(np.uint64(salt & 0xFFFFFFFFFFFFFFFF) + k * _GOLDEN)
        z = _mix64(z + (i + np.uint64(1)) * _GOLDEN)
    return ((z >> np.uint64(11)).astype(np.float64) + 0.5) * 2.0 ** -53


__all__ = ["STREAMS", "keyed_uniforms", "stream", "stream_key", "stream_seed"]
