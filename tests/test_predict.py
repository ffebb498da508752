"""Tests of iqdemod.predict against published values (REFERENCE.md) and Monte Carlo.

Tolerances on table values come from the digits printed in the table: a
value printed as 3.3207e-2 must agree to half a unit of its last digit.
"""

from __future__ import annotations

import doctest
import math
from decimal import Decimal

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate, stats

import iqdemod.predict as predict
from iqdemod.errors import EstimateError, IqdemodError, LinkError
from iqdemod.predict import (
    binomial_p_value,
    clopper_pearson,
    db,
    ebn0_db_for_pb,
    ebn0_for_pb,
    from_db,
    mismatch_loss_db,
    pb_antipodal,
    pb_coherent_orthogonal,
    pb_mismatched,
    pb_noncoherent,
    pb_noncoherent_correlated,
    pb_square_law,
    fer_from_ber,
    tone_correlation,
)


def assert_printed(value: float, printed: str) -> None:
    """`value` rounds to `printed`: within half a unit of its last printed digit."""
    unit = 10.0 ** Decimal(printed).as_tuple().exponent
    assert abs(value - float(printed)) <= 0.5 * unit * (1 + 1e-9) + 1e-300, (value, printed)


def assert_in_cp(k: int, n: int, p: float, confidence: float = 0.999) -> None:
    """Theory `p` lies in the exact (Clopper–Pearson) interval of k errors in n."""
    lo, hi = clopper_pearson(k, n, confidence=confidence)
    assert lo <= p <= hi, f"{k}/{n} = {k / n:.4e}, CP{confidence} [{lo:.4e}, {hi:.4e}], theory {p:.4e}"
    # the two-sided exact binomial test must not reject at 1e-3 either
    assert binomial_p_value(k, n, p) > 1e-3


def test_doctests():
    assert doctest.testmod(predict).failed == 0


# --------------------------------------------------------------------------- REFERENCE sec. 1


@pytest.mark.parametrize(
    "fun, printed",
    [
        # REFERENCE sec. 1, Proakis ch. 4 / Sklar ch. 4 [book]: point values at 10 dB
        (pb_noncoherent, "3.3690e-3"),
        (pb_coherent_orthogonal, "7.827e-4"),
        (pb_antipodal, "3.872e-6"),
    ],
)
def test_pb_at_10db(fun, printed):
    assert_printed(fun(from_db(10.0)), printed)


@pytest.mark.parametrize(
    "pb, antipodal, coherent, noncoherent",
    [
        # REFERENCE sec. 1 table, Eb/N0 (dB) for a target Pb [book, recomputed]
        (1e-3, "6.7895", "9.7998", "10.9444"),
        (1e-5, "9.5879", "12.5982", "13.3525"),
        (1e-6, "10.5298", "13.5401", "14.1904"),
    ],
)
def test_ebn0_for_pb_table(pb, antipodal, coherent, noncoherent):
    assert_printed(ebn0_db_for_pb(pb, "antipodal"), antipodal)
    assert_printed(ebn0_db_for_pb(pb, "coherent_orthogonal"), coherent)
    assert_printed(ebn0_db_for_pb(pb, "noncoherent"), noncoherent)


def test_textbook_rounded_figures():
    # REFERENCE sec. 1: the usual rounded textbook figures 9.6 / 12.6 / 13.4 dB at 1e-5 [book]
    assert_printed(ebn0_db_for_pb(1e-5, "antipodal"), "9.6")
    assert_printed(ebn0_db_for_pb(1e-5, "coherent_orthogonal"), "12.6")
    assert_printed(ebn0_db_for_pb(1e-5, "noncoherent"), "13.4")


def test_noncoherent_inverse_is_exact():
    # REFERENCE sec. 1: the non-coherent inverse is exact, gamma = -2 ln(2 Pb)
    pb = np.array([0.5, 0.1, 1e-3, 1e-5, 1e-12])
    np.testing.assert_allclose(ebn0_for_pb(pb), -2.0 * np.log(2.0 * pb), rtol=0, atol=1e-12)
    assert ebn0_for_pb(0.5) == 0.0


@settings(max_examples=40, deadline=None)
@given(
    pb=st.floats(1e-12, 0.45),
    scheme=st.sampled_from(["noncoherent", "coherent_orthogonal", "antipodal"]),
)
def test_inverse_round_trip(pb, scheme):
    fun = {
        "noncoherent": pb_noncoherent,
        "coherent_orthogonal": pb_coherent_orthogonal,
        "antipodal": pb_antipodal,
    }[scheme]
    assert fun(ebn0_for_pb(pb, scheme)) == pytest.approx(pb, rel=1e-9)


def test_ordering_of_schemes():
    # Proakis ch. 4: antipodal beats coherent orthogonal by 3 dB exactly, which
    # beats non-coherent orthogonal (the price of not knowing the phase)
    g = from_db(np.linspace(0.0, 15.0, 31))
    assert np.all(pb_antipodal(g) <= pb_coherent_orthogonal(g))
    assert np.all(pb_coherent_orthogonal(g) <= pb_noncoherent(g))
    np.testing.assert_allclose(pb_antipodal(g), pb_coherent_orthogonal(2.0 * g), rtol=1e-12)


def test_vectorised_shapes():
    g = from_db(np.arange(12.0).reshape(3, 4))
    for fun in (pb_noncoherent, pb_coherent_orthogonal, pb_antipodal):
        assert fun(g).shape == (3, 4)
    assert pb_mismatched(g, freq_error_T=0.1).shape == (3, 4)
    assert pb_noncoherent_correlated(g, 0.3).shape == (3, 4)
    assert isinstance(pb_noncoherent(10.0), float)


# --------------------------------------------------------------------------- REFERENCE sec. 2


@pytest.mark.parametrize(
    "h, mag",
    # REFERENCE sec. 2, Proakis (correlated binary signals) [book]: |rho| = |sinc(h)|
    [(0.5, "0.636620"), (0.75, "0.300105"), (1.0, "0.000000")],
)
def test_tone_correlation_continuous(h, mag):
    rho = tone_correlation(h)
    assert_printed(abs(rho), mag)
    assert rho == pytest.approx(np.sinc(h) * np.exp(1j * np.pi * h), abs=1e-15)


def test_tone_correlation_discrete():
    # REFERENCE sec. 2 [derived]: N = 16, h = 0.5 gives |rho_N| = 0.63764
    assert_printed(abs(tone_correlation(0.5, samples_per_symbol=16)), "0.63764")
    # the closed form equals the defining sum (1/N) sum exp(j 2 pi h n / N), phase included
    n = np.arange(16)
    for h in (0.25, 0.5, 0.75, 1.0, 1.3, 2.0, -0.6, 16.0, 32.5):
        direct = np.mean(np.exp(2j * np.pi * h * n / 16))
        assert tone_correlation(h, samples_per_symbol=16) == pytest.approx(direct, abs=1e-13)
    # and tends to the continuous value as N grows
    assert tone_correlation(0.75, samples_per_symbol=100_000) == pytest.approx(
        tone_correlation(0.75), abs=1e-5
    )


@pytest.mark.parametrize(
    "h, pb10, pb13, ebn0_1e5",
    [
        # REFERENCE sec. 2 table; Proakis (envelope detection of correlated
        # signals) [book], Stein IEEE Trans. IT-10 1964 [paper]
        (0.5, "3.3207e-2", "4.0894e-3", "17.05"),
        (0.75, "6.6218e-3", "1.4358e-4", "14.33"),
        (1.0, "3.3690e-3", "2.3244e-5", "13.35"),
    ],
)
def test_correlated_tones_table(h, pb10, pb13, ebn0_1e5):
    rho = tone_correlation(h)
    assert_printed(pb_noncoherent_correlated(from_db(10.0), rho), pb10)
    assert_printed(pb_noncoherent_correlated(from_db(13.0), rho), pb13)
    assert_printed(ebn0_db_for_pb(1e-5, "correlated", rho=rho), ebn0_1e5)
    # the general square-law result (Proakis App. B) with complex means and
    # correlated noise must give the same numbers at zero frequency error
    assert_printed(pb_mismatched(from_db(10.0), h=h), pb10)
    assert_printed(pb_mismatched(from_db(13.0), h=h), pb13)
    assert_printed(ebn0_db_for_pb(1e-5, "mismatched", h=h), ebn0_1e5)


@settings(max_examples=50, deadline=None)
@given(ebn0=st.floats(0.0, 400.0))
def test_correlated_at_rho_zero_is_orthogonal(ebn0):
    # REFERENCE sec. 2: at rho = 0 the Marcum-Q formula equals exp(-gamma/2)/2 exactly
    expected = 0.5 * math.exp(-ebn0 / 2)
    assert pb_noncoherent_correlated(ebn0, 0.0) == pytest.approx(expected, rel=1e-9, abs=1e-300)
    assert pb_mismatched(ebn0, h=1.0) == pytest.approx(expected, rel=1e-9, abs=1e-300)
    assert pb_square_law(math.sqrt(ebn0), 0.0) == pytest.approx(expected, rel=1e-9, abs=1e-300)


def test_correlation_hurts_monotonically():
    # more correlated tones are harder to tell apart (Proakis, correlated signals)
    r = np.linspace(0.0, 0.95, 20)
    pb = pb_noncoherent_correlated(from_db(12.0), r)
    assert np.all(np.diff(pb) > 0)
    # and |rho| -> 1 is a coin toss
    assert pb_noncoherent_correlated(from_db(12.0), 1.0) == pytest.approx(0.5, abs=1e-12)


# --------------------------------------------------------------------------- REFERENCE sec. 3


@pytest.mark.parametrize(
    "eps, mag, loss, pb10, pb13, ebn0_1e5",
    [
        # REFERENCE sec. 3 table [derived]; Pb averaged over the two symbols
        (0.1, "0.983632", "0.1434", "5.171e-3", "7.429e-5", "13.94"),
        (0.2, "0.935489", "0.5792", "1.418e-2", "7.403e-4", "15.52"),
        (0.3, "0.858394", "1.3263", "4.675e-2", "8.947e-3", "18.50"),
    ],
)
def test_mismatched_table(eps, mag, loss, pb10, pb13, ebn0_1e5):
    assert_printed(abs(tone_correlation(eps)), mag)
    assert_printed(mismatch_loss_db(eps), loss)
    assert_printed(pb_mismatched(from_db(10.0), freq_error_T=eps), pb10)
    assert_printed(pb_mismatched(from_db(13.0), freq_error_T=eps), pb13)
    assert_printed(ebn0_db_for_pb(1e-5, "mismatched", freq_error_T=eps), ebn0_1e5)


def test_mismatch_h1_matches_independent_rician_formula():
    # REFERENCE sec. 3: for h = 1 the branches are independent Rician envelopes,
    # Pb = Q1(alpha, beta) - exp(-(alpha^2+beta^2)/2) I0(alpha beta) / 2 with
    # alpha = |m_wrong|/sqrt(N0), beta = |m_right|/sqrt(N0), per symbol
    g, eps = from_db(11.0), 0.25
    per_symbol = []
    for leak in (np.sinc(1 - eps), np.sinc(1 + eps)):
        a, b = math.sqrt(g) * abs(leak), math.sqrt(g) * abs(np.sinc(eps))
        q1 = stats.ncx2.sf(b * b, 2, a * a)
        per_symbol.append(q1 - 0.5 * math.exp(-(a * a + b * b) / 2) * np.i0(a * b))
    assert pb_mismatched(g, freq_error_T=eps) == pytest.approx(np.mean(per_symbol), rel=1e-10)


def test_mismatch_symmetry():
    # an error of -eps is the mirror image of +eps: same average Pb
    g = from_db(np.array([8.0, 12.0]))
    for h in (0.75, 1.0, 1.5):
        np.testing.assert_allclose(
            pb_mismatched(g, h=h, freq_error_T=0.15), pb_mismatched(g, h=h, freq_error_T=-0.15), rtol=1e-10
        )


def test_error_floor_is_reported():
    # half a symbol rate off, leakage equals the signal: no Eb/N0 reaches 1e-5
    with pytest.raises(EstimateError, match="error floor"):
        ebn0_for_pb(1e-5, "mismatched", freq_error_T=0.5)


# --------------------------------------------------------------------------- square law, general


def _pb_independent_by_quadrature(mx, my, vx, vy):
    """P(|X|^2 < |Y|^2) for independent X ~ CN(mx, vx), Y ~ CN(my, vy), by quadrature.

    2|X|^2/vx is non-central chi-square, 2 degrees of freedom, non-centrality
    2|mx|^2/vx (Proakis ch. 2); integrate its density against P(|Y|^2 > x).
    """
    ncx, ncy = 2 * abs(mx) ** 2 / vx, 2 * abs(my) ** 2 / vy
    f = lambda x: (2 / vx) * stats.ncx2.pdf(2 * x / vx, 2, ncx) * stats.ncx2.sf(2 * x / vy, 2, ncy)
    split = abs(mx) ** 2 + vx  # the mean of |X|^2: keep quad's attention on the peak
    opts = dict(epsabs=1e-14, epsrel=1e-10, limit=400)
    return integrate.quad(f, 0, split, **opts)[0] + integrate.quad(f, split, np.inf, **opts)[0]


@pytest.mark.parametrize(
    "mx, my, vx, vy",
    [(3.0, 0.0, 1.0, 1.0), (3.0, 1.2j, 1.0, 1.0), (2.5, 1.0, 2.0, 0.5), (1.5, 0.5 + 0.5j, 0.3, 1.7), (0.0, 0.0, 1.0, 3.0)],
)
def test_square_law_against_quadrature(mx, my, vx, vy):
    # Proakis App. B / Stein 1964 closed form vs direct integration of the two
    # independent non-central chi-square densities (first principles)
    expected = _pb_independent_by_quadrature(mx, my, vx, vy)
    assert pb_square_law(mx, my, var_right=vx, var_wrong=vy) == pytest.approx(expected, rel=1e-7, abs=1e-14)


def test_square_law_pure_noise():
    # two exponentials with means vx, vy: P(|X|^2 < |Y|^2) = vy / (vx + vy) (elementary)
    assert pb_square_law(0.0, 0.0, var_right=3.0, var_wrong=1.0) == pytest.approx(0.25, rel=1e-12)
    assert pb_square_law(0.0, 0.0, var_right=1.0, var_wrong=1.0, noise_corr=0.6j) == pytest.approx(0.5, rel=1e-12)


@settings(max_examples=60, deadline=None)
@given(
    mx=st.complex_numbers(max_magnitude=6, allow_nan=False, allow_infinity=False),
    my=st.complex_numbers(max_magnitude=6, allow_nan=False, allow_infinity=False),
    vx=st.floats(0.2, 5.0),
    vy=st.floats(0.2, 5.0),
    c=st.complex_numbers(max_magnitude=0.9, allow_nan=False, allow_infinity=False),
    turn=st.floats(-math.pi, math.pi),
)
def test_square_law_complementary_and_phase_free(mx, my, vx, vy, c, turn):
    p = pb_square_law(mx, my, var_right=vx, var_wrong=vy, noise_corr=c)
    q = pb_square_law(my, mx, var_right=vy, var_wrong=vx, noise_corr=np.conj(c))
    # P(|X|^2 < |Y|^2) + P(|Y|^2 < |X|^2) = 1
    assert p + q == pytest.approx(1.0, abs=1e-9)
    # a common phase on both outputs changes nothing
    r = np.exp(1j * turn)
    assert pb_square_law(r * mx, r * my, var_right=vx, var_wrong=vy, noise_corr=c) == pytest.approx(p, abs=1e-10)


def test_square_law_correlated_against_monte_carlo():
    # correlated complex noise, unequal variances, complex means (Proakis App. B's
    # general case) vs simulation; binomial check with Clopper-Pearson 99.9 %
    rng = np.random.default_rng(20240601)
    mx, my, vx, vy, c = 1.8 + 0.4j, 0.9 - 0.7j, 1.3, 0.7, 0.5 * np.exp(0.8j)
    n = 400_000
    cov = np.array([[vx, c * math.sqrt(vx * vy)], [np.conj(c) * math.sqrt(vx * vy), vy]])
    chol = np.linalg.cholesky(cov)
    w = (rng.standard_normal((2, n)) + 1j * rng.standard_normal((2, n))) / math.sqrt(2)
    x, y = chol @ w
    k = int(np.count_nonzero(np.abs(x + mx) ** 2 < np.abs(y + my) ** 2))
    assert_in_cp(k, n, pb_square_law(mx, my, var_right=vx, var_wrong=vy, noise_corr=c))


# --------------------------------------------------------------------------- Monte Carlo of a correlator bank


def _correlator_bank_errors(rng, *, ebn0, h, freq_error_T, n_symbols, samples_per_symbol=16, chunk=50_000):
    """Errors of a two-tone quadrature correlator bank with square-law decisions.

    Discrete tones at +-h/2 cycles per symbol, unit-amplitude references, a
    received tone freq_error_T cycles per symbol above its reference with a
    random carrier phase, complex white noise of unit variance per sample;
    Eb/N0 = A^2 N / sigma^2 (REFERENCE sec. 8).
    """
    n = samples_per_symbol
    t = np.arange(n) / n
    f = np.array([-h / 2, h / 2])
    refs = np.exp(2j * np.pi * f[:, None] * t[None, :])  # (2, N) unit-amplitude references
    amp = math.sqrt(ebn0 / n)
    errors = 0
    done = 0
    while done < n_symbols:
        m = min(chunk, n_symbols - done)
        bits = rng.integers(0, 2, m)
        phase = rng.uniform(0, 2 * np.pi, m)
        tone = np.exp(2j * np.pi * (f[bits][:, None] + freq_error_T) * t[None, :] + 1j * phase[:, None])
        noise = (rng.standard_normal((m, n)) + 1j * rng.standard_normal((m, n))) / math.sqrt(2)
        z = (amp * tone + noise) @ refs.conj().T  # (m, 2) correlator outputs
        decided = (np.abs(z[:, 1]) ** 2 > np.abs(z[:, 0]) ** 2).astype(int)
        errors += int(np.count_nonzero(decided != bits))
        done += m
    return errors


@pytest.mark.parametrize("h", [0.5, 0.75])
def test_correlated_tones_monte_carlo(h):
    # REFERENCE sec. 2 (Proakis; Stein 1964) with the discrete |rho_N| for N = 16
    rng = np.random.default_rng(int(h * 1000) + 7)
    n = 200_000
    g = from_db(10.0)
    k = _correlator_bank_errors(rng, ebn0=g, h=h, freq_error_T=0.0, n_symbols=n)
    theory = pb_noncoherent_correlated(g, tone_correlation(h, samples_per_symbol=16))
    assert_in_cp(k, n, theory)
    # the general (complex-mean, correlated-noise) form agrees with the Marcum-Q form
    assert pb_mismatched(g, h=h, samples_per_symbol=16) == pytest.approx(theory, rel=1e-10)


@pytest.mark.parametrize("h", [1.0, 0.75])
def test_mismatched_monte_carlo(h):
    # REFERENCE sec. 3 [derived]: correlator off by 0.2 / T; for h = 0.75 the
    # noise is also correlated and the two symbols differ (averaged)
    rng = np.random.default_rng(int(h * 100) + 99)
    n = 200_000
    g = from_db(10.0)
    k = _correlator_bank_errors(rng, ebn0=g, h=h, freq_error_T=0.2, n_symbols=n)
    assert_in_cp(k, n, pb_mismatched(g, h=h, freq_error_T=0.2, samples_per_symbol=16))


# --------------------------------------------------------------------------- counting: REFERENCE sec. 7


@pytest.mark.parametrize(
    "k, n, lo, hi",
    [
        # REFERENCE sec. 7, Clopper & Pearson, Biometrika 26, 1934 [paper]
        (0, 1000, "0", "0.00368208"),
        (1, 1000, "2.53175e-5", "0.00555892"),
        (5, 1000, "0.00162542", "0.0116295"),
        (10, 10000, "4.7964e-4", "1.83826e-3"),
    ],
)
def test_clopper_pearson_table(k, n, lo, hi):
    got_lo, got_hi = clopper_pearson(k, n)
    assert_printed(got_lo, lo)
    assert_printed(got_hi, hi)


def test_clopper_pearson_one_sided_and_rule_of_three():
    # REFERENCE sec. 7: one-sided 95 % upper bound at 0/1000 is 0.00299125 [paper]
    lo, hi = clopper_pearson(0, 1000, alternative="less")
    assert lo == 0.0
    assert_printed(hi, "0.00299125")
    # rule of three, Hanley & Lippman-Hand, JAMA 1983 [paper]: about 3/n
    for n in (300, 1000, 10_000):
        assert clopper_pearson(0, n, alternative="less")[1] == pytest.approx(3 / n, rel=0.01)
    lo, hi = clopper_pearson(7, 50, alternative="greater")
    assert hi == 1.0 and lo == pytest.approx(stats.beta.ppf(0.05, 7, 44), rel=1e-12)


def test_clopper_pearson_edges_and_arrays():
    # REFERENCE sec. 7: lower = 0 at k = 0, upper = 1 at k = n
    assert clopper_pearson(0, 10)[0] == 0.0
    assert clopper_pearson(10, 10)[1] == 1.0
    lo, hi = clopper_pearson(np.array([0, 3, 10]), 10)
    assert lo.shape == hi.shape == (3,)
    assert lo[0] == 0.0 and hi[2] == 1.0


@settings(max_examples=60, deadline=None)
@given(n=st.integers(1, 5000), frac=st.floats(0, 1), conf=st.sampled_from([0.9, 0.95, 0.99]))
def test_clopper_pearson_matches_binomtest(n, frac, conf):
    # REFERENCE sec. 7: identical to scipy.stats.binomtest(k, n).proportion_ci("exact").
    # scipy finds that interval by root-finding, good to about 1e-9 relative (hypothesis found
    # n=318, k=1 differing by 1.0e-9); the beta quantiles here are evaluated directly, so the two
    # agree to the reference's own accuracy, 1e-7 with margin.
    k = int(round(frac * n))
    ref = stats.binomtest(k, n).proportion_ci(confidence_level=conf, method="exact")
    lo, hi = clopper_pearson(k, n, confidence=conf)
    assert lo == pytest.approx(ref.low, rel=1e-7, abs=1e-15)
    assert hi == pytest.approx(ref.high, rel=1e-7, abs=1e-15)
    assert lo <= k / n <= hi


def test_clopper_pearson_closed_forms():
    # k = 1: the lower end solves 1 − (1 − p)^n = α/2, so p = 1 − (1 − α/2)^(1/n); k = 0: the upper end
    # is 1 − (α/2)^(1/n) (Clopper & Pearson 1934; by hand). Here we are exact where scipy's root-finding is not.
    assert clopper_pearson(1, 318, confidence=0.9)[0] == pytest.approx(-math.expm1(math.log(0.95) / 318), rel=1e-13)
    assert clopper_pearson(0, 1000)[1] == pytest.approx(-math.expm1(math.log(0.025) / 1000), rel=1e-13)


def test_binomial_p_value():
    # exact two-sided test: k = 0 of 10 at p = 1/2 has p-value 2 / 2^10 (by hand)
    assert binomial_p_value(0, 10, 0.5) == pytest.approx(2 / 1024, rel=1e-12)
    assert binomial_p_value(5, 10, 0.5) == pytest.approx(1.0)
    assert binomial_p_value(3, 1000, 0.003) > 0.5
    assert binomial_p_value(30, 1000, 0.003) < 1e-9


def test_fer_from_ber():
    # 1 - (1 - ber)^n, kept accurate for tiny ber: n ber (1 - (n - 1) ber / 2 + ...)
    ber, n = 1e-15, 1000
    series = n * ber * (1 - (n - 1) * ber / 2)
    assert fer_from_ber(ber, n) == pytest.approx(series, rel=1e-12)
    assert fer_from_ber(0.0, 100) == 0.0
    assert fer_from_ber(1.0, 100) == 1.0
    assert fer_from_ber(0.3, 0) == 0.0
    np.testing.assert_allclose(
        fer_from_ber(np.array([1e-3, 1e-2]), np.array([[100], [1000]])),
        1 - (1 - np.array([1e-3, 1e-2])) ** np.array([[100], [1000]]),
        rtol=1e-12,
    )


@settings(max_examples=50, deadline=None)
@given(ber=st.floats(1e-6, 0.5), n=st.integers(1, 5000))
def test_fer_from_ber_matches_direct(ber, n):
    assert fer_from_ber(ber, n) == pytest.approx(1 - (1 - ber) ** n, rel=1e-9)


# --------------------------------------------------------------------------- units and errors


def test_db_round_trip():
    assert db(100.0) == pytest.approx(20.0)
    assert from_db(db(3.7)) == pytest.approx(3.7)
    assert db(0.0) == -math.inf


@pytest.mark.parametrize(
    "error, call, match",
    [
        (EstimateError, lambda: pb_noncoherent(-1.0), "ebn0 -1.0"),
        (EstimateError, lambda: pb_noncoherent(float("nan")), "ebn0 nan"),
        (EstimateError, lambda: pb_noncoherent_correlated(10.0, 1.5), "rho"),
        (EstimateError, lambda: pb_square_law(1.0, 0.0, var_right=0.0), "var_right"),
        (EstimateError, lambda: pb_square_law(1.0, 0.0, noise_corr=1.0), "noise_corr"),
        (LinkError, lambda: pb_mismatched(10.0, h=0.0), "h 0.0"),
        (LinkError, lambda: tone_correlation(0.5, samples_per_symbol=0), "samples_per_symbol 0"),
        (EstimateError, lambda: ebn0_for_pb(0.7), "pb 0.7"),
        (EstimateError, lambda: ebn0_for_pb(0.0), "pb 0.0"),
        (EstimateError, lambda: ebn0_for_pb(1e-3, "qam"), "scheme 'qam'"),
        (EstimateError, lambda: ebn0_for_pb(1e-3, "noncoherent", h=0.5), "options"),
        (EstimateError, lambda: ebn0_for_pb(1e-3, "correlated"), "rho="),
        (EstimateError, lambda: fer_from_ber(1.5, 10), "ber 1.5"),
        (EstimateError, lambda: fer_from_ber(0.1, 2.5), "n_bits 2.5"),
        (EstimateError, lambda: clopper_pearson(11, 10), "k 11"),
        (EstimateError, lambda: clopper_pearson(1, 10, confidence=1.0), "confidence 1.0"),
        (EstimateError, lambda: clopper_pearson(1, 10, alternative="up"), "alternative 'up'"),
        (EstimateError, lambda: binomial_p_value(1, 10, 1.2), "p 1.2"),
    ],
)
def test_bad_arguments_raise_the_right_error(error, call, match):
    """Statistics arguments give an EstimateError, link parameters a LinkError; both are IqdemodErrors (issue 11)."""
    with pytest.raises(error, match=match):
        call()
    assert issubclass(error, IqdemodError) and issubclass(error, ValueError)
