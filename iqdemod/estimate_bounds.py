"""Cramér–Rao bounds on the variance of an Eb/N0 estimate, to judge the estimators against.

Non-coherent data-aided (the receiver's own case: Rician and exponential
outputs, phase unknown) and coherent data-aided (complex samples of a known
sequence). REFERENCE.md sec. 4 [derived] gives worked values for both.
:mod:`iqdemod.estimate` offers every name.
"""

from __future__ import annotations

import math

import numpy as np

from iqdemod.errors import EstimateError

__all__ = ["crb_normalised_variance_noncoherent_da", "crb_normalised_variance_coherent_da"]


def _rician_fisher(snr: float) -> np.ndarray:
    """Fisher information about (S, N) at N = 1 from one ``|s + n|^2``.

    Density of the amplitude r (Rice): ``2 r exp(-(r^2 + S)) I0(2 r sqrt(S))``
    (Proakis, *Digital Communications*, ch. 2). Scores, with
    ``u = 2 r sqrt(S)`` and ``A = I1(u) / I0(u)``::

        d/dS ln f = -1 + A r / sqrt(S)
        d/dN ln f = -1 + r^2 + S - A u
    """
    from scipy import special  # late: the decoder's import need not pay for it

    root = math.sqrt(snr)

    def parts(r):
        u = 2.0 * r * root
        a = special.i1e(u) / special.i0e(u)
        dens = 2.0 * r * math.exp(-((r - root) ** 2)) * special.i0e(u)
        s_s = -1.0 + a * r / root
        s_n = -1.0 + r * r + snr - a * u
        return dens, s_s, s_n

    def entry(i, j):
        def f(r):
            dens, s_s, s_n = parts(r)
            sc = (s_s, s_n)
            return dens * sc[i] * sc[j]

        lo, hi = max(0.0, root - 12.0), root + 12.0
        pts = [root] if lo < root < hi else None
        from scipy import integrate  # late: only the bounds integrate

        return integrate.quad(f, lo, hi, points=pts, epsabs=1e-13, epsrel=1e-10, limit=200)[0]

    j_ss, j_sn, j_nn = entry(0, 0), entry(0, 1), entry(1, 1)
    return np.array([[j_ss, j_sn], [j_sn, j_nn]])


def _crb_arguments(ebn0, n_symbols) -> np.ndarray:
    """The bounds' shared argument checks; returns Eb/N0 as a float array."""
    g = np.asarray(ebn0, dtype=float)
    if np.any(~(g > 0)) or np.any(~np.isfinite(g)):
        raise EstimateError(f"ebn0 {ebn0!r}: must be a finite linear Eb/N0 > 0")
    if isinstance(n_symbols, bool) or int(n_symbols) != n_symbols or n_symbols < 1:
        raise EstimateError(f"n_symbols {n_symbols!r}: must be an integer >= 1")
    return g


def crb_normalised_variance_noncoherent_da(ebn0, n_symbols):
    """Cramér–Rao bound on ``var(rho_hat) / rho^2``, non-coherent BFSK, data-aided.

    Each of ``L`` symbols contributes the sent tone's output (Rician
    amplitude, parameters ``S = |s|^2`` and ``N``, phase unknown) and the
    other tone's output (exponential with mean ``N``), both used. The
    Fisher information per symbol about ``theta = (S, N)`` is that of the
    Rician density (found by quadrature, see ``_rician_fisher``) plus
    ``diag(0, 1 / N^2)`` from the exponential; for ``rho = S / N``::

        CRB(rho) = g^T J^-1 g / L,   g = (1/N, -S/N^2)

    normalised by ``rho^2`` (scale-free, so ``N = 1``). REFERENCE.md sec. 4
    [derived]: 5.64e-3 at 0 dB and 9.58e-4 at 10 dB for L = 1000. At high
    Eb/N0 it tends to ``(2/rho + 2/3) / L``: the Rician becomes Gaussian in
    amplitude and gives half the noise information of a complex sample.

    Parameters
    ----------
    ebn0 : float or array_like
        True linear Eb/N0 (> 0).
    n_symbols : int
        ``L`` (>= 1).

    Returns
    -------
    float or ndarray
        Normalised variance bound.

    Examples
    --------
    REFERENCE §4: 9.58e-4 at 10 dB for L = 1000.

    >>> f"{crb_normalised_variance_noncoherent_da(10.0, 1000):.3g}"
    '0.000958'
    """
    g = _crb_arguments(ebn0, n_symbols)

    def one(s: float) -> float:
        j = _rician_fisher(s)
        j[1, 1] += 1.0
        grad = np.array([1.0, -s])
        return float(grad @ np.linalg.solve(j, grad)) / (s * s)

    out = np.array([one(float(v)) for v in g.ravel()]).reshape(g.shape) / int(n_symbols)
    return float(out) if g.ndim == 0 else out


def crb_normalised_variance_coherent_da(ebn0, n_symbols):
    """Cramér–Rao bound on ``var(rho_hat) / rho^2`` for coherent data-aided samples.

    ``L`` complex samples of a known unit-modulus sequence with unknown
    real amplitude ``A`` and noise power ``N``: Fisher information
    ``2L/N`` for ``A`` and ``L/N^2`` for ``N``, so
    ``var(rho_hat) >= (2 rho + rho^2) / L`` (derived here from those two
    informations; REFERENCE.md sec. 4 [derived]), i.e. a normalised
    bound ``(2/rho + 1) / L``: 3.00e-3 at 0 dB, 1.20e-3 at 10 dB for
    L = 1000. Arguments and result as for
    :func:`crb_normalised_variance_noncoherent_da`: true linear Eb/N0 (> 0,
    float or array) and ``L`` (>= 1) in, the normalised bound out.

    Examples
    --------
    >>> round(crb_normalised_variance_coherent_da(1.0, 1000), 6)
    0.003

    Above a few dB the non-coherent receiver's bound is the lower one: its
    other tone's output is a second look at the noise (REFERENCE §4: 1.20e-3
    against 9.58e-4 at 10 dB).

    >>> crb_normalised_variance_coherent_da(10.0, 1000) > crb_normalised_variance_noncoherent_da(10.0, 1000)
    True
    """
    g = _crb_arguments(ebn0, n_symbols)
    out = (2.0 * g + g * g) / (int(n_symbols) * g * g)
    return float(out) if g.ndim == 0 else out

