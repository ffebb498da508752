"""The Examples of iqdemod.numeric and of the survey package run as written (doctest), and the numeric
helpers agree with general-purpose references (the standard library, numpy, scipy)."""

from __future__ import annotations

import doctest
import importlib
import math

import numpy as np
import pytest
from scipy import signal

from iqdemod.numeric import band_power, bits_to_int, pack_bits, parabolic_offset, power_db

# every module here has at least one Examples section; a module that loses all of them fails
MODULES = [
    "iqdemod.numeric",
    "iqdemod.survey.results",
    "iqdemod.survey.spectrum",
    "iqdemod.survey.activity",
    "iqdemod.survey.pulse",
]


@pytest.mark.parametrize("name", MODULES)
def test_examples_run(name):
    module = importlib.import_module(name)
    tests = [t for t in doctest.DocTestFinder().find(module) if t.examples]
    assert tests, f"{name} has no Examples"
    runner = doctest.DocTestRunner(optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    for test in tests:
        runner.run(test)
    assert runner.failures == 0, f"{runner.failures} example(s) of {name} failed (see the output above)"


def test_power_db_is_ten_log10():
    # the definition of the decibel for power ratios (stdlib math.log10)
    for p in (1e-12, 0.5, 1.0, 3.7, 1e9):
        assert power_db(p) == pytest.approx(10 * math.log10(p), abs=1e-12)
    assert power_db(0.0) == pytest.approx(-3000.0)  # held at the floor, never -inf


def test_parabolic_offset_is_the_vertex_of_the_fitted_parabola():
    # numpy.polyfit through the three points: the vertex of a·x² + b·x + c is at −b / 2a
    rng = np.random.default_rng(2)
    for _ in range(50):
        vertex, curve = rng.uniform(-0.5, 0.5), -rng.uniform(0.1, 5)
        x = np.array([-1.0, 0.0, 1.0])
        y = curve * (x - vertex) ** 2 + rng.uniform(-3, 3)
        a, b, _ = np.polyfit(x, y, 2)
        assert parabolic_offset(*y) == pytest.approx(-b / (2 * a), abs=1e-9)
        assert parabolic_offset(*y) == pytest.approx(vertex, abs=1e-9)


def test_band_power_matches_scipy_periodogram():
    # scipy.signal.periodogram with a boxcar window and 'spectrum' scaling is |X_k|² / L²
    rng = np.random.default_rng(3)
    frames = (rng.standard_normal((5, 64)) + 1j * rng.standard_normal((5, 64))).astype(np.complex128)
    band = np.abs(np.fft.fftfreq(64)) <= 0.2
    _, pxx = signal.periodogram(frames, fs=1.0, window="boxcar", scaling="spectrum", return_onesided=False,
                                detrend=False, axis=-1)
    np.testing.assert_allclose(band_power(frames, band), 64 * pxx[:, band].mean(axis=1), rtol=1e-12)


def test_pack_bits_and_bits_to_int_match_the_standard_library():
    # int.to_bytes / int(text, 2) of the standard library
    rng = np.random.default_rng(4)
    bits = rng.integers(0, 2, 64).astype(np.uint8)
    value = int("".join(map(str, bits.tolist())), 2)
    assert bits_to_int(bits) == value
    assert bytes(pack_bits(bits)) == value.to_bytes(8, "big")
    reversed_bytes = bytes(int(f"{b:08b}"[::-1], 2) for b in value.to_bytes(8, "big"))
    assert bytes(pack_bits(bits, "lsb")) == reversed_bytes
    with pytest.raises(ValueError):
        pack_bits(bits[:7])
