"""PNG figures of link health and of the error-rate curves (matplotlib, an optional extra)."""

from __future__ import annotations

import os

import numpy as np

from . import predict as P
from ._io import atomic_writer
from .errors import IqdemodError

__all__ = ["plot_health", "plot_curves", "new_figure", "save_figure", "require_matplotlib"]


def require_matplotlib() -> None:
    """Check that matplotlib can be imported, or say how to install it.

    Raises
    ------
    IqdemodError
        When matplotlib (the ``plot`` extra) is missing.
    """
    try:
        import matplotlib.figure  # noqa: F401
        from matplotlib.backends.backend_agg import FigureCanvasAgg  # noqa: F401
    except ImportError:
        raise IqdemodError("plots need matplotlib: pip install 'iqdemod[plot]'") from None


def new_figure(**kwargs):
    """A matplotlib Figure on its own Agg canvas (no pyplot, no global backend switch)."""
    require_matplotlib()
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(**kwargs)
    FigureCanvasAgg(fig)
    return fig


def save_figure(fig, path: str | os.PathLike) -> None:
    """Write `fig` as a PNG to a temporary file beside `path`, then rename it into place."""
    with atomic_writer(path, "wb") as fh:
        fig.savefig(fh, format="png", dpi=110)


def _curve_axes(ax, ebn0_db: np.ndarray, *, h: float, freq_error_T: float, sps: int | None) -> None:
    g = P.from_db(ebn0_db)
    label_nc = "non-coherent BFSK, orthogonal (h = 1)"
    ax.semilogy(ebn0_db, P.pb_noncoherent(g), color="#1f4e79", lw=2, label=label_nc)
    if abs(h - round(h)) > 1e-9 or abs(freq_error_T) > 1e-3:
        ax.semilogy(ebn0_db, P.pb_mismatched(g, h=h, freq_error_T=freq_error_T, samples_per_symbol=sps),
                    color="#c55a11", lw=2, label=f"non-coherent, this link (h = {h:g}, δf·T = {freq_error_T:.3f})")
    ax.semilogy(ebn0_db, P.pb_coherent_orthogonal(g), color="#548235", lw=1.5, ls="--", label="coherent orthogonal FSK")
    ax.semilogy(ebn0_db, P.pb_antipodal(g), color="#7f7f7f", lw=1.5, ls=":", label="antipodal (BPSK)")
    ax.set_xlabel("Eb/N0 (dB)")
    ax.set_ylabel("bit error probability")
    ax.grid(True, which="both", alpha=0.3)


def plot_curves(path, *, ebn0_db: np.ndarray, h: float = 1.0, freq_error_T: float = 0.0, sps: int | None = None,
                target_ber: float | None = None) -> None:
    """BER against Eb/N0 for the link and the coherent references."""
    fig = new_figure(figsize=(7.5, 5.2), layout="constrained")
    ax = fig.subplots()
    _curve_axes(ax, np.asarray(ebn0_db, float), h=h, freq_error_T=freq_error_T, sps=sps)
    if target_ber:
        ax.axhline(target_ber, color="k", lw=0.8, alpha=0.6)
        ax.annotate(f"target {target_ber:g}", (ebn0_db[0], target_ber), va="bottom", fontsize=8)
    lo = max(1e-9, float(P.pb_antipodal(P.from_db(np.max(ebn0_db)))) / 3)
    ax.set_ylim(lo, 0.6)
    ax.legend(fontsize=8, loc="lower left")
    ax.set_title("Bit error probability in white Gaussian noise")
    save_figure(fig, path)


def plot_health(path, report) -> None:
    """The health figure: the curves with the capture's operating point, and the decision statistics.

    Parameters
    ----------
    path : path-like
        PNG to write.
    report : iqdemod.health.HealthReport
    """
    fig = new_figure(figsize=(12, 5.2), layout="constrained")
    ax, hx = fig.subplots(1, 2, width_ratios=[1.35, 1])
    centre = report.ebn0_db if report.ebn0_db is not None else 10.0
    grid = np.linspace(min(0.0, centre - 6), max(16.0, centre + 4), 200)
    dT = (report.residual_freq_error_hz or 0.0) / report.baud
    _curve_axes(ax, grid, h=report.h, freq_error_T=dT, sps=None)
    # The decisions see Eb/N0 plus the receiver's noise-bandwidth gain: that is where the point sits on the curve.
    x_op = None if report.ebn0_db is None else report.ebn0_db + report.decision_gain_db
    if x_op is not None and report.ber_predicted is not None:
        lo, hi = report.ebn0_db_ci90 or (report.ebn0_db, report.ebn0_db)
        ax.errorbar([x_op], [report.ber_predicted], xerr=[[report.ebn0_db - lo], [hi - report.ebn0_db]],
                    fmt="o", color="#c00000", ms=7, capsize=4,
                    label=f"this capture, predicted (Eb/N0 + {report.decision_gain_db:.2f} dB receiver gain; 90 %)")
    if report.per_observed is not None and report.frame_bits and x_op is not None:
        n = report.frame_bits
        to_ber = lambda per: 1 - (1 - min(per, 1 - 1e-12)) ** (1 / n)
        obs = to_ber(report.per_observed)
        lo_p, hi_p = report.per_observed_ci95
        lo_b, hi_b = to_ber(lo_p), to_ber(hi_p)
        y = obs if obs > 0 else hi_b
        ax.errorbar([x_op], [y], yerr=[[y - max(lo_b, 1e-12)], [hi_b - y]],
                    fmt="s" if obs > 0 else "v", mfc="none", color="#7030a0", ms=8, capsize=4,
                    label="observed, from CRC failures (95 %)" if obs > 0 else "observed: no CRC failure (95 % upper)")
    ymin = max(1e-9, float(P.pb_antipodal(P.from_db(grid[-1]))) / 3)
    ax.set_ylim(ymin, 0.6)
    ax.legend(fontsize=8, loc="lower left")
    title = f"{report.capture}: Eb/N0 {report.ebn0_db:.1f} dB" if report.ebn0_db is not None else report.capture
    if report.margin_db is not None:
        title += f", margin {report.margin_db:+.1f} dB at BER {report.target_ber:g}"
    ax.set_title(title, fontsize=10)
    edges = np.asarray(report.histogram_edges_db)
    if len(edges) and (sum(report.histogram_right) + sum(report.histogram_wrong)):
        centres = (edges[1:] + edges[:-1]) / 2
        width = edges[1] - edges[0]
        hx.bar(centres, report.histogram_wrong, width=width, color="#7f7f7f", alpha=0.7, label="losing correlator")
        hx.bar(centres, report.histogram_right, width=width, color="#1f4e79", alpha=0.7, label="winning correlator")
        hx.legend(fontsize=8)
    else:
        hx.text(0.5, 0.5, "no symbols", ha="center", va="center", transform=hx.transAxes)
    hx.set_xlabel("square-law statistic |z|² above the noise (dB)")
    hx.set_ylabel("symbols")
    hx.set_title("Decision statistics", fontsize=10)
    hx.grid(True, alpha=0.3)
    save_figure(fig, path)
