"""Figures of the multi-symbol non-coherent detector (iqdemod.sequence), for the notes.

Prints, measured in one run:

1. the Monte Carlo bit error rates of the REFERENCE §12 cases: the one-symbol correlator bank
   (iqdemod.correlate) against 3-, 5- and 7-symbol windows, each with its 95 % Clopper–Pearson
   interval (REFERENCE §7), the theory beside it (iqdemod.sequence_theory: pruned sum and union
   bound) and the REFERENCE prototype's figure;
2. the cost per symbol of each window length (µs, best of 3, bursts of 300 and 3000 symbols);
3. theory against the Monte Carlo where 208-bit frames fail 5–40 % of the time, with the mean
   number of wrong bits per error event;
4. what the polyphase template bank and timing errors cost against ideal known-timing detection;
5. bias and spread of the pulse-aware Eb/N0 estimators (iqdemod.sequence_estimate).

Captures come from the independent test modulator (tests/fsk_modulator.py) with known timing and
carrier; noise by REFERENCE §8 (unit amplitude, σ² = sps/(Eb/N0)). Usage:
python checks/sequence_detector.py [--repeats R] [--quick]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
from scipy import stats

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
from fsk_modulator import cpfsk  # noqa: E402

from iqdemod.correlate import correlate, tone_sums  # noqa: E402
from iqdemod.sequence import detect, plan_sequence  # noqa: E402
from iqdemod.sequence_estimate import (estimate_sequence_data_aided,  # noqa: E402
                                       estimate_sequence_decision_directed)
from iqdemod.sequence_theory import sequence_ber, sequence_fer  # noqa: E402

SPS = 8.0
GUARD = 8
FRAME = 208

# (label, pulse, bt, h, Eb/N0 dB, REFERENCE §12 prototype figures: 1-symbol, N=3, N=5)
CASES = [
    ("GFSK BT 0.5, h 0.5, 12 dB", "gaussian", 0.5, 0.5, 12.0, ("2.7e-2", "4.8e-4", "4.8e-5")),
    ("GFSK BT 0.5, h 0.5, 10 dB", "gaussian", 0.5, 0.5, 10.0, ("6.3e-2", "2.9e-3", "3.2e-4")),
    ("GFSK BT 0.3, h 1, 14 dB", "gaussian", 0.3, 1.0, 14.0, ("3.9e-3", "0/6240", "0/6240")),
    ("rect, h 1, 11 dB", "rect", 0.5, 1.0, 11.0, ("1.4e-3", "2.9e-4", "-")),
]


def noise(n, ebn0_db, sps, rng):
    s2 = sps / 10 ** (ebn0_db / 10)
    return np.sqrt(s2 / 2) * (rng.standard_normal(n) + 1j * rng.standard_normal(n))


def ci(k, n):
    r = stats.binomtest(k, n).proportion_ci(0.95, method="exact")
    return r.low, r.high


def one_symbol(x, starts, h, sps):
    """The one-symbol quadrature-correlator bank (iqdemod.correlate), tones ±h/2 per symbol."""
    z = correlate(tone_sums(x, sps, (-h / 2, h / 2)), starts[:-1], sps)
    return np.concatenate([(np.abs(z[:, 1]) > np.abs(z[:, 0])).astype(np.uint8), [0]])


def monte_carlo(pulse, bt, h, ebn0_db, windows, n_bits, repeats, seed):
    """Errors and events per receiver over `repeats` noise draws on one random waveform."""
    rng = np.random.default_rng(seed)
    bits = rng.integers(0, 2, n_bits + 2 * GUARD)
    x0 = cpfsk(bits, sps=SPS, h=h, pulse=pulse, bt=bt)
    starts = np.arange(bits.size) * SPS + 0.5
    plans = {n: plan_sequence(h=h, pulse=pulse, bt=bt, n_symbols=n) for n in windows}
    res = {key: [0, 0, 0, 0, 0] for key in ["1"] + list(windows)}  # errors, bits, frame errors, frames, events
    inner = slice(GUARD, GUARD + n_bits)
    for _ in range(repeats):
        x = x0 * np.exp(2j * np.pi * rng.uniform()) + noise(x0.size, ebn0_db, SPS, rng)
        decided = {"1": one_symbol(x, starts, h, SPS)}
        for n, plan in plans.items():
            decided[n] = detect(x, starts, SPS, plan).bits
        for key, d in decided.items():
            e = (d != bits)[inner]
            nf = n_bits // FRAME
            fe = e[: nf * FRAME].reshape(nf, FRAME).any(axis=1)
            idx = np.flatnonzero(e)
            gap = 1 if key == "1" else int(key)
            events = 0 if idx.size == 0 else 1 + int(np.sum(np.diff(idx) > gap))
            r = res[key]
            r[0] += int(e.sum()); r[1] += n_bits; r[2] += int(fe.sum()); r[3] += nf; r[4] += events
    return res


def fmt_ber(k, n):
    lo, hi = ci(k, n)
    return f"{k / n:8.1e} ({k:>4d}/{n}) [{lo:.1e}, {hi:.1e}]"


def table(repeats, quick):
    print("1. Bit error rates, known timing and carrier, 8 samples/symbol "
          f"({'quick' if quick else 'full'} run; 95 % Clopper–Pearson intervals)")
    windows = (3, 5) if quick else (3, 5, 7)
    n_bits = 20_000 if quick else 100_000
    for label, pulse, bt, h, eb, ref in CASES:
        t0 = time.perf_counter()
        res = monte_carlo(pulse, bt, h, eb, windows, n_bits, repeats, seed=int(eb * 100 + bt * 10 + h))
        print(f"\n  {label}   (REFERENCE §12 prototype: 1-symbol {ref[0]}, N=3 {ref[1]}, N=5 {ref[2]})")
        print(f"    {'receiver':10} {'BER (errors/bits) [95 % CI]':44} {'theory pruned':>13} {'union':>9}")
        k, n = res["1"][:2]
        print(f"    {'1-symbol':10} {fmt_ber(k, n):44} {'':>13} {'':>9}")
        for w in windows:
            k, n = res[w][:2]
            kw = dict(h=h, pulse=pulse, bt=bt, n_symbols=w)
            print(f"    {'N = ' + str(w):10} {fmt_ber(k, n):44} {sequence_ber(eb, bound='pruned', **kw):13.2e} "
                  f"{sequence_ber(eb, bound='union', **kw):9.2e}")
        if pulse == "rect":
            # The bank's windows start at k·sps + ½, so the sample on each symbol boundary counts half in
            # both neighbours (a trapezoid): Σw = 8 against Σw² = 7.5 at 8 sps, +0.28 dB of decision SNR.
            print(f"    (the 1-symbol bank's half-weighted boundary samples give it 8/7.5 of the textbook SNR: "
                  f"½·exp(−Eb/2N0·8/7.5) = {0.5 * np.exp(-(10 ** (eb / 10)) * 8 / 7.5 / 2):.1e}; "
                  f"½·exp(−Eb/2N0) = {0.5 * np.exp(-(10 ** (eb / 10)) / 2):.1e})")
        print(f"    ({time.perf_counter() - t0:.0f} s)", flush=True)


def costs():
    print("\n2. Cost per symbol (µs, best of 3, in this run; modulation not included), in the combining step's"
          "\n   double precision and in the single precision the receiver uses")
    print(f"    {'link':26} {'N':>2} {'hyps':>5} {'300-sym burst':>14} {'3000-sym burst':>15} {'single: 300':>12} "
          f"{'3000':>6}")
    rng = np.random.default_rng(2)
    for label, pulse, bt, h, _, _ in CASES[::2] + CASES[3:]:
        bits = rng.integers(0, 2, 3000)
        x = cpfsk(bits, sps=8.37, h=h, pulse=pulse, bt=bt) + noise(int(np.ceil(3000 * 8.37)), 10.0, 8.37, rng)
        starts = np.arange(3000) * 8.37 + 0.5
        for w in (1, 3, 5, 7):
            plan = plan_sequence(h=h, pulse=pulse, bt=bt, n_symbols=w)
            out = []
            for precision in ("double", "single"):
                for n_sym in (300, 3000):
                    xs, ss = x[: int(np.ceil(n_sym * 8.37))], starts[:n_sym]
                    detect(xs, ss, 8.37, plan, precision=precision)
                    best = min(_timed(lambda: detect(xs, ss, 8.37, plan, precision=precision)) for _ in range(3))
                    out.append(best / n_sym * 1e6)
            print(f"    {label.split(',')[0] + ',' + label.split(',')[1]:26} {w:2d} {plan.n_hypotheses:5d} "
                  f"{out[0]:14.1f} {out[1]:15.1f} {out[2]:12.1f} {out[3]:6.1f}", flush=True)


def _timed(fn):
    t0 = time.perf_counter()
    fn()
    return time.perf_counter() - t0


def theory_check(repeats, quick):
    print("\n3. Theory against Monte Carlo where 208-bit frames fail 5–40 % of the time")
    print(f"    {'link':22} {'N':>2} {'dB':>4} {'MC BER':>9} {'bits':>7} {'MC FER':>7} {'bits/ev':>7} "
          f"{'union/MC':>8} {'pruned/MC':>9} {'domin/MC':>8} {'FER th':>7}")
    points = [("rect", 0.5, 1.0, 3, (8.0, 9.0, 10.0)),
              ("gaussian", 0.5, 0.5, 3, (9.0, 10.0, 11.0)),
              ("gaussian", 0.5, 0.5, 5, (8.0, 9.0, 10.0)),
              ("gaussian", 0.5, 0.5, 7, (7.0, 8.0, 9.0)),
              ("gaussian", 0.3, 1.0, 3, (9.0, 10.0, 11.0)),
              ("gaussian", 0.3, 1.0, 5, (8.0, 9.0, 10.0))]
    n_bits = 20_800 if quick else 104_000
    for pulse, bt, h, w, ebs in points:
        for eb in ebs:
            r = monte_carlo(pulse, bt, h, eb, (w,), n_bits, max(1, repeats // 2), seed=int(eb * 7 + w))[w]
            k, n, kf, nf, ev = r
            kw = dict(h=h, pulse=pulse, bt=bt, n_symbols=w)
            mc = k / n if k else float("nan")
            ratios = [sequence_ber(eb, bound=b, **kw) / mc for b in ("union", "pruned", "dominant")]
            name = "rect h 1" if pulse == "rect" else f"GFSK BT {bt} h {h}"
            print(f"    {name:22} {w:2d} {eb:4.1f} {k / n:9.2e} {n:7d} {kf / nf:7.3f} {k / max(ev, 1):7.2f} "
                  f"{ratios[0]:8.2f} {ratios[1]:9.2f} {ratios[2]:8.2f} {sequence_fer(eb, FRAME, **kw):7.3f}", flush=True)


def losses(quick):
    print("\n4. Cost of the polyphase bank and of timing errors against ideal known-timing detection")
    period = 8.37 / (1 + 100e-6)  # fractional samples per symbol and a clock 100 ppm fast
    rng = np.random.default_rng(44)
    n = 4000
    for pulse, bt, h, w in (("gaussian", 0.5, 0.5, 5), ("gaussian", 0.3, 1.0, 5), ("rect", 0.5, 1.0, 3)):
        bits = rng.integers(0, 2, n)
        x0 = cpfsk(bits, sps=period, h=h, pulse=pulse, bt=bt)
        starts = np.arange(n) * period + 0.5
        name = "rect h 1" if pulse == "rect" else f"GFSK BT {bt} h {h}"
        line = []
        for phases in (8, 32):
            plan = plan_sequence(h=h, pulse=pulse, bt=bt, n_symbols=w, phases=phases)
            right = np.where(bits == 1, *(lambda o: (o.m1, o.m0))(detect(x0, starts, period, plan)))[GUARD:-GUARD]
            line.append(f"F={phases}: worst {-10 * np.log10(right.min()):.5f} dB, mean {-10 * np.log10(right.mean()):.6f} dB")
        plan = plan_sequence(h=h, pulse=pulse, bt=bt, n_symbols=w)
        ex = detect(x0, starts, period, plan, exact=True)
        right = np.where(bits == 1, ex.m1, ex.m0)[GUARD:-GUARD]
        line.append(f"exact: mean {-10 * np.log10(right.mean()):.6f} dB (pulse model: span {plan.span_symbols} "
                    f"against the modulator's 4)")
        print(f"    {name}, N={w}, noise free, 8.37 sps and +100 ppm:  " + ";  ".join(line))
        offs = []
        for dt in (0.02, 0.05, 0.1):
            o = detect(x0, starts + dt * period, period, plan)
            right = np.where(bits == 1, o.m1, o.m0)[GUARD:-GUARD]
            offs.append(f"{dt:.2f} T: {-10 * np.log10(right.mean()):.3f} dB")
        print("      timing error (noise-free signal loss): " + ", ".join(offs))
        # BER with the bank against exact templates, same noise
        eb = 9.0 if pulse != "rect" else 8.0
        kb = ke = nn = flips = 0
        for _ in range(1 if quick else 5):
            x = x0 + noise(x0.size, eb, period, rng)
            b = detect(x, starts, period, plan).bits
            e = detect(x, starts, period, plan, exact=True).bits
            inner = slice(GUARD, n - GUARD)
            kb += int(np.sum(b[inner] != bits[inner])); ke += int(np.sum(e[inner] != bits[inner]))
            flips += int(np.sum(b[inner] != e[inner])); nn += n - 2 * GUARD
        print(f"      at {eb:.0f} dB over {nn} bits: bank {kb} errors, exact {ke}, decisions that differ {flips}",
              flush=True)


def estimators(quick):
    print("\n5. Eb/N0 estimators on GFSK BT 0.5, h 0.5, 8.37 samples/symbol, 2000-symbol records, "
          "random phase, residual carrier 0.5 % of the baud (truth: REFERENCE §8)")
    print(f"    {'dB':>4} {'DA bias':>8} {'DA std':>7} {'DA 90 % cover':>13} {'DD bias':>8} {'DD std':>7}")
    rng = np.random.default_rng(55)
    sps, n = 8.37, 2000
    plan = plan_sequence(h=0.5, pulse="gaussian", bt=0.5, n_symbols=5)
    bits = rng.integers(0, 2, n)
    x0 = cpfsk(bits, sps=sps, h=0.5, pulse="gaussian", bt=0.5)
    starts = np.arange(n) * sps + 0.5
    drift = np.exp(2j * np.pi * 0.005 / sps * np.arange(x0.size))
    reps = 10 if quick else 40
    for eb in (6.0, 8.0, 11.0, 14.0, 17.0, 20.0):
        da, dd, cover = [], [], 0
        for _ in range(reps):
            x = x0 * drift * np.exp(2j * np.pi * rng.uniform()) + noise(x0.size, eb, sps, rng)
            e = estimate_sequence_data_aided(x, starts, sps, bits, plan)
            da.append(e.ebn0_db)
            cover += e.ci90_db[0] <= eb <= e.ci90_db[1]
            dd.append(estimate_sequence_decision_directed(x, starts, sps, plan).ebn0_db)
        print(f"    {eb:4.0f} {np.mean(da) - eb:+8.3f} {np.std(da):7.3f} {cover / reps:13.2f} "
              f"{np.mean(dd) - eb:+8.3f} {np.std(dd):7.3f}", flush=True)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=10, help="noise draws per waveform in the BER table")
    ap.add_argument("--quick", action="store_true", help="fewer bits, N up to 5 (about a minute)")
    args = ap.parse_args()
    repeats = 2 if args.quick else args.repeats
    t0 = time.perf_counter()
    table(repeats, args.quick)
    costs()
    theory_check(repeats, args.quick)
    losses(args.quick)
    estimators(args.quick)
    print(f"\n(total {time.perf_counter() - t0:.0f} s)")


if __name__ == "__main__":
    main()
