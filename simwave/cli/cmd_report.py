"""``simwave report``: one self-contained HTML page for a batch or tolerance-study folder."""

from __future__ import annotations

import os

import click

from simwave.cli.app import main


@main.command("report")
@click.argument("folder", metavar="DIR")
@click.option("-o", "--output", metavar="FILE", default=None,
              help="Where to write the page, a .html name (default DIR/report.html, beside "
                   "the summary).")
@click.option("--max-detailed", type=click.IntRange(min=0), default=None,
              help="Most pairs drawn in full (default 60); beyond it the worst cases are "
                   "drawn and the rest link to their files.")
def report_command(folder: str, output: str | None, max_detailed: int | None) -> None:
    """Write one HTML page for the batch or tolerance study in DIR: comparison, all rows,
    each pair.

    DIR is a batch output folder (where summary.json is), a tolerance-study
    output folder (tolerance-summary.json), or a folder holding one, such as
    the demo's. The page is self-contained (styles, script and figures inline;
    nothing fetched) and opens from a file or an e-mail.
    """
    from simwave.report import MAX_DETAILED, check_report_path, write_report

    if output is not None:
        check_report_path(output)  # a bad name fails before any work
    path = write_report(folder, output,
                        max_detailed=MAX_DETAILED if max_detailed is None else max_detailed)
    click.echo(f"wrote      {os.path.relpath(path)} ({os.path.getsize(path) / 1e6:.2f} MB)")


__all__ = ["report_command"]
