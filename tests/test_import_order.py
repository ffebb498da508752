"""Every library module imports on its own, first, with nothing of the library loaded before it.

A circular import shows only when the modules of the circle are imported in one order; the
command line and the lazy ``iqdemod`` package may import any module first.
"""

import pkgutil
import subprocess
import sys

import iqdemod

SCRIPT = """
import importlib, sys
names = sys.argv[1:]
failed = []
for name in names:
    for loaded in [m for m in sys.modules if m == "iqdemod" or m.startswith("iqdemod.")]:
        del sys.modules[loaded]
    try:
        importlib.import_module(name)
    except Exception as exc:  # report every module that fails, not only the first
        failed.append(f"{name}: {type(exc).__name__}: {exc}")
print("\\n".join(failed))
"""


def test_each_module_imports_first():
    names = sorted(m.name for m in pkgutil.walk_packages(iqdemod.__path__, "iqdemod."))
    assert "iqdemod.profile" in names and "iqdemod.receiver" in names
    out = subprocess.run([sys.executable, "-c", SCRIPT, *names], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""
