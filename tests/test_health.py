"""Link health on generated captures: Eb/N0 bias and interval coverage, prediction against observation."""

import numpy as np
import pytest
from scipy import stats

import iqdemod
from iqdemod.health import assess
from iqdemod.receiver import plan_receiver
from iqdemod_cli.render import health_text

from conftest import make_capture, make_link


@pytest.mark.parametrize("ebn0,seed", [(6.0, 61), (14.0, 141), (22.0, 221)])
def test_capture_level_ebn0_is_unbiased(tmp_path, ebn0, seed):
    link = make_link()
    meta, _ = make_capture(tmp_path / "e", link=link, ebn0=(ebn0,), frames=60, freq_error_hz=-1500.0,
                           clock_ppm=60.0, seed=seed)
    r = assess(meta, link)
    assert r.ebn0_db == pytest.approx(ebn0, abs=0.25)
    lo, hi = r.ebn0_db_ci90
    assert lo < r.ebn0_db < hi and hi - lo < 0.5


@pytest.mark.parametrize("ebn0", [10.0, 18.0])
def test_per_frame_interval_coverage(tmp_path, ebn0):
    """The 90 % interval of each good frame's data-aided estimate covers the truth about 90 % of the time."""
    link = make_link()
    meta, _ = make_capture(tmp_path / "c", link=link, ebn0=(ebn0,), frames=150, freq_error_hz=900.0,
                           clock_ppm=-30.0, seed=int(ebn0) + 5)
    corr = plan_receiver(link, 1_024_000).ebn0_correction_db
    frames = [f for f in iqdemod.decode(meta, link) if f.crc_ok]
    assert len(frames) >= 60
    # the interval is of the decision SNR; the truth at the decisions is Eb/N0 − correction
    truth_dec = ebn0 - corr
    covered = np.mean([f.ebn0.ci90_db[0] <= truth_dec <= f.ebn0.ci90_db[1] for f in frames])
    # binomial spread for n ≈ 60–150 at p = 0.9: ±3.3 standard deviations ≈ ±0.13 at n = 60
    assert 0.77 <= covered <= 0.99, covered


def test_prediction_agrees_with_observed_crc_failures(tmp_path):
    # exact binomial test of the observed frame error count against the predicted rate
    link = make_link()
    meta, _ = make_capture(tmp_path / "p", link=link, ebn0=(11.5,), frames=300, freq_error_hz=1200.0,
                           clock_ppm=-50.0, seed=115)
    r = assess(meta, link)
    bad = r.frames - r.frames_crc_ok
    assert r.frames == 300 and bad > 5
    assert stats.binomtest(bad, r.frames, r.fer_predicted).pvalue >= 0.01
    assert r.fer_p_value == pytest.approx(stats.binomtest(bad, r.frames, r.fer_predicted).pvalue)
    assert r.verdict == "consistent with theory"
    lo, hi = r.fer_observed_ci95  # Clopper–Pearson, REFERENCE §7
    assert (lo, hi) == pytest.approx(stats.binomtest(bad, r.frames).proportion_ci(0.95, method="exact"))
    # margin: Eb/N0 minus what 1e-5 needs (13.35 dB non-coherent orthogonal, REFERENCE §1, plus the receiver gain)
    assert r.margin_db == pytest.approx(r.ebn0_db - r.ebn0_needed_db)
    assert r.ebn0_needed_db == pytest.approx(13.3525 - r.decision_gain_db, abs=0.02)
    assert r.noncoherent_penalty_db == pytest.approx(13.3525 - 12.5982, abs=1e-3)  # REFERENCE §1 table


def test_transmitter_health_figures(strong_capture):
    meta, _ = strong_capture
    r = assess(meta, make_link())
    assert r.freq_error_hz == pytest.approx(1200, abs=40)
    # carrier error in ppm of the signal's absolute frequency (capture centre + offset)
    assert r.freq_error_ppm == pytest.approx(r.freq_error_hz / (iqdemod.synth.DEFAULT_CENTRE_HZ + 137_000) * 1e6)
    assert r.clock_error_ppm == pytest.approx(60, abs=25)
    assert r.mismatch_loss_db < 0.01 and r.clipped_fraction == 0
    assert sum(r.histogram_right) > 0 and len(r.histogram_edges_db) == len(r.histogram_right) + 1


def test_worse_than_theory_is_called_out(tmp_path):
    """Impulsive interference (a short click in every other frame) breaks CRCs that the Eb/N0 cannot explain."""
    link = make_link(datatype="cf32_le")
    meta, truth = make_capture(tmp_path / "i", link=link, ebn0=(16.0,), frames=40, seed=44)
    data = tmp_path / "i.sigmf-data"
    x = np.fromfile(data, np.complex64)
    rng = np.random.default_rng(1)
    for f in truth["frames"][::2]:
        a = int(f["sync_sample"]) + 120 * 107  # inside the payload
        x[a : a + 200] += (0.5 * (rng.standard_normal(200) + 1j * rng.standard_normal(200))).astype(np.complex64)
    x.tofile(data)
    r = assess(meta, link)
    assert r.frames == 40 and r.frames_crc_ok <= 25
    assert r.ebn0_db > 12  # the clicks hardly move the estimate…
    assert r.verdict == "worse than theory predicts" and r.causes  # …so the failures stand out
    assert any("bursts of errors" in c for c in r.causes)


@pytest.mark.parametrize("clock_ppm", [-80.0, 120.0])
def test_the_clock_error_interval_covers_the_transmitters_clock(tmp_path, clock_ppm):
    # The tests' own modulator (independent of synth.py) sends 40 frames from a transmitter whose symbol
    # clock is off by clock_ppm; health's 90 % interval of the mean over bursts must hold it, and be
    # as narrow as the spread between bursts allows (the standard error of a mean, common practice).
    import fsk_modulator as fm

    rate = 256_000
    rng = np.random.default_rng(11)
    txs = [fm.Tx(t_s=0.02 + 0.03 * i, payload=bytes(rng.integers(0, 256, 24, dtype=np.uint8)), ebn0_db=14.0,
                 offset_hz=40_000, baud=9600, h=1.0, clock_ppm=clock_ppm, framing=dict(length="fixed"))
             for i in range(40)]
    x, _ = fm.render(txs, rate=rate, n_samples=int(1.25 * rate), noise_rms=0.05, seed=5)
    path = tmp_path / "clock.cf32_le"
    x.astype("<c8").tofile(path)
    link = iqdemod.load_link(None, rate=rate, offset=40_000, baud=9600, shift=9600, sync="0x9B3C57E1", length=24)
    r = assess(path, link)
    assert r.frames_crc_ok == 40
    lo, hi = r.clock_error_ppm_ci90
    assert lo < clock_ppm < hi and lo < r.clock_error_ppm < hi
    assert hi - lo < 120  # 40 bursts: far narrower than one burst's own estimate


@pytest.mark.parametrize("values", [[-10.0, 0.0, 10.0], [230.0, -40.0, 75.0, 120.0, 310.0, -15.0, 60.0, 5.0]])
def test_the_clock_interval_of_equal_bursts_is_the_t_interval_of_their_mean(values):
    # Bursts of equal length weigh alike: the interval is the textbook one for a mean whose variance is
    # estimated, Student's t with n − 1 degrees of freedom (scipy.stats.t.interval, the reference here)
    from iqdemod.health_accumulator import _weighted_mean_ci90

    x, n = np.array(values), len(values)
    w = 300.0  # symbols a burst
    got = _weighted_mean_ci90(n * w, w * x.sum(), w * (x**2).sum(), n * w * w)
    want = stats.t.interval(0.90, n - 1, loc=x.mean(), scale=x.std(ddof=1) / np.sqrt(n))
    assert got == pytest.approx(want, rel=1e-9, abs=1e-9)


def test_bursts_of_different_strength_get_their_spread_and_the_weakest_margin(tmp_path):
    # A fleet seen at two strengths (the tests' own modulator, REFERENCE §8 Eb/N0): the pooled Eb/N0 lies
    # between them and hides the weak half; the 10th and 90th percentiles of the frames' Eb/N0 show both,
    # and the weakest tenth's margin is measured from the lower one.
    import fsk_modulator as fm

    rate = 256_000
    rng = np.random.default_rng(12)
    levels = [12.0, 20.0] * 15
    txs = [fm.Tx(t_s=0.02 + 0.03 * i, payload=bytes(rng.integers(0, 256, 24, dtype=np.uint8)), ebn0_db=e,
                 offset_hz=40_000, baud=9600, h=1.0, framing=dict(length="fixed")) for i, e in enumerate(levels)]
    x, _ = fm.render(txs, rate=rate, n_samples=int(0.95 * rate), noise_rms=0.05, seed=6)
    path = tmp_path / "two.cf32_le"
    x.astype("<c8").tofile(path)
    link = iqdemod.load_link(None, rate=rate, offset=40_000, baud=9600, shift=9600, sync="0x9B3C57E1", length=24)
    r = assess(path, link)
    lo, hi = r.ebn0_db_bursts
    assert lo == pytest.approx(12.0, abs=1.0) and hi == pytest.approx(20.0, abs=1.0)
    assert lo + 4 < r.ebn0_db < hi
    assert r.margin_db_weakest == pytest.approx(lo - r.ebn0_needed_db)
    text = health_text(r)
    assert "Eb/N0 of bursts" in text and "margin, weakest" in text


def test_bursts_alike_show_no_spread_row(strong_capture):
    r = assess(strong_capture[0], make_link())
    lo, hi = r.ebn0_db_bursts
    assert hi - lo < 1.0 and "Eb/N0 of bursts" not in health_text(r)


def test_multi_symbol_decision_statistics_sit_at_n_times_es_over_n0(tmp_path):
    # The window statistic of the right hypothesis has SNR N·Es/N0 (the detector's normalisation,
    # iqdemod.sequence.SequenceDecisions; the matched filter over N symbols, Proakis ch. 4). A GFSK
    # capture from the tests' own modulator at 14 dB, N = 5: the sent symbol's histogram peaks near
    # 14 + 10·log10(5) = 21 dB above the noise, and the other middle bit's best lies below it.
    import fsk_modulator as fm

    rate = 256_000
    rng = np.random.default_rng(13)
    txs = [fm.Tx(t_s=0.02 + 0.03 * i, payload=bytes(rng.integers(0, 256, 24, dtype=np.uint8)), ebn0_db=14.0,
                 offset_hz=40_000, baud=9600, h=0.5, pulse="gaussian", bt=0.5, framing=dict(length="fixed"))
             for i in range(20)]
    x, _ = fm.render(txs, rate=rate, n_samples=int(0.65 * rate), noise_rms=0.05, seed=7)
    path = tmp_path / "g.cf32_le"
    x.astype("<c8").tofile(path)
    link = iqdemod.load_link(None, rate=rate, offset=40_000, baud=9600, shift=4800, gaussian=0.5,
                             sync="0x9B3C57E1", length=24)
    r = assess(path, link)
    assert r.detector == "multi-symbol" and r.frames_crc_ok == 20
    edges = np.asarray(r.histogram_edges_db)
    centres = (edges[1:] + edges[:-1]) / 2
    right, wrong = np.asarray(r.histogram_right), np.asarray(r.histogram_wrong)
    assert centres[np.argmax(right)] == pytest.approx(14.0 + 10 * np.log10(5), abs=1.5)
    assert np.sum(wrong * centres) / wrong.sum() < np.sum(right * centres) / right.sum() - 1.0
