"""Several links decoded in one pass over a capture (one read, one FFT pass of the front end).

The capture comes from the tests' own modulator (tests/fsk_modulator.py): two fleets of
transmitters at different offsets, baud rates and tone shifts, in one recording. Eb/N0 follows
shared/REFERENCE.md §8. The CRC of every payload is the catalogue's CRC-16/IBM-3740, computed by
the modulator with the standard library (binascii.crc_hqx), not by the project's CRC engine.
"""

import json

import numpy as np
import pytest

import iqdemod
from iqdemod.channel import channelize, channelize_many, flush_channel, flush_channels, plan_channels
from iqdemod.errors import LinkError

import fsk_modulator as fm

RATE = 1_024_000
FAST = dict(baud=9600, shift=9600, offset=137_000)
SLOW = dict(baud=2400, shift=4800, offset=-210_000)
COMMON = dict(rate=RATE, sync="0x9B3C57E1", length=8, crc="CRC-16/IBM-3740")


def _capture(tmp_path):
    rng = np.random.default_rng(11)
    txs = []
    # each fast burst (15 ms) lies inside a slow one (60 ms) of the other link; no link overlaps itself
    for k, t in enumerate((0.004, 0.010, 0.084, 0.090, 0.164, 0.170)):
        kw = FAST if k % 2 == 0 else SLOW
        txs.append(fm.Tx(t_s=t, payload=bytes(rng.integers(0, 256, 8, dtype=np.uint8)), ebn0_db=16.0,
                         offset_hz=kw["offset"], baud=kw["baud"], h=kw["shift"] / kw["baud"],
                         carrier_error_hz=float(rng.uniform(-300, 300)), framing=dict(length="fixed")))
    x, truth = fm.render(txs, rate=RATE, n_samples=int(0.3 * RATE), noise_rms=0.05, seed=3)
    meta = fm.write_sigmf(tmp_path / "two_fleets", x, rate=RATE, datatype="ci16_le", centre_hz=869.4e6)
    return meta, truth, txs


@pytest.fixture(scope="module")
def two_fleets(tmp_path_factory):
    return _capture(tmp_path_factory.mktemp("multilink"))


def _links():
    return {"harbour-fast": iqdemod.load_link(None, **COMMON, **FAST),
            "harbour-slow": iqdemod.load_link(None, **COMMON, **SLOW)}


def test_one_pass_finds_every_frame_of_both_links_and_tags_them(two_fleets):
    meta, truth, txs = two_fleets
    frames = list(iqdemod.decode(meta, _links()))
    good = {(f.link, f.payload.hex()) for f in frames if f.crc_ok}
    want = {("harbour-fast" if tx.baud == 9600 else "harbour-slow", t["payload_hex"]) for tx, t in zip(txs, truth)}
    assert good == want
    assert all(f.as_record()["link"] == f.link for f in frames)


def test_each_link_in_one_pass_decodes_as_it_does_alone(two_fleets):
    meta, _, _ = two_fleets
    together = list(iqdemod.decode(meta, _links()))
    for name, link in _links().items():
        alone = list(iqdemod.decode(meta, link))
        mine = [f for f in together if f.link == name]
        assert [(f.sample, f.payload, f.crc_ok) for f in mine] == [(f.sample, f.payload, f.crc_ok) for f in alone]
        for a, b in zip(mine, alone):
            assert a.ebn0_db == pytest.approx(b.ebn0_db, abs=0.02)
            assert a.freq_error_hz == pytest.approx(b.freq_error_hz, abs=1.0)


def test_shared_fft_pass_gives_each_channel_as_alone():
    """Cutting two channels from one FFT pass equals running each front end on its own.

    The shared blocks are longer, so a channel's centre may fall between two bins: the rest of
    the mix is then done after decimation, which moves the filter by a few hertz. Inside the pass
    band that changes the output by no more than the filter's ripple (70 dB stop band: about 3e-4),
    so the input here is tones inside both pass bands, a DC offset and a little noise.
    """
    a = iqdemod.load_link(None, **COMMON, **FAST).signal
    b = iqdemod.load_link(None, **COMMON, **SLOW).signal
    plans = plan_channels(RATE, [(a, 137_000.0), (b, -210_000.0)])
    assert plans[0].fft_size == plans[1].fft_size and plans[0].hop == plans[1].hop
    rng = np.random.default_rng(5)
    n = np.arange(700_001)
    x = sum(0.1 * np.exp(2j * np.pi * (f * n / RATE + rng.uniform()))
            for f in (137_000 - 4_800, 137_000 + 3_100, -210_000 - 2_400, -210_000 + 1_000))
    x = x + 0.001 * (rng.standard_normal(n.size) + 1j * rng.standard_normal(n.size)) + (0.02 - 0.01j)
    x = x.astype(np.complex64)
    state = plans[0].initial_state()
    got = [[] for _ in plans]
    for piece in np.array_split(x, 7):
        ys, state = channelize_many(piece, plans, state)
        for g, y in zip(got, ys):
            g.append(y)
    ys, state = flush_channels(plans, state)
    for g, y in zip(got, ys):
        g.append(y)
    for (sig, off), g in zip([(a, 137_000.0), (b, -210_000.0)], got):
        alone_plan = plan_channels(RATE, [(sig, off)])[0]
        y1, s1 = channelize(x, alone_plan, alone_plan.initial_state())
        y2, _ = flush_channel(alone_plan, s1)
        alone, joint = np.concatenate([y1, y2]), np.concatenate(g)
        assert len(joint) == len(alone)
        # away from the stream's two ends, where the filter runs into the zeros around it
        edge = len(alone_plan.taps) // alone_plan.decimation + 1
        diff = joint[edge:-edge] - alone[edge:-edge]
        rms = np.sqrt(np.mean(np.abs(alone[edge:-edge]) ** 2))
        assert np.sqrt(np.mean(np.abs(diff) ** 2)) < 3e-4 * rms
        assert np.max(np.abs(diff)) < 1e-3 * rms


def test_profile_with_several_signals(tmp_path):
    p = tmp_path / "harbour.toml"
    p.write_text('[capture]\nsample_rate = 1024000\n[frame]\nsync_word = 0x9B3C57E1\nlength = 8\n'
                 'crc = "CRC-16/IBM-3740"\n'
                 '[[signal]]\nname = "north pier"\nbaud = 9600\nshift_hz = 9600\noffset_hz = 137000\n'
                 '[[signal]]\nbaud = 2400\nshift_hz = 4800\noffset_hz = -210000\n')
    links = iqdemod.load_links([p])
    assert list(links) == ["north pier", "harbour-2"]
    assert links["harbour-2"].signal.baud == 2400 and links["north pier"].frame.length == 8
    with pytest.raises(LinkError, match="2 \\[\\[signal\\]\\] entries"):
        iqdemod.load_link(p)
    with pytest.raises(LinkError, match="second link named"):
        iqdemod.load_links([p, p])


def test_command_line_takes_several_profiles_in_one_pass(two_fleets, tmp_path):
    from click.testing import CliRunner

    from iqdemod_cli.main import main

    meta, truth, txs = two_fleets
    common = '[frame]\nsync_word = "0x9B3C57E1"\nlength = 8\ncrc = "CRC-16/IBM-3740"\n'
    fast, slow = tmp_path / "fast.toml", tmp_path / "slow.toml"
    fast.write_text(common + "[signal]\nbaud = 9600\nshift_hz = 9600\noffset_hz = 137000\n")
    slow.write_text(common + "[signal]\nname = \"north pier\"\nbaud = 2400\nshift_hz = 4800\noffset_hz = -210000\n")
    out = tmp_path / "frames.jsonl"
    res = CliRunner().invoke(main, ["decode", str(meta), "--link", str(fast), "--link", str(slow), "-o", str(out),
                                    "--quiet"])
    assert res.exit_code == 0, res.output
    records = [json.loads(line) for line in out.read_text().splitlines()]
    got = {(r["link"], r["payload_hex"]) for r in records if r["crc_ok"]}
    want = {("fast" if tx.baud == 9600 else "north pier", t["payload_hex"]) for tx, t in zip(txs, truth)}
    assert got == want
    # one profile alone keeps the single-link output: no link key
    res = CliRunner().invoke(main, ["decode", str(meta), "--link", str(fast), "-o", str(out), "--quiet"])
    assert res.exit_code == 0 and all("link" not in json.loads(line) for line in out.read_text().splitlines())
    # an output onto the second profile is refused before any work, the profile kept
    before = slow.read_bytes()
    res = CliRunner().invoke(main, ["decode", str(meta), "--link", str(fast), "--link", str(slow), "-o", str(slow)])
    assert res.exit_code != 0 and "--link profile" in res.output and slow.read_bytes() == before


def test_the_summary_counts_each_link(two_fleets):
    meta, truth, txs = two_fleets
    links = dict(_links(), **{"empty channel": iqdemod.load_link(None, **COMMON, **dict(FAST, offset=300_000))})
    decoding = iqdemod.decode(meta, links)
    frames = list(decoding)
    counts = {name: (n, good) for name, n, good in decoding.summary.links}
    assert counts["empty channel"] == (0, 0)
    for name in ("harbour-fast", "harbour-slow"):
        mine = [f for f in frames if f.link == name]
        assert counts[name] == (len(mine), sum(f.crc_ok for f in mine)) and counts[name][1] == 3
