"""The independent test modulator (tests/fsk_modulator.py) against facts from outside the project.

Each check names its source. REFERENCE is /work/shared/REFERENCE.md.
"""

from __future__ import annotations

import binascii
import json
import math
import zlib

import numpy as np
import pytest
from scipy import stats

import fsk_modulator as fm

RATE = 1_024_000.0
BAUD = 9600.0
CHECK = b"123456789"


# --- CRCs: the public CRC catalogue (REFERENCE §5) ------------------------------------------

@pytest.mark.parametrize("name, check", [
    ("CRC-16/IBM-3740", 0x29B1),   # CRC catalogue check value
    ("CRC-16/XMODEM", 0x31C3),     # CRC catalogue check value
    ("CRC-32/ISO-HDLC", 0xCBF43926),  # CRC catalogue check value
])
def test_crc_check_values(name, check):
    got = fm.crc_bytes(CHECK, name)
    assert got == check.to_bytes(len(got), "big")


def test_crc_sent_low_byte_first():
    # REFERENCE §9: CRC-16/IBM-3740 of "123456789" sent little-endian is b1 29 on air.
    assert fm.crc_bytes(CHECK, "CRC-16/IBM-3740", order="little") == bytes([0xB1, 0x29])


# --- frame codings (REFERENCE §9) --------------------------------------------------------------

def test_pn9_first_bytes():
    # REFERENCE §9 (ITU-T O.150 PN9 polynomial, x^9 + x^5 + 1, seed 0x1FF).
    assert fm.pn9(16) == bytes.fromhex("ff e1 1d 9a ed 85 33 24 ea 7a d2 39 70 97 57 0a")


def test_manchester_a5():
    # REFERENCE §9: IEEE 802.3 clause 7 sends 0xA5 as the chips 0x66 0x99; G. E. Thomas as 0x99 0x66.
    bits = np.unpackbits(np.array([0xA5], dtype=np.uint8))
    assert np.packbits(fm.manchester(bits)).tobytes() == bytes([0x66, 0x99])
    assert np.packbits(fm.manchester(bits, inverted=True)).tobytes() == bytes([0x99, 0x66])


def _pack(bits) -> bytes:
    return np.packbits(np.asarray(bits, dtype=np.uint8)).tobytes()


def test_frame_layout_fixed():
    # README "Frames are sent as [preamble 1010…] sync word [length byte] payload CRC, bits MSB
    # first"; the CRC from the stdlib (binascii.crc_hqx with init 0xFFFF = CRC-16/IBM-3740, §5).
    payload = bytes(range(0x40, 0x58))
    bits = fm.frame_bits(payload)
    assert bits.dtype == np.uint8 and bits.size == 32 + 32 + 8 * (24 + 2)
    assert np.array_equal(bits[:32], np.tile([1, 0], 16))
    crc = binascii.crc_hqx(payload, 0xFFFF)
    assert _pack(bits[32:]) == bytes.fromhex("9B3C57E1") + payload + crc.to_bytes(2, "big")


def test_frame_layout_prefix8_crc_covers_length():
    # The CRC covers the length byte and the payload (README, prefix8); CRC-32/ISO-HDLC = zlib.crc32.
    payload = b"buoy 7: 12.5 C"
    bits = fm.frame_bits(payload, length="prefix8", crc="CRC-32/ISO-HDLC", preamble_bits=8,
                         sync=0x2DD4, sync_bits=16)
    body = bytes([len(payload)]) + payload
    assert _pack(bits[8:]) == bytes.fromhex("2DD4") + body + zlib.crc32(body).to_bytes(4, "big")
    counted = fm.frame_bits(payload, length="prefix8", crc="CRC-16/XMODEM", length_counts="frame",
                            length_offset=-1, preamble_bits=0)
    assert _pack(counted[32:40])[0] == 1 + len(payload) + 2 - 1


def test_frame_whitening_and_manchester():
    # PN9 over everything after the sync word, then Manchester from the sync word on (REFERENCE §9).
    payload = bytes(24)
    bits = fm.frame_bits(payload, whitening="pn9", coding="manchester", preamble_bits=16)
    chips = bits[16:]
    assert chips.size == 2 * (32 + 8 * 26)
    assert np.all(chips[0::2] != chips[1::2])          # every bit is two opposite chips
    decoded = 1 - chips[0::2]                            # IEEE 802.3: first chip is the inverted bit
    body = bytes(a ^ b for a, b in zip(_pack(decoded[32:]), fm.pn9(26)))
    assert _pack(decoded[:32]) == bytes.fromhex("9B3C57E1")
    assert body == payload + binascii.crc_hqx(payload, 0xFFFF).to_bytes(2, "big")


def test_frame_lsb_first():
    bits = fm.frame_bits(b"\x01", preamble_bits=0, crc=None, bit_order="lsb")
    assert bits[32:].tolist() == [1, 0, 0, 0, 0, 0, 0, 0]


# --- CPFSK waveform (definition of CPM/CPFSK: Proakis, Digital Communications, CPM section [book]) ---

@pytest.mark.parametrize("h", [0.5, 0.7, 1.0])
def test_rect_phase_step_is_pi_h(h):
    # Rectangular frequency pulse: the phase turns by exactly π·h·a over each symbol.
    bits = np.random.default_rng(1).integers(0, 2, 64)
    x = fm.cpfsk(bits, sps=16, h=h, phase0=0.3)
    step = np.angle(x[16::16] * np.conj(x[:-16:16]))
    want = np.angle(np.exp(1j * math.pi * h * (2.0 * bits[:-1] - 1)))
    assert np.allclose(np.angle(np.exp(1j * (step - want))), 0, atol=1e-9)
    assert np.allclose(abs(x), 1.0)


@pytest.mark.parametrize("pulse, sps", [("rect", 10.3), ("gaussian", 10.3), ("gaussian", 16.0)])
def test_one_symbol_turns_phase_by_pi_h(pulse, sps):
    # Flipping one symbol changes the phase by 2·π·h once its (truncated) pulse has ended: each symbol
    # contributes exactly π·h·(±1), also for the Gaussian pulse and fractional samples per symbol.
    h = 0.7
    bits = np.random.default_rng(2).integers(0, 2, 40)
    other = bits.copy()
    other[10] ^= 1
    d = np.angle(fm.cpfsk(bits, sps=sps, h=h, pulse=pulse) * np.conj(fm.cpfsk(other, sps=sps, h=h, pulse=pulse)))
    after = int(math.ceil((10.5 + 2 + 0.01) * sps))  # pulse of symbol 10 ends at 10.5 + span/2 symbols
    before = int((10.5 - 2 - 0.01) * sps)
    want = math.pi * h * 2 * (2 * int(bits[10]) - 1)
    assert np.allclose(np.angle(np.exp(1j * (d[after:] - want))), 0, atol=1e-9)
    assert np.allclose(d[:before], 0, atol=1e-12)


def _peak_hz(x, rate):
    n = 1 << int(math.ceil(math.log2(x.size * 8)))
    spec = np.abs(np.fft.fft(x * np.hanning(x.size), n))
    k = int(np.argmax(spec))
    # parabolic interpolation of the log peak (common practice)
    a, b, c = np.log(spec[[k - 1, k, (k + 1) % n]])
    k = k + 0.5 * (a - c) / (a - 2 * b + c)
    return (k if k < n / 2 else k - n) * rate / n


@pytest.mark.parametrize("bit, h", [(1, 1.0), (0, 1.0), (1, 0.5)])
def test_rect_tone_frequencies_fft(bit, h):
    # FSK definition: bit 1 is the upper tone at +h/2·baud, bit 0 the lower at −h/2·baud (numpy FFT).
    sps = RATE / BAUD
    x = fm.cpfsk(np.full(400, bit), sps=sps, h=h)
    want = (1 if bit else -1) * h / 2 * BAUD
    assert _peak_hz(x, RATE) == pytest.approx(want, abs=1.0)


def test_render_tone_with_offset_carrier_error_and_clock():
    # The transmitter's tone sits at offset + carrier error + (h/2)·baud·(1 + ppm·1e-6).
    tx = fm.Tx(t_s=0.0, bits=np.ones(400, np.uint8), amplitude=0.5, offset_hz=137_000, carrier_error_hz=-1500,
               clock_ppm=80.0, h=1.0)
    x, truth = fm.render([tx], rate=RATE, n_samples=int(400 / BAUD * RATE) - 10, noise_rms=0.0, seed=1)
    assert truth == []  # raw bits without a sync index are not frames
    want = 137_000 - 1500 + 0.5 * BAUD * (1 + 80e-6)
    assert _peak_hz(x, RATE) == pytest.approx(want, abs=1.0)


def test_gaussian_plateau_and_pulse_shape():
    # GFSK (Murota & Hirade 1981, from memory): frequency pulse = NRZ rect ⊛ Gaussian with
    # σ = √(ln 2)/(2π·BT) symbols. The pulse shape is checked against scipy.stats.norm, and a long run
    # of one bit sits on the plateau h/2·baud.
    h, bt, sps = 1.0, 0.5, 64
    bits = np.r_[np.zeros(12), np.ones(12), np.zeros(12)].astype(np.uint8)
    x = fm.cpfsk(bits, sps=sps, h=h, pulse="gaussian", bt=bt)
    f_sym = np.angle(x[1:] * np.conj(x[:-1])) * sps / (2 * math.pi)  # cycles per symbol = × baud in Hz
    mid = slice(int(17.5 * sps), int(18.5 * sps))
    assert np.allclose(f_sym[mid], h / 2, rtol=1e-6)
    # isolated bit: frequency response of flipping symbol 18 equals h·g(t)·T, g the pulse, ∫g = 1
    other = bits.copy()
    other[18] ^= 1
    y = fm.cpfsk(other, sps=sps, h=h, pulse="gaussian", bt=bt)
    df = (np.angle(y[1:] * np.conj(y[:-1])) - np.angle(x[1:] * np.conj(x[:-1]))) * sps / (2 * math.pi)
    t = (np.arange(df.size) + 0.5) / sps - 18.5  # mid-point of each difference, symbols from the centre
    sigma = math.sqrt(math.log(2)) / (2 * math.pi * bt)
    g = stats.norm.cdf((t + 0.5) / sigma) - stats.norm.cdf((t - 0.5) / sigma)
    inside = np.abs(t) < 1.9
    # symbol 18 is a 1 (a = +1) flipped to a 0: the frequency drops by 2·(h/2)·g, g peaking at 1
    assert bits[18] == 1
    assert np.allclose(-df[inside], h * g[inside], atol=5e-4)
    # outside the truncated pulse (±2 symbols) the flip changes nothing
    assert np.allclose(df[np.abs(t) > 2.02], 0, atol=1e-9)


def test_frame_truth_time_and_bits():
    # The truth t_s is the sync word's first symbol at the transmitter's clock: a frequency
    # discriminator sampled at the middle of each symbol from there reads back the sync word.
    payload = bytes(range(24))
    tx = fm.Tx(t_s=0.0123, payload=payload, ebn0_db=20.0, offset_hz=137_000, carrier_error_hz=900, clock_ppm=-80)
    x, truth = fm.render([tx], rate=RATE, n_samples=int(0.05 * RATE), noise_rms=0.1, seed=3)
    (tr,) = truth
    assert tr["t_s"] == pytest.approx(0.0123 + 32 / (BAUD * (1 - 80e-6)))
    assert tr["payload_hex"] == payload.hex() and tr["carrier_hz"] == 137_900
    clean, _ = fm.render([fm.Tx(t_s=0.0123, payload=payload, amplitude=tr["amplitude"], offset_hz=137_000,
                                carrier_error_hz=900, clock_ppm=-80)], rate=RATE, n_samples=x.size, noise_rms=0, seed=3)
    base = clean * np.exp(-2j * math.pi * 137_900 * np.arange(x.size) / RATE)
    disc = np.angle(base[1:] * np.conj(base[:-1]))
    baud_tx = BAUD * (1 - 80e-6)
    idx = np.rint((tr["t_s"] + (np.arange(32 + 192 + 16) + 0.5) / baud_tx) * RATE).astype(int)
    got = (disc[idx] > 0).astype(np.uint8)
    assert _pack(got) == bytes.fromhex("9B3C57E1") + payload + binascii.crc_hqx(payload, 0xFFFF).to_bytes(2, "big")


# --- Eb/N0 and impairments ---------------------------------------------------------------------

def test_ebn0_measured_from_signal_and_noise():
    # REFERENCE §8: Eb/N0 = A²·(fs/Rb)/σ², σ² the total complex noise variance (σ²/2 per real part).
    ebn0_db, sigma = 14.0, 0.05
    txs = [fm.Tx(t_s=0.001, payload=bytes(24), ebn0_db=ebn0_db, offset_hz=137_000, clock_ppm=40.0)]
    n = 1 << 20
    x, truth = fm.render(txs, rate=RATE, n_samples=n, noise_rms=sigma, seed=7)
    amp = truth[0]["amplitude"]
    s, _ = fm.render([fm.Tx(t_s=0.001, payload=bytes(24), amplitude=amp, offset_hz=137_000, clock_ppm=40.0)],
                     rate=RATE, n_samples=n, noise_rms=0.0, seed=7)
    noise = x - s
    on = np.abs(s) > 0
    a2 = np.mean(np.abs(s[on]) ** 2)
    s2 = np.mean(np.abs(noise) ** 2)
    measured = 10 * math.log10(a2 * (RATE / BAUD) / s2)
    # sampling error of σ̂²: relative standard deviation 1/√n ≈ 0.001 → 0.004 dB; 0.03 dB is ~7 s.d.
    assert measured == pytest.approx(ebn0_db, abs=0.03)
    assert truth[0]["ebn0_db"] == pytest.approx(ebn0_db, abs=1e-9)
    assert np.var(noise.real) == pytest.approx(sigma ** 2 / 2, rel=0.01)
    assert np.var(noise.imag) == pytest.approx(sigma ** 2 / 2, rel=0.01)
    assert abs(np.mean(noise ** 2)) < 0.01 * sigma ** 2  # circular: E[n²] = 0


@pytest.mark.parametrize("g_db, phi_deg", [(1.0, 3.0), (1.0, 5.0)])
def test_image_rejection_ratio(g_db, phi_deg):
    # REFERENCE §11: Q' = g·(sin φ·I + cos φ·Q); IRR = (1 + 2g·cos φ + g²)/(1 − 2g·cos φ + g²),
    # about 24 dB at 1 dB / 3°. Measured from the spectrum of a tone at +f and its mirror at −f.
    f = 137_000.0
    tx = fm.Tx(t_s=0.0, bits=np.ones(2000, np.uint8), amplitude=0.4, offset_hz=f - BAUD / 2)
    n = 1 << 16
    x, _ = fm.render([tx], rate=RATE, n_samples=n, noise_rms=0.0, seed=1, iq_gain_db=g_db, iq_phase_deg=phi_deg)
    spec = np.abs(np.fft.fft(x * np.hanning(n))) ** 2
    freqs = np.fft.fftfreq(n, 1 / RATE)
    near = lambda fc: spec[np.abs(freqs - fc) < 3 * RATE / n].sum()
    irr_db = 10 * math.log10(near(f) / near(-f))
    g, phi = 10 ** (g_db / 20), math.radians(phi_deg)
    want = 10 * math.log10((1 + 2 * g * math.cos(phi) + g * g) / (1 - 2 * g * math.cos(phi) + g * g))
    assert irr_db == pytest.approx(want, abs=0.05)
    if phi_deg == 3.0:
        assert want == pytest.approx(24.0, abs=0.1)


def test_dc_and_neighbour_levels():
    # DC is a constant added by the receiver (REFERENCE §11); a neighbour's level is dB of amplitude
    # relative to the wanted transmission's.
    tx = fm.Tx(t_s=0.0, bits=np.ones(100, np.uint8), amplitude=0.01, offset_hz=137_000)
    nb = fm.Neighbour(offset_hz=-200_000, level_db=20.0)
    x, _ = fm.render([tx], rate=RATE, n_samples=8192, noise_rms=0.0, seed=2, dc=0.02 - 0.01j, neighbours=[nb])
    spec = np.fft.fft(x) / x.size
    freqs = np.fft.fftfreq(x.size, 1 / RATE)
    assert spec[0] == pytest.approx(0.02 - 0.01j, abs=2e-3)
    band = lambda lo, hi: np.sqrt(np.sum(np.abs(spec[(freqs > lo) & (freqs < hi)]) ** 2))
    # a constant-envelope signal's spectrum power equals its power A² (Parseval)
    assert band(-230_000, -170_000) == pytest.approx(0.1, rel=0.01)


# --- SigMF (REFERENCE §6) ------------------------------------------------------------------------

@pytest.mark.parametrize("datatype, dtype, decode", [
    ("cf32_le", "<f4", lambda r: r.astype(float)),
    ("ci16_le", "<i2", lambda r: r / 32767.0),
    ("cu8", np.uint8, lambda r: (r - 127.5) / 127.5),  # common practice: 127.5 offset, 127.5 per unit
])
def test_write_sigmf(tmp_path, datatype, dtype, decode):
    x = 0.4 * np.exp(2j * math.pi * np.arange(1000) / 37)
    meta_path = fm.write_sigmf(tmp_path / "buoy", x, rate=RATE, datatype=datatype, centre_hz=434.0e6,
                               datetime="2026-12-01T03:00:00Z")
    meta = json.loads(meta_path.read_text())
    # SigMF v1.2: global, captures and annotations required; core:datatype and core:version required.
    assert set(meta) == {"global", "captures", "annotations"}
    assert meta["global"] == {"core:datatype": datatype, "core:version": "1.2.0", "core:sample_rate": RATE}
    assert meta["captures"] == [{"core:sample_start": 0, "core:frequency": 434.0e6,
                                 "core:datetime": "2026-12-01T03:00:00Z"}]
    assert meta["annotations"] == []
    raw = np.fromfile(tmp_path / "buoy.sigmf-data", dtype=dtype)
    assert raw.size == 2 * x.size  # interleaved, I first
    back = decode(raw)
    y = back[0::2] + 1j * back[1::2]
    assert np.max(np.abs(y - x)) < {"cf32_le": 1e-7, "ci16_le": 1e-4, "cu8": 0.0079}[datatype]


def test_write_sigmf_clips_and_scales(tmp_path):
    x = np.array([2.0 - 2.0j, 0.001 + 0j])
    fm.write_sigmf(tmp_path / "c", x, rate=RATE, datatype="cu8")
    assert np.fromfile(tmp_path / "c.sigmf-data", np.uint8).tolist() == [255, 0, 128, 128]
    fm.write_sigmf(tmp_path / "s", x, rate=RATE, datatype="ci16_le", scale=0.5)
    assert np.fromfile(tmp_path / "s.sigmf-data", "<i2").tolist() == [32767, -32767, 16, 0]
