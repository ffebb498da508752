"""Telling transmitters apart: a label per row (capture and link), from its folder profile or its carrier error."""

from __future__ import annotations

import math
from typing import Sequence

from .report import CaptureRow, named_label

__all__ = ["TX_TOLERANCE_HZ", "label_transmitters"]

#: Carrier errors of captures from one transmitter lie within this of each other, Hz.
TX_TOLERANCE_HZ = 200.0


def _groups(rows: Sequence[CaptureRow], idx: list[int], tol: float) -> list[list[int]]:
    """`idx` sorted by carrier error and split wherever neighbours are more than `tol` apart."""
    idx = sorted(idx, key=lambda i: rows[i].freq_error_hz)
    groups: list[list[int]] = [[idx[0]]]
    for a, b in zip(idx, idx[1:]):
        if rows[b].freq_error_hz - rows[a].freq_error_hz > tol:
            groups.append([])
        groups[-1].append(b)
    return groups


def label_transmitters(rows: Sequence[CaptureRow], *, tolerance_hz: float = TX_TOLERANCE_HZ) -> list[str]:
    """A transmitter label per row.

    A row whose capture lies below a folder ``link.toml`` keeps that folder
    as its label. The others that were measured are grouped by carrier error,
    separately for each link (``link_name``: different links are different
    transmitters): sorted by ``freq_error_hz`` and split wherever the gap
    between neighbours exceeds ``max(tolerance_hz, 3 × the median burst-to-burst
    spread)`` of the link's captures (``freq_spread_hz``); each group is
    labelled ``tx1 (+420 Hz)``, ``tx2 …`` in ascending carrier error, after the
    link's name when it has one (``gauges: tx1 (+420 Hz)``), so no two links
    share a label. Rows without a carrier error (failed, no bursts) get ``""``.

    Parameters
    ----------
    rows : sequence of CaptureRow
    tolerance_hz : float
        The smallest gap, Hz, that separates two transmitters.

    Returns
    -------
    list of str

    Examples
    --------
    >>> rows = [CaptureRow("a", "/a", "ok", freq_error_hz=410.0), CaptureRow("b", "/b", "ok", freq_error_hz=-1200.0),
    ...         CaptureRow("c", "/c", "ok", freq_error_hz=430.0), CaptureRow("d", "/d", "error")]
    >>> label_transmitters(rows)
    ['tx2 (+430 Hz)', 'tx1 (-1200 Hz)', 'tx2 (+430 Hz)', '']

    Two links of one capture: the same carrier error, yet two transmitters:

    >>> label_transmitters([CaptureRow("a", "/a", "ok", link_name="buoys", freq_error_hz=410.0),
    ...                     CaptureRow("a", "/a", "ok", link_name="gauges", freq_error_hz=410.0)])
    ['buoys: tx1 (+410 Hz)', 'gauges: tx1 (+410 Hz)']
    """
    labels = [r.transmitter if r.link and r.transmitter else "" for r in rows]
    by_link: dict[str, list[int]] = {}
    for i, r in enumerate(rows):
        if not labels[i] and r.ok and r.freq_error_hz is not None and math.isfinite(r.freq_error_hz):
            by_link.setdefault(r.link_name, []).append(i)
    for name, idx in by_link.items():
        spreads = sorted(rows[i].freq_spread_hz for i in idx if rows[i].freq_spread_hz is not None)
        spread = spreads[len(spreads) // 2] if spreads else 0.0
        for n, group in enumerate(_groups(rows, idx, max(tolerance_hz, 3.0 * spread)), 1):
            freqs = sorted(rows[i].freq_error_hz for i in group)
            centre = freqs[len(freqs) // 2]
            for i in group:
                labels[i] = named_label(name, f"tx{n} ({centre:+.0f} Hz)")
    return labels
