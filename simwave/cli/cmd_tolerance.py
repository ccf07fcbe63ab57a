"""``simwave tolerance``: will the design meet its limits when built? Corners, Monte Carlo,
sweeps and design search over the user's recordings."""

from __future__ import annotations

import json
import sys

import click

from simwave.cli.app import main
from simwave.cli.system_input import parse_number, parse_settings
from simwave.errors import BatchError


@main.command("tolerance")
@click.argument("study_file", metavar="STUDY.toml")
@click.option("--analysis", type=click.Choice(["corners", "monte-carlo", "sweep"]), default=None,
              help="Override the study's analysis.")
@click.option("--draws", type=click.IntRange(min=1), default=None,
              help="Monte Carlo: number of random builds (overrides the study's draws).")
@click.option("--seed", type=click.IntRange(min=0), default=None,
              help="Monte Carlo: random seed (same seed, same draws).")
@click.option("--set", "settings", multiple=True, metavar="NAME=VALUE",
              help="Give or override a parameter, e.g. --set 'C=100n ±10%' (repeatable).")
@click.option("-o", "--output-dir", metavar="DIR", default=None,
              help="Where the summary, records and plots go (overrides [output] dir).")
@click.option("-j", "--jobs", type=click.IntRange(min=1), default=None,
              help="Local worker processes (default: the study's, else all cores; 1 runs in "
                   "this process).")
@click.option("--scheduler", metavar="ADDRESS", default=None,
              help="Run on a Dask cluster, e.g. tcp://10.1.2.3:8786 (workers read the inputs "
                   "at the same paths).")
@click.option("--connect-timeout", metavar="SECONDS", default=None,
              help="How long to try to reach the scheduler (default 10 s).")
@click.option("--force", is_flag=True,
              help="Rerun builds an earlier run of the same study finished (default: reuse).")
@click.option("--report", "with_report", is_flag=True,
              help="Also write report.html in the output folder: one self-contained page of "
                   "the study.")
@click.option("--json", "as_json", is_flag=True, help="Print the summary document as JSON.")
def tolerance_command(study_file, analysis, draws, seed, settings, output_dir, jobs, scheduler,
                      connect_timeout, force, with_report, as_json) -> None:
    """Run a tolerance study: every build of a toleranced design on your inputs.

    \b
    simwave tolerance study.toml
    simwave tolerance study.toml --analysis monte-carlo --draws 1000 --seed 3

    Writes tolerance-summary.csv/.json (per input and metric: nominal, spread,
    share inside [limits] with its interval, the parameter that moves it most),
    builds.csv and build-metrics.csv (every build's values and results) and
    plots. Exit code 0 when every build ran (unstable ones are reported and
    counted), 1 when some failed, 2 for a bad study file, 130 when interrupted
    (finished builds are kept; run the same command again to resume).
    """
    from simwave.tolerance import load_study, run_study
    from simwave.tolerance.text import format_summary

    timeout = None
    if connect_timeout is not None:
        timeout = parse_number(connect_timeout, "--connect-timeout")
        if not timeout > 0:
            raise BatchError(f"--connect-timeout must be > 0 seconds, got {connect_timeout}")
    study = load_study(study_file, output_dir=output_dir, analysis=analysis, draws=draws,
                       seed=seed, settings=parse_settings(settings))
    for note in study.warnings:
        click.echo(f"Warning: {note}", err=True)
    try:
        result = run_study(study, jobs=jobs, scheduler=scheduler, connect_timeout_s=timeout,
                           force=force)
    except KeyboardInterrupt:
        click.echo("Interrupted: finished builds are kept in the journal; run the same "
                   "command again to resume.", err=True)
        sys.exit(130)
    if with_report:
        from simwave.report import write_report

        report = write_report(study.output_dir)
        click.echo(f"report: {report}", err=as_json)
    if as_json:
        click.echo(json.dumps(result.summary, indent=1))
    else:
        click.echo(format_summary(result.summary, result.files))
        r = result.run
        if r.ran:
            click.echo(f"({r.ran} builds run in {r.elapsed_s:.2f} s on {r.engine}; "
                       f"{r.reused} reused from an earlier run)", err=True)
        else:
            click.echo(f"(all {r.reused} builds reused from an earlier run)", err=True)
    if result.summary["counts"]["failed"]:
        click.echo(f"{result.summary['counts']['failed']} builds failed (see the summary's "
                   "problem_builds).", err=True)
    sys.exit(result.exit_code)
