"""Reading captures: raw datatypes, SigMF pairs, WAV/FLAC, defects, streaming."""

import json
import warnings

import numpy as np
import pytest
import soundfile as sf
from hypothesis import given, settings, strategies as st

from iqdemod.capture import CaptureWarning, open_capture, parse_datatype
from iqdemod.errors import CaptureError


def read_all(cap, block=1000):
    return np.concatenate(list(cap.blocks(block)))


def test_datatype_strings_follow_sigmf():
    # SigMF v1.2 core:datatype [spec]: width is per component, complex interleaved I first.
    assert parse_datatype("cf32_le").numpy == "<f4"
    assert parse_datatype("ci16_be").numpy == ">i2"
    assert parse_datatype("cu8").numpy == "|u1"
    for bad in ("rf32_le", "cf16_le", "ci16", "cu8_le", "complex", ""):
        with pytest.raises(CaptureError):
            parse_datatype(bad)


@pytest.mark.parametrize(
    "name,raw,expected",
    [
        ("cu8", np.array([0, 255, 127, 128], np.uint8), [-1 + 1j, -0.5 / 127.5 + 0.5j / 127.5]),
        ("ci8", np.array([-128, 127, 0, 64], np.int8), [-1 + 127j / 128, 0.5j]),
        ("ci16_le", np.array([-32768, 16384], "<i2"), [-1 + 0.5j]),
        ("ci16_be", np.array([16384, -32768], ">i2"), [0.5 - 1j]),
        ("cf32_le", np.array([0.25, -0.5], "<f4"), [0.25 - 0.5j]),
        ("cf64_le", np.array([0.125, 0.75], "<f8"), [0.125 + 0.75j]),
    ],
)
def test_raw_scaling(tmp_path, name, raw, expected):
    p = tmp_path / "x.raw"
    raw.tofile(p)
    with open_capture(p, datatype=name, sample_rate=1000) as cap:
        got = read_all(cap)
    np.testing.assert_allclose(got, np.array(expected, np.complex64), atol=1e-7)


def test_cut_final_sample_is_dropped_with_a_warning(tmp_path):
    p = tmp_path / "cut.raw"
    np.arange(11, dtype=np.uint8).tofile(p)  # 5 complete cu8 samples and one byte
    with open_capture(p, datatype="cu8", sample_rate=1000) as cap:
        assert cap.info.n_samples == 5 and cap.info.cut_bytes == 1
        with pytest.warns(CaptureWarning, match="cut final sample"):
            assert len(read_all(cap)) == 5


def test_nan_and_inf_are_zeroed_and_counted(tmp_path):
    x = np.ones(100, np.complex64)
    x[10:20] = np.nan
    x[30] = complex(np.inf, 0)
    p = tmp_path / "nan.cf32"
    x.tofile(p)
    with open_capture(p, datatype="cf32_le", sample_rate=1000) as cap:
        with pytest.warns(CaptureWarning, match="11 NaN/Inf"):
            got = read_all(cap, 7)
        assert cap.stats.nonfinite == 11
    assert np.all(got[10:20] == 0) and got[30] == 0 and np.all(np.isfinite(got))


def test_clipping_is_measured(tmp_path):
    raw = np.full(200, 128, np.uint8)
    raw[:20] = 255  # 10 samples with I and Q at full scale
    p = tmp_path / "clip.cu8"
    raw.tofile(p)
    with open_capture(p, datatype="cu8", sample_rate=1000) as cap:
        with pytest.warns(CaptureWarning, match="clipped"):
            read_all(cap)
        assert cap.stats.clipped == 10
        assert cap.stats.clipped_fraction == pytest.approx(0.1)


def test_blocks_are_bounded_and_chunking_is_invisible(tmp_path):
    rng = np.random.default_rng(0)
    x = (rng.standard_normal(20001) + 1j * rng.standard_normal(20001)).astype(np.complex64)
    p = tmp_path / "x.cf32"
    x.tofile(p)
    with open_capture(p, datatype="cf32_le", sample_rate=1000) as cap:
        sizes = [len(b) for b in cap.blocks(4096)]
        assert max(sizes) == 4096 and sizes[-1] == 20001 % 4096
        np.testing.assert_array_equal(read_all(cap, 333), x)
        with_overlap = list(cap.blocks(100, overlap=10))
        np.testing.assert_array_equal(with_overlap[1][:10], with_overlap[0][-10:])


def write_sigmf(base, data: np.ndarray, meta: dict):
    data.tofile(str(base) + ".sigmf-data")
    with open(str(base) + ".sigmf-meta", "w") as fh:
        json.dump(meta, fh)


SIGMF_META = {
    "global": {"core:datatype": "ci16_le", "core:sample_rate": 250000, "core:version": "1.2.0"},
    "captures": [{"core:sample_start": 0, "core:frequency": 433.92e6, "core:datetime": "2026-05-01T12:00:00Z"}],
    "annotations": [],
}


@pytest.mark.parametrize("suffix", [".sigmf-meta", ".sigmf-data"])
def test_sigmf_pair_from_either_file(tmp_path, suffix):
    base = tmp_path / "rec"
    write_sigmf(base, np.array([100, -100, 200, -200], "<i2"), SIGMF_META)
    with open_capture(str(base) + suffix) as cap:
        info = cap.info
        assert info.kind == "sigmf" and info.sample_rate_hz == 250000 and info.n_samples == 2
        assert info.centre_hz == 433.92e6 and info.start_time == "2026-05-01T12:00:00Z"
        np.testing.assert_allclose(read_all(cap), np.array([100 - 100j, 200 - 200j]) / 32768)


def test_a_rate_given_for_a_sigmf_recording_that_has_its_own_is_named_as_unused(tmp_path):
    # SigMF: core:sample_rate belongs to the recording (SigMF spec, global object); a rate the user gives
    # beside it is not used, and is said not to be
    base = tmp_path / "rec"
    write_sigmf(base, np.array([100, -100, 200, -200], "<i2"), SIGMF_META)
    with pytest.warns(CaptureWarning, match=r"core:sample_rate 250000 Hz is used, not the rate given \(1e\+06 Hz\)"):
        with open_capture(str(base) + ".sigmf-meta", sample_rate=1e6) as cap:
            assert cap.info.sample_rate_hz == 250000
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # the same rate, or none given: nothing to say
        for rate in (250000.0, None):
            with open_capture(str(base) + ".sigmf-meta", sample_rate=rate):
                pass


def test_a_datatype_given_for_a_sigmf_recording_that_has_its_own_is_named_as_unused(tmp_path):
    # SigMF: core:datatype is required in the global object and says how the data file is read (SigMF spec);
    # a datatype the user gives beside it is not used, and is said not to be
    base = tmp_path / "rec"
    write_sigmf(base, np.array([100, -100, 200, -200], "<i2"), SIGMF_META)
    with pytest.warns(CaptureWarning, match=r"its core:datatype ci16_le is used, not the datatype given \(cu8\)"):
        with open_capture(str(base) + ".sigmf-meta", datatype="cu8") as cap:
            assert cap.info.datatype == "ci16_le" and cap.info.n_samples == 2
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # the same datatype, or none given: nothing to say
        for datatype in ("ci16_le", None):
            with open_capture(str(base) + ".sigmf-meta", datatype=datatype):
                pass


def test_a_sigmf_data_file_shorter_than_its_annotations_is_named(tmp_path):
    # SigMF spec: an annotation covers core:sample_count samples from core:sample_start; samples the
    # metadata describes but the data lacks mean a data file cut short
    base = tmp_path / "rec"
    meta = {**SIGMF_META, "annotations": [{"core:sample_start": 1, "core:sample_count": 5, "core:label": "burst"}]}
    write_sigmf(base, np.zeros(8, "<i2"), meta)  # 4 samples; the annotation reaches sample 6
    with pytest.warns(CaptureWarning, match="reaches sample 6, but the data holds 4: the data file may be cut short"):
        open_capture(str(base) + ".sigmf-meta").close()
    write_sigmf(base, np.zeros(12, "<i2"), meta)  # 6 samples: whole
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        open_capture(str(base) + ".sigmf-meta").close()


def test_sigmf_header_bytes_are_skipped(tmp_path):
    base = tmp_path / "hdr"
    meta = json.loads(json.dumps(SIGMF_META))
    meta["captures"][0]["core:header_bytes"] = 4
    write_sigmf(base, np.array([7, 7, 100, -100], "<i2"), meta)
    with open_capture(str(base) + ".sigmf-meta") as cap:
        np.testing.assert_allclose(read_all(cap), [(100 - 100j) / 32768])


@pytest.mark.parametrize(
    "mutate,match",
    [
        (lambda m: m.pop("captures"), "required object 'captures' missing"),
        (lambda m: m["global"].pop("core:datatype"), "core:datatype missing"),
        (lambda m: m["global"].update({"core:datatype": "rf32_le"}), "real samples"),
        (lambda m: m["global"].update({"core:sample_rate": -5}), "sample rate -5 Hz: must be > 0"),
        (lambda m: m["global"].update({"core:num_channels": 2}), "core:num_channels 2"),
    ],
)
def test_broken_sigmf_metadata(tmp_path, mutate, match):
    meta = json.loads(json.dumps(SIGMF_META))
    mutate(meta)
    base = tmp_path / "bad"
    write_sigmf(base, np.zeros(4, "<i2"), meta)
    with pytest.raises(CaptureError, match=match):
        open_capture(str(base) + ".sigmf-meta")


def test_sigmf_missing_halves_and_json_errors(tmp_path):
    base = tmp_path / "half"
    np.zeros(4, "<i2").tofile(str(base) + ".sigmf-data")
    with pytest.raises(CaptureError, match="metadata file missing"):
        open_capture(str(base) + ".sigmf-data")
    (tmp_path / "lone.sigmf-meta").write_text(json.dumps(SIGMF_META))
    with pytest.raises(CaptureError, match="data file missing"):
        open_capture(tmp_path / "lone.sigmf-meta")
    (tmp_path / "junk.sigmf-meta").write_text("{not json")
    (tmp_path / "junk.sigmf-data").write_bytes(b"\0" * 8)
    with pytest.raises(CaptureError, match="broken SigMF metadata"):
        open_capture(tmp_path / "junk.sigmf-meta")


@pytest.mark.parametrize("fmt,subtype", [("WAV", "PCM_16"), ("FLAC", "PCM_24"), ("WAV", "FLOAT")])
def test_two_channel_audio_round_trip(tmp_path, fmt, subtype):
    rng = np.random.default_rng(3)
    iq = 0.5 * (rng.uniform(-1, 1, 5000) + 1j * rng.uniform(-1, 1, 5000))
    p = tmp_path / f"iq.{fmt.lower()}"
    sf.write(p, np.stack([iq.real, iq.imag], axis=1), 48000, subtype=subtype, format=fmt)
    with open_capture(p) as cap:
        assert cap.info.sample_rate_hz == 48000 and cap.info.n_samples == 5000
        got = read_all(cap, 777)
    np.testing.assert_allclose(got, iq, atol=2 / 32768)  # I left, Q right


def test_audio_must_have_two_channels(tmp_path):
    p = tmp_path / "mono.wav"
    sf.write(p, np.zeros(100), 8000)
    with pytest.raises(CaptureError, match="1 channel\\(s\\): expected 2"):
        open_capture(p)


def test_plain_errors(tmp_path):
    with pytest.raises(CaptureError, match="no such file"):
        open_capture(tmp_path / "nothing.cu8", datatype="cu8", sample_rate=1)
    with pytest.raises(CaptureError, match="is a folder"):
        open_capture(tmp_path, datatype="cu8", sample_rate=1)
    (tmp_path / "empty.cu8").write_bytes(b"")
    with pytest.raises(CaptureError, match="empty capture"):
        open_capture(tmp_path / "empty.cu8", datatype="cu8", sample_rate=1)
    (tmp_path / "x.cu8").write_bytes(b"\0\0")
    (tmp_path / "x.raw").write_bytes(b"\0\0")  # a neutral raw name says no datatype (x.cu8 names its own)
    with pytest.raises(CaptureError, match="give its datatype"):
        open_capture(tmp_path / "x.raw")
    with pytest.raises(CaptureError, match="datatype 'cq9': unknown"):
        open_capture(tmp_path / "x.cu8", datatype="cq9", sample_rate=1)


@settings(max_examples=60, deadline=None)
@given(
    data=st.binary(min_size=0, max_size=3000),
    name=st.sampled_from(["cu8", "ci8", "ci16_le", "ci16_be", "cf32_le", "cf64_le", "cf32_be", "ci32_le"]),
    block=st.integers(1, 700),
)
def test_reader_on_random_bytes(tmp_path_factory, data, name, block):
    """Random bytes never crash the reader, and the sample count is right."""
    p = tmp_path_factory.mktemp("fuzz") / "f.raw"
    p.write_bytes(data)
    size = parse_datatype(name).sample_bytes
    if len(data) < size:
        with pytest.raises(CaptureError, match="empty capture"):
            open_capture(p, datatype=name, sample_rate=1000)
        return
    with open_capture(p, datatype=name, sample_rate=1000) as cap:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", CaptureWarning)
            got = read_all(cap, block)
    assert len(got) == len(data) // size
    assert np.all(np.isfinite(got)) and got.dtype == np.complex64


def test_sigmf_archive_is_read_in_place(tmp_path):
    """A .sigmf archive (SigMF spec: a tar of NAME.sigmf-meta and NAME.sigmf-data) streams like the pair."""
    import tarfile

    base = tmp_path / "rec"
    data = np.arange(-50, 50, dtype="<i2")
    write_sigmf(base, data, SIGMF_META)
    archive = tmp_path / "rec.sigmf"
    with tarfile.open(archive, "w") as tar:
        tar.add(str(base) + ".sigmf-meta", arcname="rec/rec.sigmf-meta")
        tar.add(str(base) + ".sigmf-data", arcname="rec/rec.sigmf-data")
    with open_capture(archive) as cap, open_capture(str(base) + ".sigmf-meta") as pair:
        assert cap.info.n_samples == pair.info.n_samples == 50 and cap.info.centre_hz == 433.92e6
        np.testing.assert_array_equal(read_all(cap, 7), read_all(pair, 7))
    (tmp_path / "bad.sigmf").write_bytes(b"not a tar at all" * 40)
    with pytest.raises(CaptureError, match="not an uncompressed SigMF archive"):
        open_capture(tmp_path / "bad.sigmf")


def test_floats_have_no_full_scale(tmp_path):
    """A cf32 capture at any scale reads without a copy and reports no clipping (issue: float scale)."""
    rng = np.random.default_rng(3)
    x = (1000 * (rng.standard_normal(5000) + 1j * rng.standard_normal(5000))).astype(np.complex64)
    p = tmp_path / "big.cf32"
    x.tofile(p)
    with open_capture(p, datatype="cf32_le", sample_rate=1000) as cap:
        blocks = list(cap.blocks(4096))
        assert cap.stats.clipped == 0 and cap.stats.nonfinite == 0
        assert not blocks[0].flags.writeable  # the zero-copy path, whatever the scale
    np.testing.assert_array_equal(np.concatenate(blocks), x)


def test_float_clipping_is_a_pile_up_at_one_extreme(tmp_path):
    """A float capture clipped by its recorder piles samples up at one value: those are counted."""
    rng = np.random.default_rng(4)
    x = 3.0 * (rng.standard_normal(20000) + 1j * rng.standard_normal(20000))
    # a recorder that clips does so at one full scale on both branches: ±4.5 here (about 13 %)
    re, im = np.clip(x.real, -4.5, 4.5), np.clip(x.imag, -4.5, 4.5)
    y = (re + 1j * im).astype(np.complex64)
    p = tmp_path / "clip.cf32"
    y.tofile(p)
    expected = int(np.sum((np.abs(re) >= 4.5) | (np.abs(im) >= 4.5)))
    with open_capture(p, datatype="cf32_le", sample_rate=1000) as cap:
        with pytest.warns(CaptureWarning, match="clipped"):
            read_all(cap)
        assert cap.stats.clipped == expected


def test_nan_is_counted_at_any_float_scale(tmp_path):
    x = (5000 * np.exp(1j * np.arange(100))).astype(np.complex64)
    x[7] = complex(np.nan, 0)
    p = tmp_path / "nan.cf32"
    x.tofile(p)
    with open_capture(p, datatype="cf32_le", sample_rate=1000) as cap:
        with pytest.warns(CaptureWarning, match="1 NaN/Inf"):
            got = read_all(cap)
        assert cap.stats.nonfinite == 1 and cap.stats.clipped == 0
    assert got[7] == 0


def test_a_raw_file_named_by_its_sigmf_datatype_needs_no_datatype(tmp_path):
    # SigMF v1.2 datatype names (cu8: unsigned 8-bit I/Q; ci16_le: signed 16-bit little-endian)
    raw = np.array([255, 0, 128, 128], np.uint8)
    (tmp_path / "night.cu8").write_bytes(raw.tobytes())
    with open_capture(tmp_path / "night.cu8", sample_rate=1000) as cap:
        got = read_all(cap)
    assert cap.info.datatype == "cu8" and got[0] == pytest.approx(complex(127.5 / 127.5, -127.5 / 127.5))
    (tmp_path / "night.dat").write_bytes(raw.tobytes())
    with pytest.raises(CaptureError, match="give its datatype"):
        open_capture(tmp_path / "night.dat", sample_rate=1000)


@pytest.mark.parametrize("name,dtype", [("cf32_le", "<f4"), ("ci16_le", "<i2"), ("cu8", "u1"), ("cf32_be", ">f4")])
def test_mapped_reads_equal_copied_reads(tmp_path, monkeypatch, name, dtype):
    """Blocks read through a memory map (the default) are the bytes read() gives, block for block,
    from an offset that is not a page boundary (SigMF core:header_bytes), and no two blocks share memory."""
    from iqdemod import capture

    rng = np.random.default_rng(3)
    comps = (rng.integers(0, 255, 2 * 30011) if dtype == "u1" else rng.integers(-2000, 2000, 2 * 30011)).astype(dtype)
    if dtype.endswith("f4"):
        comps = (comps / 2048.0).astype(dtype)
    base = tmp_path / "rec"
    meta = json.loads(json.dumps(SIGMF_META))
    meta["global"]["core:datatype"] = name
    meta["captures"][0]["core:header_bytes"] = 4099
    (tmp_path / "rec.sigmf-data").write_bytes(b"\x01" * 4099 + comps.tobytes())
    (tmp_path / "rec.sigmf-meta").write_text(json.dumps(meta))
    blocks = {}
    for mapped in (True, False):
        monkeypatch.setattr(capture, "MAP_READS", mapped)
        with open_capture(str(base) + ".sigmf-meta") as cap:
            blocks[mapped] = list(cap.blocks(4096))
    assert [len(b) for b in blocks[True]] == [len(b) for b in blocks[False]]
    for a, b in zip(blocks[True], blocks[False]):
        np.testing.assert_array_equal(a, b)
    assert not any(np.shares_memory(a, b) for a, b in zip(blocks[True], blocks[True][1:]))


def test_a_raw_file_that_shrinks_while_read_is_an_error(tmp_path):
    x = np.ones(50_000, np.complex64)
    p = tmp_path / "x.cf32"
    x.tofile(p)
    with open_capture(p, datatype="cf32_le", sample_rate=1000) as cap:
        blocks = cap.blocks(10_000)
        assert len(next(blocks)) == 10_000
        with open(p, "r+b") as fh:
            fh.truncate(8 * 25_000)  # another program cuts the file after the first block
        assert len(next(blocks)) == 10_000
        with pytest.raises(CaptureError, match="file shrank while reading"):
            next(blocks)


def test_a_file_that_cannot_be_mapped_is_read(tmp_path, monkeypatch):
    """Where mmap fails (a file system without it), the reader copies with read() instead."""
    import mmap

    def refuse(*args, **kwargs):
        raise OSError(19, "No such device")

    rng = np.random.default_rng(8)
    x = (rng.standard_normal(9000) + 1j * rng.standard_normal(9000)).astype(np.complex64)
    p = tmp_path / "x.cf32"
    x.tofile(p)
    monkeypatch.setattr(mmap, "mmap", refuse)
    with open_capture(p, datatype="cf32_le", sample_rate=1000) as cap:
        np.testing.assert_array_equal(read_all(cap, 4000), x)
