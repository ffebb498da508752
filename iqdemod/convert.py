"""Raw sample bytes to complex64, counting what a capture got wrong: clipping and NaN/Inf.

Integer formats clip at their full scale; a float format has no full scale, so
there only a pile-up of samples at one extreme value counts (:func:`pile_up`).
NaN and Inf samples are set to zero and counted. The common case costs a
reduction or two per block; the counting runs only when they say it is needed.
"""

from __future__ import annotations

import numpy as np

from .formats import Datatype, parse_datatype

__all__ = ["pile_up", "sample_converter", "Converter", "PILE_UP_STRIDE", "PILE_UP_HITS"]


PILE_UP_STRIDE = 64  # the look for a pile-up reads one component in this many


PILE_UP_HITS = 2  # a pile-up: this many of the components looked at sit exactly at one extreme


def pile_up(comp: np.ndarray, lo: float, hi: float) -> int:
    """Samples clipped in a float block: those at an extreme value that many samples share.

    A float capture has no full scale, so clipping shows only as a pile-up:
    many samples exactly at the block's largest (or smallest) value, where
    continuous data reaches its extreme once. A strided look (every component
    of a small block, one in ``PILE_UP_STRIDE`` of a large one) decides whether
    to count: a pile-up of about 0.1 % of the samples or more is seen. Then
    every sample with a component at the piled-up extreme is counted.

    Parameters
    ----------
    comp : numpy.ndarray
        float32 components, interleaved I, Q.
    lo, hi : float
        The block's smallest and largest component.

    Examples
    --------
    Noise whose loudest samples were cut at 0.5, as a float recording of a
    clipped receiver shows it, against the same noise uncut:

    >>> import numpy as np
    >>> comp = np.random.default_rng(4).normal(0, 0.3, 20_000).astype(np.float32)
    >>> pile_up(comp, comp.min(), comp.max())
    0
    >>> cut = np.clip(comp, -0.5, 0.5)
    >>> pile_up(cut, cut.min(), cut.max()) > 0.09 * cut.size / 2  # about 10 % of the samples sit at ±0.5
    True
    """
    if not lo < hi:  # a constant block (or an empty one) is no clipping
        return 0
    at = [v for v in (hi, lo) if v != 0 and np.count_nonzero(_look(comp) == v) >= PILE_UP_HITS]
    if not at:
        return 0
    pairs = comp.reshape(-1, 2)
    mask = np.zeros(len(pairs), bool)
    for v in at:
        mask |= (pairs == v).any(axis=1)
    return int(mask.sum())


def _look(comp: np.ndarray) -> np.ndarray:
    """Every component of a small block, one in PILE_UP_STRIDE of a large one (at least ~2000 looked at)."""
    return comp[:: min(PILE_UP_STRIDE, max(1, comp.size // 2048))]


def _float_block(comp: np.ndarray) -> tuple[np.ndarray, int, int]:
    """float32 components to complex64: (samples, non-finite samples zeroed, clipped samples).

    One reduction over the block (a sum: NaN and Inf propagate through it)
    and a look at the strided components cost the common case; the block's
    own extremes are found only when the look holds a repeated extreme, so
    the count is exactly :func:`pile_up`'s.
    """
    bad = 0
    with np.errstate(over="ignore", invalid="ignore"):
        finite = np.isfinite(np.add.reduce(comp, dtype=np.float32))
    if not finite:  # NaN or Inf somewhere (or a sum past float32's range: then nothing is counted)
        comp = comp.copy()
        bad_pairs = ~np.isfinite(comp).reshape(-1, 2).all(axis=1)
        bad = int(bad_pairs.sum())
        comp.reshape(-1, 2)[bad_pairs] = 0.0
    look = _look(comp)
    suspect = any(v != 0 and np.count_nonzero(look == v) >= PILE_UP_HITS for v in (look.max(), look.min()))
    clipped = pile_up(comp, comp.min(), comp.max()) if suspect else 0
    return comp.view(np.complex64), bad, clipped


def integer_components(buf: np.ndarray, offset: float, scale: float) -> np.ndarray:
    """Integer components to float32, (c − offset)·scale, each step in float32: one pass with no offset.

    The integer is converted inside the ufunc, so no float copy of the block is made first
    (a table look-up, as 8-bit readers often use, is a gather: several times slower here).

    Examples
    --------
    cu8's midpoint 127.5 and its full scale, as SigMF's unsigned 8-bit samples read:

    >>> import numpy as np
    >>> integer_components(np.array([0, 127, 128, 255], np.uint8), 127.5, 1 / 127.5).tolist()
    [-1.0, -0.003921568859368563, 0.003921568859368563, 1.0]
    """
    out = np.empty(buf.shape, np.float32)
    if offset:
        np.subtract(buf, np.float32(offset), out=out, dtype=np.float32)
        out *= np.float32(scale)
    else:
        np.multiply(buf, np.float32(scale), out=out, dtype=np.float32)
    return out


class Converter:
    """Raw bytes to complex64, counting clipping and non-finite values."""

    def __init__(self, dt: Datatype):
        self.dt = dt

    def __call__(self, buf: np.ndarray) -> tuple[np.ndarray, int, int]:
        """Convert components `buf` (raw dtype); return (complex64, nonfinite, clipped).

        The common case costs two reductions (min and max) and, for floats, a
        strided look for a pile-up; the counting runs only when they say it is
        needed. Integer formats clip at their full scale; floats have none (see
        :func:`pile_up`).
        """
        dt = self.dt
        if dt.is_float:
            with np.errstate(over="ignore", invalid="ignore"):  # out-of-range float64 becomes inf, then 0
                comp = buf.astype(np.float32, copy=False)  # native cf32: no copy at all
            if comp.size == 0:
                return comp.view(np.complex64), 0, 0
            # floats have no full scale: only a pile-up at one extreme counts as clipping
            return _float_block(comp)
        lo, hi = dt.full_scale
        clipped = 0
        if buf.size and (buf.min() <= lo or buf.max() >= hi):
            pairs = buf.reshape(-1, 2)
            clipped = int(((pairs == lo) | (pairs == hi)).any(axis=1).sum())
        return integer_components(buf, dt.offset, dt.scale).view(np.complex64), 0, clipped


def sample_converter(datatype: str):
    """The converter from raw components of `datatype` to complex64 that every reader uses.

    Called on an array of components (the datatype's numpy type), it returns
    (complex64 samples, non-finite samples, clipped samples).

    Examples
    --------
    cu8 as SigMF defines it (unsigned 8-bit, the midpoint 127.5 is zero; full
    scale at 0 and 255, so the first sample counts as clipped):

    >>> import numpy as np
    >>> samples, bad, clipped = sample_converter("cu8")(np.array([255, 0, 128, 127], np.uint8))
    >>> [complex(round(z.real, 4), round(z.imag, 4)) for z in samples.tolist()], bad, clipped
    ([(1-1j), (0.0039-0.0039j)], 0, 1)
    """
    return Converter(parse_datatype(datatype))
