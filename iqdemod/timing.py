"""Symbol timing: where each symbol starts, and how fast the transmitter's clock runs.

The timing detector is the energy a tone-correlator pair collects in a window
of one symbol slid along the burst, e(t) = |z0(t)|² + |z1(t)|². It peaks when
the window lines up with a symbol, because a window that straddles a change of
tone splits its energy between two correlators whose outputs partly cancel.
e(t) therefore carries a line at the symbol rate whose phase gives the timing:
the square-and-filter estimator of Oerder & Meyr ("Digital filter and square
timing recovery", IEEE Trans. Commun. 36(5), 1988), applied to the
non-coherent correlator energy instead of a squared matched-filter output.

A transmitter clock that is off makes that phase drift along the burst. The
burst is cut into segments of ``SEGMENT_SYMBOLS`` symbols, each segment's phase
is measured against the whole burst's, and a weighted straight-line fit gives
the drift: its slope is the clock error, its intercept the timing of the first
symbol. This is a block (feed-forward) estimate over a whole burst, so it
follows a constant clock error of any size the line can express, with no loop
to converge.
"""

from __future__ import annotations

from dataclasses import dataclass

import cmath
import math

import numpy as np

from .correlate import cached_phasor


__all__ = ["Timing", "symbol_timing", "symbol_starts", "SEGMENT_SYMBOLS"]

SEGMENT_SYMBOLS = 32


@dataclass(frozen=True)
class Timing:
    """A burst's symbol grid.

    Attributes
    ----------
    first_s : float
        Position of one symbol boundary, samples from the burst start (cumulative-
        sum convention: sample n covers [n, n+1)).
    period_samples : float
        Measured symbol period, samples.
    strength : float
        |symbol-rate line| / mean energy: near 0 when the burst has no
        transitions to time on.
    breaks : tuple of int
        Sample positions where the symbol phase jumps and stays: two
        transmissions with too short a gap for the detector to part them.
    measured_period : float or None
        The period as fitted, for the clock figure; `period_samples`, the one
        the symbol grid uses, has its drift shrunk towards none by what the fit
        can tell (see :func:`_shrunk_line`).
    """

    first_s: float
    period_samples: float
    strength: float
    breaks: tuple[int, ...] = ()
    measured_period: float | None = None

    def clock_error_ppm(self, nominal_period: float) -> float:
        """Transmitter symbol-clock error, ppm (+ = faster than nominal), as the fit measured it."""
        period = self.measured_period or self.period_samples
        return (nominal_period / period - 1.0) * 1e6


def _wrap(a):
    """Angles folded into [−π, π) (float or array)."""
    return (a + np.pi) % (2 * np.pi) - np.pi


def _line_fit(t, y, w) -> tuple[float, float]:
    """Weighted least-squares line y ≈ a + b·t over a few points (plain floats: no array overhead)."""
    sw = sum(w)
    tm = sum(wi * ti for wi, ti in zip(w, t)) / sw
    ym = sum(wi * yi for wi, yi in zip(w, y)) / sw
    var = sum(wi * (ti - tm) ** 2 for wi, ti in zip(w, t))
    slope = sum(wi * (ti - tm) * (yi - ym) for wi, ti, yi in zip(w, t, y)) / var if var > 0 else 0.0
    return ym - slope * tm, slope


def symbol_timing(sums: np.ndarray, period_samples: float, *, max_ppm: float = 2000.0) -> Timing:
    """Estimate the symbol grid of a burst from its tone running sums.

    Parameters
    ----------
    sums : numpy.ndarray
        From :func:`iqdemod.correlate.tone_sums`, shape (2, n + 1).
    period_samples : float
        Nominal symbol period, samples.
    max_ppm : float
        Clock errors beyond this are taken as noise and not followed.

    Returns
    -------
    Timing

    Examples
    --------
    A continuous-phase burst of 200 random symbols, 16 samples each (1 kbaud
    at 16 kHz, tones ±500 Hz), its first 11 samples cut off. The grid comes
    back with a period of 16 samples and a boundary at 4.5: the tone changes
    between samples 4 and 5 (the phase step into sample n uses sample n's tone):

    >>> import numpy as np
    >>> from iqdemod.correlate import tone_sums
    >>> bits = np.random.default_rng(1).integers(0, 2, 200)
    >>> freq_hz = np.repeat(np.where(bits == 1, 500.0, -500.0), 16)
    >>> x = np.exp(2j * np.pi * np.cumsum(freq_hz) / 16000)[11:]
    >>> t = symbol_timing(tone_sums(x, 16000, (-500.0, 500.0)), 16.0)
    >>> round(t.first_s % 16, 1), round(t.period_samples, 3), t.breaks
    (4.5, 16.0, ())
    """
    n = sums.shape[1] - 1
    T = float(period_samples)
    starts = np.arange(0, max(1, int(np.floor(n - T)) + 1), dtype=np.float64)
    if n < 2 * T:
        return Timing(0.0, T, 0.0)
    # Windows start on whole samples, so their ends all share one fractional part:
    # the interpolation is two shifted slices, no gather.
    whole, frac = int(np.floor(T)), T - np.floor(T)
    m = min(len(starts), n - whole)  # a whole-number period must not read past the last sum
    starts = starts[:m]
    ends = (1.0 - frac) * sums[:, whole : whole + m] + frac * sums[:, whole + 1 : whole + 1 + m]
    z = ends - sums[:, :m]
    p = z.real**2 + z.imag**2
    e = (p[1] - p[0]) ** 2
    rot = e * cached_phasor(-1.0 / T, len(starts))  # starts are 0, 1, 2, …
    total = rot.sum()
    strength = float(abs(total) / max(e.sum(), 1e-300))
    phase0 = float(np.angle(total))
    seg_len = SEGMENT_SYMBOLS * T
    n_seg = int(len(starts) // seg_len)
    intercept, slope = 0.0, 0.0
    measured = None
    breaks: tuple[int, ...] = ()
    if n_seg >= 3:
        edges = [int(round(k * seg_len)) for k in range(n_seg + 1)]
        csum = np.concatenate([[0], np.cumsum(rot)])
        seg = (csum[edges[1:]] - csum[edges[:-1]]).tolist()
        centre = [(a + b) / 2.0 for a, b in zip(edges[:-1], edges[1:])]
        w = [abs(c) for c in seg]
        if sum(w) > 0:
            ref = cmath.exp(-1j * phase0)
            resid = [_wrap(cmath.phase(c * ref)) for c in seg]
            intercept, slope = _line_fit(centre, resid, w)
            # a second pass about the fitted line, so a drift near ±π does not wrap
            resid2 = [_wrap(r - (intercept + slope * c)) for r, c in zip(resid, centre)]
            i2, s2 = _line_fit(centre, resid2, w)
            intercept, slope = intercept + i2, slope + s2
            # slope = 2π(1/T' − 1/T)
            if abs(slope / (2 * np.pi) * T) > max_ppm * 1e-6:
                intercept, slope = 0.0, 0.0
            measured = 1.0 / (1.0 / T + slope / (2 * np.pi))
            intercept, slope = _shrunk_line(centre, resid, w, intercept, slope, T)
            breaks = _breaks(resid, w, edges)
    period = 1.0 / (1.0 / T + slope / (2 * np.pi))
    phi0 = phase0 + intercept
    first = (-phi0 * period / (2 * np.pi)) % period
    return Timing(float(first), float(period), strength, breaks, measured_period=float(measured or period))


PRIOR_PPM = 150.0  # a transmitter's symbol clock: crystals are within ±20–100 ppm (common practice)


def _shrunk_line(t, y, w, intercept: float, slope: float, T: float) -> tuple[float, float]:
    """The fitted line with its slope shrunk towards 0 by what the fit can tell (a MAP estimate).

    A Gaussian prior of ``PRIOR_PPM`` on the clock error and the fit's own
    standard error give the posterior mean: slope·σp²/(σp² + se²), pivoting
    about the weighted centre of the segments. A long transmission measures
    its clock and keeps it; a short one with a weak timing line (a Gaussian
    pulse at h = ½) keeps a near-constant period instead of a tilt fitted to
    noise, which would cost decisions at its far end.
    """
    n = len(t)
    sw = sum(w)
    if n < 4 or sw <= 0:
        return intercept, slope
    tm = sum(wi * ti for wi, ti in zip(w, t)) / sw
    sxx = sum(wi * (ti - tm) ** 2 for wi, ti in zip(w, t))
    if sxx <= 0:
        return intercept, slope
    rss = sum(wi * _wrap(yi - intercept - slope * ti) ** 2 for wi, ti, yi in zip(w, t, y))
    se2 = rss / (n - 2) / sxx
    prior2 = (2 * np.pi * PRIOR_PPM * 1e-6 / T) ** 2
    shrunk = slope * prior2 / (prior2 + se2)
    centre_value = intercept + slope * tm
    return centre_value - shrunk * tm, shrunk


def _breaks(resid: list[float], w: list[float], edges: list[int]) -> tuple[int, ...]:
    """Segment edges where the timing phase jumps by more than a quarter symbol and stays there.

    One clock drifts smoothly, by far less than that between segments; a jump
    between two steady pairs of segments (both before, both after) is a new
    transmission. Weak segments (little transition energy) and overwhelming
    ones (a click of interference) are not trusted either way.
    """
    med = sorted(w)[len(w) // 2]
    usable = [0.3 * med <= wi <= 5.0 * med for wi in w]
    out = []
    last = -3
    for j in range(2, len(resid) - 1):
        if j - last < 3 or not all(usable[j - 2 : j + 2]):
            continue
        b0, b1, a0, a1 = resid[j - 2], resid[j - 1], resid[j], resid[j + 1]
        if abs(_wrap(b1 - b0)) > math.pi / 4 or abs(_wrap(a1 - a0)) > math.pi / 4:
            continue
        before = cmath.phase(cmath.exp(1j * b0) + cmath.exp(1j * b1))
        after = cmath.phase(cmath.exp(1j * a0) + cmath.exp(1j * a1))
        if abs(_wrap(after - before)) > math.pi / 2:
            out.append(int(edges[j]))
            last = j
    return tuple(out)


def symbol_starts(timing: Timing, n_samples: int) -> np.ndarray:
    """Starts of every whole symbol window inside a burst of `n_samples`.

    Examples
    --------
    >>> symbol_starts(Timing(first_s=20.5, period_samples=16.0, strength=1.0), 64).tolist()
    [4.5, 20.5, 36.5]
    """
    T = timing.period_samples
    k_first = int(np.ceil(-timing.first_s / T))
    k_last = int(np.floor((n_samples - T - timing.first_s) / T))
    k = np.arange(k_first, k_last + 1)
    return timing.first_s + k * T
