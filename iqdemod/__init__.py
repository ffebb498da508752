"""iqdemod: find, demodulate and check binary-FSK telemetry bursts in IQ recordings.

No radio framework needed. The handful of names a script needs::

    import iqdemod
    link = iqdemod.load_link("buoys.toml")
    for frame in iqdemod.decode("capture.sigmf-meta", link):
        print(frame.t_s, frame.payload.hex(), frame.crc_ok)
    report = iqdemod.assess("capture.sigmf-meta", link)
    print(report.ebn0_db, report.margin_db)
"""

import importlib

from .errors import CaptureError, IqdemodError, LinkError

__version__ = "0.1.0"

# Each public name is imported from its module when first used, so that `import iqdemod` (and a
# command's --help) does not pay for scipy before any work needs it.
_HOMES = {
    "open_capture": "capture", "Capture": "capture", "CaptureInfo": "capture",
    "load_link": "profile", "load_links": "profile", "Link": "link", "SignalSpec": "link", "FrameSpec": "link",
    "decode": "receiver", "iter_bursts": "receiver", "Burst": "receiver", "Frame": "receiver",
    "assess": "health", "assess_with_frames": "health", "assess_links": "health", "HealthReport": "health", "Decoding": "receiver",
    "DecodeSummary": "receiver",
}


def __getattr__(name: str):
    home = _HOMES.get(name)
    if home is not None:
        value = getattr(importlib.import_module(f".{home}", __name__), name)
    elif not name.startswith("__"):
        try:  # a submodule, e.g. iqdemod.predict or iqdemod.survey
            value = importlib.import_module(f".{name}", __name__)
        except ModuleNotFoundError:
            raise AttributeError(f"module 'iqdemod' has no attribute {name!r}") from None
    else:
        raise AttributeError(f"module 'iqdemod' has no attribute {name!r}")
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))


__all__ = [
    "open_capture",
    "Capture",
    "CaptureInfo",
    "load_link",
    "load_links",
    "Link",
    "SignalSpec",
    "FrameSpec",
    "decode",
    "iter_bursts",
    "Burst",
    "Frame",
    "assess",
    "assess_with_frames",
    "assess_links",
    "Decoding",
    "DecodeSummary",
    "HealthReport",
    "predict",
    "survey",
    "IqdemodError",
    "CaptureError",
    "LinkError",
    "__version__",
]

