"""Peak memory while decoding large cu8 captures: it must stay flat as the file grows.

Generates (once, cached in --workdir) cu8 captures of about 0.3 GB and 1.2 GB with the project's
generator (1.024 MS/s, 9600 baud, bursts spread over the whole file), then decodes each in a fresh
child process and reports that process's peak RSS plus the peak of its own worker process (the
per-burst work of a long capture, iqdemod.burst_pool): the sum bounds what the two held at once
(resource.getrusage, RUSAGE_SELF and RUSAGE_CHILDREN inside the child).
Usage: python benchmarks/memory.py [--workdir DIR] [--sizes-gb 0.3 1.2]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
from pathlib import Path

import iqdemod
from iqdemod.synth import SynthConfig, synthesize

RATE = 1_024_000

CHILD = """
import sys, time, resource, iqdemod
link = iqdemod.load_link(None, offset=137000, baud=9600, shift=9600, sync="0x9B3C57E1", length=24)
t0 = time.perf_counter()
n = good = 0
for f in iqdemod.decode(sys.argv[1], link):
    n += 1
    good += f.crc_ok
secs = time.perf_counter() - t0
own = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
worker = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
print(n, good, secs, own, worker)
"""


def make(workdir: Path, gb: float) -> Path:
    seconds = gb * 1e9 / (2 * RATE)
    frames = max(10, int(seconds))  # one burst a second on average
    base = workdir / f"memory_{gb:g}GB"
    meta = base.with_name(base.name + ".sigmf-meta")
    if not meta.exists():
        link = iqdemod.load_link(None, datatype="cu8", rate=RATE, offset=137_000, baud=9600, shift=9600,
                                 sync="0x9B3C57E1", length=24)
        gap = seconds / frames
        # the benchmark's own cache: a data file left without its metadata (an interrupted run) is replaced
        synthesize(base, SynthConfig(link=link, ebn0_db=(16.0,), n_frames=frames, gap_s=(0.5 * gap, 1.5 * gap),
                                     freq_error_hz=900.0, clock_ppm=30.0, seed=77), overwrite=True)
    return meta


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--workdir", type=Path, default=Path(os.environ.get("TMPDIR", "/tmp")) / "iqdemod-bench")
    ap.add_argument("--sizes-gb", type=float, nargs="+", default=[0.3, 1.2])
    args = ap.parse_args()
    args.workdir.mkdir(parents=True, exist_ok=True)
    rows = []
    for gb in args.sizes_gb:
        meta = make(args.workdir, gb)
        data = meta.with_name(meta.name.replace(".sigmf-meta", ".sigmf-data"))
        out = subprocess.run([sys.executable, "-c", CHILD, str(meta)], capture_output=True, text=True, check=True)
        n, good, secs, own_kb, worker_kb = out.stdout.split()
        rows.append({
            "capture_gb": round(data.stat().st_size / 1e9, 3),
            "frames": int(n),
            "frames_crc_ok": int(good),
            "decode_s": round(float(secs), 1),
            "peak_rss_mb": round((int(own_kb) + int(worker_kb)) / 1024, 1),
            "decoder_mb": round(int(own_kb) / 1024, 1),
            "worker_mb": round(int(worker_kb) / 1024, 1),
        })
        print(json.dumps(rows[-1]), flush=True)


if __name__ == "__main__":
    main()
