"""The survey tells a Gaussian pulse from a rectangular one by the bursts' spectrum, and suggests a BT (issue 15).

Captures come from the independent test modulator (tests/fsk_modulator.py), which shares no code with
iqdemod; the profile the survey writes must decode every frame. The theoretical spectra the survey
compares with are checked against the closed-form spectrum of MSK.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from click.testing import CliRunner
from scipy import signal

import fsk_modulator as ref
import iqdemod
from iqdemod import survey as S
from iqdemod.errors import IqdemodError
from iqdemod.profile import link_to_toml, load_link
from iqdemod_cli.main import main

RATE, BAUD, OFFSET, NOISE = 256_000, 9600, 40_000, 0.05
SYNC = 0x9B3C57E1

CASES = {
    "rect, h 1": dict(h=1.0, pulse="rect"),
    "Gaussian BT 0.5, h 0.5": dict(h=0.5, pulse="gaussian", bt=0.5),
    "Gaussian BT 0.3, h 1": dict(h=1.0, pulse="gaussian", bt=0.3),
}


def _capture(path, *, h, pulse, bt=0.5, ebn0_db=16.0, frames=10, seed=1):
    """Bursts of 24-byte frames (CRC-16/IBM-3740) 4–8 ms apart, each with its own small carrier error."""
    rng = np.random.default_rng(seed)
    txs, payloads, t = [], [], 0.004
    for _ in range(frames):
        payload = bytes(rng.integers(0, 256, 24, dtype=np.uint8))
        tx = ref.Tx(t_s=t, payload=payload, ebn0_db=ebn0_db, offset_hz=OFFSET, baud=BAUD, h=h, pulse=pulse, bt=bt,
                    carrier_error_hz=float(rng.uniform(-200, 200)),
                    framing=dict(sync=SYNC, length="fixed", crc="CRC-16/IBM-3740"))
        txs.append(tx)
        payloads.append(payload)
        t += tx.symbols()[0].size / BAUD + float(rng.uniform(0.004, 0.008))
    x, _ = ref.render(txs, rate=RATE, n_samples=int((t + 0.005) * RATE), noise_rms=NOISE, seed=seed)
    return ref.write_sigmf(path, x, rate=RATE), payloads


@pytest.fixture(scope="module")
def captures(tmp_path_factory):
    d = tmp_path_factory.mktemp("pulse")
    return {name: _capture(d / f"buoys{i}", **kw) for i, (name, kw) in enumerate(CASES.items())}


def _bt_steps(found: float, sent: float) -> int:
    grid = list(S.PULSE_BTS)
    return abs(grid.index(found) - int(np.argmin([abs(b - sent) for b in grid])))


@pytest.mark.parametrize("name", list(CASES))
def test_survey_calls_the_pulse_and_its_profile_decodes(captures, tmp_path, name):
    sent = CASES[name]
    meta, payloads = captures[name]
    with iqdemod.open_capture(meta) as cap:
        (sig,) = S.survey(cap).signals
    assert sig.h == pytest.approx(sent["h"], rel=0.05)
    assert sig.pulse == sent["pulse"], (sig.pulse, sig.bt)
    if sent["pulse"] == "gaussian":
        assert _bt_steps(sig.bt, sent["bt"]) <= 1, sig.bt
    else:
        assert sig.bt is None
    d = sig.as_dict()
    assert d["pulse"] == sig.pulse and d["bt"] == sig.bt and "beyond_carson_db" in d
    # the profile it writes reads back with the pulse, and decodes every frame
    profile = tmp_path / "suggested.toml"
    profile.write_text(link_to_toml(sig.to_link()))
    link = load_link(profile)
    assert link.signal.pulse == sent["pulse"]
    if sent["pulse"] == "gaussian":
        assert link.signal.bt == sig.bt and link.signal.multi_symbol
    frames = list(iqdemod.decode(meta, link))
    assert [f.payload for f in frames if f.crc_ok] == payloads
    assert all(f.crc_ok for f in frames)


def test_spectrum_falls_faster_beyond_carson_with_a_gaussian_pulse(captures):
    # Carson, Proc. IRE 10, 1922: shift + 2·baud holds nearly all the power of rect FSK (common
    # practice: about 98 %); a Gaussian pulse leaves far less outside
    shares = {}
    for name in ("rect, h 1", "Gaussian BT 0.3, h 1"):
        with iqdemod.open_capture(captures[name][0]) as cap:
            (sig,) = S.survey(cap, framing=False).signals
        shares[name] = sig.beyond_carson_db
    assert -30 < shares["rect, h 1"] < -13
    assert shares["Gaussian BT 0.3, h 1"] is None or shares["Gaussian BT 0.3, h 1"] < shares["rect, h 1"] - 8


def test_level_is_the_transmitted_power(captures):
    # the test modulator's amplitude for Eb/N0 16 dB over its noise (REFERENCE §8: A²·(fs/Rb)/σ² = Eb/N0);
    # a keyed tone of amplitude A has power A², so its level is 20·log10 A dBFS
    level = 20 * math.log10(ref.amplitude_for_ebn0(16.0, noise_rms=NOISE, rate=RATE, baud=BAUD))
    for name in CASES:
        with iqdemod.open_capture(captures[name][0]) as cap:
            (sig,) = S.survey(cap, framing=False).signals
        assert sig.level_dbfs == pytest.approx(level, abs=1.0), name
        assert sig.ebn0_db == pytest.approx(16.0, abs=1.0), name


def test_theoretical_spectrum_is_the_closed_form_msk_spectrum():
    # MSK (rect pulse, h = 0.5): S(f) = (16/π²)·cos²(2πfT)/(1 − 16f²T²)², T = 1, unit power
    # [book] Proakis, Digital Communications, the CPFSK/MSK spectrum; Pasupathy, IEEE Commun. Mag. 17(4),
    # 1979 (from memory). The survey's spectrum is a Welch average with 8-symbol Hann segments, so the
    # closed form is smoothed by the same window's kernel before comparing.
    f_sim, p_sim = S.cpfsk_spectrum(0.5, "rect", 0.5)
    nper = len(f_sim)
    sps = nper * (f_sim[1] - f_sim[0])  # the simulation's samples per symbol: its spectrum spans ±sps/2 baud
    fine = np.linspace(-sps / 2, sps / 2, 64 * nper, endpoint=False)
    df = fine[1] - fine[0]
    with np.errstate(divide="ignore", invalid="ignore"):
        msk = 16 / np.pi**2 * np.cos(2 * np.pi * fine) ** 2 / (1 - 16 * fine**2) ** 2
    msk[np.isclose(np.abs(fine), 0.25)] = 1.0  # the removable point f = ±¼: cos(2πf)/(1 − 16f²) → π/4 there
    assert np.all(np.isfinite(msk)) and np.sum(msk) * df == pytest.approx(1.0, abs=2e-3)
    kernel = np.abs(np.fft.fft(signal.get_window("hann", nper), 64 * nper)) ** 2
    kernel /= np.sum(kernel) * df  # unit area: the mean periodogram is S convolved with it
    # circular convolution on the fine grid (the sampled spectrum is periodic, period sps)
    smooth = np.real(np.fft.ifft(np.fft.fft(np.fft.ifftshift(msk)) * np.fft.fft(kernel))) * df
    smooth = np.fft.fftshift(smooth)
    expected = np.interp(f_sim, fine, smooth)
    main_lobe = np.abs(f_sim) <= 1.0
    # 2 048 random bits, 511 segments: about ±5 % a bin, so up to 12 % over the 17 bins of the main lobe
    np.testing.assert_allclose(p_sim[main_lobe], expected[main_lobe], rtol=0.12)
    # the tails to 4 baud, where the survey's bands end, 40 dB down: within 1 dB (the simulation samples
    # in step with the symbols, which lifts the far tails a little; see survey._THEORY_SPS)
    tails = (np.abs(f_sim) > 1.0) & (np.abs(f_sim) < 4.0)
    assert np.all(np.abs(10 * np.log10(p_sim[tails] / expected[tails])) < 1.0)


def test_result_fields_validate_and_the_table_shows_the_pulse(captures, tmp_path):
    meta, _ = captures["Gaussian BT 0.5, h 0.5"]
    with iqdemod.open_capture(meta) as cap:
        (sig,) = S.survey(cap, framing=False).signals
    base = dict(offset_hz=0.0, tone_low_hz=-1.0, tone_high_hz=1.0, baud=2.0, bursts=1,
                burst_lengths_s=S.BurstLengths.of([0.1]), ebn0_db=10.0, level_dbfs=-20.0, band_low_hz=-3.0,
                band_high_hz=3.0)
    for bad in (dict(pulse="sinc"), dict(pulse="gaussian"), dict(pulse="rect", bt=0.5),
                dict(pulse="gaussian", bt=5.0)):
        with pytest.raises(IqdemodError):
            S.SignalFound(**base, **bad)
    assert S.SignalFound(**base).to_link().signal.pulse == "rect"  # not measured: the default
    run = lambda *a: CliRunner().invoke(main, [str(v) for v in a], catch_exceptions=False)
    res = run("survey", meta, "-q")
    head, row = res.stdout.splitlines()
    assert "pulse/bt" in head.split() and f"gaussian/{sig.bt:g}" in row.split()
    doc = json.loads(run("survey", meta, "--json", "-q").stdout)
    assert doc["signals"][0]["pulse"] == "gaussian" and doc["signals"][0]["bt"] == sig.bt
    toml = tmp_path / "s.toml"
    assert run("survey", meta, "--write-link", toml, "-q").exit_code == 0
    assert load_link(toml).signal.pulse == "gaussian" and math.isclose(load_link(toml).signal.bt, sig.bt)
