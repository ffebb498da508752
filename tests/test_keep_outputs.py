"""Stopping a decode keeps the frames it found; synth never replaces a capture unless asked.

The decoder runs as a process of its own (``python -m iqdemod_cli.main decode …``) and is stopped
by real signals sent to it, as an operator's Ctrl-C or a service manager's SIGTERM would stop it;
the signal goes out once its first frames are on disk (polled, no fixed waits). The captures come
from the tests' independent modulator (tests/fsk_modulator.py). What a stopped run keeps is
checked against what one uninterrupted run of the same capture writes: every line one whole JSON
text ended by a newline (JSON Lines, jsonlines.org; parsed by the standard library's json), and
the frames the first ones of the uninterrupted run, in the same order.
"""

from __future__ import annotations

import hashlib
import json
import os
import re
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

import fsk_modulator as fm
import iqdemod
import iqdemod.synth
from iqdemod.errors import OutputError
from iqdemod_cli._signals import Terminated, stops_gated
from iqdemod_cli.main import main

RATE = 153_600  # 16 samples a symbol at 9600 baud: a small file that still takes the decoder seconds
LINK = ["--offset", "30000", "--baud", "9600", "--shift", "9600", "--sync", "0x9B3C57E1", "--length", "24",
        "--crc", "CRC-16/IBM-3740"]
RAW = ["--datatype", "cu8", "--rate", str(RATE)]
FRAMES_BEFORE_STOP = 3
EXIT = {signal.SIGINT: 130, signal.SIGTERM: 143, signal.SIGHUP: 129}  # 128 + N (POSIX shell convention)


def _render(folder: Path, name: str, n_frames: int, seed: int) -> tuple[Path, list[str]]:
    """A cu8 SigMF pair of `n_frames` buoy frames 3–8 ms apart at 16 dB; (meta path, payloads sent)."""
    rng = np.random.default_rng(seed)
    txs, t = [], 0.005
    for _ in range(n_frames):
        txs.append(fm.Tx(t_s=t, payload=rng.integers(0, 256, 24, dtype=np.uint8).tobytes(), ebn0_db=16.0,
                         offset_hz=30_000.0))
        t += (32 + 32 + 8 * 26) / 9600 + rng.uniform(0.003, 0.008)
    x, truth = fm.render(txs, rate=RATE, n_samples=int((t + 0.05) * RATE), noise_rms=0.05, seed=seed)
    return fm.write_sigmf(folder / name, x, rate=RATE, datatype="cu8"), [f["payload_hex"] for f in truth]


def _ctrl_c_as_usual() -> None:
    # a shell may have started the test run with SIGINT ignored, which a child would inherit
    signal.signal(signal.SIGINT, signal.SIG_DFL)


def _start(*args, stdin=subprocess.DEVNULL) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-m", "iqdemod_cli.main", "decode", *map(str, args)], stdin=stdin,
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True,
                            preexec_fn=_ctrl_c_as_usual)


def _records(path: Path) -> list[dict]:
    """The frames of a JSON Lines file, checking that every line is whole."""
    text = path.read_text(encoding="utf-8")
    assert text == "" or text.endswith("\n"), f"torn last line: {text[-80:]!r}"
    return [json.loads(line) for line in text.splitlines()]


def _partial(folder: Path, output: Path) -> list[Path]:
    """The output's temporary files (files.py: .NAME.XXXX.part beside it)."""
    return list(folder.glob(f".{output.name}.*"))


def _stop_after_frames(proc: subprocess.Popen, folder: Path, output: Path, sig: int, *, of: str | None = None,
                       n: int = FRAMES_BEFORE_STOP) -> str:
    """Send `sig` once `n` frames (of the capture named `of`, if given) are in the output; its stderr."""
    deadline = time.monotonic() + 60
    while True:
        assert proc.poll() is None, f"the decode ended before it could be stopped: {proc.stderr.read()}"
        assert time.monotonic() < deadline, "no frames appeared"
        lines = [line for part in _partial(folder, output)
                 for line in part.read_text(encoding="utf-8").split("\n")[:-1]]  # whole lines only
        if sum(of is None or json.loads(line)["capture"].endswith(of) for line in lines) >= n:
            break
        time.sleep(0.01)
    proc.send_signal(sig)
    _, err = proc.communicate(timeout=60)
    assert "Traceback" not in err, err
    return err


@pytest.fixture(scope="module")
def captures(tmp_path_factory):
    """A long capture (1000 frames, about 27 s) and a short one (12 frames), each with what one uninterrupted
    decode writes, checked against the modulator's payloads."""
    folder = tmp_path_factory.mktemp("keep")
    out = {}
    for name, n, seed in (("long", 1000, 41), ("short", 12, 42)):
        meta, sent = _render(folder, name, n, seed)
        ref = folder / f"{name}.reference.jsonl"
        subprocess.run([sys.executable, "-m", "iqdemod_cli.main", "decode", str(meta), *LINK, "-o", str(ref), "-q"],
                       check=True, timeout=120)
        records = _records(ref)
        assert [r["payload_hex"] for r in records if r["crc_ok"]] == sent  # the modulator's truth, in order
        out[name] = (meta, records)
    return out


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM], ids=["INT", "TERM"])
def test_a_stopped_decode_keeps_every_frame_found_before_the_stop(captures, tmp_path, sig):
    meta, reference = captures["long"]
    output = tmp_path / "keep.jsonl"
    output.write_text("an older run\n")
    proc = _start(meta, *LINK, "-o", output, "-q")
    err = _stop_after_frames(proc, tmp_path, output, sig)
    assert proc.returncode == EXIT[sig], err
    kept = _records(output)
    assert FRAMES_BEFORE_STOP <= len(kept) < len(reference)
    assert kept == reference[: len(kept)]
    word = "interrupted" if sig == signal.SIGINT else "terminated"
    assert err.strip() == (f"{word} ({signal.Signals(sig).name}): {len(kept)} frame(s) found before the stop "
                           f"kept in {output}")
    assert not _partial(tmp_path, output)


def test_several_captures_keep_the_finished_and_the_stopped_one_and_start_no_other(captures, tmp_path):
    (short, short_ref), (long, long_ref) = captures["short"], captures["long"]
    output = tmp_path / "keep.jsonl"
    proc = _start(short, long, short, *LINK, "-o", output, "-q")
    err = _stop_after_frames(proc, tmp_path, output, signal.SIGINT, of="long.sigmf-meta")
    assert proc.returncode == 130, err
    kept = _records(output)
    assert kept[: len(short_ref)] == short_ref  # the finished capture, whole
    rest = kept[len(short_ref):]
    assert FRAMES_BEFORE_STOP <= len(rest) < len(long_ref) and rest == long_ref[: len(rest)]  # no third capture
    assert err.strip() == (f"interrupted (SIGINT): {len(kept)} frame(s) found before the stop kept in {output}; "
                           "1 later capture(s) not started (short.sigmf-meta)")


def test_a_stop_before_any_frame_leaves_the_old_file_as_it_was(tmp_path):
    output = tmp_path / "keep.jsonl"
    output.write_text("an older run\n")
    read, write = os.pipe()  # standard input that never brings a sample
    try:
        proc = _start("-", *RAW, *LINK, "-o", output, "-q", stdin=read)
        deadline = time.monotonic() + 60
        while not _partial(tmp_path, output):  # the output is open: the decoder waits for samples
            assert proc.poll() is None and time.monotonic() < deadline, proc.stderr.read()
            time.sleep(0.01)
        proc.send_signal(signal.SIGINT)
        _, err = proc.communicate(timeout=60)
    finally:
        os.close(read)
        os.close(write)
    assert proc.returncode == 130, err
    assert output.read_text() == "an older run\n" and not _partial(tmp_path, output)
    assert err.strip() == (f"interrupted (SIGINT) before any frame was found: {output} not written "
                           "(the old file is left as it was)")


def _grow(source: Path, growing: Path, stop: threading.Event) -> threading.Thread:
    """Append `source` to `growing` in pieces of 0.3 s of samples, about six times faster than real time."""
    data = source.read_bytes()
    step = 2 * RATE * 3 // 10

    def run():
        with open(growing, "ab") as fh:
            for i in range(0, len(data), step):
                if stop.is_set():
                    return
                fh.write(data[i : i + step])
                fh.flush()
                time.sleep(0.05)

    thread = threading.Thread(target=run, daemon=True)
    thread.start()
    return thread


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM, signal.SIGHUP], ids=["INT", "TERM", "HUP"])
def test_follow_ends_on_ctrl_c_or_sigterm_with_every_frame_written(captures, tmp_path, sig):
    meta, reference = captures["long"]
    growing = tmp_path / "live.cu8"
    growing.write_bytes(b"")
    output = tmp_path / "f.jsonl"
    stop = threading.Event()
    writer = _grow(meta.with_suffix(".sigmf-data"), growing, stop)
    try:
        proc = _start(growing, *RAW, *LINK, "--follow", "--idle", "60", "-o", output)  # no -q: the summary line
        err = _stop_after_frames(proc, tmp_path, output, sig)
    finally:
        stop.set()
        writer.join()
    kept = _records(output)
    strip = [{k: v for k, v in r.items() if k != "capture"} for r in kept]
    assert FRAMES_BEFORE_STOP <= len(kept) < len(reference)
    assert strip == [{k: v for k, v in r.items() if k != "capture"} for r in reference[: len(kept)]]
    assert not _partial(tmp_path, output)
    lines = err.splitlines()  # (no progress bar: stderr is a pipe here)
    if sig == signal.SIGHUP:  # a hang-up is an interruption, frames kept all the same
        assert proc.returncode == 129, err
        assert f"terminated (SIGHUP): {len(kept)} frame(s) found before the stop kept in {output}" in lines
        return
    assert proc.returncode == 0, err  # the documented end of a live capture, as --idle would end it
    summary = [m.groups() for m in map(re.compile(r"live\.cu8: \d+ burst\(s\), (\d+) frame\(s\), (\d+) good").fullmatch,
                                       lines) if m]
    assert summary == [(str(len(kept)), str(sum(r["crc_ok"] for r in kept)))], err


# --------------------------------------------------------------------------- the stop gate itself
def _deliver(sig: int) -> None:
    """Send `sig` to this process; Python runs its handler at the next point it checks (the sleep)."""
    os.kill(os.getpid(), sig)
    time.sleep(0.01)


def test_the_gate_holds_one_stop_until_the_step_is_done_and_lets_a_second_through():
    previous = signal.signal(signal.SIGINT, signal.default_int_handler)  # Ctrl-C's usual meaning here
    try:
        with stops_gated() as gate:
            steps = []
            with pytest.raises(KeyboardInterrupt):
                with gate.held():
                    _deliver(signal.SIGINT)
                    steps.append("finished")  # the signal waited for the step
            assert steps == ["finished"]
            with pytest.raises(Terminated) as info:
                with gate.held():
                    _deliver(signal.SIGTERM)
                    _deliver(signal.SIGTERM)  # a second one does not wait
                    steps.append("not reached")
            assert info.value.signum == signal.SIGTERM and steps == ["finished"]
            with pytest.raises(KeyboardInterrupt):  # not held: at once
                _deliver(signal.SIGINT)
            gate.hold()
            _deliver(signal.SIGINT)
            gate.release(deliver=False)  # a run already stopping drops it
        assert signal.getsignal(signal.SIGINT) is signal.default_int_handler  # put back
        assert signal.getsignal(signal.SIGTERM) != gate.handle
    finally:
        signal.signal(signal.SIGINT, previous)


# --------------------------------------------------------------------------- synth never replaces by accident
def _digest(folder: Path) -> dict[str, str]:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(folder.iterdir())}


@pytest.mark.parametrize("present", [("sigmf-meta", "sigmf-data"), ("sigmf-data",), ("truth.json",)])
def test_synth_refuses_to_replace_an_existing_capture(tmp_path, present):
    fleet = tmp_path / "fleet"
    fleet.mkdir()
    for suffix in present:
        (fleet / f"cap1.{suffix}").write_bytes(b"a real recording " + suffix.encode())
    before = _digest(fleet)
    res = CliRunner().invoke(main, ["synth", str(fleet / "cap1"), "--baud", "9600", "--shift", "9600", "--ebn0", "10",
                                    "--frames", "2", "-q"])
    assert res.exit_code == 1, res.stderr
    (line,) = res.stderr.splitlines()
    assert line.startswith("Error: output ") and "--overwrite" in line
    assert all(f"cap1.{suffix}" in line for suffix in present)
    assert _digest(fleet) == before  # nothing written, nothing replaced, no temporary file


def test_synth_overwrite_replaces_and_the_library_refuses_by_default(tmp_path):
    base = tmp_path / "cap1"
    args = ["synth", str(base), "--baud", "9600", "--shift", "9600", "--ebn0", "10", "--frames", "2", "-q"]
    assert CliRunner().invoke(main, args + ["--seed", "1"]).exit_code == 0
    first = _digest(tmp_path)
    res = CliRunner().invoke(main, args + ["--seed", "2", "--overwrite"])
    assert res.exit_code == 0, res.stderr
    second = _digest(tmp_path)
    assert sorted(second) == sorted(first) and all(second[k] != first[k] for k in first)
    cfg = iqdemod.synth.SynthConfig(link=iqdemod.load_link(None, rate=1_024_000, baud=9600, shift=9600),
                                    ebn0_db=(10.0,), n_frames=1)
    with pytest.raises(OutputError, match="already exist"):
        iqdemod.synth.synthesize(base, cfg)
    assert _digest(tmp_path) == second
    assert len(iqdemod.synth.synthesize(base, cfg, overwrite=True)["frames"]) == 1


def _nohup() -> None:
    _ctrl_c_as_usual()
    signal.signal(signal.SIGHUP, signal.SIG_IGN)  # what nohup(1) does before it starts a command (POSIX)


@pytest.mark.parametrize("ignored", [True, False], ids=["nohup", "terminal"])
def test_a_hang_up_the_process_was_started_ignoring_stays_ignored(tmp_path, ignored):
    # A long run started under nohup must outlive its terminal: an ignored SIGHUP is left ignored
    # (Python leaves an ignored SIGINT alone the same way); a SIGHUP not ignored stops it (129).
    output = tmp_path / "f.jsonl"
    read, write = os.pipe()  # standard input that never brings a sample
    try:
        proc = subprocess.Popen([sys.executable, "-m", "iqdemod_cli.main", "decode", "-", *map(str, RAW),
                                 *map(str, LINK), "-o", str(output), "-q"], stdin=read, stdout=subprocess.DEVNULL,
                                stderr=subprocess.PIPE, text=True, preexec_fn=_nohup if ignored else _ctrl_c_as_usual)
        deadline = time.monotonic() + 60
        while not _partial(tmp_path, output):  # the output is open: the decoder waits for samples
            assert proc.poll() is None and time.monotonic() < deadline, proc.stderr.read()
            time.sleep(0.01)
        proc.send_signal(signal.SIGHUP)
        if ignored:
            time.sleep(0.5)
            assert proc.poll() is None  # still running
            proc.send_signal(signal.SIGINT)
        _, err = proc.communicate(timeout=60)
    finally:
        os.close(read)
        os.close(write)
    assert proc.returncode == (130 if ignored else 129), err


def test_a_stop_between_any_two_steps_of_handing_out_frames_keeps_what_the_summary_counts(tmp_path):
    """A stop signal may land between any two statements of the decoding's generator: after a burst's
    frames are counted and before they are handed out, while the command holds a frame, or after it
    has asked for the next. Simulated deterministically here: a trace function raises KeyboardInterrupt
    at each line the generator reaches in turn (and at each line the command runs before its
    signal-gated write). Whatever the point, the lines written are the first `summary.frames` frames of
    an uninterrupted decode, each once, in order."""
    import inspect
    import io

    from iqdemod.receiver import Decoding
    from iqdemod_cli._signals import StopGate
    from iqdemod_cli.commands import decode as cmd

    rng = np.random.default_rng(7)
    txs, t = [], 0.005
    for k in range(8):  # pairs of frames 0.3 ms apart: one detector buffer holds two transmissions
        txs.append(fm.Tx(t_s=t, payload=rng.integers(0, 256, 24, dtype=np.uint8).tobytes(), ebn0_db=18.0,
                         offset_hz=30_000.0))
        t += (32 + 32 + 8 * 26) / 9600 + (0.0003 if k % 2 == 0 else 0.02)
    x, _ = fm.render(txs, rate=RATE, n_samples=int((t + 0.02) * RATE), noise_rms=0.05, seed=7)
    meta = fm.write_sigmf(tmp_path / "pairs", x, rate=RATE, datatype="cf32_le")
    link = iqdemod.load_link(None, offset=30_000, baud=9600, shift=9600, sync="0x9B3C57E1", length=24,
                             crc="CRC-16/IBM-3740")
    whole = [json.dumps(f.as_record()) + "\n" for f in iqdemod.decode(meta, link)]
    assert len(whole) == 8
    settings = dict(link=link, first=link, only_good=False, block_samples=1 << 16, follow=False, idle_s=2.0,
                    start_time=None, quiet=True)
    generator = Decoding._frames.__code__
    writer, write_lines = cmd._write.__code__, inspect.getsourcelines(cmd._write)
    gated = write_lines[1] + next(i for i, line in enumerate(write_lines[0]) if "gate.held()" in line)

    def run(stop_at: int):
        seen = [0]

        def trace(frame, event, arg):
            code = frame.f_code
            if code is not generator and code is not writer:
                return None

            def local(frame, event, arg):
                if event == "line" and (code is generator or frame.f_lineno < gated):
                    seen[0] += 1
                    if seen[0] == stop_at:
                        raise KeyboardInterrupt
                return local
            return local

        out, progress = io.StringIO(), cmd._Progress()
        sys.settrace(trace)
        try:
            cmd._decode_one(meta, out, StopGate(), progress, settings)
        except KeyboardInterrupt:
            pass
        finally:
            sys.settrace(None)
        return seen[0] >= stop_at, out.getvalue(), progress.current[1].summary.frames if progress.current else 0

    points = 0
    for stop_at in range(1, 400):
        stopped, text, counted = run(stop_at)
        if not stopped:
            break
        points += 1
        assert text == "".join(whole[:counted]), f"stop at step {stop_at}"
    assert stopped is False and text == "".join(whole) and points > 40


def test_a_missing_or_broken_capture_is_refused_before_any_work(captures, tmp_path):
    """Every capture is opened before any is decoded: the output file stays as it was."""
    meta, _ = captures["short"]
    output = tmp_path / "keep.jsonl"
    output.write_text("an older run\n")
    broken = tmp_path / "broken.sigmf-meta"
    broken.write_text("{not json")
    (tmp_path / "broken.sigmf-data").write_bytes(b"\x80" * 64)
    for bad, says in ((tmp_path / "nosuch.sigmf-meta", "nosuch.sigmf-meta"), (broken, "broken.sigmf-meta")):
        result = CliRunner().invoke(main, ["decode", str(meta), str(bad), *LINK, "-o", str(output), "-q"])
        assert result.exit_code == 1 and says in result.output, result.output
        assert output.read_text() == "an older run\n" and not _partial(tmp_path, output)


def test_a_capture_that_fails_while_read_keeps_the_frames_found_before_it(captures, tmp_path):
    """The second capture's rate cannot carry the link (found only once its receiver is planned): the
    first capture's frames are kept, the error is reported (exit 1), and the third is not started."""
    meta, records = captures["short"]
    slow = fm.write_sigmf(tmp_path / "slow", np.zeros(4800, np.complex64), rate=4800, datatype="cu8")
    output = tmp_path / "keep.jsonl"
    output.write_text("an older run\n")
    result = CliRunner().invoke(main, ["decode", str(meta), str(slow), str(meta), *LINK, "-o", str(output), "-q"])
    assert result.exit_code == 1, result.output
    assert _records(output) == records
    assert f"{len(records)} frame(s) found before the error kept in {output}" in result.output
    assert "1 later capture(s) not started (short.sigmf-meta)" in result.output
    assert "must be below half the sample rate" in result.output
