"""Compiled bit kernels of the write path: one pass over a chunk's writes.

:meth:`memsim.policy.writepath.WritePath.apply` hands a chunk's write events
(user writes and leveler moves, in stream order) to :func:`write_events`,
which encodes each one against the stored line, updates the stored bits and
flag cells, counts SET and RESET cells and line writes, and adds the cells
programmed to the per-position wear profile -- with no numpy call per write
or per round.  The result is the same as the round-by-round numpy path
(``WritePath._apply_rounds``, kept for multi-level cells and as the
reference in ``tests/test_write_schemes.py``): a line's events keep their
order, and a leveler's parallel copy reads every source before it writes.

Lines are handled as native 64-bit words; ``line_bytes`` must be a multiple
of 8 (:func:`supported`).  Kernel codes of the schemes: :data:`FULL`,
:data:`COMPARE` (data-comparison write), :data:`FLIP` (Flip-N-Write).

The wear profile (cells programmed per bit position, summed over lines) is
counted from each write's mask of programmed cells, kept in a block of
:data:`BLOCK` masks and added word by word into bit-sliced counters through
a carry-save adder tree (:func:`count_masks`), a few word operations per
write instead of one addition per cell.
"""
from __future__ import annotations

import sys

import numpy as np
from numba import njit

FULL, COMPARE, FLIP = 0, 1, 2
BLOCK = 4096                    # masks counted together (256 KiB for 64-byte lines)


def supported(line_bytes: int, word_bits: int) -> bool:
    """True when the compiled kernels handle lines of this shape."""
    return (sys.byteorder == "little" and line_bytes % 8 == 0 and word_bits in (8, 16, 32, 64))


@njit(cache=True)
def popcount64(x):
    """Set bits of a uint64 (the SWAR form, which LLVM turns into one instruction)."""
    x = x - ((x >> np.uint64(1)) & np.uint64(0x5555555555555555))
    x = (x & np.uint64(0x3333333333333333)) + ((x >> np.uint64(2)) & np.uint64(0x3333333333333333))
    x = (x + (x >> np.uint64(4))) & np.uint64(0x0F0F0F0F0F0F0F0F)
    return np.int64((x * np.uint64(0x0101010101010101)) >> np.uint64(56))


@njit(cache=True)
def _spill(profile, w, weight, p0, p1, p2, p3, p4, p5, p6, p7):
    """Add ``weight`` times the 8-plane bit-sliced counts of word ``w`` to ``profile``.

    Native little-endian word: bit q is bit (q % 8) of byte 8 w + q // 8,
    which np.unpackbits lists most significant first.
    """
    one = np.uint64(1)
    for byte in range(8):
        base = 64 * w + 8 * byte
        for k in range(8):
            q = np.uint64(8 * byte + 7 - k)
            profile[base + k] += weight * (
                np.int64((p0 >> q) & one) + 2 * np.int64((p1 >> q) & one)
                + 4 * np.int64((p2 >> q) & one) + 8 * np.int64((p3 >> q) & one)
                + 16 * np.int64((p4 >> q) & one) + 32 * np.int64((p5 >> q) & one)
                + 64 * np.int64((p6 >> q) & one) + 128 * np.int64((p7 >> q) & one))


@njit(cache=True)
def _csa(a, b, c):
    """Carry-save adder on bit vectors: (carries, sums) of a + b + c per bit."""
    u = a ^ b
    return (a & b) | (u & c), u ^ c


@njit(cache=True)
def count_masks(masks, m, profile):
    """``profile[:bits] += unpackbits(masks[:m]).sum(axis=0)`` for rows of native words.

    Word by word, 16 masks at a time go through a carry-save adder tree
    (Harley-Seal) into bit-sliced counters of weight 1, 2, 4 and 8; each
    group's carry of weight 16 is added into eight more bit-sliced counters
    (a ripple carry without branches), spilled to ``profile`` before they
    can overflow.  The last masks (fewer than 16) are rippled one by one.
    """
    z = np.uint64(0)
    for w in range(masks.shape[1]):
        ones = twos = fours = eights = z
        p0 = p1 = p2 = p3 = p4 = p5 = p6 = p7 = z
        groups = 0
        i = 0
        while i + 16 <= m:
            twos_a, ones = _csa(ones, masks[i, w], masks[i + 1, w])
            twos_b, ones = _csa(ones, masks[i + 2, w], masks[i + 3, w])
            fours_a, twos = _csa(twos, twos_a, twos_b)
            twos_a, ones = _csa(ones, masks[i + 4, w], masks[i + 5, w])
            twos_b, ones = _csa(ones, masks[i + 6, w], masks[i + 7, w])
            fours_b, twos = _csa(twos, twos_a, twos_b)
            eights_a, fours = _csa(fours, fours_a, fours_b)
            twos_a, ones = _csa(ones, masks[i + 8, w], masks[i + 9, w])
            twos_b, ones = _csa(ones, masks[i + 10, w], masks[i + 11, w])
            fours_a, twos = _csa(twos, twos_a, twos_b)
            twos_a, ones = _csa(ones, masks[i + 12, w], masks[i + 13, w])
            twos_b, ones = _csa(ones, masks[i + 14, w], masks[i + 15, w])
            fours_b, twos = _csa(twos, twos_a, twos_b)
            eights_b, fours = _csa(fours, fours_a, fours_b)
            c, eights = _csa(eights, eights_a, eights_b)
            t = p0 & c
            p0 ^= c
            c = t
            t = p1 & c
            p1 ^= c
            c = t
            t = p2 & c
            p2 ^= c
            c = t
            t = p3 & c
            p3 ^= c
            c = t
            t = p4 & c
            p4 ^= c
            c = t
            t = p5 & c
            p5 ^= c
            c = t
            t = p6 & c
            p6 ^= c
            c = t
            p7 ^= c
            groups += 1
            if groups == 255:
                _spill(profile, w, 16, p0, p1, p2, p3, p4, p5, p6, p7)
                p0 = p1 = p2 = p3 = p4 = p5 = p6 = p7 = z
                groups = 0
            i += 16
        _spill(profile, w, 16, p0, p1, p2, p3, p4, p5, p6, p7)
        p0 = p1 = p2 = p3 = z
        for e in range(i, m):           # at most 15: four planes hold them
            c = masks[e, w]
            t = p0 & c
            p0 ^= c
            c = t
            t = p1 & c
            p1 ^= c
            c = t
            t = p2 & c
            p2 ^= c
            c = t
            p3 ^= c
        _spill(profile, w, 1, p0, p1, p2, p3, z, z, z, z)
        _spill(profile, w, 1, ones, twos, fours, eights, z, z, z, z)


@njit(cache=True)
def _decode_into(kind, word_bits, stored, flags, line, out, r):
    """Logical content of stored line ``line`` into row ``r`` of ``out`` (words)."""
    nw = stored.shape[1]
    if kind != FLIP:
        for w in range(nw):
            out[r, w] = stored[line, w]
        return
    per = 64 // word_bits
    full = ~np.uint64(0)
    sub = full if word_bits == 64 else (np.uint64(1) << np.uint64(word_bits)) - np.uint64(1)
    for w in range(nw):
        x = stored[line, w]
        for s in range(per):
            if flags[line, w * per + s] != 0:
                x ^= sub << np.uint64(s * word_bits)
        out[r, w] = x


@njit(cache=True)
def _encode_full(stored, line, new, r, masks, m):
    """Full-line write: every cell programmed, 1 bits SET, 0 bits RESET."""
    n_set = 0
    for w in range(stored.shape[1]):
        x = new[r, w]
        masks[m, w] = ~np.uint64(0)
        n_set += popcount64(x)
        stored[line, w] = x
    return n_set, 64 * stored.shape[1] - n_set, n_set


@njit(cache=True)
def _encode_compare(stored, line, new, r, masks, m):
    """Data-comparison write: only the cells that change."""
    n_set = 0
    n_reset = 0
    ones = 0
    for w in range(stored.shape[1]):
        o = stored[line, w]
        x = new[r, w]
        masks[m, w] = o ^ x
        n_set += popcount64(~o & x)
        n_reset += popcount64(o & ~x)
        ones += popcount64(x)
        stored[line, w] = x
    return n_set, n_reset, ones


@njit(cache=True)
def _encode_flip(word_bits, stored, flags, line, new, r, old_flags, rf, n_bits, profile, masks, m):
    """Flip-N-Write: per word the plain or inverted form, whichever programs fewer cells."""
    per = 64 // word_bits
    sub = ~np.uint64(0) if word_bits == 64 else (np.uint64(1) << np.uint64(word_bits)) - np.uint64(1)
    n_set = 0
    n_reset = 0
    ones = 0
    for w in range(stored.shape[1]):
        o = stored[line, w]
        x = new[r, w]
        for s in range(per):
            i = w * per + s
            f = 1 if old_flags[rf, i] != 0 else 0
            part = sub << np.uint64(s * word_bits)
            d = popcount64((o ^ x) & part)
            # Plain costs d + f cells, inverted W - d + 1 - f; ties stay plain.
            fi = 1 if (word_bits - d + 1 - f) < (d + f) else 0
            if fi == 1:
                x ^= part
            flags[line, i] = fi
            if fi != f:
                if profile.size > 0:
                    profile[n_bits + i] += 1
                if fi == 1:
                    n_set += 1
                else:
                    n_reset += 1
        masks[m, w] = o ^ x
        n_set += popcount64(~o & x)
        n_reset += popcount64(o & ~x)
        ones += popcount64(x)
        stored[line, w] = x
    return n_set, n_reset, ones


@njit(cache=True)
def write_events(kind, word_bits, stored, flags, dst, src, group, content, cidx, xor,
                 n_set, n_reset, ones, line_writes, profile):
    """Apply write events in stream order.

    ``stored`` (lines, words) uint64 and ``flags`` (lines, flag cells) uint8
    are updated in place.  Event ``k`` writes line ``dst[k]``: a move
    (``src[k] >= 0``) the decoded content of line ``src[k]``; a user write
    row ``cidx[k]`` of ``content`` -- or, with ``xor``, its current decoded
    content XOR that row.  Consecutive events with the same ``group`` id
    (>= 0) are one parallel step: every source is read before any line of
    the step is written.  ``profile`` (empty: not counted) receives the
    cells programmed per position.
    """
    n = dst.size
    nw = stored.shape[1]
    nf = flags.shape[1]
    n_bits = nw * 64
    cap = 4
    buf = np.empty((cap, nw), np.uint64)
    fbuf = np.empty((cap, nf), np.uint8)
    masks = np.empty((BLOCK, nw), np.uint64)
    n_masks = 0
    k = 0
    while k < n:
        j = k + 1
        if group[k] >= 0:
            while j < n and group[j] == group[k]:
                j += 1
        if j == k + 1 and src[k] < 0 and not xor:
            # A lone user write: encode straight from its content row (a
            # line's old flags are read before they are overwritten).
            line = dst[k]
            if n_masks == BLOCK:
                if profile.size > 0:
                    count_masks(masks, n_masks, profile)
                n_masks = 0
            row = cidx[k]
            if kind == COMPARE:
                a, b, c = _encode_compare(stored, line, content, row, masks, n_masks)
            elif kind == FLIP:
                a, b, c = _encode_flip(word_bits, stored, flags, line, content, row, flags, line,
                                       n_bits, profile, masks, n_masks)
            else:
                a, b, c = _encode_full(stored, line, content, row, masks, n_masks)
            n_masks += 1
            n_set[k] = a
            n_reset[k] = b
            ones[k] = c
            line_writes[line] += 1
            k = j
            continue
        if j - k > cap:
            cap = j - k
            buf = np.empty((cap, nw), np.uint64)
            fbuf = np.empty((cap, nf), np.uint8)
        # Read phase: new logical content and old flags of every event of the step.
        for e in range(k, j):
            r = e - k
            line = dst[e]
            for f in range(nf):
                fbuf[r, f] = flags[line, f]
            if src[e] >= 0:
                _decode_into(kind, word_bits, stored, flags, src[e], buf, r)
            elif xor:
                _decode_into(kind, word_bits, stored, flags, line, buf, r)
                row = cidx[e]
                for w in range(nw):
                    buf[r, w] ^= content[row, w]
            else:
                row = cidx[e]
                for w in range(nw):
                    buf[r, w] = content[row, w]
        # Write phase.
        for e in range(k, j):
            r = e - k
            line = dst[e]
            if n_masks == BLOCK:
                if profile.size > 0:
                    count_masks(masks, n_masks, profile)
                n_masks = 0
            if kind == COMPARE:
                a, b, c = _encode_compare(stored, line, buf, r, masks, n_masks)
            elif kind == FLIP:
                a, b, c = _encode_flip(word_bits, stored, flags, line, buf, r, fbuf, r, n_bits, profile,
                                       masks, n_masks)
            else:
                a, b, c = _encode_full(stored, line, buf, r, masks, n_masks)
            n_masks += 1
            n_set[e] = a
            n_reset[e] = b
            ones[e] = c
            line_writes[line] += 1
        k = j
    if profile.size > 0:
        count_masks(masks, n_masks, profile)


@njit(cache=True)
def add_profile(profile, masks):
    """``profile[:bits] += unpackbits(masks).sum(axis=0)`` for packed uint8 rows."""
    for i in range(masks.shape[0]):
        for j in range(masks.shape[1]):
            m = masks[i, j]
            if m == 0:
                continue
            for q in range(8):
                profile[8 * j + q] += (m >> (7 - q)) & 1
