"""Tests of the multi-symbol non-coherent detector (iqdemod.sequence), its Eb/N0 estimators
(iqdemod.sequence_estimate) and its prediction (iqdemod.sequence_theory).

Every capture comes from the independent test modulator ``tests/fsk_modulator.py`` (CPFSK/GFSK
from the textbook definitions), never from the project's own generator. Noise follows the Eb/N0
definition of REFERENCE §8 with a unit-amplitude signal: Eb/N0 = sps/σ², σ² the total complex
noise variance per sample. Timing is known: the modulator puts sample n at n/sps symbols, so
symbol k starts at position k·sps + ½ in the receiver's convention (sample n covers [n, n + 1)).
The full Monte Carlo figures (more bits, N = 7, costs) are printed by checks/sequence_detector.py.
"""

from __future__ import annotations

import doctest
import math

import numpy as np
import pytest
from scipy import signal, stats

from fsk_modulator import cpfsk
from iqdemod import sequence, sequence_estimate, sequence_plan, sequence_theory
from iqdemod.correlate import correlate, tone_sums
from iqdemod.errors import LinkError
from iqdemod.predict import pb_noncoherent
from iqdemod.sequence import detect, frequency_pulse, phase_trajectory, plan_sequence
from iqdemod.sequence_estimate import estimate_sequence_data_aided, estimate_sequence_decision_directed
from iqdemod.sequence_theory import sequence_ber

SPS = 8.0
GUARD = 8  # symbols at each end left out of the error counts (their windows shrink)


def _noise(n: int, ebn0_db: float, sps: float, rng) -> np.ndarray:
    """Complex white noise giving `ebn0_db` for a unit-amplitude signal (REFERENCE §8)."""
    sigma2 = sps / 10 ** (ebn0_db / 10)
    return math.sqrt(sigma2 / 2) * (rng.standard_normal(n) + 1j * rng.standard_normal(n))


def _starts(n_symbols: int, period: float) -> np.ndarray:
    return np.arange(n_symbols) * period + 0.5


def _errors(decided: np.ndarray, bits: np.ndarray) -> tuple[int, int]:
    inner = slice(GUARD, len(bits) - GUARD)
    return int(np.sum(decided[inner] != bits[inner])), len(bits) - 2 * GUARD


def _ci(k: int, n: int, confidence: float = 0.95) -> tuple[float, float]:
    """Clopper–Pearson exact interval (REFERENCE §7: Clopper & Pearson, Biometrika 26, 1934)."""
    ci = stats.binomtest(k, n).proportion_ci(confidence, method="exact")
    return ci.low, ci.high


def _upper_one_sided(k: int, n: int) -> float:
    """One-sided 95 % Clopper–Pearson upper limit (REFERENCE §7)."""
    return stats.binomtest(k, n, alternative="less").proportion_ci(0.95, method="exact").high


def _ber(x0, bits, plan, ebn0_db, seed, *, sps=SPS, period=None, repeats=1):
    """Bit errors of the detector over `repeats` noise draws on one waveform (fresh noise each)."""
    rng = np.random.default_rng(seed)
    period = sps if period is None else period
    starts = _starts(len(bits), period)
    k = n = 0
    for _ in range(repeats):
        x = x0 * np.exp(2j * np.pi * rng.uniform()) + _noise(len(x0), ebn0_db, sps, rng)
        e, m = _errors(detect(x, starts, period, plan).bits, bits)
        k, n = k + e, n + m
    return k, n


@pytest.fixture(scope="module")
def gfsk05():
    """GFSK BT 0.5, h 0.5 (the usual sub-GHz transceiver setting, REFERENCE §12), 30 000 random bits."""
    bits = np.random.default_rng(1205).integers(0, 2, 30_000 + 2 * GUARD)
    return bits, cpfsk(bits, sps=SPS, h=0.5, pulse="gaussian", bt=0.5)


@pytest.fixture(scope="module")
def rect1():
    """Rectangular pulses, h = 1 (orthogonal tones), 100 000 random bits."""
    bits = np.random.default_rng(1101).integers(0, 2, 100_000 + 2 * GUARD)
    return bits, cpfsk(bits, sps=SPS, h=1.0)


def test_doctests():
    assert doctest.testmod(sequence).failed == 0
    assert doctest.testmod(sequence_estimate).failed == 0
    assert doctest.testmod(sequence_theory).failed == 0


# ----------------------------------------------------------------------------- plan and pulse


@pytest.mark.parametrize("kw", [
    dict(h=0.0), dict(h=float("nan")), dict(h=1.0, pulse="sinc"), dict(h=0.5, pulse="gaussian", bt=0.01),
    dict(h=1.0, n_symbols=4), dict(h=1.0, n_symbols=0), dict(h=1.0, n_symbols=11), dict(h=1.0, n_symbols=True),
    dict(h=1.0, span_symbols=3), dict(h=0.5, pulse="gaussian", span_symbols=7, n_symbols=9),
    dict(h=1.0, phases=0),
])
def test_bad_link_parameters_raise_link_error(kw):
    with pytest.raises(LinkError):
        plan_sequence(**kw)


def test_automatic_span_keeps_the_gaussian_tails():
    # σ = √(ln 2)/(2π·BT) symbols (Murota & Hirade 1981, from memory): BT 0.5 → 0.265, BT 0.3 → 0.442;
    # the shortest odd span with < 0.1 % of the pulse cut off is 3 and 5 symbols.
    assert plan_sequence(h=0.5, pulse="gaussian", bt=0.5).span_symbols == 3
    assert plan_sequence(h=1.0, pulse="gaussian", bt=0.3).span_symbols == 5
    assert plan_sequence(h=1.0).span_symbols == 1


def test_gaussian_frequency_pulse_is_rect_convolved_with_gaussian():
    # The GFSK frequency pulse is a one-symbol rectangle convolved with a Gaussian of
    # σ = √(ln 2)/(2π·BT) symbols (Murota & Hirade, IEEE Trans. Commun. 29(7), 1981 — from memory),
    # truncated and renormalised to area ½. Built here by numerical convolution (scipy.signal) of a
    # sampled rectangle with scipy.stats.norm's density.
    plan = plan_sequence(h=0.5, pulse="gaussian", bt=0.5, span_symbols=5)
    dt = 1e-3
    t = np.arange(-4, 4 + dt / 2, dt)
    rect = np.where(np.abs(t) < 0.5, 0.5, 0.0)
    gauss = stats.norm.pdf(t, scale=math.sqrt(math.log(2)) / (2 * math.pi * 0.5)) * dt
    ref = signal.fftconvolve(rect, gauss, mode="same")
    inside = np.abs(t) <= 2.5
    ref = np.where(inside, ref, 0.0)
    ref *= 0.5 / (ref.sum() * dt)  # renormalised: each symbol turns the phase by π·h
    g = frequency_pulse(t, plan)
    assert np.sum(g) * dt == pytest.approx(0.5, abs=1e-4)
    assert np.max(np.abs(g - ref)) < 2e-3 * ref.max()


@pytest.mark.parametrize("bt", [0.1, 0.3, 0.5, 1.0])
def test_tabled_phase_pulse_is_within_the_interpolation_remainder(bt):
    # Linear interpolation between points Δ apart errs by at most Δ²/8·max|f''| (the interpolation
    # error theorem; e.g. Burden & Faires, Numerical Analysis, ch. 3). Here f = q, f'' = g', and
    # max|g'| is taken numerically from frequency_pulse (a central difference), not from the formula
    # the code documents; the table must stay inside the remainder it promises.
    plan = plan_sequence(h=0.5, pulse="gaussian", bt=bt)
    half = plan.span_symbols / 2.0
    t = np.random.default_rng(7).uniform(-half - 1.0, half + 1.0, 100_000)
    dt = 1e-4
    grid = np.arange(-half + dt, half - dt, dt)
    g_slope = np.max(np.abs(np.diff(frequency_pulse(grid, plan)))) / dt
    step = 1.0 / sequence_plan.Q_TABLE_STEPS
    bound = step**2 / 8.0 * g_slope
    assert np.max(np.abs(plan.q_tabled(t) - plan.q(t))) <= 1.01 * bound
    assert bound < 2e-8 * max(bt, 0.5)  # a phase error of well under 1e-6 rad at h ≤ 1
    assert plan.q_tabled([-half - 1.0, half + 1.0]).tolist() == [0.0, 0.5]


def test_phase_trajectory_matches_the_independent_modulator():
    # Same pulse definition (span 4, as the modulator's default) → the same waveform, CPM definition
    # φ(t) = 2πh·Σ a_i q(t − iT − T/2) (Proakis, Digital Communications, CPM section [book]).
    bits = np.random.default_rng(3).integers(0, 2, 300)
    for pulse, bt, h in (("rect", 0.5, 1.0), ("gaussian", 0.5, 0.5), ("gaussian", 0.3, 1.0)):
        plan = plan_sequence(h=h, pulse=pulse, bt=bt, span_symbols=None if pulse == "rect" else 4)
        x = cpfsk(bits, sps=9.3, h=h, pulse=pulse, bt=bt, span=4)
        ours = np.exp(1j * phase_trajectory(bits, np.arange(len(x)) / 9.3, plan))
        assert np.max(np.abs(x - ours)) < 1e-9


# ----------------------------------------------------------------------------- detection, noise free


def test_noise_free_right_hypothesis_scores_one_and_every_bit_is_right():
    # Normalisation: a noise-free unit-amplitude signal gives metric 1 for the right hypothesis, the
    # scale of the one-symbol |z|² (a unit tone gives |z|² = 1, iqdemod.correlate).
    bits = np.random.default_rng(4).integers(0, 2, 400)
    for pulse, bt, h in (("rect", 0.5, 1.0), ("gaussian", 0.5, 0.5), ("gaussian", 0.3, 1.0)):
        x = cpfsk(bits, sps=9.3, h=h, pulse=pulse, bt=bt) * np.exp(0.7j)
        for n_sym in (1, 3, 5):
            plan = plan_sequence(h=h, pulse=pulse, bt=bt, n_symbols=n_sym)
            out = detect(x, _starts(len(bits), 9.3), 9.3, plan)
            right = np.where(bits == 1, out.m1, out.m0)
            if pulse == "rect" or n_sym > 1:
                assert np.array_equal(out.bits, bits)
            assert np.all(np.abs(right[GUARD:-GUARD] - 1) < 1e-4)
            assert np.all(right <= 1 + 1e-9)  # Cauchy–Schwarz: no hypothesis beats a perfect match


def test_edge_symbols_get_decisions_from_a_shrunken_window():
    bits = np.array([1, 0, 0, 1, 1, 0, 1, 0, 0])
    plan = plan_sequence(h=0.5, pulse="gaussian", bt=0.5, n_symbols=7)
    x = cpfsk(bits, sps=SPS, h=0.5, pulse="gaussian", bt=0.5)
    out = detect(x, _starts(len(bits), SPS), SPS, plan)
    assert out.bits.tolist() == bits.tolist()
    assert out.window_symbols.tolist() == [4, 5, 6, 7, 7, 7, 6, 5, 4]


def test_inverted_tones_and_a_carrier_offset_folded_in():
    bits = np.random.default_rng(6).integers(0, 2, 200)
    plan = plan_sequence(h=0.5, pulse="gaussian", bt=0.5, n_symbols=3, invert=True)
    # bit 1 on the lower tone: the conjugate waveform; plus a carrier error of 300 Hz at 9600 Bd, 8 sps
    rate = 9600 * SPS
    x = np.conj(cpfsk(bits, sps=SPS, h=0.5, pulse="gaussian", bt=0.5)) * np.exp(2j * np.pi * 300 / rate * np.arange(len(bits) * 8))
    out = detect(x, _starts(len(bits), SPS), SPS, plan, offset_hz=300.0, rate_hz=rate)
    assert out.bits.tolist() == bits.tolist()
    assert np.min(np.maximum(out.m0, out.m1)[GUARD:-GUARD]) > 1 - 1e-4
    with pytest.raises(LinkError):
        detect(x, _starts(len(bits), SPS), SPS, plan, offset_hz=300.0)  # no rate to turn Hz into cycles


def test_polyphase_bank_agrees_with_exact_templates():
    # The bank evaluates each slot's templates at its offset rounded to 1/F sample, so every template
    # sample's phase is off by at most ε = π·h/(2F·period) rad (the phase moves at most π·h per
    # symbol: Σ g ≤ ½). Hence |⟨r, w·e^{jε}⟩ − ⟨r, w⟩| ≤ ε·Σ|r| for every hypothesis, and, the
    # maximum being 1-Lipschitz, |√m_bank − √m_exact| ≤ ε·(mean |r| over the window).
    rng = np.random.default_rng(7)
    n = 600
    period = 8.37 / (1 + 100e-6)
    bits = rng.integers(0, 2, n)
    x = cpfsk(bits, sps=period, h=1.0, pulse="gaussian", bt=0.3)
    x = x + _noise(len(x), 8.0, period, rng)
    plan = plan_sequence(h=1.0, pulse="gaussian", bt=0.3, n_symbols=3)
    starts = _starts(n, period)
    a = detect(x, starts, period, plan)
    b = detect(x, starts, period, plan, exact=True)
    eps = np.pi * plan.h / (2 * plan.phases * period)
    csum = np.concatenate([[0.0], np.cumsum(np.abs(x))])
    lo = np.clip(np.floor(starts - period).astype(int), 0, len(x))  # window of slots m − 1 … m + 1
    hi = np.clip(np.ceil(starts + 2 * period).astype(int), 0, len(x))
    bound = eps * (csum[hi] - csum[lo]) / np.maximum(hi - lo - 2, 1)  # ≥ the window's mean |r|
    for ma, mb in ((a.m0, b.m0), (a.m1, b.m1)):
        assert np.all(np.abs(np.sqrt(ma) - np.sqrt(mb)) <= bound)
    assert np.mean(a.bits != b.bits) < 2e-3


# ----------------------------------------------------------------------------- (a) N = 1, rect, h = 1


def test_one_symbol_rect_is_the_square_law_receiver(rect1):
    # With N = 1 and rectangular pulses the detector is the quadrature-correlator square-law receiver
    # (REFERENCE §1, Proakis ch. 4); compared with the project's own correlator bank on whole-sample windows.
    bits, x0 = rect1
    n = 2000
    rng = np.random.default_rng(8)
    x = x0[: int(n * SPS)] + _noise(int(n * SPS), 10.0, SPS, rng)
    starts = np.arange(n) * SPS  # whole-sample starts: both receivers use the same samples
    out = detect(x, starts, SPS, plan_sequence(h=1.0, n_symbols=1))
    z = correlate(tone_sums(x, SPS, (-0.5, 0.5)), starts[:-1], SPS)  # the last window ends at the buffer's end
    np.testing.assert_allclose(out.m0[:-1], np.abs(z[:, 0]) ** 2, rtol=1e-9)
    np.testing.assert_allclose(out.m1[:-1], np.abs(z[:, 1]) ** 2, rtol=1e-9)


def test_one_symbol_ber_matches_half_exp(rect1):
    # REFERENCE §1 [book] (Proakis ch. 4; Sklar ch. 4): Pb = ½·exp(−Eb/2N0), 3.3690e-3 at 10 dB.
    bits, x0 = rect1
    n = 60_000
    k, m = _ber(x0[: int((n + 2 * GUARD) * SPS)], bits[: n + 2 * GUARD], plan_sequence(h=1.0, n_symbols=1), 10.0, 9)
    lo, hi = _ci(k, m, 0.99)
    assert lo <= pb_noncoherent(10.0) <= hi
    assert sequence_ber(10.0, h=1.0, n_symbols=1) == pytest.approx(3.3690e-3, rel=1e-4)


# ----------------------------------------------------------------------------- (b) N = 3, rect, h = 1


def test_three_symbol_window_beats_one_symbol_rect_h1(rect1):
    # REFERENCE §12 [derived: a prototype's Monte Carlo]: at 11 dB 2.9e-4 (3-symbol window) against
    # 1.4e-3 (one symbol). Same captures, same noise for both receivers.
    bits, x0 = rect1
    rng = np.random.default_rng(11)
    x = x0 * np.exp(2j * np.pi * rng.uniform()) + _noise(len(x0), 11.0, SPS, rng)
    starts = _starts(len(bits), SPS)
    k1, n = _errors(detect(x, starts, SPS, plan_sequence(h=1.0, n_symbols=1)).bits, bits)
    k3, _ = _errors(detect(x, starts, SPS, plan_sequence(h=1.0, n_symbols=3)).bits, bits)
    # better, significantly: under "no better", k3 given k1 + k3 would be Binomial(k1 + k3, ½)
    assert k3 < k1
    assert stats.binomtest(k3, k1 + k3, 0.5, alternative="less").pvalue < 1e-3
    # not worse than the prototype's figure (its 95 % interval from our count reaches down to it)
    assert _ci(k3, n)[0] <= 2.9e-4
    # the one-symbol count agrees with ½·exp(−Eb/2N0) = 9.2e-4 (REFERENCE §1)
    lo, hi = _ci(k1, n, 0.99)
    assert lo <= pb_noncoherent(10 ** 1.1) <= hi


# ----------------------------------------------------------------------------- (c) GFSK


def test_gfsk_bt05_h05_five_symbols(gfsk05):
    # REFERENCE §12 [derived]: GFSK BT 0.5, h 0.5, 5-symbol window: 4.8e-5 at 12 dB, 3.2e-4 at 10 dB.
    # Required here: Pb ≤ 1e-4 at 12 dB and ≤ 1e-3 at 10 dB, shown by the one-sided 95 %
    # Clopper–Pearson upper limit (REFERENCE §7) over 60 000 bits.
    bits, x0 = gfsk05
    plan = plan_sequence(h=0.5, pulse="gaussian", bt=0.5, n_symbols=5)
    k10, n10 = _ber(x0, bits, plan, 10.0, 1010, repeats=2)
    k12, n12 = _ber(x0, bits, plan, 12.0, 1212, repeats=2)
    assert _upper_one_sided(k10, n10) <= 1e-3
    assert _upper_one_sided(k12, n12) <= 1e-4


def test_gfsk_bt03_h1_three_symbols_error_free_at_14_db():
    # REFERENCE §12 [derived]: GFSK BT 0.3, h 1, 3-symbol window at 14 dB: no error in 6 240 bits.
    bits = np.random.default_rng(1403).integers(0, 2, 6240 + 2 * GUARD)
    x0 = cpfsk(bits, sps=SPS, h=1.0, pulse="gaussian", bt=0.3)
    k, n = _ber(x0, bits, plan_sequence(h=1.0, pulse="gaussian", bt=0.3, n_symbols=3), 14.0, 14)
    assert n == 6240 and k == 0


# ----------------------------------------------------------------------------- (d) theory


def test_union_bound_is_tight_for_rect_h1(rect1):
    # Rect h = 1, 3-symbol window at 9 dB: the union bound over competitors with the other middle bit
    # (REFERENCE §2 pairwise terms, Stein 1964) is tight here; it must sit in the Monte Carlo's
    # 99 % Clopper–Pearson interval.
    bits, x0 = rect1
    k, n = _ber(x0[: int(40_016 * SPS)], bits[:40_016], plan_sequence(h=1.0, n_symbols=3), 9.0, 99)
    lo, hi = _ci(k, n, 0.99)
    assert lo <= sequence_ber(9.0, h=1.0, n_symbols=3, bound="union") <= hi


def test_theory_against_monte_carlo_gfsk(gfsk05):
    # GFSK BT 0.5, h 0.5, 3-symbol window at 9 dB (frame error rate of 208-bit frames ≈ 50 %).
    # The union bound must stay above the measurement (it is an upper bound) and is loose here
    # (about 4× in checks/sequence_detector.py); the pruned sum is the estimate and must agree
    # within a factor 0.7–2 (measured 1.2–1.6 in the check script's 5–40 % FER range).
    bits, x0 = gfsk05
    kw = dict(h=0.5, pulse="gaussian", bt=0.5, n_symbols=3)
    k, n = _ber(x0, bits, plan_sequence(**kw), 9.0, 909)
    lo, hi = _ci(k, n, 0.99)
    union = sequence_ber(9.0, bound="union", **kw)
    pruned = sequence_ber(9.0, bound="pruned", **kw)
    assert union >= lo
    assert union > 2 * hi  # loose: it counts near-identical competitors separately
    assert 0.7 <= pruned / (k / n) <= 2.0


# ----------------------------------------------------------------------------- (e) Eb/N0 estimators


@pytest.mark.parametrize("ebn0_db", [8.0, 11.0, 14.0, 17.0, 20.0])
def test_data_aided_estimate_within_0_3_db(gfsk05, ebn0_db):
    # Truth from REFERENCE §8 (Eb/N0 = A²·(fs/Rb)/σ², A = 1 here). A residual carrier of 0.5 % of
    # the baud and a random phase are left in: the fit per sub-window absorbs them.
    bits, x0 = gfsk05
    n = 3000
    rng = np.random.default_rng(int(ebn0_db * 10))
    x = x0[: int(n * SPS)] * np.exp(1j * (rng.uniform(0, 2 * np.pi) + 2 * np.pi * 0.005 / SPS * np.arange(int(n * SPS))))
    x = x + _noise(len(x), ebn0_db, SPS, rng)
    plan = plan_sequence(h=0.5, pulse="gaussian", bt=0.5, n_symbols=5)
    starts = _starts(n, SPS)
    da = estimate_sequence_data_aided(x, starts, SPS, bits[:n], plan)
    assert da.method == "data-aided" and da.n_symbols == n - 2 * plan.context
    assert abs(da.ebn0_db - ebn0_db) < 0.3
    assert da.ci90_db[0] < da.ebn0_db < da.ci90_db[1]
    dd = estimate_sequence_decision_directed(x, starts, SPS, plan)
    assert dd.method == "decision-directed-raw"
    assert abs(dd.ebn0_db - ebn0_db) < 0.3


def test_estimate_with_noise_filtered_like_the_tuner(gfsk05):
    # The receiver's tuner low-passes the noise before the bursts are demodulated. Model: white
    # noise of variance σ² through a unit-DC-gain FIR (scipy.signal.firwin) whose pass band holds the
    # signal, so the noise fills b = Σ h² of the band; the truth is REFERENCE §8 with that σ².
    bits, x0 = gfsk05
    n = 3000
    taps = signal.firwin(129, 0.5)  # cut-off at a quarter of the sample rate: ±2 baud at 8 sps
    taps /= taps.sum()
    b = float(np.sum(taps**2))
    assert 0.45 < b < 0.55
    plan = plan_sequence(h=0.5, pulse="gaussian", bt=0.5)
    starts = _starts(n, SPS)
    for ebn0_db, seed in ((10.0, 51), (18.0, 52)):
        rng = np.random.default_rng(seed)
        w = _noise(int(n * SPS) + 128, ebn0_db, SPS, rng)
        x = x0[: int(n * SPS)] + np.convolve(w, taps, mode="valid")
        est = estimate_sequence_data_aided(x, starts, SPS, bits[:n], plan, noise_bandwidth=b)
        assert abs(est.ebn0_db - ebn0_db) < 0.3
        white = estimate_sequence_data_aided(x, starts, SPS, bits[:n], plan)  # noise taken as white: reads ≈ 1/b high
        assert white.ebn0_db - ebn0_db == pytest.approx(-10 * math.log10(b), abs=0.3)
    with pytest.raises(LinkError):
        estimate_sequence_data_aided(x, starts, SPS, bits[: n - 1], plan)
    with pytest.raises(LinkError):
        estimate_sequence_data_aided(x, starts, SPS, bits[:n], plan, noise_bandwidth=0.0)


# ----------------------------------------------------------------------------- (f) fractional sps, clock drift


def test_fractional_sps_and_clock_drift_cost_under_0_2_db(gfsk05):
    # A transmitter clock 100 ppm fast at a fractional 8.37 samples per symbol; the detector gets the
    # drifting grid (period 8.37/(1 + 1e-4)), as the receiver's timing stage measures it.
    period = 8.37 / (1 + 100e-6)
    bits = np.random.default_rng(2024).integers(0, 2, 30_000 + 2 * GUARD)
    x0 = cpfsk(bits, sps=period, h=0.5, pulse="gaussian", bt=0.5)
    plan = plan_sequence(h=0.5, pulse="gaussian", bt=0.5, n_symbols=3)
    # Noise free: the right hypothesis keeps all but a negligible share of its energy (the polyphase
    # bank's offset quantisation is the only approximation): the loss in dB is −10·log10(metric).
    out = detect(x0, _starts(len(bits), period), period, plan)
    right = np.where(bits == 1, out.m1, out.m0)[GUARD:-GUARD]
    assert -10 * np.log10(right.min()) < 0.01
    # With noise: not significantly worse than integer sps without drift at 0.2 dB less Eb/N0.
    k_drift, n_drift = _ber(x0, bits, plan, 9.0, 31, sps=period)
    ref_bits, ref_x0 = gfsk05
    k_ref, n_ref = _ber(ref_x0, ref_bits, plan, 8.8, 32)
    table = [[k_drift, n_drift - k_drift], [k_ref, n_ref - k_ref]]
    assert stats.fisher_exact(table, alternative="greater").pvalue > 0.01


@pytest.mark.parametrize("kw", [dict(h=1.0, n_symbols=1), dict(h=0.7, n_symbols=5),
                                dict(h=0.5, pulse="gaussian", bt=0.5, n_symbols=3),
                                dict(h=0.5, pulse="gaussian", bt=0.5, n_symbols=5),
                                dict(h=0.5, pulse="gaussian", bt=0.5, n_symbols=7, invert=True),
                                dict(h=1.0, pulse="gaussian", bt=0.3, n_symbols=5)])
def test_single_precision_combining_decides_as_double(kw):
    # The receiver combines in complex64: its metrics may differ from double precision by the float32
    # rounding (IEEE 754 single: 2^-24 ≈ 6e-8 a step, a few steps in a sum), never in a decision, on
    # noisy signals of every plan (the independent modulator's waveform, REFERENCE §8 noise at 6 dB).
    rng = np.random.default_rng(17)
    plan = plan_sequence(**kw)
    bits = rng.integers(0, 2, 600)
    sps = 8.37
    x = cpfsk(bits ^ int(plan.invert), sps=sps, h=plan.h, pulse=plan.pulse, bt=plan.bt)  # invert: the other tone
    x = x + _noise(len(x), 6.0, sps, rng)
    starts = np.arange(600) * sps + 0.5
    d = detect(x, starts, sps, plan)
    s = detect(x, starts, sps, plan, precision="single")
    assert np.array_equal(d.bits, s.bits)
    scale = np.maximum(d.m0, d.m1)
    assert np.max(np.abs(s.m0 - d.m0) / scale) < 1e-6 and np.max(np.abs(s.m1 - d.m1) / scale) < 1e-6
    # the winner's correlation too, inside the burst; at its edges the bits before the first slot tie
    # exactly (absent samples), and either precision may name another of the tied hypotheses
    inside = d.window_symbols == plan.n_symbols
    assert np.max(np.abs(s.z - d.z)[inside] / np.sqrt(scale[inside])) < 1e-6
    np.testing.assert_allclose(np.abs(s.z) ** 2, np.maximum(s.m0, s.m1), rtol=1e-5)
    with pytest.raises(LinkError, match="precision 'half'"):
        detect(x, starts, sps, plan, precision="half")
