"""Surveying a capture: find the bursty FSK signals in it and say what they are.

Nothing about the signals needs to be known. The capture is read a few times,
always in blocks, and only short excerpts of a few bursts are ever kept. The
modules follow the data's path:

1. :mod:`~iqdemod.survey.spectrum` (one pass): an averaged periodogram (Welch
   1967) and peak-hold spectra of short averages; bins well above a noise
   baseline form candidate bands.
2. :mod:`~iqdemod.survey.activity` (one pass): each band tuned, decimated and
   watched by an energy detector with hysteresis; bands on at the same times
   are one signal (tuned again as a whole when that happens).
3. :mod:`~iqdemod.survey.modulation`: tones and symbol rate from the burst
   excerpts (discriminator, Otsu's threshold, the transition line); a rough
   Eb/N0 and level. :mod:`~iqdemod.survey.pulse`: rectangular or Gaussian
   pulse (and BT) from how fast the bursts' spectrum falls beyond Carson's
   bandwidth.
4. :mod:`~iqdemod.survey.layout` (part of one more pass): a few bursts
   demodulated by the project's receiver in raw mode; sync word, coding,
   whitening, length and CRC found by trying the catalogue.
5. :mod:`~iqdemod.survey.results`: :class:`SurveyResult` lists the signals
   strongest first; each :class:`SignalFound` turns into a
   :class:`~iqdemod.link.Link` (a link profile) that :func:`iqdemod.decode`
   accepts. :mod:`~iqdemod.survey.plot` draws the picture.

:func:`survey` (in :mod:`~iqdemod.survey.pipeline`) runs them in that order.

Limits: a signal must be on in bursts (a carrier that never stops is taken for
the noise floor) and leave at least a quarter of the band to noise; bursts
must be a few dozen symbols long; two transmitters keyed in step in bands far
apart are taken for one. The sync word guess can miss the word's first bits
when they continue the alternation, and then take in as many leading bits of
the frame if those are the same in every burst (a fixed header): only a CRC
match places the payload exactly.
"""

from __future__ import annotations

from .activity import ActivityBurst, ActivityPlan, ActivityState, activity_update, plan_activity
from .pipeline import survey
from .plot import plot_survey, require_plotting
from .pulse import PULSE_BTS, cpfsk_spectrum
from .results import BurstLengths, Excerpt, SignalFound, SurveyResult, sync_label
from .spectrum import SpectrumPlan, SpectrumState, plan_spectrum, spectrum_update

__all__ = [
    "BurstLengths",
    "Excerpt",
    "SignalFound",
    "SurveyResult",
    "SpectrumPlan",
    "SpectrumState",
    "plan_spectrum",
    "spectrum_update",
    "ActivityPlan",
    "ActivityState",
    "ActivityBurst",
    "plan_activity",
    "activity_update",
    "survey",
    "plot_survey",
    "require_plotting",
    "sync_label",
    "cpfsk_spectrum",
    "PULSE_BTS",
]
