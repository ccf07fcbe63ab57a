"""The ``simwave`` command group and the one place user errors become exit code 2."""

from __future__ import annotations

import sys

import click

from simwave import __version__
from simwave.errors import SimwaveError

#: Exit code for bad input (same as click's usage errors).
EXIT_BAD_INPUT = 2


class SimwaveGroup(click.Group):
    """A click group that prints a SimwaveError as one line and exits with code 2."""

    def invoke(self, ctx: click.Context):
        try:
            return super().invoke(ctx)
        except SimwaveError as exc:
            click.echo(f"Error: {exc}", err=True)
            sys.exit(EXIT_BAD_INPUT)
        except KeyboardInterrupt:
            click.echo("Interrupted.", err=True)
            sys.exit(130)


@click.group(cls=SimwaveGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="simwave")
def main() -> None:
    """simwave: run your signals through a proposed analog system H(s) and measure the result.

    Simulation results are a design aid, not verification of built hardware.
    For medical, protection or other safety-related signal chains, follow the
    applicable standards and licensed engineering practice.
    """
