"""The link profile (TOML) and its flag overrides."""

import pytest

import iqdemod
from iqdemod.errors import LinkError
from iqdemod.profile import link_to_toml, load_link

PROFILE = """
[capture]
datatype = "cu8"
sample_rate = 1024000
[signal]
offset_hz = 137000
baud = 9600
shift_hz = 9600
invert = false
[frame]
sync_word = "0x9B3C57E1"
sync_bits = 32
sync_tolerance = 3
length = 24
crc = "CRC-16/IBM-3740"
"""


def write(tmp_path, text, name="link.toml"):
    p = tmp_path / name
    p.write_text(text)
    return p


def test_profile_as_in_the_contract(tmp_path):
    link = load_link(write(tmp_path, PROFILE))
    assert link.capture.datatype == "cu8" and link.capture.sample_rate == 1024000
    assert link.signal.offset_hz == 137000 and link.signal.baud == 9600 and link.signal.h == 1
    assert link.frame.sync_word == 0x9B3C57E1 and link.frame.length == 24
    assert link.frame.crc == "CRC-16/IBM-3740"


def test_flags_override_the_profile(tmp_path):
    link = load_link(write(tmp_path, PROFILE), baud=4800, shift=9600, length="prefix8", invert=True, sync="0x2DD4",
                     sync_bits=16, crc="none")
    assert link.signal.baud == 4800 and link.signal.h == 2 and link.signal.invert
    assert link.frame.length == "prefix8" and link.frame.sync_word == 0x2DD4 and link.frame.crc == "none"


def test_round_trip_through_toml(tmp_path):
    link = load_link(write(tmp_path, PROFILE))
    again = load_link(write(tmp_path, link_to_toml(link, comment="buoys"), "again.toml"))
    assert again.as_dict() == link.as_dict()


def test_absolute_frequency_needs_the_centre():
    link = load_link(None, frequency=434_057_000, baud=9600, shift=9600)
    assert link.check_rate(1_024_000, 433_920_000) == pytest.approx(137_000)
    with pytest.raises(LinkError, match="no centre frequency"):
        link.check_rate(1_024_000, None)


@pytest.mark.parametrize(
    "text,match",
    [
        ("[signal\nbaud = 1", "TOML syntax error.*line 1"),
        ("[signal]\nbaud = 9600\nshift_hz = 9600\ncolour = 3\n", "unknown key 'colour' in \\[signal\\]"),
        ("[extras]\n", "unknown table \\[extras\\]"),
        ("[signal]\nbaud = 'fast'\nshift_hz = 9600\n", "baud 'fast': must be a number"),
        ("[signal]\nbaud = 9600\nshift_hz = 9600\n[frame]\nsync_word = 'xyz'\n", "sync word 'xyz': not hex"),
        ("[signal]\nbaud = 9600\nshift_hz = 9600\n[frame]\ncrc = 'CRC-7/FOO'\n", "CRC 'CRC-7/FOO': unknown"),
        ("[signal]\nbaud = 9600\nshift_hz = 9600\n[frame]\nlength = 5000\n", "length 5000: must be within 1–4096"),
        ("[signal]\nbaud = 9600\n", "shift_hz not given"),
        ("[frame]\nlength = 8\n", "baud and shift_hz not given: .* use --baud and --shift"),  # both at once
    ],
)
def test_bad_profiles_name_the_problem(tmp_path, text, match):
    with pytest.raises(LinkError, match=match):
        load_link(write(tmp_path, text))


@pytest.mark.parametrize(
    "kw,rate,match",
    [
        (dict(baud=-5, shift=100), 1e6, "baud -5: must be > 0"),
        (dict(baud=600_000, shift=100), 1e6, "baud 600000: must be below half the sample rate"),
        (dict(baud=9600, shift=9600, offset=498_000), 1e6, "outside the captured band"),
        (dict(baud=9600, shift=9600, sync="0x1FFFF", sync_bits=16), 1e6, "does not fit in 16 bits"),
        (dict(baud=9600, shift=9600, sync_bits=65), 1e6, "sync_bits 65: must be within 1–64"),
    ],
)
def test_parameter_checks(kw, rate, match):
    with pytest.raises(LinkError, match=match):
        load_link(None, **kw).check_rate(rate)


def test_negative_rate_is_refused():
    with pytest.raises(LinkError, match="sample rate -250000 Hz: must be > 0"):
        load_link(None, baud=9600, shift=9600, rate=-250000)


def test_default_sync_tolerance_keeps_false_syncs_rare():
    # Random bits match an n-bit word within t errors with probability sum_{k<=t} C(n, k) / 2^n (the
    # binomial distribution of the Hamming distance; scipy.stats.binom as the reference here). The default
    # is the largest t <= 3 under one position in 1000: 3 in 32 bits is common practice (from memory).
    from scipy import stats

    from iqdemod.link import FALSE_SYNC_SHARE, FrameSpec, default_sync_tolerance

    for n in range(1, 65):
        t = default_sync_tolerance(n)
        assert 0 <= t <= min(3, n - 1)
        assert t == 0 or stats.binom.cdf(t, n, 0.5) < FALSE_SYNC_SHARE
        assert t == min(3, n - 1) or stats.binom.cdf(t + 1, n, 0.5) >= FALSE_SYNC_SHARE
    assert [default_sync_tolerance(n) for n in (16, 24, 32)] == [1, 3, 3]
    assert FrameSpec(sync_word=0x2DD4, sync_bits=16).sync_tolerance == 1
    assert FrameSpec(sync_word=0x2DD4, sync_bits=16, sync_tolerance=3).sync_tolerance == 3  # a given value stays
