"""``simwave demo``: the whole job on invented data, in one command."""

from __future__ import annotations

import click

from simwave.cli.app import main
from simwave.demo import DEFAULT_DIR, build_demo


@main.command("demo")
@click.argument("folder", metavar="[DIR]", default=DEFAULT_DIR)
@click.option("--force", is_flag=True,
              help="Write into DIR even if it is not empty (files of the same names are "
                   "replaced, others are left alone).")
@click.option("-j", "--jobs", type=click.IntRange(min=1), default=1, show_default=True,
              help="Worker processes for the batch (1 runs it in this process).")
def demo_command(folder: str, force: bool, jobs: int) -> None:
    """Build a worked example end to end in DIR (default ./simwave-demo).

    An invented conveyor weigh station: load-cell recordings with a tare offset,
    50 Hz hum and noise; two candidate smoothing filters (4th-order Bessel and
    Butterworth, 15 Hz); every recording run through every candidate, measured,
    plotted and compared. DIR must be new or empty unless --force is given.
    """
    result = build_demo(folder, force=force, jobs=jobs,
                        log=lambda text: click.echo(f"... {text}", err=True))
    click.echo(result.report())


__all__ = ["demo_command"]
