"""Link health: Eb/N0 from the decision statistics, predicted against observed error rates.

For a capture this stage answers: how strong is the link (Eb/N0 with a 90 %
interval), what bit and frame error rates detection theory predicts at that
strength for this link's tone spacing and measured residual frequency error,
whether the CRC failures actually seen agree (exact binomial test), how much
margin is left to a target BER, and how far the transmitter's carrier and
symbol clock are off.

Eb/N0 per capture combines the data-aided estimate over frames whose CRC
passed and the blind estimate over bursts without a good frame, weighted by
symbols. Predictions are made at the *decision* SNR (the receiver's noise
bandwidth, :attr:`iqdemod.receiver.ReceiverPlan.noise_bandwidth_ratio`, makes
it slightly higher than Eb/N0), so that they speak of the decisions this
receiver actually made.

A capture may hold bursts of different strength. Each burst's prediction uses
its own Eb/N0 shrunk towards the capture's pooled value by the empirical-Bayes
(James–Stein) rule of Efron & Morris (J. Amer. Statist. Assoc. 68, 1973): when
the bursts are alike the noise of a single burst's estimate does not inflate
the predicted error rate, and when they differ each keeps its own.

This module decodes a capture and assesses it (:func:`assess`,
:func:`assess_with_frames`; several links in one pass: :func:`assess_links`), and offers every name of the stage; the report
and its accumulator are in :mod:`iqdemod.health_accumulator`, the link's
theory and the per-burst prediction in :mod:`iqdemod.health_prediction`.
"""

from __future__ import annotations

import contextlib
from pathlib import Path
from typing import Mapping

from .capture import Capture, DEFAULT_BLOCK_SAMPLES, open_capture
from .errors import IqdemodError
from .health_accumulator import HIST_EDGES_DB, HealthAccumulator, HealthReport, check_target_ber
from .link import Link
from .receiver import Frame, Receiver, drive

__all__ = ["HealthReport", "HealthAccumulator", "assess", "assess_with_frames", "assess_links", "HIST_EDGES_DB"]


def assess(capture: str | Path | Capture, link: Link, *, target_ber: float = 1e-5,
           block_samples: int = DEFAULT_BLOCK_SAMPLES, progress: bool = False) -> HealthReport:
    """Decode a capture and assess its link health.

    Parameters
    ----------
    capture : str, Path or Capture
        A capture file (see :func:`iqdemod.open_capture`) or an open capture.
    link : Link
    target_ber : float
        The BER the margin is measured against, within (0, 0.5).
    block_samples : int
        Samples read per block; the results do not depend on it.
    progress : bool
        Show a tqdm bar (stderr) over the capture's samples.

    Returns
    -------
    HealthReport

    See Also
    --------
    assess_with_frames : the same, and every decoded frame.

    Examples
    --------
    Twenty frames of a 4800 Bd link with orthogonal tones (h = 1), made at
    14 dB by the project's generator. This link needs 13.3525 dB for BER
    1e-5 in theory (½·exp(−Eb/2N0), REFERENCE §1):

    >>> import tempfile
    >>> from iqdemod.profile import load_link
    >>> from iqdemod.synth import SynthConfig, synthesize
    >>> link = load_link(None, baud=4800, shift=4800, sync="0x9B3C57E1", length="24",
    ...                  crc="CRC-16/IBM-3740", rate=250_000)
    >>> with tempfile.TemporaryDirectory() as d:
    ...     _ = synthesize(f"{d}/buoy", SynthConfig(link=link, ebn0_db=(14.0,), n_frames=20, seed=3))
    ...     r = assess(f"{d}/buoy.sigmf-meta", link)
    >>> r.frames, r.frames_crc_ok, abs(r.ebn0_db - 14.0) < 0.3
    (20, 20, True)
    >>> round(r.theory_ebn0_needed_db, 4)
    13.3525
    >>> r.ebn0_needed_db == r.theory_ebn0_needed_db - r.decision_gain_db
    True
    """
    [(report, _)] = _assess(capture, link, target_ber=target_ber, block_samples=block_samples, progress=progress,
                            keep_frames=False)
    return report


def assess_with_frames(capture: str | Path | Capture, link: Link, *, target_ber: float = 1e-5,
                       block_samples: int = DEFAULT_BLOCK_SAMPLES,
                       progress: bool = False) -> tuple[HealthReport, tuple[Frame, ...]]:
    """Decode a capture, assess its link health, and hand back every frame decoded.

    Parameters are those of :func:`assess`.

    Returns
    -------
    report : HealthReport
    frames : tuple of Frame
        Every frame of the capture in time order, good CRC or bad (raw mode:
        one record per burst); the same frames :func:`iqdemod.decode` yields.

    Examples
    --------
    Five frames from one buoy at 14 dB, assessed from a capture opened by
    the caller (which stays the caller's to close):

    >>> import tempfile
    >>> from iqdemod.capture import open_capture
    >>> from iqdemod.profile import load_link
    >>> from iqdemod.synth import SynthConfig, synthesize
    >>> buoy = load_link(None, rate=250_000, baud=4800, shift=4800, sync="0x9B3C57E1", crc="CRC-16/IBM-3740",
    ...                  length="24")
    >>> with tempfile.TemporaryDirectory() as d:
    ...     truth = synthesize(f"{d}/buoy", SynthConfig(link=buoy, ebn0_db=(14.0,), n_frames=5, seed=3))
    ...     with open_capture(f"{d}/buoy.sigmf-meta") as cap:
    ...         report, frames = assess_with_frames(cap, buoy)
    >>> report.frames, len(frames), all(f.crc_ok for f in frames)
    (5, 5, True)
    """
    [(report, frames)] = _assess(capture, link, target_ber=target_ber, block_samples=block_samples,
                                 progress=progress, keep_frames=True)
    return report, frames


def assess_links(capture: str | Path | Capture, links: Mapping[str, Link], *, target_ber: float = 1e-5,
                 block_samples: int = DEFAULT_BLOCK_SAMPLES, progress: bool = False,
                 keep_frames: bool = True) -> dict[str, tuple[HealthReport, tuple[Frame, ...]]]:
    """Decode several links of a capture in one pass and assess each link's health.

    The capture is read once and one front-end pass serves every link
    (:class:`iqdemod.receiver.Receiver`); each link's bursts go to its own
    accumulator, so each report is what :func:`assess` gives that link alone (to
    within the shared front end's pass-band ripple).
    The capture-wide figures (duration, clipping, the recording receiver's DC
    and IQ imbalance, warnings) are the same in every report.

    Parameters
    ----------
    capture : str, Path or Capture
        A capture file (see :func:`iqdemod.open_capture`; the first link's
        ``capture`` table names a raw file's datatype and rate) or an open capture.
    links : mapping of str to Link
        The links by name (:func:`iqdemod.load_links`); frames carry the name as ``link``.
    target_ber, block_samples, progress
        As for :func:`assess`.
    keep_frames : bool
        Hand back every frame of each link (else empty tuples).

    Returns
    -------
    dict of str to (HealthReport, tuple of Frame)
        By link name, in the order of `links`.

    Raises
    ------
    TypeError
        When `links` is not a mapping of names to links.

    Examples
    --------
    Two buoys 60 kHz apart on one raw cf32_le capture, four frames each at
    14 dB (each made by the project's generator, the two recordings added):
    each link's report counts its own frames, and its frames carry its name.

    >>> import tempfile
    >>> import numpy as np
    >>> from iqdemod.capture import open_capture
    >>> from iqdemod.files import atomic_writer
    >>> from iqdemod.profile import load_link
    >>> from iqdemod.synth import SynthConfig, synthesize
    >>> kw = dict(rate=250_000, baud=4800, shift=4800, sync="0x9B3C57E1", length="24", crc="CRC-16/IBM-3740")
    >>> links = {"north": load_link(None, offset=-30_000, **kw), "south": load_link(None, offset=30_000, **kw)}
    >>> with tempfile.TemporaryDirectory() as d:
    ...     parts = []
    ...     for seed, (name, link) in enumerate(links.items()):
    ...         _ = synthesize(f"{d}/{name}", SynthConfig(link=link, ebn0_db=(14.0,), n_frames=4, seed=seed))
    ...         with open_capture(f"{d}/{name}.sigmf-meta") as cap:
    ...             parts.append(np.concatenate(list(cap.blocks())))
    ...     n = min(len(p) for p in parts)
    ...     with atomic_writer(f"{d}/both.cf32_le", "wb", encoding=None) as fh:
    ...         _ = fh.write((parts[0][:n] + parts[1][:n]).astype(np.complex64).tobytes())
    ...     out = assess_links(f"{d}/both.cf32_le", links)
    >>> {name: (r.frames, r.frames_crc_ok, {f.link for f in frames}) for name, (r, frames) in out.items()}
    {'north': (4, 4, {'north'}), 'south': (4, 4, {'south'})}
    """
    if not isinstance(links, Mapping):
        raise TypeError(f"links: expected a mapping of names to links, got {type(links).__name__}")
    results = _assess(capture, links, target_ber=target_ber, block_samples=block_samples, progress=progress,
                      keep_frames=keep_frames)
    return dict(zip((str(name) for name in links), results))


def _assess(capture, link: Link | Mapping[str, Link], *, target_ber: float, block_samples: int, progress: bool,
            keep_frames: bool) -> list[tuple[HealthReport, tuple[Frame, ...]]]:
    """One pass over `capture` for one link or several by name: (report, frames) per link, in order."""
    check_target_ber(target_ber)
    first = link if isinstance(link, Link) else next(iter(link.values()), None)
    if first is None:
        raise IqdemodError("no link to assess")
    with contextlib.ExitStack() as stack:
        cap = capture if isinstance(capture, Capture) else stack.enter_context(
            open_capture(capture, datatype=first.capture.datatype, sample_rate=first.capture.sample_rate)
        )
        rx = Receiver(link, cap.info)
        accumulators = [HealthAccumulator(plan) for plan in rx.plans]
        frames: list[list[Frame]] = [[] for _ in rx.plans]
        which = {name: k for k, name in enumerate(rx.names)}  # a single unnamed link: None -> 0
        for burst in drive(rx, cap, block_samples=block_samples, progress=progress):
            k = which[burst.link]
            accumulators[k].add(burst)
            if keep_frames:
                frames[k].extend(burst.frames)
        return [(acc.report(
            capture=Path(cap.info.path).name,
            duration_s=cap.info.duration_s,
            clipped_fraction=cap.stats.clipped_fraction,
            target_ber=target_ber,
            warnings=cap.stats.warnings(),
            start_time=cap.info.start_time,
            front_end=rx.front_end,
        ), tuple(found)) for acc, found in zip(accumulators, frames)]
