"""``simwave measure``: transient and steady-state metrics of an existing waveform file."""

from __future__ import annotations

import os

import click

from simwave.cli.app import main
from simwave.cli.input_options import input_options, read_options
from simwave.cli.renamed import renamed_option
from simwave.cli.system_input import resolve_system, system_options
from simwave.discrete import METHODS
from simwave.errors import MeasurementError
from simwave.measure.kinds import SIGNAL_KINDS


def _numbers(text: str, what: str) -> list[float]:
    from simwave.model.parse import parse_number
    parts = [p.strip() for p in text.split(",")]
    if not parts or any(p == "" for p in parts):
        raise MeasurementError(f"{what}: write numbers separated by commas, got {text!r}")
    return [parse_number(p, what) for p in parts]


def _write_json(path: str, text: str, protect: list[str]) -> None:
    from simwave.signals.atomic import write_text_atomic

    write_text_atomic(path, text + "\n", protect=protect)


#: A sparse HDF5 dataset (mostly fill value) longer than this is not measured: every pass
#: of the measurement reads every sample (simwave's own limit, ~2 minutes per pass).
SPARSE_MEASURE_LIMIT = 10**10


def _refuse_sparse(file: str, ropts: dict) -> None:
    """Refuse to measure a huge, mostly unstored HDF5 dataset (it would read for hours)."""
    if not str(file).lower().endswith((".h5", ".hdf5", ".he5")):
        return
    import simwave

    head = simwave.info(file, **ropts)
    if head.n_samples > SPARSE_MEASURE_LIMIT and any(
            n.startswith("sparse dataset") for n in head.notes):
        raise MeasurementError(
            f"{file}: {head.n_samples:,} samples, almost all the fill value ({head.notes[-1]}); "
            f"measuring reads every sample several times: write the stored part to its own "
            f"file first")


@main.command("measure")
@click.argument("file")
@input_options
@system_options
@click.option("--reference", "reference_file", metavar="FILE", default=None,
              help="The input that produced FILE (same rate and length): gives the time "
                   "origin for delay/peak/settling, steady-state gain and error, gain and phase.")
@click.option("--input-channel", metavar="NAME|INDEX", default=None,
              help="Take the input from this channel of FILE and measure the other channels.")
@click.option("--reference-dataset", metavar="PATH", default=None,
              help="HDF5: the reference's dataset, e.g. /input (written by run --with-input); "
                   "without --reference it is read from FILE itself.")
@click.option("--reference-channels", metavar="LIST", default=None,
              help="Channels of the reference to use, names or indices, comma-separated; "
                   "without --reference they are read from FILE itself.")
@click.option("--before-record", type=click.Choice(["rest", "unknown"]), default="rest",
              show_default=True,
              help="rest: input and output were 0 before the record (how simwave runs start), "
                   "so an input whose first sample is not 0 steps there; unknown: assume "
                   "nothing before the first sample.")
@click.option("--levels", metavar="LOW,MID,HIGH", default="10,50,90", show_default=True,
              help="Reference levels in percent of the amplitude (IEEE Std 181).")
@click.option("--settling-band", metavar="PCT", default="2", show_default=True,
              help="Settling band: +/- this percent of the amplitude around the final level.")
@renamed_option("--band", new="--settling-band", param="settling_band", metavar="PCT")
@click.option("--harmonics", metavar="N", type=click.IntRange(2, 1000), default=10,
              show_default=True, help="THD counts harmonics 2..N.")
@click.option("--sine-hz", metavar="HZ", default=None,
              help="Sine frequency (three-parameter fit); default: estimated (four-parameter).")
@click.option("--tones", metavar="F1,F2,...", default=None,
              help="Tone frequencies of a multi-tone input; default: found in its spectrum.")
@click.option("--steady-fraction", metavar="FRACTION", default="0.25", show_default=True,
              help="Steady-state window: this last part of the record.")
@click.option("--state-levels", type=click.Choice(["histogram", "minmax", "segment"]),
              default="histogram", show_default=True,
              help="How the state levels are found: IEEE Std 181 histogram mode (checked "
                   "against settled segment ends), min/max, or segment ends wherever found.")
@click.option("--kind", type=click.Choice(list(SIGNAL_KINDS)), default="auto", show_default=True,
              help="What the signal is; auto decides from the input (else the output).")
@click.option("--method", type=click.Choice(METHODS), default=None,
              help="With a system: the discretization method that made FILE; its accuracy "
                   "report at FILE's rate sets the measured-vs-predicted tolerances.")
@click.option("--json", "as_json", is_flag=True, help="Print the result as JSON.")
@click.option("--metrics", "out_path", metavar="FILE.json", default=None,
              help="Also write the JSON result to this file (as run --metrics does).")
@renamed_option("-o", "--output", new="--metrics", param="out_path", metavar="FILE.json")
@click.option("--plot", "plot_path", metavar="FILE", default=None,
              help="Also draw the input and output with the first transition's levels, rise "
                   "time, overshoot and settling band to FILE (.png or .svg).")
def measure_cmd(file, system_spec, reference_file, input_channel, reference_dataset,
                reference_channels, before_record, levels, settling_band, harmonics, sine_hz, tones,
                steady_fraction, state_levels, kind, method, as_json, out_path, plot_path,
                **kwargs):
    """Measure FILE: transitions (rise/fall time, overshoot, undershoot, preshoot, peak,
    settling; per pulse for pulse trains), steady state (final value, gain, error, mean,
    RMS, ripple), sine and multi-tone gain and phase, THD and SINAD; and, with a system,
    what H(s) predicts beside each.

    Terms and methods follow IEEE Std 181-2011 (pulses and transitions) and IEEE Std
    1057-2017 (sine fits); the file is read in blocks, so any length works. Results are
    a design aid: for medical, protection or other safety-related signal chains follow
    the applicable standards and licensed engineering practice.
    """
    from simwave.measure import measure
    from simwave.model.parse import parse_number
    ropts = read_options(kwargs)
    system = resolve_system(system_spec, required=False)
    opts = {
        "reference_levels_pct": _numbers(levels, "--levels"),
        "settling_band_pct": parse_number(settling_band, "--settling-band"),
        "harmonics": harmonics,
        "steady_fraction": parse_number(steady_fraction, "--steady-fraction"),
        "state_level_method": state_levels,
        "signal_kind": kind,
        "read_options": ropts,
        "rest_before_record": before_record == "rest",
    }
    if sine_hz is not None:
        opts["sine_hz"] = parse_number(sine_hz, "--sine-hz")
    if tones is not None:
        opts["tones_hz"] = _numbers(tones, "--tones")
    if input_channel is not None:
        opts["reference_channel"] = input_channel
    ref_ropts = ropts
    if reference_dataset is not None or reference_channels is not None:
        if input_channel is not None:
            raise MeasurementError(
                "--input-channel takes the input from FILE's own channels; use it without "
                "--reference-dataset/--reference-channels"
            )
        if reference_file is None:
            reference_file = file
        ref_ropts = dict(ropts)
        if reference_dataset is not None:
            ref_ropts["dataset"] = reference_dataset
        if reference_channels is not None:
            ref_ropts["channels"] = [p.strip() for p in reference_channels.split(",")]
    opts["reference_read_options"] = ref_ropts
    if method is not None:
        if system is None:
            raise MeasurementError("--method needs a system (-s/--system or another system option)")
        import simwave
        from simwave.discrete import discretize

        rate = simwave.info(file, **ropts).to_dict()["rate_hz"]
        opts["discrete"] = discretize(system, rate, method)
    from simwave.signals.atomic import guard_outputs

    guard_outputs({"--metrics": out_path, "--plot": plot_path},
                  {"the measured file": file, "the reference": reference_file,
                   "the system file": system_spec.file})
    if plot_path is not None:
        from simwave.plots import check_plot_path

        check_plot_path(plot_path)  # before any work: a bad name fails at once
    _refuse_sparse(file, ropts)
    from simwave.guards import measuring_failures

    with measuring_failures(file):
        result = measure(file, reference=reference_file, system=system, **opts)
    text = result.to_json()
    if out_path is not None:
        _write_json(os.fspath(out_path), text, [file, reference_file])
    if as_json:
        click.echo(text)
    else:
        click.echo(result.format())
    if plot_path is not None:
        from simwave.plots import plot_run

        plot_run(file, reference_file, result, plot_path, read_options=ropts,
                 input_read_options=ref_ropts)
        click.echo(f"plot written to {plot_path}", err=True)


__all__ = ["measure_cmd"]
