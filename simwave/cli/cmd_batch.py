"""``simwave batch``: many inputs x candidate systems, on a local pool or a Dask cluster."""

from __future__ import annotations

import json
import os
import sys
import warnings

import click

from simwave.batch.plan import DEFAULT_NAME
from simwave.batch.progress import BatchProgress
from simwave.cli.app import main
from simwave.cli.input_options import input_options, read_options
from simwave.discrete import METHODS
from simwave.errors import BatchError

#: Options that only the quick form takes (a description file sets these itself).
_QUICK_ONLY = {"method": "--method", "output_format": "--format", "name_template": "--name",
               "settling_band": "--settling-band"}


@main.command("batch")
@click.argument("items", nargs=-1, metavar="DESCRIPTION.toml | INPUTS...")
@click.option("-s", "--system", "systems", multiple=True, metavar="[NAME=]TEXT|FILE.toml",
              help="Quick form: a candidate system (H(s) text, ODE text or a TOML system "
                   "file), optionally named, e.g. -s 'rc=2*pi*100/(s+2*pi*100)'; repeat for "
                   "each candidate. INPUTS are then files, globs or generated-signal texts.")
@click.option("--design", "designs", multiple=True, metavar="[NAME=]TEXT",
              help="Quick form: a candidate analog design, e.g. --design 'bw4=butterworth "
                   "lowpass order=4 cutoff_hz=1k'; repeatable, with or without -s.")
@click.option("-o", "--output-dir", metavar="DIR", default=None,
              help="Where outputs, metrics and the summary go (required in the quick form; "
                   "overrides [output] dir of a description).")
@click.option("-j", "--jobs", type=click.IntRange(min=1), default=None,
              help="Local worker processes (default: all cores; 1 runs in this process).")
@click.option("--scheduler", metavar="ADDRESS", default=None,
              help="Run on a Dask cluster, e.g. tcp://10.1.2.3:8786 (needs simwave[distributed]; "
                   "inputs and outputs on storage the workers share).")
@click.option("--connect-timeout", metavar="SECONDS", default=None,
              help="How long to try to reach the scheduler (default 10 s).")
@click.option("--force", is_flag=True,
              help="Redo pairs that an earlier run finished (default: skip them).")
@click.option("-m", "--method", type=click.Choice(METHODS), default=None,
              help="Quick form: discretization method (default ramp-invariant).")
@click.option("--format", "output_format", metavar="FMT", default=None,
              help="Quick form: output format: same (as the input; default), csv, h5, wav, ...")
@click.option("--name", "name_template", metavar="TEMPLATE", default=None,
              help="Quick form: output file stem, from {input} {system} {parent} {path} {index} "
                   f"(default {DEFAULT_NAME}).")
@click.option("--settling-band", metavar="PCT", default=None,
              help="Quick form: settling tolerance band in percent of the transition (default 2).")
@input_options
@click.option("--plot", "plot_path", metavar="FILE", default=None,
              help="Also draw the per-system comparison (worst overshoot and longest settling "
                   "time per input) to FILE (.png or .svg).")
@click.option("--report", "with_report", is_flag=True,
              help="Also write report.html in the output folder: one self-contained page "
                   "with the comparison, every row and each pair's figures.")
@click.option("--json", "as_json", is_flag=True,
              help="Print the counts, summary paths and per-system comparison as JSON.")
def batch_command(items, systems, designs, output_dir, jobs, scheduler, connect_timeout, force,
                  method, output_format, name_template, settling_band, plot_path, with_report,
                  as_json,
                  **kwargs):
    """Run every input through every candidate system; write outputs, metrics and a summary.

    \b
    simwave batch campaign.toml
    simwave batch -s lp4.toml -s rc.toml 'recordings/*.wav' -o results

    Exit code 0 when every pair succeeded (and is within its [limits]), 1 when
    some failed (listed in the summary), 3 when every pair ran but some result is
    outside its tolerance bands, 2 for bad input (nothing written), 130 when
    interrupted (finished outputs stay; run the same command again to resume).
    """
    from simwave.batch import format_comparison, load_description, quick_plan, run_batch
    from simwave.model.parse import parse_number

    reader = read_options(kwargs)
    if plot_path is not None:
        from simwave.plots import check_plot_path

        # before any work: a bad name fails at once (the output folder may not exist yet)
        folder = os.path.dirname(os.path.abspath(plot_path))
        if output_dir is None or folder != os.path.abspath(output_dir):
            check_plot_path(plot_path)
    timeout = None
    if connect_timeout is not None:
        timeout = parse_number(connect_timeout, "--connect-timeout")
        if not timeout > 0:
            raise BatchError(f"--connect-timeout must be > 0 seconds, got {connect_timeout}")
    if systems or designs:
        if output_dir is None:
            raise BatchError("the quick form needs -o DIR for the outputs")
        if not items:
            raise BatchError("give the inputs after the options (files, globs or "
                             "generated-signal texts)")
        rate = reader.pop("rate", None)
        channels = reader.pop("channels", None)
        measure = {}
        if settling_band is not None:
            measure["settling_band_pct"] = parse_number(settling_band, "--settling-band")
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # plan notes are printed below, once
            plan = quick_plan(list(systems), list(items), output_dir, method=method,
                              output_format=output_format or "same", rate=rate,
                              channels=channels, read_options=reader,
                              name_template=name_template or DEFAULT_NAME,
                              measure_options=measure, designs=list(designs))
    else:
        if len(items) != 1:
            raise BatchError("give one batch description (FILE.toml), or candidate systems "
                             "with -s and the inputs (see simwave batch --help)")
        values = {"method": method, "output_format": output_format,
                  "name_template": name_template, "settling_band": settling_band}
        given = [flag for key, flag in _QUICK_ONLY.items() if values[key] is not None]
        given += [f"reader option {k}" for k in reader]
        if given:
            raise BatchError(f"{', '.join(given)}: quick-form option (with -s); with a "
                             f"description file, set it in {items[0]} instead")
        plan = load_description(items[0], output_dir=output_dir)
    for note in plan.warnings:
        click.echo(f"Warning: {note}", err=True)

    from simwave.batch.runner import sweep_plan_folders
    from simwave.signals.atomic import sweep_note

    note = sweep_note(sweep_plan_folders(plan)) if os.path.isdir(plan.output_dir) else None
    if note:
        click.echo(note, err=True)
    bar: dict[str, BatchProgress] = {}

    def progress(done: int, total: int, failed: int) -> None:
        if "bar" not in bar:
            bar["bar"] = BatchProgress(total)
        bar["bar"].update(done, failed)

    def on_failure(pair, message: str) -> None:
        line = f"failed: {pair.label}: {message}"
        if "bar" in bar:
            bar["bar"].log(line)
        else:
            click.echo(line, err=True)

    try:
        result = run_batch(plan, jobs=jobs, scheduler=scheduler, connect_timeout_s=timeout,
                           force=force, progress=progress, on_failure=on_failure)
    finally:
        if "bar" in bar:
            bar["bar"].close()
    c = result.counts
    report = None
    if with_report:
        from simwave.report import write_report

        report = write_report(result)
    if as_json:
        click.echo(json.dumps({
            "counts": c, "engine": result.engine, "elapsed_s": result.elapsed_s,
            "interrupted": result.interrupted, "summary_csv": result.summary_csv,
            "summary_json": result.summary_json, "comparison": result.comparison,
            "report": report,
        }, indent=2, default=str))
    else:
        click.echo(f"{c['pairs']} pairs: {c['ok']} ok, {c['failed']} failed, "
                   f"{c['not_run']} not run; {c['reused']} reused from an earlier run, "
                   f"{c['ran']} run now ({result.engine}) in {result.elapsed_s:.2f} s")
        click.echo(f"summary: {result.summary_csv}, {result.summary_json}")
        n_warn, n_pairs = result.warning_counts
        if n_warn:
            click.echo(f"warnings: {n_warn} from {n_pairs} pair(s), model and reader (see the "
                       f"summary's warnings column)")
        if result.outside_limits:
            click.echo(f"limits: {result.outside_limits} pair(s) outside their tolerance bands "
                       f"(exit code 3; see the summary's limits column)")
        if report:
            click.echo(f"report: {report}")
        table = format_comparison(result.comparison)
        if table:
            click.echo("\nPer-system comparison (worst case across inputs, pairs that ran ok):")
            click.echo(table)
    if plot_path is not None and c["ok"]:
        from simwave.plots import check_plot_path, plot_batch

        plot_batch(result.summary_json, check_plot_path(plot_path))
        click.echo(f"plot written to {plot_path}", err=True)
    if result.interrupted:
        click.echo(f"Interrupted: {c['not_run']} of {c['pairs']} pairs not run; run the same "
                   "command again to resume.", err=True)
    elif c["failed"]:
        click.echo(f"{c['failed']} of {c['pairs']} pairs failed (see the summary's error "
                   "column).", err=True)
    sys.exit(result.exit_code)
