"""Every stateful stage, cut at random points, gives what one call on the whole input gives.

(The test scipy.signal applies to its filters' zi/zf.)
"""

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

import iqdemod
from iqdemod import bursts as B
from iqdemod.receiver import plan_receiver
from iqdemod.channel import channelize, flush_channel

from conftest import make_capture, make_link


def _pieces(x, cuts):
    cuts = sorted(set(c % (len(x) + 1) for c in cuts))
    edges = [0, *cuts, len(x)]
    return [x[a:b] for a, b in zip(edges[:-1], edges[1:])]


@pytest.fixture(scope="module")
def plan():
    return plan_receiver(make_link(), 1_024_000)


@pytest.fixture(scope="module")
def samples():
    rng = np.random.default_rng(5)
    n = 60_000
    t = np.arange(n)
    x = 0.3 * np.exp(2j * np.pi * 141_000 * t / 1_024_000) + 0.05 * (rng.standard_normal(n) + 1j * rng.standard_normal(n))
    return x.astype(np.complex64)


def _channel_all(plan, pieces):
    state, outs = plan.tuner.initial_state(), []
    for piece in pieces:
        before = state
        y, state = channelize(piece, plan.tuner, state)
        assert before.n_in + len(piece) == state.n_in  # the caller's state was not changed
        outs.append(y)
    y, state = flush_channel(plan.tuner, state)
    return np.concatenate([*outs, y]), state


@settings(max_examples=25, deadline=None)
@given(cuts=st.lists(st.integers(0, 60_000), max_size=8))
def test_channel_is_cut_invariant(plan, samples, cuts):
    whole, whole_state = _channel_all(plan, [samples])
    cut, cut_state = _channel_all(plan, _pieces(samples, cuts))
    np.testing.assert_array_equal(cut, whole)  # blocks sit on the global sample grid: bit for bit
    assert cut_state.moments == whole_state.moments
    assert len(whole) == -(-len(samples) // plan.tuner.decimation)  # outputs m with m·D inside the input


def test_channel_moves_the_signal_to_zero_with_unit_gain(plan, samples):
    y, _ = _channel_all(plan, [samples])
    y = y[50:-50]  # after the filter's start-up, before its run-out
    # the tone sits 4 kHz above the 137 kHz centre: it must come out at 4 kHz, amplitude 0.3
    spec = np.abs(np.fft.fft(y * np.hanning(len(y))))
    f = np.fft.fftfreq(len(y), 1 / plan.rate_hz)
    assert abs(f[np.argmax(spec)] - 4000) < plan.rate_hz / len(y) * 1.5
    assert np.mean(np.abs(y)) == pytest.approx(0.3, rel=0.03)


@pytest.fixture(scope="module")
def decimated(tmp_path_factory):
    meta, _ = make_capture(tmp_path_factory.mktemp("det") / "d", frames=6, seed=2, ebn0=(14.0,))
    link = make_link()
    plan = plan_receiver(link, 1_024_000)
    with iqdemod.open_capture(meta) as cap:
        x = np.concatenate(list(cap.blocks()))
    y, _ = _channel_all(plan, [x])
    return plan, y


def _detect_all(plan, pieces):
    state, found = plan.detector.initial_state(), []
    for piece in pieces:
        got, state = B.detect(piece, plan.detector, state)
        found += got
    got, state = B.flush(plan.detector, state)
    return found + got


@settings(max_examples=15, deadline=None)
@given(cuts=st.lists(st.integers(0, 10**6), max_size=6))
def test_burst_detector_is_cut_invariant(decimated, cuts):
    plan, y = decimated
    whole = _detect_all(plan, [y])
    cut = _detect_all(plan, _pieces(y, cuts))
    assert [(b.index, b.start, b.core, len(b.samples)) for b in cut] == [
        (b.index, b.start, b.core, len(b.samples)) for b in whole
    ]
    for a, b in zip(cut, whole):
        np.testing.assert_array_equal(a.samples, b.samples)


def test_detector_finds_each_burst_once(decimated):
    plan, y = decimated
    found = _detect_all(plan, [y])
    assert len(found) == 6


def _hysteresis_frame_by_frame(power, first_frame, st, plan, out):
    """The detector's hysteresis written plainly, one frame at a time: the rule the receiver's
    faster version (which skips quiet stretches) must follow exactly."""
    on, off, fl = plan.on_ratio * st["floor"], plan.off_ratio * st["floor"], plan.frame_len
    for i, p in enumerate(power):
        f = first_frame + i
        if not st["in_burst"]:
            if p > on:
                st.update(in_burst=True, core_start=f * fl, quiet=0, piece=0, burst_start=max(0, (f - B.PRE_FRAMES) * fl))
            continue
        st["quiet"] = st["quiet"] + 1 if p < off else 0
        if st["quiet"] >= B.HANG_FRAMES:
            end = (f + 1) * fl
            core_end = end - B.HANG_FRAMES * fl
            if st["piece"] or core_end - st["core_start"] >= B.MIN_CORE_FRAMES * fl:
                out.append((st["burst_start"], st["core_start"], core_end, end, st["piece"], True))
            st.update(in_burst=False, quiet=0)
        elif (f + 1) * fl - st["burst_start"] >= plan.max_frames * fl:
            end = (f + 1) * fl
            out.append((st["burst_start"], st["core_start"], end, end, st["piece"], False))
            restart = end - plan.overlap_frames * fl
            st.update(burst_start=restart, core_start=restart, piece=st["piece"] + 1)


@settings(max_examples=200, deadline=None)
@given(levels=st.lists(st.sampled_from([0.5, 1.0, 1.4, 1.7, 8.0]), min_size=1, max_size=200),
       block=st.integers(1, 40), first=st.integers(0, 5))
def test_burst_hysteresis_follows_the_frame_by_frame_rule(levels, block, first):
    # floor 1: on over 1.6, quiet under 1.25 (1.4 is neither); a piece is cut every 13 frames
    plan = B.plan_detector(48_000, baud=1200, band_hz=1200, max_symbols=160, overlap_symbols=32)
    assert (plan.on_ratio, plan.off_ratio, plan.max_frames) == (1.6, 1.25, 13)
    power = np.array(levels)
    start = dict(floor=1.0, in_burst=False, burst_start=0, core_start=0, quiet=0, piece=0)
    fast, slow = dict(start), dict(start)
    got, want = [], []
    for a in range(0, len(power), block):
        B._run_block(power[a : a + block], first + a, fast, plan, got)
        _hysteresis_frame_by_frame(power[a : a + block], first + a, slow, plan, want)
    assert got == want and fast == slow
