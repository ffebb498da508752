"""Bit error rates of the one-symbol correlator bank on what it really receives.

The closed forms of :mod:`iqdemod.predict_closed_form` assume each symbol slot
holds one rectangular tone. Two of the project's links do not send that:

* a Manchester bit is two chips on opposite tones, whose square-law
  statistics the receiver sums (square-law combining of L branches, Proakis,
  *Digital Communications*, the chapter on diversity; REFERENCE §10);
* a Gaussian (or any continuous-phase) frequency pulse reaches into the
  neighbouring slots, so the bank sees a segment that depends on the bits
  around it (the mismatched-correlator result of REFERENCE §3, averaged over
  the bit patterns the pulse spans; the continuous-phase model is Proakis,
  *Digital Communications*, the CPM section, and the Gaussian pulse Murota &
  Hirade, IEEE Trans. Commun. 29(7), 1981, from memory, as in
  :mod:`iqdemod.sequence`).

:mod:`iqdemod.predict` offers every name.
"""

from __future__ import annotations

import functools
import math

import numpy as np
from scipy import special

from iqdemod.errors import EstimateError
from iqdemod.predict_args import ebn0_array, finite_link_numbers, scalar_or_array, whole_number
from iqdemod.predict_closed_form import pb_square_law, tones_apart
from iqdemod.sequence import phase_trajectory, plan_sequence

__all__ = ["pb_square_law_combining", "pb_manchester", "pb_per_symbol_pulse"]


# --------------------------------------------------------------------------- Manchester


def pb_square_law_combining(ebn0, n_branches):
    """Pb of binary orthogonal FSK with square-law combining of L independent branches.

    Proakis, *Digital Communications*, the chapter on diversity: binary
    orthogonal signals, non-coherent detection, square-law combining of L
    branches of equal strength (REFERENCE §10), with γ = Eb/N0 the energy of
    the whole bit over all branches::

        Pb = 2^(1−2L)·e^(−γ/2)·Σ_{n=0}^{L−1} c_n·(γ/2)^n,
        c_n = (1/n!)·Σ_{k=0}^{L−1−n} C(2L−1, k).

    L = 1 is :func:`iqdemod.predict_closed_form.pb_noncoherent`.

    Parameters
    ----------
    ebn0 : float or array_like
        Linear Eb/N0 of the whole bit (>= 0).
    n_branches : int
        L >= 1.

    Returns
    -------
    float or ndarray

    Examples
    --------
    >>> from iqdemod.predict_closed_form import pb_noncoherent
    >>> round(pb_square_law_combining(10.0, 1), 7) == round(pb_noncoherent(10.0), 7)
    True
    """
    g, scalar = ebn0_array(ebn0)
    L = whole_number(n_branches, "n_branches", error=EstimateError)
    half = 0.5 * g
    total = np.zeros_like(half)
    for n in range(L):
        c = sum(math.comb(2 * L - 1, k) for k in range(L - n)) / math.factorial(n)
        total = total + c * half**n
    return scalar_or_array(2.0 ** (1 - 2 * L) * np.exp(-half) * total, scalar)


def pb_manchester(ebn0):
    """Pb of Manchester-coded non-coherent FSK with soft chip combining (REFERENCE §10).

    A Manchester bit is two chips on opposite tones; summing each
    hypothesis's two square-law chip statistics is square-law combining of
    L = 2 branches: ``Pb = (1/8)·e^(−γ/2)·(4 + γ/2)``, γ = Eb/N0 with Eb the
    energy of both chips.

    Examples
    --------
    >>> f"{pb_manchester(10.0):.4e}"  # REFERENCE §10 table: 7.5802e-03 at 10 dB
    '7.5802e-03'
    """
    return pb_square_law_combining(ebn0, 2)



# --------------------------------------------------------------------------- a continuous-phase pulse



# Continuous time: composite Gauss–Legendre over the symbol. The segment phase is smooth inside a slot
# (an odd pulse span cuts its tails on slot boundaries); the panel edges at quarters also take an even
# span's cut in the middle of a slot. 4 × 32 nodes integrate ±12 cycles per symbol to ~1e-15.
_GL_PANELS, _GL_NODES = 4, 32


def _symbol_quadrature(samples_per_symbol: int | None) -> tuple[np.ndarray, np.ndarray]:
    """Times u in [0, 1) symbols and weights of the mean over one symbol."""
    if samples_per_symbol is not None:
        n = samples_per_symbol
        return np.arange(n) / n, np.full(n, 1.0 / n)  # sample m at m/N, as tone_correlation's sum
    x, w = special.roots_legendre(_GL_NODES)
    left = np.arange(_GL_PANELS)[:, None] / _GL_PANELS
    u = (left + (x[None, :] + 1.0) / (2.0 * _GL_PANELS)).ravel()
    return u, np.tile(w / (2.0 * _GL_PANELS), _GL_PANELS)


@functools.lru_cache(maxsize=64)
def _pulse_terms(h: float, pulse: str, bt: float, span_symbols: int | None, freq_error_T: float,
                 samples_per_symbol: int | None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per bit pattern of the pulse's span: right and wrong correlator means per unit amplitude, noise correlation.

    The bank's references are unit tones at ∓h/2 cycles per symbol over one
    symbol slot; the received segment is exp(j·φ(t)) with φ from
    :func:`iqdemod.sequence.phase_trajectory` over the 2·context + 1 bits whose
    pulses reach into the slot (the earlier bits only add a constant phase,
    which the square law ignores), turned by the carrier error.
    """
    plan = plan_sequence(h=h, pulse=pulse, bt=bt, n_symbols=1, span_symbols=span_symbols)
    c = plan.context
    u, wt = _symbol_quadrature(samples_per_symbol)
    refs = np.exp(1j * np.pi * h * np.array([-1.0, 1.0])[:, None] * u[None, :])  # w0 (bit 0), w1 (bit 1)
    n_pat = 1 << (2 * c + 1)
    bits = (np.arange(n_pat)[:, None] >> np.arange(2 * c, -1, -1)[None, :]) & 1
    seg = np.stack([np.exp(1j * (phase_trajectory(b, c + u, plan) + 2.0 * np.pi * freq_error_T * u)) for b in bits])
    sig = (seg * wt[None, :]) @ refs.conj().T  # (pattern, correlator): <w, m> / T
    rho = complex(np.sum(wt * refs[0].conj() * refs[1]))  # <w0, w1> / ||w||²
    mid = bits[:, c]
    right = np.where(mid == 1, sig[:, 1], sig[:, 0])
    wrong = np.where(mid == 1, sig[:, 0], sig[:, 1])
    corr = np.where(mid == 1, np.conj(rho), rho)  # E[n_right n_wrong*] / E|n|²
    for a in (right, wrong, corr):
        a.setflags(write=False)
    return right, wrong, corr


def pb_per_symbol_pulse(ebn0, *, h, pulse="rect", bt=0.5, freq_error_T=0.0, span_symbols=None,
                        samples_per_symbol=None):
    """Bit error probability of the one-symbol correlator bank receiving a continuous-phase pulse.

    The bank (:mod:`iqdemod.correlate`) correlates each symbol slot with two
    rectangular unit tones at ∓h/2 cycles per symbol and decides by the square
    law. With a Gaussian frequency pulse (GFSK) the received segment ``m`` of a
    slot is not one of those tones: it depends on the neighbouring bits whose
    pulses reach into the slot (intersymbol interference). For each pattern of
    the ``2·context + 1`` bits the pulse spans, both correlators' signal terms
    are ``<w, m>`` with ``m`` from :func:`iqdemod.sequence.phase_trajectory`
    (REFERENCE.md sec. 3, the mismatched correlator). Normalised to the noise
    of one output (``N0·||w||²``) and for a middle bit 0:

    * right branch mean ``sqrt(ebn0)·<w0, m>/T``, wrong branch mean
      ``sqrt(ebn0)·<w1, m>/T``;
    * noise correlation ``<w0, w1>/||w||² = rho(h)``, not zero unless h is
      whole.

    The probability that the wrong output's envelope is the larger is the
    general comparison of two *correlated* Rician envelopes, Stein's
    quadratic-form result (Proakis, *Digital Communications*, Appendix B;
    Stein, IEEE Trans. Inf. Theory IT-10, 1964), computed by
    :func:`pb_square_law`; no whitening is needed. With uncorrelated noise
    (h whole) it reduces to REFERENCE sec. 3's
    ``Q1(α, β) − ½·exp(−(α² + β²)/2)·I0(α·β)``, α = |wrong|, β = |right|.
    The equally likely patterns are averaged.

    A rectangular pulse at ``freq_error_T = 0`` gives
    :func:`iqdemod.predict_closed_form.pb_noncoherent_correlated` (``pb_noncoherent``
    at whole h); with an error it gives :func:`iqdemod.predict_closed_form.pb_mismatched`.

    Parameters
    ----------
    ebn0 : float or array_like
        Linear Eb/N0 (>= 0).
    h : float
        Modulation index, shift / baud (> 0).
    pulse : {"rect", "gaussian"}
        Frequency pulse.
    bt : float
        Bandwidth–time product of the Gaussian pulse (ignored for rect).
    freq_error_T : float, optional
        Carrier error times symbol time (the received signal sits this far
        above the bank's references).
    span_symbols : int, optional
        Length of the (truncated) Gaussian pulse, symbols; default as
        :func:`iqdemod.sequence.plan_sequence` (BT 0.5 → 3, BT 0.3 → 5).
    samples_per_symbol : int, optional
        Sampled correlators, sample m at m/N of the slot (as
        :func:`tone_correlation`); None (default) for continuous time.

    Returns
    -------
    float or ndarray
        Pb, same shape as `ebn0`.

    Raises
    ------
    LinkError
        A bad pulse parameter (from :func:`iqdemod.sequence.plan_sequence`) or
        tones that coincide.
    EstimateError
        A negative or NaN Eb/N0.

    Examples
    --------
    Rectangular pulse, h = 1: orthogonal tones, ½·exp(−γ/2) (REFERENCE §1).

    >>> round(pb_per_symbol_pulse(10.0, h=1.0), 7)
    0.003369
    >>> round(pb_per_symbol_pulse(10.0, h=0.5), 5)  # REFERENCE §2, |rho| = 0.6366
    0.03321
    >>> pb_per_symbol_pulse(10.0, h=0.5, pulse="gaussian", bt=0.5) > 0.03321  # the pulse's own loss
    True
    """
    g, scalar = ebn0_array(ebn0)
    n = None if samples_per_symbol is None else whole_number(samples_per_symbol, "samples_per_symbol", minimum=2)
    finite_link_numbers(h=h, freq_error_T=freq_error_T, bt=bt)
    if span_symbols is not None:
        span_symbols = whole_number(span_symbols, "span_symbols")
    h, eps = float(h), float(freq_error_T)
    tones_apart(h, n)
    right, wrong, corr = _pulse_terms(h, str(pulse), float(bt), span_symbols, eps, n)
    amp = np.sqrt(g)[..., None]
    pb = np.mean(pb_square_law(amp * right, amp * wrong, noise_corr=corr), axis=-1)
    return scalar_or_array(pb, scalar)

