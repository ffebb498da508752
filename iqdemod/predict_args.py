"""What the error-rate functions accept: the argument checks every Pb module shares.

The closed-form results (:mod:`iqdemod.predict_closed_form`), the one-symbol
bank on a real pulse (:mod:`iqdemod.predict_bank`) and the inverses take
Eb/N0 as a *linear* ratio, vectorised, and a few link numbers (h, δf·T, BT,
samples per symbol). Each check is written once here so that they refuse the
same values with the same words. A bad Eb/N0 is an :class:`EstimateError`, a
bad link number a :class:`LinkError`.
"""

from __future__ import annotations

import math

import numpy as np

from iqdemod.errors import EstimateError, LinkError

__all__ = ["scalar_or_array", "ebn0_array", "whole_number", "finite_link_numbers"]


def scalar_or_array(value, scalar: bool):
    """A Python float for a scalar input, otherwise the array itself.

    Parameters
    ----------
    value : float or ndarray
        A result computed on the array form of the input.
    scalar : bool
        Whether the caller passed a scalar.

    Returns
    -------
    float or ndarray

    Examples
    --------
    >>> scalar_or_array(np.float64(0.25), True), scalar_or_array(np.array([0.25]), False)
    (0.25, array([0.25]))
    """
    return float(value) if scalar else value


def ebn0_array(ebn0, name: str = "ebn0") -> tuple[np.ndarray, bool]:
    """A linear Eb/N0 argument as a float array, and whether it was a scalar.

    Parameters
    ----------
    ebn0 : float or array_like
        Linear Eb/N0, every value >= 0 (not NaN).
    name : str
        The argument's name in the error message.

    Returns
    -------
    ndarray, bool

    Raises
    ------
    EstimateError
        A negative or NaN value, named with the first bad one.

    Examples
    --------
    >>> ebn0_array(10.0)
    (array(10.), True)
    >>> ebn0_array([-1.0])
    Traceback (most recent call last):
    ...
    iqdemod.errors.EstimateError: ebn0 -1.0: must be a linear Eb/N0 >= 0 (convert dB with from_db)
    """
    arr = np.asarray(ebn0, dtype=float)
    if np.any(np.isnan(arr)) or np.any(arr < 0):
        bad = arr[np.isnan(arr) | (arr < 0)].flat[0]
        raise EstimateError(
            f"{name} {bad}: must be a linear Eb/N0 >= 0 (convert dB with from_db)"
        )
    return arr, arr.ndim == 0


def whole_number(value, name: str, *, minimum: int = 1, error: type = LinkError) -> int:
    """`value` as an int >= `minimum`; a LinkError (samples per symbol, pulse span) or the given class.

    Parameters
    ----------
    value : int-like
        A whole number (a bool is refused).
    name : str
        The argument's name in the error message.
    minimum : int
        Smallest value allowed.
    error : type
        The error class raised; :class:`LinkError` by default.

    Returns
    -------
    int

    Examples
    --------
    >>> whole_number(8.0, "samples_per_symbol")
    8
    >>> whole_number(1, "samples_per_symbol", minimum=2)
    Traceback (most recent call last):
    ...
    iqdemod.errors.LinkError: samples_per_symbol 1: must be an integer >= 2
    """
    if isinstance(value, bool) or int(value) != value or value < minimum:
        raise error(f"{name} {value!r}: must be an integer >= {minimum}")
    return int(value)


def finite_link_numbers(**values) -> None:
    """Refuse a link number (h, δf·T, BT) that is not one finite number.

    Parameters
    ----------
    **values
        Each link number by its name.

    Raises
    ------
    LinkError
        The first value that is not a single finite number.

    Examples
    --------
    >>> finite_link_numbers(h=0.5, bt=0.3)
    >>> finite_link_numbers(h=float("nan"))
    Traceback (most recent call last):
    ...
    iqdemod.errors.LinkError: h nan: must be a finite number
    """
    for name, v in values.items():
        if not (np.ndim(v) == 0 and math.isfinite(float(v))):
            raise LinkError(f"{name} {v!r}: must be a finite number")
