"""Commands beyond decode and synth: health and curves (batch and survey live in their own files)."""

from __future__ import annotations

import json
from pathlib import Path

import click
import numpy as np

import iqdemod

from iqdemod.errors import quote

from ._common import finite, guard_outputs, link_from_options, link_options, open_output, say
from .main import main


def _pct(x: float | None) -> str:
    return "—" if x is None else f"{100 * x:.3g} %"


def _sci(x: float | None) -> str:
    return "—" if x is None else f"{x:.2e}"


def _db(x: float | None, sign: bool = False) -> str:
    return "—" if x is None else (f"{x:+.2f} dB" if sign else f"{x:.2f} dB")


def health_text(r) -> str:
    """The health report for people: headline figures first, aligned."""
    rows = []
    head = (f"{r.capture}: {r.duration_s:.2f} s, {r.bursts} burst(s), {r.frames} frame(s), "
            f"{r.frames_crc_ok} with good CRC")
    pulse = f"Gaussian BT {r.bt:g}" if r.pulse == "gaussian" else "rectangular pulse"
    frame = "raw bits (no sync word)" if r.sync_word is None else (
        f"sync word {r.sync_word} ({r.sync_bits} bits), "
        + ("length byte" if r.frame_length == "prefix8" else f"{r.frame_length}-byte payload") + f", {r.crc}")
    head += (f"\n  link: {r.baud:g} Bd, shift {r.shift_hz:g} Hz (h = {r.h:.3g}), {pulse}, {r.detector} detector; "
             f"{frame}" + (f"\n  recording started {r.start_time}" if r.start_time else ""))
    if r.ebn0_db is not None:
        lo, hi = r.ebn0_db_ci90
        rows.append(("Eb/N0", _db(r.ebn0_db), f"90 % interval {lo:.2f} … {hi:.2f} dB, {r.ebn0_method}"))
    else:
        rows.append(("Eb/N0", "—", "no frame found to measure it on"))
    if r.margin_db is not None:
        rows.append(("margin", _db(r.margin_db, True),
                     f"to BER {r.target_ber:g}: needs {r.ebn0_needed_db:.2f} dB here; coherent detection "
                     f"would need {r.coherent_ebn0_needed_db:.2f} dB (non-coherent penalty "
                     f"{r.noncoherent_penalty_db:.2f} dB)"))
    if r.ber_predicted is not None:
        ci = r.ber_predicted_ci90
        rows.append(("BER predicted", _sci(r.ber_predicted), f"90 % {_sci(ci[0])} … {_sci(ci[1])}" if ci else ""))
    if r.per_predicted is not None:
        ci = r.per_predicted_ci90
        rows.append(("PER predicted", _pct(r.per_predicted),
                     f"90 % {_pct(ci[0])} … {_pct(ci[1])}, {r.frame_bits} bits checked per frame" if ci else ""))
    if r.per_observed is not None:
        lo, hi = r.per_observed_ci95
        bad = r.frames - r.frames_crc_ok
        rows.append(("PER observed", _pct(r.per_observed), f"95 % {_pct(lo)} … {_pct(hi)}, {bad} of {r.frames} failed CRC"))
    verdict = r.verdict + (f" (exact binomial test p = {r.per_p_value:.3g})" if r.per_p_value is not None else "")
    rows.append(("verdict", verdict, ""))
    if r.freq_error_hz is not None:
        extra = [f"{r.freq_error_ppm:+.2f} ppm of the carrier"] if r.freq_error_ppm is not None else []
        extra.append(f"spread {r.freq_spread_hz:.0f} Hz rms between bursts")
        extra.append(f"residual {r.residual_freq_error_hz:.1f} Hz")
        rows.append(("carrier error", f"{r.freq_error_hz:+.0f} Hz", ", ".join(extra)))
    if r.clock_error_ppm is not None:
        rows.append(("clock error", f"{r.clock_error_ppm:+.0f} ppm", "symbol clock, mean over bursts"))
    if r.mismatch_loss_db is not None:
        rows.append(("mismatch loss", f"{r.mismatch_loss_db:.3f} dB", "from the residual carrier error"))
    rows.append(("decision gain", f"{r.decision_gain_db:+.2f} dB",
                 "the receiver's filter: its decisions see Eb/N0 plus this (predictions include it)"))
    rows.append(("clipped", _pct(r.clipped_fraction), "samples at full scale"))
    if r.dc_dbfs is not None:
        rows.append(("DC offset", f"{r.dc_dbfs:.1f} dBFS", "the recording receiver's own; removed before tuning"))
    if r.iq_gain_db is not None:
        rows.append(("IQ imbalance", f"{r.iq_gain_db:+.2f} dB, {r.iq_phase_deg:+.2f}°",
                     f"image rejection {r.image_rejection_db:.1f} dB as recorded, "
                     f"{r.image_rejection_after_db:.1f} dB after correction"))
    width = max(len(a) for a, _, _ in rows)
    vwidth = max(len(b) for _, b, c in rows if c) if any(c for _, _, c in rows) else 0
    lines = [head]
    for a, b, c in rows:
        lines.append(f"  {a:<{width}}  {b:<{vwidth}}  {c}".rstrip())
    for cause in r.causes:
        lines.append(f"  possible cause: {cause}")
    for w in r.warnings:
        lines.append(f"  warning: {w}")
    return "\n".join(lines)


def _json_default(value):
    if isinstance(value, (np.floating, np.integer)):
        return value.item()
    raise TypeError(f"{type(value).__name__} is not JSON serialisable")


@main.command()
@click.argument("capture", type=click.Path(path_type=Path))
@link_options
@click.option("--target-ber", type=finite(0, 0.5, min_open=True, max_open=True), default=1e-5,
              show_default=True, help="BER the margin is measured against.")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object instead of the report for people.")
@click.option("--plot", type=click.Path(dir_okay=False, path_type=Path),
              help="Write a PNG: BER curves with this capture's operating point, and the decision statistics.")
@click.option("-o", "--output", type=click.Path(dir_okay=False, path_type=Path), help="Write the report here instead of stdout.")
@click.option("-q", "--quiet", is_flag=True, help="No progress bar.")
def health(capture, target_ber, as_json, plot, output, quiet, **link_kw) -> None:
    """Assess a link: Eb/N0, predicted and observed error rates, margin, transmitter health.

    Eb/N0 comes from the receiver's own decision statistics (data-aided on
    frames whose CRC passed, blind on the others). The predicted rates use
    non-coherent detection theory for this link's tone spacing and residual
    frequency error; the observed frame error rate is compared with them by an
    exact binomial test. Statistical estimates, not a certification.
    """
    link_path = link_kw.get("link")
    link = link_from_options(link_kw)
    guard_outputs([("--output", output), ("--plot", plot)], captures=[capture], link=link_path)
    if plot is not None:
        from iqdemod.plots import require_matplotlib

        require_matplotlib()  # fail before the work, not after
    report = iqdemod.health.assess(capture, link, target_ber=target_ber, progress=not quiet)
    with open_output(output) as out:
        if as_json:
            out.write(json.dumps(report.as_dict(), default=_json_default) + "\n")
        else:
            out.write(health_text(report) + "\n")
    if plot is not None:
        from iqdemod.plots import plot_health

        plot_health(plot, report)
        if not quiet:
            say(f"wrote {plot}")


CURVE_RANGE_DB = (-50.0, 100.0)


def _parse_range(text: str) -> np.ndarray:
    try:
        start, stop, step = (float(v) for v in text.split(":"))
    except ValueError:
        raise click.BadParameter(f"{quote(text)}: expected FROM:TO:STEP in dB, e.g. 0:16:1",
                                 param_hint="--ebn0") from None
    lo, hi = CURVE_RANGE_DB
    if not (lo <= start <= hi and lo <= stop <= hi and 0 < step <= hi - lo):  # NaN fails every comparison
        raise click.BadParameter(f"{quote(text)}: FROM and TO must be within {lo:g}–{hi:g} dB and STEP > 0",
                                 param_hint="--ebn0")
    if stop < start or (stop - start) / step > 10_000:
        raise click.BadParameter(f"{quote(text)}: need FROM <= TO and 0 < STEP (at most 10000 points)",
                                 param_hint="--ebn0")
    return np.arange(start, stop + step / 2, step)


@main.command()
@link_options
@click.option("--ebn0", "ebn0_range", default="0:16:1", show_default=True, metavar="FROM:TO:STEP",
              help="Eb/N0 values to tabulate, dB (FROM and TO within -50–100, at most 10000 points).")
@click.option("--freq-error-t", type=finite(-1.0, 1.0), default=0.0, show_default=True,
              help="Residual carrier error times symbol time (δf·T) for the mismatched correlator.")
@click.option("--target-ber", type=finite(0, 0.5, min_open=True, max_open=True), default=1e-5,
              show_default=True, help="Report the Eb/N0 each scheme needs for this BER.")
@click.option("--frame-bits", type=click.IntRange(1, 1 << 20), default=None,
              help="Bits checked per frame for the frame error rate [default: from the link's frame].")
@click.option("--json", "as_json", is_flag=True, help="Print JSON instead of a table.")
@click.option("--plot", type=click.Path(dir_okay=False, path_type=Path), help="Write the curves as a PNG.")
def curves(ebn0_range, freq_error_t, target_ber, frame_bits, as_json, plot, **link_kw) -> None:
    """Tabulate BER and frame error rate against Eb/N0 for planning a link.

    Columns: non-coherent BFSK for this link's modulation index h = shift/baud
    (and δf·T), orthogonal non-coherent, coherent orthogonal and antipodal
    references, and the frame error rate of this link. For a Gaussian pulse
    (--gaussian BT) or an h that is not whole, two more: the one-symbol
    correlator bank receiving this pulse, and the multi-symbol detector of
    --detector-symbols symbols, each with its frame error rate. Give --baud and
    --shift (or --link); no capture is needed.
    """
    if link_kw.get("link") is None and link_kw.get("baud") is None and link_kw.get("shift") is None:
        link_kw["baud"] = link_kw["shift"] = 1.0  # no link given: orthogonal tones, h = 1
    guard_outputs([("--plot", plot)], link=link_kw.get("link"))
    link = link_from_options(link_kw)
    if plot is not None:
        from iqdemod.plots import require_matplotlib

        require_matplotlib()
    sig = link.signal
    table = iqdemod.predict.curves_table(_parse_range(ebn0_range), h=sig.h, freq_error_T=freq_error_t,
                                         frame_bits=frame_bits or _frame_bits(link), target_ber=target_ber,
                                         pulse=sig.pulse, bt=sig.bt, detector_symbols=sig.detector_symbols)
    if as_json:
        click.echo(json.dumps(table, default=_json_default))
    else:
        click.echo(_curves_text(table))
    if plot is not None:
        from iqdemod.plots import plot_curves

        plot_curves(plot, ebn0_db=np.asarray(table["ebn0_db"]), h=sig.h, freq_error_T=freq_error_t,
                    target_ber=target_ber, pulse=sig.pulse, bt=sig.bt, detector_symbols=sig.detector_symbols)
        say(f"wrote {plot}")


def _frame_bits(link) -> int:
    f = link.frame
    payload = 24 if f.length == "prefix8" else int(f.length)
    return 8 * (payload + (f.length == "prefix8")) + f.crc_bits


def _curves_text(t: dict) -> str:
    """The curves as an aligned table with two header lines, then the Eb/N0 each needs for the target."""
    extended = "ber_multi_symbol" in t
    gauss = t.get("pulse") == "gaussian"
    n = t.get("detector_symbols")
    this = ("rect pulse", f"h={t['h']:g}") if gauss else ("this link", f"h={t['h']:g}")
    cols = [(("Eb/N0", "dB"), "ebn0_db", "{:.2f}"), (this, "ber_link", "{:.3e}")]
    if extended:
        pulse = f"Gaussian BT {t['bt']:g}" if gauss else "rect pulse"
        cols += [(("one-symbol bank", pulse), "ber_one_symbol_pulse", "{:.3e}"),
                 ((f"{n}-symbol", "detector"), "ber_multi_symbol", "{:.3e}")]
    cols += [(("non-coherent", "orthogonal"), "ber_noncoherent", "{:.3e}"),
             (("coherent", "orthogonal"), "ber_coherent_orthogonal", "{:.3e}"),
             (("antipodal", ""), "ber_antipodal", "{:.3e}"),
             ((f"PER {t['frame_bits']} bits", "rect pulse" if gauss else "this link"), "per_link", "{:.3e}")]
    if extended:
        cols += [((f"PER {t['frame_bits']} bits", "one-symbol"), "per_one_symbol_pulse", "{:.3e}"),
                 ((f"PER {t['frame_bits']} bits", f"{n}-symbol"), "per_multi_symbol", "{:.3e}")]
    widths = [max(len(head[0]), len(head[1]), 9) for head, _, _ in cols]
    lines = ["  ".join(f"{head[row]:>{w}}" for (head, _, _), w in zip(cols, widths)) for row in (0, 1)]
    for i in range(len(t["ebn0_db"])):
        lines.append("  ".join(f"{fmt.format(t[k][i]):>{w}}" for (_, k, fmt), w in zip(cols, widths)))
    need = t["needed_db"]
    lines.append("")
    text = (f"Eb/N0 needed for BER {t['target_ber']:g}: "
            f"{'a rect pulse at this h' if gauss else 'this link'} {_fmt_need(need['link'])}")
    if extended:
        text += (f", one-symbol bank with this pulse {_fmt_need(need['one_symbol_pulse'])}, "
                 f"{n}-symbol detector {_fmt_need(need['multi_symbol'])}")
    text += (f", non-coherent orthogonal {need['noncoherent']:.2f} dB, coherent orthogonal "
             f"{need['coherent_orthogonal']:.2f} dB, antipodal {need['antipodal']:.2f} dB")
    lines.append(text)
    return "\n".join(lines)


def _fmt_need(x):
    return "unreachable (error floor)" if x is None else f"{x:.2f} dB"
