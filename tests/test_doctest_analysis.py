"""The Examples sections of the analysis modules run, and every public function has one (issue 11).

The values in them are true outputs, and where a published value exists they
quote it (REFERENCE.md §1, §2, §4 figures, named beside each example).
"""

import doctest
import inspect

import pytest

import iqdemod.binomial
import iqdemod.estimate
import iqdemod.estimate_bounds
import iqdemod.estimate_methods
import iqdemod.estimate_pooling
import iqdemod.estimate_result
import iqdemod.health
import iqdemod.health_accumulator
import iqdemod.health_prediction
import iqdemod.predict
import iqdemod.predict_args
import iqdemod.predict_bank
import iqdemod.predict_closed_form
import iqdemod.predict_curves
import iqdemod.predict_inverse

MODULES = [iqdemod.predict, iqdemod.predict_args, iqdemod.predict_closed_form, iqdemod.predict_bank,
           iqdemod.predict_inverse, iqdemod.predict_curves, iqdemod.binomial, iqdemod.estimate, iqdemod.estimate_result,
           iqdemod.estimate_methods, iqdemod.estimate_pooling, iqdemod.estimate_bounds, iqdemod.health,
           iqdemod.health_accumulator, iqdemod.health_prediction]


@pytest.mark.parametrize("module", MODULES, ids=lambda m: m.__name__)
def test_examples_run(module):
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS)
    assert result.attempted > 0 and result.failed == 0, result


# Classes whose methods do work (beyond holding results) are held to the same rule as functions.
WORKING_CLASSES = {iqdemod.health_accumulator: ["HealthAccumulator"], iqdemod.estimate_result: ["EbN0Estimate"]}


def _public_functions(module):
    for name in module.__all__:
        obj = getattr(module, name)
        if inspect.isfunction(obj) and obj.__module__ == module.__name__ and obj.__name__ == name:
            yield name, obj
    for name in WORKING_CLASSES.get(module, []):
        yield name, getattr(module, name)  # a class: its docstring carries the Examples of its methods


@pytest.mark.parametrize("module", MODULES, ids=lambda m: m.__name__)
def test_every_public_function_has_examples(module):
    missing = [name for name, obj in _public_functions(module)
               if "Examples\n" not in inspect.getdoc(obj) and "Examples\n" not in (obj.__doc__ or "")]
    assert not missing, f"{module.__name__}: no Examples section in {missing}"
