"""Pieces every command shares: the link options, output files, messages on stderr."""

from __future__ import annotations

import contextlib
import math
import sys
from pathlib import Path
from typing import Any, Callable, Iterable, Iterator, TextIO

import click

import iqdemod
from iqdemod.files import atomic_writer, check_distinct
from iqdemod.capture import MAX_SAMPLE_RATE_HZ, capture_files
from iqdemod.link import MAX_BT, MAX_FREQUENCY_HZ, MAX_SYNC_BITS, MIN_BT
from iqdemod.errors import quote

EXIT_OK, EXIT_FAILED, EXIT_USAGE = 0, 1, 2


class Finite(click.FloatRange):
    """A FloatRange that also refuses NaN (which compares false with both bounds and so slips through)."""

    name = "float"

    def _describe_range(self) -> str:
        lo = "" if self.min is None or self.min <= -sys.float_info.max else f"{self.min:g}{'<' if self.min_open else '<='}"
        hi = "" if self.max is None or self.max >= sys.float_info.max else f"{'<' if self.max_open else '<='}{self.max:g}"
        return f"{lo}x{hi}" if lo or hi else "finite"

    def convert(self, value, param, ctx):
        number = click.FLOAT.convert(value, param, ctx)
        if not math.isfinite(number):  # before the range: "inf is not in the range finite" says nothing
            self.fail(f"{quote(value)} is not a finite number.", param, ctx)
        return super().convert(number, param, ctx)


def finite(lo: float | None = None, hi: float | None = None, **kw) -> Finite:
    """A finite float within [lo, hi] (click shows the range in the help)."""
    return Finite(-sys.float_info.max if lo is None else lo, sys.float_info.max if hi is None else hi, **kw)


def _spec(*decls: str, **attrs: Any) -> tuple[tuple[str, ...], dict[str, Any]]:
    """One option's click declaration, kept as data so that a command may leave it out or reword it."""
    return decls, attrs


# The link options in the order --help lists them. A flag's value is checked by the library (one
# line naming the flag, status 2) where click's own types do not already check it (--rate: > 0).
_LINK_SPECS = [
    _spec("--datatype", help="SigMF datatype of a raw capture: cu8, ci8, ci16_le, ci16_be, cf32_le, cf64_le, …"),
    _spec("--rate", type=finite(), help=f"Sample rate of a raw capture, Hz (> 0, at most {MAX_SAMPLE_RATE_HZ:g})."),
    _spec("--offset", type=finite(-MAX_FREQUENCY_HZ, MAX_FREQUENCY_HZ),
          help="Signal centre relative to the capture centre, Hz (+ = above)."),
    _spec("--frequency", type=finite(0, MAX_FREQUENCY_HZ, min_open=True),
          help="Absolute signal centre, Hz (needs the capture's centre frequency)."),
    _spec("--baud", type=finite(0, MAX_FREQUENCY_HZ, min_open=True), help="Symbol rate, symbols/s."),
    _spec("--shift", type=finite(0, MAX_FREQUENCY_HZ, min_open=True),
          help="Tone shift: upper tone minus lower tone, Hz."),
    _spec("--invert/--no-invert", default=None, help="Bit 1 is the lower tone (default: the upper tone)."),
    _spec("--max-freq-error", type=finite(0, MAX_FREQUENCY_HZ),
          help="Largest carrier error searched for, Hz [default: shift/2]."),
    _spec("--gaussian", type=finite(MIN_BT, MAX_BT), metavar="BT",
          help=f"Gaussian frequency pulse (GFSK) with this bandwidth-time product, {MIN_BT:g}–{MAX_BT:g} "
               "[default: rectangular]."),
    _spec("--detector", type=click.Choice(["per-symbol", "multi-symbol"]),
          help="Symbol decisions: one-symbol correlators, or phase-continuous hypotheses over a window "
               "[default: multi-symbol for a Gaussian pulse or a non-integer h]."),
    _spec("--detector-symbols", type=click.IntRange(3, 7), default=None,
          help="Window of the multi-symbol detector, symbols: 3, 5 or 7 [default: 5]."),
    _spec("--sync", help="Sync word in hex, e.g. 0x9B3C57E1; 'none' for raw mode (bits per burst) "
                         "[default: none, raw mode]."),
    _spec("--sync-bits", type=click.IntRange(1, MAX_SYNC_BITS), help="Bits of the sync word that are sent [default: 32]."),
    _spec("--sync-tolerance", type=click.IntRange(0, MAX_SYNC_BITS - 1),
          help="Bit errors accepted in the sync word [default: 3 for a 32-bit word; fewer for a short "
               "one, so that random bits pass for it at under 1 position in 1000: 1 for 16 bits]."),
    _spec("--length", help="Payload bytes (1–4096), or prefix8: the first byte is the length [default: 24]."),
    _spec("--crc", help="CRC catalogue name, e.g. CRC-16/IBM-3740, or none [default: CRC-16/IBM-3740]."),
    _spec("--coding", type=click.Choice(["nrz", "manchester", "manchester-inverted"], case_sensitive=False),
          help="Line coding after the preamble; with Manchester --baud is the chip rate [default: nrz]."),
    _spec("--whitening", type=click.Choice(["none", "pn9"], case_sensitive=False),
          help="Whitening XORed over everything after the sync word [default: none]."),
    _spec("--bit-order", type=click.Choice(["msb", "lsb"], case_sensitive=False),
          help="Bit order of the bytes after the sync word [default: msb]."),
    _spec("--crc-order", type=click.Choice(["big", "little"], case_sensitive=False),
          help="Byte order of the CRC on the air [default: big]."),
    _spec("--length-counts", type=click.Choice(["payload", "payload+crc", "frame"], case_sensitive=False),
          help="What a prefix8 length byte counts; frame = length byte, payload and CRC [default: payload]."),
    _spec("--length-offset", type=click.IntRange(-255, 255),
          help="Added to the counted bytes in a prefix8 length byte [default: 0]."),
]
_LINK_OPTION = _spec("--link", "link", type=click.Path(dir_okay=False, path_type=Path),
                     help="TOML link profile; the flags below override its values.")


def _option(spec: tuple[tuple[str, ...], dict[str, Any]], help_text: str | None = None) -> Callable:
    decls, attrs = spec
    return click.option(*decls, **({**attrs, "help": help_text} if help_text else attrs))


def _flag_of(spec: tuple[tuple[str, ...], dict[str, Any]]) -> str:
    return spec[0][0].split("/")[0]  # "--invert/--no-invert" is --invert


def _named(name: str) -> tuple[tuple[str, ...], dict[str, Any]]:
    return next(sp for sp in _LINK_SPECS if _flag_of(sp) == "--" + name.replace("_", "-"))


#: The two options of a raw capture's format, for a command that takes a capture but no link (survey).
DATATYPE_OPTION = _option(_named("datatype"))
RATE_OPTION = _option(_named("rate"))


def link_options(fn: Callable | None = None, *, several: bool = False,
                 several_do: str = "decode several links in one pass: frames then carry their link's name",
                 omit: Iterable[str] = (), helps: dict[str, str] | None = None) -> Callable:
    """Add the link-description options to a command.

    With `several`, ``--link`` may be given more than once (each profile one
    link, or one per ``[[signal]]`` entry), for a command that decodes several
    links in one pass; read them with :func:`links_from_options`. Its help then
    ends with `several_do`, what the command does with several. `omit` names
    flags the command has no use for (by their override names, e.g.
    ``"max_freq_error"``), which it then does not offer; `helps` rewords a
    flag's help for the command.
    """
    left_out = {"--" + name.replace("_", "-") for name in omit}
    helps = {"--" + k.replace("_", "-"): v for k, v in (helps or {}).items()}

    def add(fn: Callable) -> Callable:
        for spec in reversed(_LINK_SPECS):
            if _flag_of(spec) not in left_out:
                fn = _option(spec, helps.get(_flag_of(spec)))(fn)
        if several:
            decls, attrs = _LINK_OPTION
            return _option((decls, {**attrs, "multiple": True}),
                           f"{attrs['help']} Give it again (or use a profile with several [[signal]] entries) to "
                           f"{several_do}.")(fn)
        return _option(_LINK_OPTION)(fn)

    return add if fn is None else add(fn)


def link_overrides(kw: dict[str, Any]) -> dict[str, Any]:
    """The override flags' values (None where not given), read from `kw` without taking them out."""
    return {name: kw.get(name) for name in iqdemod.profile.OVERRIDES}


def link_from_options(kw: dict[str, Any]) -> iqdemod.Link:
    """Build the link from --link and the override flags; pops them from `kw`."""
    path, overrides = _pop_link_options(kw)
    return iqdemod.load_link(path, **overrides)


def _pop_link_options(kw: dict[str, Any]) -> tuple[Any, dict[str, Any]]:
    """Take ``--link`` and the override flags out of `kw`: (the --link value, the overrides)."""
    overrides = link_overrides(kw)
    for name in overrides:
        kw.pop(name, None)
    return kw.pop("link", None), overrides


def links_from_options(kw: dict[str, Any], *, optional: bool = False
                       ) -> tuple[iqdemod.Link | dict[str, iqdemod.Link] | None, list[Path]]:
    """The link(s) of a command with several ``--link`` (see :func:`link_options`); pops the options from `kw`.

    One profile with one signal (or none, flags alone) gives a plain Link, as
    :func:`link_from_options` does; several give a dict of named links. Also
    returns the profile paths (inputs that no output may replace). With
    `optional`, a command line that names no link at all (no --link, and
    neither --baud nor --shift, which every link needs) gives None, for a
    command that can find links elsewhere (batch: a folder's link.toml).
    """
    given, overrides = _pop_link_options(kw)
    paths = list(given or ())
    if not paths:  # flags alone
        if optional and overrides["baud"] is None and overrides["shift"] is None:
            return None, paths
        return iqdemod.load_link(None, **overrides), paths
    links = iqdemod.load_links(paths, **overrides)
    return (next(iter(links.values())) if len(links) == 1 else links), paths


def link_profiles(links: iqdemod.Link | dict[str, iqdemod.Link] | None, paths: list[Path]) -> str | dict[str, str]:
    """Which ``--link`` profile each link of :func:`links_from_options` came from: one path for a single
    link ("" for flags alone), else a dict by link name."""
    if not isinstance(links, dict):
        return str(paths[0]) if paths else ""
    return {name: str(p) for p in paths for name in iqdemod.profile.link_names(p)}


def say(message: str) -> None:
    """A line for people, on stderr (stdout is for results)."""
    click.echo(message, err=True)


def warn(message: str) -> None:
    """A warning line for people, on stderr."""
    click.echo(f"warning: {message}", err=True)


def guard_outputs(outputs: Iterable[tuple[str, Path | None]], *, captures: Iterable[Path] = (),
                  link: Path | Iterable[Path] | None = None) -> None:
    """Refuse, before any work, an output that is an input (a capture's files, the profiles) or another output."""
    profiles = [link] if link is None or isinstance(link, (str, Path)) else list(link)
    inputs: list[tuple[str, Any]] = [("--link profile", p) for p in profiles]
    for c in captures:
        inputs += [("capture", f) for f in capture_files(c)]
    check_distinct(list(outputs), inputs)


@contextlib.contextmanager
def open_output(path: Path | None, *, mode: str = "w") -> Iterator[TextIO]:
    """stdout, or `path` written atomically (the old file stays if anything fails; a FIFO or device is written into)."""
    with atomic_writer("-" if path is None else path, mode) as fh:
        yield fh
