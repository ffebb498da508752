"""iqdemod: find, demodulate and check binary-FSK telemetry bursts in IQ recordings.

No radio framework needed. The handful of names a script needs::

    import iqdemod
    link = iqdemod.load_link("buoys.toml")
    for frame in iqdemod.decode("capture.sigmf-meta", link):
        print(frame.t_s, frame.payload.hex(), frame.crc_ok)
    report = iqdemod.assess("capture.sigmf-meta", link)
    print(report.ebn0_db, report.margin_db)
"""

from . import predict
from .capture import Capture, CaptureInfo, open_capture
from .errors import CaptureError, IqdemodError, LinkError
from .link import FrameSpec, Link, SignalSpec, load_link
from .receiver import Burst, Frame, decode, iter_bursts
from .health import HealthReport, assess
from . import survey  # the module; its main function is survey.survey(capture)

__version__ = "0.1.0"

__all__ = [
    "open_capture",
    "Capture",
    "CaptureInfo",
    "load_link",
    "Link",
    "SignalSpec",
    "FrameSpec",
    "decode",
    "iter_bursts",
    "Burst",
    "Frame",
    "assess",
    "HealthReport",
    "predict",
    "survey",
    "IqdemodError",
    "CaptureError",
    "LinkError",
    "__version__",
]
