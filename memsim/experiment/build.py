"""Build the parts of a run from its config: leveler, write path, request source."""
from __future__ import annotations

from collections.abc import Iterable, Iterator

import numpy as np

from memsim.config import RunConfig
from memsim.engine.dram_cache import DramCache
from memsim.errors import ConfigError, TraceError
from memsim.experiment.names import check_registered
from memsim.policy.leveling import Leveler, leveler_names, leveler_params, make_leveler
from memsim.policy.write import SCHEMES, make_scheme
from memsim.policy.writepath import WritePath
from memsim.seeds import stream
from memsim.tech.mlc_write import MlcProgrammer
from memsim.tech.models import mlc_cell
from memsim.tech.technology import uses_verify
from memsim.workload.chunk import HINT, WRITE, Chunk, rechunk
from memsim.workload.content import DataModel
from memsim.workload.device_traffic import folded_address
from memsim.workload.mix import StreamMerge
from memsim.workload.synthetic import SyntheticSource
from memsim.workload.trace import TraceReader, read_trace


def leveler_kwargs(cfg: RunConfig, name: str | None = None) -> dict:
    """Config fields of ``[leveling]`` that scheme ``name`` takes."""
    lv = cfg.leveling
    if name is None and lv.scheme == "bit_rotation" and lv.inner != "none" and lv.inner not in leveler_names():
        raise ConfigError("leveling.inner", repr(lv.inner), "none or one of " + ", ".join(
            n for n in leveler_names() if n not in ("bit_rotation", "none")))
    name = name or lv.scheme
    accepted = leveler_params(name)
    kw: dict = {}
    for key in accepted:
        if key == "line_bits":
            kw[key] = cfg.array.line_bytes * 8
        elif key == "region_lines":
            if lv.region_lines:
                kw[key] = lv.region_lines
        elif key == "inner":
            if lv.inner != "none":
                kw[key] = lv.inner
        elif hasattr(lv, key):
            kw[key] = getattr(lv, key)
    if name == "bit_rotation" and lv.inner != "none":
        kw["inner_params"] = leveler_kwargs(cfg, lv.inner)
    return kw


def build_leveler(cfg: RunConfig, rng: np.random.Generator) -> Leveler:
    return make_leveler(cfg.leveling.scheme, cfg.footprint, rng, **leveler_kwargs(cfg))


def check_names(cfg: RunConfig, where_prefix: str = "") -> None:
    """Raise ConfigError unless every part the config names is registered and the parts go together."""
    check_registered(cfg, where_prefix)
    if SCHEMES[cfg.write.scheme].out_of_place and cfg.leveling.scheme != "none":
        raise ConfigError("leveling.scheme", repr(cfg.leveling.scheme),
                          "none with write.scheme block_erase (its block pool remaps lines itself)")
    if cfg.controller.hint_preset:
        for key, bad, allowed in (
                ("write.scheme", SCHEMES[cfg.write.scheme].out_of_place, "an in-place scheme"),
                ("cell.bits_per_cell", cfg.cell.bits_per_cell > 1, "1 (pre-programming models SLC)"),
                ("cell.tri_level", cfg.cell.tri_level, "false (pre-programming models SLC)"),
                ("leveling.scheme", cfg.leveling.scheme != "none",
                 "none (leveler moves would undo a pre-programmed line)")):
            if bad:
                value = {"write.scheme": cfg.write.scheme, "cell.bits_per_cell": cfg.cell.bits_per_cell,
                         "cell.tri_level": cfg.cell.tri_level,
                         "leveling.scheme": cfg.leveling.scheme}[key]
                raise ConfigError(key, repr(value), f"{allowed} with controller.hint_preset")
    if cfg.cell.technology != "pcm":
        for key, bad, value in (("write.scheme", SCHEMES[cfg.write.scheme].out_of_place, cfg.write.scheme),
                                ("controller.hint_preset", cfg.controller.hint_preset, True)):
            if bad:
                raise ConfigError(key, repr(value), f"a PCM-only feature; not with cell.technology "
                                                    f"{cfg.cell.technology}")
    if SCHEMES[cfg.write.scheme].out_of_place and (cfg.cell.bits_per_cell > 1 or cfg.cell.tri_level):
        raise ConfigError("write.scheme", repr(cfg.write.scheme),
                          "a per-cell scheme with multi-level cells (block_erase models SLC)")


def build_path(cfg: RunConfig, rng: np.random.Generator | None = None) -> WritePath:
    """The run's write path: leveler, write scheme, data model and (multi-level cells) programmer.

    Parameters
    ----------
    cfg:
        The run config.
    rng:
        None (what runs use): each part draws from its own named stream of
        ``run.seed`` (:mod:`memsim.seeds`: ``leveler``, ``array_content``,
        ``mlc_program``), so a part's draws do not depend on which other
        parts are on.  A Generator: every part draws from it (a part built
        by hand, e.g. the lifetime's profile pass).
    """
    def rng_of(name: str) -> np.random.Generator:
        return rng if rng is not None else stream(cfg.run.seed, name)

    # Spare lines a leveler needs (e.g. the gap line) are physical lines
    # beyond the footprint; the address map places them like any other.
    leveler = build_leveler(cfg, rng_of("leveler"))
    scheme = make_scheme(cfg.write.scheme, cfg.array.line_bytes, cfg.write.word_bits)
    w = cfg.workload
    data = DataModel(w.data, cfg.array.line_bytes, w.flip_fraction, w.one_fraction)
    mlc = None
    if uses_verify(cfg):
        mlc = MlcProgrammer(mlc_cell(cfg), cfg.array.bank_budget_ua, cfg.cell.reset_ua, rng_of("mlc_program"))
    return WritePath(leveler, scheme, data, rng_of("array_content"), mlc=mlc)


# ---------------------------------------------------------------- request source

# The source draws from its own named streams, never from the write path's:
# a trace written from the source and replayed then leaves the write path's
# draws (initial content, leveler keys, MLC verify) exactly as the
# generator's run made them, so the two runs agree number for number.
_CONTENT_BLOCK = 4096        # lines of write content drawn at a time


def source_streams(seed: int) -> tuple[np.random.Generator, np.random.Generator]:
    """Generators of a run's requests and of its write content: streams ``requests`` and ``write_content``."""
    return stream(seed, "requests"), stream(seed, "write_content")


class _Content:
    """Write content from the data model, drawn in fixed blocks of lines.

    The k-th write of a stream gets the same content however the stream is
    cut into chunks.  Only for models whose new content does not depend on
    the old one (``flip`` content is drawn by the write path).
    """

    def __init__(self, model: DataModel, rng: np.random.Generator) -> None:
        self.model = model
        self.rng = rng
        self.block = np.zeros((0, model.line_bytes), np.uint8)
        self.pos = 0

    def take(self, n: int) -> np.ndarray:
        parts = [self.block[:0]]
        while n > 0:
            if self.pos == len(self.block):
                self.block = self.model.new(
                    self.rng, np.empty((_CONTENT_BLOCK, self.model.line_bytes), np.uint8))
                self.pos = 0
            k = min(n, len(self.block) - self.pos)
            parts.append(self.block[self.pos:self.pos + k])
            self.pos += k
            n -= k
        return parts[-1] if len(parts) == 2 else np.concatenate(parts)


class RequestSource:
    """A run's request stream, as the engines consume it.

    Iterating yields chunks of exactly ``run.chunk_requests`` requests (the
    last may be shorter) in arrival order.  Writes carry their content
    (``Chunk.data``): the trace's own, or else drawn from the data model on
    the source's content stream; with the ``flip`` model and no content in
    the stream, ``data`` stays ``None`` and the write path draws the flips.

    Attributes
    ----------
    reader:
        The :class:`~memsim.workload.trace.TraceReader` of pattern ``trace``,
        else None.
    mix:
        The :class:`~memsim.workload.mix.StreamMerge` of ``[[streams]]``
        (it knows each request's stream), else None.
    cache:
        The :class:`~memsim.engine.dram_cache.DramCache` in front of the PCM
        (``cache.enabled``), else None.  With a cache the chunks are its PCM
        stream (fills and write-backs), again cut to ``run.chunk_requests``.
    """

    def __init__(self, chunks: Iterable[Chunk], chunk_requests: int, content: _Content | None,
                 reader: TraceReader | None = None, cache: DramCache | None = None,
                 mix: StreamMerge | None = None) -> None:
        self.chunks = chunks
        self.mix = mix
        self.chunk_requests = chunk_requests
        self.content = content
        self.reader = reader
        self.cache = cache

    @property
    def readers(self) -> list[TraceReader]:
        """Every trace reader of the source (the workload's, or those of trace streams)."""
        if self.reader is not None:
            return [self.reader]
        return list(self.mix.readers) if self.mix is not None else []

    @property
    def bad_lines(self) -> int:
        """Malformed trace rows skipped so far (``workload.skip_bad``); 0 for synthetic streams."""
        return sum(r.bad_lines for r in self.readers)

    def close(self) -> None:
        """Stop the read-ahead threads of the source's traces."""
        for r in self.readers:
            r.close()

    def __iter__(self) -> Iterator[Chunk]:
        if self.cache is None:
            yield from self._host()
        else:
            # Cut again: the engines' results must not depend on how many
            # PCM requests each host chunk happened to give.
            yield from rechunk(self.cache.run(self._host()), self.chunk_requests)

    def _host(self) -> Iterator[Chunk]:
        try:
            for ch in rechunk(self.chunks, self.chunk_requests):
                if self.content is not None and ch.data is None:
                    w = np.flatnonzero(ch.op == WRITE)
                    data = np.zeros((len(ch), self.content.model.line_bytes), np.uint8)
                    data[w] = self.content.take(w.size)
                    ch = Chunk(ch.time_ns, ch.op, ch.line, data)
                yield ch
        except TraceError as exc:
            # Re-raised without the reader's frames: the user sees one line.
            raise TraceError(exc.where, exc.found, exc.allowed) from None


def build_source(cfg: RunConfig, rng: np.random.Generator | None = None, *,
                 content: bool = True, front: bool = True, fold: bool = True) -> RequestSource:
    """The run's request stream: the synthetic generator, or a trace for pattern ``trace``.

    Parameters
    ----------
    cfg:
        The run config: ``[workload]``, ``run.seed``, ``run.chunk_requests``,
        ``array.line_bytes`` and the footprint (trace lines must lie inside it).
    rng:
        Ignored.  The source draws from its own streams
        (:func:`source_streams` of ``run.seed``), never from the generator
        the write path draws from, so that a trace made from the generator
        replays to the same run.
    content:
        Attach write content drawn from the data model where the stream has
        none.  ``False`` when only the requests are wanted (a trace without
        content, the wear engine's write stream).
    front:
        Put the DRAM cache (``cache.enabled``) in front: the chunks are then
        the PCM's requests.  ``False`` for the host's own stream (a trace
        made from the config).
    fold:
        For a workload sized in device lines (``workload.sizing``), fold the
        device lines onto the modeled ones as the run does.  ``False``
        yields the device lines themselves, as a trace of the device holds
        them (a replay with ``device_lines`` folds them the same way).

    Raises
    ------
    ConfigError
        Pattern ``trace`` without ``workload.trace``.
    TraceError
        The trace file is missing or its header is bad (at once), or a row is
        malformed (during iteration; names ``file:line``).
    """
    w = cfg.workload
    req_rng, content_rng = source_streams(cfg.run.seed)
    model = DataModel(w.data, cfg.array.line_bytes, w.flip_fraction, w.one_fraction)
    filler = _Content(model, content_rng) if content and w.data != "flip" else None
    cache = DramCache.from_config(cfg) if front else None
    if cfg.streams:
        mix = mixed_streams(cfg, content)
        if cache is not None:
            cache.keep_host = True        # per-stream keys need each host request's hit or miss
        return RequestSource(mix, cfg.run.chunk_requests, None if mix.has_data else filler, cache=cache, mix=mix)
    if w.pattern != "trace":
        lines = cfg.footprint if fold or w.sizing != "device_lines" else cfg.device_lines
        src = SyntheticSource(w, lines, req_rng, cfg.run.chunk_requests,
                              address=folded_address(cfg, lines))
        return RequestSource(src, cfg.run.chunk_requests, filler, cache=cache)
    if not w.trace:
        raise ConfigError("workload.trace", "nothing",
                          "the path of a trace file when workload.pattern is 'trace'")
    device = w.sizing == "device_lines"
    d = cfg.device_lines
    reader = read_trace(w.trace, chunk_size=cfg.run.chunk_requests, skip_bad=w.skip_bad,
                        line_bytes=cfg.array.line_bytes, footprint=d if device else cfg.footprint)
    if reader.has_data:          # reads the header now, outside the engine
        filler = None
    chunks = fold_chunks(reader, cfg.footprint, d) if device else reader
    return RequestSource(chunks, cfg.run.chunk_requests, filler, reader, cache)


def fold_chunks(chunks: Iterable[Chunk], modeled: int, device: int) -> Iterator[Chunk]:
    """Device line ``q`` onto modeled line ``floor(q N / D)`` (runs of adjacent device lines)."""
    for ch in chunks:
        yield Chunk(ch.time_ns, ch.op, (ch.line * modeled // device).astype(np.int64), ch.data)


_STREAM_KEYS = ("pattern", "requests", "read_fraction", "arrival", "interval_ns", "zipf_exponent",
                "hot_fraction", "hot_share", "stride_lines")


def mixed_streams(cfg: RunConfig, content: bool = True) -> StreamMerge:
    """The ``[[streams]]`` of a config as one merged source (each on its own random stream).

    A trace stream (pattern ``trace``) replays its file: lines must lie in
    the stream's own range (``footprint_lines`` from ``offset_lines``, or to
    the end of the footprint) and are moved by ``offset_lines``; times become
    ``time_ns * time_scale + start_ns``.  Hints of a trace stream are left
    out (streams do not pre-program lines).  When a trace carries write
    content, every stream's writes carry content: the synthetic streams'
    drawn from the data model on their own streams ``write_content/j+1``, so
    the merge is the same however the streams are cut into chunks.
    """
    w = cfg.workload
    sources, offsets, readers = [], [], []
    for j, st in enumerate(cfg.streams):
        footprint = st.footprint_lines or cfg.footprint - st.offset_lines
        if st.pattern == "trace":
            reader = read_trace(st.trace, chunk_size=cfg.run.chunk_requests, skip_bad=w.skip_bad,
                                line_bytes=cfg.array.line_bytes, footprint=footprint)
            readers.append(reader)
            src: Iterable[Chunk] = reader
        else:
            wl = w.model_copy(update={**{k: getattr(st, k) for k in _STREAM_KEYS}, "hint_lead_ns": 0.0})
            rng = stream(cfg.run.seed, "requests", j + 1)      # each stream its own draws
            src = SyntheticSource(wl, footprint, rng, cfg.run.chunk_requests)
            readers.append(None)
        sources.append(_timed(src, st.time_scale, st.start_ns))
        offsets.append(st.offset_lines)
    with_data = content and any(r is not None and r.has_data for r in readers)
    if with_data:
        if w.data == "flip":
            name = next(st.trace for st, r in zip(cfg.streams, readers) if r is not None and r.has_data)
            raise ConfigError("workload.data", f"'flip' with the trace {name}, which carries write content",
                              "random, zeros or ones (flip draws changes to the stored content, a trace "
                              "brings its own)")
        model = DataModel(w.data, cfg.array.line_bytes, w.flip_fraction, w.one_fraction)
        sources = [s if r is not None else _with_content(s, _Content(model, stream(cfg.run.seed, "write_content",
                                                                                     j + 1)))
                   for j, (s, r) in enumerate(zip(sources, readers))]
    merge = StreamMerge(sources, offsets)
    merge.readers = [r for r in readers if r is not None]
    merge.has_data = with_data
    return merge


def _timed(chunks: Iterable[Chunk], scale: float, start_ns: float) -> Iterator[Chunk]:
    """A stream's chunks without hints, its times scaled and delayed."""
    for ch in chunks:
        if (ch.op == HINT).any():
            ch = ch.take(ch.op != HINT)
        if scale != 1.0 or start_ns != 0.0:
            ch = Chunk(ch.time_ns * scale + start_ns, ch.op, ch.line, ch.data)
        yield ch


def _with_content(chunks: Iterable[Chunk], filler: _Content) -> Iterator[Chunk]:
    """A synthetic stream's chunks with the content of its writes drawn (the stream's k-th write,
    the filler's k-th line, however the stream is cut)."""
    for ch in chunks:
        w = np.flatnonzero(ch.op == WRITE)
        data = np.zeros((len(ch), filler.model.line_bytes), np.uint8)
        data[w] = filler.take(w.size)
        yield Chunk(ch.time_ns, ch.op, ch.line, data)


def source_fields(source: RequestSource) -> dict[str, int]:
    """Summary keys about the request source: ``trace_bad_lines`` for trace runs."""
    if not source.readers:
        return {}
    return {"trace_bad_lines": source.bad_lines}


def write_stream(cfg: RunConfig, *, endless: bool = True,
                 chunk: int | None = None) -> Iterator[np.ndarray]:
    """Logical line indices (int64 arrays) of the workload's user writes, in order.

    For synthetic patterns these are the writes of :func:`build_source`'s
    stream (same seed, same lines as a timing run of the config), continued
    past ``workload.requests`` when ``endless`` by the same generator run
    on.  For pattern ``trace`` they
    are the trace's writes, once (a trace has an end; a caller that needs
    more calls again to replay it).  Hints and reads are left out; content
    is not drawn.

    Parameters
    ----------
    cfg:
        The run config.
    endless:
        Synthetic patterns only: do not stop at ``workload.requests``.
    chunk:
        Requests per chunk read or generated (default ``run.chunk_requests``);
        the arrays are the writes among them.

    Raises
    ------
    TraceError
        As :func:`build_source`.
    """
    size = chunk or cfg.run.chunk_requests
    cfg = cfg.model_copy(update={"run": cfg.run.model_copy(update={"chunk_requests": size})})
    chunks = _host_chunks(cfg, endless)
    cache = DramCache.from_config(cfg)
    if cache is not None:
        # The PCM is written by the cache's evictions of dirty lines only.
        chunks = cache.run(chunks)
    for ch in chunks:
        yield ch.line[ch.op == WRITE]


def _host_chunks(cfg: RunConfig, endless: bool) -> Iterator[Chunk]:
    """The host's requests without content (for :func:`write_stream`), endless if asked."""
    done = 0
    for ch in build_source(cfg, content=False, front=False):
        done += len(ch)
        yield ch
    if not endless or cfg.workload.pattern == "trace":
        return
    # The generator cuts its last chunk short, which changes the draws after
    # it; go on with an endless generator of the same seed from that request.
    wl = cfg.workload.model_copy(update={"requests": 1 << 62})
    for ch in build_source(cfg.model_copy(update={"workload": wl}), content=False, front=False):
        if done >= len(ch):
            done -= len(ch)
            continue
        ch, done = ch.take(slice(done, None)), 0
        yield ch
