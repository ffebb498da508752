"""The package's exceptions: one base class and one class per kind of bad input.

Every message names the offending value and what was expected, so that the
command line can print it on one line, e.g. ``sample rate -250000 Hz: must be > 0``.
"""

from __future__ import annotations

__all__ = ["IqdemodError", "CaptureError", "LinkError"]


class IqdemodError(Exception):
    """Base class of every error iqdemod raises on purpose."""


class CaptureError(IqdemodError):
    """A capture file is missing, unreadable, or not what its metadata says."""


class LinkError(IqdemodError, ValueError):
    """A link description (profile or flags) has a bad, missing or unknown value."""
