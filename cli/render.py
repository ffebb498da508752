"""Text and JSON for people and pipes: every renderer of the command line, in one place.

The library hands back results (reports, tables, summaries); this module
turns them into words. Conventions (issue 13):

- the frame error rate is a percentage with 3 significant figures in text
  ("18.8 %"); JSON carries the fraction;
- a sync word reads "0x9B3C57E1 (32 bits)";
- JSON is strict: NaN and infinities become null, numpy numbers plain ones
  (:func:`to_json`, the command line's one sanitiser).
"""

from __future__ import annotations

import json
import math
from typing import Any, Callable

__all__ = ["pct", "sync_word", "json_ready", "to_json", "decode_summary", "health_text",
           "health_links_text", "health_links_json", "curves_text",
           "survey_table", "batch_summary", "wrote"]

DASH = "—"


# --------------------------------------------------------------------------- numbers


def pct(x: float | None) -> str:
    """A rate as a percentage with 3 significant figures: 0.188 -> "18.8 %", 0.26 -> "26.0 %", 1 -> "100 %"."""
    if x is None:
        return DASH
    return "0 %" if x == 0 else f"{100 * x:#.3g}".rstrip(".") + " %"


def _sci(x: float | None) -> str:
    return DASH if x is None else f"{x:.2e}"


def _db(x: float | None, sign: bool = False) -> str:
    if x is None:
        return DASH
    x = round(x, 2) + 0.0  # a value that rounds to zero prints as 0.00, never -0.00
    return f"{x:+.2f} dB" if sign else f"{x:.2f} dB"


def sync_word(word: int | str | None, bits: int | None) -> str:
    """A sync word as "0x9B3C57E1 (32 bits)" (:func:`iqdemod.link.sync_label`), or that there is none."""
    if word is None or bits is None:
        return "none (raw mode)"
    from iqdemod.link import sync_label

    return sync_label(word, bits)


def wrote(path) -> str:
    """The line that says a file was written (stderr)."""
    return f"wrote {path}"


# --------------------------------------------------------------------------- JSON


def json_ready(value: Any) -> Any:
    """`value` with numpy numbers and arrays made plain, tuples made lists, NaN and ±inf made None."""
    if isinstance(value, dict):
        return {k: json_ready(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_ready(v) for v in value]
    if type(value).__module__ == "numpy":  # a numpy scalar or array, without importing numpy here
        return json_ready(value.tolist())
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def to_json(value: Any, **kwargs) -> str:
    """Strict JSON text of `value` (see :func:`json_ready`)."""
    return json.dumps(json_ready(value), allow_nan=False, **kwargs)


# --------------------------------------------------------------------------- decode


def decode_summary(summary, name: str, *, raw: bool) -> str:
    """The one line after decoding a capture: bursts, frames, good CRCs (or that no CRC was checked)."""
    if raw:
        text = (f"{name}: {summary.bursts} burst(s), {summary.frames} record(s) of raw bits; "
                "raw mode (no sync word): no CRC checked")
    else:
        text = f"{name}: {summary.bursts} burst(s), {summary.frames} frame(s), {summary.good} good"
        if summary.links:
            text += " (" + "; ".join(f"{link}: {n} frame(s), {good} good" for link, n, good in summary.links) + ")"
    if summary.stats is not None and summary.stats.clipped:
        text += f", {summary.stats.clipped_fraction:.3%} clipped"
    if not summary.bursts:
        text += "; no bursts: check --offset (or --frequency), and for a raw file --rate and --datatype"
    elif not summary.frames:
        text += "; no sync word found: check --sync, --baud, --shift and --offset (survey measures them)"
    return text


# --------------------------------------------------------------------------- health


def health_text(r) -> str:
    """The health report for people: the capture and its link, then the figures, aligned."""
    rows = _estimate_rows(r) + _margin_rows(r) + _error_rate_rows(r) + _transmitter_rows(r) + _recording_rows(r)
    width = max(len(a) for a, _, _ in rows)
    vwidth = max((len(b) for _, b, c in rows if c), default=0)
    lines = _health_head(r)
    lines += [f"  {a:<{width}}  {b:<{vwidth}}  {c}".rstrip() for a, b, c in rows]
    lines += [f"  possible cause: {cause}" for cause in r.causes]
    lines += [f"  warning: {w}" for w in r.warnings]
    return "\n".join(lines)


def health_links_text(reports) -> str:
    """Several links' health reports for people, in order: each headed by a line with its link's name
    (``== buoys ==``), a blank line between them."""
    return "\n\n".join(f"== {name} ==\n{health_text(r)}" for name, r in reports.items())


def health_links_json(reports) -> dict:
    """Several links' health reports as one JSON-ready object: ``{"links": {name: report, ...}}``, each
    report the object one link's ``--json`` gives, in link order."""
    return {"links": {name: r.as_dict() for name, r in reports.items()}}


def _health_head(r) -> list[str]:
    """The capture, its link's parameters and its start time."""
    raw = r.sync_word is None
    counted = (f"{r.frames} record(s) of raw bits, no CRC checked (raw mode)" if raw
               else f"{r.frames} frame(s), {r.frames_crc_ok} with good CRC")
    pulse = f"Gaussian pulse BT {r.bt:g}" if r.pulse == "gaussian" else "rectangular pulse"
    if raw:
        frame = "no sync word (raw bits)"
    else:
        length = "length byte" if r.frame_length == "prefix8" else f"{r.frame_length}-byte payload"
        crc = "no CRC" if str(r.crc).lower() == "none" else str(r.crc)  # catalogue names already say "CRC-…"
        frame = f"sync word {sync_word(r.sync_word, r.sync_bits)}, {length}, {crc}"
    start = f"recording started {r.start_time}" if r.start_time else "recording start: not recorded in the capture"
    return [
        f"{r.capture}: {r.duration_s:.2f} s, {r.bursts} burst(s), {counted}",
        f"  link: {r.baud:g} Bd, shift {r.shift_hz:g} Hz (h = {r.h:.3g}), {pulse}, {r.detector} detector; {frame}",
        f"  {start}",
    ]


def _estimate_rows(r) -> list[tuple[str, str, str]]:
    if r.ebn0_db is None:
        return [("Eb/N0", DASH, "no frame found to measure it on")]
    lo, hi = r.ebn0_db_ci90
    rows = [("Eb/N0", _db(r.ebn0_db), f"90 % interval {lo:.2f} … {hi:.2f} dB, {r.ebn0_method}")]
    if r.bursts_differ:
        lo, hi = r.ebn0_db_bursts
        rows.append(("Eb/N0 of bursts", f"{lo:.1f} … {hi:.1f} dB",
                     "10th to 90th percentile of the frames, each burst's own estimate less its noise"))
    return rows


def _margin_rows(r) -> list[tuple[str, str, str]]:
    """The margin, and the three numbers behind it: the theory, the receiver's gain, the coherent reference."""
    rows = []
    if r.margin_db is not None:
        rows.append(("margin", _db(r.margin_db, True),
                     f"to BER {r.target_ber:g}: Eb/N0 {r.ebn0_db:.2f} dB against {r.ebn0_needed_db:.2f} dB needed"))
    if r.margin_db_weakest is not None and r.bursts_differ:
        rows.append(("margin, weakest", _db(r.margin_db_weakest, True),
                     "of the weakest tenth of the frames (bursts at the 10th percentile's Eb/N0)"))
    fitted = r.detector == "multi-symbol"  # its Eb/N0 is fitted against the pulse itself: no gain to count
    if r.ebn0_needed_db is not None:
        rows.append(("Eb/N0 needed", _db(r.ebn0_needed_db),
                     f"theory for this link (the {r.detector_symbols}-symbol detector)" if fitted else
                     f"theory for this link {r.theory_ebn0_needed_db:.2f} dB, less this receiver's gain "
                     f"{r.decision_gain_db:.2f} dB"))
    elif r.ebn0_db is not None:
        rows.append(("Eb/N0 needed", DASH, f"BER {r.target_ber:g} lies below this link's error floor"))
    if r.coherent_ebn0_needed_db is not None:
        textbook = not fitted and r.h is not None and float(r.h).is_integer()  # orthogonal tones, one symbol
        rows.append(("coherent reference", _db(r.coherent_ebn0_needed_db),
                     f"coherent orthogonal FSK in theory; non-coherent orthogonal FSK needs "
                     f"{r.noncoherent_penalty_db:.2f} dB more" if textbook else
                     "coherent orthogonal FSK in theory, for comparison only: this link's own theory is "
                     "Eb/N0 needed above"))
    if not fitted:
        rows.append(("receiver gain", _db(r.decision_gain_db, True),
                     "this receiver's filter passes less noise than the textbook correlator, so its decisions "
                     "work at Eb/N0 plus this (the predictions count it)"))
    return rows


def _error_rate_rows(r) -> list[tuple[str, str, str]]:
    rows = []
    if r.ber_predicted is not None:
        ci = r.ber_predicted_ci90
        mean = "; the mean over the bursts, each at its own Eb/N0" if r.bursts_differ else ""
        rows.append(("BER predicted", _sci(r.ber_predicted),
                     (f"90 % {_sci(ci[0])} … {_sci(ci[1])}" if ci else "") + mean))
    if r.fer_predicted is not None:
        ci = r.fer_predicted_ci90
        rows.append(("frame error rate predicted", pct(r.fer_predicted),
                     f"90 % {pct(ci[0])} … {pct(ci[1])}, {r.frame_bits} bits checked per frame" if ci else ""))
    if r.fer_observed is not None:
        lo, hi = r.fer_observed_ci95
        bad = r.frames - r.frames_crc_ok
        rows.append(("frame error rate observed", pct(r.fer_observed),
                     f"95 % {pct(lo)} … {pct(hi)}, {bad} of {r.frames} failed their CRC"))
    verdict = r.verdict + (f" (exact binomial test p = {r.fer_p_value:.3g})" if r.fer_p_value is not None else "")
    rows.append(("verdict", verdict, ""))
    return rows


def _signed(value: float) -> str:
    """A whole number with its sign, never "-0" (a value that rounds to zero is +0).

    >>> _signed(-0.3), _signed(-0.7), _signed(12.4)
    ('+0', '-1', '+12')
    """
    return f"{round(value) + 0:+d}"


def _transmitter_rows(r) -> list[tuple[str, str, str]]:
    rows = []
    if r.freq_error_hz is not None:
        extra = [f"{r.freq_error_ppm:+.2f} ppm of the carrier"] if r.freq_error_ppm is not None else []
        extra.append(f"spread {r.freq_spread_hz:.0f} Hz rms between bursts")
        extra.append(f"residual {r.residual_freq_error_hz:.1f} Hz")
        rows.append(("carrier error", f"{_signed(r.freq_error_hz)} Hz", ", ".join(extra)))
    if r.clock_error_ppm is not None:
        ci = r.clock_error_ppm_ci90
        rows.append(("clock error", f"{_signed(r.clock_error_ppm)} ppm", "symbol clock, mean over bursts" + (
            f" (90 % {_signed(ci[0])} … {_signed(ci[1])} ppm; one burst's own reads far wider)" if ci else "")))
    if r.mismatch_loss_db is not None:
        rows.append(("mismatch loss", f"{r.mismatch_loss_db:.3f} dB", "from the residual carrier error"))
    return rows


def _recording_rows(r) -> list[tuple[str, str, str]]:
    """What the recording receiver itself did to the samples."""
    rows = [("clipped", pct(r.clipped_fraction), "samples at full scale")]
    if r.dc_dbfs is not None:
        rows.append(("DC offset", f"{r.dc_dbfs:.1f} dBFS", "the recording receiver's own; removed before tuning"))
    if r.iq_gain_db is not None:
        rows.append(("IQ imbalance", f"{_db(r.iq_gain_db, sign=True)}, {round(r.iq_phase_deg, 2) + 0.0:+.2f}°",
                     f"image rejection {r.image_rejection_db:.1f} dB as recorded, "
                     f"{r.image_rejection_after_db:.1f} dB after correction"))
    return rows


# --------------------------------------------------------------------------- curves


def curves_text(t: dict) -> str:
    """The curves as an aligned table with two header lines, then the Eb/N0 each needs for the target."""
    cols = _curves_columns(t)
    widths = [max(len(head[0]), len(head[1]), 9) for head, _, _ in cols]
    lines = ["  ".join(f"{head[row]:>{w}}" for (head, _, _), w in zip(cols, widths)) for row in (0, 1)]
    for i in range(len(t["ebn0_db"])):
        lines.append("  ".join(f"{fmt(t[k][i]):>{w}}" for (_, k, fmt), w in zip(cols, widths)))
    lines += ["", _curves_needed(t)]
    if "ber_multi_symbol" in t:
        lines.append(f"The {t['detector_symbols']}-symbol detector's BER is its pruned union bound, shown below "
                     f"{BOUND_SHOWN:g} (\u2014: above that the bound overshoots, as far as 0.5).")
    return "\n".join(lines)


def _curves_columns(t: dict) -> list[tuple[tuple[str, str], str, Callable[[float], str]]]:
    """(two header lines, key, formatter) per column; FER is the frame error rate, in per cent."""
    extended = "ber_multi_symbol" in t
    gauss = t.get("pulse") == "gaussian"
    n = t.get("detector_symbols")
    name = _curves_link_name(t)
    cols = [(("Eb/N0", "dB"), "ebn0_db", "{:.2f}".format), ((f"BER {name}", f"h = {t['h']:g}"), "ber_link", _ber)]
    if extended:
        if gauss:  # with a rect pulse the one-symbol bank's curve is the link column itself
            cols += [(("BER one-symbol", f"Gaussian BT {t['bt']:g}"), "ber_one_symbol_pulse", _ber)]
        cols += [((f"BER {n}-symbol", "detector"), "ber_multi_symbol", _ber_bound)]
    frame = f"{t['frame_bits']}-bit frame"
    cols += [(("BER non-coherent", "orthogonal"), "ber_noncoherent", _ber),
             (("BER coherent", "orthogonal"), "ber_coherent_orthogonal", _ber),
             (("BER antipodal", "(BPSK)"), "ber_antipodal", _ber),
             ((f"FER {name}", frame), "fer_link", pct)]
    if extended:
        if gauss:
            cols += [(("FER one-symbol", frame), "fer_one_symbol_pulse", pct)]
        cols += [((f"FER {n}-symbol", frame), "fer_multi_symbol", pct)]
    return cols


def _curves_link_name(t: dict) -> str:
    """What the 'link' curve is: the link's own receiver, unless the link defaults to the multi-symbol
    detector, where it is the one-symbol bank (on a rect pulse at this h, for a Gaussian link)."""
    if t.get("pulse") == "gaussian":
        return "rect pulse"
    return "one-symbol bank" if "ber_multi_symbol" in t else "this link"


def _ber(x: float) -> str:
    return f"{x:.3e}"


BOUND_SHOWN = 0.1  # the multi-symbol detector's union bound overshoots (to 0.5) above this; the plot stops there too


def _ber_bound(x: float) -> str:
    return f"{x:.3e}" if x <= BOUND_SHOWN else "—"


def _curves_needed(t: dict) -> str:
    need = t["needed_db"]
    gauss = t.get("pulse") == "gaussian"
    name = "a rect pulse at this h" if gauss else _curves_link_name(t)
    text = f"Eb/N0 needed for BER {t['target_ber']:g}: {name} {_need(need['link'])}"
    if "ber_multi_symbol" in t:
        if gauss:
            text += f", one-symbol bank with this pulse {_need(need['one_symbol_pulse'])}"
        text += f", {t['detector_symbols']}-symbol detector {_need(need['multi_symbol'])}"
    text += (f", non-coherent orthogonal {need['noncoherent']:.2f} dB, coherent orthogonal "
             f"{need['coherent_orthogonal']:.2f} dB, antipodal {need['antipodal']:.2f} dB")
    return text


def _need(x: float | None) -> str:
    return "unreachable (error floor)" if x is None else f"{x:.2f} dB"


# --------------------------------------------------------------------------- survey


def survey_table(result) -> str:
    """The signals as a compact aligned table, strongest first."""
    head = ("#", "offset_hz", "shift_hz", "baud", "h", "bursts", "burst_ms", "ebn0_db", "level_dbfs", "pulse/bt", "sync",
            "frame")
    rows = [head]
    for i, s in enumerate(result.signals, 1):
        sync = s.sync_text or "-"
        if s.length is None:
            frame = "raw"
        else:
            frame = ("prefix8" if s.length == "prefix8" else f"{s.length} B") + (f", {s.crc}" if s.crc else ", no CRC")
        ebn0 = f"{s.ebn0_db:.1f}" if math.isfinite(s.ebn0_db) else "-"
        power = f"{s.level_dbfs:.1f}" if math.isfinite(s.level_dbfs) else "-"
        rows.append((str(i), f"{s.offset_hz:.1f}", f"{s.shift_hz:.1f}", f"{s.baud:.2f}", f"{s.h:.3f}", str(s.bursts),
                     f"{1e3 * s.burst_lengths_s.median:.1f}", ebn0, power, _pulse(s), sync, frame))
    widths = [max(len(r[k]) for r in rows) for k in range(len(head))]
    lines = []
    for r in rows:
        cells = [c.rjust(w) for c, w in zip(r[:-2], widths[:-2])] + [r[-2].ljust(widths[-2]), r[-1]]
        lines.append("  ".join(cells).rstrip())
    return "\n".join(lines) + "\n"


def _pulse(s) -> str:
    """The pulse found, for the table: "rect", "gaussian/0.5" (with its BT), or "-" when it was not measured."""
    if s.pulse is None:
        return "-"
    return "rect" if s.pulse == "rect" else f"gaussian/{s.bt:g}"


# --------------------------------------------------------------------------- batch


def batch_summary(result, *, weakest_shown: int = 5) -> list[str]:
    """Closing lines of a batch for people: counts, the weakest links, the first failures.

    With several links a capture has a row per link: the counts are then of rows, and each
    row is named by its capture and its link's name.
    """
    skipped = f" ({result.n_skipped} done before)" if result.n_skipped else ""
    rows = f" ({len(result.rows)} rows: one per link)" if len(result.rows) > result.n_captures else ""
    lines = [
        f"{result.n_captures} capture(s){rows}{skipped}: {result.n_ok} ok, {result.n_failed} failed; "
        f"{result.n_frames} frame(s), {result.n_frames_crc_ok} with good CRC; {result.elapsed_s:.1f} s -> "
        f"{result.report}"
    ]

    def name(r) -> str:
        return f"{r.capture} ({r.link_name})" if r.link_name else r.capture

    if result.weakest:
        lines.append(f"weakest {len(result.weakest)} by margin:")
        width = max(len(name(r)) for r in result.weakest)
        for r in result.weakest:
            tx = f"  [{r.transmitter}]" if r.transmitter else ""
            ebn0 = "" if r.ebn0_db is None else f"  Eb/N0 {r.ebn0_db:5.1f} dB"
            fer = r.fer_observed
            fer_text = "" if fer is None else f"  frame error rate {pct(fer)}"
            lines.append(f"  {name(r):<{width}}  margin {r.margin_db:+6.1f} dB{ebn0}{fer_text}{tx}")
    empty = [r for r in result.rows if r.ok and not r.frames]
    if empty:  # processed, but nothing to measure: not among the weakest, so named here
        more = f" and {len(empty) - weakest_shown} more" if len(empty) > weakest_shown else ""
        lines.append(f"no frames found in {len(empty)} capture(s): " + ", ".join(name(r) for r in empty[:weakest_shown])
                     + more + " (check their link)")
    # a capture that failed fails for every link alike: one line for it, naming its links
    failed: dict[tuple[str, str], list[str]] = {}
    for r in result.rows:
        if not r.ok:
            failed.setdefault((r.capture, r.error), []).append(r.link_name)
    for (capture, error), links in list(failed.items())[:weakest_shown]:
        named = ", ".join(n for n in links if n)
        lines.append(f"failed: {capture}{f' ({named})' if named else ''}: {error}")
    if len(failed) > weakest_shown:
        lines.append(f"failed: … and {len(failed) - weakest_shown} more (see the report)")
    return lines
