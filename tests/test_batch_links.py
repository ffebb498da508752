"""batch with several links: one read of each capture, a report row per capture and link.

The captures come from the tests' own modulator (tests/fsk_modulator.py): two fleets on two
channels of one recording, buoys (9600 Bd, h = 1) above the centre and tide gauges (2400 Bd,
h = 2) below it. Eb/N0 follows shared/REFERENCE.md §8; every payload's CRC is the catalogue's
CRC-16/IBM-3740, computed by the modulator with the standard library (binascii.crc_hqx), not by
the project's CRC engine. What is checked against the modulator's truth: each row's frame
counts, the payloads of each link's frames, and the carrier error each transmitter label carries.
"""

from __future__ import annotations

import collections
import dataclasses
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

import iqdemod
from iqdemod import batch as B
from iqdemod.batch import worker
from iqdemod.batch.report import settings_digest
from iqdemod_cli.main import main

import fsk_modulator as fm
from conftest import counting_capture_reads, read_csv, read_jsonl

RATE = 512_000
FRAME = '[frame]\nsync_word = "0x9B3C57E1"\nlength = 8\ncrc = "CRC-16/IBM-3740"\n'
BUOYS = dict(baud=9600, shift=9600, offset=100_000)
GAUGES = dict(baud=2400, shift=4800, offset=-120_000)
SIGNAL = "name = {name!r}\nbaud = {baud}\nshift_hz = {shift}\noffset_hz = {offset}\n"
N_CAPTURES = 4
# the buoys' carrier error moves between captures (two transmitters to the labels); the gauges' does not
BUOY_ERROR_HZ = (300.0, 300.0, -1500.0, -1500.0)
GAUGE_ERROR_HZ = 300.0


def _links() -> dict[str, iqdemod.Link]:
    common = dict(sync="0x9B3C57E1", length=8, crc="CRC-16/IBM-3740")
    return {"buoys": iqdemod.load_link(None, **common, **BUOYS), "gauges": iqdemod.load_link(None, **common, **GAUGES)}


def _write_capture(folder: Path, k: int) -> dict[str, list[str]]:
    """Capture k: 2 + k buoy frames and 3 gauge frames at 16 dB; the payloads of each link (the truth)."""
    rng = np.random.default_rng(100 + k)
    txs = []
    for i in range(2 + k):  # 15 ms each, 70 ms apart
        txs.append(fm.Tx(t_s=0.01 + 0.07 * i, payload=bytes(rng.integers(0, 256, 8, dtype=np.uint8)), ebn0_db=16.0,
                         offset_hz=BUOYS["offset"], baud=BUOYS["baud"], h=1.0,
                         carrier_error_hz=BUOY_ERROR_HZ[k] + rng.uniform(-20, 20), framing=dict(length="fixed")))
    for i in range(3):  # 60 ms each, 120 ms apart
        txs.append(fm.Tx(t_s=0.02 + 0.12 * i, payload=bytes(rng.integers(0, 256, 8, dtype=np.uint8)), ebn0_db=16.0,
                         offset_hz=GAUGES["offset"], baud=GAUGES["baud"], h=2.0,
                         carrier_error_hz=GAUGE_ERROR_HZ + rng.uniform(-20, 20), framing=dict(length="fixed")))
    x, truth = fm.render(txs, rate=RATE, n_samples=int(0.4 * RATE), noise_rms=0.05, seed=k)
    fm.write_sigmf(folder / f"night{k}", x, rate=RATE, datatype="ci16_le" if k % 2 else "cf32_le",
                   centre_hz=869.4e6, datetime=f"2026-05-0{k + 1}T06:00:00Z")
    payloads: dict[str, list[str]] = {"buoys": [], "gauges": []}
    for t in truth:
        payloads["buoys" if txs[t["tx"]].baud == BUOYS["baud"] else "gauges"].append(t["payload_hex"])
    return payloads


@pytest.fixture(scope="module")
def fleet(tmp_path_factory):
    """Four captures of both fleets, the two profiles, and each capture's truth by name."""
    root = tmp_path_factory.mktemp("links")
    (root / "arch").mkdir()
    truth = {f"night{k}.sigmf-meta": _write_capture(root / "arch", k) for k in range(N_CAPTURES)}
    (root / "buoys.toml").write_text(FRAME + "[signal]\n" + SIGNAL.format(name="buoys", **BUOYS))
    (root / "gauges.toml").write_text(FRAME + "[signal]\n" + SIGNAL.format(name="gauges", **GAUGES))
    return root, truth


@pytest.fixture(scope="module")
def counted_run(fleet, tmp_path_factory):
    """One batch of both links in this process, counting every open and every read of a capture."""
    root, _ = fleet
    out = tmp_path_factory.mktemp("run")
    with counting_capture_reads() as (opened, reads):
        result = B.run_batch([root / "arch"], _links(), report=out / "r.csv", frames=out / "f.jsonl", jobs=1)
    return result, out / "r.csv", out / "f.jsonl", opened, reads


def _frame_keys(records) -> collections.Counter:
    return collections.Counter((Path(r["capture"]).name, r.get("link"), r["sample"], r["payload_hex"], r["crc_ok"])
                               for r in records)


def test_each_capture_is_read_once_for_both_links(counted_run):
    result, _, _, opened, reads = counted_run
    names = [f"night{k}.sigmf-meta" for k in range(N_CAPTURES)]
    assert opened == collections.Counter(names)
    assert reads == collections.Counter(names)  # one pass of the reader over each capture
    assert result.n_captures == N_CAPTURES and len(result.rows) == 2 * N_CAPTURES


def test_a_row_per_capture_and_link_against_the_modulators_truth(fleet, counted_run):
    _, truth = fleet
    result, report, frames, _, _ = counted_run
    rows = read_csv(report)
    # collection order, then link order
    assert [(Path(r["capture"]).name, r["link_name"]) for r in rows] == [
        (f"night{k}.sigmf-meta", name) for k in range(N_CAPTURES) for name in ("buoys", "gauges")]
    assert [(r.capture, r.link_name) for r in result.rows] == [(r["capture"], r["link_name"]) for r in rows]
    records = read_jsonl(frames)
    for r in rows:
        want = truth[Path(r["capture"]).name][r["link_name"]]
        mine = [f for f in records if f["capture"] == r["capture"] and f["link"] == r["link_name"]]
        assert r["status"] == "ok" and int(r["frames"]) == int(r["frames_crc_ok"]) == len(want), r
        assert int(r["frame_records"]) == len(mine)
        assert sorted(f["payload_hex"] for f in mine if f["crc_ok"]) == sorted(want)
        assert {f["transmitter"] for f in mine} == {r["transmitter"]}
        # each row's digest is its own link's
        assert r["settings_digest"] == settings_digest(_links()[r["link_name"]], 1e-5)
    assert len({r["settings_digest"] for r in rows}) == 2
    assert result.n_frames_crc_ok == sum(len(v) for t in truth.values() for v in t.values())


def test_each_link_reads_as_it_does_alone(fleet, counted_run, tmp_path):
    """The joint pass gives each link's row what a batch of that link alone gives."""
    root, _ = fleet
    together = {(r.capture, r.link_name): r for r in counted_run[0].rows}
    alone = B.run_batch([root / "arch"], _links()["gauges"], report=tmp_path / "g.csv", jobs=1)
    for r in alone.rows:
        assert r.link_name == ""
        joint = together[(r.capture, "gauges")]
        assert (joint.frames, joint.frames_crc_ok, joint.bursts) == (r.frames, r.frames_crc_ok, r.bursts)
        # the shared FFT pass moves a figure by no more than its filter's ripple (tests/test_multilink.py)
        assert joint.ebn0_db == pytest.approx(r.ebn0_db, abs=0.05)
        assert joint.freq_error_hz == pytest.approx(r.freq_error_hz, abs=2.0)


def test_labels_are_told_apart_within_each_link(counted_run):
    rows = counted_run[0].rows
    label = {(Path(r.capture).name, r.link_name): r.transmitter for r in rows}
    buoys = [label[(f"night{k}.sigmf-meta", "buoys")] for k in range(N_CAPTURES)]
    gauges = {label[(f"night{k}.sigmf-meta", "gauges")] for k in range(N_CAPTURES)}
    # the buoys' two carrier errors (-1500 and +300 Hz in the modulator) are two transmitters, tx1 the lower
    assert buoys[0] == buoys[1] != buoys[2] == buoys[3]
    assert buoys[2].startswith("buoys: tx1 (") and buoys[0].startswith("buoys: tx2 (")

    def hz(text: str) -> float:  # "buoys: tx2 (+301 Hz)" -> 301.0
        return float(text.split("(")[1].split(" Hz")[0])

    assert hz(buoys[0]) == pytest.approx(300, abs=50) and hz(buoys[2]) == pytest.approx(-1500, abs=50)
    # the gauges share the buoys' first carrier error, and are still a transmitter of their own
    assert len(gauges) == 1
    (gauge,) = gauges
    assert gauge.startswith("gauges: tx1 (") and hz(gauge) == pytest.approx(GAUGE_ERROR_HZ, abs=50)
    assert not set(buoys) & gauges


def test_a_failed_capture_gives_an_error_row_per_link(fleet, tmp_path):
    root, _ = fleet
    (tmp_path / "in").mkdir()
    for suffix in ("sigmf-meta", "sigmf-data"):
        (tmp_path / "in" / f"night0.{suffix}").write_bytes((root / "arch" / f"night0.{suffix}").read_bytes())
    (tmp_path / "in" / "empty.sigmf-meta").write_bytes((root / "arch" / "night0.sigmf-meta").read_bytes())
    (tmp_path / "in" / "empty.sigmf-data").write_bytes(b"")
    res = B.run_batch([tmp_path / "in"], _links(), report=tmp_path / "r.csv", frames=tmp_path / "f.jsonl", jobs=1)
    assert [(Path(r.capture).name, r.link_name, r.status) for r in res.rows] == [
        ("empty.sigmf-meta", "buoys", "error"), ("empty.sigmf-meta", "gauges", "error"),
        ("night0.sigmf-meta", "buoys", "ok"), ("night0.sigmf-meta", "gauges", "ok")]
    bad = res.rows[:2]
    assert all("empty capture" in r.error and r.error.startswith("CaptureError: ") for r in bad)
    assert [r.settings_digest for r in bad] == [settings_digest(link, 1e-5) for link in _links().values()]
    assert all(r.frame_records == 0 and r.frames is None for r in bad)
    assert (res.n_ok, res.n_failed) == (2, 2)


def test_any_exception_of_a_capture_becomes_a_row_per_link(fleet, tmp_path, monkeypatch):
    root, _ = fleet

    def boom(*a, **k):
        raise ZeroDivisionError("division by zero in a stage")

    monkeypatch.setattr(iqdemod.health, "assess_links", boom)
    res = B.run_batch([root / "arch"], _links(), report=tmp_path / "r.csv", jobs=1)
    assert len(res.rows) == 2 * N_CAPTURES and res.n_failed == 2 * N_CAPTURES
    assert {r.error for r in res.rows} == {"ZeroDivisionError: division by zero in a stage"}
    assert [r.link_name for r in res.rows] == ["buoys", "gauges"] * N_CAPTURES


def test_resume_after_an_interrupted_run_with_two_links(fleet, counted_run, tmp_path, monkeypatch):
    root, _ = fleet
    _, report0, frames0, _, _ = counted_run
    report, frames = tmp_path / "r.csv", tmp_path / "f.jsonl"
    real = worker.process_capture
    done = []

    def stop_at_the_third(task):  # Ctrl-C while the third capture is being read
        if len(done) == 2:
            raise KeyboardInterrupt
        done.append(task.capture)
        return real(task)

    monkeypatch.setattr(B.executors, "process_capture", stop_at_the_third)
    with pytest.raises(KeyboardInterrupt):
        B.run_batch([root / "arch"], _links(), report=report, frames=frames, jobs=1)
    monkeypatch.undo()
    kept = B.read_report(B.partial_path(report))
    assert [(r.capture, r.link_name) for r in kept] == [(c, n) for c in done for n in ("buoys", "gauges")]
    assert not report.exists()
    res = B.run_batch([root / "arch"], _links(), report=report, frames=frames, resume=True, jobs=1)
    assert res.n_skipped == 2 and res.n_ok == 2 * N_CAPTURES
    _same_as(report0, frames0, report, frames)


def test_resume_redoes_a_capture_with_a_link_row_missing(fleet, counted_run, tmp_path):
    """A kill between a capture's two rows (a journal row each) leaves one link done: the capture is redone whole."""
    root, _ = fleet
    _, report0, frames0, _, _ = counted_run
    report, frames = tmp_path / "r.csv", tmp_path / "f.jsonl"
    lines = report0.read_text().splitlines(keepends=True)
    B.partial_path(report).write_text("".join(lines[:4]))  # the header, night0's two rows, night1's first
    first = {r["capture"] for r in read_csv(report0)[:3]}
    B.partial_path(frames).write_text("".join(line for line in frames0.read_text().splitlines(keepends=True)
                                              if json.loads(line)["capture"] in first))
    res = B.run_batch([root / "arch"], _links(), report=report, frames=frames, resume=True, jobs=1)
    assert res.n_skipped == 1  # night0 only: night1 had its buoys row but not its gauges row
    _same_as(report0, frames0, report, frames)
    # a changed link redoes every capture it applies to: with two links, that is every capture
    other = dict(_links(), gauges=dataclasses.replace(_links()["gauges"], frame=dataclasses.replace(
        _links()["gauges"].frame, sync_tolerance=2)))
    again = B.run_batch([root / "arch"], other, report=report, frames=frames, resume=True, jobs=1)
    assert again.n_skipped == 0 and len(again.rows) == 2 * N_CAPTURES
    # and unchanged, every capture is kept
    assert B.run_batch([root / "arch"], other, report=report, frames=frames, resume=True, jobs=1).n_skipped == 4


# the command line in a child, each capture made to take 0.3 s longer (a sleep before it is read) so that
# the kill lands in the middle of the run; SIGINT back to Ctrl-C's usual meaning, as in tests/test_batch.py
_SLOW_SCRIPT = ("import signal, sys, time; signal.signal(signal.SIGINT, signal.default_int_handler)\n"
                "from iqdemod.batch import executors, worker\n"
                "def slow(task):\n    time.sleep(0.3)\n    return worker.process_capture(task)\n"
                "executors.process_capture = slow\n"
                "from iqdemod_cli.main import main; sys.exit(main())\n")


def test_kill_and_resume_with_two_links(fleet, counted_run, tmp_path):
    root, _ = fleet
    _, report0, frames0, _, _ = counted_run
    arch = tmp_path / "arch"
    for copy in ("a", "b"):  # eight captures: each of the fleet's four twice
        (arch / copy).mkdir(parents=True)
        for f in (root / "arch").iterdir():
            (arch / copy / f.name).write_bytes(f.read_bytes())
    report, frames = tmp_path / "r.csv", tmp_path / "f.jsonl"
    links = ["--link", str(root / "buoys.toml"), "--link", str(root / "gauges.toml")]
    here = Path(__file__).resolve().parents[1]
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(filter(None, [str(here), os.environ.get("PYTHONPATH")]))}
    proc = subprocess.Popen([sys.executable, "-c", _SLOW_SCRIPT, "batch", str(arch), *links, "-o", str(report),
                             "--frames", str(frames), "-j", "1", "-q"], env=env, stderr=subprocess.PIPE, text=True)
    journal = B.partial_path(report)
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline and proc.poll() is None:
        if journal.exists() and journal.read_text().count("\n") >= 3:  # the header and a capture's two rows
            break
        time.sleep(0.01)
    assert proc.poll() is None, "the batch ended before it could be killed"
    proc.send_signal(signal.SIGKILL)
    proc.communicate(timeout=30)
    assert proc.returncode == -9 and not report.exists()
    kept = B.read_report(journal)
    whole = [c for c, n in collections.Counter(r.capture for r in kept).items() if n == 2]
    assert 1 <= len(whole) < 8 and all(r.ok for r in kept)
    res = CliRunner().invoke(main, ["batch", str(arch), *links, "-o", str(report), "--frames", str(frames),
                                    "--resume", "-j", "1", "-q"])
    assert res.exit_code == 0, res.output
    rows = read_csv(report)
    assert [(r["capture"], r["link_name"]) for r in rows] == [
        (str(arch / copy / f"night{k}.sigmf-meta"), name) for copy in ("a", "b") for k in range(N_CAPTURES)
        for name in ("buoys", "gauges")]
    # nothing lost, nothing twice: what one uninterrupted run of the fleet wrote, for each copy
    cols = ("link_name", "status", "frames", "frames_crc_ok", "settings_digest", "frame_records", "ebn0_db")
    ref = {(Path(r["capture"]).name, r["link_name"]): [r[c] for c in cols] for r in read_csv(report0)}
    assert [[r[c] for c in cols] for r in rows] == [ref[(Path(r["capture"]).name, r["link_name"])] for r in rows]
    want = _frame_keys(read_jsonl(frames0))
    assert _frame_keys(read_jsonl(frames)) == want + want
    assert not journal.exists() and not B.partial_path(frames).exists()


def _same_as(report0: Path, frames0: Path, report: Path, frames: Path) -> None:
    """The report and frames of a resumed run hold what one uninterrupted run wrote."""
    cols = ("capture", "link_name", "status", "frames", "frames_crc_ok", "transmitter", "settings_digest",
            "frame_records", "ebn0_db")
    assert [[r[c] for c in cols] for r in read_csv(report)] == [[r[c] for c in cols] for r in read_csv(report0)]
    assert _frame_keys(read_jsonl(frames)) == _frame_keys(read_jsonl(frames0))
    labels = {(r["capture"], r["link_name"]): r["transmitter"] for r in read_csv(report)}
    records = read_jsonl(frames)
    assert records and all(f["transmitter"] == labels[(f["capture"], f["link"])] for f in records)
    assert not B.partial_path(report).exists() and not B.partial_path(frames).exists()


def test_command_line_with_two_profiles(fleet, tmp_path):
    root, truth = fleet
    report, frames, png = tmp_path / "r.csv", tmp_path / "f.jsonl", tmp_path / "trend.png"
    res = CliRunner().invoke(main, ["batch", str(root / "arch"), "--link", str(root / "buoys.toml"), "--link",
                                    str(root / "gauges.toml"), "-o", str(report), "--frames", str(frames),
                                    "--plot", str(png), "-j", "2"])
    assert res.exit_code == 0, res.output
    rows = read_csv(report)
    assert [r["link_name"] for r in rows] == ["buoys", "gauges"] * N_CAPTURES
    # each row names the profile its link came from
    assert {(r["link_name"], r["link"]) for r in rows} == {("buoys", str(root / "buoys.toml")),
                                                           ("gauges", str(root / "gauges.toml"))}
    records = read_jsonl(frames)
    got = {(Path(f["capture"]).name, f["link"], f["payload_hex"]) for f in records if f["crc_ok"]}
    assert got == {(c, name, p) for c, t in truth.items() for name, ps in t.items() for p in ps}
    assert all(f["transmitter"].startswith(f["link"] + ": tx") for f in records)
    assert f"{N_CAPTURES} capture(s) ({2 * N_CAPTURES} rows: one per link): {2 * N_CAPTURES} ok, 0 failed" in res.output
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # the PNG file signature (PNG spec §5.2, from memory)
    # resumed, nothing is redone
    res = CliRunner().invoke(main, ["batch", str(root / "arch"), "--link", str(root / "buoys.toml"), "--link",
                                    str(root / "gauges.toml"), "-o", str(report), "--frames", str(frames),
                                    "--resume", "-j", "1"])
    assert res.exit_code == 0 and f"({N_CAPTURES} done before)" in res.output
    assert _frame_keys(read_jsonl(frames)) == _frame_keys(records)


def test_a_folder_profile_with_two_signals(fleet, tmp_path):
    root, truth = fleet
    site = tmp_path / "harbour"
    site.mkdir()
    for name in ("night0", "night1"):
        for suffix in ("sigmf-meta", "sigmf-data"):
            (site / f"{name}.{suffix}").write_bytes((root / "arch" / f"{name}.{suffix}").read_bytes())
    (site / "link.toml").write_text(FRAME + "[[signal]]\n" + SIGNAL.format(name="buoys", **BUOYS)
                                    + "[[signal]]\n" + SIGNAL.format(name="gauges", **GAUGES))
    res = CliRunner().invoke(main, ["batch", str(tmp_path), "-o", str(tmp_path / "r.csv"), "-j", "1", "-q"])
    assert res.exit_code == 0, res.output
    rows = read_csv(tmp_path / "r.csv")
    assert [(Path(r["capture"]).name, r["link_name"], r["transmitter"]) for r in rows] == [
        (f"{c}.sigmf-meta", name, f"{name}: harbour") for c in ("night0", "night1") for name in ("buoys", "gauges")]
    assert all(r["link"] == str(site / "link.toml") for r in rows)
    for r in rows:
        assert int(r["frames_crc_ok"]) == len(truth[Path(r["capture"]).name][r["link_name"]])
