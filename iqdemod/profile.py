"""Link profiles: TOML in, links out (and back), with the command line's flags as overrides.

A profile has the tables ``[capture]``, ``[signal]`` and ``[frame]`` described
in :mod:`iqdemod.link`; a profile for several links in one pass has several
``[[signal]]`` entries sharing its other tables (:func:`load_links`). Every
value is checked as the link is built, and an error names the key, or the
flag when a flag is to blame.
"""

from __future__ import annotations

import dataclasses
import tomllib
from pathlib import Path
from typing import Any, Mapping, Sequence

from .files import read_small_text
from .errors import FlagError, LinkError, quote
from .link import MAX_LENGTH_BYTES, MAX_PROFILE_BYTES, MAX_SIGNALS, CaptureFormat, FrameSpec, Link, SignalSpec

__all__ = ["OVERRIDES", "check_overrides", "load_link", "load_links", "link_names", "link_to_toml", "link_with"]


# Flag name -> (table, key). These names are the command line's contract.
OVERRIDES: dict[str, tuple[str, str]] = {
    "datatype": ("capture", "datatype"),
    "rate": ("capture", "sample_rate"),
    "offset": ("signal", "offset_hz"),
    "frequency": ("signal", "frequency_hz"),
    "baud": ("signal", "baud"),
    "shift": ("signal", "shift_hz"),
    "invert": ("signal", "invert"),
    "max_freq_error": ("signal", "max_freq_error_hz"),
    "gaussian": ("signal", "bt"),  # --gaussian BT: a Gaussian pulse with this BT
    "detector": ("signal", "detector"),
    "detector_symbols": ("signal", "detector_symbols"),
    "sync": ("frame", "sync_word"),
    "sync_bits": ("frame", "sync_bits"),
    "sync_tolerance": ("frame", "sync_tolerance"),
    "length": ("frame", "length"),
    "crc": ("frame", "crc"),
    "coding": ("frame", "coding"),
    "whitening": ("frame", "whitening"),
    "bit_order": ("frame", "bit_order"),
    "crc_order": ("frame", "crc_order"),
    "length_counts": ("frame", "length_counts"),
    "length_offset": ("frame", "length_offset"),
}

_KEYS = {
    "capture": {f.name for f in dataclasses.fields(CaptureFormat)},
    "signal": {f.name for f in dataclasses.fields(SignalSpec)},
    "frame": {f.name for f in dataclasses.fields(FrameSpec)},
}


def _parse_sync(value: Any) -> int | None:
    if value is None or isinstance(value, int) and not isinstance(value, bool):
        return value
    if not isinstance(value, str):
        raise LinkError(f"sync word {quote(value)}: must be a hex string such as \"0x9B3C57E1\"")
    text = value.strip().lower()
    if text in ("", "none"):
        return None
    digits = text[2:] if text.startswith("0x") else text
    try:
        if not digits or digits.startswith(("+", "-")):
            raise ValueError
        return int(digits, 16)
    except ValueError:
        raise LinkError(f"sync word {quote(value)}: not hex (expected e.g. \"0x9B3C57E1\")") from None


def _parse_length(value: Any) -> int | str:
    if isinstance(value, str):
        text = value.strip().lower()
        if text == "prefix8":
            return "prefix8"
        try:
            return int(text)
        except ValueError:
            raise LinkError(f"length {quote(value)}: must be 1–{MAX_LENGTH_BYTES} or \"prefix8\"") from None
    return value


def link_with(tables: Mapping[str, Mapping[str, Any]], overrides: Mapping[str, Any]) -> Link:
    """A link from a profile's tables with flag-style overrides on top (see :func:`load_link`).

    Examples
    --------
    A profile's tables, with the command line's ``offset`` and ``length`` on top:

    >>> tables = {"signal": {"baud": 1200, "shift_hz": 1200, "offset_hz": 0},
    ...           "frame": {"sync_word": "0x2DD4", "sync_bits": 16, "length": 24}}
    >>> link = link_with(tables, {"offset": 6000, "length": 12, "crc": None})
    >>> link.signal.offset_hz, link.frame.length, hex(link.frame.sync_word)
    (6000.0, 12, '0x2dd4')
    """
    merged = {name: dict(tables.get(name, {})) for name in _KEYS}
    for flag, value in overrides.items():
        if value is None:
            continue
        if flag not in OVERRIDES:
            raise LinkError(f"unknown link setting {flag!r}: expected one of {', '.join(OVERRIDES)}")
        table, key = OVERRIDES[flag]
        merged[table][key] = value
        if key == "offset_hz":
            merged["signal"].pop("frequency_hz", None)
        elif key == "frequency_hz":
            merged["signal"].pop("offset_hz", None)
    sig = merged["signal"]
    if overrides.get("gaussian") is not None:
        sig["pulse"] = "gaussian"
    missing = [(key, flag) for key, flag in (("baud", "--baud"), ("shift_hz", "--shift")) if sig.get(key) is None]
    if missing:  # every one named at once
        keys, flags = " and ".join(k for k, _ in missing), " and ".join(f for _, f in missing)
        raise LinkError(f"{keys} not given: set [signal] {keys} in the link profile or use {flags}")
    frame = merged["frame"]
    if "sync_word" in frame:
        frame["sync_word"] = _parse_sync(frame["sync_word"])
    if "length" in frame:
        frame["length"] = _parse_length(frame["length"])
    try:
        return Link(
            signal=SignalSpec(**sig),
            frame=FrameSpec(**frame),
            capture=CaptureFormat(**merged["capture"]),
        )
    except TypeError as exc:  # a wrong type that the dataclass itself tripped on
        raise LinkError(f"bad link value: {exc}") from None


def load_link(path: str | Path | None = None, **overrides: Any) -> Link:
    """Build a link from a TOML profile and/or flag-style overrides.

    Parameters
    ----------
    path : str or Path, optional
        A TOML link profile (one ``[signal]`` table; for a profile with
        several ``[[signal]]`` entries see :func:`load_links`).
    **overrides
        Values that replace the profile's: ``datatype``, ``rate``, ``offset``,
        ``frequency``, ``baud``, ``shift``, ``invert``, ``max_freq_error``,
        ``sync``, ``sync_bits``, ``sync_tolerance``, ``length``, ``crc``,
        ``coding``, ``whitening``, ``bit_order``, ``crc_order``,
        ``length_counts``, ``length_offset``. None means "not given".

    Raises
    ------
    LinkError
        On TOML syntax (with its line), an unknown table or key, a wrong type or
        a value out of range, naming the key.

    Examples
    --------
    From flags alone (a buoy link: 1200 baud, 1200 Hz shift, 6 kHz above the
    capture centre), and from a TOML profile with a flag on top:

    >>> link = load_link(None, baud=1200, shift=1200, offset=6000, sync="0x2DD4", sync_bits=16, length=12)
    >>> link.signal.h, link.frame.crc
    (1.0, 'CRC-16/IBM-3740')
    >>> import os, tempfile
    >>> with tempfile.TemporaryDirectory() as tmp:
    ...     path = os.path.join(tmp, "buoy.toml")
    ...     with open(path, "w", encoding="utf-8") as fh:
    ...         _ = fh.write('[signal]\\nbaud = 1200\\nshift_hz = 1200\\n[frame]\\nsync_word = "0x2DD4"\\nsync_bits = 16\\n')
    ...     link = load_link(path, length=12)
    >>> link.signal.baud, link.frame.sync_bits, link.frame.length
    (1200.0, 16, 12)

    A bad value names its key or flag:

    >>> load_link(None, baud=-1200, shift=1200)
    Traceback (most recent call last):
    ...
    iqdemod.errors.FlagError: --baud: baud -1200: must be > 0
    """
    if path is None:
        return _apply_overrides({}, overrides)
    where, entries = _read_profile(Path(path))
    if len(entries) != 1:
        raise LinkError(f"{where}: holds {len(entries)} [[signal]] entries; give it where several links are taken")
    return _link_from_tables(entries[0][1], overrides, where)


def load_links(paths: "Sequence[str | Path]", **overrides: Any) -> dict[str, Link]:
    """Several links for one pass over a capture, by name, from profiles with one or more signals.

    A profile's ``[signal]`` table gives one link, named by its ``name`` key or
    else the file's stem; each ``[[signal]]`` entry of a profile gives one
    link (named by its ``name`` key, else ``stem-1``, ``stem-2``, …), sharing
    the profile's ``[capture]`` and ``[frame]`` tables. The overrides apply to
    every link (see :func:`load_link`).

    Raises
    ------
    LinkError
        As :func:`load_link`; also on two links of the same name.

    Examples
    --------
    One profile with two ``[[signal]]`` entries (two buoys on one capture)
    sharing its ``[frame]`` table gives two links, by name:

    >>> import os, tempfile
    >>> text = ('[[signal]]\\nname = "buoy-7"\\nbaud = 1200\\nshift_hz = 1200\\noffset_hz = -6000\\n'
    ...         '[[signal]]\\nname = "buoy-9"\\nbaud = 2400\\nshift_hz = 2400\\noffset_hz = 9000\\n'
    ...         '[frame]\\nsync_word = "0x2DD4"\\nsync_bits = 16\\nlength = 12\\n')
    >>> with tempfile.TemporaryDirectory() as tmp:
    ...     path = os.path.join(tmp, "harbour.toml")
    ...     with open(path, "w", encoding="utf-8") as fh:
    ...         _ = fh.write(text)
    ...     links = load_links([path])
    >>> {name: (link.signal.baud, link.signal.offset_hz, link.frame.length) for name, link in links.items()}
    {'buoy-7': (1200.0, -6000.0, 12), 'buoy-9': (2400.0, 9000.0, 12)}
    """
    out: dict[str, Link] = {}
    for path in paths:
        where, entries = _read_profile(Path(path))
        for name, tables in entries:
            if name in out:
                raise LinkError(f"{where}: a second link named {quote(name)} (give each [signal] its own name)")
            out[name] = _link_from_tables(tables, overrides, where)
    if not out:
        raise LinkError("no link profile given")
    return out


def link_names(path: str | Path) -> list[str]:
    """The names :func:`load_links` gives the links of one profile, in order.

    For telling which profile a link of several came from (batch's ``link`` column).

    Raises
    ------
    LinkError
        As :func:`load_links`, for a profile it cannot read.

    Examples
    --------
    >>> import os, tempfile
    >>> with tempfile.TemporaryDirectory() as tmp:
    ...     path = os.path.join(tmp, "harbour.toml")
    ...     with open(path, "w", encoding="utf-8") as fh:
    ...         _ = fh.write('[[signal]]\\nname = "buoys"\\nbaud = 1200\\n[[signal]]\\nbaud = 2400\\n')
    ...     link_names(path)
    ['buoys', 'harbour-2']
    """
    return [name for name, _ in _read_profile(Path(path))[1]]


def _read_profile(p: Path) -> tuple[str, list[tuple[str, dict[str, dict[str, Any]]]]]:
    """A profile's tables, checked: (where, [(link name, tables) per signal entry])."""
    where = f"link profile {quote(str(p))}"
    text = read_small_text(p, MAX_PROFILE_BYTES, LinkError, where, "file")
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise LinkError(f"{where}: TOML syntax error: {str(exc)[:200]}") from None
    except RecursionError:
        raise LinkError(f"{where}: TOML nested too deep") from None
    except ValueError as exc:  # e.g. an integer beyond sys.get_int_max_str_digits
        raise LinkError(f"{where}: bad TOML value: {str(exc).splitlines()[0][:120]}") from None
    signals = doc.get("signal")
    many = isinstance(signals, list)
    if many and (not signals or len(signals) > MAX_SIGNALS or not all(isinstance(t, dict) for t in signals)):
        raise LinkError(f"{where}: [[signal]] must hold 1 to {MAX_SIGNALS} tables")
    tables: dict[str, dict[str, Any]] = {}
    for name, table in doc.items():
        if name not in _KEYS:
            raise LinkError(f"{where}: unknown table [{quote(name)[1:-1]}] (expected capture, signal, frame)")
        if name == "signal" and many:
            continue
        if not isinstance(table, dict):
            raise LinkError(f"{where}: {name} must be a table [{name}]")
        tables[name] = dict(table)
    entries = []
    for i, sig in enumerate(signals if many else [tables.get("signal", {})]):
        sig = dict(sig)
        default = f"{p.stem}-{i + 1}" if many else p.stem
        label = sig.pop("name", default)
        if not isinstance(label, str) or not label or len(label) > 64:
            raise LinkError(f"{where}: signal name {quote(label)}: must be text of 1 to 64 characters")
        one = {k: v for k, v in tables.items() if k != "signal"}
        if sig or not many:
            one["signal"] = sig
        for table_name, table in one.items():
            for key in table:
                if key not in _KEYS[table_name]:
                    raise LinkError(
                        f"{where}: unknown key {quote(key)} in [{table_name}] "
                        f"(expected {', '.join(sorted(_KEYS[table_name] | ({'name'} if table_name == 'signal' else set())))})"
                    )
        entries.append((label, one))
    return where, entries


def _link_from_tables(tables: dict[str, dict[str, Any]], overrides: Mapping[str, Any], where: str) -> Link:
    try:
        return link_with(tables, overrides)
    except LinkError as exc:
        flag_error = _overrides_error(overrides)
        if flag_error is not None:  # the flags are wrong whatever the profile says: blame them
            raise flag_error from None
        raise LinkError(f"{where}: {exc}") from None


# Values that complete a link, so that the overrides can be checked on their own.
_NEUTRAL = {"signal": {"baud": 1.0, "shift_hz": 1.0}}


def _overrides_error(overrides: Mapping[str, Any]) -> FlagError | None:
    """The error the overrides give on their own (on neutral values), naming the flag; None when fine."""
    given = {k: v for k, v in overrides.items() if v is not None}
    if not given:
        return None
    for name, value in given.items():
        try:
            link_with(_NEUTRAL, {name: value})
        except LinkError as exc:
            return FlagError(_flag(name), str(exc))
    try:
        link_with(_NEUTRAL, given)
    except LinkError as exc:
        return FlagError(", ".join(_flag(n) for n in given), str(exc))
    return None


def check_overrides(overrides: Mapping[str, Any]) -> None:
    """Raise the error the flag-style `overrides` give on their own, naming the flag (as every link does).

    For a command that takes capture flags without building a link (the survey).

    Examples
    --------
    >>> check_overrides({"rate": 1e6, "datatype": None})
    >>> check_overrides({"rate": -5.0})
    Traceback (most recent call last):
    ...
    iqdemod.errors.FlagError: --rate: sample rate -5 Hz: must be > 0 and at most 1e+11
    """
    error = _overrides_error(overrides)
    if error is not None:
        raise error


def _flag(name: str) -> str:
    """The command line's flag for an override name (``sync_bits`` → ``--sync-bits``)."""
    return "--" + name.replace("_", "-") if name in OVERRIDES else quote(name)


def _apply_overrides(tables: Mapping[str, Mapping[str, Any]], overrides: Mapping[str, Any]) -> Link:
    """Build from overrides only; a bad value names its flag."""
    try:
        return link_with(tables, overrides)
    except LinkError as exc:
        if "not given" in str(exc):
            raise
        raise (_overrides_error(overrides) or exc) from None


def link_to_toml(link: Link, *, comment: str | None = None) -> str:
    """Render `link` as a TOML profile that :func:`load_link` reads back.

    Examples
    --------
    The profile text reads back as the same link:

    >>> import os, tempfile
    >>> link = load_link(None, rate=48000, baud=1200, shift=1200, offset=6000, sync="0x2DD4", sync_bits=16, length=12)
    >>> text = link_to_toml(link, comment="harbour buoy 7")
    >>> print(text[:text.index("[frame]")])
    # harbour buoy 7
    [capture]
    sample_rate = 48000
    [signal]
    baud = 1200
    shift_hz = 1200
    offset_hz = 6000
    invert = false
    pulse = "rect"
    detector_symbols = 5
    <BLANKLINE>
    >>> with tempfile.TemporaryDirectory() as tmp:
    ...     path = os.path.join(tmp, "buoy.toml")
    ...     with open(path, "w", encoding="utf-8") as fh:
    ...         _ = fh.write(text)
    ...     load_link(path) == link
    True
    >>> [line for line in text.splitlines() if line.startswith("sync")]
    ['sync_word = "0x2DD4"', 'sync_bits = 16', 'sync_tolerance = 1']
    """

    def val(v: Any) -> str:
        if isinstance(v, bool):
            return "true" if v else "false"
        if isinstance(v, float):
            return repr(int(v)) if v.is_integer() else repr(v)
        if isinstance(v, int):
            return str(v)
        return '"' + str(v).replace("\\", "\\\\").replace('"', '\\"') + '"'

    lines = [f"# {line}" for line in (comment or "").splitlines()]
    for name, table in link.as_dict().items():
        items = [(k, v) for k, v in table.items() if v is not None]
        if name == "signal" and table.get("pulse") == "rect":  # a BT means nothing for a rectangular pulse
            items = [(k, v) for k, v in items if k != "bt"]
        if name == "frame" and link.frame.sync_word is not None:  # as every report shows it: 0x9B3C57E1
            digits = (link.frame.sync_bits + 3) // 4
            items = [(k, f"0x{link.frame.sync_word:0{digits}X}" if k == "sync_word" else v) for k, v in items]
        if not items:
            continue
        lines.append(f"[{name}]")
        lines += [f"{k} = {val(v)}" for k, v in items]
    return "\n".join(lines) + "\n"
