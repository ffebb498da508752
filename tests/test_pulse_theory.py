"""The one-symbol correlator bank receiving a Gaussian (or any continuous-phase) pulse, and the curves
that show it beside the multi-symbol detector (issue 15).

Outside facts: REFERENCE.md §1 (orthogonal tones), §2 (correlated tones, Proakis; Stein 1964), §3
(mismatched correlator) and §7 (Clopper–Pearson), and a Monte Carlo of a one-symbol correlator bank on
the independent test modulator (tests/fsk_modulator.py), which shares no code with iqdemod.
"""

from __future__ import annotations

import json
import math
from decimal import Decimal

import numpy as np
import pytest
from click.testing import CliRunner

from fsk_modulator import cpfsk
from iqdemod.errors import EstimateError, LinkError
from iqdemod.predict import (
    clopper_pearson,
    curves_table,
    ebn0_db_for_pb,
    from_db,
    pb_mismatched,
    pb_noncoherent,
    pb_noncoherent_correlated,
    pb_per_symbol_pulse,
    tone_correlation,
)
from iqdemod.sequence import plan_sequence
from iqdemod.sequence_theory import sequence_ber
from iqdemod_cli.main import main


def assert_printed(value: float, printed: str) -> None:
    """`value` rounds to `printed`: within half a unit of its last printed digit."""
    unit = 10.0 ** Decimal(printed).as_tuple().exponent
    assert abs(value - float(printed)) <= 0.5 * unit * (1 + 1e-9), (value, printed)


# --------------------------------------------------------------------------- rectangular pulse: the textbook


def test_rect_h1_is_orthogonal_noncoherent():
    # REFERENCE §1 [book] (Proakis ch. 4; Sklar ch. 4): Pb = ½·exp(−γ/2); continuous and sampled
    g = from_db(np.linspace(0.0, 18.0, 19))
    expected = 0.5 * np.exp(-g / 2)
    np.testing.assert_allclose(pb_per_symbol_pulse(g, h=1.0), expected, rtol=1e-9)
    np.testing.assert_allclose(pb_per_symbol_pulse(g, h=1.0, samples_per_symbol=8), expected, rtol=1e-9)
    assert_printed(pb_per_symbol_pulse(10.0, h=1.0), "3.3690e-3")  # REFERENCE §1 point value at 10 dB


@pytest.mark.parametrize("h, pb10, pb13, need", [
    # REFERENCE §2 table [book/paper]: Proakis, envelope detection of correlated signals; Stein 1964
    (0.5, "3.3207e-2", "4.0894e-3", "17.05"),
    (0.75, "6.6218e-3", "1.4358e-4", "14.33"),
])
def test_rect_fractional_h_is_the_correlated_tones_result(h, pb10, pb13, need):
    # For h not whole the two correlators' noises are correlated (rho = sinc(h)·e^{jπh}); only the
    # general comparison of correlated Rician envelopes reproduces these values.
    assert_printed(pb_per_symbol_pulse(from_db(10.0), h=h), pb10)
    assert_printed(pb_per_symbol_pulse(from_db(13.0), h=h), pb13)
    assert_printed(ebn0_db_for_pb(1e-5, "per_symbol_pulse", h=h), need)


def test_rect_sampled_uses_the_discrete_correlation():
    # REFERENCE §2 [derived]: with N = 16 samples per symbol, |rho_16| = 0.63764 at h = 0.5
    g = from_db(np.array([8.0, 10.0, 13.0]))
    rho16 = tone_correlation(0.5, samples_per_symbol=16)
    assert abs(rho16) == pytest.approx(0.63764, abs=5e-6)
    np.testing.assert_allclose(pb_per_symbol_pulse(g, h=0.5, samples_per_symbol=16),
                               pb_noncoherent_correlated(g, rho16), rtol=1e-9)


@pytest.mark.parametrize("eps, pb10", [
    # REFERENCE §3 table [derived]: h = 1, the received tones δf·T above the references
    (0.1, "5.171e-3"), (0.2, "1.418e-2"), (0.3, "4.675e-2"),
])
def test_rect_with_a_carrier_error_is_the_mismatched_correlator(eps, pb10):
    assert_printed(pb_per_symbol_pulse(from_db(10.0), h=1.0, freq_error_T=eps), pb10)
    # and for non-orthogonal tones it agrees with the closed form of pb_mismatched
    g = from_db(np.array([6.0, 12.0]))
    np.testing.assert_allclose(pb_per_symbol_pulse(g, h=0.75, freq_error_T=eps),
                               pb_mismatched(g, h=0.75, freq_error_T=eps), rtol=1e-9)


# --------------------------------------------------------------------------- Gaussian pulse


def _bank_errors(*, h: float, bt: float, ebn0_db: float, n_bits: int, seed: int, sps: int = 8) -> tuple[int, int]:
    """Errors of a one-symbol quadrature correlator bank with square-law decisions, known timing and tones.

    The waveform is the independent modulator's GFSK (its sample k at k/sps symbols, so symbol i's slot
    is samples i·sps … (i + 1)·sps − 1); noise of total variance sps/γ per sample for unit amplitude
    (REFERENCE §8: Eb/N0 = A²·(fs/Rb)/σ²). The first and last few symbols (pulses cut by the burst's
    edges) are left out.
    """
    rng = np.random.default_rng(seed)
    bits = rng.integers(0, 2, n_bits)
    span = plan_sequence(h=h, pulse="gaussian", bt=bt).span_symbols  # the theory's truncation
    x = cpfsk(bits, sps=sps, h=h, pulse="gaussian", bt=bt, span=span, phase0=rng.uniform(0, 2 * math.pi))
    sigma2 = sps / from_db(ebn0_db)
    x = x + math.sqrt(sigma2 / 2) * (rng.standard_normal(x.size) + 1j * rng.standard_normal(x.size))
    u = np.arange(sps) / sps
    slots = x[: n_bits * sps].reshape(n_bits, sps)
    z0 = slots @ np.exp(1j * np.pi * h * u)  # <w0, r>, w0 = exp(−jπh·u) the lower tone
    z1 = slots @ np.exp(-1j * np.pi * h * u)
    decided = (np.abs(z1) > np.abs(z0)).astype(int)
    edge = span
    return int(np.count_nonzero(decided[edge:-edge] != bits[edge:-edge])), n_bits - 2 * edge


@pytest.mark.parametrize("h, bt, ebn0_db, seed", [
    (0.5, 0.5, 10.0, 3),  # the REFERENCE §12 case, where a one-symbol receiver measured 6.3e-2
    (1.0, 0.3, 10.0, 5),
])
def test_gaussian_pulse_against_monte_carlo_on_the_independent_modulator(h, bt, ebn0_db, seed):
    k, n = _bank_errors(h=h, bt=bt, ebn0_db=ebn0_db, n_bits=60_000, seed=seed)
    theory = pb_per_symbol_pulse(from_db(ebn0_db), h=h, pulse="gaussian", bt=bt, samples_per_symbol=8)
    lo, hi = clopper_pearson(k, n)  # REFERENCE §7: exact 95 % interval
    assert lo <= theory <= hi, f"{k}/{n} = {k / n:.4e}, 95 % [{lo:.4e}, {hi:.4e}], theory {theory:.4e}"
    # the pulse costs: worse than rect tones of the same h (REFERENCE §2 / §1), and the sampled
    # theory differs from the continuous one only by the half-sample skew of the window
    assert theory > pb_per_symbol_pulse(from_db(ebn0_db), h=h, samples_per_symbol=8)
    assert pb_per_symbol_pulse(from_db(ebn0_db), h=h, pulse="gaussian", bt=bt) == pytest.approx(theory, rel=0.2)


def test_a_wide_gaussian_pulse_tends_to_rect():
    # BT → ∞: the Gaussian filter vanishes and the pulse is the rectangle (Murota & Hirade 1981, from memory)
    # (σ = 0.013 symbols at BT 10: the edges of the frequency steps are smoothed over a few hundredths
    # of a symbol, so the difference shrinks about as 1/BT)
    g = from_db(np.array([8.0, 12.0]))
    rect = pb_per_symbol_pulse(g, h=0.5)
    gaps = [np.max(np.abs(pb_per_symbol_pulse(g, h=0.5, pulse="gaussian", bt=bt) / rect - 1)) for bt in (2.5, 5.0, 10.0)]
    assert gaps[0] > gaps[1] > gaps[2] and gaps[2] < 4e-3


def test_narrower_pulse_costs_more():
    g = from_db(12.0)
    pbs = [pb_per_symbol_pulse(g, h=1.0, pulse="gaussian", bt=bt) for bt in (1.0, 0.5, 0.3)]
    assert pb_noncoherent(g) < pbs[0] < pbs[1] < pbs[2]


def test_shapes_inverse_and_errors():
    assert isinstance(pb_per_symbol_pulse(10.0, h=0.5, pulse="gaussian"), float)
    arr = pb_per_symbol_pulse(np.full((2, 3), 10.0), h=0.5, pulse="gaussian")
    assert arr.shape == (2, 3) and np.all(arr == arr[0, 0])
    need = ebn0_db_for_pb(1e-4, "per_symbol_pulse", h=0.5, pulse="gaussian", bt=0.5)
    assert pb_per_symbol_pulse(from_db(need), h=0.5, pulse="gaussian", bt=0.5) == pytest.approx(1e-4, rel=1e-6)
    for kw, match in [(dict(h=0.5, pulse="sinc"), "pulse"), (dict(h=0.5, pulse="gaussian", bt=0.01), "BT"),
                      (dict(h=math.nan), "h"), (dict(h=0.0), "coincide"),
                      (dict(h=0.5, samples_per_symbol=1), "samples_per_symbol")]:
        with pytest.raises(LinkError, match=match):
            pb_per_symbol_pulse(10.0, **kw)
    with pytest.raises(LinkError, match="needs h"):
        ebn0_db_for_pb(1e-5, "per_symbol_pulse", pulse="gaussian")
    with pytest.raises(EstimateError):  # a negative Eb/N0 is a statistics error (issue 11), not the link's
        pb_per_symbol_pulse(-1.0, h=0.5)


# --------------------------------------------------------------------------- curves


def test_curves_table_adds_both_detectors_for_a_gaussian_link():
    x = np.arange(4.0, 17.0, 2.0)
    t = curves_table(x, h=0.5, pulse="gaussian", bt=0.5, detector_symbols=5)
    # the existing columns are unchanged (REFERENCE §2: 3.3207e-2 at 10 dB for rect tones of h = 0.5)
    assert_printed(t["ber_link"][3], "3.3207e-2")
    assert_printed(t["needed_db"]["link"], "17.05")
    np.testing.assert_allclose(t["ber_one_symbol_pulse"], pb_per_symbol_pulse(from_db(x), h=0.5, pulse="gaussian"))
    np.testing.assert_allclose(t["ber_multi_symbol"], sequence_ber(x, h=0.5, pulse="gaussian", bt=0.5, n_symbols=5))
    np.testing.assert_allclose(t["fer_multi_symbol"], 1 - (1 - np.array(t["ber_multi_symbol"])) ** 208, rtol=1e-5)
    need = t["needed_db"]
    assert pb_per_symbol_pulse(from_db(need["one_symbol_pulse"]), h=0.5, pulse="gaussian") == pytest.approx(1e-5)
    assert sequence_ber(need["multi_symbol"], h=0.5, pulse="gaussian", bt=0.5, n_symbols=5) == pytest.approx(1e-5)
    assert need["multi_symbol"] < need["noncoherent"] < need["link"] < need["one_symbol_pulse"]


def test_curves_table_for_rect_h1_is_as_before():
    t = curves_table([10.0])
    assert "ber_multi_symbol" not in t and "ber_one_symbol_pulse" not in t
    assert_printed(t["ber_link"][0], "3.3690e-3")  # REFERENCE §1
    # a fractional h with a rect pulse is extended too; its one-symbol column is the link's own
    t = curves_table([10.0], h=0.75)
    assert t["ber_one_symbol_pulse"] == pytest.approx(t["ber_link"], rel=1e-9)
    assert_printed(t["needed_db"]["one_symbol_pulse"], "14.33")  # REFERENCE §2


def test_curves_command_json_text_and_plot(tmp_path):
    run = lambda *a: CliRunner().invoke(main, [str(v) for v in a], catch_exceptions=False)
    res = run("curves", "--baud", "4800", "--shift", "2400", "--gaussian", "0.5", "--detector-symbols", "3",
              "--ebn0", "10:10:1", "--json")
    t = json.loads(res.stdout)
    assert t["pulse"] == "gaussian" and t["bt"] == 0.5 and t["detector_symbols"] == 3
    assert_printed(t["ber_link"][0], "3.3207e-2")  # REFERENCE §2
    assert t["ber_multi_symbol"][0] == pytest.approx(sequence_ber(10.0, h=0.5, pulse="gaussian", bt=0.5, n_symbols=3))
    text = run("curves", "--baud", "4800", "--shift", "2400", "--gaussian", "0.5", "--ebn0", "8:12:2").stdout
    assert "one-symbol bank" in text and "Gaussian BT 0.5" in text and "5-symbol" in text
    assert "one-symbol bank with this pulse 19.18 dB" in text
    png = tmp_path / "g.png"
    res = run("curves", "--baud", "4800", "--shift", "4800", "--gaussian", "0.3", "--plot", png)
    assert res.exit_code == 0 and png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
