"""What an operator reads (issue 13): labels in plain words, one name and format for the frame error rate.

Reference figures: REFERENCE.md §1 (13.3525 dB non-coherent and 12.5982 dB coherent orthogonal FSK
for BER 1e-5); the contract's formats ("18.8 %", "0x9B3C57E1 (32 bits)", "wrote PATH").
"""

import json
import re

import numpy as np
import pytest
from click.testing import CliRunner
from matplotlib.colors import to_hex

import iqdemod.plots as plots
from iqdemod.health import assess
from iqdemod_cli.main import main
from iqdemod_cli.render import pct, sync_word

from conftest import make_capture, make_link

LINK_FLAGS = ["--offset", "137000", "--baud", "9600", "--shift", "9600", "--sync", "0x9B3C57E1", "--length", "24",
              "--crc", "CRC-16/IBM-3740"]


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


@pytest.fixture(scope="module")
def capture(tmp_path_factory):
    return make_capture(tmp_path_factory.mktemp("labels") / "buoy", frames=40, ebn0=(11.0,), seed=33,
                        start_time="2026-11-30T22:15:07Z")


def test_formats():
    assert [pct(0.188), pct(0.26), pct(1.0), pct(None)] == ["18.8 %", "26.0 %", "100 %", "—"]
    assert sync_word("0x9b3c57e1", 32) == sync_word(0x9B3C57E1, 32) == "0x9B3C57E1 (32 bits)"
    assert sync_word(0x2D, 8) == "0x2D (8 bits)"


def test_health_text_names_the_link_and_splits_the_margin(capture):
    meta, _ = capture
    res = run("health", meta, *LINK_FLAGS, "-q")
    assert res.exit_code == 0, res.stderr
    text = res.stdout
    r = assess(meta, make_link())
    assert "sync word 0x9B3C57E1 (32 bits), 24-byte payload, CRC-16/IBM-3740" in text
    assert "9600 Bd, shift 9600 Hz (h = 1)" in text and "recording started 2026-11-30T22:15:07Z" in text
    # the three numbers behind the margin, each on its own: theory (REFERENCE §1, 13.35 dB for h = 1 and
    # no carrier error), the receiver's gain, the coherent reference (12.60 dB)
    assert r.theory_ebn0_needed_db == pytest.approx(13.3525, abs=0.02)
    assert r.ebn0_needed_db == pytest.approx(r.theory_ebn0_needed_db - r.decision_gain_db)
    assert f"theory for this link {r.theory_ebn0_needed_db:.2f} dB" in text
    assert f"receiver's gain {r.decision_gain_db:.2f} dB" in text
    assert re.search(r"coherent reference +12\.60 dB", text)
    assert f"Eb/N0 {r.ebn0_db:.2f} dB against {r.ebn0_needed_db:.2f} dB needed" in text
    assert "its decisions see Eb/N0 plus this" not in text and "non-coherent penalty" not in text
    # the frame error rate: named in words, as a percentage with 3 significant figures
    assert "PER" not in text
    assert f"frame error rate observed   {pct(r.fer_observed)}" in text
    assert re.search(r"frame error rate predicted +\d+(\.\d+)? %", text)


def test_health_json_names_the_frame_error_rate_fer(capture):
    meta, _ = capture
    d = json.loads(run("health", meta, *LINK_FLAGS, "--json", "-q").stdout)
    assert not [k for k in d if k.startswith("per_")]
    assert {"fer_predicted", "fer_observed", "fer_observed_ci95", "fer_p_value", "theory_ebn0_needed_db"} <= set(d)
    assert 0 <= d["fer_observed"] <= 1 and d["sync_word"] == "0x9B3C57E1"


def test_health_plot_says_what_it_wrote(capture, tmp_path):
    meta, _ = capture
    png = tmp_path / "h.png"
    res = run("health", meta, *LINK_FLAGS, "--plot", png, "-q")
    assert res.exit_code == 0 and png.read_bytes()[:4] == b"\x89PNG" and res.stderr == ""  # -q: silent
    res = run("health", meta, *LINK_FLAGS, "--plot", png)
    assert res.stderr.endswith(f"wrote {png}\n")


def test_raw_decode_does_not_count_good_frames(capture):
    meta, _ = capture
    res = run("decode", meta, "--offset", "137000", "--baud", "9600", "--shift", "9600")
    assert res.exit_code == 0
    line = res.stderr.strip().splitlines()[-1]
    assert "good" not in line and "no CRC checked" in line, line
    framed = run("decode", meta, *LINK_FLAGS).stderr.strip().splitlines()[-1]
    assert re.search(r"40 frame\(s\), \d+ good", framed)


def test_curves_name_the_frame_error_rate_and_the_carrier_error():
    text = run("curves", "--ebn0", "10:12:2").stdout
    head = "\n".join(text.splitlines()[:2])
    assert "FER this link" in head and "208-bit frame" in head and "non-coh orth" not in head and "PER" not in text
    first = text.splitlines()[2].split()
    assert first[-1] == "%" and float(first[-2]) == pytest.approx(100 * (1 - (1 - 3.369e-3) ** 208), abs=0.1)
    new = json.loads(run("curves", "--ebn0", "10:10:1", "--freq-error-per-baud", "0.1", "--json").stdout)
    old = json.loads(run("curves", "--ebn0", "10:10:1", "--freq-error-t", "0.1", "--json").stdout)
    assert new == old and new["freq_error_per_baud"] == 0.1 and "freq_error_T" not in new
    assert new["ber_link"][0] == pytest.approx(5.171e-3, rel=1e-3)  # REFERENCE §3: δf·T = 0.1 at 10 dB
    assert "fer_link" in new and not [k for k in new if k.startswith("per_")]


def _figure_of(monkeypatch, draw):
    saved = {}
    monkeypatch.setattr(plots, "save_figure", lambda fig, path: saved.setdefault("fig", fig))
    draw()
    return saved["fig"]


def test_health_plot_point_sits_at_the_eb_n0_its_title_quotes(capture, monkeypatch):
    meta, _ = capture
    r = assess(meta, make_link())
    assert abs(r.decision_gain_db) > 0.05  # the case that used to differ (title 10.6 dB, point 10.8 dB)
    fig = _figure_of(monkeypatch, lambda: plots.plot_health("unused.png", r))
    ax = fig.axes[0]
    assert f"Eb/N0 {r.ebn0_db:.1f} dB" in ax.get_title()
    points = [line for line in ax.lines if line.get_marker() in ("o", "s", "v")]
    assert points and all(np.allclose(line.get_xdata(), r.ebn0_db) for line in points)
    labels = [t.get_text() for t in fig.axes[1].get_legend().get_texts()]
    assert labels[0] == "the other correlator" and labels[1].startswith("correlator of the symbol sent")


@pytest.mark.parametrize("which", ["health", "curves", "curves_gaussian"])
def test_plots_take_their_colours_from_the_palette(capture, monkeypatch, which):
    meta, _ = capture
    draw = {
        "health": lambda: plots.plot_health("unused.png", assess(meta, make_link())),
        "curves": lambda: plots.plot_curves("unused.png", ebn0_db=np.arange(0, 14.0), h=0.75, freq_error_per_baud=0.1,
                                            target_ber=1e-5),
        "curves_gaussian": lambda: plots.plot_curves("unused.png", ebn0_db=np.arange(6, 12.0), h=0.5, pulse="gaussian",
                                                     target_ber=1e-5),
    }[which]
    fig = _figure_of(monkeypatch, draw)
    palette = {to_hex(c) for c in plots.PALETTE.values()}
    used = {to_hex(line.get_color()) for ax in fig.axes for line in ax.lines}
    used |= {to_hex(p.get_facecolor()) for ax in fig.axes for p in ax.patches}
    assert used and used <= palette, used - palette


def test_multi_symbol_report_claims_no_filter_gain(capture):
    """The multi-symbol detector's Eb/N0 is fitted against the pulse: no receiver-gain row, no "-0.00 dB"."""
    import dataclasses

    from iqdemod_cli.render import health_text

    meta, _ = capture
    r = assess(meta, make_link())
    fitted = dataclasses.replace(r, detector="multi-symbol", detector_symbols=5, decision_gain_db=0.0,
                                 ebn0_needed_db=r.theory_ebn0_needed_db)
    text = health_text(fitted)
    rows = {line.split("  ")[1] for line in text.splitlines()[3:] if line.startswith("  ") and "  " in line[2:]}
    assert "receiver gain" not in rows and "receiver's gain" not in text
    assert "theory for this link (the 5-symbol detector)" in text
    assert "receiver gain" in {line.split("  ")[1] for line in health_text(r).splitlines()[3:]}
    assert r.decision_gain_db > 0 and fitted.decision_gain_db == 0.0


def test_curves_show_the_multi_symbol_bound_only_where_it_means_something():
    """Above 0.1 the pruned union bound overshoots towards 0.5 (the plot stops there too): the table
    shows "—" there, never a value above the one-symbol bank's exact one."""
    res = run("curves", "--baud", 9600, "--shift", 4800, "--gaussian", 0.5, "--ebn0", "0:12:1")
    assert res.exit_code == 0, res.output
    rows = [line.split() for line in res.output.splitlines() if re.match(r"\s+\d+\.\d\d\s", line)]
    multi = [r[3] for r in rows]  # Eb/N0, BER rect pulse, BER one-symbol, BER 5-symbol, …
    assert multi[0] == "—" and all(m == "—" or float(m) <= 0.1 for m in multi)
    assert any(m != "—" for m in multi)
    assert "pruned union bound, shown below 0.1" in res.output


def test_a_value_that_rounds_to_zero_never_prints_as_minus_zero():
    from iqdemod_cli.render import _db

    assert _db(-0.004) == "0.00 dB" and _db(-0.004, sign=True) == "+0.00 dB" and _db(-0.006) == "-0.01 dB"


def test_batch_summary_names_the_captures_with_no_frames():
    # A capture processed without error but with no frame has no margin: it is neither among the
    # weakest nor failed, so the summary names it (a new user read "8 ok" and missed it).
    from iqdemod.batch.report import BatchResult, CaptureRow

    from iqdemod_cli.render import batch_summary

    rows = [CaptureRow("a.cu8", "/a.cu8", "ok", frames=4, frames_crc_ok=4, margin_db=3.0, ebn0_db=14.0),
            CaptureRow("quiet.cu8", "/quiet.cu8", "ok", frames=0, frames_crc_ok=0, verdict="no frames found"),
            CaptureRow("bad.cu8", "/bad.cu8", "error", error="CaptureError: empty capture")]
    lines = batch_summary(BatchResult.of(rows, report="r.csv"))
    assert lines[0].startswith("3 capture(s): 2 ok, 1 failed")
    assert "no frames found in 1 capture(s): quiet.cu8 (check their link)" in lines
    assert not any("a.cu8" in line and "no frames" in line for line in lines)


def test_batch_summary_names_a_failed_capture_once_with_its_links():
    # one capture, two links, one error: one line naming both links (not one line a link)
    from iqdemod.batch.report import BatchResult, CaptureRow

    from iqdemod_cli.render import batch_summary

    rows = [CaptureRow("bad.cu8", "/bad.cu8", "error", error="CaptureError: empty capture", link_name="buoys"),
            CaptureRow("bad.cu8", "/bad.cu8", "error", error="CaptureError: empty capture", link_name="gauges"),
            CaptureRow("alone.cu8", "/alone.cu8", "error", error="CaptureError: no such file")]
    lines = batch_summary(BatchResult.of(rows, report="r.csv"))
    assert [line for line in lines if line.startswith("failed:")] == [
        "failed: bad.cu8 (buoys, gauges): CaptureError: empty capture",
        "failed: alone.cu8: CaptureError: no such file"]


def test_signed_whole_numbers_never_read_minus_zero():
    """A carrier or clock error that rounds to zero reads +0, as its interval's ends do ("-0" read as a bug)."""
    from iqdemod_cli.render import _signed

    assert [_signed(v) for v in (-0.3, -0.0, 0.4, -0.7, 12.4, -224.6)] == ["+0", "+0", "+0", "-1", "+12", "-225"]
