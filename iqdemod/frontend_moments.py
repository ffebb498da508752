"""What the recording receiver did to the samples: its DC offset and IQ imbalance, measured and undone.

The front end (:mod:`iqdemod.channel`) keeps running sums of every block it
transforms; this module turns them into the DC line it subtracts, the IQ
compensator w it applies (y = x − w·x*, the circularity-based compensator of
Anttila, Valkama & Renfors, IEEE Trans. Veh. Technol. 57(4), 2008, cited from
memory) and the figures an operator reads (:class:`FrontEndReport`: the DC
level, the IQ gain and phase error, the image rejection before and after;
shared/REFERENCE.md §11).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["FrontEndMoments", "FrontEndReport", "front_end_report", "image_rejection_db", "compensator",
           "run_moments", "DC_BLOCKS", "IMBALANCE_SIGMAS", "MAX_IRR_DB"]

DC_BLOCKS = 16  # the DC line is the mean of about this many blocks' means


IMBALANCE_SIGMAS = 4.0  # an IQ imbalance is corrected once the moments show it this many standard errors out


@dataclass(frozen=True)
class FrontEndMoments:
    """Running sums over the input, for the DC level and the IQ imbalance.

    Attributes
    ----------
    blocks : int
        FFT blocks so far.
    dc_estimate : complex
        The DC line removed from the last block.
    n : int
        Input samples summed.
    dc_sum : complex
        Σ of each block's mean times its new samples (for the mean DC level).
    power : float
        Σ|x − m|² (C), the block means m removed.
    pseudo : complex
        Σ(x − m)² (P), the non-circular part an imbalance leaves.
    pseudo_after : complex
        The same sum for the corrected samples (what the correction left).
    power_after : float
    """

    blocks: int = 0
    dc_estimate: complex = 0j
    n: int = 0
    dc_sum: complex = 0j
    power: float = 0.0
    pseudo: complex = 0j
    pseudo_after: complex = 0j
    power_after: float = 0.0


@dataclass(frozen=True)
class FrontEndReport:
    """What the front end measured about the receiver that made the capture.

    Attributes
    ----------
    dc_dbfs : float or None
        The DC offset's level, dB re full scale (1.0); None before any sample.
    iq_gain_db : float or None
        Q-branch gain relative to I, dB (shared/REFERENCE.md §11: g).
    iq_phase_deg : float or None
        Q-branch phase error φ, degrees.
    image_rejection_db : float or None
        Image rejection of the capture as recorded, dB (capped at ``MAX_IRR_DB``).
    image_rejection_after_db : float or None
        What is left after the correction, dB (capped likewise).
    """

    dc_dbfs: float | None = None
    iq_gain_db: float | None = None
    iq_phase_deg: float | None = None
    image_rejection_db: float | None = None
    image_rejection_after_db: float | None = None


MAX_IRR_DB = 80.0


def image_rejection_db(power: float, pseudo: complex) -> float:
    """Image rejection from the moments: x = K1·s + K2·s* gives |E x²|/E|x|² = 2r/(1 + r²), r = |K2/K1|.

    Returns −20·log10 r, at most ``MAX_IRR_DB``.

    Examples
    --------
    A receiver with 1 dB of gain and 3° of phase error on its Q branch (REFERENCE §11: an image
    rejection of about 24 dB), recording circular noise:

    >>> import math
    >>> import numpy as np
    >>> rng = np.random.default_rng(1)
    >>> s = (rng.standard_normal(400_000) + 1j * rng.standard_normal(400_000)) / math.sqrt(2)
    >>> g, phi = 10 ** (1 / 20), math.radians(3)
    >>> x = s.real + 1j * g * (math.sin(phi) * s.real + math.cos(phi) * s.imag)
    >>> power, pseudo = float(np.vdot(x, x).real), complex(np.dot(x, x))
    >>> round(image_rejection_db(power, pseudo), 1)
    23.9
    >>> 10 * math.log10((1 + 2 * g * math.cos(phi) + g * g) / (1 - 2 * g * math.cos(phi) + g * g))  # doctest: +ELLIPSIS
    23.9...
    """
    if power <= 0:
        return MAX_IRR_DB
    rho = min(abs(pseudo) / power, 1.0)
    if rho <= 0:
        return MAX_IRR_DB
    r = (1.0 - math.sqrt(max(0.0, 1.0 - rho * rho))) / rho
    return min(MAX_IRR_DB, -20.0 * math.log10(r)) if r > 0 else MAX_IRR_DB


def front_end_report(moments: FrontEndMoments) -> FrontEndReport:
    """The DC level and IQ imbalance behind a run's moments (shared/REFERENCE.md §11).

    Examples
    --------
    The moments of one block with a DC of 0.01 (−40 dBFS) and the receiver of
    :func:`compensator`'s example:

    >>> import math
    >>> import numpy as np
    >>> rng = np.random.default_rng(1)
    >>> s = (rng.standard_normal(400_000) + 1j * rng.standard_normal(400_000)) / math.sqrt(2)
    >>> g, phi = 10 ** (1 / 20), math.radians(3)
    >>> x = s.real + 1j * g * (math.sin(phi) * s.real + math.cos(phi) * s.imag)
    >>> m, w, dc = run_moments(FrontEndMoments(), np.array([0.01 + 0j]), np.array([np.vdot(x, x).real]),
    ...                        np.array([np.dot(x, x)]), len(x))
    >>> r = front_end_report(m)
    >>> round(r.dc_dbfs, 1), round(r.iq_gain_db, 2), round(r.iq_phase_deg, 1), round(r.image_rejection_db, 1)
    (-40.0, 1.01, 3.0, 23.9)
    >>> r.image_rejection_after_db  # corrected: capped at MAX_IRR_DB
    80.0
    """
    if moments.n == 0:
        return FrontEndReport()
    dc = abs(moments.dc_sum) / moments.n
    dc_dbfs = 20 * math.log10(dc) if dc > 0 else -math.inf
    c, p = moments.power / moments.n, moments.pseudo / moments.n
    ii, qq, iq = (c + p.real) / 2, (c - p.real) / 2, p.imag / 2
    if ii <= 0 or qq <= 0:
        return FrontEndReport(dc_dbfs=dc_dbfs)
    g = math.sqrt(qq / ii)
    phi = math.asin(max(-1.0, min(1.0, iq / math.sqrt(ii * qq))))
    return FrontEndReport(
        dc_dbfs=dc_dbfs,
        iq_gain_db=20 * math.log10(g),
        iq_phase_deg=math.degrees(phi),
        image_rejection_db=image_rejection_db(moments.power, moments.pseudo),
        image_rejection_after_db=image_rejection_db(moments.power_after, moments.pseudo_after),
    )


def compensator(power: float, pseudo: complex) -> complex:
    """w such that y = x − w·x* is circular: w²·P* − 2w·C + P = 0, the small root.

    Examples
    --------
    A receiver with 1 dB of gain and 3° of phase error on its Q branch (REFERENCE §11: an image
    rejection of about 24 dB), recording circular noise:

    >>> import math
    >>> import numpy as np
    >>> rng = np.random.default_rng(1)
    >>> s = (rng.standard_normal(400_000) + 1j * rng.standard_normal(400_000)) / math.sqrt(2)
    >>> g, phi = 10 ** (1 / 20), math.radians(3)
    >>> x = s.real + 1j * g * (math.sin(phi) * s.real + math.cos(phi) * s.imag)
    >>> power, pseudo = float(np.vdot(x, x).real), complex(np.dot(x, x))
    >>> w = compensator(power, pseudo)
    >>> y = x - w * np.conj(x)
    >>> bool(abs(np.dot(y, y)) / np.vdot(y, y).real < 1e-9)  # E[y²] = 0: circular again
    True
    """
    if power <= 0 or pseudo == 0:
        return 0j
    disc = math.sqrt(max(0.0, power * power - abs(pseudo) ** 2))
    return (power - disc) / pseudo.conjugate()


def run_moments(moments: FrontEndMoments, means: np.ndarray, sums: np.ndarray, squares: np.ndarray, new: int,
                fresh_sums: np.ndarray | None = None) -> tuple[FrontEndMoments, np.ndarray, np.ndarray]:
    """The running moments after a run of blocks, and the DC line and IQ compensator w of each.

    Block r has `new` fresh samples with mean ``means[r]``, Σ|x|² ``sums[r]``
    and Σx² ``squares[r]`` (and Σx ``fresh_sums[r]``, else taken as `new` × the
    block mean). Its DC line is the block means averaged over the
    last DC_BLOCKS blocks (all of them at first), so that a signal sitting on
    the centre keeps its own low frequencies; its moments are taken about that
    line. The imbalance is corrected only once the moments can tell it from
    their own noise: for a circular signal |ΣP|/ΣC has a standard error of
    about 1/√n, and a correction fitted to that noise would add an image
    rather than remove one. The loop is over plain numbers, block by block in
    order (each block's w depends on all before it).

    Examples
    --------
    Two blocks of circular noise on a DC of 0.1 + 0.05j: the DC line is the
    mean of the block means, and circular noise shows no imbalance to correct:

    >>> import numpy as np
    >>> rng = np.random.default_rng(2)
    >>> blocks = [0.1 + 0.05j + rng.standard_normal(4000) + 1j * rng.standard_normal(4000) for _ in range(2)]
    >>> m, w, dc = run_moments(FrontEndMoments(), np.array([b.mean() for b in blocks]),
    ...                        np.array([np.vdot(b, b).real for b in blocks]), np.array([np.dot(b, b) for b in blocks]),
    ...                        4000)
    >>> m.blocks, m.n, complex(w[1])
    (2, 8000, 0j)
    >>> bool(abs(dc[1] - np.mean([b.mean() for b in blocks])) < 1e-12)
    True
    """
    blocks, dc, n_tot, dc_sum = moments.blocks, moments.dc_estimate, moments.n, moments.dc_sum
    c_tot, p_tot, p_after_tot, c_after_tot = moments.power, moments.pseudo, moments.pseudo_after, moments.power_after
    ws = np.zeros(len(means), np.complex128)
    dcs = np.zeros(len(means), np.complex128)
    totals = (means * new if fresh_sums is None else fresh_sums).tolist()
    for r, (mean, c_raw, p_raw, total) in enumerate(zip(means.tolist(), sums.tolist(), squares.tolist(), totals)):
        dc = dc + max(1.0 / (blocks + 1), 1.0 / DC_BLOCKS) * (mean - dc)
        # the block's moments about the DC line
        power = c_raw - 2 * (dc.conjugate() * total).real + new * abs(dc) ** 2
        pseudo = p_raw - 2 * dc * total + new * dc * dc
        c_tot, p_tot, n_tot = c_tot + power, p_tot + pseudo, n_tot + new
        w = compensator(c_tot, p_tot) if abs(p_tot) > IMBALANCE_SIGMAS * c_tot / math.sqrt(max(n_tot, 1)) else 0j
        # what the correction leaves: y = x − w·x* has E y² = P − 2wC + w²P*, E|y|² = (1 + |w|²)C − 2Re(w*P)
        p_after_tot += pseudo - 2 * w * power + w * w * pseudo.conjugate()
        c_after_tot += (1 + abs(w) ** 2) * power - 2 * (w.conjugate() * pseudo).real
        dc_sum += mean * new
        blocks += 1
        ws[r], dcs[r] = w, dc
    moments = FrontEndMoments(blocks=blocks, dc_estimate=dc, n=n_tot, dc_sum=dc_sum, power=c_tot, pseudo=p_tot,
                              pseudo_after=p_after_tot, power_after=c_after_tot)
    return moments, ws, dcs
