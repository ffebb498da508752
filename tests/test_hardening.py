"""Hardening: no command destroys an input, replaces a device, or answers with a traceback.

Each row of the hardening table (issue 16) is a case here. A refusal is checked the same way
every time: exit status 1 or 2, exactly one ``Error:`` line on stderr and no traceback, and every
file of the inputs' folder byte for byte as it was (SHA-256 over the folder, before and after).
"""

from __future__ import annotations

import errno
import hashlib
import json
import os
import shutil
import signal
import stat
import subprocess
import tarfile
import threading
import time
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf
from click.testing import CliRunner

import iqdemod
import iqdemod.synth
from iqdemod import files
from iqdemod import batch as B
from iqdemod.errors import OutputError
from iqdemod_cli.main import main

from conftest import make_capture, make_link

DEMO = Path(__file__).resolve().parents[1] / "captures_synthetic"
LINK_TOML = """[signal]
offset_hz = 137000
baud = 9600
shift_hz = 9600
[frame]
sync_word = "0x9B3C57E1"
length = 24
crc = "CRC-16/IBM-3740"
"""
RAW_FLAGS = ["--datatype", "cf32_le", "--rate", "1024000"]
EXE = shutil.which("iqdemod")  # the installed script, for the cases that need a process of their own


def folder_digest(folder: Path) -> dict[str, str]:
    """SHA-256 of every file under `folder` (links by their target's bytes), and each link's target."""
    out = {}
    for p in sorted(folder.rglob("*")):
        rel = str(p.relative_to(folder))
        if p.is_symlink():
            out[rel + " ->"] = os.readlink(p)
        if p.is_file():
            out[rel] = hashlib.sha256(p.read_bytes()).hexdigest()
        elif not p.is_dir():
            out[rel] = stat.filemode(p.lstat().st_mode)  # a FIFO stays a FIFO
    return out


@pytest.fixture(scope="module")
def inputs(tmp_path_factory):
    """A folder of every kind of input: SigMF pair, raw, WAV, archive, profiles, an archive folder."""
    d = tmp_path_factory.mktemp("inputs")
    meta, truth = make_capture(d / "cap", frames=3, seed=5)
    data = d / "cap.sigmf-data"
    shutil.copy(data, d / "raw.cf32")
    iq = np.fromfile(data, np.complex64)
    sf.write(d / "rec.wav", np.stack([iq.real, iq.imag], axis=1), 1_024_000, subtype="FLOAT")
    with tarfile.open(d / "arc.sigmf", "w") as tar:  # SigMF archive: an uncompressed tar
        tar.add(meta, arcname="arc/arc.sigmf-meta")
        tar.add(data, arcname="arc/arc.sigmf-data")
    (d / "l.toml").write_text(LINK_TOML)
    fleet = d / "fleet"
    fleet.mkdir()
    shutil.copy(meta, fleet / "b1.sigmf-meta")
    shutil.copy(data, fleet / "b1.sigmf-data")
    (fleet / "link.toml").write_text(LINK_TOML)
    return d


def invoke(*args, **kw):
    args = [str(a) for a in args]
    if args[0] == "curves" and args[-1] == "-q":  # curves prints no progress, so it has no -q
        args = args[:-1]
    return CliRunner().invoke(main, args, **kw)


def assert_refused(res, *, contains: str | None = None, codes=(1, 2)):
    err = res.stderr
    assert res.exit_code in codes, (res.exit_code, err, res.stdout[:300])
    assert "Traceback" not in err and (res.exception is None or isinstance(res.exception, SystemExit)), err
    assert "internal error" not in err, err  # the command line's last resort: a bug that was caught, still a bug
    error_lines = [line for line in err.splitlines() if line.startswith("Error:")]
    assert len(error_lines) == 1, err
    if contains is not None:
        assert contains in error_lines[0], err
    return error_lines[0]


@pytest.fixture
def guard_devices(monkeypatch):
    """A safety net while a command may touch /dev: a rename onto a device name fails the test."""
    real = os.replace

    def replace(src, dst, *a, **kw):
        assert not os.fspath(dst).startswith("/dev/"), f"would replace {dst}"
        return real(src, dst, *a, **kw)

    monkeypatch.setattr(os, "replace", replace)


# --------------------------------------------------------------------------- row 1: an input is sacred
def _cases_row1(d: Path):
    m, data, link = d / "cap.sigmf-meta", d / "cap.sigmf-data", d / "l.toml"
    fl = d / "fleet"
    return {
        "decode -o meta": ["decode", m, "--link", link, "-o", m],
        "decode -o data": ["decode", m, "--link", link, "-o", data],
        "decode -o raw": ["decode", d / "raw.cf32", *RAW_FLAGS, "--link", link, "-o", d / "raw.cf32"],
        "decode -o wav": ["decode", d / "rec.wav", "--link", link, "-o", d / "rec.wav"],
        "decode -o archive": ["decode", d / "arc.sigmf", "--link", link, "-o", d / "arc.sigmf"],
        "decode -o link": ["decode", m, "--link", link, "-o", link],
        "decode -o other spelling": ["decode", m, "--link", link, "-o", d / "fleet" / ".." / "cap.sigmf-data"],
        "decode -o second capture": ["decode", m, d / "raw.cf32", "--link", link, *RAW_FLAGS, "-o", d / "raw.cf32"],
        "health -o meta": ["health", m, "--link", link, "-o", m],
        "health --plot data": ["health", m, "--link", link, "--plot", data],
        "health -o and --plot one file": ["health", m, "--link", link, "-o", d / "x.out", "--plot", d / "x.out"],
        "curves --plot link": ["curves", "--link", link, "--plot", link],
        "survey --write-link meta": ["survey", m, "--write-link", m],
        "survey --plot data": ["survey", m, "--plot", data],
        "batch -o capture": ["batch", fl, "-o", fl / "b1.sigmf-meta"],
        "batch --frames capture": ["batch", fl, "-o", d / "r.csv", "--frames", fl / "b1.sigmf-data"],
        "batch -o folder link.toml": ["batch", fl, "-o", fl / "link.toml"],
        "batch --frames --link": ["batch", fl, "--link", link, "-o", d / "r.csv", "--frames", link],
        "batch --plot capture": ["batch", fl, "-o", d / "r.csv", "--plot", fl / "b1.sigmf-meta"],
        "synth onto its own profile": ["synth", d / "l", "--link", d / "l.truth.json", "--ebn0", "10", "--frames", "1"],
    }


ROW1 = list(_cases_row1(Path("/")).keys())


@pytest.mark.parametrize("case", ROW1)
def test_row1_an_output_onto_an_input_is_refused(inputs, case):
    if case == "synth onto its own profile":
        (inputs / "l.truth.json").write_text(LINK_TOML + "[capture]\nsample_rate = 1024000\n")
    before = folder_digest(inputs)
    res = invoke(*_cases_row1(inputs)[case], "-q")
    line = assert_refused(res, codes=(1,))
    assert "same file" in line or "refusing to overwrite an input" in line, line
    assert folder_digest(inputs) == before


@pytest.mark.parametrize("present", ["data", "meta", "truth", "all three", "dangling link as data"])
def test_row1_synth_never_replaces_an_existing_capture_unless_asked(inputs, tmp_path, present):
    fleet = tmp_path / "fleet"
    fleet.mkdir()
    real = {"data": "cap1.sigmf-data", "meta": "cap1.sigmf-meta", "truth": "cap1.truth.json"}
    if present == "dangling link as data":
        os.symlink(tmp_path / "elsewhere" / "rec.sigmf-data", fleet / "cap1.sigmf-data")
    else:
        for key in (real if present == "all three" else [present]):
            shutil.copy(inputs / ("cap.sigmf-data" if key == "data" else "cap.sigmf-meta"), fleet / real[key])
    before = folder_digest(fleet)
    args = ["synth", fleet / "cap1", "--link", inputs / "l.toml", "--rate", "1024000", "--ebn0", "10", "--frames", "2"]
    line = assert_refused(invoke(*args, "-q"), contains="already exist", codes=(1,))  # checked before any work
    assert "--overwrite" in line and all(name in line for name in before if not name.endswith(" ->"))
    assert folder_digest(fleet) == before and not (tmp_path / "elsewhere").exists()
    if present.startswith("dangling"):
        return
    res = invoke(*args, "--overwrite", "-q")  # asked: replaced, all three together
    assert res.exit_code == 0, res.stderr
    assert sorted(p.name for p in fleet.iterdir()) == sorted(real.values())
    assert json.loads((fleet / "cap1.truth.json").read_text())["n_samples"] > 0


def test_row1_a_hard_link_or_symbolic_link_to_an_input_is_the_input(inputs, tmp_path):
    os.link(inputs / "cap.sigmf-data", tmp_path / "hard")
    os.symlink(inputs / "cap.sigmf-meta", tmp_path / "soft")
    before = folder_digest(inputs)
    for out in ("hard", "soft"):
        res = invoke("decode", inputs / "cap.sigmf-meta", "--link", inputs / "l.toml", "-o", tmp_path / out, "-q")
        assert_refused(res, contains="refusing to overwrite an input", codes=(1,))
    assert folder_digest(inputs) == before
    assert (tmp_path / "soft").is_symlink()


# --------------------------------------------------------------------------- row 2: devices, FIFOs, links
def test_row2_a_fifo_output_is_written_into(inputs, tmp_path):
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    got = []
    reader = threading.Thread(target=lambda: got.append(fifo.read_text()), daemon=True)
    reader.start()
    res = invoke("decode", inputs / "cap.sigmf-meta", "--link", inputs / "l.toml", "-o", fifo, "-q")
    reader.join(30)
    assert res.exit_code == 0, res.stderr
    assert stat.S_ISFIFO(os.lstat(fifo).st_mode)  # still a FIFO
    rows = [json.loads(line) for line in got[0].splitlines()]
    assert len(rows) == 3 and all(r["crc_ok"] for r in rows)


def test_row2_a_character_device_is_written_into_not_replaced(inputs, guard_devices):
    before = os.stat("/dev/null")
    assert files.classify_output("/dev/null").kind == "stream"
    res = invoke("health", inputs / "cap.sigmf-meta", "--link", inputs / "l.toml", "-o", "/dev/null", "-q")
    assert res.exit_code == 0, res.stderr
    after = os.stat("/dev/null")
    assert stat.S_ISCHR(after.st_mode) and (after.st_ino, after.st_rdev) == (before.st_ino, before.st_rdev)


def test_row2_a_symbolic_link_output_replaces_its_target_and_stays_a_link(inputs, tmp_path):
    target = tmp_path / "real.jsonl"
    target.write_text("old\n")
    (tmp_path / "ln.jsonl").symlink_to(target)
    res = invoke("decode", inputs / "cap.sigmf-meta", "--link", inputs / "l.toml", "-o", tmp_path / "ln.jsonl", "-q")
    assert res.exit_code == 0, res.stderr
    assert (tmp_path / "ln.jsonl").is_symlink()
    assert len(target.read_text().splitlines()) == 3
    assert sorted(p.name for p in tmp_path.iterdir()) == ["ln.jsonl", "real.jsonl"]  # no temporary file left


def test_row2_dash_is_standard_output(inputs):
    res = invoke("decode", inputs / "cap.sigmf-meta", "--link", inputs / "l.toml", "-o", "-", "-q")
    assert res.exit_code == 0 and len(res.stdout.splitlines()) == 3


def test_row2_dev_stdout_on_a_pipe_is_written_into(inputs):
    # /dev/stdout is a link into /proc whose "target" names no real file when stdout is a pipe
    proc = subprocess.run([EXE, "decode", str(inputs / "cap.sigmf-meta"), "--link", str(inputs / "l.toml"), "-o",
                           "/dev/stdout", "-q"], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert len(proc.stdout.splitlines()) == 3


def test_row2_folder_and_missing_folder_outputs(inputs, tmp_path):
    for out, words in ((tmp_path, "is a directory"), (tmp_path / "nofolder" / "x.jsonl", "does not exist")):
        res = invoke("decode", inputs / "cap.sigmf-meta", "--link", inputs / "l.toml", "-o", out, "-q")
        line = assert_refused(res, contains=words)
        assert ".part" not in line  # row 14: the message names the output, not a temporary file
    with pytest.raises(OutputError, match="is a folder"):  # the library's own check, for callers without click
        files.classify_output(tmp_path)


# --------------------------------------------------------------------------- rows 3–5: batch outputs
@pytest.mark.parametrize("report,frames", [("r.csv", "r.csv.partial"), ("f.jsonl.partial", "f.jsonl"),
                                           ("same.csv", "same.csv")])
def test_row3_outputs_that_are_each_others_journals_are_refused(inputs, tmp_path, report, frames):
    before = folder_digest(inputs)
    res = invoke("batch", inputs / "fleet", "-o", tmp_path / report, "--frames", tmp_path / frames, "-q")
    assert_refused(res, contains="same file", codes=(1,))
    assert list(tmp_path.iterdir()) == [] and folder_digest(inputs) == before


def test_row4_a_second_batch_on_the_same_frames_file_is_refused(inputs, tmp_path):
    frames = tmp_path / "f.jsonl"
    with B.journal.exclusive(tmp_path / "first.csv", frames):  # the first batch, still running
        (tmp_path / "f.jsonl.partial").write_text('{"capture": "x"}\n')
        res = invoke("batch", inputs / "fleet", "-o", tmp_path / "second.csv", "--frames", frames, "-q")
        assert_refused(res, contains="another batch is writing", codes=(1,))
        assert (tmp_path / "f.jsonl.partial").read_text() == '{"capture": "x"}\n'  # its journal kept
    assert not (tmp_path / "second.csv").exists()


def _fail_rename_onto(monkeypatch, victim: Path):
    """os.replace of a temporary file onto `victim` fails with ENOSPC (undo renames still work)."""
    real = os.replace

    def replace(src, dst, *a, **kw):
        if Path(dst) == victim and not os.fspath(src).endswith(".old"):
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), os.fspath(dst))
        return real(src, dst, *a, **kw)

    monkeypatch.setattr(os, "replace", replace)


def test_row5_synth_commits_data_metadata_and_truth_together(tmp_path, monkeypatch):
    args = ["synth", tmp_path / "s", "--baud", "9600", "--shift", "9600", "--frames", "2", "-q"]
    assert invoke(*args, "--ebn0", "12", "--seed", "1").exit_code == 0
    before = folder_digest(tmp_path)
    _fail_rename_onto(monkeypatch, tmp_path / "s.sigmf-meta")  # the last rename fails
    res = invoke(*args, "--ebn0", "15", "--seed", "2", "--overwrite")
    assert_refused(res, contains="No space left", codes=(1,))
    assert folder_digest(tmp_path) == before  # old data, old truth, old metadata: a consistent set


def test_row5_batch_commits_report_and_frames_together(inputs, tmp_path, monkeypatch):
    report, frames = tmp_path / "r.csv", tmp_path / "f.jsonl"
    base = ["batch", inputs / "fleet", "-o", report, "--frames", frames, "-j", "1", "-q"]
    assert invoke(*base).exit_code == 0
    report.write_text(report.read_text() + "# marker of the old report\n")
    frames.write_text(frames.read_text() + '{"capture": "old marker"}\n')
    before = folder_digest(tmp_path)
    _fail_rename_onto(monkeypatch, report)  # the frames are renamed first, then the report fails
    res = invoke(*base)
    assert_refused(res, contains="No space left", codes=(1,))
    after = folder_digest(tmp_path)
    assert after["r.csv"] == before["r.csv"] and after["f.jsonl"] == before["f.jsonl"]
    assert "f.jsonl.partial" in after  # the new frames went back to the journal, for --resume


# --------------------------------------------------------------------------- row 6: torn journals
@pytest.mark.parametrize("tear", ["inside a character", "bad bytes in frames"])
def test_row6_resume_drops_a_torn_last_line_whatever_its_bytes(inputs, tmp_path, tear):
    report, frames = tmp_path / "r.csv", tmp_path / "f.jsonl"
    base = ["batch", inputs / "fleet", "-o", report, "--frames", frames, "-j", "1", "-q"]
    assert invoke(*base).exit_code == 0
    rows = report.read_bytes()
    journal = report.with_name("r.csv.partial")
    if tear == "inside a character":
        journal.write_bytes(rows + "bouée-7.sigmf-meta,".encode()[:4] + "é".encode()[:1])
        frames.with_name("f.jsonl.partial").write_bytes(frames.read_bytes())
    else:
        journal.write_bytes(rows)
        frames.with_name("f.jsonl.partial").write_bytes(frames.read_bytes() + b"\xff\xfe\x80")
    os.unlink(report)
    res = invoke(*base, "--resume")
    assert res.exit_code == 0 and "Traceback" not in res.stderr, res.stderr
    assert "cut off" in res.stderr and "dropped" in res.stderr  # it says so
    assert len(B.read_report(report)) == 1


# --------------------------------------------------------------------------- rows 7–11: values and files
def test_row7_too_few_samples_per_symbol_is_refused():
    res = invoke("decode", DEMO / "harbour-buoys.sigmf-meta", "--link", DEMO / "harbour-buoys.toml", "--baud", "50000",
                 "--shift", "50000", "-q")
    assert_refused(res, contains="samples per symbol", codes=(1,))


def test_row7_the_bound_is_at_eight_samples_per_symbol():
    link = make_link(baud=9600, shift=9600, offset=0)
    link.check_rate(8 * 9600)  # exactly 8: accepted
    with pytest.raises(iqdemod.LinkError, match="7.99 samples per symbol"):
        link.check_rate(8 * 9600 - 100)


def _meta(glob_extra: str = "", capture_extra: str = "") -> str:
    return ('{"global": {"core:datatype": "cf32_le", "core:sample_rate": 1024000' + glob_extra + '}, '
            '"captures": [{"core:sample_start": 0' + capture_extra + '}], "annotations": []}')


MALFORMED = {
    "nested 200000 arrays": ("x.sigmf-meta", lambda: "[" * 200_000 + "]" * 200_000, "nested too deep"),
    "5001-digit integer": ("x.sigmf-meta", lambda: _meta(', "x": 1' + "0" * 5000), "broken SigMF metadata"),
    "frequency 1e400": ("x.sigmf-meta", lambda: _meta(capture_extra=', "core:frequency": 1e400'), "core:frequency"),
    "frequency NaN": ("x.sigmf-meta", lambda: _meta(capture_extra=', "core:frequency": NaN'), "NaN"),
    "sample rate 1e300": ("x.sigmf-meta", lambda: _meta().replace("1024000", "1e300"), "sample rate"),
    "metadata over 4 MB": ("x.sigmf-meta", lambda: _meta(', "pad": "' + "a" * (5 << 20) + '"'), "larger than"),
    "TOML nested 100000": ("l2.toml", lambda: "a = " + "[" * 100_000 + "]" * 100_000, "nested too deep"),
    "TOML 5001 digits": ("l2.toml", lambda: "[signal]\nbaud = 1" + "0" * 5000 + "\n", "link profile"),
    "TOML over 1 MB": ("l2.toml", lambda: "#" * (2 << 20), "larger than"),
}


@pytest.mark.parametrize("case", list(MALFORMED))
def test_row8_malformed_files_are_one_error_line(tmp_path, case):
    name, text, words = MALFORMED[case]
    (tmp_path / name).write_text(text())
    (tmp_path / "x.sigmf-data").write_bytes(bytes(8 * 4096))
    before = folder_digest(tmp_path)
    if name.endswith(".toml"):
        res = invoke("decode", tmp_path / "x.sigmf-data", "--link", tmp_path / name, "-q")
    else:
        res = invoke("decode", tmp_path / name, "--baud", "9600", "--shift", "9600", "-q")
    assert_refused(res, contains=words, codes=(1,))
    assert len(res.stderr) < 400
    assert folder_digest(tmp_path) == before


SYNTH = ["--baud", "9600", "--shift", "9600", "--frames", "2"]
ABSURD = {
    "curves --ebn0 0:nan:1": ["curves", "--ebn0", "0:nan:1"],
    "curves --ebn0 0:1e6:1": ["curves", "--ebn0", "0:1e6:1"],
    "synth --ebn0 1e6": ["synth", "{d}/s", *SYNTH, "--ebn0", "1e6"],
    "synth --ebn0 nan": ["synth", "{d}/s", *SYNTH, "--ebn0", "nan"],
    "synth --seed -1": ["synth", "{d}/s", *SYNTH, "--ebn0", "10", "--seed", "-1"],
    "synth --clock-ppm nan": ["synth", "{d}/s", *SYNTH, "--ebn0", "10", "--clock-ppm", "nan"],
    "synth --clock-ppm -2e6 (row 10)": ["synth", "{d}/s", *SYNTH, "--ebn0", "10", "--clock-ppm", "-2e6"],
    "synth --gap 0 inf": ["synth", "{d}/s", *SYNTH, "--ebn0", "10", "--gap", "0", "inf"],
    "synth --gaussian 1e-9": ["synth", "{d}/s", *SYNTH, "--ebn0", "10", "--gaussian", "1e-9"],
    "synth empty name": ["synth", "", *SYNTH, "--ebn0", "10"],
    "synth name is only a suffix": ["synth", "{d}/.sigmf-meta", *SYNTH, "--ebn0", "10"],
    "synth --rate 1e300": ["synth", "{d}/s", *SYNTH, "--ebn0", "10", "--rate", "1e300"],
    "synth --rate 1e12 --baud 1e9 (row 11)": ["synth", "{d}/s", "--baud", "1e9", "--shift", "1e9", "--frames", "1",
                                              "--ebn0", "10", "--rate", "1e12"],
    "synth a 13 GB burst": ["synth", "{d}/s", "--baud", "1", "--shift", "1", "--frames", "1", "--ebn0", "10",
                            "--rate", "1e6"],
    "synth --freq-error outside the band": ["synth", "{d}/s", *SYNTH, "--ebn0", "10", "--freq-error", "600000"],
    "decode --rate 1e300": ["decode", "{d}/x.cf32", "--datatype", "cf32_le", "--rate", "1e300", "--baud", "9600",
                            "--shift", "9600"],
    "decode --baud nan": ["decode", "{d}/x.cf32", "--datatype", "cf32_le", "--rate", "1e6", "--baud", "nan",
                          "--shift", "9600"],
    "decode --offset inf": ["decode", "{d}/x.cf32", "--datatype", "cf32_le", "--rate", "1e6", "--baud", "9600",
                            "--shift", "9600", "--offset", "inf"],
    "decode --sync-bits 1000": ["decode", "{d}/x.cf32", "--datatype", "cf32_le", "--rate", "1e6", "--baud", "9600",
                                "--shift", "9600", "--sync-bits", "1000"],
    "health --target-ber nan": ["health", "{d}/x.cf32", "--datatype", "cf32_le", "--rate", "1e6", "--baud", "9600",
                                "--shift", "9600", "--target-ber", "nan"],
    "survey --rate -1": ["survey", "{d}/x.cf32", "--datatype", "cf32_le", "--rate", "-1"],
    "batch --jobs 0": ["batch", "{d}/x.cf32", "--baud", "9600", "--shift", "9600", "-o", "{d}/r.csv", "--jobs", "0"],
}


@pytest.mark.parametrize("case", list(ABSURD))
def test_rows9_to_11_absurd_numbers_are_refused_before_work(tmp_path, case):
    (tmp_path / "x.cf32").write_bytes(bytes(8 * 4096))
    before = folder_digest(tmp_path)
    res = invoke(*[a.format(d=tmp_path) for a in ABSURD[case]], "-q")
    assert_refused(res)
    assert folder_digest(tmp_path) == before  # nothing written, not even a partial file


def test_row11_tiny_baud_is_refused_before_allocating():
    res = invoke("decode", DEMO / "harbour-buoys.sigmf-meta", "--link", DEMO / "harbour-buoys.toml", "--baud", "0.001",
                 "-q")
    assert_refused(res, contains="budget", codes=(1,))


@pytest.mark.parametrize("fs,baud,shift,words", [(1e11, 1, 1, "taps"), (1e11, 1e4, 1e4, "taps"),
                                                 (1.024e6, 1, 4e5, "budget")])
def test_row11_plans_beyond_the_memory_budget_are_refused_in_the_link(fs, baud, shift, words):
    link = iqdemod.load_link(None, baud=baud, shift=shift)
    with pytest.raises(iqdemod.LinkError, match=words):
        link.check_rate(fs)


def test_row11_the_estimates_are_the_front_ends_own_figures():
    # the check must not drift from the front end it protects: compare with the plan it makes
    from iqdemod.channel import plan_channel

    for fs, baud, shift in [(1.024e6, 9600, 9600), (1e8, 1e5, 1e5), (1e6, 100, 100), (2.4e6, 500, 1000),
                            (2.5e5, 4800, 4800)]:
        link = iqdemod.load_link(None, baud=baud, shift=shift)
        rate, taps = link._tuner_estimate(fs)
        plan = plan_channel(fs, link.signal, 0.0)
        assert rate == pytest.approx(plan.output_rate_hz) and taps == len(plan.taps)


def test_row11_metadata_that_never_ends_is_refused(tmp_path):
    os.symlink("/dev/zero", tmp_path / "z.sigmf-meta")
    (tmp_path / "z.sigmf-data").write_bytes(bytes(64))
    res = invoke("decode", tmp_path / "z.sigmf-meta", "--baud", "9600", "--shift", "9600", "-q")
    assert_refused(res, contains="not a regular file", codes=(1,))
    with pytest.raises(iqdemod.CaptureError, match="larger than"):  # the cap itself, on a regular file
        big = tmp_path / "big.sigmf-meta"
        with open(big, "wb") as fh:
            fh.truncate(iqdemod.capture.MAX_META_BYTES + 10)
        iqdemod.capture.read_sigmf_meta(big)


def test_row11_synth_checks_the_free_space_first(tmp_path, monkeypatch):
    import iqdemod.synth as S

    monkeypatch.setattr(S.shutil, "disk_usage", lambda p: shutil._ntuple_diskusage(10**9, 10**9 - 1000, 1000))
    res = invoke("synth", tmp_path / "s", *SYNTH, "--ebn0", "10", "-q")
    assert_refused(res, contains="free", codes=(1,))
    assert list(tmp_path.iterdir()) == []


# --------------------------------------------------------------------------- rows 12–13: processes


def test_row12_a_fifo_in_a_batch_folder_is_skipped_not_waited_on(inputs, tmp_path):
    folder = tmp_path / "arch"
    shutil.copytree(inputs / "fleet", folder)
    os.mkfifo(folder / "x.sigmf-meta")
    proc = subprocess.run([EXE, "batch", str(folder), "-o", str(tmp_path / "r.csv"), "-j", "1", "-q"],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert "x.sigmf-meta: not a regular file" in proc.stderr and "Traceback" not in proc.stderr
    assert len(B.read_report(tmp_path / "r.csv")) == 1


def test_row13_an_unreachable_cluster_fails_once(inputs, tmp_path):
    pytest.importorskip("distributed")
    for address in ("not a url", "tcp://127.0.0.1:9"):  # port 9 (discard): nothing listens there
        proc = subprocess.run([EXE, "batch", str(inputs / "fleet"), "-o", str(tmp_path / "r.csv"), "--cluster",
                               address, "-q"], capture_output=True, text=True, timeout=120)
        assert proc.returncode == 1, proc.stderr
        assert proc.stderr.startswith("Error: cluster") and len(proc.stderr.strip().splitlines()) == 1, proc.stderr
        assert "Exception ignored" not in proc.stderr


@pytest.mark.parametrize("sig", [signal.SIGHUP, signal.SIGQUIT], ids=["HUP", "QUIT"])
def test_row13_sighup_and_sigquit_stop_like_sigterm_and_keep_the_frames_found(tmp_path, sig):
    meta, truth = make_capture(tmp_path / "long", frames=200, seed=30)
    out = tmp_path / "frames.jsonl"
    out.write_text("previous\n")
    proc = subprocess.Popen([EXE, "decode", str(meta), "--link", str(_toml(tmp_path)), "-o", str(out), "-q",
                             "--block", "4096"], stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 30
    while not list(tmp_path.glob(".frames.jsonl.*")) and proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.02)  # wait until the output is being written
    time.sleep(0.2)
    proc.send_signal(sig)
    _, err = proc.communicate(timeout=60)
    text = out.read_text()
    if proc.returncode == 0:  # finished before the signal: then the output must be complete
        assert len(text.splitlines()) == 200
    else:
        name = signal.Signals(sig).name
        assert proc.returncode == 128 + sig and "Traceback" not in err, err
        if text == "previous\n":  # stopped before the first frame: the old file stays
            assert err.strip() == f"terminated ({name}) before any frame was found: {out} not written " \
                                  "(the old file is left as it was)"
        else:  # the frames found before the stop are kept, whole lines, in the order sent (the generator's truth)
            assert text.endswith("\n")
            rows = [json.loads(line) for line in text.splitlines()]
            assert [r["payload_hex"] for r in rows] == [f["payload_hex"] for f in truth["frames"][: len(rows)]]
            assert err.strip() == f"terminated ({name}): {len(rows)} frame(s) found before the stop kept in {out}"
    assert not list(tmp_path.glob(".frames.jsonl.*"))


def test_row13_sighup_stops_a_batch_like_sigterm_and_resume_finishes_it(tmp_path):
    link = make_link(datatype="cu8")
    for k in range(4):
        iqdemod.synth.synthesize(tmp_path / "arch" / f"k{k}", iqdemod.synth.SynthConfig(
            link=link, ebn0_db=(12.0,), n_frames=12, seed=k, start_time="2026-02-01T00:00:00Z"))
    _toml(tmp_path / "arch").rename(tmp_path / "arch" / "link.toml")
    report = tmp_path / "r.csv"
    cmd = [EXE, "batch", str(tmp_path / "arch"), "-o", str(report), "-j", "1", "-q"]
    proc = subprocess.Popen(cmd, stderr=subprocess.PIPE, text=True)
    journal = B.partial_path(report)
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline and proc.poll() is None:
        if journal.exists() and journal.read_text().count("\n") >= 2:  # header and one row
            break
        time.sleep(0.01)
    if proc.poll() is not None:
        pytest.skip("the batch ended before it could be stopped")
    proc.send_signal(signal.SIGHUP)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 128 + signal.SIGHUP and "--resume" in err and "Traceback" not in err, err
    kept = B.read_report(journal)
    assert 1 <= len(kept) < 4 and not report.exists()
    assert not [p for p in tmp_path.iterdir() if p.name.endswith(".part")]
    done = subprocess.run(cmd + ["--resume"], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert len(B.read_report(report)) == 4 and not journal.exists()


def _toml(folder: Path) -> Path:
    p = folder / "l.toml"
    p.write_text(LINK_TOML)
    return p


def test_row13_a_closed_stdout_is_one_error_line():
    proc = subprocess.run(["bash", "-c", f'"{EXE}" curves --ebn0 0:2:1 >&-'], capture_output=True, text=True,
                          timeout=60)
    assert proc.returncode == 1
    assert proc.stderr.startswith("Error: standard output is closed") and len(proc.stderr.splitlines()) == 1


# --------------------------------------------------------------------------- row 14: messages
def test_row14_a_bad_flag_is_not_blamed_on_the_profile(inputs):
    res = invoke("decode", inputs / "cap.sigmf-meta", "--link", inputs / "l.toml", "--shift", "0", "-q")
    line = assert_refused(res)
    assert "--shift" in line and "profile" not in line
    # the library says the same when the value comes from a caller's keyword
    with pytest.raises(iqdemod.LinkError) as info:
        iqdemod.load_link(inputs / "l.toml", sync_bits=8, sync_tolerance=9)
    assert str(info.value).startswith("--sync-bits, --sync-tolerance:")


def test_row14_a_bad_profile_value_names_the_profile(tmp_path):
    (tmp_path / "p.toml").write_text("[signal]\nbaud = 9600\nshift_hz = -5\n")
    with pytest.raises(iqdemod.LinkError, match=r"link profile .*p\.toml.*shift_hz -5"):
        iqdemod.load_link(tmp_path / "p.toml", offset=0)


def test_row14_a_huge_value_is_quoted_short(inputs):
    # a flag's value wrong on its own is a usage error (status 2, README "Exit status"), named by its flag
    res = invoke("decode", inputs / "cap.sigmf-meta", "--link", inputs / "l.toml", "--crc", "C" * 10_000_000, "-q")
    line = assert_refused(res, codes=(2,), contains="--crc")
    assert len(line) < 300 and "10000000 characters" in line
    res = invoke("decode", inputs / "cap.sigmf-meta", "--sync-bits", "9" * 10_000, "-q")
    assert len(assert_refused(res, codes=(2,))) < 300


# --------------------------------------------------------------------------- the library's own pieces
def test_file_set_undoes_every_rename_when_one_fails(tmp_path, monkeypatch):
    for name in ("a", "b"):
        (tmp_path / name).write_text(f"old {name}")
    _fail_rename_onto(monkeypatch, tmp_path / "c")
    with pytest.raises(OSError):
        with files.atomic_files() as fileset:
            for name in ("a", "b", "c"):
                fileset.open(tmp_path / name).write(f"new {name}")
    assert {p.name: p.read_text() for p in tmp_path.iterdir()} == {"a": "old a", "b": "old b"}


def test_an_unexpected_exception_is_one_line_and_debug_shows_it(inputs, monkeypatch):
    def boom(*a, **kw):
        raise ValueError("x" * 1000)

    monkeypatch.setattr(iqdemod, "decode", boom)
    res = invoke("decode", inputs / "cap.sigmf-meta", "--link", inputs / "l.toml", "-q")
    assert res.exit_code == 1 and res.stderr.startswith("Error: internal error (ValueError")
    assert len(res.stderr.splitlines()) == 1 and len(res.stderr) < 400
    res = invoke("--debug", "decode", inputs / "cap.sigmf-meta", "--link", inputs / "l.toml", "-q")
    assert isinstance(res.exception, ValueError)


def test_check_distinct_names_both_roles(tmp_path):
    (tmp_path / "in").write_text("x")
    with pytest.raises(OutputError, match="--frames .* is the capture"):
        files.check_distinct([("--frames", tmp_path / "sub" / ".." / "in")], [("capture", tmp_path / "in")])
    files.check_distinct([("a", "/dev/null"), ("b", "/dev/null")])  # two outputs to /dev/null: harmless
    with pytest.raises(OutputError, match="same file"):
        files.check_distinct([("a", tmp_path / "new"), ("b", tmp_path / "." / "new")])
