"""Acceptance figures of issue 14 (frame codings), on captures from the independent test modulator.

- REFERENCE §9 check values: PN9's first 16 bytes, Manchester of 0xA5, CRC-16/IBM-3740 sent
  little-endian;
- every frame decodes at 16 dB in each layout (Manchester at 4800 bit/s on 9600 Bd; PN9; LSB first
  with a little-endian CRC; a length byte counting payload + CRC);
- Manchester, 400 frames at 11, 12 and 13 dB: the health prediction (REFERENCE §10) against the CRC
  failures seen, exact binomial test (consistent when p >= 0.01);
- a Monte Carlo of the soft Manchester decision (2·10⁶ bits a point) against REFERENCE §10's table.
Usage: python checks/coding_acceptance.py
"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

import numpy as np
from scipy import stats

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

import iqdemod  # noqa: E402
from iqdemod import coding  # noqa: E402
from iqdemod.framing import frame_bits  # noqa: E402
from iqdemod.health import assess_with_frames  # noqa: E402
from iqdemod.link import FrameSpec  # noqa: E402
from test_coding_receiver import link_for, modulated_capture  # noqa: E402  (the independent modulator)

SECTION_10 = {8: 3.8142e-02, 10: 7.5802e-03, 12: 5.3926e-04, 14: 7.2688e-06}  # REFERENCE §10, L = 2


def check_values() -> None:
    print("REFERENCE §9 check values")
    print(f"  PN9, first 16 bytes: {coding.pn9(16).hex(' ')}  (§9: ff e1 1d 9a ed 85 33 24 ea 7a d2 39 70 97 57 0a)")
    bits = coding.bytes_to_bits(b"\xa5")
    ieee = coding.bits_to_bytes(coding.manchester_encode(bits, "manchester")).hex(" ")
    thomas = coding.bits_to_bytes(coding.manchester_encode(bits, "manchester-inverted")).hex(" ")
    print(f"  Manchester of 0xA5: IEEE 802.3 {ieee}, G. E. Thomas {thomas}  (§9: 66 99 / 99 66)")
    spec = FrameSpec(sync_word=0x2DD4, sync_bits=16, length=9, crc="CRC-16/IBM-3740", crc_order="little")
    crc = coding.bits_to_bytes(frame_bits(b"123456789", spec)[-16:]).hex(" ")
    print(f"  CRC-16/IBM-3740 of '123456789' sent little-endian: {crc}  (§9: b1 29)")


def decode_layouts(w: Path) -> None:
    print("every frame at 16 dB (60 frames a layout)")
    layouts = {
        "Manchester, 4800 bit/s on 9600 Bd": dict(coding="manchester"),
        "PN9 whitening": dict(whitening="pn9"),
        "LSB first, little-endian CRC": dict(bit_order="lsb", crc_order="little"),
        "length counts payload + CRC": dict(length_counts="payload+crc"),
    }
    for i, (name, layout) in enumerate(layouts.items()):
        meta, payloads = modulated_capture(w / f"l{i}", layout, ebn0_db=16.0, frames=60, seed=400 + i)
        frames = list(iqdemod.decode(meta, link_for(layout)))
        good = [f.payload for f in frames if f.crc_ok]
        print(f"  {name:36s}: {len(good)}/{len(payloads)} good, {len(frames)} found, "
              f"all payloads right: {good == payloads}")


def manchester_health(w: Path) -> None:
    print("Manchester, 400 frames a level: predicted PER (REFERENCE §10) against the CRC failures")
    for i, level in enumerate((11.0, 12.0, 13.0)):
        meta, _ = modulated_capture(w / f"h{i}", dict(coding="manchester"), ebn0_db=level, frames=400, seed=500 + i)
        r, frames = assess_with_frames(meta, link_for(dict(coding="manchester")))
        cut = sum(f.truncated for f in frames)
        bad = r.frames - r.frames_crc_ok
        p = stats.binomtest(bad, r.frames, r.fer_predicted).pvalue
        print(f"  {level:4.1f} dB: Eb/N0 estimate {r.ebn0_db:5.2f} dB, frame error rate predicted {r.fer_predicted:.4f} "
              f"observed {bad}/{r.frames} = {r.fer_observed:.4f}; exact binomial p = {r.fer_p_value:.3f} "
              f"(scipy.stats.binomtest: {p:.3f}), {r.verdict}; model {r.pb_model}; "
              f"of 400 sent, {cut} cut short by their burst's end (left out), {400 - r.frames - cut} not found")


def manchester_monte_carlo(n: int = 2_000_000) -> None:
    print(f"soft Manchester decision, Monte Carlo of {n:.0e} bits a point, against REFERENCE §10")
    rng = np.random.default_rng(1014)
    for level, pb in SECTION_10.items():
        bits = rng.integers(0, 2, n).astype(np.uint8)
        chips = coding.manchester_encode(bits, "manchester")
        amp = np.sqrt(10 ** (level / 10) / 2)  # each chip carries Eb/2; N0 = 1
        phase = np.exp(2j * np.pi * rng.random(chips.size))
        noise = (rng.standard_normal((2, chips.size)) + 1j * rng.standard_normal((2, chips.size))) / np.sqrt(2)
        z1 = noise[1] + np.where(chips == 1, amp * phase, 0)
        z0 = noise[0] + np.where(chips == 0, amp * phase, 0)
        got, _, _ = coding.manchester_soft(np.abs(z0) ** 2, np.abs(z1) ** 2, "manchester")
        k = int(np.count_nonzero(got != bits))
        lo, hi = stats.binomtest(k, n).proportion_ci(method="exact")
        print(f"  {level:2d} dB: {k / n:.4e} (95 % {lo:.3e} … {hi:.3e}), §10 {pb:.4e}, "
              f"binomial p = {stats.binomtest(k, n, pb).pvalue:.3f}")


def main() -> None:
    check_values()
    with tempfile.TemporaryDirectory() as tmp:
        w = Path(tmp)
        decode_layouts(w)
        manchester_health(w)
    manchester_monte_carlo()


if __name__ == "__main__":
    main()
