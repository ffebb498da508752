"""The frame layout of one signal: sync word, coding, length and CRC, from a few demodulated bursts.

The project's receiver demodulates a few bursts in raw mode with the
parameters found. The alternating preamble is located, and every catalogue
CRC is tried over every payload start and length after it (the parametrised
model of Williams, "A painless guide to CRC error detection algorithms", 1993,
which the catalogue uses, with the CRC register of :mod:`iqdemod.crc`); a
layout that checks on enough bursts fixes the payload start, the length and
the CRC, and the sync word is read off just before the payload
(``SYNC_BITS_READ`` bits, taking in alternating bits when the word is
shorter). Without a CRC match, the sync word is the longest pattern (32, 24 or
16 bits) common to nearly every burst after the preamble, the length what the
shortest burst holds after it, and the CRC "none".

The codings of :mod:`iqdemod.coding` are tried the same way. When the symbols
after the preamble pair into valid Manchester symbols (few chip pairs 0,0 or
1,1, in the better of the two pairings), the bursts are also read as
Manchester in both conventions, whose bits are complements, so only the CRC
tells them apart; each reading is searched plain and de-whitened with PN9 from
each candidate payload start, with bytes MSB and LSB first; the CRC may be
sent big- or little-endian, and a length byte may count the payload, the
payload and the CRC, or the whole frame. The layout whose frames check on most
bursts wins (the plainer one on a tie), and the receiver's own
:func:`~iqdemod.framing.find_frames` confirms it on the symbols as
demodulated.
"""

from __future__ import annotations

import dataclasses
import itertools
import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from ..capture import Capture
from ..coding import bytes_to_bits, manchester_decode, whiten
from ..crc import CRC_CATALOGUE, CrcSpec, crc_final, crc_init, crc_table, crc_update
from ..framing import find_frames
from ..link import FrameSpec, Link, SignalSpec
from ..numeric import bits_to_int, pack_bits
from ..receiver import iter_bursts
from .activity import MAX_EXCERPTS

__all__ = ["Layout", "frame_layout", "demodulated_bits", "SYNC_BITS_READ"]

MAX_SEARCH_BYTES = 256  # longest payload the CRC search tries
# The survey reads the sync word off the bits just before the payload, and cannot tell where a word
# starts whose first bits continue the alternating preamble: it reads 32 bits (the commonest sync word,
# common practice), 24 or 16. A link profile may still carry up to link.SYNC_BITS_READ (64) for a word
# its author knows; a longer word found by the survey shows as its last 32 bits, which decode the same.
SYNC_BITS_READ = 32
MIN_SYNC_BITS = 8
MIN_PREAMBLE_BITS = 8

@lru_cache(maxsize=None)
def _table_array(spec: CrcSpec) -> np.ndarray:
    return np.array(crc_table(spec), dtype=np.int64)


def _crc_hits(bits: np.ndarray, starts: np.ndarray, max_bytes: int, *, whitening: str = "none",
              bit_order: str = "msb") -> list[tuple[int, int, str, int, str]]:
    """Every (start, n_bytes, CRC name, first byte, CRC byte order) where the CRC of the bytes from `start`
    equals the bytes that follow, read big- or little-endian.

    The bytes from each start are read in `bit_order` and, with ``whitening =
    "pn9"``, de-whitened from that start on (whitening begins right after
    the sync word, which is where the CRC's coverage begins). All starts are
    computed together, one byte step at a time, with the CRC register of
    :mod:`iqdemod.crc`.
    """
    bits = np.asarray(bits, dtype=np.uint8)
    starts = starts[starts + 8 + 8 <= len(bits)]
    if starts.size == 0:
        return []
    n_bytes = min(max_bytes, (len(bits) - int(starts.min())) // 8)
    widest = max(spec.width for spec in CRC_CATALOGUE.values()) // 8
    total = n_bytes + widest
    padded = np.concatenate([bits, np.zeros(8 * total + 64, np.uint8)])
    rows = padded[starts[:, None] + np.arange(8 * total)[None, :]]
    if whitening != "none":
        rows = rows ^ bytes_to_bits(whiten(bytes(total), whitening), bit_order)[None, :]
    data = pack_bits(rows, bit_order).astype(np.int64)
    hits = []
    for spec in CRC_CATALOGUE.values():
        w = spec.width
        if w < 8:
            continue
        table = _table_array(spec)
        wb = w // 8
        sent = np.zeros((len(starts), total - wb + 1), dtype=np.int64)  # big-endian value from each byte on
        sent_le = np.zeros_like(sent)  # and little-endian
        for j in range(wb):
            sent = (sent << 8) | data[:, j : j + total - wb + 1]
            sent_le |= data[:, j : j + total - wb + 1] << (8 * j)
        reg = np.full(len(starts), crc_init(spec), dtype=np.int64)
        for k in range(n_bytes):
            reg = crc_update(spec, reg, data[:, k], table)
            pos = starts + 8 * (k + 1)
            ok = pos + w <= len(bits)
            if not ok.any():
                break
            value = crc_final(spec, reg)
            for crc_order, table_sent in (("big", sent), ("little", sent_le)):
                match = ok & (table_sent[:, k + 1] == value)
                for i in np.flatnonzero(match):
                    hits.append((int(starts[i]), k + 1, spec.name, int(data[i, 0]), crc_order))
    return hits


def _preamble(bits: np.ndarray) -> tuple[int, int] | None:
    """(first bit, first bit after) of the longest alternating run that starts in the first half of a burst."""
    if len(bits) < MIN_PREAMBLE_BITS + 8:
        return None
    alt = np.concatenate([[0], (bits[1:] != bits[:-1]).astype(np.int8), [0]])
    edges = np.flatnonzero(np.diff(alt))
    best = None
    for a, b in zip(edges[::2], edges[1::2]):
        start, end = a, b + 1  # bits a..b alternate
        if start > len(bits) // 2:
            break
        if end - start >= MIN_PREAMBLE_BITS and (best is None or end - start > best[1] - best[0]):
            best = (int(start), int(end))
    return best


@dataclass(frozen=True)
class Layout:
    """A frame layout found (the fields of :class:`~iqdemod.survey.SignalFound` of the same names)."""

    sync_word: int | None = None
    sync_bits: int | None = None
    preamble_bits: int | None = None
    length: int | str | None = None
    crc: str | None = None
    frames_crc_ok: int = 0
    coding: str = "nrz"
    whitening: str = "none"
    length_counts: str = "payload"
    bit_order: str = "msb"
    crc_order: str = "big"


def _majority(rows: list[np.ndarray]) -> np.ndarray:
    return (np.mean(np.vstack(rows), axis=0) >= 0.5).astype(np.uint8)


def _sync_from(burst_bits: list[np.ndarray], pre: list[tuple[int, int]], ends: list[int]) -> tuple[int, int, int]:
    """(sync word, its bits, preamble bits) for sync words ending at `ends`.

    ``SYNC_BITS_READ`` bits, or as many as the preamble seen in most bursts leaves room for;
    each bit is the majority over the bursts that have room for it.
    """
    rooms = np.array([e - p[0] for e, p in zip(ends, pre)])
    n = int(max(1, min(SYNC_BITS_READ, np.median(rooms))))
    rows = [b[e - n : e] for b, e, r in zip(burst_bits, ends, rooms) if r >= n]
    word = bits_to_int(_majority(rows))
    preamble = int(np.median([e - n - p[0] for e, p, r in zip(ends, pre, rooms) if r >= n]))
    return word, n, preamble


def _common_bits(aligned: list[np.ndarray], *, agree: float = 0.9) -> int:
    """How many leading bits (nearly) every row shares: at least `agree` of them equal the majority."""
    limit = min(len(a) for a in aligned)
    rows = np.vstack([a[:limit] for a in aligned]).astype(float)
    ones = rows.mean(axis=0)
    bad = np.flatnonzero(np.maximum(ones, 1 - ones) < agree)
    return int(bad[0]) if bad.size else limit


def _crc_layout(usable: list[tuple[np.ndarray, tuple[int, int]]], common: int, *, raw: list[np.ndarray] | None = None,
                coding: str = "nrz", whitening: str = "none", bit_order: str = "msb") -> Layout | None:
    """The CRC search (see the module notes); None when no layout checks on enough bursts.

    A layout must check on at least 30 % of the bursts, and on at least 2 (a
    CRC of 16 bits or more) or 3 (an 8-bit CRC, which a random start and
    length pass once in 256). A match must reach past the bits every burst
    shares, and the bursts it checks on must not all carry the same bits: a
    CRC that checks inside the sync word checks on every burst. (So frames
    that never change cannot be told apart from their sync word; the shared
    word then stands in.)

    `usable` holds the decoded bits (Manchester chips already paired) and
    `raw` the symbols as demodulated, on which the layout found is checked
    by the receiver's own :func:`~iqdemod.framing.find_frames`.
    """
    widths = {name: spec.width for name, spec in CRC_CATALOGUE.items()}
    votes: dict[tuple, dict[int, int]] = {}
    votes_len: dict[tuple, dict[int, int]] = {}  # bytes the CRC covers, per burst
    for i, (b, (p0, p1)) in enumerate(usable):
        # payload starts from 48 bits after the alternation back to where the sync word would have only
        # MIN_SYNC_BITS bits of its own (its first bit may continue the alternation: p1 - 1)
        starts = np.arange(max(p0 + MIN_SYNC_BITS, p1 - 1 + MIN_SYNC_BITS - 2), min(len(b), p1 + 48))
        for start, n_bytes, crc, first, crc_order in _crc_hits(
                b, starts, max_bytes=min(MAX_SEARCH_BYTES, (len(b) - p1) // 8), whitening=whitening,
                bit_order=bit_order):
            if start + 8 * n_bytes + widths[crc] <= p1 + common:
                continue
            rel = start - p1
            keys = [(rel, "fixed", n_bytes, crc, crc_order)]
            # a length byte counting the payload, the payload and the CRC, or the whole frame
            for counts, extra in (("payload", 0), ("payload+crc", widths[crc] // 8), ("frame", 1 + widths[crc] // 8)):
                if n_bytes >= 2 and first == n_bytes - 1 + extra:
                    keys.append((rel, "prefix8", counts, crc, crc_order))
            for key in keys:
                votes.setdefault(key, {})[i] = start
                votes_len.setdefault(key, {})[i] = n_bytes

    def enough(key: tuple) -> bool:
        floor = 2 if widths[key[3]] >= 16 else 3
        if len(votes[key]) < max(floor, math.ceil(0.3 * len(usable))):
            return False
        # bits that are the same in every burst (preamble, sync word) pass any CRC found in them every time
        crc = key[3]
        seen = set()
        for i, start in votes[key].items():
            b = usable[i][0]
            seen.add(b[start : start + 8 * votes_len[key][i] + widths[crc]].tobytes())
        return len(seen) >= 2

    ranked = [k for k in votes if enough(k)]
    if not ranked:
        return None
    # Ties: a CRC is linear, so a window ending where the frame ends but starting in the constant bits
    # before it (one byte longer per byte earlier) checks on every burst once in 2^width; and with a
    # zero initial register, a window one bit earlier passes when the sync word ends in a 0. The
    # shortest frame, then the latest start, is the frame.
    counts_rank = {"payload": 0, "payload+crc": 1, "frame": 2}
    key = max(ranked, key=lambda k: (len(votes[k]), widths[k[3]], -(k[2] if k[1] == "fixed" else 0), k[0],
                                     -counts_rank.get(k[2], 0), k[4] == "big"))
    _, kind, n_bytes, crc, crc_order = key
    members = sorted(votes[key])
    word, n, preamble = _sync_from([usable[i][0] for i in members], [usable[i][1] for i in members],
                                   [votes[key][i] for i in members])
    length = "prefix8" if kind == "prefix8" else n_bytes
    counts = n_bytes if kind == "prefix8" else "payload"
    spec = FrameSpec(sync_word=word, sync_bits=n, sync_tolerance=min(3, n // 8), length=length, crc=crc,
                     coding=coding, whitening=whitening, length_counts=counts, bit_order=bit_order,
                     crc_order=crc_order)
    streams = raw if raw is not None else [b for b, _ in usable]
    good = sum(any(h.crc_ok for h in find_frames(b, spec)) for b in streams)
    return Layout(word, n, preamble, length, crc, good, coding, whitening, counts, bit_order, crc_order)


def _alternations(bits: np.ndarray) -> int:
    return int(np.count_nonzero(bits[1:] != bits[:-1]))


def _shared_word(usable: list[tuple[np.ndarray, tuple[int, int]]]) -> tuple[int, int, list[int]] | None:
    """A word that (nearly) every burst carries just after its alternating preamble, without a CRC to go by.

    Each burst offers the ``SYNC_BITS_READ`` (then 24, then 16) bits after its alternation as
    a candidate; a candidate counts the bursts that carry it, within 3 bit
    errors, near the end of their own alternation (±8 bits, so a bit error
    in a preamble does not throw the alignment). The best candidate carried
    by 60 % of the bursts wins; a candidate that is itself mostly alternating
    (more preamble than word) is never taken. The first bits of a sync word
    may continue the alternation; the window is then slid back over them while
    that makes the match better (payload bits, which differ between bursts,
    leave its end), so that it ends where the shared bits end.

    Returns
    -------
    (length, word, end of the word in each burst carrying it, -1 elsewhere), or None.
    """
    need = max(2, math.ceil(0.6 * len(usable)))
    for n in (SYNC_BITS_READ, 24, 16):
        windows = []
        for b, (_, p1) in usable:
            lo, hi = max(0, p1 - 16), min(len(b) - n, p1 + 8)
            windows.append((lo, sliding_window_view(b[: hi + n], n)[lo : hi + 1] if hi >= lo else None))

        def score(cand: np.ndarray) -> tuple[int, int, list[int]]:
            ends, total = [], 0
            for lo, win in windows:
                if win is None:
                    ends.append(-1)
                    continue
                dist = np.count_nonzero(win != cand, axis=1)
                k = int(np.argmin(dist))
                ends.append(lo + k + n if dist[k] <= 3 else -1)
                total += int(dist[k]) if dist[k] <= 3 else 0
            return sum(e >= 0 for e in ends), total, ends

        best = None
        for b, (p0, p1) in usable:
            if p1 + n > len(b) or _alternations(b[p1 : p1 + n]) > 0.75 * (n - 1):
                continue
            count, total, ends = score(b[p1 : p1 + n])
            if count < need:
                continue
            for back in range(1, 9):  # slide back over sync bits that continue the alternation
                if p1 - back < p0:
                    break
                c2, t2, e2 = score(b[p1 - back : p1 - back + n])
                if c2 < count or c2 == count and t2 >= total:
                    break
                count, total, ends = c2, t2, e2
            if best is None or (count, -total) > (best[0], -best[1]):
                best = (count, total, ends)
        if best is not None:
            ends = best[2]
            rows = [usable[i][0][e - n : e] for i, e in enumerate(ends) if e >= 0]
            return n, bits_to_int(_majority(rows)), ends
    return None


MAX_INVALID_PAIRS = 0.2  # Manchester chip pairs that are no symbol, most in a burst of Manchester chips
WHITENINGS_TRIED = ("none", "pn9")
BIT_ORDERS_TRIED = ("msb", "lsb")


def _manchester_pairs(chips: np.ndarray, pre: tuple[int, int], coding: str
                      ) -> tuple[np.ndarray, tuple[int, int], float]:
    """A burst's chips paired into bits, from the pairing that leaves fewest invalid pairs after the preamble.

    Returns the bits, the preamble in bits, and the share of invalid pairs
    after the preamble (near 0 for Manchester chips, about ½ for NRZ bits).
    """
    best = None
    for phase in (0, 1):
        bits, invalid = manchester_decode(chips[phase:], coding)
        after = invalid[max(0, (pre[1] - phase) // 2) :]
        share = float(np.mean(after)) if after.size else 1.0
        if best is None or share < best[2]:
            best = (bits, ((pre[0] - phase + 1) // 2, (pre[1] - phase) // 2), share)
    return best


_Streams = list[tuple[np.ndarray, tuple[int, int]]]  # decoded bits of each burst, with its preamble (first, after)


def _candidate_streams(burst_bits: list[np.ndarray]) -> list[tuple[str, list[np.ndarray], _Streams]]:
    """(coding, the bursts' symbols, the decoded bits with their preambles) for each coding worth trying."""
    raw = [(b, _preamble(b)) for b in burst_bits]
    raw = [(b, p) for b, p in raw if p is not None]
    out = [("nrz", [b for b, _ in raw], raw)]
    if not raw:
        return out
    # Manchester chips pair into valid symbols after the preamble, NRZ bits into about half invalid ones;
    # both conventions read the same pairs (as complementary bits), so the CRC decides between them.
    ieee = [_manchester_pairs(b, p, "manchester") for b, p in raw]
    if np.median([share for _, _, share in ieee]) <= MAX_INVALID_PAIRS:
        for coding in ("manchester", "manchester-inverted"):
            decoded = [((bits if coding == "manchester" else 1 - bits).astype(np.uint8), pre)
                       for bits, pre, _ in ieee]
            out.append((coding, [b for b, _ in raw], decoded))
    return out


def frame_layout(burst_bits: list[np.ndarray]) -> Layout:
    """Sync word, length, CRC, coding and whitening from a few demodulated bursts (see the module notes).

    Every coding the bursts could carry (NRZ; Manchester in both conventions
    when the chips pair into valid symbols) and every whitening is tried; the
    layout whose frames check on most bursts wins, the plainer one on a tie.

    Examples
    --------
    Three bursts of a buoy link (32 preamble bits, sync word 0x2DD4, 12-byte
    payloads, CRC-16/IBM-3740) built with the framer: the layout comes back.
    The last preamble bits are the same in every burst, so the survey reads
    them as part of a longer sync word:

    >>> from iqdemod.framing import frame_bits
    >>> from iqdemod.link import FrameSpec
    >>> spec = FrameSpec(sync_word=0x2DD4, sync_bits=16, length=12, crc="CRC-16/IBM-3740")
    >>> bursts = [np.concatenate([np.tile([1, 0], 16), frame_bits(p, spec), np.zeros(8, np.uint8)])
    ...           for p in (b"buoy-7 12.5C", b"buoy-9 11.8C", b"buoy-2 13.1C")]
    >>> layout = frame_layout(bursts)
    >>> hex(layout.sync_word), layout.sync_bits, layout.length, layout.crc, layout.frames_crc_ok, layout.coding
    ('0xaaaa2dd4', 32, 12, 'CRC-16/IBM-3740', 3, 'nrz')
    """
    best: Layout | None = None
    fallback: tuple[str, list[np.ndarray], list] | None = None
    for coding, raw, usable in _candidate_streams(burst_bits):
        if len(usable) < 2:
            continue
        if fallback is None or coding == "manchester":
            fallback = (coding, raw, usable)
        # The bits after the alternation that every burst shares: sync word (and any fixed header).
        common = _common_bits([b[p1:] for b, (_, p1) in usable])
        for whitening, bit_order in itertools.product(WHITENINGS_TRIED, BIT_ORDERS_TRIED):
            if best is not None and best.frames_crc_ok == len(usable):
                break  # every burst checks: a less plain layout cannot do better
            found = _crc_layout(usable, common, raw=raw, coding=coding, whitening=whitening, bit_order=bit_order)
            if found is not None and (best is None or found.frames_crc_ok > best.frames_crc_ok):
                best = found
    if best is not None:
        return _with_symbols(best)
    if fallback is None:
        return Layout()
    # Without a CRC match the conventions cannot be told apart: IEEE 802.3 when the chips pair up.
    coding, raw, usable = fallback
    shared = _shared_word(usable)
    if shared is None:
        return Layout()
    n, word, ends = shared
    carriers = [(b, p, e) for (b, p), e in zip(usable, ends) if e >= 0]
    preamble = int(np.median([e - n - p[0] for _, p, e in carriers]))
    tail = min(len(b) - e for b, _, e in carriers)
    # No CRC to bound the frame: the length is what the shortest burst holds after the sync word.
    return _with_symbols(Layout(word, n, max(0, preamble), tail // 8 if tail >= 8 else None, None, 0, coding))


def _with_symbols(layout: Layout) -> Layout:
    """The preamble counted in symbols on the air (it is not coded: one symbol each, not one bit)."""
    if layout.coding == "nrz" or layout.preamble_bits is None:
        return layout
    return dataclasses.replace(layout, preamble_bits=2 * layout.preamble_bits)


def demodulated_bits(capture: Capture, signal: SignalSpec, *, block_samples: int, progress: bool) -> list[np.ndarray]:
    """Hard bits of the first few bursts, from the project's receiver in raw mode (stops reading early).

    Examples
    --------
    The bits of the first bursts of a synthetic buoy capture (16-bit sync
    word 0x2DD4, 12 bytes, CRC-16/IBM-3740), from the receiver in raw mode:

    >>> import os, tempfile
    >>> from iqdemod.capture import open_capture
    >>> from iqdemod.link import SignalSpec
    >>> from iqdemod.profile import load_link
    >>> from iqdemod.synth import SynthConfig, synthesize
    >>> link = load_link(None, rate=48000, baud=1200, shift=1200, offset=6000, sync="0x2DD4", sync_bits=16, length=12)
    >>> tmp = tempfile.TemporaryDirectory()
    >>> _ = synthesize(os.path.join(tmp.name, "buoys"), SynthConfig(link=link, ebn0_db=(16.0,), n_frames=4, seed=5))
    >>> with open_capture(os.path.join(tmp.name, "buoys.sigmf-meta")) as capture:
    ...     bits = demodulated_bits(capture, SignalSpec(baud=1200, shift_hz=1200, offset_hz=6000),
    ...                             block_samples=16384, progress=False)
    >>> len(bits), all(len(b) >= 32 + 16 + 8 * 14 for b in bits)  # preamble, sync word, payload and CRC
    (2, True)
    >>> tmp.cleanup()
    """
    link = Link(signal=signal, frame=FrameSpec(sync_word=None, crc="none"))
    out = []
    gen = iter_bursts(capture, link, block_samples=block_samples, progress=progress)
    try:
        for burst in gen:
            if burst.piece == 0 and burst.n_symbols >= 4 * MIN_PREAMBLE_BITS:
                out.append(np.asarray(burst.bits, np.uint8))
                if len(out) >= MAX_EXCERPTS:
                    break
    finally:
        gen.close()
    return out
