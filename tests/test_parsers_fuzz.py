"""Property-based tests: the link-profile and SigMF parsers on random documents never crash.

Either a document is accepted, or it is refused with the package's own error (a one-line
message naming the problem), never with another exception.
"""

import json

from hypothesis import HealthCheck, given, settings, strategies as st

from iqdemod.capture import open_capture
from iqdemod.errors import IqdemodError
from iqdemod.profile import load_link

KEYS = {
    "capture": ["datatype", "sample_rate"],
    "signal": ["offset_hz", "frequency_hz", "baud", "shift_hz", "invert", "max_freq_error_hz", "colour"],
    "frame": ["sync_word", "sync_bits", "sync_tolerance", "length", "crc"],
    "extra": ["x"],
}
toml_values = st.one_of(
    st.integers(-10**7, 10**7).map(str),
    st.floats(allow_nan=True, allow_infinity=True).map(lambda v: repr(v).replace("inf", "inf").replace("nan", "nan")),
    st.booleans().map(lambda b: "true" if b else "false"),
    st.sampled_from(['"0x9B3C57E1"', '"zz"', '"prefix8"', '"CRC-16/IBM-3740"', '"cu8"', '"none"', '""', "[1, 2]",
                     '"cf32_le"', "{a = 1}"]),
    st.text(max_size=8).map(json.dumps),
)


@st.composite
def toml_documents(draw):
    lines = []
    for table in draw(st.lists(st.sampled_from(sorted(KEYS)), max_size=4)):
        lines.append(f"[{table}]")
        for key in draw(st.lists(st.sampled_from(KEYS[table]), max_size=6)):
            lines.append(f"{key} = {draw(toml_values)}")
    if draw(st.booleans()):
        lines.insert(draw(st.integers(0, len(lines))), draw(st.text(max_size=20)))
    return "\n".join(lines)


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(doc=toml_documents())
def test_link_profile_parser_never_crashes(tmp_path, doc):
    p = tmp_path / "link.toml"
    p.write_text(doc, encoding="utf-8")
    try:
        link = load_link(p)
    except IqdemodError as exc:
        assert str(exc) and "\n" not in str(exc).strip()
    else:
        assert link.signal.baud > 0 and link.signal.shift_hz > 0


json_values = st.recursive(
    st.none() | st.booleans() | st.integers(-10**9, 10**9) | st.floats(allow_nan=False) | st.text(max_size=10),
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=12), inner, max_size=4),
    max_leaves=12,
)
core = st.dictionaries(
    st.sampled_from(["core:datatype", "core:sample_rate", "core:version", "core:num_channels", "core:offset"]),
    json_values | st.sampled_from(["cu8", "ci16_le", "cf32_le", "rf32_le", 250000, -5, 0, 1]),
    max_size=5,
)
caps = st.lists(
    st.dictionaries(st.sampled_from(["core:sample_start", "core:frequency", "core:datetime", "core:header_bytes"]),
                    json_values | st.integers(0, 64), max_size=4),
    max_size=3,
)


@st.composite
def sigmf_documents(draw):
    doc = {}
    if draw(st.integers(0, 9)):
        doc["global"] = draw(core | json_values)
    if draw(st.integers(0, 9)):
        doc["captures"] = draw(caps | json_values)
    if draw(st.integers(0, 9)):
        doc["annotations"] = draw(st.lists(json_values, max_size=3) | json_values)
    return doc if draw(st.integers(0, 9)) else draw(json_values)


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(doc=sigmf_documents(), data=st.binary(max_size=64))
def test_sigmf_parser_never_crashes(tmp_path, doc, data):
    (tmp_path / "r.sigmf-meta").write_text(json.dumps(doc))
    (tmp_path / "r.sigmf-data").write_bytes(data)
    try:
        with open_capture(tmp_path / "r.sigmf-data") as cap:
            n = sum(len(b) for b in cap.blocks(7))
            assert n == cap.info.n_samples > 0
    except IqdemodError as exc:
        assert str(exc)
