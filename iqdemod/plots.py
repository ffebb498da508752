"""PNG figures of link health and of the error-rate curves (matplotlib, an optional extra)."""

from __future__ import annotations

import os

import numpy as np

from . import predict as P
from .files import atomic_writer
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
    """The colour of the i-th data series (cycles through :data:`PALETTE`).

    Examples
    --------
    Series take the harbour palette in order, and start over after the last:

    >>> series_colour(0), series_colour(1), series_colour(len(PALETTE))
    ('#16425b', '#d9731a', '#16425b')
    """
    colours = tuple(PALETTE.values())
    return colours[i % len(colours)]


def require_matplotlib() -> None:
    """Check that matplotlib can be imported, or say how to install it.

    Raises
    ------
    IqdemodError
        When matplotlib (the ``plot`` extra) is missing.

    Examples
    --------
    Returns nothing when matplotlib is there (the ``plot`` extra); a command
    calls it before any work, so a missing extra is reported at once:

    >>> require_matplotlib()
    """
    try:
        import matplotlib.figure  # noqa: F401
        from matplotlib.backends.backend_agg import FigureCanvasAgg  # noqa: F401
    except ImportError:
        raise IqdemodError("plots need matplotlib: pip install 'iqdemod[plot]'") from None


def new_figure(**kwargs):
    """A matplotlib Figure on its own Agg canvas (no pyplot, no global backend switch).

    Examples
    --------
    >>> fig = new_figure(figsize=(4, 3))
    >>> type(fig).__name__, type(fig.canvas).__name__, fig.get_size_inches().tolist()
    ('Figure', 'FigureCanvasAgg', [4.0, 3.0])
    """
    require_matplotlib()
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(**kwargs)
    FigureCanvasAgg(fig)
    return fig


def save_figure(fig, path: str | os.PathLike) -> None:
    """Write `fig` as a PNG to a temporary file beside `path`, then rename it into place.

    Examples
    --------
    The file written is a PNG: it starts with the PNG file signature
    89 50 4E 47 0D 0A 1A 0A (W3C PNG specification §5.2, cited from memory):

    >>> import os, tempfile
    >>> fig = new_figure(figsize=(3, 2))
    >>> _ = fig.subplots().plot([0, 1, 2], [1, 3, 2], color=series_colour(0))
    >>> with tempfile.TemporaryDirectory() as tmp:
    ...     path = os.path.join(tmp, "buoy7.png")
    ...     save_figure(fig, path)
    ...     with open(path, "rb") as fh:
    ...         fh.read(8).hex()
    '89504e470d0a1a0a'
    """
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


def _error_words(eps: float) -> str:
    """The carrier error in a legend, as a fraction of the symbol rate (δf·T); empty when there is none."""
    return f", carrier error {eps:+.3f} × baud" if abs(eps) > 1e-3 else ""  # the rule that draws its own curve


def _curve_axes(ax, ebn0_db: np.ndarray, *, h: float, freq_error_per_baud: float, sps: int | None,
                pulse: str = "rect", bt: float = 0.5, detector_symbols: int = 5,
                target_ber: float | None = None) -> None:
    """The BER curves of the link and the references; with a Gaussian pulse or fractional h, both detectors too.

    With `target_ber`, each label ends with the Eb/N0 that curve needs for
    that BER. The multi-symbol curve is left out above 10 %, where its
    approximation (:func:`iqdemod.sequence_theory.sequence_ber`, "pruned")
    overshoots: its line then starts at the first Eb/N0 below 10 %, and its
    label says so.
    """
    g = P.from_db(ebn0_db)
    eps = freq_error_per_baud
    gauss = pulse == "gaussian"
    table = None
    if P.curves_extended(h, pulse):
        table = P.curves_table(ebn0_db, h=h, freq_error_per_baud=eps, samples_per_symbol=sps, pulse=pulse, bt=bt,
                               detector_symbols=detector_symbols, target_ber=target_ber or 1e-5)
    need = _needs(target_ber, table, h=h, eps=eps, sps=sps)
    ax.semilogy(ebn0_db, P.pb_noncoherent(g), color=PALETTE["deep water"], lw=2,
                label=f"non-coherent BFSK, orthogonal (h = 1){_need_label(need.get('noncoherent'))}")
    if abs(h - round(h)) > 1e-9 or abs(eps) > 1e-3:
        what = "rect pulse at this h" if gauss else "one-symbol bank, this link"
        ax.semilogy(ebn0_db, P.pb_mismatched(g, h=h, freq_error_T=eps, samples_per_symbol=sps),
                    color=PALETTE["buoy orange"], lw=1.5 if gauss else 2, ls="-." if gauss else "-",
                    label=f"non-coherent, {what} (h = {h:g}{_error_words(eps)}){_need_label(need.get('link'))}")
    if table is not None:
        _pulse_curves(ax, ebn0_db, table, need, h=h, eps=eps, gauss=gauss, bt=bt, detector_symbols=detector_symbols)
    ax.semilogy(ebn0_db, P.pb_coherent_orthogonal(g), color=PALETTE["kelp"], lw=1.5, ls="--",
                label=f"coherent orthogonal FSK{_need_label(need.get('coherent_orthogonal'))}")
    ax.semilogy(ebn0_db, P.pb_antipodal(g), color=PALETTE["slate"], lw=1.5, ls=":",
                label=f"antipodal (BPSK){_need_label(need.get('antipodal'))}")
    ax.set_xlabel("Eb/N0 (dB)")
    ax.set_ylabel("bit error probability")
    ax.grid(True, which="both", alpha=0.3)


def _needs(target_ber: float | None, table: dict | None, *, h: float, eps: float, sps: int | None) -> dict:
    """Eb/N0 each curve needs for the target (empty without a target)."""
    if not target_ber:
        return {}
    need = dict((table or {}).get("needed_db") or {
        "link": _needed(target_ber, "mismatched", h=h, freq_error_T=eps, samples_per_symbol=sps)})
    for scheme in ("noncoherent", "coherent_orthogonal", "antipodal"):
        need.setdefault(scheme, _needed(target_ber, scheme))
    return need


def _pulse_curves(ax, ebn0_db, table: dict, need: dict, *, h: float, eps: float, gauss: bool, bt: float,
                  detector_symbols: int) -> None:
    """The one-symbol bank on a Gaussian pulse, and the multi-symbol detector."""
    shape = f"Gaussian BT {bt:g}" if gauss else "rect pulse"
    if gauss:  # with a rect pulse this is the link's own curve, drawn above
        ax.semilogy(ebn0_db, table["ber_one_symbol_pulse"], color=PALETTE["harbour red"], lw=2,
                    label=f"one-symbol bank, this pulse ({shape}, h = {h:g}{_error_words(eps)})"
                          f"{_need_label(need.get('one_symbol_pulse'))}")
    if abs(eps) > 1e-3:
        shape += ", no carrier error"
    # The multi-symbol prediction is an approximation of a union bound: above 10 % it overshoots (to 0.5)
    multi = np.asarray(table["ber_multi_symbol"], float)
    ax.semilogy(ebn0_db, np.where(multi <= 0.1, multi, np.nan), color=PALETTE["mooring violet"], lw=2,
                label=f"multi-symbol {detector_symbols} ({shape}, h = {h:g}; a bound, drawn below 0.1)"
                      f"{_need_label(need.get('multi_symbol'))}")


def plot_curves(path, *, ebn0_db: np.ndarray, h: float = 1.0, freq_error_per_baud: float = 0.0,
                sps: int | None = None, target_ber: float | None = None, pulse: str = "rect", bt: float = 0.5,
                detector_symbols: int = 5) -> None:
    """BER against Eb/N0 for the link and the coherent references.

    For a Gaussian pulse (or an h that is not whole) the one-symbol correlator
    bank receiving this pulse and the multi-symbol detector of
    `detector_symbols` symbols are drawn too, their labels ending with the
    Eb/N0 each needs for `target_ber`. The curves are drawn on a fine grid
    spanning `ebn0_db`.

    Examples
    --------
    The drawing itself is not checked here; the file is, by its PNG file
    signature (W3C PNG specification §5.2, cited from memory):

    >>> import os, tempfile
    >>> import numpy as np
    >>> with tempfile.TemporaryDirectory() as tmp:
    ...     path = os.path.join(tmp, "curves.png")
    ...     plot_curves(path, ebn0_db=np.array([0.0, 14.0]), target_ber=1e-5)
    ...     with open(path, "rb") as fh:
    ...         fh.read(8).hex()
    '89504e470d0a1a0a'
    """
    span = np.asarray(ebn0_db, float)
    grid = np.linspace(float(span.min()), float(span.max()), 161) if span.size > 1 else span
    fig = new_figure(figsize=(8.5, 5.6), layout="constrained")
    ax = fig.subplots()
    _curve_axes(ax, grid, h=h, freq_error_per_baud=freq_error_per_baud, sps=sps, pulse=pulse, bt=bt,
                detector_symbols=detector_symbols, target_ber=target_ber)
    if target_ber:
        ax.axhline(target_ber, color=PALETTE["slate"], lw=0.8, alpha=0.8)
        ax.annotate(f"target BER {target_ber:g}", (grid[0], target_ber), va="bottom", fontsize=8)
    lo = max(1e-9, float(P.pb_antipodal(P.from_db(np.max(grid)))) / 3)
    ax.set_ylim(lo, 0.6)
    below(ax, title=f"curve; Eb/N0 it needs for BER {target_ber:g}" if target_ber else None, columns=1)
    title = "Bit error probability in white Gaussian noise"
    if pulse == "gaussian":
        title += f": GFSK, BT {bt:g}, h = {h:g}"
    ax.set_title(title)
    save_figure(fig, path)


def below(ax, *, title: str | None = None, columns: int = 2) -> None:
    """The axes' curves named in a legend under the whole figure, where it covers none of them
    (matplotlib's "outside" placement: the constrained layout makes room for it)."""
    handles, labels = ax.get_legend_handles_labels()
    ax.figure.legend(handles, labels, loc="outside lower center", ncol=columns, fontsize=8, title=title,
                     title_fontsize=8, frameon=False)


def plot_health(path, report) -> None:
    """The health figure: the curves with the capture's operating point, and the decision statistics.

    The point sits at the capture's Eb/N0, the figure the title quotes. Its
    height is the predicted BER, which counts the receiver's decision gain
    (:attr:`HealthReport.decision_gain_db`), so it lies that far below the
    textbook curve of its link.

    Parameters
    ----------
    path : path-like
        PNG to write.
    report : iqdemod.health.HealthReport

    Examples
    --------
    The health figure of a small synthetic capture (three buoy frames at
    12 dB); the file's PNG signature is checked (W3C PNG specification §5.2,
    cited from memory):

    >>> import os, tempfile
    >>> from iqdemod.health import assess
    >>> from iqdemod.profile import load_link
    >>> from iqdemod.synth import SynthConfig, synthesize
    >>> link = load_link(None, rate=48000, baud=1200, shift=1200, offset=6000, sync="0x2DD4", sync_bits=16, length=12)
    >>> with tempfile.TemporaryDirectory() as tmp:
    ...     base = os.path.join(tmp, "buoys")
    ...     _ = synthesize(base, SynthConfig(link=link, ebn0_db=(12.0,), n_frames=3, seed=5))
    ...     report = assess(base + ".sigmf-meta", link)
    ...     plot_health(os.path.join(tmp, "health.png"), report)
    ...     with open(os.path.join(tmp, "health.png"), "rb") as fh:
    ...         fh.read(8).hex()
    '89504e470d0a1a0a'
    """
    fig = new_figure(figsize=(12, 5.2), layout="constrained")
    ax, hx = fig.subplots(1, 2, width_ratios=[1.35, 1])
    centre = report.ebn0_db if report.ebn0_db is not None else 10.0
    grid = np.linspace(min(0.0, centre - 6), max(16.0, centre + 4), 200)
    eps = (report.residual_freq_error_hz or 0.0) / report.baud
    _curve_axes(ax, grid, h=report.h, freq_error_per_baud=eps, sps=None, pulse=report.pulse, bt=report.bt or 0.5,
                detector_symbols=report.detector_symbols or 5)
    _operating_point(ax, report)
    ymin = max(1e-9, float(P.pb_antipodal(P.from_db(grid[-1]))) / 3)
    ax.set_ylim(ymin, 0.6)
    below(ax)
    title = f"{report.capture}: Eb/N0 {report.ebn0_db:.1f} dB" if report.ebn0_db is not None else report.capture
    if report.margin_db is not None:
        title += f", margin {report.margin_db:+.1f} dB at BER {report.target_ber:g}"
    ax.set_title(title, fontsize=10)
    _decision_histogram(hx, report)
    save_figure(fig, path)


def _operating_point(ax, report) -> None:
    """The capture's predicted BER and the BER its observed frame error rate implies, at its Eb/N0."""
    x = report.ebn0_db
    if x is None:
        return
    if report.ber_predicted is not None:
        lo, hi = report.ebn0_db_ci90 or (x, x)
        gain = report.decision_gain_db
        ax.errorbar([x], [report.ber_predicted], xerr=[[x - lo], [hi - x]], fmt="o", color=PALETTE["harbour red"],
                    ms=7, capsize=4,
                    label=(f"this capture, predicted: the mean over its bursts at their own Eb/N0,\n"
                           f"drawn at the pooled Eb/N0 {x:.1f} dB (90 % interval)" if report.bursts_differ
                           else f"this capture, predicted at Eb/N0 {x:.1f} dB (90 % interval)")
                          + (f"\n(off the curve by the receiver's {gain:+.2f} dB decision gain)"
                             if abs(gain) >= 0.005 else ""))
    if report.fer_observed is not None and report.frame_bits:
        n = report.frame_bits
        to_ber = lambda fer: 1 - (1 - min(fer, 1 - 1e-12)) ** (1 / n)
        obs = to_ber(report.fer_observed)
        lo_b, hi_b = (to_ber(v) for v in report.fer_observed_ci95)
        y = obs if obs > 0 else hi_b
        ax.errorbar([x], [y], yerr=[[y - max(lo_b, 1e-12)], [hi_b - y]], fmt="s" if obs > 0 else "v", mfc="none",
                    color=PALETTE["mooring violet"], ms=8, capsize=4,
                    label=("observed, BER from the frame error rate (95 %)" if obs > 0
                           else "observed: no frame failed its CRC (95 % upper bound)"))


def _decision_histogram(hx, report) -> None:
    """Both correlators' square-law statistics: the sent tone's and the other's."""
    edges = np.asarray(report.histogram_edges_db)
    window = report.detector == "multi-symbol"  # the window hypotheses' statistics, not two correlators'
    if len(edges) and (sum(report.histogram_right) + sum(report.histogram_wrong)):
        centres = (edges[1:] + edges[:-1]) / 2
        width = edges[1] - edges[0]
        hx.bar(centres, report.histogram_wrong, width=width, color=PALETTE["slate"], alpha=0.7,
               label=f"best of the other middle bit\n(shares the other {report.detector_symbols - 1} symbols)"
               if window else "the other correlator")
        hx.bar(centres, report.histogram_right, width=width, color=PALETTE["deep water"], alpha=0.7,
               label=("best hypothesis of the symbol sent" if window else "correlator of the symbol sent")
               + "\n(known where the CRC is good;\nthe symbol decided elsewhere)")
        hx.legend(fontsize=8, loc="upper left")
        counts = np.asarray(report.histogram_right) + np.asarray(report.histogram_wrong)
        used = np.flatnonzero(counts)
        hx.set_xlim(edges[used[0]] - 1, edges[used[-1] + 1] + 1)
        hx.set_ylim(0, 1.3 * counts.max() if counts.max() else 1)
    else:
        hx.text(0.5, 0.5, "no symbols", ha="center", va="center", transform=hx.transAxes)
    hx.set_xlabel(f"{report.detector_symbols}-symbol window statistic above its noise (dB)" if window
                  else "square-law statistic |z|² above the noise (dB)")
    hx.set_ylabel("symbols")
    hx.set_title("Decision statistics", fontsize=10)
    hx.grid(True, alpha=0.3)
