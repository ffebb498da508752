"""The command line: CliRunner for each command, the installed script once, the bad-input matrix."""

import json
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from iqdemod_cli.main import main

from conftest import make_capture, make_link, truth_payloads

LINK_FLAGS = ["--offset", "137000", "--baud", "9600", "--shift", "9600", "--sync", "0x9B3C57E1", "--length", "24",
              "--crc", "CRC-16/IBM-3740"]


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


@pytest.fixture(scope="module")
def capture(tmp_path_factory):
    return make_capture(tmp_path_factory.mktemp("cli") / "cap", frames=6, seed=21, freq_error_hz=-700.0,
                        clock_ppm=30.0)


def test_version_and_help():
    assert run("--version").output.startswith("iqdemod, version")
    for cmd in ("decode", "health", "curves", "synth"):
        out = run(cmd, "--help").output
        assert "Usage:" in out and "--help" in out


def test_decode_writes_json_lines(capture, tmp_path):
    meta, truth = capture
    out = tmp_path / "frames.jsonl"
    res = run("decode", meta, *LINK_FLAGS, "--output", out, "-q")
    assert res.exit_code == 0, res.stderr
    rows = [json.loads(line) for line in out.read_text().splitlines()]
    assert [r["payload_hex"] for r in rows] == truth_payloads(truth)
    keys = {"capture", "t_s", "sample", "burst", "length", "payload_hex", "crc_ok", "sync_errors", "freq_error_hz",
            "ebn0_db"}
    assert all(keys <= set(r) and r["crc_ok"] for r in rows)
    assert all(abs(r["ebn0_db"] - 18) < 1.5 for r in rows)


def test_decode_summary_says_what_to_check_when_nothing_is_found(capture):
    meta, _ = capture
    flags = dict(zip(LINK_FLAGS[::2], LINK_FLAGS[1::2]))
    elsewhere = [a for k, v in {**flags, "--offset": "-300000"}.items() for a in (k, v)]  # an empty channel
    res = run("decode", meta, *elsewhere)
    assert res.exit_code == 0 and "0 burst(s)" in res.stderr and "no bursts: check --offset" in res.stderr
    wrong_sync = [a for k, v in {**flags, "--sync": "0x12345678"}.items() for a in (k, v)]
    res = run("decode", meta, *wrong_sync)
    assert "0 frame(s)" in res.stderr and "no sync word found: check --sync" in res.stderr
    assert "check" not in run("decode", meta, *LINK_FLAGS).stderr  # frames found: no advice


def test_decode_summary_and_raw_mode(capture):
    meta, truth = capture
    res = run("decode", meta, *LINK_FLAGS)
    assert res.exit_code == 0 and "6 frame(s), 6 good" in res.stderr
    raw = run("decode", meta, "--offset", "137000", "--baud", "9600", "--shift", "9600", "-q")
    rows = [json.loads(line) for line in raw.stdout.splitlines()]
    assert len(rows) >= 6 and all({"bits_hex", "n_bits"} <= set(r) for r in rows)
    def bit_string(hex_text, n):
        return "".join(f"{b:08b}" for b in bytes.fromhex(hex_text))[:n]

    sent = bit_string("9B3C57E1" + truth_payloads(truth)[0], 32 + 8 * 24)
    assert any(sent in bit_string(r["bits_hex"], r["n_bits"]) for r in rows)  # the first frame's bits, unaligned
    assert sum(r["n_bits"] > 250 for r in rows) >= 6


def test_link_profile_and_only_good(capture, tmp_path):
    meta, _ = capture
    prof = tmp_path / "link.toml"
    prof.write_text('[signal]\noffset_hz = 137000\nbaud = 9600\nshift_hz = 9600\n[frame]\nsync_word = "0x9B3C57E1"\n')
    res = run("decode", meta, "--link", prof, "--only-good", "-q")
    assert res.exit_code == 0 and len(res.stdout.splitlines()) == 6


def test_health_json_has_the_contract_keys(capture, tmp_path):
    meta, _ = capture
    res = run("health", meta, *LINK_FLAGS, "--json", "-q")
    assert res.exit_code == 0, res.stderr
    d = json.loads(res.stdout)
    for key in ("capture", "duration_s", "bursts", "frames", "frames_crc_ok", "ebn0_db", "ebn0_db_ci90",
                "ebn0_method", "ber_predicted", "fer_predicted", "fer_observed", "fer_observed_ci95",
                "freq_error_hz", "clock_error_ppm", "margin_db", "target_ber", "mismatch_loss_db",
                "clipped_fraction"):
        assert key in d, key
    assert d["frames"] == d["frames_crc_ok"] == 6 and abs(d["ebn0_db"] - 18) < 0.7
    assert abs(d["freq_error_hz"] + 700) < 60 and d["target_ber"] == 1e-5
    text = run("health", meta, *LINK_FLAGS, "-q").stdout
    assert text.splitlines()[0].startswith("cap.sigmf-meta") and "margin" in text and "verdict" in text


def test_health_and_curves_plots(capture, tmp_path):
    meta, _ = capture
    png = tmp_path / "h.png"
    assert run("health", meta, *LINK_FLAGS, "--plot", png, "-q").exit_code == 0
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    png2 = tmp_path / "c.png"
    res = run("curves", "--baud", "4800", "--shift", "2400", "--ebn0", "0:14:2", "--plot", png2)
    assert res.exit_code == 0 and png2.read_bytes()[:4] == b"\x89PNG"


def test_curves_table_against_reference():
    res = run("curves", "--ebn0", "10:10:1", "--json")
    t = json.loads(res.stdout)
    # REFERENCE §1 point values at 10 dB [book]: 3.3690e-3 / 7.827e-4 / 3.872e-6; 1e-5 needs 13.3525 dB
    assert t["ber_noncoherent"][0] == pytest.approx(3.3690e-3, rel=1e-4)
    assert t["ber_coherent_orthogonal"][0] == pytest.approx(7.827e-4, rel=1e-3)
    assert t["ber_antipodal"][0] == pytest.approx(3.872e-6, rel=1e-3)
    assert t["needed_db"]["noncoherent"] == pytest.approx(13.3525, abs=1e-4)


def test_synth_command(tmp_path):
    res = run("synth", tmp_path / "s", *LINK_FLAGS, "--ebn0", "12,20", "--frames", "3", "--seed", "4", "-q")
    assert res.exit_code == 0, res.stderr
    truth = json.loads((tmp_path / "s.truth.json").read_text())
    assert [f["ebn0_db"] for f in truth["frames"]] == [12, 20, 12]
    meta = json.loads((tmp_path / "s.sigmf-meta").read_text())
    assert meta["global"]["core:datatype"] == "cf32_le" and meta["global"]["core:sample_rate"] == 1024000


# -- the bad-input matrix (hardening): each gives a non-zero exit, one message, no traceback ----------


@pytest.fixture(scope="module")
def bad_inputs(tmp_path_factory, capture):
    d = tmp_path_factory.mktemp("bad")
    meta, _ = capture
    (d / "empty.cu8").write_bytes(b"")
    (d / "some.cu8").write_bytes(bytes(4000))
    (d / "broken.sigmf-meta").write_text('{"global": {"core:datatype": "cu8"')
    (d / "broken.sigmf-data").write_bytes(bytes(100))
    shutil.copy(meta, d / "lonely.sigmf-meta")
    (d / "folder").mkdir()
    (d / "broken.toml").write_text("[signal]\nbaud = = 9600\n")
    return d, meta


CASES = [
    ("missing file", lambda d, m: [d / "nope.sigmf-meta", *LINK_FLAGS], "no such file"),
    ("empty file", lambda d, m: [d / "empty.cu8", "--datatype", "cu8", "--rate", "1024000", *LINK_FLAGS], "empty capture"),
    ("unknown datatype", lambda d, m: [d / "some.cu8", "--datatype", "cx7", "--rate", "1024000", *LINK_FLAGS], "datatype 'cx7'"),
    ("negative rate", lambda d, m: [d / "some.cu8", "--datatype", "cu8", "--rate", "-250000", *LINK_FLAGS], "-250000 Hz: must be > 0"),
    ("baud above rate", lambda d, m: [m, *LINK_FLAGS, "--baud", "900000"], "below half the sample rate"),
    ("offset outside band", lambda d, m: [m, *LINK_FLAGS, "--offset", "600000"], "outside the captured band"),
    ("sync not hex", lambda d, m: [m, *LINK_FLAGS, "--sync", "0xZZTOP"], "not hex"),
    ("unknown CRC", lambda d, m: [m, *LINK_FLAGS, "--crc", "CRC-99/NOPE"], "CRC 'CRC-99/NOPE': unknown"),
    ("broken SigMF metadata", lambda d, m: [d / "broken.sigmf-meta", *LINK_FLAGS], "broken SigMF metadata"),
    ("metadata without data", lambda d, m: [d / "lonely.sigmf-meta", *LINK_FLAGS], "data file missing"),
    ("folder as capture", lambda d, m: [d / "folder", *LINK_FLAGS], "is a folder"),
    ("broken link file", lambda d, m: [m, "--link", d / "broken.toml"], "TOML syntax error"),
]


# A flag's value that is wrong on its own is a usage error (README "Exit status": 2); what depends on
# the capture or a profile is status 1.
FLAG_CASES = {"unknown datatype", "negative rate", "sync not hex", "unknown CRC"}


@pytest.mark.parametrize("command", ["decode", "health"])
@pytest.mark.parametrize("name,args,message", CASES, ids=[c[0] for c in CASES])
def test_bad_inputs_fail_cleanly(bad_inputs, command, name, args, message):
    d, meta = bad_inputs
    res = CliRunner().invoke(main, [command, *[str(a) for a in args(d, meta)], "-q"])
    assert res.exit_code == (2 if name in FLAG_CASES else 1), (name, res.output)
    assert message in res.stderr and res.stderr.startswith("Error: ") and len(res.stderr.strip().splitlines()) == 1
    assert "Traceback" not in res.stderr and res.exception is None or isinstance(res.exception, SystemExit)


def test_usage_error_is_status_2():
    assert CliRunner().invoke(main, ["decode"]).exit_code == 2


def test_debug_shows_the_traceback(bad_inputs):
    d, _ = bad_inputs
    res = CliRunner().invoke(main, ["--debug", "decode", str(d / "nope.cu8"), "--datatype", "cu8", "--rate", "1e6",
                                    *LINK_FLAGS])
    assert res.exit_code != 0 and res.exception is not None and not isinstance(res.exception, SystemExit)


def test_nan_stretch_and_cut_sample_are_tolerated(tmp_path):
    link = make_link(datatype="cf32_le")
    meta, truth = make_capture(tmp_path / "d", link=link, frames=5, seed=8)
    data = tmp_path / "d.sigmf-data"
    x = np.fromfile(data, np.complex64)
    gap_start = truth["frames"][2]["start_sample"] - 3000  # a NaN stretch in the quiet before frame 2
    x[gap_start : gap_start + 2000] = np.nan
    raw = x.tobytes() + b"\x01\x02\x03"  # and a cut final sample
    data.write_bytes(raw)
    res = CliRunner().invoke(main, ["decode", str(meta), *LINK_FLAGS, "--only-good"])
    assert res.exit_code == 0
    assert "cut final sample" in res.stderr and "2000 NaN/Inf" in res.stderr
    rows = [json.loads(line) for line in res.stdout.splitlines()]
    assert [r["payload_hex"] for r in rows] == truth_payloads(truth)


def test_output_file_is_left_intact_when_a_run_fails(capture, tmp_path):
    meta, _ = capture
    out = tmp_path / "keep.jsonl"
    out.write_text("previous\n")
    res = CliRunner().invoke(main, ["decode", str(meta), str(tmp_path / "missing.cu8"), *LINK_FLAGS, "-o", str(out),
                                    "-q"])
    assert res.exit_code == 1 and out.read_text() == "previous\n"
    assert not list(tmp_path.glob(".keep.jsonl.*"))  # no temporary file left behind


def test_installed_script_runs():
    exe = shutil.which("iqdemod")
    assert exe, "the console script is installed by pip"
    here = Path(__file__).resolve().parents[1] / "captures_synthetic"
    res = subprocess.run([exe, "decode", str(here / "harbour-buoys.sigmf-meta"), "--link",
                          str(here / "harbour-buoys.toml"), "-q"], capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr
    rows = [json.loads(line) for line in res.stdout.splitlines()]
    truth = json.loads((here / "harbour-buoys.truth.json").read_text())
    assert sorted(r["payload_hex"] for r in rows if r["crc_ok"]) == sorted(truth_payloads(truth))


def test_sigterm_keeps_the_frames_found_or_else_the_previous_output(tmp_path):
    """A run stopped by SIGTERM mid-way keeps the frames it found (or the old output file when it found
    none), and leaves no temporary file."""
    import signal
    import time

    meta, truth = make_capture(tmp_path / "long", frames=200, seed=30)
    out = tmp_path / "frames.jsonl"
    out.write_text("previous\n")
    exe = shutil.which("iqdemod")
    proc = subprocess.Popen([exe, "decode", str(meta), *LINK_FLAGS, "-o", str(out), "-q", "--block", "4096"],
                            stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 30
    while not list(tmp_path.glob(".frames.jsonl.*")) and proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.02)  # wait until the output is being written
    time.sleep(0.2)
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=60)
    text = out.read_text()
    if proc.returncode == 0:  # finished before the signal: then the output must be complete
        assert len(text.splitlines()) == 200
    elif text == "previous\n":  # stopped before the first frame
        assert proc.returncode == 143 and "terminated (SIGTERM) before any frame was found" in err, err
    else:  # whole lines, the first frames sent (the generator's truth)
        assert proc.returncode == 143 and "terminated (SIGTERM): " in err, err
        assert text.endswith("\n")
        rows = [json.loads(line) for line in text.splitlines()]
        assert [r["payload_hex"] for r in rows] == truth_payloads(truth)[: len(rows)]
        assert f"{len(rows)} frame(s) found before the stop kept in {out}" in err
    assert not list(tmp_path.glob(".frames.jsonl.*"))


@pytest.mark.parametrize(
    "args,message",
    [
        (["survey", "{d}/nope.cu8", "--datatype", "cu8", "--rate", "1e6"], "no such file"),
        (["survey", "{d}/folder"], "is a folder"),
        (["survey", "{d}/empty.cu8", "--datatype", "cu8", "--rate", "1e6"], "empty capture"),
        (["batch", "{d}/nope", "--baud", "9600", "--shift", "9600", "--output", "{d}/r.csv"], "no such file"),
        (["synth", "{d}/s", "--baud", "9600", "--shift", "9600", "--ebn0", "10", "--frames", "2", "--rate", "-5"],
         "--rate: sample rate -5 Hz: must be > 0"),
        (["synth", "{d}/s", "--baud", "9600", "--shift", "9600", "--ebn0", "10", "--frames", "2", "--sync", "0xQQ"],
         "--sync: sync word '0xQQ': not hex"),
    ],
)
def test_other_commands_fail_cleanly_too(bad_inputs, args, message):
    d, _ = bad_inputs
    res = CliRunner().invoke(main, [a.format(d=d) for a in args] + ["-q"])
    assert res.exit_code == (2 if message.startswith("--") else 1), res.output  # a flag's own value: usage
    assert res.stderr.startswith("Error: ") and message in res.stderr and "Traceback" not in res.stderr
    assert len(res.stderr.strip().splitlines()) == 1


def test_python_dash_m_lists_every_command():
    """`python -m iqdemod_cli` is the same command line as the installed script."""
    import subprocess
    import sys

    out = subprocess.run([sys.executable, "-m", "iqdemod_cli", "--help"], capture_output=True, text=True, check=True)
    for name in ("batch", "curves", "decode", "health", "survey", "synth"):
        assert f"  {name} " in out.stdout


@pytest.mark.parametrize("command", ["decode", "health", "survey"])
def test_a_bad_rate_is_named_by_its_flag_in_every_command(bad_inputs, command):
    """A bad --rate is a usage error (status 2) in every command, one line that names the flag."""
    d, _ = bad_inputs
    link = [] if command == "survey" else LINK_FLAGS
    res = CliRunner().invoke(main, [command, str(d / "some.cu8"), "--datatype", "cu8", "--rate", "-250000",
                                    *link, "-q"])
    assert res.exit_code == 2, res.output
    assert res.stderr.startswith("Error: --rate: ") and "-250000 Hz: must be > 0" in res.stderr


@pytest.mark.parametrize("command,unused,used", [
    ("curves", ["--rate", "--datatype", "--offset", "--sync", "--max-freq-error", "--coding"],
     ["--baud", "--shift", "--gaussian", "--length", "--crc"]),
    ("synth", ["--max-freq-error", "--detector", "--detector-symbols", "--sync-tolerance"],
     ["--datatype", "--rate", "--offset", "--sync", "--gaussian", "--coding"]),
])
def test_a_command_offers_only_the_link_flags_it_uses(command, unused, used):
    # a flag a command would ignore is not offered: given, it is a usage error, not silence
    text = run(command, "--help").output
    assert all(f"  {flag} " in text for flag in used)
    assert not any(f"  {flag} " in text for flag in unused)
    res = CliRunner().invoke(main, [command, "x", *unused[:1], "1"])
    assert res.exit_code == 2 and f"No such option '{unused[0]}'" in res.stderr
