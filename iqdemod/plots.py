"""PNG figures of link health and of the error-rate curves (matplotlib, an optional extra)."""

from __future__ import annotations

import os

import numpy as np

from . import predict as P
from ._io import atomic_writer
from .errors import IqdemodError

__all__ = ["plot_health", "plot_curves", "new_figure", "save_figure", "require_matplotlib", "PALETTE", "series_colour"]

#: The project's own plot colours, named for the harbour they were chosen on: every plot takes its
#: colours from here (series in this order), never from a plotting library's default cycle.
PALETTE = {
    "deep water": "#16425b",
    "buoy orange": "#d9731a",
    "harbour red": "#a62b2b",
    "kelp": "#4f7d33",
    "mooring violet": "#5e4b8b",
    "slate": "#6b7b83",
    "sand": "#b8962e",
    "lagoon": "#2f8f8a",
}


def series_colour(i: int) -> str:
    """The colour of the i-th data series (cycles through :data:`PALETTE`)."""
    colours = tuple(PALETTE.values())
    return colours[i % len(colours)]


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


def _need_label(value: float | None) -> str:
    return "" if value is None else f"; {value:.1f} dB"


def _needed(target_ber: float, scheme: str, **options) -> float | None:
    """Eb/N0 (dB) a scheme needs for the target, None below its error floor."""
    try:
        return float(P.ebn0_db_for_pb(target_ber, scheme, **options))
    except IqdemodError:
        return None


def _curve_axes(ax, ebn0_db: np.ndarray, *, h: float, freq_error_T: float, sps: int | None, pulse: str = "rect",
                bt: float = 0.5, detector_symbols: int = 5, target_ber: float | None = None) -> None:
    """The BER curves of the link and the references; with a Gaussian pulse or fractional h, both detectors too.

    With `target_ber`, each label ends with the Eb/N0 that curve needs for
    that BER. The multi-symbol curve is left out above 10 %, where its
    approximation (:func:`iqdemod.sequence_theory.sequence_ber`, "pruned")
    overshoots.
    """
    g = P.from_db(ebn0_db)
    gauss = pulse == "gaussian"
    extended = P.curves_extended(h, pulse)
    table = None
    if extended:
        table = P.curves_table(ebn0_db, h=h, freq_error_T=freq_error_T, samples_per_symbol=sps, pulse=pulse, bt=bt,
                               detector_symbols=detector_symbols, target_ber=target_ber or 1e-5)
    need = {}
    if target_ber:
        need = (table or {}).get("needed_db") or {
            "link": _needed(target_ber, "mismatched", h=h, freq_error_T=freq_error_T, samples_per_symbol=sps)}
        for scheme in ("noncoherent", "coherent_orthogonal", "antipodal"):
            need.setdefault(scheme, _needed(target_ber, scheme))
    label_nc = f"non-coherent BFSK, orthogonal (h = 1){_need_label(need.get('noncoherent'))}"
    ax.semilogy(ebn0_db, P.pb_noncoherent(g), color="#1f4e79", lw=2, label=label_nc)
    if abs(h - round(h)) > 1e-9 or abs(freq_error_T) > 1e-3:
        what = "rect pulse at this h" if gauss else "one-symbol bank, this link"
        ax.semilogy(ebn0_db, P.pb_mismatched(g, h=h, freq_error_T=freq_error_T, samples_per_symbol=sps),
                    color="#c55a11", lw=1.5 if gauss else 2, ls="-." if gauss else "-",
                    label=f"non-coherent, {what} (h = {h:g}, δf·T = {freq_error_T:.3f}){_need_label(need.get('link'))}")
    if table is not None:
        shape = f"Gaussian BT {bt:g}" if gauss else "rect pulse"
        if gauss:  # with a rect pulse this is the link's own curve, drawn above
            ax.semilogy(ebn0_db, table["ber_one_symbol_pulse"], color="#c00000", lw=2,
                        label=f"one-symbol bank, this pulse ({shape}, h = {h:g}, δf·T = {freq_error_T:.3f})"
                              f"{_need_label(need.get('one_symbol_pulse'))}")
        if abs(freq_error_T) > 1e-3:
            shape += ", no carrier error"
        # The multi-symbol prediction is an approximation of a union bound: above 10 % it overshoots (to 0.5)
        multi = np.asarray(table["ber_multi_symbol"], float)
        ax.semilogy(ebn0_db, np.where(multi <= 0.1, multi, np.nan), color="#7030a0", lw=2,
                    label=f"multi-symbol {detector_symbols} ({shape}, h = {h:g}){_need_label(need.get('multi_symbol'))}")
    ax.semilogy(ebn0_db, P.pb_coherent_orthogonal(g), color="#548235", lw=1.5, ls="--",
                label=f"coherent orthogonal FSK{_need_label(need.get('coherent_orthogonal'))}")
    ax.semilogy(ebn0_db, P.pb_antipodal(g), color="#7f7f7f", lw=1.5, ls=":",
                label=f"antipodal (BPSK){_need_label(need.get('antipodal'))}")
    ax.set_xlabel("Eb/N0 (dB)")
    ax.set_ylabel("bit error probability")
    ax.grid(True, which="both", alpha=0.3)


def plot_curves(path, *, ebn0_db: np.ndarray, h: float = 1.0, freq_error_T: float = 0.0, sps: int | None = None,
                target_ber: float | None = None, pulse: str = "rect", bt: float = 0.5,
                detector_symbols: int = 5) -> None:
    """BER against Eb/N0 for the link and the coherent references.

    For a Gaussian pulse (or an h that is not whole) the one-symbol correlator
    bank receiving this pulse and the multi-symbol detector of
    `detector_symbols` symbols are drawn too, their labels ending with the
    Eb/N0 each needs for `target_ber`. The curves are drawn on a fine grid
    spanning `ebn0_db`.
    """
    span = np.asarray(ebn0_db, float)
    grid = np.linspace(float(span.min()), float(span.max()), 161) if span.size > 1 else span
    fig = new_figure(figsize=(8.5, 5.6), layout="constrained")
    ax = fig.subplots()
    _curve_axes(ax, grid, h=h, freq_error_T=freq_error_T, sps=sps, pulse=pulse, bt=bt,
                detector_symbols=detector_symbols, target_ber=target_ber)
    if target_ber:
        ax.axhline(target_ber, color="k", lw=0.8, alpha=0.6)
        ax.annotate(f"target {target_ber:g}", (grid[0], target_ber), va="bottom", fontsize=8)
    lo = max(1e-9, float(P.pb_antipodal(P.from_db(np.max(grid)))) / 3)
    ax.set_ylim(lo, 0.6)
    ax.legend(fontsize=8, loc="lower left")
    title = "Bit error probability in white Gaussian noise"
    if pulse == "gaussian":
        title += f": GFSK, BT {bt:g}, h = {h:g}"
    ax.set_title(title)
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
    _curve_axes(ax, grid, h=report.h, freq_error_T=dT, sps=None, pulse=report.pulse, bt=report.bt or 0.5,
                detector_symbols=report.detector_symbols or 5)
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
