"""The ``simwave`` command group and the one place user errors become exit code 2.

The group loads each command's module only when that command runs or shows its
own help: ``simwave --help`` needs only the one-paragraph summaries below, so it
starts without numpy or scipy. ``tests/test_cli_startup.py`` checks that every
summary here is the first paragraph of its command's docstring.
"""

from __future__ import annotations

import importlib
import signal
import sys
import threading
import warnings

import click

from simwave import __version__
from simwave.errors import SimwaveError

#: Exit code for bad input (same as click's usage errors).
EXIT_BAD_INPUT = 2

#: Command name -> (module that registers it on :data:`main`, first paragraph of its help).
COMMANDS: dict[str, tuple[str, str]] = {
    "batch": ("simwave.cli.cmd_batch",
              "Run every input through every candidate system; write outputs, metrics and a "
              "summary."),
    "demo": ("simwave.cli.cmd_demo",
             "Build a worked example end to end in DIR (default ./simwave-demo)."),
    "gen": ("simwave.cli.cmd_gen",
            "Write a generated test signal: KIND with --rate, --duration and -p NAME=VALUE, or "
            "one signal text such as pulse:rate=10k,duration=0.5,width=1m,delay=10m."),
    "info": ("simwave.cli.cmd_info",
             "Describe FILE (audio, CSV or HDF5, or a signal text): rate, duration, channels "
             "with names and units, sample format, and min, max, mean and RMS per channel."),
    "inspect": ("simwave.cli.cmd_inspect",
                "Show what a system H(s) is: poles, zeros, gains, stability, modes, bandwidth."),
    "measure": ("simwave.cli.cmd_measure",
                "Measure FILE: transitions (rise/fall time, overshoot, undershoot, preshoot, "
                "peak, settling; per pulse for pulse trains), steady state (final value, gain, "
                "error, mean, RMS, ripple), sine and multi-tone gain and phase, THD and SINAD; "
                "and, with a system, what H(s) predicts beside each."),
    "report": ("simwave.cli.cmd_report",
               "Write one HTML page for the batch or tolerance study in DIR: comparison, all "
               "rows, each pair."),
    "run": ("simwave.cli.cmd_run", "Run INPUT through the system and write the output."),
    "tolerance": ("simwave.cli.cmd_tolerance",
                  "Run a tolerance study: every build of a toleranced design on your inputs."),
}

#: Signals that stop a command the way Ctrl-C (SIGINT) does: temporary files removed,
#: batch workers ended, nothing left under an output name.
STOP_SIGNALS = ("SIGTERM", "SIGHUP")


class Stopped(KeyboardInterrupt):
    """Raised in the main thread by SIGTERM or SIGHUP; handled wherever Ctrl-C is."""

    def __init__(self, signum: int) -> None:
        super().__init__(signum)
        self.signum = signum


def _raise_stopped(signum: int, frame) -> None:
    raise Stopped(signum)


def handle_stop_signals() -> dict[int, object]:
    """Make SIGTERM and SIGHUP raise :class:`Stopped` (a KeyboardInterrupt) in this process.

    Every clean-up path written for Ctrl-C (atomic writers deleting their temporary
    files, batch stopping its workers) then serves these signals too. A signal that
    was ignored when the process started (``nohup``) stays ignored. Returns the
    handlers replaced (for :func:`restore_signals`).
    """
    previous: dict[int, object] = {}
    if threading.current_thread() is not threading.main_thread():
        return previous
    for name in STOP_SIGNALS:
        sig = getattr(signal, name, None)
        if sig is not None and signal.getsignal(sig) is not signal.SIG_IGN:
            previous[sig] = signal.signal(sig, _raise_stopped)
    return previous


def restore_signals(previous: dict[int, object]) -> None:
    """Put back the handlers :func:`handle_stop_signals` replaced (commands run in-process)."""
    for sig, handler in previous.items():
        signal.signal(sig, handler if handler is not None else signal.SIG_DFL)


def stopped_exit_code(exc: KeyboardInterrupt) -> int:
    """128 + the signal number (the shell's convention): 130 for Ctrl-C, 143 for SIGTERM."""
    return 128 + getattr(exc, "signum", signal.SIGINT)


def sweep_output_folders(paths) -> None:
    """Remove stale temporary files of killed runs from the folders of ``paths`` (a note)."""
    import os

    from simwave.signals.atomic import sweep_note, sweep_stale_parts

    folders = {os.path.dirname(os.path.abspath(p)) for p in paths if p is not None}
    note = sweep_note(sweep_stale_parts(folders))
    if note:
        click.echo(note, err=True)


class SimwaveGroup(click.Group):
    """A click group that imports its commands lazily and prints a SimwaveError as one
    line with exit code 2."""

    def list_commands(self, ctx: click.Context) -> list[str]:
        return sorted(set(COMMANDS) | set(self.commands))

    def get_command(self, ctx: click.Context, cmd_name: str) -> click.Command | None:
        if cmd_name not in self.commands and cmd_name in COMMANDS:
            importlib.import_module(COMMANDS[cmd_name][0])  # registers itself on main
        return self.commands.get(cmd_name)

    def format_commands(self, ctx: click.Context, formatter: click.HelpFormatter) -> None:
        # The group's help lists the summaries without importing any command module:
        # stand-in commands carry the same first paragraph, so click shortens it the same way.
        stand_ins = {
            name: self.commands.get(name) or click.Command(name, help=COMMANDS[name][1])
            for name in self.list_commands(ctx)
        }
        saved, self.commands = self.commands, stand_ins
        try:
            super().format_commands(ctx, formatter)
        finally:
            self.commands = saved

    def invoke(self, ctx: click.Context):
        previous = handle_stop_signals()
        try:
            return super().invoke(ctx)
        except SimwaveError as exc:
            click.echo(f"Error: {exc}", err=True)
            sys.exit(EXIT_BAD_INPUT)
        except KeyboardInterrupt as exc:
            from simwave.signals.atomic import remove_live_temporaries

            remove_live_temporaries()  # any the interrupted code could not reach
            name = signal.Signals(getattr(exc, "signum", signal.SIGINT)).name
            click.echo("Interrupted." if name == "SIGINT" else f"Stopped ({name}).", err=True)
            sys.exit(stopped_exit_code(exc))
        finally:
            restore_signals(previous)


@click.group(cls=SimwaveGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="simwave")
def main() -> None:
    """simwave: run your signals through a proposed analog system H(s) and measure the result.

    Simulation results are a design aid, not verification of built hardware.
    For medical, protection or other safety-related signal chains, follow the
    applicable standards and licensed engineering practice.
    """
    warnings.showwarning = _show_warning


def _show_warning(message, category, filename, lineno, file=None, line=None) -> None:
    """Warnings that reach the terminal: one line, ``Warning: ...``, no source line."""
    click.echo(f"Warning: {message}", err=True)

