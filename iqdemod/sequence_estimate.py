"""Pulse-aware Eb/N0 estimation for continuous-phase and Gaussian FSK.

The estimators of :mod:`iqdemod.estimate` work on the two one-symbol tone
correlators and assume orthogonal tones; with a Gaussian pulse, or h ≠ 1, the
tones leak into each other and the symbols into their neighbours. Here the
known (or decided) bits are turned back into the phase-continuous waveform of
the link's pulse (:mod:`iqdemod.sequence`), the samples are fitted with it by
least squares in short sub-windows, and the signal comes from the fit, the
noise from the residual. The results are :class:`iqdemod.estimate.EbN0Estimate`
with the same meaning of ``ebn0_db`` (A²·T/σ² per symbol with unit-amplitude
references: the Es/N0 of a full-band integrate-and-dump).
"""

from __future__ import annotations

import math

import numpy as np

from .errors import LinkError
from .estimate import Z90, EbN0Estimate
from .estimate_result import db_or_minus_inf
from .sequence import SequenceDecisions, SequencePlan, check_inputs, detect, slot_samples

__all__ = ["estimate_sequence_data_aided", "estimate_sequence_decision_directed"]


def _known_fit(x, starts, period, bits, plan, sub_window):
    """Sums of the data-aided fit: (U, V, q, C).

    U: energy of the projection onto the known waveform and its first-order
    phase drift, summed over sub-windows; V: residual energy; q: complex
    signal dimensions fitted (2 per sub-window); C: samples used.
    """
    c = plan.context
    k = starts.size
    bits = np.asarray(bits)
    if bits.shape != starts.shape:
        raise LinkError(f"bits shape {bits.shape}: must match starts, {starts.shape}")
    if not np.all((bits == 0) | (bits == 1)):
        raise LinkError("bits: every value must be 0 or 1")
    use = np.arange(c, k - c)  # slots whose whole pattern is known
    if use.size < 2:
        raise LinkError(f"{k} symbols: need at least {2 * c + 2} for a data-aided fit")
    xg, f, valid, idx = slot_samples(x, starts[use], period)
    u = (f[:, None] + np.arange(xg.shape[1])[None, :]) / period
    cnt = valid.sum(axis=1).astype(np.float64)
    b = bits.astype(np.int64)
    weights = 1 << np.arange(2 * c, -1, -1)
    pat = np.stack([b[use + d] for d in range(-c, c + 1)], axis=1) @ weights
    psi = plan.pattern_phases(u, pat)  # (K', M): each slot's own pattern
    a = (2 * b - 1) * plan.tone_sign
    acc = np.concatenate([[0], np.cumsum(a)])
    theta = np.pi * plan.h * acc[use - c]  # bits before each slot's pattern
    w = np.where(valid, np.exp(-1j * (psi + theta[:, None])), 0.0)
    t = np.where(valid, idx + 0.5, 0.0)
    y1 = np.sum(xg * w, axis=1)
    y2 = np.sum(t * xg * w, axis=1)
    energy = np.sum(np.abs(xg) ** 2, axis=1)
    st = t.sum(axis=1)
    stt = np.sum(t * t, axis=1)
    groups = np.arange(0, use.size, sub_window)
    if use.size - groups[-1] < max(2, sub_window // 2) and groups.size > 1:
        groups = groups[:-1]  # a short tail joins the last sub-window
    red = lambda v: np.add.reduceat(v, groups)
    u1, u2, cg, t1, t2, eg = red(y1), red(y2), red(cnt), red(st), red(stt), red(energy)
    tbar = t1 / cg
    e2 = t2 - t1 * tbar
    proj = np.abs(u1) ** 2 / cg + np.abs(u2 - tbar * u1) ** 2 / e2
    resid = np.maximum(eg - proj, 0.0)
    return float(proj.sum()), float(resid.sum()), 2.0 * groups.size, float(cg.sum())


def _estimate_from_fit(fit, period, n_symbols, method, noise_bandwidth):
    """Eb/N0 and its interval from the fit's sums, the noise filling `noise_bandwidth` of the band.

    With N0' the variance per sample the noise would have if it were white
    over the whole band of x (the REFERENCE §8 σ² in the units of x), the
    noise fills b·C of the C sample dimensions and the fitted subspace (inside
    the signal's band, where the noise density is full) takes q of them:
    E[V] = N0'·(b·C − q) and E[U] = A²·C + q·N0'. V/N0' is about Gamma(ν),
    ν = b·C − q, so (ν − 1)·U/V is unbiased for A²·C/N0' + q.
    """
    big_u, big_v, q, c_total = fit
    nu = noise_bandwidth * c_total - q
    if not big_v > 0:
        raise LinkError("residual energy 0: no noise to measure")
    if not nu > 2:
        raise LinkError(f"{c_total:.0f} samples at noise bandwidth {noise_bandwidth}: too few to measure the noise")
    scale = period / c_total
    shifted = (nu - 1.0) * big_u / big_v
    rho = scale * (shifted - q)
    s_dims = max(shifted - q, 0.0)
    # Delta method on log(shifted): Var U = (q + 2·S)·N0'², Var V = ν·N0'² (N0' = 1 here).
    se = math.sqrt((q + 2.0 * s_dims) / max(s_dims + q, 1e-300) ** 2 + 1.0 / nu)
    lo = scale * (shifted * math.exp(-Z90 * se) - q)
    hi = scale * (shifted * math.exp(Z90 * se) - q)
    return EbN0Estimate(db_or_minus_inf(rho), (db_or_minus_inf(lo), db_or_minus_inf(max(hi, lo))), n_symbols, method)


def estimate_sequence_data_aided(
    x,
    starts,
    period_samples: float,
    bits,
    plan: SequencePlan,
    *,
    sub_window: int = 8,
    offset_hz: float = 0.0,
    rate_hz: float | None = None,
    noise_bandwidth: float = 1.0,
) -> EbN0Estimate:
    """Pulse-aware data-aided Eb/N0 from symbols whose bits are known (a frame whose CRC passed).

    The known phase-continuous waveform s is rebuilt from `bits` and the
    plan's pulse. In sub-windows of `sub_window` symbols the samples are
    fitted by least squares on s and (t − t̄)·s: a complex amplitude and its
    first-order change, so a residual carrier offset or a slow phase drift of
    the receiver is absorbed rather than counted as noise. With U the energy of
    the fits, V the residual energy, q = 2 complex dimensions per sub-window,
    C the samples used, b the noise bandwidth (below) and ν = b·C − q the noise
    dimensions left::

        Eb/N0 = period · ((ν − 1)·U/V − q) / C

    Under the model (Gaussian noise, white over the share b of the band of
    `x`, the right pulse) V/N0' is Gamma(ν) and U/N0' − q estimates
    A²·C/N0', so the estimate is unbiased; N0' is the noise variance per
    sample the noise would have if it filled the whole band. Slots whose
    pulse context is not all known (`context` at each end) are left out. The
    interval (90 %) is the delta method on log((ν − 1)·U/V) with
    Var U = (q + 2·S)·N0'² and Var V = ν·N0'².

    The result follows :class:`iqdemod.estimate.EbN0Estimate`'s convention
    (A²·T/N0' per symbol, the Es/N0 of a full-band integrate-and-dump with
    unit-amplitude references), which for white noise at the rate of `x`
    is the Eb/N0 of REFERENCE §8, and with the tuner's `noise_bandwidth`
    is that Eb/N0 at the capture's own rate: no further noise-bandwidth
    correction applies. It carries no pooling sums (``pool`` falls back to a
    symbol-weighted mean), and needs no tone-leakage correction: the fit uses
    the whole waveform, not two tones.

    Parameters
    ----------
    x, starts, period_samples, plan, offset_hz, rate_hz
        As for :func:`iqdemod.sequence.detect`; `starts` are the slots of the known symbols.
    bits : array_like of {0, 1}
        The bit of every slot in `starts`.
    sub_window : int
        Symbols per fit (>= 2); shorter follows faster phase drift, at a small
        cost in variance (2 dimensions per sub-window are fitted).
    noise_bandwidth : float
        b: the share of the band of `x` that its noise fills, i.e. the
        noise-equivalent bandwidth of the filtering ahead of `x` divided by
        its sample rate (1 for white noise; for the receiver's tuner,
        decimation × Σ taps² with taps of unit DC gain, 0.41–0.78 for the
        usual links). The fit removes its q dimensions from the b·C that the
        noise occupies, not from C: with the tuner's b = 0.41 and 8-symbol
        sub-windows that difference alone is 0.2 dB.

    Returns
    -------
    EbN0Estimate
        ``method = "data-aided"``.

    Examples
    --------
    GFSK at 12 dB (REFERENCE §8: Eb/N0 = A²·(fs/Rb)/σ², here A = 1 and 8 samples per symbol):

    >>> from iqdemod.sequence import phase_trajectory, plan_sequence
    >>> plan = plan_sequence(h=0.5, pulse="gaussian", bt=0.5)
    >>> rng = np.random.default_rng(1)
    >>> bits = rng.integers(0, 2, 2000)
    >>> x = np.exp(1j * phase_trajectory(bits, np.arange(16000) / 8, plan))
    >>> sigma2 = 8 / 10 ** 1.2
    >>> x = x + np.sqrt(sigma2 / 2) * (rng.standard_normal(16000) + 1j * rng.standard_normal(16000))
    >>> est = estimate_sequence_data_aided(x, np.arange(2000) * 8.0 + 0.5, 8.0, bits, plan)
    >>> abs(est.ebn0_db - 12.0) < 0.2
    True
    """
    if not isinstance(plan, SequencePlan):
        raise LinkError("plan: must be a SequencePlan (see plan_sequence)")
    if isinstance(sub_window, bool) or int(sub_window) != sub_window or sub_window < 2:
        raise LinkError(f"sub_window {sub_window!r}: must be an integer >= 2")
    nb = float(noise_bandwidth)
    if not (math.isfinite(nb) and 0 < nb <= 2.0):
        raise LinkError(f"noise_bandwidth {noise_bandwidth!r}: must be within (0, 2] (a ratio of bandwidths)")
    x, starts, period = check_inputs(x, starts, period_samples, offset_hz, rate_hz)
    fit = _known_fit(x, starts, period, bits, plan, int(sub_window))
    n_used = max(1, starts.size - 2 * plan.context)
    return _estimate_from_fit(fit, period, n_used, "data-aided", nb)


def estimate_sequence_decision_directed(
    x,
    starts,
    period_samples: float,
    plan: SequencePlan,
    *,
    decisions: SequenceDecisions | None = None,
    sub_window: int = 8,
    offset_hz: float = 0.0,
    rate_hz: float | None = None,
    noise_bandwidth: float = 1.0,
) -> EbN0Estimate:
    """Eb/N0 with the detector's own decisions taken as the known bits.

    The same fit as :func:`estimate_sequence_data_aided`. A wrong decision
    puts part of the signal into the residual, so the estimate reads low when
    bits are wrong (at about 1e-3 bit errors it is a few hundredths of a dB;
    the figures are in ``checks/sequence_detector.py``); there is no bias map.

    Parameters
    ----------
    decisions : SequenceDecisions, optional
        From :func:`iqdemod.sequence.detect` on the same samples; computed when not given.
    Other parameters as for :func:`estimate_sequence_data_aided`.

    Returns
    -------
    EbN0Estimate
        ``method = "decision-directed-raw"`` (no bias removed).

    Examples
    --------
    GFSK (h = 0.5, BT = 0.5) at 12 dB (REFERENCE §8: Eb/N0 = A²·(fs/Rb)/σ², here
    A = 1 and 8 samples per symbol); the detector's own decisions stand in for
    the bits:

    >>> from iqdemod.sequence import phase_trajectory, plan_sequence
    >>> plan = plan_sequence(h=0.5, pulse="gaussian", bt=0.5)
    >>> rng = np.random.default_rng(1)
    >>> bits = rng.integers(0, 2, 1000)
    >>> x = np.exp(1j * phase_trajectory(bits, np.arange(8000) / 8, plan))
    >>> sigma2 = 8 / 10 ** 1.2
    >>> x = x + np.sqrt(sigma2 / 2) * (rng.standard_normal(8000) + 1j * rng.standard_normal(8000))
    >>> est = estimate_sequence_decision_directed(x, np.arange(1000) * 8.0 + 0.5, 8.0, plan)
    >>> est.method, abs(est.ebn0_db - 12.0) < 0.2, est.ci90_db[0] < est.ebn0_db < est.ci90_db[1]
    ('decision-directed-raw', True, True)
    """
    if not isinstance(plan, SequencePlan):
        raise LinkError("plan: must be a SequencePlan (see plan_sequence)")
    if decisions is None:
        decisions = detect(x, starts, period_samples, plan, offset_hz=offset_hz, rate_hz=rate_hz)
    bits = decisions.bits
    if bits.size != np.asarray(starts).size:
        raise LinkError(f"decisions for {bits.size} symbols: starts has {np.asarray(starts).size}")
    est = estimate_sequence_data_aided(x, starts, period_samples, bits, plan, sub_window=sub_window,
                                       offset_hz=offset_hz, rate_hz=rate_hz, noise_bandwidth=noise_bandwidth)
    return EbN0Estimate(est.ebn0_db, est.ci90_db, est.n_symbols, "decision-directed-raw")
