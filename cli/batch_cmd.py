"""Deprecated (issue 11): the command now lives in :mod:`iqdemod_cli.commands.batch`.

Kept only for the tests that still import this module for the group
(``tests/test_batch.py``, ``tests/test_survey.py``); remove it when they
import :mod:`iqdemod_cli.main` instead. Not a command module: the group never
imports it, so it may import the group without a circle.
"""

from .commands.batch import command as batch  # noqa: F401
from .main import main  # noqa: F401

__all__ = ["main", "batch"]
