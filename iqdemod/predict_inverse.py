"""The Eb/N0 a receiver needs for a target bit error rate: the Pb functions inverted.

The three textbook curves invert exactly; the others (correlated tones, a
bank off frequency, Manchester, the one-symbol bank on a real pulse) are
solved with ``scipy.optimize.brentq`` on log Pb against Eb/N0 in dB, since Pb
falls monotonically with Eb/N0 for each of them. :mod:`iqdemod.predict`
offers every name.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import optimize, stats

from iqdemod.errors import EstimateError, LinkError
from iqdemod.predict_args import scalar_or_array
from iqdemod.predict_bank import pb_manchester, pb_per_symbol_pulse
from iqdemod.predict_closed_form import db, from_db, pb_mismatched, pb_noncoherent_correlated

__all__ = ["ebn0_for_pb", "ebn0_db_for_pb", "solve_ebn0"]

_SCHEMES = ("noncoherent", "coherent_orthogonal", "antipodal", "correlated", "mismatched", "manchester",
           "per_symbol_pulse")


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


def solve_ebn0(fun, pb: float, scheme: str) -> float:
    """The linear Eb/N0 at which a decreasing Pb function reaches `pb`.

    Solved with ``scipy.optimize.brentq`` on log Pb against Eb/N0 in dB,
    between -30 and 60 dB; a target within a hair of Pb at no signal is
    solved linearly near 0.

    Parameters
    ----------
    fun : callable
        Pb as a function of linear Eb/N0, decreasing.
    pb : float
        Target bit error probability.
    scheme : str
        The scheme's name, for the error message.

    Returns
    -------
    float
        Linear Eb/N0.

    Raises
    ------
    EstimateError
        The target is not reached below 60 dB (an error floor).

    Examples
    --------
    ½·exp(−Eb/2N0) reaches 1e-5 at 13.3525 dB (REFERENCE §1):

    >>> round(db(solve_ebn0(lambda g: 0.5 * np.exp(-0.5 * g), 1e-5, "noncoherent")), 4)
    13.3525
    """
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
        out = np.array([solve_ebn0(fun, float(p), scheme) for p in arr.ravel()]).reshape(arr.shape)
    return scalar_or_array(out, arr.ndim == 0)


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

