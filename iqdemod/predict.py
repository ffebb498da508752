"""Detection theory for binary FSK: what bit error rate a link should show.

Every function here is a closed-form (or one-dimensional root-finding) result
from the literature, vectorised over the Eb/N0 argument. Eb/N0 arguments are
*linear* ratios unless the name ends in ``_db``; :func:`db` and :func:`from_db`
convert. For binary signalling Es = Eb, so the same numbers are Es/N0.

Sources
-------
* Proakis, *Digital Communications* (5th ed. ch. 4; 4th ed. sec. 5.4) and
  Sklar, *Digital Communications* (2nd ed. ch. 4): error rates of orthogonal
  and antipodal signalling.
* Proakis, *Digital Communications*, Appendix B, and Stein, "Unified analysis
  of certain coherent and noncoherent binary communications systems", IEEE
  Trans. Inf. Theory IT-10, 1964: the probability that one Hermitian quadratic
  form of two correlated complex Gaussian variables is negative, used for every
  square-law comparison here.
* The frame error rate and the binomial statistics of CRC failures
  (Clopper & Pearson, Biometrika 26, 1934) live in :mod:`iqdemod.binomial`;
  ``fer_from_ber``, ``clopper_pearson`` and ``binomial_p_value`` are offered
  here too.
* The one-symbol correlator bank receiving a continuous-phase pulse (Gaussian
  or rectangular, :func:`pb_per_symbol_pulse`) is the mismatched-correlator
  result of REFERENCE.md sec. 3 (the signal term of a correlator ``w`` on a
  received waveform ``m`` is ``<w, m>``), averaged over the bit patterns the
  pulse spans; the continuous-phase model is Proakis, *Digital
  Communications*, the CPM section, and the Gaussian pulse Murota & Hirade,
  IEEE Trans. Commun. 29(7), 1981 (from memory), as in :mod:`iqdemod.sequence`.

The correlator convention shared with :mod:`iqdemod.estimate`: references have
unit amplitude, ``<a, b> = sum(conj(a) * b)``, and a received tone at
frequency offset ``x / T`` from a reference keeps the complex fraction
``tone_correlation(x)`` of its amplitude at that correlator's output.
"""

from __future__ import annotations

import functools
import math

import numpy as np
from scipy import optimize, special, stats

from iqdemod.binomial import binomial_p_value, clopper_pearson, fer_from_ber
from iqdemod.errors import EstimateError, LinkError
from iqdemod.sequence import phase_trajectory, plan_sequence

__all__ = [
    "db",
    "from_db",
    "pb_noncoherent",
    "pb_coherent_orthogonal",
    "pb_antipodal",
    "pb_square_law_combining",
    "pb_manchester",
    "tone_correlation",
    "pb_noncoherent_correlated",
    "pb_square_law",
    "pb_mismatched",
    "pb_per_symbol_pulse",
    "mismatch_loss_db",
    "ebn0_for_pb",
    "ebn0_db_for_pb",
    "fer_from_ber",
    "curves_extended",
    "curves_table",
    "clopper_pearson",
    "binomial_p_value",
]

_SCHEMES = ("noncoherent", "coherent_orthogonal", "antipodal", "correlated", "mismatched", "manchester",
            "per_symbol_pulse")


# --------------------------------------------------------------------------- helpers


def _out(value, scalar: bool):
    """Return a Python float for scalar input, otherwise the array itself."""
    return float(value) if scalar else value


def _ebn0_array(ebn0, name: str = "ebn0") -> tuple[np.ndarray, bool]:
    arr = np.asarray(ebn0, dtype=float)
    if np.any(np.isnan(arr)) or np.any(arr < 0):
        bad = arr[np.isnan(arr) | (arr < 0)].flat[0]
        raise EstimateError(
            f"{name} {bad}: must be a linear Eb/N0 >= 0 (convert dB with from_db)"
        )
    return arr, arr.ndim == 0


def _positive_int(value, name: str, *, minimum: int = 1, error: type = LinkError) -> int:
    """`value` as an int >= `minimum`; a LinkError (samples per symbol, pulse span) or the given class."""
    if isinstance(value, bool) or int(value) != value or value < minimum:
        raise error(f"{name} {value!r}: must be an integer >= {minimum}")
    return int(value)


def _finite_link_numbers(**values) -> None:
    """Refuse a link number (h, δf·T, BT) that is not one finite number."""
    for name, v in values.items():
        if not (np.ndim(v) == 0 and math.isfinite(float(v))):
            raise LinkError(f"{name} {v!r}: must be a finite number")


def _tones_apart(h: float, n: int | None) -> complex:
    """The tones' correlation at spacing `h` (N samples or continuous); refuses tones that coincide."""
    rho_h = complex(_tone_corr(np.asarray(h), n))
    if abs(rho_h) >= 1.0 - 1e-12:
        raise LinkError(f"h {h}: the two tones coincide; must not be 0 (mod samples_per_symbol)")
    return rho_h


def _marcum_q1(a, b):
    """Marcum Q-function Q1(a, b) = P(|CN(a, 2)| > b) (Marcum 1950).

    ``ncx2.sf`` keeps its relative accuracy far into the tail (1e-24 and
    below), where ``rice.sf`` underflows to 0.
    """
    return stats.ncx2.sf(np.square(b), 2, np.square(a))


def _exp_i0(a, b):
    """exp(-(a**2 + b**2) / 2) * I0(a * b) without overflow, for a, b >= 0."""
    return np.exp(-0.5 * np.square(a - b)) * special.i0e(a * b)


# --------------------------------------------------------------------------- units


def db(x):
    """Power ratio to decibels, ``10 * log10(x)`` (0 gives -inf).

    Examples
    --------
    >>> db(10.0)
    10.0
    """
    arr = np.asarray(x, dtype=float)
    with np.errstate(divide="ignore"):
        return _out(10.0 * np.log10(arr), arr.ndim == 0)


def from_db(x_db):
    """Decibels to a linear power ratio, ``10 ** (x_db / 10)``.

    Examples
    --------
    >>> from_db(10.0)
    10.0
    """
    arr = np.asarray(x_db, dtype=float)
    return _out(np.power(10.0, arr / 10.0), arr.ndim == 0)


# --------------------------------------------------------------------------- AWGN


def pb_noncoherent(ebn0):
    """Bit error probability of non-coherent binary orthogonal FSK.

    Quadrature correlators and a square-law decision:
    ``Pb = exp(-ebn0 / 2) / 2`` (Proakis, *Digital Communications*, 5th ed.
    ch. 4; Sklar, *Digital Communications*, 2nd ed. ch. 4).

    Parameters
    ----------
    ebn0 : float or array_like
        Linear Eb/N0 (>= 0).

    Returns
    -------
    float or ndarray
        Pb, same shape as `ebn0`.

    Examples
    --------
    >>> round(pb_noncoherent(10.0), 7)
    0.003369
    """
    g, scalar = _ebn0_array(ebn0)
    return _out(0.5 * np.exp(-0.5 * g), scalar)


def pb_square_law_combining(ebn0, n_branches):
    """Pb of binary orthogonal FSK with square-law combining of L independent branches.

    Proakis, *Digital Communications*, the chapter on diversity: binary
    orthogonal signals, non-coherent detection, square-law combining of L
    branches of equal strength (REFERENCE §10), with γ = Eb/N0 the energy of
    the whole bit over all branches::

        Pb = 2^(1−2L)·e^(−γ/2)·Σ_{n=0}^{L−1} c_n·(γ/2)^n,
        c_n = (1/n!)·Σ_{k=0}^{L−1−n} C(2L−1, k).

    L = 1 is :func:`pb_noncoherent`.

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
    >>> round(pb_square_law_combining(10.0, 1), 7) == round(pb_noncoherent(10.0), 7)
    True
    """
    g, scalar = _ebn0_array(ebn0)
    L = _positive_int(n_branches, "n_branches", error=EstimateError)
    half = 0.5 * g
    total = np.zeros_like(half)
    for n in range(L):
        c = sum(math.comb(2 * L - 1, k) for k in range(L - n)) / math.factorial(n)
        total = total + c * half**n
    return _out(2.0 ** (1 - 2 * L) * np.exp(-half) * total, scalar)


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


def pb_coherent_orthogonal(ebn0):
    """Bit error probability of coherent binary orthogonal FSK, ``Q(sqrt(ebn0))``.

    Source: Proakis, *Digital Communications*, ch. 4; Sklar, ch. 4.

    Parameters
    ----------
    ebn0 : float or array_like
        Linear Eb/N0 (>= 0).

    Returns
    -------
    float or ndarray
        Pb.

    Examples
    --------
    At 10 dB (REFERENCE §1: 7.827e-4):

    >>> f"{pb_coherent_orthogonal(10.0):.4g}"
    '0.0007827'
    """
    g, scalar = _ebn0_array(ebn0)
    return _out(stats.norm.sf(np.sqrt(g)), scalar)


def pb_antipodal(ebn0):
    """Bit error probability of antipodal signalling (BPSK), ``Q(sqrt(2 ebn0))``.

    Source: Proakis, *Digital Communications*, ch. 4; Sklar, ch. 4.

    Parameters
    ----------
    ebn0 : float or array_like
        Linear Eb/N0 (>= 0).

    Returns
    -------
    float or ndarray
        Pb.

    Examples
    --------
    At 10 dB (REFERENCE §1: 3.872e-6):

    >>> f"{pb_antipodal(10.0):.4g}"
    '3.872e-06'
    """
    g, scalar = _ebn0_array(ebn0)
    return _out(stats.norm.sf(np.sqrt(2.0 * g)), scalar)


# --------------------------------------------------------------------------- tones


def _tone_corr(x: np.ndarray, n: int | None) -> np.ndarray:
    """Complex correlation of two unit tones ``x / T`` Hz apart over one symbol."""
    x = np.asarray(x, dtype=float)
    if n is None:
        # (1/T) * integral_0^T exp(j 2 pi x t / T) dt
        return np.sinc(x) * np.exp(1j * np.pi * x)
    # (1/N) * sum_{k<N} exp(j 2 pi x k / N): a geometric series.
    den = n * np.sin(np.pi * x / n)
    aliased = np.abs(den) < 1e-12  # x a multiple of N: every sample agrees
    with np.errstate(divide="ignore", invalid="ignore"):
        mag = np.where(aliased, 1.0, np.sin(np.pi * x) / np.where(aliased, 1.0, den))
        phase = np.where(aliased, 0.0, np.pi * x * (n - 1) / n)
    return mag * np.exp(1j * phase)


def tone_correlation(h, *, samples_per_symbol=None):
    """Complex correlation coefficient of two FSK tones spaced ``h / T``.

    ``rho = <s0, s1> / Es`` with ``s_k = exp(j 2 pi f_k t)`` and
    ``f1 - f0 = h / T``.

    * continuous time: ``rho = sinc(h) * exp(j pi h)``, ``sinc(x) = sin(pi x)/(pi x)``
      (Proakis, *Digital Communications*, envelope detection of correlated
      binary signals; REFERENCE.md sec. 2);
    * ``N`` samples per symbol (a geometric sum):
      ``rho_N = sin(pi h) / (N sin(pi h / N)) * exp(j pi h (N - 1) / N)``,
      which tends to the continuous value as ``N`` grows.

    The same function gives the amplitude a correlator keeps when the
    received tone is ``h / T`` away from its reference.

    Parameters
    ----------
    h : float or array_like
        Tone spacing times symbol time (modulation index), or a frequency
        error times symbol time.
    samples_per_symbol : int, optional
        ``N``; None (default) for continuous time.

    Returns
    -------
    complex or ndarray of complex

    Examples
    --------
    >>> round(abs(tone_correlation(0.5)), 6)
    0.63662
    >>> round(abs(tone_correlation(0.5, samples_per_symbol=16)), 5)
    0.63764
    """
    n = None if samples_per_symbol is None else _positive_int(
        samples_per_symbol, "samples_per_symbol"
    )
    arr = np.asarray(h, dtype=float)
    if not np.all(np.isfinite(arr)):
        raise LinkError(f"h {h!r}: must be finite")
    rho = _tone_corr(arr, n)
    return complex(rho) if arr.ndim == 0 else rho


def pb_noncoherent_correlated(ebn0, rho):
    """Bit error probability of non-coherent detection of correlated tones.

    Equal-energy signals with complex correlation ``rho``, quadrature
    correlators and a square-law decision (Proakis, *Digital
    Communications*, envelope detection of correlated binary signals;
    Stein, IEEE Trans. Inf. Theory IT-10, 1964)::

        Pb = Q1(a, b) - exp(-(a^2 + b^2) / 2) I0(a b) / 2
        a = sqrt(ebn0 / 2 * (1 - sqrt(1 - |rho|^2)))
        b = sqrt(ebn0 / 2 * (1 + sqrt(1 - |rho|^2)))

    It equals ``exp(-ebn0 / 2) / 2`` at ``rho = 0``.

    Parameters
    ----------
    ebn0 : float or array_like
        Linear Eb/N0 (>= 0).
    rho : complex or array_like
        Correlation coefficient, ``|rho| <= 1`` (only its magnitude matters);
        e.g. ``tone_correlation(h)``.

    Returns
    -------
    float or ndarray
        Pb, broadcast over `ebn0` and `rho`.

    Examples
    --------
    Tones at h = 0.5 (|rho| = 0.6366) at 10 dB, REFERENCE §2: 3.3207e-2;
    orthogonal tones give ½·exp(−Eb/2N0):

    >>> f"{pb_noncoherent_correlated(10.0, tone_correlation(0.5)):.5g}"
    '0.033207'
    >>> f"{pb_noncoherent_correlated(10.0, 0.0):.5g}"
    '0.003369'
    """
    g, scalar = _ebn0_array(ebn0)
    r = np.abs(np.asarray(rho))
    if np.any(~np.isfinite(r)) or np.any(r > 1.0 + 1e-12):
        raise EstimateError(f"rho {rho!r}: |rho| must be <= 1")
    root = np.sqrt(np.clip(1.0 - r * r, 0.0, 1.0))
    a = np.sqrt(0.5 * g * (1.0 - root))
    b = np.sqrt(0.5 * g * (1.0 + root))
    pb = _marcum_q1(a, b) - 0.5 * _exp_i0(a, b)
    return _out(np.clip(pb, 0.0, 0.5), scalar and r.ndim == 0)


# --------------------------------------------------------------------------- square law


def pb_square_law(mean_right, mean_wrong, *, var_right=1.0, var_wrong=1.0, noise_corr=0.0):
    """Probability that a square-law comparison picks the wrong branch.

    ``X`` (right branch) and ``Y`` (wrong branch) are jointly complex
    Gaussian with means `mean_right`, `mean_wrong`, variances
    ``E|X - mX|^2 = var_right``, ``E|Y - mY|^2 = var_wrong`` and correlation
    coefficient ``E[(X - mX)(Y - mY)^*] / sqrt(var_right var_wrong) =
    noise_corr``. Returns ``P(|X|^2 < |Y|^2)``.

    This is the quadratic form ``D = A|X|^2 + B|Y|^2 + C X Y^* + C^* X^* Y``
    with ``A = 1, B = -1, C = 0`` of Proakis, *Digital Communications*,
    Appendix B (one diversity branch), after Stein, IEEE Trans. Inf. Theory
    IT-10, 1964. With ``mu_xx = var_right / 2``, ``mu_yy = var_wrong / 2``,
    ``mu_xy = noise_corr sqrt(var_right var_wrong) / 2`` and
    ``delta = mu_xx mu_yy - |mu_xy|^2``::

        w   = (mu_xx - mu_yy) / (4 delta)
        v1  = sqrt(w^2 + 1 / (4 delta)) - w,   v2 = sqrt(w^2 + 1 / (4 delta)) + w
        al1 = 2 (|mX|^2 mu_yy + |mY|^2 mu_xx - 2 Re(mX^* mY mu_xy))
        al2 = |mX|^2 - |mY|^2
        a   = sqrt(2 v1^2 v2 (al1 v2 - al2)) / (v1 + v2)
        b   = sqrt(2 v1 v2^2 (al1 v1 + al2)) / (v1 + v2)
        P(D < 0) = Q1(a, b) - v2 / (v1 + v2) exp(-(a^2 + b^2) / 2) I0(a b)

    Parameters
    ----------
    mean_right, mean_wrong : complex or array_like
        Signal parts of the two correlator outputs.
    var_right, var_wrong : float or array_like, optional
        Total complex noise variance of each output (> 0), default 1.
    noise_corr : complex or array_like, optional
        Complex noise correlation coefficient, ``|noise_corr| < 1``; default 0.

    Returns
    -------
    float or ndarray
        Error probability, broadcast over all arguments.

    Examples
    --------
    Orthogonal tones at Eb/N0 = 10: the signal-to-noise ratio at the right
    output is ``|mean_right|^2 / var_right``.

    >>> round(pb_square_law(10 ** 0.5, 0.0), 7)
    0.003369
    """
    mx = np.asarray(mean_right, dtype=complex)
    my = np.asarray(mean_wrong, dtype=complex)
    vx = np.asarray(var_right, dtype=float)
    vy = np.asarray(var_wrong, dtype=float)
    c = np.asarray(noise_corr, dtype=complex)
    scalar = all(np.ndim(v) == 0 for v in (mx, my, vx, vy, c))
    for name, v in (("var_right", vx), ("var_wrong", vy)):
        if np.any(~np.isfinite(v)) or np.any(v <= 0):
            raise EstimateError(f"{name} {v!r}: noise variance must be finite and > 0")
    if np.any(~np.isfinite(c)) or np.any(np.abs(c) >= 1.0):
        raise EstimateError(f"noise_corr {noise_corr!r}: |noise_corr| must be < 1")
    if np.any(~np.isfinite(mx)) or np.any(~np.isfinite(my)):
        raise EstimateError("mean_right/mean_wrong: must be finite")

    return _out(np.clip(_stein_error(mx, my, vx, vy, c), 0.0, 1.0), scalar)


def _stein_error(mx, my, vx, vy, c):
    """P(|X|² < |Y|²) by Stein's quadratic form (Proakis, Appendix B); arguments as :func:`pb_square_law` checked them."""
    mu_xx = 0.5 * vx
    mu_yy = 0.5 * vy
    mu_xy = 0.5 * c * np.sqrt(vx * vy)
    delta = mu_xx * mu_yy - np.abs(mu_xy) ** 2
    w = (mu_xx - mu_yy) / (4.0 * delta)
    root = np.sqrt(w * w + 1.0 / (4.0 * delta))
    # v1 * v2 = 1 / (4 delta); take the difference from the product to avoid
    # cancellation when one variance dominates.
    big = root + np.abs(w)
    small = 1.0 / (4.0 * delta * big)
    v1 = np.where(w >= 0, small, big)
    v2 = np.where(w >= 0, big, small)
    ex2 = np.abs(mx) ** 2
    ey2 = np.abs(my) ** 2
    al1 = 2.0 * (ex2 * mu_yy + ey2 * mu_xx - 2.0 * np.real(np.conj(mx) * my * mu_xy))
    al2 = ex2 - ey2
    s = v1 + v2
    a = np.sqrt(np.clip(2.0 * v1 * v1 * v2 * (al1 * v2 - al2), 0.0, None)) / s
    b = np.sqrt(np.clip(2.0 * v1 * v2 * v2 * (al1 * v1 + al2), 0.0, None)) / s
    return _marcum_q1(a, b) - (v2 / s) * _exp_i0(a, b)


def pb_mismatched(ebn0, *, h=1.0, freq_error_T=0.0, samples_per_symbol=None):
    """Bit error probability of a correlator bank whose references are off frequency.

    Both tones arrive ``freq_error_T / T`` Hz above their correlator
    references (tone spacing ``h / T``). For a reference ``w`` and a received
    waveform ``m`` the signal term is ``<w, m>`` and the noise variance is
    ``N0 ||w||^2`` (REFERENCE.md sec. 3), so, normalised to the noise of one
    output, symbol 0 gives

    * right branch mean ``sqrt(ebn0) * rho(freq_error_T)``,
    * wrong branch mean ``sqrt(ebn0) * rho(freq_error_T - h)`` (leakage),
    * noise correlation ``<w0, w1> / ||w||^2 = rho(h)`` (zero for integer h),

    with ``rho`` = :func:`tone_correlation`; symbol 1 uses
    ``rho(freq_error_T + h)`` and ``conj(rho(h))``. Each case is evaluated
    with :func:`pb_square_law` (Proakis, Appendix B; Stein 1964) and the two
    equally likely symbols are averaged: for ``h != 1`` an offset moves one
    tone towards the other reference and the other tone away.

    At ``freq_error_T = 0`` this is :func:`pb_noncoherent_correlated`; at
    ``h = 1`` and no error it is :func:`pb_noncoherent`.

    Parameters
    ----------
    ebn0 : float or array_like
        Linear Eb/N0 (>= 0).
    h : float, optional
        Tone spacing times symbol time, not 0 (mod `samples_per_symbol`).
    freq_error_T : float, optional
        Frequency error times symbol time.
    samples_per_symbol : int, optional
        Use the discrete correlation of ``N`` samples; None for continuous time.

    Returns
    -------
    float or ndarray
        Pb averaged over the two symbols.

    Examples
    --------
    >>> round(pb_mismatched(10.0, freq_error_T=0.2), 5)
    0.01418
    """
    g, scalar = _ebn0_array(ebn0)
    n = None if samples_per_symbol is None else _positive_int(samples_per_symbol, "samples_per_symbol")
    _finite_link_numbers(h=h, freq_error_T=freq_error_T)
    h, eps = float(h), float(freq_error_T)
    rho_h = _tones_apart(h, n)
    amp = np.sqrt(g)
    right = complex(_tone_corr(np.asarray(eps), n))
    leak0 = complex(_tone_corr(np.asarray(eps - h), n))
    leak1 = complex(_tone_corr(np.asarray(eps + h), n))
    pb0 = pb_square_law(amp * right, amp * leak0, noise_corr=rho_h)
    pb1 = pb_square_law(amp * right, amp * leak1, noise_corr=np.conj(rho_h))
    return _out(0.5 * (np.asarray(pb0) + np.asarray(pb1)), scalar)


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
    :func:`pb_noncoherent_correlated` (``pb_noncoherent`` at whole h); with an
    error it gives :func:`pb_mismatched`.

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
    g, scalar = _ebn0_array(ebn0)
    n = None if samples_per_symbol is None else _positive_int(samples_per_symbol, "samples_per_symbol", minimum=2)
    _finite_link_numbers(h=h, freq_error_T=freq_error_T, bt=bt)
    if span_symbols is not None:
        span_symbols = _positive_int(span_symbols, "span_symbols")
    h, eps = float(h), float(freq_error_T)
    _tones_apart(h, n)
    right, wrong, corr = _pulse_terms(h, str(pulse), float(bt), span_symbols, eps, n)
    amp = np.sqrt(g)[..., None]
    pb = np.mean(pb_square_law(amp * right, amp * wrong, noise_corr=corr), axis=-1)
    return _out(pb, scalar)


def mismatch_loss_db(freq_error_T, *, samples_per_symbol=None):
    """Amplitude loss of a correlator off frequency, ``-20 log10 |sinc(freq_error_T)|`` dB.

    REFERENCE.md sec. 3 [derived]; with `samples_per_symbol` the discrete
    ``|rho_N|`` of :func:`tone_correlation` is used instead of ``sinc``.

    Parameters
    ----------
    freq_error_T : float or array_like
        Frequency error times symbol time.
    samples_per_symbol : int, optional
        ``N``; None for continuous time.

    Returns
    -------
    float or ndarray
        Loss in dB (>= 0; inf at a null).

    Examples
    --------
    >>> round(mismatch_loss_db(0.2), 4)
    0.5792
    """
    arr = np.asarray(freq_error_T, dtype=float)
    mag = np.abs(tone_correlation(arr, samples_per_symbol=samples_per_symbol))
    with np.errstate(divide="ignore"):
        return _out(-20.0 * np.log10(mag), arr.ndim == 0)


# --------------------------------------------------------------------------- inverses


def _pb_function(scheme: str, kw: dict):
    allowed = {
        "noncoherent": set(),
        "coherent_orthogonal": set(),
        "antipodal": set(),
        "correlated": {"rho"},
        "mismatched": {"h", "freq_error_T", "samples_per_symbol"},
        "manchester": set(),
        "per_symbol_pulse": {"h", "pulse", "bt", "freq_error_T", "span_symbols", "samples_per_symbol"},
    }
    if scheme not in allowed:
        raise EstimateError(f"scheme {scheme!r}: must be one of {', '.join(_SCHEMES)}")
    extra = set(kw) - allowed[scheme]
    if extra:
        raise EstimateError(
            f"options {sorted(extra)} for scheme {scheme!r}: expected only {sorted(allowed[scheme]) or 'none'}"
        )
    if scheme == "correlated":
        if "rho" not in kw:
            raise EstimateError("scheme 'correlated': needs rho=")
        rho = kw["rho"]
        if np.ndim(rho) != 0:
            raise EstimateError(f"rho {rho!r}: must be a single number for scheme 'correlated'")
        pb_noncoherent_correlated(1.0, rho)  # validates rho
        return lambda g: pb_noncoherent_correlated(g, rho)
    if scheme == "mismatched":
        pb_mismatched(1.0, **kw)  # validates the options
        return lambda g: pb_mismatched(g, **kw)
    if scheme == "manchester":
        return pb_manchester
    if scheme == "per_symbol_pulse":
        if "h" not in kw:
            raise LinkError("scheme 'per_symbol_pulse': needs h=")
        pb_per_symbol_pulse(1.0, **kw)  # validates the options
        return lambda g: pb_per_symbol_pulse(g, **kw)
    return None


def _solve_one(fun, pb: float, scheme: str) -> float:
    """Root of fun(g) = pb in linear g, on a log-Pb scale in dB of g."""
    lo_db, hi_db = -30.0, 60.0
    f_db = lambda x: math.log(max(fun(from_db(x)), 1e-300)) - math.log(pb)
    f_lo = f_db(lo_db)
    if f_lo < 0.0:  # target within a hair of Pb(0): solve linearly near 0
        g_lo = from_db(lo_db)
        return optimize.brentq(lambda g: fun(g) - pb, 0.0, g_lo, xtol=1e-15, rtol=1e-12)
    if f_db(hi_db) > 0.0:
        raise EstimateError(
            f"target Pb {pb:g} for scheme {scheme!r}: not reached below {hi_db:g} dB "
            "(error floor); choose a larger Pb or a smaller mismatch"
        )
    x = optimize.brentq(f_db, lo_db, hi_db, xtol=1e-10, rtol=1e-13)
    return from_db(x)


def ebn0_for_pb(pb, scheme="noncoherent", **options):
    """Linear Eb/N0 at which a scheme reaches bit error probability `pb`.

    * ``"noncoherent"`` (orthogonal FSK, square law): exact, ``-2 ln(2 pb)``;
    * ``"coherent_orthogonal"``: exact, ``Q^-1(pb)^2``;
    * ``"antipodal"``: exact, ``Q^-1(pb)^2 / 2``;
    * ``"correlated"`` (option ``rho``): :func:`pb_noncoherent_correlated`;
    * ``"mismatched"`` (options ``h``, ``freq_error_T``,
      ``samples_per_symbol``): :func:`pb_mismatched`;
    * ``"manchester"``: :func:`pb_manchester`;
    * ``"per_symbol_pulse"`` (options ``h``, ``pulse``, ``bt``,
      ``freq_error_T``, ``span_symbols``, ``samples_per_symbol``):
      :func:`pb_per_symbol_pulse`.

    The last four are solved with ``scipy.optimize.brentq`` on log Pb against
    Eb/N0 in dB (Pb is monotone in Eb/N0 for these schemes).

    Parameters
    ----------
    pb : float or array_like
        Target bit error probability, ``0 < pb <= 0.5``.
    scheme : str, optional
        One of the names above; default ``"noncoherent"``.
    **options
        The scheme's options, keyword only.

    Returns
    -------
    float or ndarray
        Linear Eb/N0, same shape as `pb`.

    Raises
    ------
    EstimateError
        Bad `pb`, unknown scheme or option, or a target below the error
        floor of a mismatched receiver.
    LinkError
        A bad link option of the scheme (h, pulse, samples per symbol).

    Examples
    --------
    >>> round(db(ebn0_for_pb(1e-5)), 4)
    13.3525
    """
    arr = np.asarray(pb, dtype=float)
    if np.any(~(arr > 0)) or np.any(arr > 0.5):
        raise EstimateError(f"pb {pb!r}: must be in (0, 0.5]")
    fun = _pb_function(scheme, options)
    if scheme == "noncoherent":
        out = -2.0 * np.log(2.0 * arr)
    elif scheme == "coherent_orthogonal":
        out = stats.norm.isf(arr) ** 2
    elif scheme == "antipodal":
        out = 0.5 * stats.norm.isf(arr) ** 2
    else:
        out = np.array([_solve_one(fun, float(p), scheme) for p in arr.ravel()]).reshape(arr.shape)
    return _out(out, arr.ndim == 0)


def ebn0_db_for_pb(pb, scheme="noncoherent", **options):
    """Eb/N0 in dB at which a scheme reaches `pb`: ``db(ebn0_for_pb(...))``.

    Parameters
    ----------
    pb : float or array_like
        Target bit error probability, ``0 < pb <= 0.5``.
    scheme : str, optional
        See :func:`ebn0_for_pb`.
    **options
        See :func:`ebn0_for_pb`.

    Returns
    -------
    float or ndarray
        Eb/N0 in dB.

    Examples
    --------
    >>> round(ebn0_db_for_pb(1e-5, "antipodal"), 4)
    9.5879
    """
    return db(ebn0_for_pb(pb, scheme, **options))


def curves_extended(h: float, pulse: str = "rect") -> bool:
    """Whether the curves for this link add the pulse-aware detectors: a Gaussian pulse or a fractional h.

    Examples
    --------
    >>> curves_extended(1.0), curves_extended(0.5), curves_extended(1.0, "gaussian")
    (False, True, True)
    """
    return pulse == "gaussian" or abs(float(h) - round(float(h))) > 1e-9 or round(float(h)) == 0


def curves_table(ebn0_db, *, h: float = 1.0, freq_error_per_baud: float = 0.0, frame_bits: int = 208,
                 target_ber: float = 1e-5, samples_per_symbol=None, pulse: str = "rect", bt: float = 0.5,
                 detector_symbols: int = 5) -> dict:
    """BER and frame error rate against Eb/N0 for a link and the textbook references, for planning.

    For a link with a Gaussian pulse or a modulation index that is not whole
    (:func:`curves_extended`) two more detectors are tabulated beside the
    textbook ones: the one-symbol correlator bank receiving this pulse
    (:func:`pb_per_symbol_pulse`, with the link's carrier error) and the
    multi-symbol detector of `detector_symbols` symbols
    (:func:`iqdemod.sequence_theory.sequence_ber`, its default "pruned"
    approximation, no carrier error).

    Parameters
    ----------
    ebn0_db : array_like
        Eb/N0 values, dB.
    h : float
        Modulation index of the link, shift / baud.
    freq_error_per_baud : float
        Residual carrier error as a fraction of the symbol rate (δf·T, the
        ``freq_error_T`` of the Pb functions).
    frame_bits : int
        Bits a frame's CRC covers, for the frame error rate.
    target_ber : float
        The Eb/N0 each scheme needs for this BER is reported too.
    samples_per_symbol : int, optional
        Sampled correlators instead of continuous time.
    pulse : {"rect", "gaussian"}
        The link's frequency pulse.
    bt : float
        Its BT (Gaussian only).
    detector_symbols : int
        Window of the multi-symbol detector (odd).

    Returns
    -------
    dict
        Lists keyed ``ebn0_db``, ``ber_link`` (tones of this h with a
        rectangular pulse and the carrier error), ``ber_noncoherent``,
        ``ber_coherent_orthogonal``, ``ber_antipodal``, ``fer_link`` (frame
        error rate, a fraction), and ``needed_db`` (a dict per scheme; None
        where the target is below the error floor). Extended links add
        ``ber_one_symbol_pulse``, ``ber_multi_symbol``,
        ``fer_one_symbol_pulse``, ``fer_multi_symbol`` and ``needed_db``
        entries ``one_symbol_pulse`` and ``multi_symbol``.

    Examples
    --------
    The textbook columns at 10 dB (REFERENCE §1: 3.3690e-3, 7.827e-4,
    3.872e-6; 13.3525 dB needed for 1e-5 without coherence):

    >>> t = curves_table([10.0])
    >>> [f"{t[k][0]:.4g}" for k in ("ber_noncoherent", "ber_coherent_orthogonal", "ber_antipodal")]
    ['0.003369', '0.0007827', '3.872e-06']
    >>> round(t["needed_db"]["noncoherent"], 4)
    13.3525

    A Gaussian pulse at h = 0.5: the one-symbol bank loses to the pulse's
    intersymbol interference, the multi-symbol detector wins it back:

    >>> t = curves_table([10.0], h=0.5, pulse="gaussian", bt=0.5, detector_symbols=3)
    >>> t["ber_one_symbol_pulse"][0] > t["ber_link"][0] > t["ber_multi_symbol"][0]
    True
    """
    x = np.asarray(ebn0_db, dtype=float)
    g = from_db(x)
    eps = freq_error_per_baud
    link = np.asarray(pb_mismatched(g, h=h, freq_error_T=eps, samples_per_symbol=samples_per_symbol), float)
    out = {
        "h": float(h),
        "freq_error_per_baud": float(eps),
        "frame_bits": int(frame_bits),
        "target_ber": float(target_ber),
        "pulse": str(pulse),
        "bt": float(bt),
        "ebn0_db": x.tolist(),
        "ber_link": link.tolist(),
        "ber_noncoherent": np.asarray(pb_noncoherent(g), float).tolist(),
        "ber_coherent_orthogonal": np.asarray(pb_coherent_orthogonal(g), float).tolist(),
        "ber_antipodal": np.asarray(pb_antipodal(g), float).tolist(),
        "fer_link": np.asarray(fer_from_ber(link, frame_bits), float).tolist(),
        "needed_db": {
            "link": _needed_or_none(target_ber, "mismatched", h=h, freq_error_T=eps,
                                    samples_per_symbol=samples_per_symbol),
            "noncoherent": float(ebn0_db_for_pb(target_ber, "noncoherent")),
            "coherent_orthogonal": float(ebn0_db_for_pb(target_ber, "coherent_orthogonal")),
            "antipodal": float(ebn0_db_for_pb(target_ber, "antipodal")),
        },
    }
    if curves_extended(h, pulse):
        _add_pulse_detectors(out, x, frame_bits=frame_bits, target_ber=target_ber, samples_per_symbol=samples_per_symbol,
                             detector_symbols=detector_symbols)
    return out


def _needed_or_none(target_ber: float, scheme: str, **kw) -> float | None:
    """Eb/N0 (dB) a scheme needs for the target; None below its error floor."""
    try:
        return float(ebn0_db_for_pb(target_ber, scheme, **kw))
    except EstimateError:  # below the error floor
        return None


def _add_pulse_detectors(out: dict, x: np.ndarray, *, frame_bits: int, target_ber: float, samples_per_symbol,
                         detector_symbols: int) -> None:
    """Into a new curves table: the one-symbol bank on this pulse and the multi-symbol detector."""
    from .sequence_theory import sequence_ber  # it imports this module

    h, pulse, bt, eps = out["h"], out["pulse"], out["bt"], out["freq_error_per_baud"]
    pulse_kw = dict(h=h, pulse=pulse, bt=bt, freq_error_T=eps, samples_per_symbol=samples_per_symbol)
    one = np.asarray(pb_per_symbol_pulse(from_db(x), **pulse_kw), float)
    seq_kw = dict(h=h, pulse=pulse, bt=bt, n_symbols=detector_symbols, samples_per_symbol=samples_per_symbol)
    multi = np.asarray(sequence_ber(x, **seq_kw), float).reshape(x.shape)
    need_multi: float | None
    try:
        need_multi = float(db(_solve_one(lambda v: float(sequence_ber(db(v), **seq_kw)), float(target_ber),
                                         f"multi-symbol {detector_symbols}")))
    except EstimateError:  # below the error floor
        need_multi = None
    out.update({
        "detector_symbols": int(detector_symbols),
        "ber_one_symbol_pulse": one.tolist(),
        "ber_multi_symbol": multi.tolist(),
        "fer_one_symbol_pulse": np.asarray(fer_from_ber(one, frame_bits), float).tolist(),
        "fer_multi_symbol": np.asarray(fer_from_ber(multi, frame_bits), float).tolist(),
    })
    out["needed_db"]["one_symbol_pulse"] = _needed_or_none(target_ber, "per_symbol_pulse", **pulse_kw)
    out["needed_db"]["multi_symbol"] = need_multi
