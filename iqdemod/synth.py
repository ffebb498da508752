"""The project's own generator of synthetic captures: FSK bursts in white Gaussian noise.

Each frame is one burst: an alternating-bit preamble, the sync word, the
optional length byte, the payload and the CRC, then a few tail bits. The
modulation is continuous-phase FSK: the instantaneous frequency is the signal
centre plus the carrier error ± shift/2, with a rectangular frequency pulse or
one shaped by a Gaussian filter of bandwidth-time product BT (the Gaussian
frequency pulse of GMSK; Murota & Hirade, IEEE Trans. Commun. 29(7), 1981).
The symbol clock can run off nominal by ``clock_ppm``.

Eb/N0 definition (common practice; REFERENCE §8): for a complex baseband
capture at fs samples/s, a tone of amplitude A and bit rate Rb, with complex
white noise of total variance σ² per sample,

    Eb/N0 = A² · (fs / Rb) / σ².

The capture is written as a SigMF pair in blocks, so a long capture never sits
in memory, together with a truth file (JSON) that lists every frame.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Iterable, Iterator

import numpy as np
from scipy.signal import fftconvolve

from .capture import parse_datatype
from .errors import LinkError, OutputError, quote
from .framing import PREAMBLE_BITS, frame_symbols
from .link import MAX_FREQUENCY_HZ, Link, finite_number
from .files import atomic_files, check_distinct, classify_output

__all__ = ["SynthConfig", "synthesize", "refuse_existing", "fsk_burst", "amplitude_for_ebn0", "sigmf_paths",
           "payload_bit_errors", "DEFAULT_CENTRE_HZ"]

TAIL_BITS = 8
_BLOCK = 1 << 20

# The ranges the generator accepts (each stated in the command's help).
EBN0_RANGE_DB = (-50.0, 100.0)
MAX_FRAMES = 1_000_000
#: The capture centre written to the metadata unless told otherwise: the demo fleet's own channel
#: plan, chosen for this project (no device's default).
DEFAULT_CENTRE_HZ = 868_837_500.0
MAX_CLOCK_PPM = 10_000.0  # 1 %: far beyond any crystal, small enough that the symbol clock stays positive
GAUSSIAN_BT_RANGE = (0.1, 10.0)  # below 0.1 the pulse spans hundreds of symbols (GMSK uses 0.3–0.5)
MAX_GAP_S = 3600.0
NOISE_RMS_RANGE = (1e-6, 10.0)
MAX_PREAMBLE_BITS = 100_000
MAX_SEED = 2**63 - 1
# One burst is built whole as a waveform, about 64 bytes per sample on the way (time, index,
# frequency, phase and the complex result); a burst needing more than this is refused.
BURST_MEMORY_BUDGET_BYTES = 1 << 30
_BYTES_PER_BURST_SAMPLE = 64


def amplitude_for_ebn0(ebn0_db: float, *, noise_var: float, sample_rate_hz: float, baud: float) -> float:
    """Tone amplitude A that gives `ebn0_db` (REFERENCE §8: Eb/N0 = A²·(fs/Rb)/σ²).

    Examples
    --------
    REFERENCE §8: Eb/N0 = A²·(fs/Rb)/σ². With σ² = 0.0025 (noise rms 0.05),
    48 kHz and 1200 baud, 10 dB needs A = √(10·0.0025·1200/48000) = 0.025:

    >>> a = amplitude_for_ebn0(10.0, noise_var=0.0025, sample_rate_hz=48000, baud=1200)
    >>> round(a, 6), round(a**2 * (48000 / 1200) / 0.0025, 6)
    (0.025, 10.0)
    """
    return float(np.sqrt(10 ** (ebn0_db / 10) * noise_var * baud / sample_rate_hz))


def fsk_burst(
    bits: np.ndarray,
    *,
    sample_rate_hz: float,
    baud: float,
    shift_hz: float,
    centre_hz: float,
    clock_ppm: float = 0.0,
    gaussian_bt: float | None = None,
    phase: float = 0.0,
    start_fraction: float = 0.0,
    invert: bool = False,
) -> np.ndarray:
    """A unit-amplitude continuous-phase FSK waveform for `bits` (complex128).

    Parameters
    ----------
    bits : numpy.ndarray
        0/1 values; bit 1 is the upper tone unless `invert`.
    centre_hz : float
        Frequency midway between the tones, relative to the capture centre.
    clock_ppm : float
        Symbol clock error; the transmitted rate is baud·(1 + ppm·1e-6).
    gaussian_bt : float, optional
        BT of a Gaussian frequency pulse; rectangular when None.
    start_fraction : float
        Where, within the first sample period, the first symbol begins (0–1).

    Examples
    --------
    Four bits at 1200 baud, 1200 Hz shift, 6 kHz above the capture centre,
    at 48 kHz: 40 samples per bit, unit amplitude, bit 1 on the upper tone
    (6600 Hz), bit 0 on the lower (5400 Hz):

    >>> import numpy as np
    >>> x = fsk_burst(np.array([1, 0, 0, 1]), sample_rate_hz=48000, baud=1200, shift_hz=1200, centre_hz=6000)
    >>> len(x), bool(np.allclose(np.abs(x), 1))
    (160, True)
    >>> freq_hz = np.angle(x[1:] * np.conj(x[:-1])) / (2 * np.pi) * 48000
    >>> [round(float(f)) for f in freq_hz[[10, 50, 90, 130]]]
    [6600, 5400, 5400, 6600]
    """
    bits = np.asarray(bits, dtype=np.int8)
    rate_tx = baud * (1.0 + clock_ppm * 1e-6)
    sps = sample_rate_hz / rate_tx
    n = int(np.ceil((len(bits)) * sps - start_fraction))
    t_sym = (np.arange(n) + start_fraction) / sps  # time in symbols at each sample
    k = np.minimum(np.floor(t_sym).astype(np.int64), len(bits) - 1)
    level = (2.0 * bits - 1.0) * (-1.0 if invert else 1.0)
    dev = level[k]
    if gaussian_bt is not None:
        # Gaussian filter, σ_t = √(ln 2) / (2π·BT) symbol times (Murota & Hirade 1981)
        sigma = np.sqrt(np.log(2.0)) / (2 * np.pi * gaussian_bt) * sps
        half = int(np.ceil(4 * sigma))
        g = np.exp(-0.5 * (np.arange(-half, half + 1) / sigma) ** 2)
        g /= g.sum()
        padded = np.concatenate([np.full(half, dev[0]), dev, np.full(half, dev[-1])])
        dev = fftconvolve(padded, g, mode="valid")
    freq = centre_hz + dev * shift_hz / 2
    ph = phase + 2 * np.pi * np.cumsum(freq) / sample_rate_hz
    return np.exp(1j * ph)


@dataclass(frozen=True)
class SynthConfig:
    """What to generate.

    Attributes
    ----------
    link : Link
        Signal and frame layout; ``link.capture`` gives datatype and rate.
    ebn0_db : tuple of float
        Eb/N0 per frame, used in turn.
    n_frames : int
    freq_error_hz, clock_ppm : float
        Transmitter carrier error and symbol-clock error.
    gaussian_bt : float or None
    gap_s : tuple of float
        Range of the quiet time between bursts, seconds (uniform).
    lead_s : float
        Noise before the first burst, seconds.
    noise_rms : float
        σ, the total rms of the complex noise per sample (full scale = 1).
    centre_hz : float or None
        Capture centre frequency written as SigMF core:frequency (default
        :data:`DEFAULT_CENTRE_HZ`, 868.8375 MHz).
    preamble_bits : int
    seed : int
    """

    link: Link
    ebn0_db: tuple[float, ...]
    n_frames: int
    freq_error_hz: float = 0.0
    clock_ppm: float = 0.0
    gaussian_bt: float | None = None
    gap_s: tuple[float, float] = (0.01, 0.03)
    lead_s: float = 0.02
    noise_rms: float = 0.05
    centre_hz: float | None = DEFAULT_CENTRE_HZ
    preamble_bits: int = PREAMBLE_BITS
    seed: int = 1
    start_time: str | None = None
    description: str = "synthetic FSK bursts (iqdemod synth)"

    def __post_init__(self) -> None:
        if not self.ebn0_db:
            raise LinkError("ebn0_db: give at least one Eb/N0 value")
        lo_db, hi_db = EBN0_RANGE_DB
        values = []
        for v in self.ebn0_db:
            x = _finite("Eb/N0", v, "dB")
            if not lo_db <= x <= hi_db:
                raise LinkError(f"Eb/N0 {x:g} dB: must be within {lo_db:g}–{hi_db:g} dB")
            values.append(x)
        object.__setattr__(self, "ebn0_db", tuple(values))
        n = _whole("frames", self.n_frames)
        if not 1 <= n <= MAX_FRAMES:
            raise LinkError(f"frames {n}: must be within 1–{MAX_FRAMES}")
        fe = _finite("carrier error", self.freq_error_hz, "Hz")
        if abs(fe) > MAX_FREQUENCY_HZ:
            raise LinkError(f"carrier error {fe:g} Hz: must be within ±{MAX_FREQUENCY_HZ:g} Hz")
        ppm = _finite("clock error", self.clock_ppm, "ppm")
        if abs(ppm) > MAX_CLOCK_PPM:
            raise LinkError(f"clock error {ppm:g} ppm: must be within ±{MAX_CLOCK_PPM:g} ppm")
        if self.gaussian_bt is not None:
            bt = _finite("gaussian BT", self.gaussian_bt, "")
            if not GAUSSIAN_BT_RANGE[0] <= bt <= GAUSSIAN_BT_RANGE[1]:
                raise LinkError(f"gaussian BT {bt:g}: must be within {GAUSSIAN_BT_RANGE[0]:g}–{GAUSSIAN_BT_RANGE[1]:g}")
        rms = _finite("noise_rms", self.noise_rms, "")
        if not NOISE_RMS_RANGE[0] <= rms <= NOISE_RMS_RANGE[1]:
            raise LinkError(f"noise_rms {rms:g}: must be within {NOISE_RMS_RANGE[0]:g}–{NOISE_RMS_RANGE[1]:g}")
        if self.link.capture.sample_rate is None:
            raise LinkError("sample rate not given: set [capture] sample_rate or --rate")
        lo, hi = (_finite("gap", g, "s") for g in self.gap_s)
        if not 0 <= lo <= hi <= MAX_GAP_S:
            raise LinkError(f"gap {lo:g} {hi:g} s: need 0 <= low <= high <= {MAX_GAP_S:g} seconds")
        lead = _finite("lead", self.lead_s, "s")
        if not 0 <= lead <= MAX_GAP_S:
            raise LinkError(f"lead {lead:g} s: must be within 0–{MAX_GAP_S:g} seconds")
        if self.centre_hz is not None:
            c = _finite("centre frequency", self.centre_hz, "Hz")
            if not 0 < c <= MAX_FREQUENCY_HZ:
                raise LinkError(f"centre frequency {c:g} Hz: must be within (0, {MAX_FREQUENCY_HZ:g}] Hz")
        pre = _whole("preamble bits", self.preamble_bits)
        if not 0 <= pre <= MAX_PREAMBLE_BITS:
            raise LinkError(f"preamble bits {pre}: must be within 0–{MAX_PREAMBLE_BITS}")
        if self.start_time is not None and (not isinstance(self.start_time, str) or len(self.start_time) > 64):
            raise LinkError(f"start time {quote(self.start_time)}: must be an RFC 3339 time of at most 64 characters")
        seed = _whole("seed", self.seed)
        if not 0 <= seed <= MAX_SEED:
            raise LinkError(f"seed {quote(seed)}: must be within 0–{MAX_SEED}")

    @property
    def datatype(self) -> str:
        return self.link.capture.datatype or "cf32_le"

    @property
    def sample_rate_hz(self) -> float:
        return float(self.link.capture.sample_rate)


def _finite(name: str, value, unit: str) -> float:
    return finite_number(name, value, unit=unit)


def _whole(name: str, value) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise LinkError(f"{name} {quote(value)}: must be a whole number")
    return int(value)


def sigmf_paths(output: str | os.PathLike) -> tuple[Path, Path, Path]:
    """(meta, data, truth) paths for an output base name (a SigMF suffix is stripped).

    Examples
    --------
    A SigMF suffix on the base name is dropped (SigMF spec: NAME.sigmf-meta
    and NAME.sigmf-data):

    >>> [p.name for p in sigmf_paths("captures/night.sigmf-meta")]
    ['night.sigmf-meta', 'night.sigmf-data', 'night.truth.json']
    """
    text = os.fspath(output)
    p = Path(text)
    name = p.name
    if not name or text.endswith(os.sep) or text == "-":
        raise OutputError(f"output {quote(text)}: expected a base name such as captures/night (not empty, "
                          "not a folder, not -)")
    for suffix in (".sigmf-meta", ".sigmf-data", ".sigmf"):
        if name.endswith(suffix):
            name = name[: -len(suffix)]
    if not name:
        raise OutputError(f"output {quote(text)}: the base name before the SigMF suffix is empty")
    base = p.with_name(name)
    return (
        base.with_name(name + ".sigmf-meta"),
        base.with_name(name + ".sigmf-data"),
        base.with_name(name + ".truth.json"),
    )


def _payload(rng: np.random.Generator, index: int, cfg: SynthConfig) -> bytes:
    spec = cfg.link.frame
    n = int(rng.integers(6, 33)) if spec.length == "prefix8" else int(spec.length)
    body = bytearray(rng.integers(0, 256, n, dtype=np.uint8).tobytes())
    # A readable head for the demo: buoy number and a sequence count.
    head = bytes([0xB0 | (index % 16), (index >> 8) & 0xFF, index & 0xFF])
    body[: min(3, n)] = head[: min(3, n)]
    return bytes(body)


def _plan_bursts(cfg: SynthConfig, rng: np.random.Generator) -> list[dict]:
    link, fs = cfg.link, cfg.sample_rate_hz
    rate_tx = link.signal.baud * (1 + cfg.clock_ppm * 1e-6)
    t = cfg.lead_s
    plans = []
    for i in range(cfg.n_frames):
        if link.frame.sync_word is None:
            payload = rng.integers(0, 256, int(link.frame.length if link.frame.length != "prefix8" else 16), dtype=np.uint8).tobytes()
            body = np.unpackbits(np.frombuffer(payload, np.uint8))
        else:
            payload = _payload(rng, i, cfg)
            body = frame_symbols(payload, link.frame)  # the symbols on the air (Manchester: chips)
        pre = np.resize(np.array([1, 0], np.uint8), cfg.preamble_bits)
        tail = np.resize(np.array([1, 0], np.uint8), TAIL_BITS)
        bits = np.concatenate([pre, body, tail])
        start = int(np.floor(t * fs))
        frac = float(rng.uniform(0, 1))
        n = int(np.ceil(len(bits) * fs / rate_tx - frac))
        ebn0 = cfg.ebn0_db[i % len(cfg.ebn0_db)]
        sync_sample = start + (cfg.preamble_bits * fs / rate_tx - frac) + 0.0
        plans.append(
            dict(
                index=i,
                start_sample=start,
                n_samples=n,
                start_fraction=frac,
                bits=bits,
                payload=payload,
                ebn0_db=ebn0,
                phase=float(rng.uniform(0, 2 * np.pi)),
                sync_sample=sync_sample,
            )
        )
        t = (start + n) / fs + float(rng.uniform(*cfg.gap_s))
    return plans


def _to_raw(x: np.ndarray, datatype: str) -> bytes:
    dt = parse_datatype(datatype)
    comp = x.view(np.float32) if x.dtype == np.complex64 else x.astype(np.complex64).view(np.float32)
    if dt.is_float:
        return comp.astype(dt.numpy).tobytes()
    lo, hi = dt.full_scale
    q = np.clip(np.rint(comp / dt.scale + dt.offset), lo, hi)
    return q.astype(dt.numpy).tobytes()


def _blocks(cfg: SynthConfig, plans: list[dict], total: int) -> Iterator[np.ndarray]:
    sig = cfg.link.signal
    fs = cfg.sample_rate_hz
    offset = sig.offset_for(cfg.centre_hz)
    noise_rng = np.random.default_rng([cfg.seed, 0x5EED])
    sigma = cfg.noise_rms / np.sqrt(2.0)
    j = 0
    cache: dict[int, np.ndarray] = {}
    for b0 in range(0, total, _BLOCK):
        b1 = min(total, b0 + _BLOCK)
        block = (noise_rng.standard_normal(2 * (b1 - b0), dtype=np.float32) * np.float32(sigma)).view(np.complex64)
        while j < len(plans) and plans[j]["start_sample"] < b1:
            j += 1
        for i in range(j):
            p = plans[i]
            s0, s1 = p["start_sample"], p["start_sample"] + p["n_samples"]
            if s1 <= b0:
                cache.pop(i, None)
                continue
            if i not in cache:
                amp = amplitude_for_ebn0(p["ebn0_db"], noise_var=cfg.noise_rms**2, sample_rate_hz=fs,
                                         baud=sig.baud / cfg.link.frame.symbols_per_bit)  # Eb: a bit, not a chip
                cache[i] = (amp * fsk_burst(
                    p["bits"],
                    sample_rate_hz=fs,
                    baud=sig.baud,
                    shift_hz=sig.shift_hz,
                    centre_hz=offset + cfg.freq_error_hz,
                    clock_ppm=cfg.clock_ppm,
                    gaussian_bt=cfg.gaussian_bt,
                    phase=p["phase"],
                    start_fraction=p["start_fraction"],
                    invert=sig.invert,
                )).astype(np.complex64)
            w = cache[i]
            a, b = max(s0, b0), min(s1, b1)
            block[a - b0 : b - b0] += w[a - s0 : b - s0]
        yield block


def synthesize(output: str | os.PathLike, cfg: SynthConfig, *, progress: bool = False,
               inputs: Iterable[tuple[str, str | os.PathLike]] = (), overwrite: bool = False) -> dict:
    """Write a synthetic SigMF capture and its truth file.

    Parameters
    ----------
    output : str or PathLike
        Base name; writes ``BASE.sigmf-meta``, ``BASE.sigmf-data`` and
        ``BASE.truth.json``.
    cfg : SynthConfig
    progress : bool
        Show a tqdm bar on stderr.
    inputs : iterable of (role, path)
        Files this run reads (a link profile): none of the outputs may be one of them.
    overwrite : bool
        Replace existing output files. Without it, a run whose data, metadata or
        truth file already exists is refused before any work: a real recording
        under the same name is never replaced by a synthetic one.

    Returns
    -------
    dict
        The truth document (also written to the truth file).

    Raises
    ------
    LinkError
        For settings out of range, or a burst too long to build within the memory budget.
    OutputError
        When an output already exists (without `overwrite`), is an input or another output, or the
        capture would not fit in the free space.

    Notes
    -----
    The three files become visible together: each is written to a temporary
    file first, then they are renamed data, truth, metadata; if a rename fails
    the ones done are undone (:class:`iqdemod.files.FileSet`).

    Examples
    --------
    Three buoy frames at 48 kHz in a ``cf32_le`` SigMF pair (SigMF spec:
    8 bytes per complex sample) with its truth file:

    >>> import json, os, tempfile
    >>> from iqdemod.profile import load_link
    >>> link = load_link(None, rate=48000, baud=1200, shift=1200, offset=6000, sync="0x2DD4", sync_bits=16, length=12)
    >>> tmp = tempfile.TemporaryDirectory()
    >>> base = os.path.join(tmp.name, "buoys")
    >>> truth = synthesize(base, SynthConfig(link=link, ebn0_db=(14.0,), n_frames=3, seed=5))
    >>> sorted(os.listdir(tmp.name))
    ['buoys.sigmf-data', 'buoys.sigmf-meta', 'buoys.truth.json']
    >>> with open(base + ".sigmf-meta", encoding="utf-8") as fh:
    ...     meta = json.load(fh)
    >>> meta["global"]["core:datatype"], meta["global"]["core:sample_rate"], meta["captures"][0]["core:frequency"]
    ('cf32_le', 48000.0, 868837500.0)
    >>> os.path.getsize(base + ".sigmf-data") == 8 * truth["n_samples"]
    True
    >>> [(f["ebn0_db"], len(bytes.fromhex(f["payload_hex"]))) for f in truth["frames"]]
    [(14.0, 12), (14.0, 12), (14.0, 12)]

    Existing files are replaced only when asked (:func:`refuse_existing`):

    >>> len(synthesize(base, SynthConfig(link=link, ebn0_db=(20.0,), n_frames=2, seed=6), overwrite=True)["frames"])
    2
    >>> tmp.cleanup()
    """
    meta_path, data_path, truth_path = sigmf_paths(output)
    check_distinct([("capture metadata", meta_path), ("capture data", data_path), ("truth file", truth_path)],
                   list(inputs))
    if not overwrite:
        refuse_existing(output)
    fs = cfg.sample_rate_hz
    offset = cfg.link.check_rate(fs, cfg.centre_hz)
    edge = abs(offset + cfg.freq_error_hz) + cfg.link.signal.shift_hz / 2
    if edge >= fs / 2:
        raise LinkError(f"carrier error {cfg.freq_error_hz:g} Hz: the tones would reach {edge:g} Hz from the "
                        f"centre, outside the captured band (±{fs / 2:g} Hz)")
    dt = parse_datatype(cfg.datatype)
    rng = np.random.default_rng(cfg.seed)
    plans = _plan_bursts(cfg, rng)
    total = plans[-1]["start_sample"] + plans[-1]["n_samples"] + int(np.ceil(max(cfg.gap_s[1], 0.01) * fs))
    longest = max(p["n_samples"] for p in plans)
    if longest * _BYTES_PER_BURST_SAMPLE > BURST_MEMORY_BUDGET_BYTES:
        raise LinkError(f"one burst would be {longest} samples ({cfg.link.signal.baud:g} baud at {fs:g} Hz), needing "
                        f"about {longest * _BYTES_PER_BURST_SAMPLE / 2**30:.3g} GB to build; the budget is "
                        f"{BURST_MEMORY_BUDGET_BYTES >> 30} GB: raise the baud or lower the rate")
    meta_path.parent.mkdir(parents=True, exist_ok=True)
    size = total * dt.sample_bytes
    target = classify_output(data_path)
    if target.kind == "file":
        free = shutil.disk_usage(target.path.parent).free
        if size > free:
            raise OutputError(f"{data_path}: the capture would take {size / 1e9:.3g} GB, but only "
                              f"{free / 1e9:.3g} GB are free there")
    sha = hashlib.sha512()
    bar = None
    if progress:
        from tqdm import tqdm

        bar = tqdm(total=total, unit="S", unit_scale=True, desc="synth", leave=False, delay=1.0, disable=None)
    # data, truth, then the metadata that vouches for the data: all three appear together or none
    with atomic_files() as files:
        fh = files.open(data_path, "wb")
        for block in _blocks(cfg, plans, total):
            raw = _to_raw(block, cfg.datatype)
            sha.update(raw)
            fh.write(raw)
            if bar is not None:
                bar.update(len(block))
        if bar is not None:
            bar.close()
        truth, meta = _documents(cfg, plans, meta_path, total, offset, sha.hexdigest())
        out = files.open(truth_path, "w")
        json.dump(truth, out, indent=1)
        out.write("\n")
        out = files.open(meta_path, "w")
        json.dump(meta, out, indent=1)
        out.write("\n")
    return truth


def refuse_existing(output: str | os.PathLike) -> None:
    """Refuse an output base name whose data, metadata or truth file exists already.

    A symbolic link counts, even a dangling one. :func:`synthesize` calls it unless told to overwrite.

    Raises
    ------
    OutputError
        Naming every one of the three files that exists.

    Examples
    --------
    >>> import os, tempfile
    >>> tmp = tempfile.TemporaryDirectory()
    >>> refuse_existing(os.path.join(tmp.name, "cap1"))  # nothing there yet
    >>> open(os.path.join(tmp.name, "cap1.sigmf-data"), "wb").close()
    >>> refuse_existing(os.path.join(tmp.name, "cap1"))
    Traceback (most recent call last):
    ...
    iqdemod.errors.OutputError: output '...cap1': 'cap1.sigmf-data' already exists in '...'; refusing to replace it (give --overwrite, in Python overwrite=True, or another name)
    >>> tmp.cleanup()
    """
    there = [p for p in sigmf_paths(output) if os.path.lexists(p)]
    if there:
        names = ", ".join(quote(p.name) for p in there)
        verb, them = ("exists", "it") if len(there) == 1 else ("exist", "them")
        raise OutputError(f"output {quote(os.fspath(output))}: {names} already {verb} in "
                          f"{quote(str(there[0].parent))}; refusing to replace {them} (give --overwrite, in Python "
                          "overwrite=True, or another name)")


def _documents(cfg: SynthConfig, plans: list[dict], meta_path: Path, total: int, offset: float,
               sha512: str) -> tuple[dict, dict]:
    """(truth, SigMF metadata) of a generated capture."""
    fs = cfg.sample_rate_hz
    start_time = cfg.start_time or datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    capture = {"core:sample_start": 0, "core:datetime": start_time}
    if cfg.centre_hz is not None:
        capture["core:frequency"] = cfg.centre_hz
    meta = {
        "global": {
            "core:datatype": cfg.datatype,
            "core:sample_rate": fs,
            "core:version": "1.2.0",
            "core:description": cfg.description,
            "core:recorder": "iqdemod synth",
            "core:sha512": sha512,
        },
        "captures": [capture],
        "annotations": [
            {
                "core:sample_start": p["start_sample"],
                "core:sample_count": p["n_samples"],
                "core:label": "burst",
                "core:comment": f"frame {p['index']}, Eb/N0 {p['ebn0_db']:g} dB",
                "core:generator": "iqdemod synth",
            }
            for p in plans
        ],
    }
    rate_tx = cfg.link.signal.baud * (1 + cfg.clock_ppm * 1e-6)
    truth = {
        "capture": meta_path.name,
        "sample_rate_hz": fs,
        "n_samples": total,
        "noise_rms": cfg.noise_rms,
        "offset_hz": offset,
        "freq_error_hz": cfg.freq_error_hz,
        "clock_ppm": cfg.clock_ppm,
        "gaussian_bt": cfg.gaussian_bt,
        "ebn0_definition": "Eb/N0 = A^2 * (fs/Rb) / sigma^2, sigma^2 the total complex noise variance per sample",
        "link": cfg.link.as_dict(),
        "frames": [
            {
                "index": p["index"],
                "start_sample": p["start_sample"],
                "sync_sample": p["sync_sample"],
                "t_s": p["sync_sample"] / fs,
                "n_bits": int(len(p["bits"])),
                "payload_hex": p["payload"].hex(),
                "ebn0_db": p["ebn0_db"],
                "symbol_s": 1.0 / rate_tx,
            }
            for p in plans
        ],
    }
    return truth, meta


def payload_bit_errors(frames, truth: dict, *, tolerance_symbols: float = 1.0) -> tuple[int, int, int]:
    """Count payload bit errors of decoded frames against a truth document from :func:`synthesize`.

    Each frame is matched to the sent frame whose sync word starts nearest in
    time (within `tolerance_symbols`); each sent frame is counted once, and a
    truncated frame not at all.

    Returns
    -------
    errors, bits, matched : int
        Payload bit errors, payload bits compared, and frames matched.

    Examples
    --------
    Decoded frames need only ``t_s``, ``payload`` and ``truncated``; one bit
    of the two payload bytes differs, and a frame far from any sent one is
    not matched:

    >>> from types import SimpleNamespace
    >>> truth = {"frames": [{"t_s": 0.100, "symbol_s": 0.001, "payload_hex": "a5a5"}]}
    >>> frames = [SimpleNamespace(t_s=0.1004, payload=bytes([0xA5, 0xA4]), truncated=False),
    ...           SimpleNamespace(t_s=0.300, payload=bytes([0xA5, 0xA5]), truncated=False)]
    >>> payload_bit_errors(frames, truth)
    (1, 16, 1)
    """
    t_true = np.array([f["t_s"] for f in truth["frames"]])
    symbol_s = np.array([f["symbol_s"] for f in truth["frames"]])
    errors = bits = 0
    seen: set[int] = set()
    for f in frames:
        i = int(np.argmin(np.abs(t_true - f.t_s)))
        if abs(t_true[i] - f.t_s) > tolerance_symbols * symbol_s[i] or i in seen or f.truncated:
            continue
        seen.add(i)
        sent = np.unpackbits(np.frombuffer(bytes.fromhex(truth["frames"][i]["payload_hex"]), np.uint8))
        got = np.unpackbits(np.frombuffer(f.payload, np.uint8))
        n = min(len(sent), len(got))  # a wrong length byte: the bits it lost count as errors
        errors += int(np.count_nonzero(sent[:n] != got[:n])) + len(sent) - n
        bits += len(sent)
    return errors, bits, len(seen)
