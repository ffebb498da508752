"""Decode throughput against the floor of one pass over the samples, each ratio measured in one run.

Generates (once, cached in --workdir) 60 s captures with the project's own generator (harbour-buoy
telemetry: 1.024 MS/s, 9600 baud, the signal 137 kHz off centre, 600 bursts with gaps):

- ``cf32``: complex float32 whose noise peaks pass 1.0 (about 0.6 % of samples: floats have no
  full scale, so the reader must not treat them as clipped);
- ``ci16``: complex int16 (ci16_le);
- ``cu8``: complex unsigned 8-bit;
- ``gfsk`` (on request): cf32, the Gaussian FSK most transceiver chips send (BT 0.5, h 0.5), which
  the multi-symbol detector decodes.

For each it times, in the same process and alternately:

- the floor: read the file in 8 MiB chunks, convert to complex64 (nothing for cf32), and multiply
  by a precomputed complex64 oscillator: the least any decoder must do per sample;
- ``iqdemod.decode``, in process (reading, front end, bursts, demodulation, framing, Eb/N0).

Then, on the cf32 capture: the command line end to end (``iqdemod decode … --quiet -o /dev/null``,
start-up included) against the same floor, and k = 1, 2, 4 links decoded in one pass (the extra
links tuned to empty channels of the same capture), as the ratio of each time to one link's.

With ``--baseline DIR`` (a checkout of older code, e.g. ``git worktree add /tmp/old COMMIT``) it
measures only the in-process decode, of this code and of the code in DIR alternately, each in a
fresh process, ``--rounds`` times: the way to tell what a change did on a machine whose timings move
by ±15 % between runs. ``cf32in`` (on request) is a cf32 capture kept inside ±1.

It prints one JSON object. Usage:
    python benchmarks/throughput.py [--workdir DIR] [--repeat 3] [--datatypes cf32,ci16,cu8,gfsk,cf32in]
                                    [--links 1,2,4] [--no-cli] [--baseline DIR [--rounds 2]]
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

import iqdemod
from iqdemod.synth import SynthConfig, synthesize

CHUNK_BYTES = 8 << 20
RATE = 1_024_000
OFFSET = 137_000
LINK_KW = dict(baud=9600, shift=9600, sync="0x9B3C57E1", length=24, crc="CRC-16/IBM-3740")
DATATYPES = {"cf32": "cf32_le", "ci16": "ci16_le", "cu8": "cu8", "gfsk": "cf32_le", "cf32in": "cf32_le"}
# the Gaussian FSK most transceiver chips send (BT 0.5, h 0.5), decoded by the multi-symbol detector
KIND_LINK = {"gfsk": dict(shift=4800, gaussian=0.5)}
# cf32: noise σ per component 0.34 puts about 0.6 % of samples past ±1.0; the integer types keep
# the usual headroom (noise well inside full scale)
NOISE_RMS = {"cf32": 0.48, "ci16": 0.05, "cu8": 0.05, "gfsk": 0.05, "cf32in": 0.05}
EMPTY_OFFSETS = (-300_000, -150_000, 300_000)  # extra links' channels: noise only


def make_capture(workdir: Path, kind: str, seconds: float, frames: int) -> Path:
    base = workdir / f"throughput_{kind}_{int(seconds)}s_{frames}f"
    meta = base.with_name(base.name + ".sigmf-meta")
    if meta.exists():
        return meta
    link = iqdemod.load_link(None, datatype=DATATYPES[kind], rate=RATE, offset=OFFSET, **{**LINK_KW, **KIND_LINK.get(kind, {})})
    burst_s = (32 + 32 + 8 * 24 + 16 + 8) / 9600
    gap = max(0.0, seconds / frames - burst_s)
    # the benchmark's own cache: a data file left without its metadata (an interrupted run) is replaced
    synthesize(base, SynthConfig(link=link, ebn0_db=(14.0, 18.0), n_frames=frames, freq_error_hz=1200.0,
                                 clock_ppm=50.0, gap_s=(0.5 * gap, 1.5 * gap), noise_rms=NOISE_RMS[kind],
                                 gaussian_bt=link.signal.bt if link.signal.pulse == "gaussian" else None,
                                 centre_hz=869_437_500.0, seed=60), overwrite=True)
    return meta


def floor_pass(data: Path, kind: str) -> tuple[float, int]:
    """Read in 8 MiB chunks, convert to complex64, multiply by an oscillator; (seconds, samples)."""
    kind = {"ci16_le": "ci16", "cu8": "cu8"}.get(DATATYPES[kind], "cf32")  # the sample format read
    width = {"ci16": 4, "cu8": 2}.get(kind, 8)
    n_chunk = CHUNK_BYTES // width
    osc = np.exp(-2j * np.pi * OFFSET / RATE * np.arange(n_chunk)).astype(np.complex64)
    buf = bytearray(CHUNK_BYTES)
    out = np.empty(n_chunk, np.complex64)
    total = 0
    t0 = time.perf_counter()
    with open(data, "rb", buffering=0) as fh:
        while True:
            got = fh.readinto(buf)
            if not got:
                break
            n = got // width
            if width == 8:
                x = np.frombuffer(buf, dtype=np.complex64, count=n)
            elif kind == "ci16":
                pairs = np.frombuffer(buf, dtype="<i2", count=2 * n).astype(np.float32)
                x = pairs.view(np.complex64) * np.float32(1 / 32768)
            else:
                pairs = np.frombuffer(buf, dtype=np.uint8, count=2 * n).astype(np.float32)
                x = (pairs - np.float32(127.5)).view(np.complex64) * np.float32(1 / 127.5)
            np.multiply(x, osc[:n], out=out[:n])
            total += n
    return time.perf_counter() - t0, total


def timed(fn) -> tuple[float, object]:
    """(wall seconds, result) of one call."""
    t0 = time.perf_counter()
    result = fn()
    return time.perf_counter() - t0, result


def links_for(k: int) -> dict[str, iqdemod.Link]:
    offsets = (OFFSET, *EMPTY_OFFSETS)[:k]
    return {f"channel-{i}": iqdemod.load_link(None, offset=off, **LINK_KW) for i, off in enumerate(offsets)}


def in_process(meta: Path, kind: str, repeat: int) -> dict:
    data = meta.with_name(meta.name.replace(".sigmf-meta", ".sigmf-data"))
    link = iqdemod.load_link(None, offset=OFFSET, **{**LINK_KW, **KIND_LINK.get(kind, {})})
    floor_pass(data, kind)  # warm the page cache so both see the same storage
    t_floor = t_dec = float("inf")
    frames = []
    n = 0
    for _ in range(repeat):  # alternate, so that both see the same load on a shared machine
        t, n = floor_pass(data, kind)
        t_floor = min(t_floor, t)
        t, frames = timed(lambda: list(iqdemod.decode(meta, link)))
        t_dec = min(t_dec, t)
    return {
        "samples": n,
        "floor_msps": round(n / t_floor / 1e6, 1),
        "decode_msps": round(n / t_dec / 1e6, 2),
        "ratio_decode_to_floor": round(t_floor / t_dec, 4),
        "realtime_factor": round(n / RATE / t_dec, 1),
        "frames": len(frames),
        "frames_crc_ok": sum(f.crc_ok for f in frames),
    }


def command_line(meta: Path, repeat: int) -> dict:
    data = meta.with_name(meta.name.replace(".sigmf-meta", ".sigmf-data"))
    cmd = [sys.executable, "-m", "iqdemod_cli", "decode", str(meta), "--quiet", "-o", os.devnull,
           "--offset", str(OFFSET), "--baud", "9600", "--shift", "9600", "--sync", "0x9B3C57E1",
           "--length", "24", "--crc", "CRC-16/IBM-3740"]
    t_floor = t_cli = float("inf")
    n = 0
    for _ in range(repeat):
        t, n = floor_pass(data, "cf32")
        t_floor = min(t_floor, t)
        t0 = time.perf_counter()
        subprocess.run(cmd, check=True)
        t_cli = min(t_cli, time.perf_counter() - t0)
    return {"cli_msps": round(n / t_cli / 1e6, 2), "floor_msps": round(n / t_floor / 1e6, 1),
            "ratio_cli_to_floor": round(t_floor / t_cli, 4), "cli_seconds": round(t_cli, 2)}


def several_links(meta: Path, ks: list[int], repeat: int) -> dict:
    times: dict[int, float] = {k: float("inf") for k in ks}
    found: dict[int, int] = {}
    for _ in range(repeat):  # alternate the k's, so that each sees the same load
        for k in ks:
            t, frames = timed(lambda: list(iqdemod.decode(meta, links_for(k))))
            times[k] = min(times[k], t)
            found[k] = sum(f.crc_ok for f in frames)
    base = times[min(ks)]
    return {f"links_{k}": {"seconds": round(times[k], 3), "ratio_to_one_link": round(times[k] / base, 3),
                           "frames_crc_ok": found[k]} for k in ks}


def against_baseline(metas: dict, kinds: list[str], baseline: Path, rounds: int, repeat: int) -> dict:
    """This code and the code in `baseline`, alternately, each round in fresh processes."""
    out: dict = {"baseline": str(baseline)}
    for kind in kinds:
        runs: dict[str, list] = {"this": [], "baseline": []}
        for _ in range(rounds):
            for who, path in (("this", None), ("baseline", baseline)):
                env = dict(os.environ)
                if path is not None:
                    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(path), env.get("PYTHONPATH")) if p)
                done = subprocess.run([sys.executable, __file__, "--child", kind, "--workdir", str(metas[kind].parent),
                                       "--repeat", str(repeat)], env=env, check=True, capture_output=True, text=True)
                runs[who].append(json.loads(done.stdout))
        out[kind] = {who: [{k: r[k] for k in ("ratio_decode_to_floor", "decode_msps", "floor_msps", "frames_crc_ok")}
                           for r in rs] for who, rs in runs.items()}
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--workdir", type=Path, default=Path(os.environ.get("TMPDIR", "/tmp")) / "iqdemod-bench")
    ap.add_argument("--seconds", type=float, default=60.0)
    ap.add_argument("--frames", type=int, default=600)
    ap.add_argument("--repeat", type=int, default=3, help="alternating runs of each; the best is kept")
    ap.add_argument("--datatypes", default="cf32,ci16,cu8")
    ap.add_argument("--links", default="1,2,4")
    ap.add_argument("--no-cli", action="store_true", help="skip the command-line measurement")
    ap.add_argument("--baseline", type=Path, default=None,
                    help="a checkout of older code: compare its in-process decode with this code's, alternately")
    ap.add_argument("--rounds", type=int, default=2, help="with --baseline: alternations of the two")
    ap.add_argument("--child", default=None, help=argparse.SUPPRESS)  # one in-process figure, as JSON
    args = ap.parse_args()
    args.workdir.mkdir(parents=True, exist_ok=True)
    if args.child:
        meta = args.workdir / f"throughput_{args.child}_{int(args.seconds)}s_{args.frames}f.sigmf-meta"
        print(json.dumps(in_process(meta, args.child, args.repeat)))
        return
    kinds = [k for k in args.datatypes.split(",") if k]
    if args.baseline is not None:
        metas = {kind: make_capture(args.workdir, kind, args.seconds, args.frames) for kind in kinds}
        print(json.dumps(against_baseline(metas, kinds, args.baseline, args.rounds, args.repeat), indent=1))
        return
    result: dict = {"python": sys.version.split()[0], "numpy": np.__version__, "cpu_count": os.cpu_count()}
    metas = {kind: make_capture(args.workdir, kind, args.seconds, args.frames) for kind in set(kinds) | {"cf32"}}
    for kind in kinds:
        result[kind] = in_process(metas[kind], kind, args.repeat)
    if not args.no_cli:
        result["command_line_cf32"] = command_line(metas["cf32"], args.repeat)
    ks = sorted({int(k) for k in args.links.split(",") if k})
    if ks:
        result["several_links_cf32"] = several_links(metas["cf32"], ks, args.repeat)
    result["peak_rss_mb"] = round(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024, 1)
    print(json.dumps(result, indent=1))


if __name__ == "__main__":
    main()
