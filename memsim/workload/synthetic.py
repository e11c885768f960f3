"""Synthetic request streams: address patterns, read/write mix, arrivals.

A source yields :class:`~memsim.workload.chunk.Chunk` objects.  A request of
``size_lines`` lines becomes that many consecutive line requests with the
same arrival time.  Each pattern exposes its expected values (arrival rate,
read share) so tests can compare sampled moments with them.
"""
from __future__ import annotations

from collections.abc import Callable, Iterator
from math import gcd

import numpy as np

from memsim.errors import ConfigError
from memsim.workload import attacks
from memsim.workload.chunk import HINT, READ, WRITE, Chunk, rechunk

AddressFn = Callable[[np.random.Generator, int, int], np.ndarray]

#: Lines drawn at a time: the generator's own block, not the engine's chunk,
#: so the stream does not depend on ``run.chunk_requests``.
DRAW_BLOCK_LINES = 65536


class AddressPattern:
    """Stateful address generator over ``footprint`` lines.

    The attack patterns (``repeated_address``, ``birthday_attack``,
    ``hot_set``) come from :mod:`memsim.workload.attacks`; ``hot_set`` sends
    ``hot_share`` of the accesses to ``hot_lines`` fixed lines.
    """

    def __init__(self, kind: str, footprint: int, rng: np.random.Generator, *,
                 zipf_exponent: float = 1.0, hot_fraction: float = 0.1,
                 hot_share: float = 0.9, stride_lines: int = 1, attack_line: int = 0,
                 burst: int = 1000, hot_lines: int = 16, hot_layout: str = "scattered") -> None:
        if hot_layout not in ("scattered", "contiguous"):
            raise ConfigError("workload.hot_layout", repr(hot_layout), "scattered, contiguous")
        self.kind = kind
        self.footprint = footprint
        self.pos = 0
        self.stride = stride_lines
        self.hot_share = hot_share
        if kind == "zipf":
            ranks = np.arange(1, footprint + 1, dtype=np.float64)
            w = ranks ** -zipf_exponent
            self.cdf = np.cumsum(w / w.sum())
            # Hot ranks are scattered over the footprint, not packed in one
            # bank (common practice for Zipf address streams); contiguous:
            # rank k on line k, the hottest lines adjacent.
            self.rank_to_line = (rng.permutation(footprint) if hot_layout == "scattered"
                                 else np.arange(footprint))
        elif kind == "hotspot":
            self.n_hot = max(1, int(round(hot_fraction * footprint)))
            self.hot_lines = rng.permutation(footprint)
            if hot_layout == "contiguous":
                # One run of adjacent lines (what plain Start-Gap cannot
                # move across quickly), at a random place.
                lo = int(rng.integers(0, footprint - self.n_hot + 1))
                run = np.arange(lo, lo + self.n_hot)
                rest = self.hot_lines[(self.hot_lines < lo) | (self.hot_lines >= lo + self.n_hot)]
                self.hot_lines = np.concatenate([run, rest])
        elif kind == "repeated_address":
            if not 0 <= attack_line < footprint:
                raise ConfigError("workload.attack_line", repr(attack_line),
                                  f"a line index in [0, {footprint - 1}] (the footprint)")
            self.attack_line = attack_line
        elif kind == "birthday_attack":
            self.burst = burst
            self.done = 0          # writes issued so far (bursts continue across draws)
            self.last = -1         # line of the burst left open by the previous draw
        elif kind == "hot_set":
            if hot_lines > footprint:
                raise ConfigError("workload.hot_lines", repr(hot_lines),
                                  f"at most the footprint, {footprint} lines")
            self.n_hot = hot_lines
        elif kind not in ("uniform", "sequential", "strided"):
            raise ValueError(f"unknown address pattern {kind}")

    def draw(self, rng: np.random.Generator, n: int) -> np.ndarray:
        f = self.footprint
        if self.kind == "uniform":
            return rng.integers(0, f, size=n, dtype=np.int64)
        if self.kind == "zipf":
            r = np.searchsorted(self.cdf, rng.random(n), side="right")
            return self.rank_to_line[np.minimum(r, f - 1)].astype(np.int64)
        if self.kind == "hotspot":
            hot = rng.random(n) < self.hot_share
            idx = np.where(hot, rng.integers(0, self.n_hot, size=n),
                           rng.integers(self.n_hot, max(self.n_hot + 1, f), size=n))
            return self.hot_lines[np.minimum(idx, f - 1)].astype(np.int64)
        if self.kind in attacks.ATTACKS:
            return self._attack(rng, n)
        step = 1 if self.kind == "sequential" else self.stride
        out = (self.pos + step * np.arange(n, dtype=np.int64)) % f
        self.pos = int((self.pos + step * n) % f)
        return out

    def expected_shares(self) -> np.ndarray | None:
        """Long-run share of accesses of every footprint line (sums to 1).

        None for the attack patterns (their lines are drawn as they go).
        """
        f = self.footprint
        if self.kind in ("uniform", "sequential"):
            return np.full(f, 1.0 / f)
        if self.kind == "zipf":
            out = np.zeros(f)
            out[self.rank_to_line] = np.diff(self.cdf, prepend=0.0)
            return out / out.sum()
        if self.kind == "hotspot":
            out = np.zeros(f)
            cold = self.hot_lines[self.n_hot:]
            out[self.hot_lines[:self.n_hot]] = self.hot_share / self.n_hot
            if cold.size:
                out[cold] = (1.0 - self.hot_share) / cold.size
            else:
                out[self.hot_lines[f - 1]] += 1.0 - self.hot_share
            return out
        if self.kind == "strided":
            g = gcd(self.stride, f)
            out = np.zeros(f)
            out[::g] = g / f
            return out
        return None

    def _attack(self, rng: np.random.Generator, n: int) -> np.ndarray:
        f = self.footprint
        if self.kind == "repeated_address":
            return attacks.repeated_address(rng, n, f, line=self.attack_line)
        if self.kind == "hot_set":
            return attacks.hot_set(rng, n, f, hot_lines=self.n_hot, hot_fraction=self.hot_share)
        # Finish the burst the previous draw left open before drawing fresh lines.
        head = np.full(min(n, (self.burst - self.done % self.burst) % self.burst), self.last,
                       dtype=np.int64)
        out = np.concatenate([head, attacks.birthday_attack(rng, n - head.size, f, burst=self.burst)])
        self.done += n
        if out.size:
            self.last = int(out[-1])
        return out


class Arrivals:
    """Arrival times, ns.  ``closed`` arrivals are decided by the engine."""

    def __init__(self, kind: str, interval_ns: float, on_ns: float = 0.0, off_ns: float = 0.0) -> None:
        self.kind = kind
        self.interval = interval_ns
        self.on_ns, self.off_ns = on_ns, off_ns
        self.t = 0.0            # last arrival (wall time)
        self.active = 0.0       # onoff: time spent in on periods so far
        self.on_end = None      # onoff: active time at which the current burst ends

    def expected_rate_per_ns(self) -> float:
        if self.kind == "onoff":
            return self.on_ns / (self.on_ns + self.off_ns) / self.interval
        return 1.0 / self.interval

    def draw(self, rng: np.random.Generator, n: int) -> np.ndarray:
        if self.kind == "closed":
            return np.zeros(n)
        if self.kind == "fixed":
            out = self.t + self.interval * np.arange(1, n + 1)
        elif self.kind == "poisson":
            out = self.t + np.cumsum(rng.exponential(self.interval, n))
        else:
            out = self._onoff(rng, n)
        self.t = float(out[-1])
        return out

    def _onoff(self, rng: np.random.Generator, n: int) -> np.ndarray:
        # Poisson arrivals in "active" time, mapped to wall time by inserting
        # exponential off gaps at exponential burst boundaries.
        active = self.active + np.cumsum(rng.exponential(self.interval, n))
        out = np.empty(n)
        shift = self.t - self.active if self.on_end is not None else 0.0
        if self.on_end is None:
            self.on_end = rng.exponential(self.on_ns)
        i = 0
        while i < n:
            j = int(np.searchsorted(active, self.on_end, side="right"))
            out[i:j] = active[i:j] + shift
            i = max(i, j)
            if i < n:
                shift += rng.exponential(self.off_ns)
                self.on_end += rng.exponential(self.on_ns)
        self.active = float(active[-1])
        return out


class SyntheticSource:
    """Chunks of requests from a workload config section."""

    def __init__(self, wl, footprint: int, rng: np.random.Generator, chunk_requests: int = 65536,
                 address: AddressPattern | None = None) -> None:
        self.wl = wl
        self.rng = rng
        self.chunk = chunk_requests
        self.address = address or AddressPattern(
            wl.pattern, footprint, rng, zipf_exponent=wl.zipf_exponent,
            hot_fraction=wl.hot_fraction, hot_share=wl.hot_share, stride_lines=wl.stride_lines,
            attack_line=wl.attack_line, burst=wl.burst, hot_lines=wl.hot_lines,
            hot_layout=wl.hot_layout)
        self.arrivals = Arrivals(wl.arrival, wl.interval_ns, wl.on_ns, wl.off_ns)
        self.footprint = footprint

    def expected_read_fraction(self) -> float:
        return self.wl.read_fraction

    def expected_write_shares(self) -> np.ndarray | None:
        """Long-run share of writes of every footprint line (None for attacks).

        Reads and writes are drawn from the same addresses; a request of
        ``size_lines`` lines also writes the lines after its first.
        """
        s = self.address.expected_shares()
        if s is None:
            return None
        k = self.wl.size_lines
        return sum(np.roll(s, j) for j in range(k)) / k if k > 1 else s

    def __iter__(self) -> Iterator[Chunk]:
        lead = getattr(self.wl, "hint_lead_ns", 0.0)
        if lead > 0:
            yield from _with_hints(self._requests(), lead)
        else:
            yield from self._requests()

    def _requests(self) -> Iterator[Chunk]:
        # Draws are made in blocks of DRAW_BLOCK_LINES lines whatever the chunk
        # size, so the stream (and every result) does not depend on
        # ``run.chunk_requests``; the blocks are then cut into chunks.
        return rechunk(self._blocks(), self.chunk)

    def _blocks(self) -> Iterator[Chunk]:
        k = self.wl.size_lines
        left = self.wl.requests
        while left > 0:
            n_req = min(-(-DRAW_BLOCK_LINES // k), -(-left // k))
            t = self.arrivals.draw(self.rng, n_req)
            ops = np.where(self.rng.random(n_req) < self.wl.read_fraction, READ, WRITE)
            base = self.address.draw(self.rng, n_req)
            if k > 1:
                t = np.repeat(t, k)
                ops = np.repeat(ops, k)
                base = (np.repeat(base, k) + np.tile(np.arange(k), n_req)) % self.footprint
            m = min(left, t.size)
            left -= m
            yield Chunk(t[:m], ops[:m], base[:m])


def _with_hints(chunks: Iterator[Chunk], lead: float) -> Iterator[Chunk]:
    """Precede every write by a hint for its line ``lead`` ns earlier.

    Requests are held back until no later write's hint can still precede
    them, so the stream stays in time order across chunks.
    """
    held = Chunk(np.empty(0), np.empty(0, np.int8), np.empty(0, np.int64))
    for c in chunks:
        w = c.op == WRITE
        t_h = c.time_ns[w] - lead
        ok = t_h >= 0                     # writes too early to be announced get no hint
        hints = Chunk(t_h[ok], np.full(int(ok.sum()), HINT, np.int8), c.line[w][ok])
        merged = Chunk.concat([held, hints, c])
        order = np.argsort(merged.time_ns, kind="stable")
        merged = merged.take(order)
        cut = int(np.searchsorted(merged.time_ns, c.time_ns[-1] - lead, side="right"))
        if cut:
            yield merged.take(slice(0, cut))
        held = merged.take(slice(cut, None))
    if len(held):
        yield held
