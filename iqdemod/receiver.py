"""The receiver: capture blocks in, bursts with their symbols and frames out.

Data path (each stage in its own module)::

    capture blocks ─ channel (DC, IQ image, filter, decimate) ─ bursts (energy detector)
      └─ per detector buffer (demod): every sync word (sync), then per transmission its
         carrier, timing, decisions, frames and Eb/N0

Streaming happens up to the burst detector, with every state carried
explicitly; a burst, once complete, is a bounded buffer at a few samples per
symbol and is processed as a block. The plan of it all is :mod:`iqdemod.plan`.
"""

from __future__ import annotations

import contextlib
import dataclasses
from dataclasses import dataclass
import datetime
import queue
import threading
import time
from pathlib import Path
from typing import Iterator, Mapping, Sequence

import numpy as np

from . import bursts as _bursts
from .burst_pool import BurstPool, worth_a_pool
from .cores import WAKE_S, leave_signals_to_main
from .bursts import RawBurst
from .capture import Capture, CaptureInfo, CaptureStats, DEFAULT_BLOCK_SAMPLES, open_capture, progress_bar
from .channel import FrontEndReport, channelize_many, flush_channels, front_end_report
from .demod import Burst, Frame, demodulate_burst, drop_repeats
from .errors import IqdemodError, quote
from .link import Link
from .plan import ReceiverPlan, plan_receiver, plan_receivers
from .sync import sync_candidates

__all__ = ["ReceiverPlan", "Burst", "Frame", "Receiver", "DecodeSummary", "Decoding", "plan_receiver", "iter_bursts", "drive",
           "decode", "sync_candidates", "demodulate_burst"]


def _parse_utc(text: str | None) -> datetime.datetime | None:
    """A capture's start time (RFC 3339, as SigMF's core:datetime) as an aware UTC datetime; None if absent or unreadable."""
    if not text:
        return None
    try:
        when = datetime.datetime.fromisoformat(text.strip().replace("z", "Z"))
    except ValueError:
        return None
    if when.tzinfo is None:
        when = when.replace(tzinfo=datetime.timezone.utc)
    return when.astimezone(datetime.timezone.utc)


def _utc(start: datetime.datetime, t_s: float) -> str:
    """ISO 8601 UTC with microseconds of `t_s` seconds after `start`."""
    when = start + datetime.timedelta(microseconds=round(t_s * 1e6))
    return when.strftime("%Y-%m-%dT%H:%M:%S.%fZ")


class Receiver:
    """Streaming receiver for one capture: feed blocks, collect bursts.

    The explicit states of the front end and the burst detectors live here
    between calls; every stage underneath is a pure function of (input, state).
    Several links (signals of the same capture) share one read and one FFT
    pass of the front end (:func:`iqdemod.channel.channelize_many`); each has
    its own channel, detector and demodulator, and its frames carry its name.

    Parameters
    ----------
    link : Link, or a sequence of them, or a mapping of name to Link
        A mapping names the links, and the frames then carry ``link``.
    info : CaptureInfo
        Sample rate, centre frequency and name of the capture.
    """

    def __init__(self, link: "Link | Sequence[Link] | Mapping[str, Link]", info: CaptureInfo):
        links, self.names = _named_links(link)
        self.plans = plan_receivers(links, info.sample_rate_hz, info.centre_hz)
        self.plan = self.plans[0]
        self.info = info
        self._tuners = tuple(p.tuner for p in self.plans)
        self._tuner = self.plan.tuner.initial_state()
        self._detectors = [p.detector.initial_state() for p in self.plans]
        self._last_frame_sample = [-np.inf] * len(self.plans)
        self._name = Path(info.path).name
        self._start = _parse_utc(info.start_time)

    def feed(self, block: np.ndarray) -> list[Burst]:
        """Process one block of input samples; return the bursts it completed (every link's)."""
        return [b for k, raw in self.buffers(block) for b in self.demodulate(raw, k)]

    def flush(self) -> list[Burst]:
        """End of input: hand out the bursts still open (every link's)."""
        return [b for k, raw in self.end_buffers() for b in self.demodulate(raw, k)]

    def buffers(self, block: np.ndarray) -> list[tuple[int, RawBurst]]:
        """The front end and the burst detectors on one block (the first half of :meth:`feed`):
        the detector buffers it completed, as (link index, buffer) in order of start."""
        ys, self._tuner = channelize_many(block, self._tuners, self._tuner)
        return self._in_order([(k, raw) for k, y in enumerate(ys) for raw in self._detect(y, k)])

    def end_buffers(self) -> list[tuple[int, RawBurst]]:
        """End of input (the first half of :meth:`flush`): the front end's last samples through the
        detectors, then the buffers the detectors still hold."""
        ys, self._tuner = flush_channels(self._tuners, self._tuner)
        found = [(k, raw) for k, y in enumerate(ys) for raw in self._detect(y, k)]
        for k, plan in enumerate(self.plans):
            held, self._detectors[k] = _bursts.flush(plan.detector, self._detectors[k])
            found += [(k, raw) for raw in held]
        return self._in_order(found)

    def _detect(self, y: np.ndarray, link: int) -> list[RawBurst]:
        found, self._detectors[link] = _bursts.detect(y, self.plans[link].detector, self._detectors[link])
        return found

    def _in_order(self, found: list[tuple[int, RawBurst]]) -> list[tuple[int, RawBurst]]:
        if len(self.plans) > 1:
            found.sort(key=lambda item: item[1].start * self.plans[item[0]].tuner.decimation)
        return found

    @property
    def front_end(self) -> FrontEndReport:
        """DC level and IQ imbalance measured on the samples fed so far."""
        return front_end_report(self._tuner.moments)

    def demodulate(self, raw: RawBurst, link: int = 0) -> list[Burst]:
        """One detector buffer of a link demodulated: its transmissions, in time order, frames not yet handed out."""
        return self.accept(demodulate_burst(raw, self.plans[link], capture=self._name), link)

    def accept(self, demodulated: list[Burst], link: int = 0) -> list[Burst]:
        """The second half of :meth:`demodulate`, for a buffer demodulated elsewhere (a
        :class:`iqdemod.burst_pool.BurstPool`): frames get their time and link name, and frames
        an overlapping piece already handed out are dropped. Buffers must come in order."""
        out = []
        name = self.names[link]
        half = 0.5 * self.plans[link].sample_rate_hz / self.plans[link].link.signal.baud
        for burst in demodulated:
            if name is not None or (burst.frames and self._start is not None):
                burst = dataclasses.replace(burst, link=name, frames=tuple(dataclasses.replace(
                    f, time_utc=None if self._start is None else _utc(self._start, f.t_s), link=name)
                    for f in burst.frames))
            if burst.piece:  # pieces of a long burst overlap: drop frames already handed out
                burst, self._last_frame_sample[link] = drop_repeats(burst, self._last_frame_sample[link], half)
            elif burst.frames:
                self._last_frame_sample[link] = max(self._last_frame_sample[link], max(f.sample for f in burst.frames))
            out.append(burst)
        return out


def _named_links(link) -> tuple[tuple[Link, ...], tuple[str | None, ...]]:
    """The links to decode and their names (None: unnamed)."""
    if isinstance(link, Link):
        return (link,), (None,)
    if isinstance(link, Mapping):
        items = list(link.items())
        names: tuple[str | None, ...] = tuple(str(k) for k, _ in items)
        links = tuple(v for _, v in items)
    else:
        links = tuple(link)
        names = (None,) * len(links)
    if not links:
        raise IqdemodError("no link to decode")
    for item in links:
        if not isinstance(item, Link):
            raise TypeError(f"expected a Link, got {type(item).__name__}")
    return links, names


@dataclass(frozen=True)
class DecodeSummary:
    """What one capture's decoding came to: bursts, frames, good frames, and the capture's defects.

    Attributes
    ----------
    bursts : int
        Detector bursts (pieces of one long burst count once).
    frames : int
        Frames whose sync word was found (raw mode: records of bits).
    good : int
        Frames whose CRC is good.
    stats : CaptureStats or None
        The reader's counts (samples read, clipped, non-finite, cut bytes).
    links : tuple of (str, int, int)
        With several named links: each link's name, frames and good frames.
    """

    bursts: int = 0
    frames: int = 0
    good: int = 0
    stats: CaptureStats | None = None
    links: tuple[tuple[str, int, int], ...] = ()

    def counted(self, burst: Burst) -> "DecodeSummary":
        """This summary with one more demodulated transmission counted."""
        links = self.links
        if links and burst.frames:
            links = tuple((name, n + sum(f.link == name for f in burst.frames),
                           good + sum(f.link == name and f.crc_ok for f in burst.frames)) for name, n, good in links)
        return dataclasses.replace(self, bursts=self.bursts + (burst.piece == 0), frames=self.frames + len(burst.frames),
                                   good=self.good + sum(f.crc_ok for f in burst.frames), links=links)


class Decoding:
    """The frames of one capture, decoded as they are iterated; its :attr:`summary` once done.

    Made by :func:`decode`. Iterate it once (it reads the capture as it goes).
    """

    def __init__(self, path, link, *, block_samples: int, progress: bool, start_time: str | None):
        self._args = (path, link, block_samples, progress, start_time)
        links, names = _named_links(link)
        self._first = links[0]  # its capture table names a raw file's datatype and rate
        # (the summary, the frames of the burst being handed out, how many of them iteration has moved
        # past), replaced whole by one assignment: a stop signal raised between two statements finds
        # the three consistent
        self._state: tuple[DecodeSummary, tuple[Frame, ...], int] = (
            DecodeSummary(links=tuple((n, 0, 0) for n in names if n is not None) if len(names) > 1 else ()), (), 0)
        self._started = False

    @property
    def summary(self) -> DecodeSummary:
        """The counts so far; complete (with the reader's stats) after the last frame."""
        return self._state[0]

    @property
    def in_hand(self) -> tuple[Frame, ...]:
        """Frames counted in :attr:`summary` that iteration has not moved past.

        A burst's frames are counted together, then handed out one by one. After a
        stop (a KeyboardInterrupt raised while the decoding ran, or while the caller
        held a frame), these are the frames the summary counts and the caller may
        not have: the first of them may be the frame the caller was given last
        (it is moved past only when the next one is asked for). Empty between bursts.
        """
        _, frames, taken = self._state
        return frames[taken:]

    def __iter__(self) -> Iterator[Frame]:
        if self._started:
            raise IqdemodError("a decoding is read once: call iqdemod.decode again")
        self._started = True
        return self._frames()

    def _frames(self) -> Iterator[Frame]:
        path, link, block_samples, progress, start_time = self._args
        first = self._first
        with contextlib.ExitStack() as stack:
            cap = path if isinstance(path, Capture) else stack.enter_context(
                open_capture(path, datatype=first.capture.datatype, sample_rate=first.capture.sample_rate)
            )
            if start_time is not None:
                if _parse_utc(start_time) is None:
                    raise IqdemodError(f"start time {quote(start_time)}: expected an RFC 3339 time such as "
                                       "2026-11-30T22:15:07Z")
                cap.info = dataclasses.replace(cap.info, start_time=start_time)
            for burst in iter_bursts(cap, link, block_samples=block_samples, progress=progress):
                self._state = (self._state[0].counted(burst), burst.frames, 0)
                for k, frame in enumerate(burst.frames, 1):
                    yield frame
                    self._state = (self._state[0], burst.frames, k)
            self._state = (dataclasses.replace(self._state[0], stats=cap.stats), (), 0)


def iter_bursts(
    capture: Capture,
    link: "Link | Sequence[Link] | Mapping[str, Link]",
    *,
    block_samples: int = DEFAULT_BLOCK_SAMPLES,
    progress: bool = False,
) -> Iterator[Burst]:
    """Demodulate every burst of an open capture, in time order.

    Parameters
    ----------
    capture : Capture
        From :func:`iqdemod.open_capture`.
    link : Link, or several (see :class:`Receiver`)
    block_samples : int
        Samples read per block; the results do not depend on it.
    progress : bool
        Show a tqdm bar (stderr) over the capture's samples.

    Yields
    ------
    Burst

    Examples
    --------
    A synthetic SigMF capture of three buoy frames at 14 dB (48 kHz,
    1200 baud, 6 kHz above the centre), read in blocks of 8192 samples:

    >>> import os, tempfile
    >>> from iqdemod.profile import load_link
    >>> from iqdemod.synth import SynthConfig, synthesize
    >>> link = load_link(None, rate=48000, baud=1200, shift=1200, offset=6000, sync="0x2DD4", sync_bits=16, length=12)
    >>> tmp = tempfile.TemporaryDirectory()
    >>> base = os.path.join(tmp.name, "buoys")
    >>> truth = synthesize(base, SynthConfig(link=link, ebn0_db=(14.0,), n_frames=3, seed=5))
    >>> with open_capture(base + ".sigmf-meta") as capture:
    ...     bursts = list(iter_bursts(capture, link, block_samples=8192))
    >>> [(len(b.frames), b.frames[0].crc_ok) for b in bursts]
    [(1, True), (1, True), (1, True)]
    >>> [b.frames[0].payload.hex() for b in bursts] == [f["payload_hex"] for f in truth["frames"]]
    True
    >>> tmp.cleanup()
    """
    yield from drive(Receiver(link, capture.info), capture, block_samples=block_samples, progress=progress)


def drive(rx: "Receiver", capture: Capture, *, block_samples: int = DEFAULT_BLOCK_SAMPLES,
          progress: bool = False) -> Iterator[Burst]:
    """Feed a whole capture through `rx` and yield its bursts; `rx` keeps its measurements.

    For a caller that needs the receiver's own figures afterwards (such as
    :attr:`Receiver.front_end`); :func:`iter_bursts` is the usual way in.

    Examples
    --------
    The receiver keeps what its front end measured (here: a synthetic
    capture without a DC offset, so its level is far below full scale):

    >>> import os, tempfile
    >>> from iqdemod.profile import load_link
    >>> from iqdemod.synth import SynthConfig, synthesize
    >>> link = load_link(None, rate=48000, baud=1200, shift=1200, offset=6000, sync="0x2DD4", sync_bits=16, length=12)
    >>> tmp = tempfile.TemporaryDirectory()
    >>> base = os.path.join(tmp.name, "buoys")
    >>> truth = synthesize(base, SynthConfig(link=link, ebn0_db=(14.0,), n_frames=3, seed=5))
    >>> with open_capture(base + ".sigmf-meta") as capture:
    ...     rx = Receiver(link, capture.info)
    ...     good = sum(f.crc_ok for b in drive(rx, capture) for f in b.frames)
    >>> good, rx.plan.rate_hz, rx.front_end.dc_dbfs < -50
    (3, 9600.0, True)
    >>> tmp.cleanup()
    """
    # A long capture's per-burst worker is started first, before any thread of ours (a progress
    # bar's monitor, the read-ahead): it may then be a copy of this process (see iqdemod.burst_pool).
    pool = BurstPool(rx.plans, rx._name) if PIPELINE and worth_a_pool(capture.info.n_samples) else None
    try:
        bar = progress_bar(capture, progress)
    except BaseException:
        if pool is not None:
            pool.close()
        raise

    def buffers(blocks: Iterator[np.ndarray]) -> Iterator[tuple[list[tuple[int, RawBurst]], int]]:
        for block in blocks:
            yield rx.buffers(block), len(block)
        yield rx.end_buffers(), 0

    if pool is not None:
        # A long capture: the per-burst work goes to a worker process (iqdemod.burst_pool). Here,
        # the reading (with the reader's conversion) and the front end with the detectors each run
        # one block ahead in a thread of their own (both release the interpreter lock for most of
        # their time), and this thread hands buffers to the pool and takes its answers.
        blocks = found = None
        try:
            blocks = _ahead(capture.blocks(block_samples))
            found = _ahead(buffers(blocks), wait=None)  # each step is one block of a file: it ends
            yield from _pooled(pool, rx, found, bar)
        finally:  # the front end's thread first: it may be waiting on the reader's
            pool.close()
            for ahead in (found, blocks):
                if ahead is not None:
                    ahead.close()
            if bar is not None:
                bar.close()
        return
    # Reading, the front end and the burst detector run one block ahead in a second thread
    # while this one demodulates: the FFTs and reads release the interpreter lock, the
    # per-burst work mostly holds it, so both cores work. The order of everything is unchanged.
    source = _ahead(buffers(capture.blocks(block_samples))) if PIPELINE else buffers(capture.blocks(block_samples))
    try:
        for found, n in source:
            for k, raw in found:
                yield from rx.demodulate(raw, k)
            if bar is not None and n:
                bar.update(n)
    finally:
        source.close()
        if bar is not None:
            bar.close()


PIPELINE = True  # batch workers, one process per core, turn this off


def _pooled(pool: BurstPool, rx: "Receiver", source: Iterator[tuple[list[tuple[int, RawBurst]], int]], bar
            ) -> Iterator[Burst]:
    """:func:`drive` with the per-burst work shared with a worker process: `source` gives each block's
    detector buffers. The caller closes the pool."""
    for found, n in source:
        for k, raw in found:
            pool.put(k, raw)
        for k, bursts in pool.ready():
            yield from rx.accept(bursts, k)
        if bar is not None and n:
            bar.update(n)
    for k, bursts in pool.finish():
        yield from rx.accept(bursts, k)


def _ahead(items: Iterator, depth: int = 2, *, wait: float | None = 5.0) -> Iterator:
    """`items` produced by a second thread, at most `depth` ahead; its exceptions come through here.

    Closed early, it stops the thread at its next item and waits for it up to `wait` seconds
    (None: until it has ended, for a thread that itself iterates another `_ahead`, which may be
    closed only once nothing runs it)."""
    done = object()
    slots: queue.Queue = queue.Queue(maxsize=depth)
    stop = threading.Event()

    def put(item) -> bool:
        while not stop.is_set():
            try:
                slots.put(item, timeout=0.1)
                return True
            except queue.Full:
                continue
        return False

    def run() -> None:
        leave_signals_to_main()
        try:
            for item in items:
                if not put((None, item)):
                    return
            put((None, done))
        except BaseException as exc:  # handed to the consumer, raised there
            put((exc, None))

    worker = threading.Thread(target=run, name="iqdemod-front-end", daemon=True)
    worker.start()
    try:
        while True:
            try:  # a wait that wakes up: a stop signal is acted on even if the system handed it to a thread
                exc, item = slots.get(timeout=WAKE_S)
            except queue.Empty:
                continue
            if exc is not None:
                raise exc
            if item is done:
                return
            yield item
    finally:
        stop.set()
        deadline = None if wait is None else time.monotonic() + wait
        while worker.is_alive() and (deadline is None or time.monotonic() < deadline):
            worker.join(timeout=WAKE_S)


def decode(
    path: str | Path | Capture,
    link: "Link | Sequence[Link] | Mapping[str, Link]",
    *,
    block_samples: int = DEFAULT_BLOCK_SAMPLES,
    progress: bool = False,
    start_time: str | None = None,
) -> Decoding:
    """Decode the frames of a capture, in time order.

    Parameters
    ----------
    path : str, Path or Capture
        A capture file (see :func:`iqdemod.open_capture`) or an open capture
        (also a :class:`iqdemod.live.LiveCapture` read as it arrives).
    link : Link, or a sequence of them, or a mapping of name to Link
        From :func:`iqdemod.load_link` (or :func:`iqdemod.load_links`). The
        first link's ``capture`` table supplies datatype and rate for raw
        files. Several links are decoded in one pass over the capture; named
        ones tag their frames with ``link``, and frames of different links
        come interleaved as their bursts end.
    start_time : str, optional
        When the capture began (RFC 3339, e.g. ``2026-11-30T22:15:07Z``), for
        raw files that do not say; it overrides a SigMF ``core:datetime``.
        Frames then carry ``time_utc``.

    Returns
    -------
    Decoding
        Iterate it for every frame whose sync word was found, good CRC or bad
        (raw mode: one record per burst), as the capture is read; its
        ``summary`` (:class:`DecodeSummary`) is complete after the last one.

    Examples
    --------
    Three buoy frames synthesized at 14 dB into a SigMF capture that began
    at 22:15:07 UTC; every payload comes back with a good CRC and its time:

    >>> import os, tempfile
    >>> from iqdemod.profile import load_link
    >>> from iqdemod.synth import SynthConfig, payload_bit_errors, synthesize
    >>> link = load_link(None, rate=48000, baud=1200, shift=1200, offset=6000, sync="0x2DD4", sync_bits=16, length=12)
    >>> tmp = tempfile.TemporaryDirectory()
    >>> base = os.path.join(tmp.name, "buoys")
    >>> truth = synthesize(base, SynthConfig(link=link, ebn0_db=(14.0,), n_frames=3, seed=5,
    ...                                      start_time="2026-11-30T22:15:07Z"))
    >>> decoding = decode(base + ".sigmf-meta", link)
    >>> frames = list(decoding)
    >>> [(f.payload.hex()[:6], f.crc_ok, f.time_utc[11:23]) for f in frames]
    [('b00000', True, '22:15:07.046'), ('b10001', True, '22:15:07.197'), ('b20002', True, '22:15:07.348')]
    >>> decoding.summary.frames, decoding.summary.good, decoding.summary.stats.samples_read
    (3, 3, 23617)
    >>> payload_bit_errors(frames, truth)  # (errors, bits compared, frames matched)
    (0, 288, 3)
    >>> tmp.cleanup()
    """
    return Decoding(path, link, block_samples=block_samples, progress=progress, start_time=start_time)
