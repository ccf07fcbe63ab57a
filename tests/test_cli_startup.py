"""Start-up: the help screens and ``import simwave`` load neither numpy nor scipy.

The time targets are checked by ``benchmarks/bench_startup.py`` (side-by-side
ratios in one run); these tests check the mechanism that makes them possible:
which modules a fresh interpreter has loaded after each help screen.
"""

import inspect
import json
import os
import subprocess
import sys

import click
import pytest

import simwave
from simwave.cli import main
from simwave.cli.app import COMMANDS

_PROBE = """
import json, sys, runpy
sys.argv = ["simwave"] + json.loads(sys.argv[1])
try:
    runpy.run_module("simwave", run_name="__main__")
except SystemExit:
    pass
heavy = sorted(m for m in ("numpy", "scipy", "scipy.signal", "h5py", "soundfile", "matplotlib")
               if m in sys.modules)
sys.stderr.write("LOADED " + json.dumps(heavy) + "\\n")
"""


def _loaded_after(args: list[str]) -> tuple[list[str], str]:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(
        [os.path.dirname(os.path.dirname(simwave.__file__)), env.get("PYTHONPATH", "")])
    done = subprocess.run([sys.executable, "-c", _PROBE, json.dumps(args)], env=env,
                          capture_output=True, text=True, timeout=120, check=True)
    line = [x for x in done.stderr.splitlines() if x.startswith("LOADED ")][-1]
    return json.loads(line[len("LOADED "):]), done.stdout


@pytest.mark.parametrize("command", [[]] + [[name] for name in sorted(COMMANDS)])
def test_help_screens_load_no_numerical_library(command):
    loaded, shown = _loaded_after(command + ["--help"])
    assert "Usage:" in shown
    assert loaded == []


def test_import_simwave_is_lazy_and_complete():
    probe = ("import sys, simwave; before = 'numpy' in sys.modules; "
             "names = [getattr(simwave, n) for n in simwave.__all__]; "
             "print(before, 'numpy' in sys.modules, callable(simwave.measure), "
             "callable(simwave.generate))")
    done = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True,
                          timeout=120, check=True,
                          env={**os.environ, "PYTHONPATH": os.path.dirname(
                              os.path.dirname(simwave.__file__))})
    assert done.stdout.split() == ["False", "True", "True", "True"]


def test_group_summaries_are_each_commands_first_paragraph():
    # The group lists COMMANDS' summaries without importing the commands; they must
    # say what the commands' own docstrings say.
    ctx = click.Context(main)
    for name, (_, summary) in COMMANDS.items():
        command = main.get_command(ctx, name)
        first = inspect.cleandoc(command.help).split("\n\n")[0]
        assert " ".join(first.split()) == summary, name


def test_submodule_import_keeps_public_functions():
    import simwave.measure.kinds  # noqa: F401 - names the package on its parent
    import simwave.signals.generate  # noqa: F401

    assert callable(simwave.measure) and callable(simwave.signals.generate)
    assert simwave.signals.generate is simwave.generate
