"""Acceptance figures of the receiver core, on captures these tests do not contain.

Prints, for the notes: the strong-capture matrix (every frame with a good CRC, no false good
frame), the implementation loss at 9 and 11 dB over 300 frames with carrier and clock errors,
and ten seconds of pure noise. Usage: python checks/receiver_acceptance.py [--workdir DIR]
"""

from __future__ import annotations

import argparse
import itertools
import tempfile
from pathlib import Path

import numpy as np
from scipy import stats

import iqdemod
from iqdemod.synth import SynthConfig, payload_bit_errors, synthesize


def link_for(datatype="cf32_le", shift=9600):
    return iqdemod.load_link(None, datatype=datatype, rate=1_024_000, offset=137_000, baud=9600, shift=shift,
                             sync="0x9B3C57E1", length=24, crc="CRC-16/IBM-3740")


def strong(workdir: Path) -> None:
    print("strong captures, 18 dB, 137 kHz off centre at 1.024 MS/s, 20 frames each")
    print(f"{'datatype':8} {'shift':>6} {'pulse':>8} {'carrier':>8} {'clock':>6}  good/sent  false-good  max|t err| (sym)")
    seed = 500
    for dt, shift, bt, fe, ppm in itertools.product(("cu8", "ci16_le", "cf32_le"), (9600, 19200), (None, 0.5),
                                                   (-2000.0, 2000.0), (-80.0, 80.0)):
        seed += 1
        if (seed % 2) and bt is None and dt == "cf32_le":  # thin the grid a little; every axis still covered
            continue
        link = link_for(dt, shift)
        base = workdir / f"strong_{seed}"
        truth = synthesize(base, SynthConfig(link=link, ebn0_db=(18.0,), n_frames=20, freq_error_hz=fe,
                                             clock_ppm=ppm, gaussian_bt=bt, seed=seed))
        frames = list(iqdemod.decode(str(base) + ".sigmf-meta", link))
        sent = {f["payload_hex"]: f["t_s"] for f in truth["frames"]}
        good = [f for f in frames if f.crc_ok]
        false_good = sum(f.payload.hex() not in sent for f in good)
        terr = max((abs(f.t_s - sent[f.payload.hex()]) * 9600 for f in good if f.payload.hex() in sent), default=np.nan)
        pulse = "rect" if bt is None else f"BT {bt}"
        print(f"{dt:8} {shift:6d} {pulse:>8} {fe:8.0f} {ppm:6.0f}  {len(good):4d}/{len(sent):<4d}  {false_good:10d}  {terr:.3f}")


def implementation_loss(workdir: Path) -> None:
    print("\nimplementation loss against ½·exp(−Eb/2N0) (Proakis ch. 4), 300 frames, carrier +1500 Hz, clock −60 ppm")
    for ebn0 in (9.0, 11.0):
        link = link_for()
        base = workdir / f"loss_{ebn0}"
        truth = synthesize(base, SynthConfig(link=link, ebn0_db=(ebn0,), n_frames=300, freq_error_hz=1500.0,
                                             clock_ppm=-60.0, seed=int(ebn0 * 100) + 7))
        errors, bits, matched = payload_bit_errors(iqdemod.decode(str(base) + ".sigmf-meta", link), truth)
        ber = errors / bits
        lo, hi = stats.binomtest(errors, bits).proportion_ci(0.95, method="exact")
        theory = 0.5 * np.exp(-(10 ** (ebn0 / 10)) / 2)
        eff = 10 * np.log10(-2 * np.log(2 * ber))
        print(f"  {ebn0:4.1f} dB: {errors} errors in {bits} payload bits ({matched} frames), BER {ber:.3e} "
              f"[95 % {lo:.2e} … {hi:.2e}], theory {theory:.3e}, implementation loss {ebn0 - eff:+.2f} dB")


def noise(workdir: Path) -> None:
    rng = np.random.default_rng(99)
    p = workdir / "noise.cu8"
    n = 10 * 1_024_000
    raw = np.clip(np.rint(127.5 + 127.5 * 0.05 / np.sqrt(2) * rng.standard_normal(2 * n)), 0, 255).astype(np.uint8)
    raw.tofile(p)
    frames = list(iqdemod.decode(p, link_for("cu8")))
    print(f"\n10 s of pure noise (cu8): {len(frames)} sync hit(s), {sum(f.crc_ok for f in frames)} good frame(s)")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--workdir", type=Path, default=None)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        workdir = args.workdir or Path(tmp)
        workdir.mkdir(parents=True, exist_ok=True)
        strong(workdir)
        implementation_loss(workdir)
        noise(workdir)


if __name__ == "__main__":
    main()
