"""One module per command; each defines ``command``, a :class:`click.Command`.

The group (:mod:`iqdemod_cli.main`) imports a command's module only when that
command runs. Its own help lists the commands from :data:`COMMANDS` instead of
importing all six modules (which would load numpy and the link description:
about 0.4 s on the project's machine, where ``iqdemod --help`` must take at
most 0.3 s). Each entry is the first sentence of that command's docstring;
``tests/test_cli_layout.py`` keeps the two the same.

A command module imports from ``_common``, ``_signals`` and ``render``, never
from ``main``.
"""

#: command name -> the first sentence of its help, in the order of the data's path
COMMANDS = {
    "survey": "Find the bursty FSK signals in a capture and measure them.",
    "decode": "Decode the frames in one or more captures and write them as JSON Lines.",
    "health": "Assess a link: Eb/N0, predicted and observed error rates, margin, transmitter health.",
    "batch": "Assess every capture of an archive and write one CSV row per capture and link.",
    "curves": "Tabulate BER and frame error rate against Eb/N0 for planning a link.",
    "synth": "Write a synthetic capture of FSK bursts in white noise (SigMF pair + truth JSON).",
}
