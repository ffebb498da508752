"""Small numeric helpers shared by several stages: decibels, peak interpolation, band power, bit packing.

Each is written once here so that the survey, the burst detector and the
carrier search use the same arithmetic (a second copy drifts). Nothing here
knows about captures, links or frames.
"""

from __future__ import annotations

import numpy as np

__all__ = ["power_db", "parabolic_offset", "band_power", "pack_bits", "bits_to_int"]

TINY = 1e-300  # power below this is shown as TINY: log10 stays finite


def power_db(power, *, floor: float = TINY):
    """A power ratio in decibels, 10·log10(p), with `p` held at `floor` or above so that zero stays finite.

    Parameters
    ----------
    power : float or array_like
        Linear power (or a power ratio), >= 0.
    floor : float
        Smallest power taken as it is; below it (zero included) `floor` is used.

    Returns
    -------
    float or numpy.ndarray
        dB, a float for a scalar input.

    Examples
    --------
    >>> power_db(100.0)
    20.0
    >>> power_db([1.0, 0.5, 0.0], floor=1e-30).round(2).tolist()
    [0.0, -3.01, -300.0]
    """
    out = 10.0 * np.log10(np.maximum(power, floor))
    return float(out) if np.ndim(out) == 0 else out


def parabolic_offset(left: float, centre: float, right: float) -> float:
    """Where the parabola through three equally spaced samples peaks, in steps from the middle one.

    The three-point (quadratic) interpolation of a sampled peak (common
    practice; e.g. Smith & Serra's spectral peak interpolation, 1987, cited
    from memory). The result is clipped to ±½: a peak further out belongs to
    a neighbouring sample. 0 when the samples do not bend down (no maximum).

    Parameters
    ----------
    left, centre, right : float
        Samples at steps −1, 0 and +1; `centre` is normally the largest.

    Returns
    -------
    float
        Offset of the peak from the middle sample, steps, within [−½, ½].

    Examples
    --------
    The parabola y = −(x − 0.25)² sampled at −1, 0, 1 peaks at 0.25:

    >>> parabolic_offset(-1.5625, -0.0625, -0.5625)
    0.25
    >>> parabolic_offset(1.0, 1.0, 1.0)  # flat: no peak to place
    0.0
    """
    bend = left - 2.0 * centre + right
    if not bend < 0:
        return 0.0
    return float(np.clip(0.5 * (left - right) / bend, -0.5, 0.5))


def band_power(frames: np.ndarray, band_bins: np.ndarray) -> np.ndarray:
    """Power per sample in a band of FFT bins, for each frame (row) of samples.

    The statistic of an energy detector that looks only at a signal's band:
    the periodogram |X_k|² of each frame of L samples, averaged over the bins
    of the band and divided by L. White noise of variance σ² gives σ² on
    average in any band (each bin holds L·σ²), so the statistic compares
    directly with a noise floor per sample.

    Parameters
    ----------
    frames : numpy.ndarray
        Complex samples, shape (n_frames, L).
    band_bins : numpy.ndarray
        Boolean mask of length L over the FFT bins (numpy's FFT order).

    Returns
    -------
    numpy.ndarray
        Shape (n_frames,).

    Examples
    --------
    A tone of amplitude 1 on bin 2 of 8-sample frames, seen through a band of
    the bins 1–3: its L² = 64 in one of three bins, divided by L = 8:

    >>> x = np.exp(2j * np.pi * 2 * np.arange(8) / 8)[None, :]
    >>> band = np.isin(np.arange(8), [1, 2, 3])
    >>> band_power(x, band).round(6).tolist()
    [2.666667]
    """
    from scipy import fft as _fft  # keeps single precision (numpy's FFT would work in complex128)

    spec = _fft.fft(frames, axis=-1)[..., band_bins]
    power = spec.real**2 + spec.imag**2
    return power.mean(axis=-1, dtype=np.float64) / frames.shape[-1]


def pack_bits(bits: np.ndarray, order: str = "msb") -> np.ndarray:
    """Pack bits (0/1) into bytes along the last axis, 8 bits a byte, first bit the MSB (or the LSB).

    Parameters
    ----------
    bits : numpy.ndarray
        0/1 values; the last axis is a multiple of 8 long.
    order : {"msb", "lsb"}
        Whether the first bit of each group of 8 is the byte's most or least
        significant bit.

    Returns
    -------
    numpy.ndarray
        uint8, the last axis 8 times shorter.

    Examples
    --------
    >>> pack_bits(np.array([1, 0, 0, 1, 1, 0, 1, 1])).tolist()
    [155]
    >>> pack_bits(np.array([[1, 0, 0, 0, 0, 0, 0, 0]]), "lsb").tolist()
    [[1]]
    """
    if order not in ("msb", "lsb"):
        raise ValueError(f"bit order {order!r}: must be 'msb' or 'lsb'")
    bits = np.asarray(bits, dtype=np.uint8)
    if bits.shape[-1] % 8:
        raise ValueError(f"{bits.shape[-1]} bits: not whole bytes")
    grouped = bits.reshape(*bits.shape[:-1], bits.shape[-1] // 8, 8)
    return np.packbits(grouped, axis=-1, bitorder="big" if order == "msb" else "little")[..., 0]


def bits_to_int(bits) -> int:
    """The whole number that bits (0/1, most significant first) spell; 0 for no bits.

    Examples
    --------
    >>> hex(bits_to_int([1, 0, 0, 1, 1, 0, 1, 1, 0, 0, 1, 1, 1, 1, 0, 0]))
    '0x9b3c'
    >>> bits_to_int([])
    0
    """
    value = 0
    for b in np.asarray(bits, dtype=np.uint8).tolist():
        value = (value << 1) | (b & 1)
    return value
