"""health with several links: one read of the capture, a report per link (text, JSON, PNG).

The capture comes from the tests' own modulator (tests/fsk_modulator.py): two fleets on two
channels of one raw cf32_le recording, buoys (9600 Bd, h = 1) above the centre and tide gauges
(2400 Bd, h = 2) below it, at different Eb/N0. Eb/N0 follows shared/REFERENCE.md §8 (the
modulator's truth, A²·(fs/Rb)/σ²); every payload's CRC is the catalogue's CRC-16/IBM-3740,
computed by the modulator with the standard library (binascii.crc_hqx), not by the project's
CRC engine. What is checked against the modulator's truth: each link's Eb/N0 (within 1 dB, the
acceptance line of checks/realworld_acceptance.py) and its frame counts.
"""

from __future__ import annotations

import collections
import json
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

import iqdemod
from iqdemod.capture import Capture
from iqdemod_cli.main import main
from iqdemod_cli.render import health_text, to_json

import fsk_modulator as fm
from conftest import counting_capture_reads

RATE = 512_000
FRAME = '[frame]\nsync_word = "0x9B3C57E1"\nlength = 8\ncrc = "CRC-16/IBM-3740"\n'
SIGNAL = "name = {name!r}\nbaud = {baud}\nshift_hz = {shift}\noffset_hz = {offset}\n"
LINKS = {  # name -> the link's signal, its h, its Eb/N0 (dB) and its number of frames
    "buoys": (dict(baud=9600, shift=9600, offset=100_000), 1.0, 17.0, 5),
    "gauges": (dict(baud=2400, shift=4800, offset=-120_000), 2.0, 13.0, 3),
}
# the PNG file signature, W3C PNG specification §5.2 (cited from memory)
PNG_SIGNATURE = bytes.fromhex("89504e470d0a1a0a")


def _render_capture(path: Path) -> dict[str, list[dict]]:
    """Both fleets in one raw cf32_le file (0.4 s); the modulator's truth of each link."""
    rng = np.random.default_rng(7)
    txs, link_of = [], []
    for name, (sig, h, ebn0_db, n) in LINKS.items():
        step_s = 0.35 / n
        for i in range(n):
            txs.append(fm.Tx(t_s=0.01 + step_s * i, payload=bytes(rng.integers(0, 256, 8, dtype=np.uint8)),
                             ebn0_db=ebn0_db, offset_hz=sig["offset"], baud=sig["baud"], h=h,
                             carrier_error_hz=rng.uniform(-300, 300), framing=dict(length="fixed")))
            link_of.append(name)
    x, truth = fm.render(txs, rate=RATE, n_samples=int(0.4 * RATE), noise_rms=0.05, seed=3)
    x.astype("<c8").tofile(path)  # raw cf32_le: interleaved little-endian float32 I and Q
    by_link: dict[str, list[dict]] = {name: [] for name in LINKS}
    for t in truth:
        by_link[link_of[t["tx"]]].append(t)
    return by_link


@pytest.fixture(scope="module")
def scene(tmp_path_factory):
    """The capture, one profile per link, a profile of both as [[signal]] entries, and the truth."""
    root = tmp_path_factory.mktemp("health_links")
    truth = _render_capture(root / "both.cf32_le")
    for name, (sig, *_) in LINKS.items():
        (root / f"{name}.toml").write_text(FRAME + "[signal]\n" + SIGNAL.format(name=name, **sig))
    (root / "fleet.toml").write_text(FRAME + "".join("[[signal]]\n" + SIGNAL.format(name=name, **sig)
                                                     for name, (sig, *_) in LINKS.items()))
    return root, truth


def _args(root: Path, *more) -> list[str]:
    return ["health", str(root / "both.cf32_le"), "--rate", str(RATE),
            "--link", str(root / "buoys.toml"), "--link", str(root / "gauges.toml"), *map(str, more)]


def _invoke(args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


@pytest.fixture(scope="module")
def counted_json(scene):
    """health --json of both links, counting every open and every read of the capture."""
    root, _ = scene
    with counting_capture_reads() as (opened, reads):
        res = _invoke(_args(root, "--json", "-q"))
    return res, opened, reads


def test_the_capture_is_read_once_for_both_links(counted_json):
    res, opened, reads = counted_json
    assert res.exit_code == 0, res.output
    assert opened == collections.Counter({"both.cf32_le": 1})
    assert reads == collections.Counter({"both.cf32_le": 1})  # one pass of the reader


def test_json_is_one_object_of_reports_by_link_name(scene, counted_json):
    root, _ = scene
    res, _, _ = counted_json
    assert len(res.stdout.splitlines()) == 1
    doc = json.loads(res.stdout)
    assert list(doc) == ["links"] and list(doc["links"]) == ["buoys", "gauges"]  # in --link order
    single = json.loads(_invoke(["health", root / "both.cf32_le", "--rate", RATE, "--link", root / "buoys.toml",
                                 "--json", "-q"]).stdout)
    for name, report in doc["links"].items():
        assert set(report) == set(single), name  # each value is the object one link's --json gives
        assert report["capture"] == "both.cf32_le"
    assert doc["links"]["buoys"]["frames"] == single["frames"]
    assert doc["links"]["buoys"]["baud"] == 9600 and doc["links"]["gauges"]["baud"] == 2400


def test_each_links_figures_against_the_modulators_truth(scene, counted_json):
    _, truth = scene
    doc = json.loads(counted_json[0].stdout)
    for name, (_, _, ebn0_db, n) in LINKS.items():
        r, want = doc["links"][name], truth[name]
        assert len(want) == n and r["bursts"] == n
        # every frame passes at these Eb/N0: BER ½·exp(−Eb/2N0) (REFERENCE §1, non-coherent orthogonal
        # FSK) is 2.3e-5 at 13 dB, so the gauges' 3 × 80 checked bits all pass with probability 0.994
        # (the buoys' 5 × 80 at 17 dB: 1 − 3e-9); the noise is seeded, so the outcome does not vary
        assert r["frames"] == r["frames_crc_ok"] == len(want), (name, r["frames"], r["frames_crc_ok"])
        assert r["fer_observed"] == 0.0
        # the modulator's Eb/N0 (REFERENCE §8: A²·(fs/Rb)/σ², the same for every frame of a link) within 1 dB
        [truth_db] = {round(t["ebn0_db"], 9) for t in want}
        assert abs(truth_db - ebn0_db) < 1e-6
        assert abs(r["ebn0_db"] - truth_db) <= 1.0, (name, r["ebn0_db"], truth_db)


def test_text_gives_one_report_per_link_headed_by_its_name(scene):
    root, truth = scene
    res = _invoke(_args(root, "-q"))
    assert res.exit_code == 0 and res.stderr == ""
    lines = res.stdout.splitlines()
    heads = [i for i, line in enumerate(lines) if line.startswith("== ")]
    assert [lines[i] for i in heads] == ["== buoys ==", "== gauges =="] and heads[0] == 0
    assert lines[heads[1] - 1] == ""  # a blank line between the reports
    for (name, (sig, *_)), start in zip(LINKS.items(), heads):
        n = len(truth[name])
        assert lines[start + 1].startswith(f"both.cf32_le: 0.40 s, {n} burst(s), {n} frame(s), {n} with good CRC")
        assert lines[start + 2].startswith(f"  link: {sig['baud']} Bd, shift {sig['shift']} Hz")


def test_a_profile_of_two_signals_is_the_same_as_two_profiles(scene, counted_json):
    root, _ = scene
    res = _invoke(["health", root / "both.cf32_le", "--rate", RATE, "--link", root / "fleet.toml", "--json", "-q"])
    assert res.exit_code == 0
    assert res.stdout == counted_json[0].stdout


def test_one_png_per_link(scene, tmp_path):
    pytest.importorskip("matplotlib")
    root, _ = scene
    res = _invoke(_args(root, "--plot", tmp_path / "weak.png", "-o", tmp_path / "report.txt"))
    assert res.exit_code == 0 and res.stdout == ""
    written = [tmp_path / "weak.buoys.png", tmp_path / "weak.gauges.png"]
    assert sorted(tmp_path.iterdir()) == sorted([tmp_path / "report.txt", *written])
    for path in written:
        assert path.read_bytes()[:8] == PNG_SIGNATURE
    assert [line for line in res.stderr.splitlines() if line.startswith("wrote ")] == [f"wrote {p}" for p in written]
    assert (tmp_path / "report.txt").read_text().startswith("== buoys ==\n")


def test_a_png_that_would_replace_an_input_is_refused_before_any_work(scene, tmp_path, monkeypatch):
    root, _ = scene
    profile = tmp_path / "p.gauges.toml"  # --plot p.toml would put the gauges' PNG here
    profile.write_bytes((root / "gauges.toml").read_bytes())
    reads = []
    monkeypatch.setattr(Capture, "blocks", lambda self, *a, **k: reads.append(1) or iter(()))
    res = CliRunner().invoke(main, ["health", str(root / "both.cf32_le"), "--rate", str(RATE),
                                    "--link", str(root / "buoys.toml"), "--link", str(profile),
                                    "--plot", str(tmp_path / "p.toml"), "-q"])
    assert res.exit_code == 1 and res.stderr.startswith("Error: ") and "--plot" in res.stderr
    assert reads == [] and res.stdout == ""
    assert profile.read_bytes() == (root / "gauges.toml").read_bytes()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["p.gauges.toml"]


def test_plot_dash_is_refused_for_several_links(scene):
    root, _ = scene
    res = CliRunner().invoke(main, _args(root, "--plot", "-", "-q"))
    assert res.exit_code == 2 and "several links need a file name" in res.stderr


def test_one_link_gives_todays_report_unchanged(scene, tmp_path):
    """One --link: no heading and no "links" wrapper; the report is the library's, rendered as before."""
    root, truth = scene
    one = ["health", root / "both.cf32_le", "--rate", RATE, "--link", root / "gauges.toml", "-q"]
    link = iqdemod.load_link(root / "gauges.toml", rate=RATE)
    report = iqdemod.health.assess(root / "both.cf32_le", link)
    assert report.frames == len(truth["gauges"])
    assert _invoke(one).stdout == health_text(report) + "\n"
    assert _invoke([*one, "--json"]).stdout == to_json(report.as_dict()) + "\n"


def test_one_link_writes_its_png_under_the_name_given(scene, tmp_path):
    pytest.importorskip("matplotlib")
    root, _ = scene
    res = _invoke(["health", root / "both.cf32_le", "--rate", RATE, "--link", root / "gauges.toml",
                   "--plot", tmp_path / "g.png", "-o", tmp_path / "g.txt"])
    assert sorted(p.name for p in tmp_path.iterdir()) == ["g.png", "g.txt"]
    assert (tmp_path / "g.png").read_bytes()[:8] == PNG_SIGNATURE
    assert res.stderr == f"wrote {tmp_path / 'g.png'}\n"
    assert not (tmp_path / "g.txt").read_text().startswith("==")


def test_the_link_help_says_it_may_repeat():
    text = " ".join(CliRunner().invoke(main, ["health", "--help"], terminal_width=200).output.split())
    assert "Give it again (or use a profile with several [[signal]] entries) to assess several links" in text
