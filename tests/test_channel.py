"""The receiver's front end: DC removal, IQ-imbalance correction and the channel filter.

Signals here are plain numpy tones and circular Gaussian noise, with the receiver
impairments of shared/REFERENCE.md §11 applied by the test itself.
"""

import math

import numpy as np
import pytest
from scipy import signal as sps

from iqdemod.channel import STOPBAND_DB, channelize, flush_channel, front_end_report
from iqdemod.receiver import plan_receiver

from conftest import make_link

FS = 1_024_000


def run(plan, x):
    state = plan.initial_state()
    a, state = channelize(np.asarray(x, np.complex64), plan, state)
    b, state = flush_channel(plan, state)
    return np.concatenate([a, b]), state


def noise(n, rms, seed):
    rng = np.random.default_rng(seed)
    return rms / math.sqrt(2) * (rng.standard_normal(n) + 1j * rng.standard_normal(n))


def imbalance(x, gain_db, phase_deg):
    """REFERENCE §11: Q' = g·(sin φ·I + cos φ·Q)."""
    g, phi = 10 ** (gain_db / 20), math.radians(phase_deg)
    return x.real + 1j * g * (math.sin(phi) * x.real + math.cos(phi) * x.imag)


def irr_db(gain_db, phase_deg):
    """REFERENCE §11: IRR = (1 + 2g·cos φ + g²)/(1 − 2g·cos φ + g²)."""
    g, phi = 10 ** (gain_db / 20), math.radians(phase_deg)
    return 10 * math.log10((1 + 2 * g * math.cos(phi) + g * g) / (1 - 2 * g * math.cos(phi) + g * g))


def test_reference_image_rejection_value():
    # REFERENCE §11: at g = 1 dB, φ = 3° the image sits about 24 dB down
    assert irr_db(1.0, 3.0) == pytest.approx(24.0, abs=0.1)


@pytest.mark.parametrize("gain_db,phase_deg", [(1.0, 3.0), (1.0, 5.0), (-0.5, -2.0)])
def test_imbalance_is_measured_from_the_moments(gain_db, phase_deg):
    plan = plan_receiver(make_link(), FS).tuner
    x = imbalance(noise(400_000, 0.1, 1), gain_db, phase_deg) + (0.03 - 0.02j)
    _, state = run(plan, x)
    fe = front_end_report(state.moments)
    assert fe.iq_gain_db == pytest.approx(gain_db, abs=0.03)
    assert fe.iq_phase_deg == pytest.approx(phase_deg, abs=0.2)
    assert fe.image_rejection_db == pytest.approx(irr_db(gain_db, phase_deg), abs=0.3)
    assert fe.image_rejection_after_db > 45
    assert fe.dc_dbfs == pytest.approx(20 * math.log10(abs(0.03 - 0.02j)), abs=0.05)


def test_the_mirror_of_a_strong_signal_is_removed():
    """A tone 20 dB over the wanted level at −137 kHz; 1 dB / 3° puts its image at +137 kHz, 24 dB down."""
    plan = plan_receiver(make_link(), FS).tuner
    n = 600_000
    t = np.arange(n) / FS
    strong = 1.0 * np.exp(-2j * np.pi * (137_000 + 2_000) * t)  # its image lands 2 kHz above our centre
    x = imbalance(strong + noise(n, 0.01, 2), 1.0, 3.0)
    y, _ = run(plan, x)
    y = y[200:-200]
    f = np.fft.fftfreq(len(y), 1 / plan.output_rate_hz)
    spec = np.abs(np.fft.fft(y * np.hanning(len(y)))) / np.sum(np.hanning(len(y)))
    image = spec[np.argmin(np.abs(f - 2_000))]
    # without correction the image would be at −24 dB; corrected it must be 50 dB down at least
    assert 20 * math.log10(image / 1.0) < -50


def test_dc_ten_times_the_signal_on_the_centre_is_removed():
    link = make_link(offset=0.0)
    plan = plan_receiver(link, FS).tuner
    n = 500_000
    t = np.arange(n) / FS
    tone = 0.02 * np.exp(2j * np.pi * 4_800 * t)
    dc = 0.2 * np.exp(0.7j)  # 10 × the signal's amplitude
    y, state = run(plan, tone + dc + noise(n, 0.002, 3))
    y = y[2000:-200]
    # what is left at 0 Hz, against the tone at 4.8 kHz
    residual_dc = abs(np.mean(y))
    assert 20 * math.log10(residual_dc / 0.2) < -50
    assert np.mean(np.abs(y * np.exp(-2j * np.pi * 4_800 * np.arange(len(y)) / plan.output_rate_hz))) \
        == pytest.approx(0.02, rel=0.05)
    assert front_end_report(state.moments).dc_dbfs == pytest.approx(20 * math.log10(0.2), abs=0.05)


def test_channel_filter_follows_carson_and_stops_neighbours():
    """Pass band ⊇ Carson's bandwidth (shift + 2·baud, REFERENCE §11) plus the pull-in; stop band ≥ 60 dB."""
    link = make_link()
    plan = plan_receiver(link, FS).tuner
    sig = link.signal
    assert plan.passband_hz >= sig.shift_hz / 2 + sig.baud + sig.pull_in_hz - 1e-6
    assert plan.stopband_hz <= plan.passband_hz + sig.baud / 2 + 1e-6
    # the taps' response, evaluated by scipy.signal.freqz (an outside reference)
    f, h = sps.freqz(plan.taps, worN=np.linspace(0, FS / 2, 20_001), fs=FS)
    mag_db = 20 * np.log10(np.abs(h) + 1e-300)
    assert np.all(np.abs(mag_db[f <= plan.passband_hz]) < 0.01)
    assert np.max(mag_db[f >= plan.stopband_hz]) < -min(60.0, STOPBAND_DB - 1)
    # and what channelize actually does to a neighbour just past the stop-band edge
    n = 300_000
    t = np.arange(n) / FS
    for away in (plan.stopband_hz + 500, 40_000.0, 100_000.0):
        x = np.exp(2j * np.pi * (137_000 + away) * t)
        y, _ = run(plan, x)
        assert 20 * math.log10(np.sqrt(np.mean(np.abs(y[200:-200]) ** 2))) < -60


def test_noise_bandwidth_ratio_is_exact_for_the_new_filter():
    """κ from the taps against white noise through the receiver's own channel and correlators."""
    from iqdemod.correlate import correlate, tone_sums

    plan = plan_receiver(make_link(), FS)
    y, _ = run(plan.tuner, noise(2_000_000, 1.0, 5))
    y = y[500:-500].astype(np.complex128)
    sums = tone_sums(y, plan.rate_hz, plan.tones_hz)
    starts = np.arange(0, len(y) - 2 * plan.period, plan.period * 1.37)  # many fractional starts
    z = correlate(sums, starts, plan.period)
    measured = np.mean(np.abs(z) ** 2)
    # the ideal integrate-and-dump over the full band sees σ²/(samples per symbol at the input)
    ideal = 1.0 / (FS / plan.link.signal.baud)
    assert measured / ideal == pytest.approx(plan.noise_bandwidth_ratio, rel=0.02)
