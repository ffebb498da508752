"""Property: for random option values and random small files, every command exits 0, 1 or 2 with
no traceback, and no input file changes.

CI runs it derandomized (``CI=true``, see conftest.py) with the default number of examples;
locally ``IQDEMOD_PROPERTY_EXAMPLES=500 python -m pytest tests/test_hardening_property.py``
explores more.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import tempfile
from pathlib import Path
from unittest import mock

import pytest
from click.testing import CliRunner
from hypothesis import HealthCheck, given, settings, strategies as st

import iqdemod.synth
from iqdemod import batch as B
from iqdemod_cli.main import main

from conftest import make_capture
from test_hardening import LINK_TOML, folder_digest

EXAMPLES = int(os.environ.get("IQDEMOD_PROPERTY_EXAMPLES", "100"))

NUMBERS = st.one_of(
    st.sampled_from(["0", "-1", "nan", "inf", "-inf", "1e300", "-1e300", "1e-300", "9600", "4800", "137000",
                     "1024000", "0.001", "50000", "", "x", "1" + "0" * 5000, "C" * 200]),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.integers(-10**6, 10**6).map(str),
)
# Values a user would give, so that the commands get past the option parser and do real work.
PLAUSIBLE = {
    "--rate": ["1024000", "250000", "48000"], "--offset": ["137000", "0", "-20000"],
    "--baud": ["9600", "4800", "1200"], "--shift": ["9600", "4800", "2400"], "--max-freq-error": ["1000", "0"],
    "--sync-bits": ["32", "16"], "--sync-tolerance": ["3", "0"], "--length": ["24", "prefix8", "0", "5000"],
    "--crc": ["CRC-16/IBM-3740", "none", "CRC-8/SMBUS", "CRC-99/NOPE"],
    "--sync": ["0x9B3C57E1", "none", "0xZZ", "0x1FFFFFFFFFFFFFFFFF"], "--target-ber": ["1e-5", "0.01"],
    "--max-signals": ["1", "4"], "--freq-error-t": ["0", "0.1"], "--frame-bits": ["100"],
    "--clock-ppm": ["0", "50", "-200"], "--freq-error": ["0", "1200", "-600000"], "--gaussian": ["0.5", "0.3"],
    "--seed": ["1", "7"], "--noise-rms": ["0.05", "0.5"], "--ebn0": ["10", "15,20", "-3"],
}


def value(flag: str):
    """Seven times in eight a plausible value for `flag`, else anything."""
    good = st.sampled_from(PLAUSIBLE.get(flag, ["1"]))
    return st.integers(0, 7).flatmap(lambda i: good if i else NUMBERS)  # (one_of would flatten the weights away)


META_TEXTS = st.sampled_from([
    '{"global": {"core:datatype": "cf32_le", "core:sample_rate": 1024000}, "captures": [], "annotations": []}',
    '{"global": {"core:datatype": "cu8"}, "captures": [{"core:frequency": NaN}], "annotations": []}',
    '{"global": {"core:datatype": "cf32_le", "core:sample_rate": 1e400}, "captures": [], "annotations": []}',
    "[" * 5000 + "]" * 5000,
    '{"global": 1}',
    "",
])
TOML_TEXTS = st.sampled_from([LINK_TOML, "a = " + "[" * 3000 + "]" * 3000, "[signal]\nbaud = nan\nshift_hz = 1\n",
                              "[signal]\nbaud = 9600\nshift_hz = 9600\n[frame]\ncrc = '" + "x" * 500 + "'\n", ""])
NAMES = ["r.sigmf-meta", "r.sigmf-data", "b.cu8", "c.wav", "d.sigmf", "e.cf32", "p.toml"]


@st.composite
def small_files(draw):
    files = {}
    for name in draw(st.lists(st.sampled_from(NAMES), min_size=1, max_size=4, unique=True)):
        if name.endswith(".sigmf-meta") and draw(st.booleans()):
            files[name] = draw(META_TEXTS).encode()
        elif name.endswith(".toml") and draw(st.booleans()):
            files[name] = draw(TOML_TEXTS).encode()
        else:
            files[name] = draw(st.binary(max_size=3000))
    return files


def _option(draw, flags, *, always=()):
    args = []
    for flag in [*always, *draw(st.lists(st.sampled_from(flags), max_size=4, unique=True))]:
        if flag in always and args.count(flag):
            continue
        args += [flag, draw(value(flag))]
    return args


@st.composite
def command_lines(draw, folder: Path, inputs: list[str]):
    """A random command line over the files in `folder`; outputs sometimes land on an input."""
    def output():
        kind = draw(st.sampled_from(["new", "new", "new", "input", "input", "link to input", "folder", "dash"]))
        # (sampled_from keeps repeated entries, so "new" comes up three times in eight)
        if kind == "new":
            return str(folder / "out.txt")
        if kind == "input":
            return str(folder / draw(st.sampled_from(inputs)))
        if kind == "link to input":
            link = folder / "ln"
            with contextlib.suppress(FileExistsError):
                os.symlink(folder / draw(st.sampled_from(inputs)), link)
            return str(link)
        return str(folder) if kind == "folder" else "-"

    command = draw(st.sampled_from(["decode", "health", "survey", "curves", "synth", "batch"]))
    capture = str(folder / draw(st.sampled_from(inputs)))
    link_flags = ["--rate", "--offset", "--baud", "--shift", "--max-freq-error", "--sync-bits", "--sync-tolerance",
                  "--length", "--crc", "--sync"]
    profile = ["--link", str(folder / "p.toml")] if draw(st.booleans()) else []
    if command in ("decode", "health"):
        args = [command, capture, "--datatype", draw(st.sampled_from(["cu8", "cf32_le", "ci16_le", "cx7"])),
                *profile, *_option(draw, link_flags, always=() if profile else ("--baud", "--shift"))]
        if draw(st.booleans()):
            args += ["-o", output()]
        if command == "health":
            args += _option(draw, ["--target-ber"])
    elif command == "survey":
        args = ["survey", capture, *_option(draw, ["--rate", "--max-signals"])]
        if draw(st.booleans()):
            args += ["--write-link", output()]
    elif command == "curves":
        ebn0 = draw(st.one_of(st.sampled_from(["0:16:1", "4:8:0.5"]),
                              st.tuples(NUMBERS, NUMBERS, NUMBERS).map(":".join)))
        return ["curves", *profile, *_option(draw, ["--baud", "--shift", "--freq-error-t", "--frame-bits"]),
                "--ebn0", ebn0]
    elif command == "synth":
        target = draw(st.sampled_from([str(folder / "s"), output()]))
        args = ["synth", target, "--baud", draw(value("--baud")), "--shift", draw(value("--shift")),
                "--ebn0", draw(value("--ebn0")), "--frames", draw(st.sampled_from(["1", "2", "1", "2", "1", "2", "0", "nan"])),
                *profile,
                *_option(draw, ["--rate", "--clock-ppm", "--freq-error", "--gaussian", "--seed", "--noise-rms"])]
    else:
        args = ["batch", str(folder), "-o", output(), "-j", "1", *profile,
                *_option(draw, link_flags, always=() if profile else ("--baud", "--shift"))]
        if draw(st.booleans()):
            args += ["--frames", output()]
    return args + ["-q"]


@pytest.fixture(scope="module")
def real_capture(tmp_path_factory):
    return make_capture(tmp_path_factory.mktemp("prop") / "r", frames=1, seed=9, gap_s=(0.005, 0.005))[0]


def _no_device_replaced(real=os.replace):
    def replace(src, dst, *a, **kw):
        assert not os.fspath(dst).startswith("/dev/"), f"would replace {dst}"
        return real(src, dst, *a, **kw)
    return replace


@settings(max_examples=EXAMPLES, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow, HealthCheck.data_too_large])
@given(data=st.data())
def test_every_command_exits_cleanly_and_changes_no_input(tmp_path, real_capture, data):
    folder = Path(tempfile.mkdtemp(dir=tmp_path))
    for name, content in data.draw(small_files()).items():
        (folder / name).write_bytes(content)
    if data.draw(st.booleans(), label="a real capture"):
        for suffix in (".sigmf-meta", ".sigmf-data"):
            shutil.copy(real_capture.with_suffix(suffix), folder / ("r" + suffix))
    inputs = sorted(p.name for p in folder.iterdir())
    args = data.draw(command_lines(folder, inputs))
    before = folder_digest(folder)
    # a small disk (synth must check before it writes) and a net under /dev
    with mock.patch.object(iqdemod.synth.shutil, "disk_usage", lambda p: shutil._ntuple_diskusage(1, 1, 50 << 20)), \
            mock.patch.object(os, "replace", _no_device_replaced()):
        res = CliRunner().invoke(main, args)
    err = res.stderr
    assert res.exit_code in (0, 1, 2), (args, err)
    assert res.exception is None or isinstance(res.exception, SystemExit), (args, repr(res.exception))
    assert "Traceback" not in err and "internal error" not in err, (args, err)
    errors = sum(line.startswith("Error:") for line in err.splitlines())
    if args[0] == "batch" and res.exit_code == 1 and errors == 0:
        assert B.read_report(args[3]), (args, err)  # the batch ran, some capture failed: its row says why
    elif res.exit_code:
        assert errors == 1, (args, err)
    after = folder_digest(folder)
    used = _inputs_of(args, folder)
    named = _outputs_of(args)
    for name in inputs:  # a file the command reads never changes; one it was not told to write neither
        if os.path.realpath(folder / name) in named and os.path.realpath(folder / name) not in used:
            continue
        assert after.get(name) == before.get(name), (args, name)


def _inputs_of(args: list[str], folder: Path) -> set[str]:
    """Real paths of the files the command reads: captures (both files of a pair) and the profile."""
    from iqdemod.capture import capture_files

    used = set()
    if "--link" in args:
        used.add(os.path.realpath(args[args.index("--link") + 1]))
    if args[0] in ("decode", "health", "survey"):
        used |= {os.path.realpath(p) for p in capture_files(args[1])}
    elif args[0] == "batch":
        used |= {os.path.realpath(p) for p in folder.iterdir() if p.name.lower().endswith(B.CAPTURE_SUFFIXES)}
    return used


def _outputs_of(args: list[str]) -> set[str]:
    """Real paths the command was told to write."""
    named = {os.path.realpath(args[i + 1]) for i, a in enumerate(args[:-1])
             if a in ("-o", "--output", "--frames", "--write-link", "--plot")}
    if args[0] == "synth":
        with contextlib.suppress(Exception):
            named |= {os.path.realpath(p) for p in iqdemod.synth.sigmf_paths(args[1])}
    return named
