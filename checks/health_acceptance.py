"""Acceptance figures of link health, on captures these tests do not contain.

- capture-level Eb/N0 against the truth at 6, 10, 14, 18 and 22 dB, with carrier and clock errors;
- predicted frame error rate against the CRC failures seen (exact binomial test) on 400-frame
  captures at 11.5 and 13 dB;
- per-frame Eb/N0 in a capture whose bursts differ in strength (12–24 dB).
Usage: python checks/health_acceptance.py
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np

import iqdemod
from iqdemod.health import assess, assess_with_frames
from iqdemod.synth import SynthConfig, synthesize

LINK = iqdemod.load_link(None, datatype="cf32_le", rate=1_024_000, offset=137_000, baud=9600, shift=9600,
                         sync="0x9B3C57E1", length=24, crc="CRC-16/IBM-3740")


def make(workdir: Path, name: str, ebn0, frames: int, seed: int, **kw) -> tuple[str, dict]:
    base = workdir / name
    truth = synthesize(base, SynthConfig(link=LINK, ebn0_db=tuple(ebn0), n_frames=frames, seed=seed, **kw))
    return str(base) + ".sigmf-meta", truth


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        w = Path(tmp)
        print("capture-level Eb/N0 (200 frames each, carrier −1700 Hz, clock +70 ppm)")
        for i, true in enumerate((6.0, 10.0, 14.0, 18.0, 22.0)):
            meta, _ = make(w, f"e{i}", (true,), 200, 1000 + i, freq_error_hz=-1700.0, clock_ppm=70.0)
            r = assess(meta, LINK)
            lo, hi = r.ebn0_db_ci90
            print(f"  truth {true:5.1f} dB: estimate {r.ebn0_db:6.2f} dB (error {r.ebn0_db - true:+.2f}, "
                  f"90 % {lo:.2f} … {hi:.2f}, {r.ebn0_method})")
        print("\npredicted against observed frame error rate (400 frames, carrier +1200 Hz, clock −50 ppm)")
        for i, true in enumerate((11.5, 13.0)):
            meta, _ = make(w, f"p{i}", (true,), 400, 2000 + i, freq_error_hz=1200.0, clock_ppm=-50.0)
            r = assess(meta, LINK)
            bad = r.frames - r.frames_crc_ok
            print(f"  {true:4.1f} dB: frame error rate predicted {r.fer_predicted:.4f} [90 % {r.fer_predicted_ci90[0]:.4f} … "
                  f"{r.fer_predicted_ci90[1]:.4f}], observed {r.fer_observed:.4f} ({bad}/{r.frames}), "
                  f"exact binomial p = {r.fer_p_value:.3f} -> {r.verdict}; Eb/N0 est {r.ebn0_db:.2f}")
        print("\nper-frame Eb/N0, bursts of 12–24 dB (125 frames)")
        meta, truth = make(w, "mixed", (12.0, 15.0, 18.0, 21.0, 24.0), 125, 3000, freq_error_hz=800.0, clock_ppm=40.0)
        r, frames = assess_with_frames(meta, LINK)
        t_true = np.array([f["t_s"] for f in truth["frames"]])
        e_true = np.array([f["ebn0_db"] for f in truth["frames"]])
        err = np.array([f.ebn0_db - e_true[np.argmin(np.abs(t_true - f.t_s))] for f in frames])
        print(f"  {len(frames)} frames: max |error| {np.max(np.abs(err)):.2f} dB, mean {err.mean():+.2f} dB, "
              f"rms {np.sqrt(np.mean(err ** 2)):.2f} dB; capture verdict: {r.verdict}")


if __name__ == "__main__":
    main()
