"""Tests of iqdemod.estimate against REFERENCE.md sec. 4 and simulation.

Symbol statistics are generated directly: the sent tone's output is
|sqrt(rho) + n|^2 (Rician amplitude), the other |n'|^2 (exponential), with
n, n' independent unit-power complex Gaussians (REFERENCE sec. 4: unit
references, |signal|^2 / E|noise|^2 at one output is Eb/N0).

Binomial spread used for the coverage bounds: with T trials and true
coverage 0.90 the observed coverage has standard deviation
sqrt(0.9 * 0.1 / T): 0.017 for T = 300, so [0.84, 0.96] is about +-3.5 sd.
"""

from __future__ import annotations

import dataclasses
import doctest
import json
import math
from decimal import Decimal

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate, stats

import iqdemod.estimate as estimate
import iqdemod.estimate_bounds as estimate_bounds
import iqdemod.estimate_methods as estimate_methods
from iqdemod.errors import EstimateError, IqdemodError
from iqdemod.estimate import (
    EbN0Estimate,
    crb_normalised_variance_coherent_da,
    crb_normalised_variance_noncoherent_da,
    debias_decision_directed,
    decision_directed_limit,
    estimate_blind,
    estimate_data_aided,
    estimate_decision_directed,
    pool,
)


def assert_printed(value: float, printed: str) -> None:
    """`value` rounds to `printed`: within half a unit of its last printed digit."""
    unit = 10.0 ** Decimal(printed).as_tuple().exponent
    assert abs(value - float(printed)) <= 0.5 * unit * (1 + 1e-9), (value, printed)


def symbols(rng, rho, n_symbols, trials=None, *, scale=1.0):
    """(z0sq, z1sq, bits) for random bits at linear Eb/N0 `rho`."""
    shape = (n_symbols,) if trials is None else (trials, n_symbols)
    noise = (rng.standard_normal((2, *shape)) + 1j * rng.standard_normal((2, *shape))) / math.sqrt(2)
    phase = np.exp(2j * np.pi * rng.uniform(size=shape))
    bits = rng.integers(0, 2, shape)
    z_true = np.abs(math.sqrt(rho) * phase + noise[0]) ** 2
    z_other = np.abs(noise[1]) ** 2
    z0 = np.where(bits == 1, z_other, z_true)
    z1 = np.where(bits == 1, z_true, z_other)
    return scale * z0, scale * z1, bits


def lin(x_db: float) -> float:
    return 0.0 if x_db == -math.inf else 10.0 ** (x_db / 10.0)


def test_doctests():
    assert doctest.testmod(estimate).failed == 0


# --------------------------------------------------------------------------- data-aided


def test_data_aided_unbiased_exactly():
    # REFERENCE sec. 4: ((L-1)/L) T/O - 1 is unbiased. T/O is non-central
    # F(2L, 2L; 2L rho), whose mean is (2L/(2L-2)) (1 + rho): check with scipy's moments
    for n_sym, rho in ((20, 1.0), (20, 10.0), (272, 40.0)):
        mean_ratio = stats.ncf.mean(2 * n_sym, 2 * n_sym, 2 * n_sym * rho)
        assert (n_sym - 1) / n_sym * mean_ratio - 1 == pytest.approx(rho, rel=1e-12)


@pytest.mark.parametrize("rho, reference", [(1.0, "1.0013"), (10.0, "10.0095")])
def test_data_aided_unbiased_monte_carlo(rho, reference):
    # REFERENCE sec. 4 [derived]: L = 20 gives 1.0013 for truth 1 and 10.0095
    # for truth 10 (a Monte Carlo figure itself). Ours must agree with the
    # truth within 3.5 standard errors, and so must the published figure.
    rng = np.random.default_rng(41 + int(rho))
    trials, n_sym = 3000, 20
    z0, z1, bits = symbols(rng, rho, n_sym, trials)
    est = np.array([estimate_data_aided(z0[i], z1[i], bits[i]).ebn0 for i in range(trials)])
    # the point estimate may be negative; recompute it unclipped for the mean
    t = np.where(bits == 1, z1, z0).sum(axis=1)
    o = np.where(bits == 1, z0, z1).sum(axis=1)
    raw = (n_sym - 1) / n_sym * t / o - 1
    np.testing.assert_allclose(est, np.maximum(raw, 0.0), rtol=1e-12, atol=0)
    se = raw.std(ddof=1) / math.sqrt(trials)
    assert abs(raw.mean() - rho) < 3.5 * se
    assert abs(float(reference) - rho) < 3.5 * se


def test_data_aided_interval_is_exact_for_short_records():
    # The F-pivot interval is exact at any L: each tail must miss 5 % of the
    # time even at L = 5 (binomial sd 0.005 for 2000 trials)
    rng = np.random.default_rng(5)
    rho, trials, n_sym = 10.0, 2000, 5
    z0, z1, bits = symbols(rng, rho, n_sym, trials)
    ests = [estimate_data_aided(z0[i], z1[i], bits[i]) for i in range(trials)]
    above = np.mean([lin(e.ci90_db[0]) > rho for e in ests])
    below = np.mean([lin(e.ci90_db[1]) < rho for e in ests])
    assert 0.035 < above < 0.065
    assert 0.035 < below < 0.065


def test_data_aided_ignores_bit_labelling():
    rng = np.random.default_rng(8)
    z0, z1, bits = symbols(rng, 20.0, 100)
    a = estimate_data_aided(z0, z1, bits)
    b = estimate_data_aided(z1, z0, 1 - bits)
    assert a == b


def test_data_aided_no_signal():
    # pure noise in both branches: the estimate is often <= 0, reported as -inf
    low = None
    for seed in range(20):
        z0, z1, bits = symbols(np.random.default_rng(seed), 0.0, 500)
        e = estimate_data_aided(z0, z1, bits)
        if e.ebn0_db == -math.inf:
            low = e
            break
    assert low is not None
    assert low.ci90_db[0] == -math.inf
    assert low.ci90_db[1] > -math.inf  # an upper limit remains


def test_data_aided_long_record_normal_limit():
    # above 100 000 symbols the exact inversion gives way to its normal limit
    rng = np.random.default_rng(17)
    rho = 10.0
    z0, z1, bits = symbols(rng, rho, 150_000)
    e = estimate_data_aided(z0, z1, bits)
    lo, hi = lin(e.ci90_db[0]), lin(e.ci90_db[1])
    assert lo < rho < hi
    # half-width ~ 1.645 sqrt(((1+2 rho) + (1+rho)^2) / L) in linear units (delta method)
    expected = 1.645 * math.sqrt((1 + 2 * rho + (1 + rho) ** 2) / 150_000)
    assert (hi - lo) / 2 == pytest.approx(expected, rel=0.05)
    # and it meets the exact interval at the switch-over (sums T, O of 1e5 symbols)
    exact = estimate_methods._data_aided_from_stats((100_000.0, 100_000.0 * 11.2, 100_000.0))
    approx = estimate_methods._data_aided_from_stats((100_001.0, 100_001.0 * 11.2, 100_001.0))
    assert approx.ci90_db == pytest.approx(exact.ci90_db, abs=2e-3)


# --------------------------------------------------------------------------- sweep 6-22 dB


SWEEP_DB = (6.0, 10.0, 14.0, 18.0, 22.0)
TRIALS, L_SWEEP = 300, 272


@pytest.fixture(scope="module")
def sweep():
    """Per Eb/N0 point: truth and the three estimators' results on the same data."""
    out = {}
    for i, x_db in enumerate(SWEEP_DB):
        rng = np.random.default_rng(1000 + i)
        rho = 10 ** (x_db / 10)
        z0, z1, bits = symbols(rng, rho, L_SWEEP, TRIALS, scale=7.3e-4)
        out[x_db] = {
            "rho": rho,
            "data-aided": [estimate_data_aided(z0[k], z1[k], bits[k]) for k in range(TRIALS)],
            "blind": [estimate_blind(z0[k], z1[k]) for k in range(TRIALS)],
            "decision-directed": [estimate_decision_directed(z0[k], z1[k]) for k in range(TRIALS)],
        }
    return out


def _summary(ests, rho):
    val = np.array([e.ebn0 for e in ests])
    lo = np.array([lin(e.ci90_db[0]) for e in ests])
    hi = np.array([lin(e.ci90_db[1]) for e in ests])
    return {
        "rel_bias": val.mean() / rho - 1,
        "rel_se": val.std(ddof=1) / rho / math.sqrt(len(val)),
        "db_bias": float(np.mean(10 * np.log10(val))) - 10 * math.log10(rho),
        "coverage": float(np.mean((lo <= rho) & (rho <= hi))),
        "rel_std": val.std(ddof=1) / rho,
        "rel_width": float(np.mean(hi - lo)) / rho,
    }


@pytest.mark.parametrize("method", ["data-aided", "blind", "decision-directed"])
@pytest.mark.parametrize("x_db", SWEEP_DB)
def test_bias_and_coverage(sweep, method, x_db):
    point = sweep[x_db]
    s = _summary(point[method], point["rho"])
    if method == "data-aided":
        # unbiased (REFERENCE sec. 4): within 3.5 standard errors of zero
        assert abs(s["rel_bias"]) < 3.5 * s["rel_se"]
    else:
        # ratio estimators with an O(1/L) bias: measured -0.5..+1.1 % (se 0.4-0.7 %)
        assert abs(s["rel_bias"]) < 0.02
    # mean of the dB values: Jensen's inequality pulls it down by about
    # 4.34 var/2 (0.02 dB at 6 dB); measured -0.05..+0.035 dB
    assert abs(s["db_bias"]) < 0.1
    # 90 % interval: exact for data-aided, asymptotic for the others (+-3.5 sd)
    assert 0.84 <= s["coverage"] <= 0.96


def test_data_aided_coverage_pooled_over_sweep(sweep):
    # 1500 trials: sd 0.0077; the data-aided interval is exact, so tight bounds
    inside = [_summary(sweep[x]["data-aided"], sweep[x]["rho"])["coverage"] for x in SWEEP_DB]
    assert 0.875 <= float(np.mean(inside)) <= 0.925


@pytest.mark.parametrize("x_db", SWEEP_DB)
def test_data_aided_spread_against_crb(sweep, x_db):
    # REFERENCE sec. 4: CRB of the non-coherent BFSK data-aided estimate. The
    # estimator uses the wrong branch alone for N, so it sits above the bound:
    # measured std / sqrt(CRB) = 1.21..1.31 here (1.17..1.28 with other seeds).
    point = sweep[x_db]
    rho = point["rho"]
    s = _summary(point["data-aided"], rho)
    crb = crb_normalised_variance_noncoherent_da(rho, L_SWEEP)
    ratio = s["rel_std"] / math.sqrt(crb)
    assert 0.95 <= ratio <= 1.5
    # and it matches its own delta-method variance ((1+2rho) + (1+rho)^2) / (L rho^2);
    # the sample std of 300 trials is good to about 4 % (1 sd)
    own = math.sqrt((1 + 2 * rho + (1 + rho) ** 2) / (L_SWEEP * rho * rho))
    assert s["rel_std"] == pytest.approx(own, rel=0.15)
    # the 90 % interval is about 2 * 1.645 of those standard deviations wide
    assert s["rel_width"] == pytest.approx(2 * 1.645 * own, rel=0.08)


# --------------------------------------------------------------------------- blind


@pytest.mark.parametrize(
    "x_db, reference",
    # REFERENCE sec. 4 [derived]: both-branch moment estimator, L = 1000:
    # -5.08 / -0.01 / 5.00 / 10.01 dB for truths -5 / 0 / 5 / 10 (mean of the
    # linear estimates, in dB). Those are Monte Carlo figures themselves, of
    # unstated size; ours must match within 3 of our standard errors + 0.02 dB.
    [(-5.0, "-5.08"), (0.0, "-0.01"), (5.0, "5.00"), (10.0, "10.01")],
)
def test_blind_reference_values(x_db, reference):
    rng = np.random.default_rng(int(x_db) + 300)
    rho, trials, n_sym = 10 ** (x_db / 10), 1000, 1000
    z0, z1, _ = symbols(rng, rho, n_sym, trials)
    val = np.array([estimate_blind(z0[k], z1[k]).ebn0 for k in range(trials)])
    mean_db = 10 * math.log10(val.mean())
    se_db = 10 / math.log(10) * val.std(ddof=1) / val.mean() / math.sqrt(trials)
    assert abs(mean_db - float(reference)) < 3 * se_db + 0.02
    assert abs(mean_db - x_db) < 3 * se_db + 0.02  # no selection bias


def test_blind_negative_discriminant():
    # no signal resolved: -inf dB with an upper limit or -inf throughout
    for seed in range(40):
        z0, z1, _ = symbols(np.random.default_rng(seed), 0.0, 300)
        e = estimate_blind(z0, z1)
        if e.ebn0_db == -math.inf:
            assert e.ci90_db[0] == -math.inf
            assert e.ci90_db[1] >= e.ci90_db[0]
            return
    pytest.fail("no negative discriminant in 40 pure-noise records")


def test_blind_free_of_selection_bias_at_low_snr():
    # REFERENCE sec. 4: at 0 dB the decision-directed ratio tends to 3.628 dB,
    # the blind estimator to the truth
    rng = np.random.default_rng(2)
    z0, z1, _ = symbols(rng, 1.0, 400_000)
    assert estimate_blind(z0, z1).ebn0_db == pytest.approx(0.0, abs=0.05)
    raw = estimate_decision_directed(z0, z1, debias=False)
    assert raw.ebn0_db == pytest.approx(3.628, abs=0.03)


# --------------------------------------------------------------------------- decision-directed


@pytest.mark.parametrize(
    # REFERENCE sec. 4 [derived]: (gamma + 2 Pb) / (1 - Pb), Pb = exp(-gamma/2)/2
    "true_db, limit_db",
    [(0.0, "3.628"), (3.0, "4.622"), (6.0, "6.454"), (10.0, "10.018")],
)
def test_decision_directed_map(true_db, limit_db):
    g = 10 ** (true_db / 10)
    assert_printed(10 * math.log10(decision_directed_limit(g)), limit_db)
    # the inverse undoes it
    assert 10 * math.log10(debias_decision_directed(decision_directed_limit(g))) == pytest.approx(true_db, abs=1e-9)


@pytest.mark.parametrize("g", [0.3, 1.0, 4.0, 12.0])
def test_decision_directed_map_by_quadrature(g):
    # independent check of the map: E min(X, Y) = integral P(X > t) P(Y > t) dt
    # with 2X ~ non-central chi-square(2, 2g) and Y ~ Exp(1) (N = 1), and
    # E max + E min = g + 2; the limit is E max / E min - 1
    e_min = integrate.quad(lambda t: stats.ncx2.sf(2 * t, 2, 2 * g) * math.exp(-t), 0, np.inf, epsabs=1e-13)[0]
    e_max = g + 2 - e_min
    assert decision_directed_limit(g) == pytest.approx(e_max / e_min - 1, rel=1e-8)


def test_decision_directed_debias_edges():
    assert debias_decision_directed(1.5) == 0.0  # below the zero-signal limit 2
    assert debias_decision_directed(2.0) == 0.0
    out = debias_decision_directed(np.array([3.0, 30.0]))
    assert out.shape == (2,) and np.all(np.diff(out) > 0)
    # monotone map, above the truth everywhere
    g = np.linspace(0.01, 40, 200)
    assert np.all(np.diff(decision_directed_limit(g)) > 0)
    assert np.all(decision_directed_limit(g) > g)


# --------------------------------------------------------------------------- pooling


@pytest.mark.parametrize(
    "fun",
    [
        lambda z0, z1, b: estimate_data_aided(z0, z1, b),
        lambda z0, z1, b: estimate_blind(z0, z1),
        lambda z0, z1, b: estimate_decision_directed(z0, z1),
        lambda z0, z1, b: estimate_decision_directed(z0, z1, debias=False),
    ],
)
def test_pool_equals_one_call_on_all_symbols(fun):
    rng = np.random.default_rng(77)
    z0, z1, bits = symbols(rng, 12.0, 1000)
    cuts = [0, 137, 401, 403, 820, 1000]  # unequal frames, one of 2 symbols
    parts = [fun(z0[a:b], z1[a:b], bits[a:b]) for a, b in zip(cuts[:-1], cuts[1:])]
    whole = fun(z0, z1, bits)
    pooled = pool(parts)
    assert pooled.n_symbols == 1000
    assert pooled.ebn0_db == pytest.approx(whole.ebn0_db, abs=1e-9)
    assert pooled.ci90_db == pytest.approx(whole.ci90_db, abs=1e-6)
    assert pooled.method == whole.method


@settings(max_examples=20, deadline=None)
@given(seed=st.integers(0, 2**31), scale=st.floats(1e-9, 1e9))
def test_scale_free_and_pool_order_free(seed, scale):
    rng = np.random.default_rng(seed)
    z0, z1, bits = symbols(rng, 8.0, 300)
    for fun in (lambda a, b: estimate_data_aided(a, b, bits), estimate_blind, estimate_decision_directed):
        ref = fun(z0, z1)
        scaled = fun(scale * z0, scale * z1)
        assert scaled.ebn0_db == pytest.approx(ref.ebn0_db, abs=1e-7)
        assert scaled.ci90_db == pytest.approx(ref.ci90_db, abs=1e-6)
    frames = [estimate_blind(z0[i : i + 100], z1[i : i + 100]) for i in (0, 100, 200)]
    a, b = pool(frames), pool(frames[::-1])
    assert a.ebn0_db == pytest.approx(b.ebn0_db, abs=1e-9)


def test_pool_hand_built_estimates():
    # no sums kept: symbol-weighted linear mean, independent half-widths
    a = EbN0Estimate(ebn0_db=10.0, ci90_db=(9.0, 11.0), n_symbols=100, method="blind")
    b = EbN0Estimate(ebn0_db=13.0, ci90_db=(12.0, 14.0), n_symbols=300, method="blind")
    p = pool([a, b])
    expected = (100 * 10.0 + 300 * 10**1.3) / 400
    assert p.ebn0 == pytest.approx(expected, rel=1e-12)
    assert p.n_symbols == 400
    ha = (10**1.1 - 10**0.9) / 2
    hb = (10**1.4 - 10**1.2) / 2
    half = math.hypot(0.25 * ha, 0.75 * hb)
    assert lin(p.ci90_db[0]) == pytest.approx(expected - half, rel=1e-9)
    assert lin(p.ci90_db[1]) == pytest.approx(expected + half, rel=1e-9)


def test_pool_rejects_mixtures_and_nothing():
    rng = np.random.default_rng(1)
    z0, z1, bits = symbols(rng, 10.0, 50)
    with pytest.raises(EstimateError, match="one method"):
        pool([estimate_blind(z0, z1), estimate_data_aided(z0, z1, bits)])
    with pytest.raises(EstimateError, match="at least one"):
        pool([])


# --------------------------------------------------------------------------- Cramér–Rao bounds


def test_crb_reference_values():
    # REFERENCE sec. 4 [derived], L = 1000
    assert_printed(crb_normalised_variance_noncoherent_da(1.0, 1000), "5.64e-3")
    assert_printed(crb_normalised_variance_noncoherent_da(10.0, 1000), "9.58e-4")
    assert_printed(crb_normalised_variance_coherent_da(1.0, 1000), "3.00e-3")
    assert_printed(crb_normalised_variance_coherent_da(10.0, 1000), "1.20e-3")
    np.testing.assert_allclose(
        crb_normalised_variance_noncoherent_da(np.array([1.0, 10.0]), 1000),
        [crb_normalised_variance_noncoherent_da(1.0, 1000), crb_normalised_variance_noncoherent_da(10.0, 1000)],
    )


def _fisher_by_finite_differences(s):
    """Fisher information about (S, N) at N = 1 from x = |s + n|^2, independently.

    log-density from scipy: 2x/N ~ non-central chi-square(2, 2S/N); scores by
    central differences, then J = E[score score^T] by Simpson's rule on a fine grid.
    """
    def logpdf(x, S, N):
        return stats.ncx2.logpdf(2 * x / N, 2, 2 * S / N) + math.log(2 / N)

    h = 1e-5
    x = np.linspace(0.0, (math.sqrt(s) + 12) ** 2, 100_001)
    ds = (logpdf(x, s + h, 1.0) - logpdf(x, s - h, 1.0)) / (2 * h)
    dn = (logpdf(x, s, 1.0 + h) - logpdf(x, s, 1.0 - h)) / (2 * h)
    dens = np.exp(logpdf(x, s, 1.0))
    e = lambda f: integrate.simpson(dens * f, x=x)
    return np.array([[e(ds * ds), e(ds * dn)], [e(ds * dn), e(dn * dn)]])


@pytest.mark.parametrize("s", [1.0, 10.0, 40.0])
def test_crb_derivation(s):
    # Fisher information of the Rician branch recomputed from scipy's
    # non-central chi-square log-density; plus 1/N^2 from the exponential branch
    j = _fisher_by_finite_differences(s)
    j[1, 1] += 1.0
    g = np.array([1.0, -s])
    crb = float(g @ np.linalg.solve(j, g)) / (s * s)
    assert crb_normalised_variance_noncoherent_da(s, 1) == pytest.approx(crb, rel=2e-5)
    np.testing.assert_allclose(estimate_bounds._rician_fisher(s), j - np.diag([0.0, 1.0]), rtol=2e-5, atol=1e-9)


def test_crb_high_snr_limit():
    # high Eb/N0: the Rician amplitude becomes Gaussian (half a complex sample's
    # noise information) -> (2/rho + 2/3) / L, approached like 1/rho
    for rho in (1e3, 1e4):
        got = crb_normalised_variance_noncoherent_da(rho, 1)
        assert abs(got / (2 / rho + 2 / 3) - 1) < 2 / rho
    # a lower bound: the data-aided estimator's large-L variance is never below it
    g = np.logspace(-1, 3, 9)
    own = ((1 + 2 * g) + (1 + g) ** 2) / (g * g)
    assert np.all(crb_normalised_variance_noncoherent_da(g, 1) <= own)


def test_single_symbol_frames():
    # a truncated frame of one symbol still gets a (wide-open) estimate, never a crash
    e = estimate_data_aided([9.0], [1.0], [0])
    assert e.ebn0_db == -math.inf  # (L-1)/L = 0: the unbiased value is -1
    assert e.ci90_db[0] < e.ci90_db[1]
    for e in (estimate_blind([9.0], [1.0]), estimate_decision_directed([9.0], [1.0])):
        assert e.n_symbols == 1
        assert e.ci90_db == (-math.inf, math.inf)
    # blind point value of one symbol: M2 = 10, P = 9, S = 8, N = 1
    assert estimate_blind([9.0], [1.0]).ebn0 == pytest.approx(8.0)


# --------------------------------------------------------------------------- the result object


def test_estimate_object():
    rng = np.random.default_rng(4)
    z0, z1, bits = symbols(rng, 15.0, 200)
    e = estimate_data_aided(z0, z1, bits)
    d = e.as_dict()
    assert set(d) == {"ebn0_db", "ci90_db", "n_symbols", "method"}
    assert d["method"] == "data-aided" and d["n_symbols"] == 200
    json.dumps(d)
    with pytest.raises(dataclasses.FrozenInstanceError):
        e.ebn0_db = 3.0  # type: ignore[misc]
    assert "_stats" not in repr(e)
    neg = EbN0Estimate(ebn0_db=-math.inf, ci90_db=(-math.inf, 2.0), n_symbols=10, method="blind")
    assert neg.ebn0 == 0.0
    assert json.loads(json.dumps(neg.as_dict()))["ebn0_db"] == -math.inf


@pytest.mark.parametrize(
    "kwargs, match",
    [
        (dict(ebn0_db=1.0, ci90_db=(0.0, 2.0), n_symbols=10, method="guess"), "method 'guess'"),
        (dict(ebn0_db=1.0, ci90_db=(0.0, 2.0), n_symbols=0, method="blind"), "n_symbols 0"),
        (dict(ebn0_db=float("nan"), ci90_db=(0.0, 2.0), n_symbols=10, method="blind"), "ebn0_db nan"),
        (dict(ebn0_db=1.0, ci90_db=(3.0, 2.0), n_symbols=10, method="blind"), "lower <= upper"),
        (dict(ebn0_db=1.0, ci90_db=(3.0,), n_symbols=10, method="blind"), "ci90_db"),
    ],
)
def test_estimate_validation(kwargs, match):
    with pytest.raises(EstimateError, match=match):
        EbN0Estimate(**kwargs)


@pytest.mark.parametrize(
    "call, match",
    [
        (lambda: estimate_blind(np.ones(5), np.ones(4)), "equal length"),
        (lambda: estimate_blind(np.ones(0), np.ones(0)), "at least 1"),
        (lambda: estimate_blind(np.ones(5), np.zeros(5)), "no noise"),
        (lambda: estimate_decision_directed(np.ones(5), np.zeros(5)), "no noise"),
        (lambda: estimate_blind(-np.ones(5), np.ones(5)), "z0sq"),
        (lambda: estimate_blind(np.ones(5), np.full(5, np.nan)), "z1sq"),
        (lambda: estimate_data_aided(np.ones(5), np.ones(5), np.full(5, 2)), "0 or 1"),
        (lambda: estimate_data_aided(np.ones(5), np.ones(5), np.zeros(4)), "bits shape"),
        (lambda: estimate_data_aided(np.ones(5), np.zeros(5), np.zeros(5)), "no noise"),
        (lambda: crb_normalised_variance_noncoherent_da(0.0, 100), "ebn0 0.0"),
        (lambda: crb_normalised_variance_coherent_da(1.0, 0), "n_symbols 0"),
        (lambda: decision_directed_limit(-1.0), "ebn0 -1.0"),
    ],
)
def test_bad_inputs_raise_estimate_error(call, match):
    with pytest.raises(EstimateError, match=match):
        call()
    assert issubclass(EstimateError, IqdemodError) and issubclass(EstimateError, ValueError)  # callers keep working
