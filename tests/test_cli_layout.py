"""The command line's layout (issue 11): lazy commands, no import circle, a fast root help."""

import ast
import importlib
import pkgutil
import subprocess
import sys
from pathlib import Path

import click
import pytest
from click.testing import CliRunner

import iqdemod_cli
import iqdemod_cli.commands
from iqdemod_cli import _signals
from iqdemod_cli.commands import COMMANDS
from iqdemod_cli.main import main

CLI_DIR = Path(iqdemod_cli.__file__).parent
MODULES = sorted(m.name for m in pkgutil.iter_modules(iqdemod_cli.commands.__path__))


def test_every_command_module_is_in_the_table_and_back():
    assert MODULES == sorted(COMMANDS)
    assert main.list_commands(click.Context(main)) == sorted(COMMANDS)


@pytest.mark.parametrize("name", sorted(COMMANDS))
def test_the_listing_says_what_the_command_itself_says(name):
    command = importlib.import_module(f"iqdemod_cli.commands.{name}").command
    assert isinstance(command, click.Command) and command.name == name
    first = command.help.split("\n\n")[0].replace("\n", " ")
    assert first == COMMANDS[name]
    stand_in = click.Command(name, help=COMMANDS[name])
    for limit in (30, 45, 60, 200):
        assert stand_in.get_short_help_str(limit) == command.get_short_help_str(limit)


@pytest.mark.parametrize("name", sorted(COMMANDS))
def test_a_command_module_never_imports_the_group(name):
    tree = ast.parse((CLI_DIR / "commands" / f"{name}.py").read_text())
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            target = "." * node.level + (node.module or "")
            assert target not in ("..main", "iqdemod_cli.main") and not target.startswith("..main."), target
            assert not (node.level == 2 and node.module is None and any(a.name == "main" for a in node.names))
        elif isinstance(node, ast.Import):
            assert all(a.name != "iqdemod_cli.main" for a in node.names)


@pytest.mark.parametrize("module", ["iqdemod_cli", "iqdemod_cli.main"])
def test_python_dash_m_lists_every_command(module):
    out = subprocess.run([sys.executable, "-m", module, "--help"], capture_output=True, text=True, check=True)
    for name in COMMANDS:
        assert f"  {name} " in out.stdout, out.stdout


@pytest.mark.parametrize("args", [["--help"], ["--version"]])
def test_root_help_and_version_load_no_numerics(args):
    """What makes `iqdemod --help` fast (timed in benchmarks/cli_startup.py, not here): nothing heavy imported."""
    code = ("import sys\nfrom iqdemod_cli.main import main\n"
            f"try:\n    main({args!r}, prog_name='iqdemod')\nexcept SystemExit:\n    pass\n"
            "heavy = sorted(m for m in ('numpy', 'scipy', 'iqdemod.estimate', 'iqdemod.predict', 'iqdemod.capture',\n"
            "                           'iqdemod_cli.commands.decode') if m in sys.modules)\n"
            "print('HEAVY', heavy)\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert "HEAVY []" in out, out


@pytest.mark.parametrize("name", sorted(COMMANDS))
def test_each_command_help_is_complete(name):
    command = importlib.import_module(f"iqdemod_cli.commands.{name}").command
    res = CliRunner().invoke(main, [name, "--help"], terminal_width=200)
    assert res.exit_code == 0
    words = " ".join(command.help.split())
    text = " ".join(res.output.split())
    assert words[:200] in text  # the whole first part of the docstring, not only its summary
    for param in command.params:
        if isinstance(param, click.Option):
            assert param.help, f"{name} {param.opts} has no help"
            assert param.opts[0] in res.output


def test_one_terminated_class_and_batch_uses_it():
    batch = importlib.import_module("iqdemod_cli.commands.batch")
    assert batch.Terminated is _signals.Terminated and issubclass(_signals.Terminated, KeyboardInterrupt)
    sources = [p.read_text() for p in CLI_DIR.rglob("*.py")]
    assert sum(s.count("class Terminated") + s.count("class _Terminated") for s in sources) == 1


def test_batch_builds_its_link_with_the_shared_helper():
    source = (CLI_DIR / "commands" / "batch.py").read_text()
    assert "links_from_options(link_kw, optional=True)" in source and "load_link" not in source


def test_one_json_sanitiser():
    sources = {p.name: p.read_text() for p in CLI_DIR.rglob("*.py")}
    assert [n for n, s in sources.items() if "def json_ready" in s or "def _json" in s] == ["render.py"]
