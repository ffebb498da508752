"""Finding sync words without a symbol clock.

Every transmission in a detector buffer starts with its sync word; finding each one first lets the
receiver synchronise every transmission on its own (:mod:`iqdemod.demod`).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from .framing import sync_symbols

if TYPE_CHECKING:
    from .plan import ReceiverPlan

__all__ = ["sync_candidates", "sync_scores", "merge_candidates", "SYNC_THRESHOLD"]

SCORE_STEP = 2  # samples between the sync search's score evaluations
SYNC_THRESHOLD = 0.5  # a candidate needs half the score of a noise-free sync word; a candidate costs only a look


def sync_candidates(sums: np.ndarray, plan: ReceiverPlan, *, threshold: float = SYNC_THRESHOLD) -> list[tuple[float, float]]:
    """Where the sync word starts in a buffer, found without a symbol clock.

    The soft decision d(t) = |z1(t)|² − |z0(t)|² of a one-symbol correlator
    window starting at every sample t is correlated with the sync word's
    pattern (its symbols on the air) at the symbol spacing: score(t) =
    Σ_i s_i·d(t + i·T), s_i = ±1, normalised by Σ_i (|z0|² + |z1|²). This is a
    matched filter for the sync word on the square-law statistics (the
    frame-synchronisation correlator of Massey, "Optimum frame
    synchronization", IEEE Trans. Commun. 20(2), 1972, cited from memory, in
    its large-SNR form). A noise-free sync word of orthogonal rectangular
    tones scores 1; tones that leak into each other (h not whole) or a
    Gaussian pulse score less, so `threshold` is taken relative to what a
    noise-free sync word of this link scores (:attr:`ReceiverPlan.sync_score`).
    Local maxima above it, at least half a sync word apart, are the
    candidates.

    Returns
    -------
    list of (position, score)
        Sample positions (cumulative-sum convention) of the sync word's first
        symbol, strongest first; the score relative to the noise-free one.

    Examples
    --------
    A buoy frame (32 preamble symbols, a 16-bit sync word, 12 bytes and a
    CRC) at 8 samples per symbol, after 400 samples of noise: the strongest
    candidate is the sync word's first symbol, 400 + 32·8 = 656:

    >>> import numpy as np
    >>> from iqdemod.correlate import tone_sums
    >>> from iqdemod.framing import frame_bits
    >>> from iqdemod.plan import plan_receiver
    >>> from iqdemod.profile import load_link
    >>> link = load_link(None, baud=1200, shift=1200, offset=6000, sync="0x2DD4", sync_bits=16, length=12)
    >>> plan = plan_receiver(link, 48000)  # 9.6 kHz after the tuner, tones ±600 Hz
    >>> bits = np.concatenate([np.tile([1, 0], 16), frame_bits(b"buoy-7 12.5C", link.frame)])
    >>> x = np.exp(2j * np.pi * np.cumsum(np.repeat(np.where(bits == 1, 600.0, -600.0), 8)) / 9600)
    >>> rng = np.random.default_rng(4)
    >>> y = np.concatenate([np.zeros(400), x, np.zeros(400)])
    >>> y = y + 0.1 * (rng.standard_normal(len(y)) + 1j * rng.standard_normal(len(y)))
    >>> position, score = sync_candidates(tone_sums(y, plan.rate_hz, plan.tones_hz), plan)[0]
    >>> position, round(score, 2)
    (656.0, 0.99)
    """
    norm = sync_scores(sums, plan) / plan.sync_score
    above = np.flatnonzero(norm >= threshold)
    if above.size == 0:
        return []
    # only local maxima can be candidates (a peak is some samples wide): few to look at in Python
    inner = above[(above > 0) & (above < len(norm) - 1)]
    peaks = inner[(norm[inner] >= norm[inner - 1]) & (norm[inner] >= norm[inner + 1])]
    edges = above[(above == 0) | (above == len(norm) - 1)]
    return merge_candidates([(float(t), float(norm[t])) for t in np.concatenate([peaks, edges])], [], plan)


def merge_candidates(a: list[tuple[float, float]], b: list[tuple[float, float]], plan: ReceiverPlan
                      ) -> list[tuple[float, float]]:
    """Two candidate lists as one, strongest first, keeping the best of those within half a sync word
    (the one non-maximum suppression of the sync search; ties keep the earlier).

    Examples
    --------
    Candidates closer than half a sync word (16 symbols of 8 samples: 64
    samples) are one; the stronger stays:

    >>> from iqdemod.plan import plan_receiver
    >>> from iqdemod.profile import load_link
    >>> link = load_link(None, baud=1200, shift=1200, offset=6000, sync="0x2DD4", sync_bits=16, length=12)
    >>> plan = plan_receiver(link, 48000)
    >>> merge_candidates([(656.0, 0.98)], [(650.0, 0.91), (1500.0, 0.6)], plan)
    [(656.0, 0.98), (1500.0, 0.6)]
    """
    radius = len(sync_symbols(plan.link.frame)) * plan.period / 2
    out: list[tuple[float, float]] = []
    for pos, score in sorted(a + b, key=lambda c: -c[1]):
        if all(abs(pos - p) > radius for p, _ in out):
            out.append((pos, score))
    return out


def sync_scores(sums: np.ndarray, plan: ReceiverPlan) -> np.ndarray:
    """The normalised sync-word score at every start sample (see :func:`sync_candidates`).

    The score is evaluated every ``SCORE_STEP`` samples (a sync word's peak is
    several samples wide, and its position is refined by the transmission's
    own timing) and held in between.

    Examples
    --------
    A noise-free frame of the buoy link (see :func:`sync_candidates`): the
    score peaks where the sync word starts, at what a noise-free sync word
    of this link scores (:attr:`ReceiverPlan.sync_score`):

    >>> import numpy as np
    >>> from iqdemod.correlate import tone_sums
    >>> from iqdemod.framing import frame_bits
    >>> from iqdemod.plan import plan_receiver
    >>> from iqdemod.profile import load_link
    >>> link = load_link(None, baud=1200, shift=1200, offset=6000, sync="0x2DD4", sync_bits=16, length=12)
    >>> plan = plan_receiver(link, 48000)
    >>> bits = np.concatenate([np.tile([1, 0], 16), frame_bits(b"buoy-7 12.5C", link.frame)])
    >>> x = np.exp(2j * np.pi * np.cumsum(np.repeat(np.where(bits == 1, 600.0, -600.0), 8)) / 9600)
    >>> score = sync_scores(tone_sums(x, plan.rate_hz, plan.tones_hz), plan)
    >>> int(np.argmax(score)), round(float(score.max() / plan.sync_score), 2)
    (256, 1.0)
    """
    T = plan.period
    pattern = sync_symbols(plan.link.frame).astype(np.float64) * 2 - 1
    n_sync = len(pattern)
    n = sums.shape[1] - 1
    whole = int(np.floor(T))
    m = n - whole - 1
    span = int(round((n_sync - 1) * T))
    if m - span < 1:
        return np.zeros(0)
    frac = T - whole
    k = SCORE_STEP
    z = ((1.0 - frac) * sums[:, whole : whole + m : k] + frac * sums[:, whole + 1 : whole + 1 + m : k]
         - sums[:, :m:k])
    p = z.real**2 + z.imag**2
    d = p[1] - p[0]
    e = p[1] + p[0]
    offsets = np.round(np.arange(n_sync) * T / k).astype(np.intp)
    width = (m - span - 1) // k + 1
    width = min(width, len(d) - int(offsets[-1]))
    score = np.zeros(width)
    energy = np.zeros(width)
    for s_i, o in zip(pattern, offsets):
        score += s_i * d[o : o + width]
        energy += e[o : o + width]
    return np.repeat(score / np.maximum(energy, 1e-300), k)[: m - span]
