"""The ``curves`` command: error rates against Eb/N0, for planning a link (no capture needed)."""

from __future__ import annotations

from pathlib import Path

import click
import numpy as np

import iqdemod
from iqdemod.errors import quote

from .._common import finite, guard_outputs, link_from_options, link_options, say
from ..render import curves_text, to_json, wrote

__all__ = ["command"]

CURVE_RANGE_DB = (-50.0, 100.0)


# curves tabulate theory for the signal and the frame's length and CRC: the capture, where the
# signal sits, the sync word and the line coding play no part, so they are not offered
UNUSED = ("datatype", "rate", "offset", "frequency", "invert", "max_freq_error", "sync", "sync_bits",
          "sync_tolerance", "coding", "whitening", "bit_order", "crc_order", "length_counts", "length_offset")


@click.command("curves")
@link_options(omit=UNUSED)
@click.option("--ebn0", "ebn0_range", default="0:16:1", show_default=True, metavar="FROM:TO:STEP",
              help="Eb/N0 values to tabulate, dB (FROM and TO within -50–100, at most 10000 points).")
@click.option("--freq-error-per-baud", "--freq-error-t", "freq_error_per_baud", type=finite(-1.0, 1.0), default=0.0,
              show_default=True,
              help="Residual carrier error as a fraction of the symbol rate (δf·T, e.g. 0.1 = a tenth of the "
                   "baud), for the correlators that are off frequency.")
@click.option("--target-ber", type=finite(0, 0.5, min_open=True, max_open=True), default=1e-5,
              show_default=True, help="Report the Eb/N0 each scheme needs for this BER.")
@click.option("--frame-bits", type=click.IntRange(1, 1 << 20), default=None,
              help="Bits checked per frame for the frame error rate [default: from the link's frame].")
@click.option("--json", "as_json", is_flag=True, help="Print JSON instead of a table.")
@click.option("--plot", type=click.Path(dir_okay=False, path_type=Path), help="Write the curves as a PNG.")
def command(ebn0_range, freq_error_per_baud, target_ber, frame_bits, as_json, plot, **link_kw) -> None:
    """Tabulate BER and frame error rate against Eb/N0 for planning a link.

    Columns: non-coherent BFSK for this link's modulation index h = shift/baud
    (and carrier error), orthogonal non-coherent, coherent orthogonal and
    antipodal references, and the frame error rate (FER) of this link. For a
    Gaussian pulse (--gaussian BT) or an h that is not whole, two more: the
    one-symbol correlator bank receiving this pulse, and the multi-symbol
    detector of --detector-symbols symbols, each with its frame error rate.
    Give --baud and --shift (or --link); without any of the three, orthogonal
    tones (h = 1). No capture is needed. Of a profile, the signal, the frame
    length and the CRC count; its capture, sync word and coding do not.
    """
    if link_kw.get("link") is None and link_kw.get("baud") is None and link_kw.get("shift") is None:
        link_kw["baud"] = link_kw["shift"] = 1.0  # no link given: orthogonal tones, h = 1
    guard_outputs([("--plot", plot)], link=link_kw.get("link"))
    link = link_from_options(link_kw)
    if plot is not None:
        from iqdemod.plots import require_matplotlib

        require_matplotlib()
    sig = link.signal
    table = iqdemod.predict.curves_table(_parse_range(ebn0_range), h=sig.h, freq_error_per_baud=freq_error_per_baud,
                                         frame_bits=frame_bits or _frame_bits(link), target_ber=target_ber,
                                         pulse=sig.pulse, bt=sig.bt, detector_symbols=sig.detector_symbols)
    click.echo(to_json(table) if as_json else curves_text(table))
    if plot is not None:
        from iqdemod.plots import plot_curves

        plot_curves(plot, ebn0_db=np.asarray(table["ebn0_db"]), h=sig.h, freq_error_per_baud=freq_error_per_baud,
                    target_ber=target_ber, pulse=sig.pulse, bt=sig.bt, detector_symbols=sig.detector_symbols)
        say(wrote(plot))


def _parse_range(text: str) -> np.ndarray:
    """FROM:TO:STEP in dB, checked, as the values it names (TO included)."""
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


def _frame_bits(link) -> int:
    """Bits a frame's CRC covers: the payload (and a length byte) and the CRC itself."""
    f = link.frame
    payload = 24 if f.length == "prefix8" else int(f.length)
    return 8 * (payload + (f.length == "prefix8")) + f.crc_bits
