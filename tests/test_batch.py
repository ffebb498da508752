"""The batch command: collection, the report contract, resume, kill-and-resume, a Dask cluster, the plot."""

from __future__ import annotations

import collections
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from click.testing import CliRunner

from iqdemod import batch as B
from iqdemod.batch import executors
from iqdemod.errors import IqdemodError, LinkError
from iqdemod.profile import link_to_toml
from iqdemod.synth import SynthConfig, synthesize
from iqdemod_cli.main import main
import iqdemod_cli.batch_cmd  # noqa: F401  (registers the command until cli/main.py imports it)

from conftest import make_link, read_csv, read_jsonl

LINK_FLAGS = ["--rate", "1024000", "--offset", "137000", "--baud", "9600", "--shift", "9600",
              "--sync", "0x9B3C57E1", "--length", "24", "--crc", "CRC-16/IBM-3740"]
ROOT = Path(__file__).resolve().parents[1]


def frame_keys(records) -> collections.Counter:
    return collections.Counter((r["capture"], r["sample"], r["payload_hex"], r["crc_ok"]) for r in records)


# --------------------------------------------------------------------------- collection
@pytest.fixture()
def tree(tmp_path):
    """Empty files with capture-like names (collection never opens them)."""
    names = ["a/x.sigmf-meta", "a/x.sigmf-data", "a/x.truth.json", "a/lone.sigmf-data", "a/meta_only.sigmf-meta",
             "b/y.cu8", "b/z.wav", "b/w.FLAC", "b/notes.txt", "b/.hidden.cu8", "b/up.CF32_LE", ".hid/v.cu8",
             "b/deep/er/t.ci16_le", "b/report.csv", "b/frames.jsonl", "b/s.wave",
             # other programs' own naming conventions, not SigMF datatype names: never collected
             "b/o.cs8", "b/o.cs16", "b/o.cfile", "b/o.cf32", "b/o.ci16"]
    for n in names:
        (tmp_path / n).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / n).write_bytes(b"")
    return tmp_path


def test_collect_folder_pairs_once_and_skips_the_rest(tree):
    got = [p.relative_to(tree).as_posix() for p in B.collect_captures([tree])]
    assert got == ["a/lone.sigmf-data", "a/meta_only.sigmf-meta", "a/x.sigmf-meta", "b/deep/er/t.ci16_le",
                   "b/s.wave", "b/up.CF32_LE", "b/w.FLAC", "b/y.cu8", "b/z.wav"]


def test_collect_a_pair_counts_once_whichever_file_is_named(tree):
    for args in (["a/x.sigmf-data"], ["a/x.sigmf-meta"], ["a/x.sigmf-data", "a/x.sigmf-meta", "a"]):
        got = B.collect_captures([tree / a for a in args])
        assert sum(p.name.startswith("x.") for p in got) == 1
        assert tree / "a/x.sigmf-meta" in got


def test_collect_globs_and_stable_order(tree):
    got = B.collect_captures([str(tree / "*" / "x.sigmf-*")])
    assert got == [tree / "a/x.sigmf-meta"]
    got = [p.name for p in B.collect_captures([str(tree / "b" / "**" / "*.c*")])]
    assert got == ["t.ci16_le", "y.cu8"]  # sorted by path; hidden ones skipped (the pattern is case-sensitive)
    one = B.collect_captures([tree / "b", tree / "a"])
    two = B.collect_captures([tree / "a", str(tree / "b/*"), tree / "b"])
    assert one == two == sorted(one, key=str)
    # the shell's expansion of archive/* hands over truth files and the like: they are skipped
    assert B.collect_captures(sorted(tree.glob("a/*"))) == B.collect_captures([tree / "a"])


def test_collect_says_what_is_missing(tree):
    with pytest.raises(IqdemodError, match="no such file or folder"):
        B.collect_captures([tree / "nope"])
    with pytest.raises(IqdemodError, match="no file matches"):
        B.collect_captures([str(tree / "*.nothing")])
    assert B.collect_captures([tree / "b/notes.txt"]) == []


def test_label_transmitters_by_carrier_error():
    def row(f, spread=20.0, **kw):
        return B.CaptureRow(capture="c", path=f"/p{f}", status="ok", freq_error_hz=f, freq_spread_hz=spread, **kw)

    rows = [row(120), row(2990), row(100), row(950), row(3010), row(900),
            B.CaptureRow(capture="e", path="/e", status="error"),
            row(50, link="/x/link.toml", transmitter="buoyA")]
    labels = B.label_transmitters(rows)
    assert labels[0] == labels[2] != labels[3] == labels[5] != labels[1] == labels[4]
    assert labels[0].startswith("tx1") and labels[3].startswith("tx2") and labels[1].startswith("tx3")
    assert labels[6] == "" and labels[7] == "buoyA"
    # a transmitter whose carrier wanders more between bursts is given a wider tolerance
    wide = B.label_transmitters([row(100, spread=200.0), row(600, spread=200.0)])
    assert wide[0] == wide[1]


def test_row_csv_round_trip():
    r = B.CaptureRow(capture="a b,c", path="/x", status="ok", warnings=("cut final sample: 1 byte", "two"),
                     ebn0_db=12.5, frames=4, start_time=None, mtime_ns=1234567890123456789, error="")
    back = B.CaptureRow.from_csv(dict(zip(B.COLUMNS, r.to_csv())))
    assert back == r


# --------------------------------------------------------------------------- the acceptance archive
@pytest.fixture(scope="module")
def archive(tmp_path_factory) -> Path:
    """Two folders, 10 SigMF recordings (cu8 and ci16_le, 4 frames, ~0.25 s each), three of them damaged."""
    root = tmp_path_factory.mktemp("acceptance")
    for k in range(10):
        dt, folder = ("cu8", "site_a") if k < 5 else ("ci16_le", "site_b")
        cfg = SynthConfig(link=make_link(datatype=dt), ebn0_db=(12.0 + k,), n_frames=4, seed=k + 1,
                          freq_error_hz=300.0 if k % 2 else 2500.0, start_time=f"2026-01-0{1 + k // 5}T0{k}:00:00Z")
        synthesize(root / folder / f"rec{k:02d}", cfg)
    data = root / "site_a/rec01.sigmf-data"
    data.write_bytes(data.read_bytes()[:-1])  # a cut final sample
    (root / "site_a/rec02.sigmf-meta").write_text('{"global": {"core:datatype": "cu8",')  # broken metadata
    (root / "site_b/rec07.sigmf-data").write_bytes(b"")  # empty
    return root


CUT, BROKEN, EMPTY = "site_a/rec01", "site_a/rec02", "site_b/rec07"


@pytest.fixture(scope="module")
def local_run(archive, tmp_path_factory):
    out = tmp_path_factory.mktemp("local")
    report, frames = out / "report.csv", out / "frames.jsonl"
    res = CliRunner().invoke(main, ["batch", str(archive), *LINK_FLAGS, "-o", str(report), "--frames", str(frames),
                                    "--jobs", "2"])
    return res, report, frames


def test_acceptance_report(local_run, archive):
    res, report, frames = local_run
    assert res.exit_code == 1, res.output
    rows = read_csv(report)
    assert len(rows) == 10
    by = {Path(r["capture"]).relative_to(archive).as_posix().split(".")[0]: r for r in rows}
    assert by[CUT]["status"] == "ok" and "cut final sample" in by[CUT]["warnings"]
    assert by[BROKEN]["status"] == "error" and "broken SigMF metadata" in by[BROKEN]["error"]
    assert by[BROKEN]["error"].startswith("CaptureError: ")
    assert by[EMPTY]["status"] == "error" and "empty capture" in by[EMPTY]["error"]
    good = [r for k, r in by.items() if k not in (BROKEN, EMPTY)]
    assert all(r["status"] == "ok" and r["error"] == "" for r in good)
    assert all(int(r["frames"]) == 4 and int(r["frames_crc_ok"]) == 4 for r in good)
    assert all(r["start_time"].startswith("2026-01-0") and "(mtime)" not in r["start_time"] for r in good)
    assert by[BROKEN]["start_time"].endswith("(mtime)")
    for col in ("duration_s", "ebn0_db", "ebn0_db_low", "ebn0_db_high", "fer_predicted", "fer_observed",
                "freq_error_hz", "clock_error_ppm", "clock_error_ppm_low", "clock_error_ppm_high", "clipped_fraction",
                "dc_dbfs", "level_dbfs", "frequency_hz", "margin_db", "size_bytes", "mtime_ns", "settings_digest"):
        assert all(r[col] != "" for r in good), col
    assert all(float(r["clock_error_ppm_low"]) <= float(r["clock_error_ppm"]) <= float(r["clock_error_ppm_high"])
               for r in good)
    tx = {int(Path(r["capture"]).name[3:5]): r["transmitter"] for r in good}  # odd: +300 Hz, even: +2500 Hz
    def label_hz(label: str) -> float:  # "tx2 (+2499 Hz)" -> 2499.0
        return float(label.split("(")[1].split(" Hz")[0])

    assert {v for k, v in tx.items() if k % 2} == {tx[1]} and tx[1].startswith("tx1 (")
    assert {v for k, v in tx.items() if not k % 2} == {tx[0]} and tx[0].startswith("tx2 (")
    # each label carries its transmitter's measured carrier error (the generator's +300 and +2500 Hz)
    assert label_hz(tx[1]) == pytest.approx(300, abs=50) and label_hz(tx[0]) == pytest.approx(2500, abs=50)
    recs = read_jsonl(frames)
    assert len(recs) == sum(int(r["frame_records"]) for r in rows) == 32
    assert {r["capture"] for r in recs} == {r["capture"] for r in good}
    # the closing summary: counts, the five weakest, the failures; no journal left behind
    assert "8 ok, 2 failed" in res.output and "weakest 5 by margin" in res.output
    assert not B.partial_path(report).exists() and not B.partial_path(frames).exists()
    assert [p.name for p in report.parent.iterdir() if p.name.startswith(".")] == []


def test_the_frames_file_follows_the_report_order_whatever_order_captures_finish(local_run, archive, tmp_path,
                                                                                 monkeypatch):
    """Jobs finish in an order that depends on timing; the frames file is the same every time: capture
    by capture in the report's (collection) order, each capture's frames as it found them."""
    _, report, frames = local_run
    want = [r["capture"] for r in read_csv(report) if int(r["frame_records"])]
    recs = read_jsonl(frames)
    assert list(dict.fromkeys(r["capture"] for r in recs)) == want
    start = executors.start

    def backwards(todo, **kw):  # every capture done, then handed over last first
        source = start(todo, **kw)
        done = list(source)

        class Reversed:
            def __iter__(self):
                return iter(done[::-1])

            def close(self, *, interrupted):
                source.close(interrupted=interrupted)
        return Reversed()

    monkeypatch.setattr(executors, "start", backwards)
    again = tmp_path / "frames.jsonl"
    res = CliRunner().invoke(main, ["batch", str(archive), *LINK_FLAGS, "-o", str(tmp_path / "r.csv"),
                                    "--frames", str(again), "--jobs", "1"])
    assert res.exit_code == 1, res.output  # two damaged captures, as in the acceptance run
    assert [(r["capture"], r["sample"], r["payload_hex"]) for r in read_jsonl(again)] == [
        (r["capture"], r["sample"], r["payload_hex"]) for r in recs]


def test_resume_keeps_ten_rows_and_retries_only_errors(local_run, archive, tmp_path):
    _, report0, frames0 = local_run
    report, frames = tmp_path / "r.csv", tmp_path / "f.jsonl"
    report.write_bytes(report0.read_bytes())
    frames.write_bytes(frames0.read_bytes())
    res = CliRunner().invoke(main, ["batch", str(archive), *LINK_FLAGS, "-o", str(report), "--frames", str(frames),
                                    "--resume", "-q", "--jobs", "1"])
    assert res.exit_code == 1
    rows = read_csv(report)
    assert len(rows) == 10 and len({r["path"] for r in rows}) == 10
    assert [r["status"] for r in rows] == [r["status"] for r in read_csv(report0)]
    assert frame_keys(read_jsonl(frames)) == frame_keys(read_jsonl(frames0))
    link = make_link()
    again = B.run_batch([archive], link, report=report, frames=frames, resume=True, jobs=1)
    assert again.n_skipped == 8 and len(again.rows) == 10  # the two error rows were tried again
    # a capture that changed is redone; so is everything when the link changes
    meta = archive / "site_b/rec09.sigmf-meta"
    os.utime(meta, ns=(meta.stat().st_atime_ns, meta.stat().st_mtime_ns + 1_000_000_000))
    assert B.run_batch([archive], link, report=report, frames=frames, resume=True, jobs=1).n_skipped == 7
    other = B.run_batch([archive], link, report=report, frames=frames, resume=True, jobs=1, target_ber=1e-4)
    assert other.n_skipped == 0 and len(read_csv(report)) == 10
    assert frame_keys(read_jsonl(frames)) == frame_keys(read_jsonl(frames0))


def test_resume_from_a_torn_journal(local_run, archive, tmp_path):
    _, report0, frames0 = local_run
    report, frames = tmp_path / "r.csv", tmp_path / "f.jsonl"
    lines = report0.read_text().splitlines(keepends=True)
    # header, rec00 (ok), rec01 (ok), rec02 (error), and half of rec03: a kill in mid-write
    B.partial_path(report).write_text("".join(lines[:4]) + lines[4][: len(lines[4]) // 2])
    done = {r["capture"] for r in read_csv(report0)[:2]}
    recs = [line for line in frames0.read_text().splitlines(keepends=True) if json.loads(line)["capture"] in done]
    B.partial_path(frames).write_text("".join(recs) + recs[0][:20])
    res = B.run_batch([archive], make_link(), report=report, frames=frames, resume=True, jobs=1)
    assert res.n_skipped == 2 and len(read_csv(report)) == 10
    assert frame_keys(read_jsonl(frames)) == frame_keys(read_jsonl(frames0))


def test_cluster_and_jobs_exclude_each_other(archive, tmp_path):
    res = CliRunner().invoke(main, ["batch", str(archive), *LINK_FLAGS, "-o", str(tmp_path / "r.csv"),
                                    "--jobs", "2", "--cluster", "tcp://127.0.0.1:1"])
    assert res.exit_code == 2


def test_optional_extras_say_how_to_install(archive, tmp_path, monkeypatch):
    monkeypatch.setitem(sys.modules, "distributed", None)
    with pytest.raises(IqdemodError, match=r"pip install 'iqdemod\[cluster\]'"):
        B.run_batch([archive], make_link(), report=tmp_path / "r.csv", cluster="tcp://127.0.0.1:1")
    for name in ("matplotlib", "matplotlib.figure", "matplotlib.backends.backend_agg"):
        monkeypatch.setitem(sys.modules, name, None)
    with pytest.raises(IqdemodError, match=r"pip install 'iqdemod\[plot\]'"):
        B.plot_trend([], tmp_path / "t.png")
    assert not (tmp_path / "r.csv").exists()  # checked before any work


def test_any_exception_becomes_a_row(archive, tmp_path, monkeypatch):
    import iqdemod.health

    def boom(*a, **k):
        raise ZeroDivisionError("division by zero in a stage")

    monkeypatch.setattr(iqdemod.health, "assess_with_frames", boom)
    res = B.run_batch([archive / "site_b"], make_link(), report=tmp_path / "r.csv", jobs=1)
    assert res.n_failed == 5 and res.n_ok == 0
    assert {r.error for r in res.rows} == {"ZeroDivisionError: division by zero in a stage"}


# --------------------------------------------------------------------------- folder profiles and the plot
@pytest.fixture(scope="module")
def profiled(tmp_path_factory) -> Path:
    """Two transmitters, each in its own folder with its own link.toml (different offsets)."""
    root = tmp_path_factory.mktemp("profiled")
    for name, offset in (("north", 137_000), ("south", -150_000)):
        link = make_link(offset=offset, datatype="cu8")
        (root / name).mkdir()
        (root / name / "link.toml").write_text(link_to_toml(link))
        for k in range(3):
            synthesize(root / name / "day" / f"{name}{k}", SynthConfig(
                link=link, ebn0_db=(11.0 + 3 * k + (offset < 0),), n_frames=4, seed=7 + k,
                start_time=f"2026-03-0{k + 1}T12:00:00Z"))
    return root


def test_folder_profiles_label_transmitters_and_plot(profiled, tmp_path):
    report, png = tmp_path / "r.csv", tmp_path / "trend.png"
    # no --link: every capture finds the link.toml of its folder
    res = CliRunner().invoke(main, ["batch", str(profiled), "-o", str(report), "--plot", str(png), "-j", "1"])
    assert res.exit_code == 0, res.output
    rows = read_csv(report)
    assert [r["transmitter"] for r in rows] == ["north"] * 3 + ["south"] * 3
    assert all(r["status"] == "ok" and int(r["frames_crc_ok"]) == 4 for r in rows)
    assert rows[0]["link"].endswith("north/link.toml")
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["r.csv", "trend.png"]
    # the plot can also be drawn from a report afterwards
    B.plot_trend(report, tmp_path / "again.png")
    assert (tmp_path / "again.png").stat().st_size > 10_000


def test_raw_and_audio_captures(archive, tmp_path):
    import numpy as np
    import soundfile as sf

    src = archive / "site_a/rec00.sigmf-data"  # cu8
    (tmp_path / "in").mkdir()
    (tmp_path / "in/raw.cu8").write_bytes(src.read_bytes())
    iq = (np.frombuffer(src.read_bytes(), np.uint8).astype(np.float32) - 127.5) / 127.5
    sf.write(tmp_path / "in/audio.wav", iq.reshape(-1, 2), 1_024_000, subtype="PCM_16")
    with_rate = B.run_batch([tmp_path / "in"], make_link(datatype="cu8"), report=tmp_path / "a.csv", jobs=1)
    assert [(Path(r.capture).name, r.status, r.frames_crc_ok) for r in with_rate.rows] == [
        ("audio.wav", "ok", 4), ("raw.cu8", "ok", 4)]
    # a raw file named by its SigMF datatype needs none from the link; a neutral name does, and
    # without it its row says so
    named = B.run_batch([tmp_path / "in"], make_link(), report=tmp_path / "b.csv", jobs=1)
    assert [(Path(r.capture).name, r.status, r.frames_crc_ok) for r in named.rows] == [
        ("audio.wav", "ok", 4), ("raw.cu8", "ok", 4)]
    (tmp_path / "in2").mkdir()
    (tmp_path / "in2/raw.iq").write_bytes(src.read_bytes())
    without = B.run_batch([tmp_path / "in2"], make_link(), report=tmp_path / "c.csv", jobs=1)
    assert without.rows[0].status == "error" and "give its datatype" in without.rows[0].error


def test_no_link_anywhere_is_an_error(archive, tmp_path):
    with pytest.raises(LinkError, match="no link"):
        B.run_batch([archive], None, report=tmp_path / "r.csv")
    res = CliRunner().invoke(main, ["batch", str(archive), "-o", str(tmp_path / "r.csv")])
    assert res.exit_code == 1 and "Error: no link" in res.output


# --------------------------------------------------------------------------- kill and resume
@pytest.fixture(scope="module")
def long_archive(tmp_path_factory):
    """8 captures of ~0.6 s: long enough to be killed in the middle; with a reference run."""
    root = tmp_path_factory.mktemp("long")
    link = make_link(datatype="cu8")
    for k in range(8):
        synthesize(root / "arch" / f"k{k:02d}", SynthConfig(link=link, ebn0_db=(9.0 + k % 4,), n_frames=12, seed=k,
                                                             start_time=f"2026-02-01T00:{k:02d}:00Z"))
    ref = B.run_batch([root / "arch"], make_link(), report=root / "ref.csv", frames=root / "ref.jsonl", jobs=2)
    assert ref.n_ok == 8
    return root


# (SIGINT is set back to Ctrl-C's usual meaning: a shell may have started this test run with it ignored)
_SCRIPT = ("import signal, sys; signal.signal(signal.SIGINT, signal.default_int_handler); "
           "from iqdemod_cli.main import main; import iqdemod_cli.batch_cmd; sys.exit(main())")


@pytest.mark.parametrize("sig", [signal.SIGKILL, signal.SIGTERM, signal.SIGINT], ids=["KILL", "TERM", "INT"])
def test_kill_and_resume_loses_and_duplicates_nothing(long_archive, tmp_path, sig):
    report, frames = tmp_path / "r.csv", tmp_path / "f.jsonl"
    # an old report (of a capture since deleted) that must survive until the new one is complete
    old = ",".join(B.COLUMNS) + "\n" + ",".join(B.CaptureRow(capture="gone", path="/gone", status="ok").to_csv()) + "\n"
    report.write_text(old)
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(filter(None, [str(ROOT), os.environ.get("PYTHONPATH")]))}
    cmd = [sys.executable, "-c", _SCRIPT, "batch", str(long_archive / "arch"), *LINK_FLAGS, "-o", str(report),
           "--frames", str(frames), "--jobs", "2", "-q"]
    proc = subprocess.Popen(cmd, env=env, stderr=subprocess.PIPE, text=True)
    journal = B.partial_path(report)
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline and proc.poll() is None:
        if journal.exists() and journal.read_text().count("\n") >= 3:  # header and two rows
            break
        time.sleep(0.01)
    assert proc.poll() is None, "the batch ended before it could be interrupted"
    proc.send_signal(sig)
    _, err = proc.communicate(timeout=30)
    assert proc.returncode == {signal.SIGKILL: -9, signal.SIGTERM: 143, signal.SIGINT: 130}[sig], err
    if sig != signal.SIGKILL:
        assert "--resume" in err and "Traceback" not in err
    assert report.read_text() == old
    kept = B.read_report(journal)
    assert 2 <= len(kept) < 8 and all(r.ok for r in kept)
    assert len({r.path for r in kept}) == len(kept)
    res = B.run_batch([long_archive / "arch"], make_link(), report=report, frames=frames, resume=True, jobs=2)
    assert res.n_skipped == len(kept) and res.n_ok == 8
    rows = read_csv(report)
    assert len(rows) == 8 and len({r["path"] for r in rows}) == 8
    assert frame_keys(read_jsonl(frames)) == frame_keys(read_jsonl(long_archive / "ref.jsonl"))
    assert not journal.exists() and not B.partial_path(frames).exists()


def test_spawned_workers_give_the_same_rows(local_run, archive, tmp_path, monkeypatch):
    # fork is used only while this process has no other thread; the fallback must agree
    import multiprocessing

    monkeypatch.setattr(executors, "_pool_context", lambda: multiprocessing.get_context("spawn"))
    res = B.run_batch([archive / "site_b"], make_link(), report=tmp_path / "r.csv", jobs=2)
    local = {r["capture"]: r for r in read_csv(local_run[1])}
    assert [(r.status, r.frames, r.warnings) for r in res.rows] == [
        (local[r.capture]["status"], int(local[r.capture]["frames"]) if local[r.capture]["frames"] else None,
         tuple(w for w in local[r.capture]["warnings"].split("; ") if w)) for r in res.rows]


# --------------------------------------------------------------------------- a Dask cluster (last: its
# client leaves an idle thread behind, after which the pool spawns its workers instead of forking)
def test_cluster_gives_the_same_report(local_run, archive, tmp_path):
    distributed = pytest.importorskip("distributed")
    _, report0, frames0 = local_run
    report, frames = tmp_path / "c.csv", tmp_path / "c.jsonl"
    with distributed.LocalCluster(n_workers=2, processes=True, threads_per_worker=1, host="127.0.0.1",
                                  dashboard_address=None) as cluster:
        res = CliRunner().invoke(main, ["batch", str(archive), *LINK_FLAGS, "-o", str(report), "--frames",
                                        str(frames), "--cluster", cluster.scheduler_address, "-q"])
    assert res.exit_code == 1, res.output
    local, remote = read_csv(report0), read_csv(report)
    for col in ("capture", "status", "bursts", "frames", "frames_crc_ok", "warnings"):
        assert [r[col] for r in remote] == [r[col] for r in local], col
    assert frame_keys(read_jsonl(frames)) == frame_keys(read_jsonl(frames0))


def test_installed_script(archive, tmp_path):
    import shutil

    exe = shutil.which("iqdemod")
    if exe is None:
        pytest.skip("the iqdemod script is not installed")
    probe = subprocess.run([exe, "batch", "--help"], capture_output=True, text=True)
    if "No such command" in probe.stderr:
        pytest.skip("cli/main.py does not import batch_cmd yet")
    report = tmp_path / "r.csv"
    res = subprocess.run([exe, "batch", str(archive / "site_b"), *LINK_FLAGS, "-o", str(report), "-q"],
                         capture_output=True, text=True)
    assert res.returncode == 1 and len(read_csv(report)) == 5, res.stderr
