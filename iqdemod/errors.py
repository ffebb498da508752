"""The package's exceptions: one base class and one class per kind of bad input.

Every message names the offending value and what was expected, so that the
command line can print it on one line, e.g. ``sample rate -250000 Hz: must be > 0``.
A value the user gave is quoted with :func:`quote`, at most 80 characters of it.
"""

from __future__ import annotations

__all__ = ["IqdemodError", "CaptureError", "LinkError", "FlagError", "EstimateError", "OutputError", "IqdemodWarning",
           "quote", "QUOTE_CHARS"]

QUOTE_CHARS = 80


class IqdemodError(Exception):
    """Base class of every error iqdemod raises on purpose."""


class CaptureError(IqdemodError):
    """A capture file is missing, unreadable, or not what its metadata says."""


class LinkError(IqdemodError, ValueError):
    """A link description (profile or flags) has a bad, missing or unknown value."""


class FlagError(LinkError):
    """A link value given as a flag (a keyword of :func:`iqdemod.load_link`) is wrong on its own.

    The message begins with the flag (``--rate: sample rate -5 Hz: must be > 0``), and
    :attr:`flag` holds it, so that the command line can report it as a usage error of that
    flag; a wrong value in a profile stays a plain :class:`LinkError` naming the profile.
    """

    def __init__(self, flag: str, message: str):
        super().__init__(f"{flag}: {message}")
        self.flag = flag
        self.detail = message

    def __reduce__(self):  # picklable (batch workers hand errors back)
        return type(self), (self.flag, self.detail)


class EstimateError(IqdemodError, ValueError):
    """A statistics or theory routine got numbers it cannot work with.

    An Eb/N0 below zero, a probability outside [0, 1], more errors than
    trials, estimates of different methods to pool, no noise to measure, or a
    target BER below a link's error floor (:mod:`iqdemod.estimate`,
    :mod:`iqdemod.predict`). A bad *link* parameter given to them (tone
    spacing, pulse, samples per symbol) stays a :class:`LinkError`.
    """


class OutputError(IqdemodError):
    """An output cannot be written safely: it is an input, another output, a folder, or its folder is missing."""


class IqdemodWarning(UserWarning):
    """Something was skipped or repaired on the way (a torn journal line, a FIFO in an archive)."""


def quote(value: object, limit: int = QUOTE_CHARS) -> str:
    """``repr`` of a user's value, cut to `limit` characters and marked so.

    Examples
    --------
    Error messages quote the value the user gave, e.g. a buoy's name:

    >>> quote("buoy-7")
    "'buoy-7'"
    >>> quote("x" * 1000, limit=10)
    "'xxxxxxxx… (1000 characters)"
    """
    if isinstance(value, str):
        text = repr(value[: limit + 1])  # repr of a 10 MB string would copy it whole
        size = f"{len(value)} characters"
    else:
        try:
            text = repr(value)
        except ValueError:  # an integer too long to print (sys.get_int_max_str_digits)
            return f"an integer of about {int(value.bit_length() * 0.30103)} digits"
        size = f"{len(text)} digits" if isinstance(value, int) else f"{len(text)} characters"
    if len(text) <= limit:
        return text
    return f"{text[: limit - 1]}… ({size})"
