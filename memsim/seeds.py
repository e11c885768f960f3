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


__all__ = ["STREAMS", "stream", "stream_key", "stream_seed"]
