"""Shared fixtures: small synthetic captures made by the project's own generator."""

from __future__ import annotations

import collections
import contextlib
import csv
import json
import os
from pathlib import Path

import numpy as np
import pytest
from hypothesis import settings

# CI (CI=true) runs the property-based tests with a fixed seed sequence, so a landing never hangs on
# luck; locally every run explores new examples.
settings.register_profile("ci", derandomize=True, print_blob=True)
if os.environ.get("CI"):
    settings.load_profile("ci")

import iqdemod
from iqdemod.synth import SynthConfig, synthesize

# The link of most tests: a buoy-style 9600 baud telemetry link, 137 kHz off centre.
LINK_KW = dict(
    rate=1_024_000,
    offset=137_000,
    baud=9600,
    shift=9600,
    sync="0x9B3C57E1",
    length=24,
    crc="CRC-16/IBM-3740",
)


def make_link(**kw) -> iqdemod.Link:
    return iqdemod.load_link(None, **{**LINK_KW, **kw})


def make_capture(path: Path, *, link=None, ebn0=(18.0,), frames=8, **cfg) -> tuple[Path, dict]:
    """Synthesize a capture; return (meta path, truth)."""
    link = link or make_link()
    truth = synthesize(path, SynthConfig(link=link, ebn0_db=tuple(ebn0), n_frames=frames, **cfg))
    return path.with_name(path.name + ".sigmf-meta"), truth


def truth_payloads(truth: dict) -> list[str]:
    return [f["payload_hex"] for f in truth["frames"]]


@pytest.fixture(scope="session")
def strong_capture(tmp_path_factory) -> tuple[Path, dict]:
    """12 frames at 18 dB with a carrier error and a clock error (cf32_le)."""
    base = tmp_path_factory.mktemp("strong") / "strong"
    return make_capture(base, frames=12, freq_error_hz=1200.0, clock_ppm=60.0, seed=11)


@contextlib.contextmanager
def counting_capture_reads():
    """Count, by file name, every capture health opens and every read of one (Capture.blocks): the
    check that several links of a capture are decoded from one read. Yields (opened, reads)."""
    import iqdemod.health
    from iqdemod.capture import Capture

    opened, reads = collections.Counter(), collections.Counter()
    real_open, real_blocks = iqdemod.health.open_capture, Capture.blocks

    def counting_open(path, *a, **k):
        opened[Path(path).name] += 1
        return real_open(path, *a, **k)

    def counting_blocks(self, *a, **k):
        reads[Path(self.info.path).name] += 1
        return real_blocks(self, *a, **k)

    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(iqdemod.health, "open_capture", counting_open)
        mp.setattr(Capture, "blocks", counting_blocks)
        yield opened, reads


def read_csv(path) -> list[dict]:
    """A CSV report as dicts by column (the stdlib's reader: the reference for what we wrote)."""
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def read_jsonl(path) -> list[dict]:
    """A JSON Lines file, one object a line."""
    return [json.loads(line) for line in Path(path).read_text().splitlines()]
