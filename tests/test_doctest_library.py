"""The Examples sections of the rest of the library run as written (doctest), and every public function of
every library module has one (issue 11).

The analysis modules' examples run in test_doctest_analysis.py, the numeric helpers' and part of the
survey's in test_doctest_survey.py, the batch package's and the capture reader's in test_batch_report.py;
this file runs every other module, found by walking the package, so a new module is covered from the start.

Where an example quotes a published value it names the source in its prose: the CRC catalogue's check
values, cross-checked there with the standard library's binascii and zlib (crc.py); REFERENCE.md §8
(Eb/N0 of a sampled capture, synth.py and the survey's level) and §9 (Manchester chips, a CRC sent low
byte first: coding.py, framing.py); the SigMF spec, REFERENCE.md §6 (formats.py, capture.py, synth.py).
"""

from __future__ import annotations

import doctest
import importlib
import inspect
import pkgutil

import pytest

import iqdemod
import test_doctest_analysis
import test_doctest_survey

# Modules whose examples another test file runs (their lists are taken from them where they name one).
RUN_ELSEWHERE = (
    {m.__name__ for m in test_doctest_analysis.MODULES}
    | set(test_doctest_survey.MODULES)
    # test_batch_report.py, test_examples_run: parametrised over these
    | {f"iqdemod.batch.{name}" for name in
       ("collect", "executors", "journal", "report", "run", "transmitters", "trend", "worker")}
    | {"iqdemod.capture"}
)

LIBRARY = sorted(info.name for info in pkgutil.walk_packages(iqdemod.__path__, "iqdemod."))
HERE = [name for name in LIBRARY if name not in RUN_ELSEWHERE]


def test_the_module_lists_are_what_they_say():
    # a typing slip in a list above would leave a module run nowhere, silently
    assert RUN_ELSEWHERE <= set(LIBRARY), sorted(RUN_ELSEWHERE - set(LIBRARY))
    for name in ("iqdemod.crc", "iqdemod.receiver", "iqdemod.channel", "iqdemod.survey.pipeline"):
        assert name in HERE


@pytest.mark.parametrize("name", HERE)
def test_examples_run(name):
    module = importlib.import_module(name)
    runner = doctest.DocTestRunner(optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    for test in doctest.DocTestFinder().find(module):
        if test.examples:
            runner.run(test)
    result = runner.summarize(verbose=False)
    assert result.failed == 0, f"{result.failed} example(s) of {name} failed (see the output above)"
    if list(_public_functions(module)):
        assert result.attempted > 0, f"{name} has public functions but no example ran"


def _public_functions(module):
    """Functions defined in `module` and public: named in ``__all__``, or without a leading underscore
    where the module has no ``__all__``."""
    names = getattr(module, "__all__", None)
    if names is None:
        names = [n for n in vars(module) if not n.startswith("_")]
    for name in names:
        obj = getattr(module, name, None)
        if inspect.isfunction(obj) and obj.__module__ == module.__name__ and obj.__name__ == name:
            yield name, obj


@pytest.mark.parametrize("name", LIBRARY)
def test_every_public_function_has_examples(name):
    module = importlib.import_module(name)
    missing = [fname for fname, obj in _public_functions(module)
               if "Examples\n" not in (inspect.getdoc(obj) or "")]
    assert not missing, f"{name}: no Examples section in {missing}"
