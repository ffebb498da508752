"""Acceptance of the receiver on captures that look like real recordings.

The captures come from the independent test modulator (tests/fsk_modulator.py), which shares no
code with the project's own generator or framer. Each condition (a … l) is built by an importable
function ``build(workdir, *, seed, n_frames) -> Case``; :func:`evaluate` decodes a case with
``iqdemod.decode`` and scores it. Prints one table row per condition and exits 0 only when every
row meets its acceptance line:

- every frame right: a decoded frame with a good CRC, the sent payload, and t_s within one symbol
  of the truth (the sync word's first symbol), and no good frame that matches no sent frame;
- row c: every right frame's Eb/N0 estimate within 1.0 dB of the truth at 12–24 dB;
- row k: the ×1000 capture decodes to the same records as the ×1 capture;
- row l: no good frame in noise alone.

Usage: python checks/realworld_acceptance.py [--quick] [--only a,b,…] [--seed N] [--workdir DIR]
"""

from __future__ import annotations

import argparse
import dataclasses
import math
import sys
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
import fsk_modulator as fm  # noqa: E402  (the independent modulator lives with the tests)

import iqdemod  # noqa: E402

RATE = 1_024_000.0
BAUD = 9600.0
OFFSET_HZ = 137_000.0
CENTRE_HZ = 433_920_000.0  # a plausible capture centre for the buoy fleet's band; only metadata
START = "2026-12-01T03:00:00Z"
FRAME_SYMBOLS = 32 + 32 + 8 * (24 + 2)  # preamble, sync word, 24 payload bytes, CRC-16
REF_EBN0_DB = 18.0
LINK_KW = dict(baud=9600, shift=9600, sync="0x9B3C57E1", length=24, crc="CRC-16/IBM-3740")


def link_for(offset_hz: float) -> iqdemod.Link:
    """The buoy link of every condition, `offset_hz` from the capture centre."""
    return iqdemod.load_link(None, rate=int(RATE), offset=offset_hz, **LINK_KW)


@dataclass(frozen=True)
class Case:
    """One built condition: the capture to decode, its truth and how to judge it."""

    name: str
    title: str
    meta: Path
    offset_hz: float
    truth: list = field(default_factory=list)
    seed: int = 0
    notes: str = ""
    check_ebn0: bool = False          # row c: Eb/N0 within 1 dB is part of the acceptance
    reference_meta: Path | None = None  # row k: the ×1 capture the scaled one must equal
    noise_only: bool = False          # row l


@dataclass(frozen=True)
class Row:
    name: str
    title: str
    seed: int
    right: int
    sent: int
    false_good: int
    worst_ebn0_err_db: float | None
    passed: bool
    notes: str


# --------------------------------------------------------------------------------------------
# Helpers shared by the builders
# --------------------------------------------------------------------------------------------

def _errors(rng) -> tuple[float, float]:
    """A transmitter's carrier error (200 Hz … 2 kHz, either sign) and clock error (±40 … 80 ppm)."""
    fe = float(rng.choice([-1, 1]) * rng.uniform(200.0, 2000.0))
    ppm = float(rng.choice([-1, 1]) * rng.uniform(40.0, 80.0))
    return fe, ppm


def _payload(rng) -> bytes:
    return rng.integers(0, 256, 24, dtype=np.uint8).tobytes()


def _train(rng, n_frames, *, gap_s, ebn0_db, offset_hz, t0_s=0.005):
    """Frames one after the other, gaps drawn from `gap_s`, each with its own transmitter errors.

    `ebn0_db` is a number or a function of the frame index. Returns (txs, end time in seconds).
    """
    txs, t = [], t0_s
    for k in range(n_frames):
        fe, ppm = _errors(rng)
        e = ebn0_db(k) if callable(ebn0_db) else ebn0_db
        tx = fm.Tx(t_s=t, payload=_payload(rng), ebn0_db=e, offset_hz=offset_hz, carrier_error_hz=fe, clock_ppm=ppm)
        txs.append(tx)
        t += FRAME_SYMBOLS / tx.baud_tx + rng.uniform(*gap_s)
    return txs, t


def _noise_for(amplitude: float, ebn0_db: float = REF_EBN0_DB) -> float:
    """σ that gives `amplitude` the Eb/N0 `ebn0_db` (REFERENCE §8: A²·fs/Rb/σ²)."""
    return amplitude * math.sqrt(RATE / BAUD / 10 ** (ebn0_db / 10))


def _write(workdir: Path, name: str, x, datatype: str, scale: float = 1.0) -> Path:
    return fm.write_sigmf(workdir / name, x, rate=RATE, datatype=datatype, centre_hz=CENTRE_HZ, datetime=START,
                          scale=scale)


def _n(end_s: float) -> int:
    return int((end_s + 0.005) * RATE)


# --------------------------------------------------------------------------------------------
# The conditions
# --------------------------------------------------------------------------------------------

def spaced_bursts(workdir: Path, *, seed: int, n_frames: int) -> Case:
    """a. Frames 0.5–10 ms apart at 18 dB, each with its own carrier and clock error (cf32)."""
    rng = np.random.default_rng(seed)
    sigma = _noise_for(0.1)
    txs, end = _train(rng, n_frames, gap_s=(0.5e-3, 10e-3), ebn0_db=REF_EBN0_DB, offset_hz=OFFSET_HZ)
    x, truth = fm.render(txs, rate=RATE, n_samples=_n(end), noise_rms=sigma, seed=seed)
    return Case("a", "0.5-10 ms apart, 18 dB", _write(workdir, "a", x, "cf32_le"), OFFSET_HZ, truth, seed)


def repeated_bursts(workdir: Path, *, seed: int, n_frames: int) -> Case:
    """b. Each frame sent 3 times back to back (gaps 0 … 1.5 ms), 18 dB; groups 2–10 ms apart."""
    rng = np.random.default_rng(seed)
    sigma = _noise_for(0.1)
    txs, t = [], 0.005
    for _ in range(max(1, math.ceil(n_frames / 3))):
        fe, ppm = _errors(rng)  # one transmitter sends the three copies
        payload = _payload(rng)
        for rep in range(3):
            tx = fm.Tx(t_s=t, payload=payload, ebn0_db=REF_EBN0_DB, offset_hz=OFFSET_HZ, carrier_error_hz=fe,
                       clock_ppm=ppm)
            txs.append(tx)
            t += FRAME_SYMBOLS / tx.baud_tx
            if rep < 2:
                t += 0.0 if rng.random() < 1 / 3 else rng.uniform(0, 1.5e-3)
        t += rng.uniform(2e-3, 10e-3)
    x, truth = fm.render(txs, rate=RATE, n_samples=_n(t), noise_rms=sigma, seed=seed)
    return Case("b", "3 copies back to back, 18 dB", _write(workdir, "b", x, "cf32_le"), OFFSET_HZ, truth, seed,
                notes="a third of the gaps are 0")


def level_cycle(workdir: Path, *, seed: int, n_frames: int) -> Case:
    """c. Bursts cycling 12/16/20/24 dB, 2–6 ms apart; the per-frame Eb/N0 estimate is judged."""
    rng = np.random.default_rng(seed)
    levels = (12.0, 16.0, 20.0, 24.0)
    sigma = _noise_for(0.1, 24.0)
    txs, end = _train(rng, n_frames, gap_s=(2e-3, 6e-3), ebn0_db=lambda k: levels[k % 4], offset_hz=OFFSET_HZ)
    x, truth = fm.render(txs, rate=RATE, n_samples=_n(end), noise_rms=sigma, seed=seed)
    return Case("c", "12/16/20/24 dB cycle", _write(workdir, "c", x, "cf32_le"), OFFSET_HZ, truth, seed,
                check_ebn0=True)


def _dc_case(workdir, *, seed, n_frames, name, title, offset_hz, dc_times, iq=(0.0, 0.0)) -> Case:
    rng = np.random.default_rng(seed)
    amp = 0.1  # DC up to 3 × 0.1 and the noise keep cu8 far from its full scale
    txs, end = _train(rng, n_frames, gap_s=(0.5e-3, 10e-3), ebn0_db=REF_EBN0_DB, offset_hz=offset_hz)
    dc = dc_times * amp * np.exp(1j * rng.uniform(0, 2 * math.pi))
    x, truth = fm.render(txs, rate=RATE, n_samples=_n(end), noise_rms=_noise_for(amp), seed=seed, dc=dc,
                         iq_gain_db=iq[0], iq_phase_deg=iq[1])
    return Case(name, title, _write(workdir, name, x, "cu8"), offset_hz, truth, seed,
                notes=f"DC {abs(dc):.2f} FS, A {amp} FS")


def centre_dc(workdir: Path, *, seed: int, n_frames: int) -> Case:
    """d. cu8, signal on the capture centre, DC offset = 1 × the signal amplitude."""
    return _dc_case(workdir, seed=seed, n_frames=n_frames, name="d", title="cu8 on centre, DC 1xA",
                    offset_hz=0.0, dc_times=1.0)


def centre_dc_iq(workdir: Path, *, seed: int, n_frames: int) -> Case:
    """e. cu8, on the centre, DC = 3 × amplitude, IQ imbalance 1 dB / 5°."""
    return _dc_case(workdir, seed=seed, n_frames=n_frames, name="e", title="cu8 centre, DC 3xA, IQ 1dB/5deg",
                    offset_hz=0.0, dc_times=3.0, iq=(1.0, 5.0))


def near_centre_dc(workdir: Path, *, seed: int, n_frames: int) -> Case:
    """f. cu8, signal 20 kHz off centre, DC = 3 × amplitude."""
    return _dc_case(workdir, seed=seed, n_frames=n_frames, name="f", title="cu8 20 kHz off, DC 3xA",
                    offset_hz=20_000.0, dc_times=3.0)


def _neighbour_case(workdir, *, seed, n_frames, name, title, level_db, nb_offset_hz, wanted_hz=OFFSET_HZ,
                    iq=(0.0, 0.0)) -> Case:
    rng = np.random.default_rng(seed)
    # the strongest component at 0.5 full scale at most; the wanted signal is what is left
    amp = min(0.1, 0.5 * 10 ** (-level_db / 20))
    txs, end = _train(rng, n_frames, gap_s=(0.5e-3, 10e-3), ebn0_db=REF_EBN0_DB, offset_hz=wanted_hz)
    txs[0] = dataclasses.replace(txs[0], ebn0_db=None, amplitude=amp)  # levels are relative to this one
    nb = fm.Neighbour(offset_hz=nb_offset_hz, level_db=level_db)
    x, truth = fm.render(txs, rate=RATE, n_samples=_n(end), noise_rms=_noise_for(amp), seed=seed,
                         neighbours=[nb], iq_gain_db=iq[0], iq_phase_deg=iq[1])
    return Case(name, title, _write(workdir, name, x, "ci16_le"), wanted_hz, truth, seed,
                notes=f"neighbour {level_db:+.0f} dB at {nb_offset_hz / 1e3:+.0f} kHz, A {amp:.4f} FS")


def neighbour_20db(workdir: Path, *, seed: int, n_frames: int) -> Case:
    """g. An always-on FSK neighbour (same baud and h), +20 dB, 40 kHz away."""
    return _neighbour_case(workdir, seed=seed, n_frames=n_frames, name="g", title="neighbour +20 dB at 40 kHz",
                           level_db=20.0, nb_offset_hz=OFFSET_HZ + 40_000)


def neighbour_10db(workdir: Path, *, seed: int, n_frames: int) -> Case:
    """h. An always-on FSK neighbour, +10 dB, 30 kHz away (below)."""
    return _neighbour_case(workdir, seed=seed, n_frames=n_frames, name="h", title="neighbour +10 dB at 30 kHz",
                           level_db=10.0, nb_offset_hz=OFFSET_HZ - 30_000)


def neighbour_40db(workdir: Path, *, seed: int, n_frames: int) -> Case:
    """i. An always-on FSK neighbour, +40 dB, 100 kHz away."""
    return _neighbour_case(workdir, seed=seed, n_frames=n_frames, name="i", title="neighbour +40 dB at 100 kHz",
                           level_db=40.0, nb_offset_hz=OFFSET_HZ + 100_000)


def iq_mirror(workdir: Path, *, seed: int, n_frames: int) -> Case:
    """j. Wanted at +137 kHz, an always-on +20 dB FSK signal at −137 kHz, IQ imbalance 1 dB / 3°.

    Its image (about 24 dB down, REFERENCE §11) lands on the wanted signal about 4 dB above it.
    """
    return _neighbour_case(workdir, seed=seed, n_frames=n_frames, name="j", title="IQ mirror: +20 dB at -137 kHz",
                           level_db=20.0, nb_offset_hz=-OFFSET_HZ, iq=(1.0, 3.0))


def scaled_copy(workdir: Path, *, seed: int, n_frames: int) -> Case:
    """k. The same cf32 capture written ×1 and ×1000; the decoded records must be the same."""
    rng = np.random.default_rng(seed)
    txs, end = _train(rng, n_frames, gap_s=(0.5e-3, 10e-3), ebn0_db=REF_EBN0_DB, offset_hz=OFFSET_HZ)
    x, truth = fm.render(txs, rate=RATE, n_samples=_n(end), noise_rms=_noise_for(0.1), seed=seed)
    ref = _write(workdir, "k_x1", x, "cf32_le")
    meta = _write(workdir, "k_x1000", x, "cf32_le", scale=1000.0)
    return Case("k", "cf32 x1000 vs x1", meta, OFFSET_HZ, truth, seed, reference_meta=ref)


def noise_only(workdir: Path, *, seed: int, n_frames: int = 0, duration_s: float = 10.0) -> Case:
    """l. Noise alone (cu8, σ as in rows d–f), `duration_s` long: no good frame may come out."""
    x, _ = fm.render([], rate=RATE, n_samples=int(duration_s * RATE), noise_rms=_noise_for(0.1), seed=seed)
    return Case("l", f"noise only, cu8, {duration_s:g} s", _write(workdir, "l", x, "cu8"), OFFSET_HZ, [], seed,
                noise_only=True)


CONDITIONS = {
    "a": spaced_bursts, "b": repeated_bursts, "c": level_cycle, "d": centre_dc, "e": centre_dc_iq,
    "f": near_centre_dc, "g": neighbour_20db, "h": neighbour_10db, "i": neighbour_40db, "j": iq_mirror,
    "k": scaled_copy, "l": noise_only,
}


# --------------------------------------------------------------------------------------------
# Scoring
# --------------------------------------------------------------------------------------------

def match_frames(frames, truth, *, baud: float = BAUD):
    """Pair truth frames with decoded good frames: same payload, |Δt| ≤ 1 symbol, each used once.

    Returns (pairs [(truth dict, Frame)], unmatched good frames).
    """
    good = [f for f in frames if f.crc_ok]
    used = set()
    pairs = []
    for tr in truth:
        best, best_dt = None, 1.0 / baud
        for i, f in enumerate(good):
            dt = abs(f.t_s - tr["t_s"])
            if i not in used and f.payload.hex() == tr["payload_hex"] and dt <= best_dt:
                best, best_dt = i, dt
        if best is not None:
            used.add(best)
            pairs.append((tr, good[best]))
    return pairs, [f for i, f in enumerate(good) if i not in used]


def _record(f) -> tuple:
    return (f.sample, f.burst, f.length, f.payload, f.crc_ok, f.sync_errors, f.truncated)


def _same_records(a, b, rel: float = 1e-6) -> tuple[bool, str]:
    """Discrete fields identical; t_s, freq_error_hz and ebn0_db equal to `rel` (float32 rounding)."""
    if len(a) != len(b):
        return False, f"{len(a)} vs {len(b)} records"
    for fa, fb in zip(a, b):
        if _record(fa) != _record(fb):
            return False, f"record at sample {fa.sample} differs"
        for key in ("t_s", "freq_error_hz", "ebn0_db"):
            va, vb = getattr(fa, key), getattr(fb, key)
            if (va is None) != (vb is None) or (va is not None and not math.isclose(va, vb, rel_tol=rel, abs_tol=1e-9)):
                return False, f"{key} {va} vs {vb} at sample {fa.sample}"
    return True, f"{len(a)} records identical"


# Rows whose acceptance includes per-frame Eb/N0 within 1 dB of the truth (the first two lines)
EBN0_ROWS = {"a", "b", "c", "d", "e"}
# Rows with 12 dB frames, whose misses are weighed against the ideal receiver
STATISTICAL_ROWS = {"c"}


def evaluate(case: Case, *, baud: float = BAUD) -> Row:
    """Decode `case` and score it against its acceptance line."""
    link = link_for(case.offset_hz)
    frames = list(iqdemod.decode(case.meta, link))
    notes = [case.notes] if case.notes else []
    good = [f for f in frames if f.crc_ok]
    if case.noise_only:
        notes.append(f"{len(frames)} sync hit(s)")
        return Row(case.name, case.title, case.seed, 0, 0, len(good), None, len(good) == 0, "; ".join(notes))
    pairs, unmatched = match_frames(frames, case.truth, baud=baud)
    sent_payloads = {t["payload_hex"] for t in case.truth}
    foreign = sum(f.payload.hex() not in sent_payloads for f in unmatched)
    if unmatched:
        notes.append(f"{foreign} unsent payload(s), {len(unmatched) - foreign} repeat/mistimed")
    if pairs:
        notes.append(f"max|dt| {max(abs(f.t_s - tr['t_s']) for tr, f in pairs) * baud:.2f} sym")
    bad_crc = sum(not f.crc_ok for f in frames)
    if bad_crc:
        notes.append(f"{bad_crc} bad-CRC sync hit(s)")
    errs = [(tr, f.ebn0_db - tr["ebn0_db"]) for tr, f in pairs if f.ebn0_db is not None and tr["ebn0_db"] is not None]
    worst = max((e for _, e in errs), key=abs, default=None)
    missed_n = len(case.truth) - len(pairs)
    # what the ideal non-coherent receiver would miss: Pb = ½·exp(−γ/2) (REFERENCE §1) over the
    # 208 payload and CRC bits
    ideal = sum(1 - (1 - 0.5 * math.exp(-(10 ** (t["ebn0_db"] / 10)) / 2)) ** (8 * 26)
                for t in case.truth if t.get("ebn0_db") is not None)
    if case.name in STATISTICAL_ROWS:
        # frames at 12 dB fail now and then even in the ideal receiver: misses are judged against
        # that theory (at most the 99 % point of a Poisson count with the ideal mean)
        from scipy.stats import poisson

        allowed = int(poisson.ppf(0.99, ideal))
        notes.append(f"missed {missed_n}, ideal receiver {ideal:.1f}, allowed {allowed}")
        passed = missed_n <= allowed and not unmatched
    else:
        passed = missed_n == 0 and not unmatched
    if errs:
        notes.append(f"Eb/N0 error mean {np.mean([e for _, e in errs]):+.2f} dB, rms "
                     f"{np.sqrt(np.mean([e * e for _, e in errs])):.2f} dB")
    if case.check_ebn0 or case.name in EBN0_ROWS:
        by_level = {}
        for tr, e in errs:
            by_level.setdefault(round(tr["ebn0_db"]), []).append(e)
        notes.append(" ".join(f"{lv}dB:{np.mean(v):+.2f}/{max(v, key=abs):+.2f}" for lv, v in sorted(by_level.items()))
                     + " (mean/worst)")
        missing_est = sum(f.ebn0_db is None for _, f in pairs)
        if missing_est:
            notes.append(f"{missing_est} without an estimate")
        passed = passed and missing_est == 0 and worst is not None and all(abs(e) <= 1.0 for _, e in errs)
    if len(pairs) < len(case.truth):
        missed = [t for t in case.truth if all(t is not p[0] for p in pairs)]
        if case.check_ebn0:
            lv = {}
            for t in missed:
                lv[round(t["ebn0_db"])] = lv.get(round(t["ebn0_db"]), 0) + 1
            notes.append("missed " + ", ".join(f"{n} at {k} dB" for k, n in sorted(lv.items())))
    if case.reference_meta is not None:
        ref = list(iqdemod.decode(case.reference_meta, link))
        same, why = _same_records(ref, frames)
        notes.append(("same as x1: " if same else "DIFFERS from x1: ") + why)
        passed = passed and same
    return Row(case.name, case.title, case.seed, len(pairs), len(case.truth), len(unmatched), worst, passed,
               "; ".join(notes))


# --------------------------------------------------------------------------------------------
# The table
# --------------------------------------------------------------------------------------------

def frame_counts(quick: bool) -> dict[str, int]:
    first, other = (30, 10) if quick else (300, 30)
    return {k: (first if k == "a" else other) for k in CONDITIONS}


def run(names, *, quick: bool, workdir: Path, base_seed: int, out=sys.stdout) -> list[Row]:
    counts = frame_counts(quick)
    rows = []
    header = (f"{'':2}{'condition':32} {'seed':>6} {'right/sent':>11} {'false good':>10} {'worst dEb/N0':>12}  "
              f"{'ok':4} notes")
    print(header, file=out)
    print("-" * len(header), file=out)
    for name in names:
        seed = base_seed + 101 * (ord(name) - ord("a"))
        build = CONDITIONS[name]
        kwargs = dict(duration_s=2.0 if quick else 10.0) if name == "l" else {}
        t0 = time.monotonic()
        case = build(workdir, seed=seed, n_frames=counts[name], **kwargs)
        row = evaluate(case)
        rows.append(row)
        rs = "-" if case.noise_only else f"{row.right}/{row.sent}"
        we = "-" if row.worst_ebn0_err_db is None else f"{row.worst_ebn0_err_db:+.2f} dB"
        print(f"{name:2}{row.title:32} {row.seed:6d} {rs:>11} {row.false_good:10d} {we:>12}  "
              f"{'PASS' if row.passed else 'FAIL':4} {row.notes} [{time.monotonic() - t0:.0f} s]", file=out, flush=True)
        for p in workdir.glob(f"{name}*.sigmf-*"):
            p.unlink()  # keep the temp folder small; the seed rebuilds any capture
    return rows


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="about 30 frames for row a and 10 for the others")
    ap.add_argument("--only", default=None, help="comma-separated condition letters, e.g. a,c,l")
    ap.add_argument("--seed", type=int, default=20261202, help="base seed; each row adds its own step")
    ap.add_argument("--workdir", type=Path, default=None, help="folder for the captures (default: a temp folder)")
    args = ap.parse_args(argv)
    names = list(CONDITIONS) if args.only is None else [s.strip() for s in args.only.split(",") if s.strip()]
    unknown = [n for n in names if n not in CONDITIONS]
    if unknown:
        ap.error(f"unknown condition(s) {unknown}: expected letters among {''.join(CONDITIONS)}")
    print(f"realworld acceptance: 9600 Bd, h = 1, {RATE / 1e6:g} MS/s, base seed {args.seed}"
          f"{' (quick)' if args.quick else ''}; a frame is right with a good CRC, its payload and |dt| <= 1 symbol")
    with tempfile.TemporaryDirectory() as tmp:
        workdir = args.workdir or Path(tmp)
        workdir.mkdir(parents=True, exist_ok=True)
        rows = run(names, quick=args.quick, workdir=workdir, base_seed=args.seed)
    failed = [r.name for r in rows if not r.passed]
    print(f"\n{len(rows) - len(failed)} of {len(rows)} conditions pass" + (f"; failing: {','.join(failed)}" if failed else ""))
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
