"""Closed-form bit error rates of the square-law receivers, and the coherent references.

Every function here is a closed-form result from the literature, vectorised
over the Eb/N0 argument (linear unless the name ends in ``_db``; :func:`db`
and :func:`from_db` convert): non-coherent orthogonal tones, correlated tones
(tone spacing h not whole), a correlator bank off frequency, the general
square-law comparison of two correlated complex Gaussian outputs that all of
them reduce to, and the coherent orthogonal and antipodal curves a link is
measured against. :mod:`iqdemod.predict` offers every name.

Sources: Proakis, *Digital Communications* (5th ed. ch. 4; Appendix B) and
Sklar, *Digital Communications* (2nd ed. ch. 4); Stein, "Unified analysis of
certain coherent and noncoherent binary communications systems", IEEE Trans.
Inf. Theory IT-10, 1964; Marcum's Q-function (Marcum 1950).
"""

from __future__ import annotations

import numpy as np
from scipy import special, stats

from iqdemod.errors import EstimateError, LinkError
from iqdemod.predict_args import ebn0_array, finite_link_numbers, scalar_or_array, whole_number

__all__ = ["db", "from_db", "pb_noncoherent", "pb_coherent_orthogonal", "pb_antipodal", "tone_correlation",
           "tones_apart", "pb_noncoherent_correlated", "pb_square_law", "pb_mismatched", "mismatch_loss_db"]


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

    Parameters
    ----------
    x : float or array_like
        Linear power ratio, >= 0.

    Returns
    -------
    float or ndarray
        Decibels; ``-inf`` where `x` is 0 (no signal), not an error.

    Examples
    --------
    >>> db(10.0), db([100.0, 0.0]).tolist()
    (10.0, [20.0, -inf])
    """
    arr = np.asarray(x, dtype=float)
    with np.errstate(divide="ignore"):
        return scalar_or_array(10.0 * np.log10(arr), arr.ndim == 0)


def from_db(x_db):
    """Decibels to a linear power ratio, ``10 ** (x_db / 10)``: the inverse of :func:`db`.

    Examples
    --------
    >>> from_db(10.0)
    10.0
    >>> round(from_db(-3.0), 4)  # half power, near enough
    0.5012
    """
    arr = np.asarray(x_db, dtype=float)
    return scalar_or_array(np.power(10.0, arr / 10.0), arr.ndim == 0)


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
    g, scalar = ebn0_array(ebn0)
    return scalar_or_array(0.5 * np.exp(-0.5 * g), scalar)


def pb_coherent_orthogonal(ebn0):
    """Bit error probability of coherent binary orthogonal FSK, ``Q(sqrt(ebn0))``.

    Source: Proakis, *Digital Communications*, ch. 4; Sklar, ch. 4. The
    reference the non-coherent receiver is measured against: it knows the
    carrier phase, which ours never does (the health report's
    ``noncoherent_penalty_db`` is the difference).

    Parameters
    ----------
    ebn0 : float or array_like
        Linear Eb/N0 (>= 0); ``Q`` is the standard normal tail, ``scipy.stats.norm.sf``.

    Returns
    -------
    float or ndarray
        Pb, a float for a scalar `ebn0`.

    Examples
    --------
    At 10 dB (REFERENCE §1: 7.827e-4):

    >>> f"{pb_coherent_orthogonal(10.0):.4g}"
    '0.0007827'
    """
    g, scalar = ebn0_array(ebn0)
    return scalar_or_array(stats.norm.sf(np.sqrt(g)), scalar)


def pb_antipodal(ebn0):
    """Bit error probability of antipodal signalling (BPSK), ``Q(sqrt(2 ebn0))``.

    The curve of :func:`pb_coherent_orthogonal` moved 3 dB to the left: for
    the same energy, antipodal signals lie twice as far apart as orthogonal
    ones (Proakis, *Digital Communications*, ch. 4; Sklar, ch. 4). It is the
    best any binary signalling can do on a white-noise channel, the floor of
    the planning plots.

    Parameters
    ----------
    ebn0 : float or array_like
        Linear Eb/N0 (>= 0), the energy of one bit (or symbol: they are one here).

    Returns
    -------
    float or ndarray
        Pb, in the shape of `ebn0`; 0.5 at no signal.

    Examples
    --------
    At 10 dB (REFERENCE §1: 3.872e-6), and the 3 dB between the coherent curves:

    >>> f"{pb_antipodal(10.0):.4g}"
    '3.872e-06'
    >>> pb_antipodal(5.0) == pb_coherent_orthogonal(10.0)
    True
    """
    g, scalar = ebn0_array(ebn0)
    return scalar_or_array(stats.norm.sf(np.sqrt(2.0 * g)), scalar)


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
    n = None if samples_per_symbol is None else whole_number(
        samples_per_symbol, "samples_per_symbol"
    )
    arr = np.asarray(h, dtype=float)
    if not np.all(np.isfinite(arr)):
        raise LinkError(f"h {h!r}: must be finite")
    rho = _tone_corr(arr, n)
    return complex(rho) if arr.ndim == 0 else rho


def tones_apart(h: float, samples_per_symbol: int | None) -> complex:
    """The tones' correlation at spacing `h`; refuses tones that coincide.

    Parameters
    ----------
    h : float
        Tone spacing times symbol time.
    samples_per_symbol : int or None
        ``N`` for sampled correlators (as :func:`tone_correlation`), None for
        continuous time.

    Returns
    -------
    complex
        The correlation coefficient of the two tones.

    Raises
    ------
    LinkError
        Tones that coincide (h = 0 modulo ``N``).

    Examples
    --------
    >>> abs(tones_apart(1.0, None)) < 1e-12  # whole h: orthogonal tones
    True
    >>> tones_apart(8.0, 8)
    Traceback (most recent call last):
    ...
    iqdemod.errors.LinkError: h 8.0: the two tones coincide; must not be 0 (mod samples_per_symbol)
    """
    rho_h = complex(_tone_corr(np.asarray(h), samples_per_symbol))
    if abs(rho_h) >= 1.0 - 1e-12:
        raise LinkError(f"h {h}: the two tones coincide; must not be 0 (mod samples_per_symbol)")
    return rho_h


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
    g, scalar = ebn0_array(ebn0)
    r = np.abs(np.asarray(rho))
    if np.any(~np.isfinite(r)) or np.any(r > 1.0 + 1e-12):
        raise EstimateError(f"rho {rho!r}: |rho| must be <= 1")
    root = np.sqrt(np.clip(1.0 - r * r, 0.0, 1.0))
    a = np.sqrt(0.5 * g * (1.0 - root))
    b = np.sqrt(0.5 * g * (1.0 + root))
    pb = _marcum_q1(a, b) - 0.5 * _exp_i0(a, b)
    return scalar_or_array(np.clip(pb, 0.0, 0.5), scalar and r.ndim == 0)


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

    return scalar_or_array(np.clip(_stein_error(mx, my, vx, vy, c), 0.0, 1.0), scalar)


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
    g, scalar = ebn0_array(ebn0)
    n = None if samples_per_symbol is None else whole_number(samples_per_symbol, "samples_per_symbol")
    finite_link_numbers(h=h, freq_error_T=freq_error_T)
    h, eps = float(h), float(freq_error_T)
    rho_h = tones_apart(h, n)
    amp = np.sqrt(g)
    right = complex(_tone_corr(np.asarray(eps), n))
    leak0 = complex(_tone_corr(np.asarray(eps - h), n))
    leak1 = complex(_tone_corr(np.asarray(eps + h), n))
    pb0 = pb_square_law(amp * right, amp * leak0, noise_corr=rho_h)
    pb1 = pb_square_law(amp * right, amp * leak1, noise_corr=np.conj(rho_h))
    return scalar_or_array(0.5 * (np.asarray(pb0) + np.asarray(pb1)), scalar)


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
        return scalar_or_array(-20.0 * np.log10(mag), arr.ndim == 0)

