"""``simwave run``: stream a waveform through H(s) and write the output."""

from __future__ import annotations

import json
import os
import sys
import time
import warnings

import click

from simwave.errors import SimwaveError

from simwave.cli.app import main
from simwave.cli.input_options import input_options, read_options
from simwave.cli.model_options import method_options, model_kwargs
from simwave.cli.system_input import parse_number_list, resolve_system, system_options

#: The output counts as louder than the input beyond this many dB (simwave's threshold,
#: about twice the power: a change a listener notices at once).
LOUDER_MARGIN_DB = 3.0


def audio_level_lines(run: dict) -> tuple[str | None, str | None]:
    """(level line for the summary, caution or None) for an audio output.

    The caution appears only when the output is beyond digital full scale (it will clip
    when converted to integer samples or played) or louder than the input by more than
    :data:`LOUDER_MARGIN_DB`; it says by how much and names the option that helps.
    """
    import math

    write = run.get("write") or {}
    peak = write.get("peak_dbfs")
    if peak is None:
        return None, None
    gain_db = 20 * math.log10(write.get("gain") or 1.0)
    in_file = peak + gain_db
    level = f"peak {peak:+.1f} dBFS"
    if gain_db:
        level += f", normalized by {gain_db:+.1f} dB to {in_file:+.1f} dBFS in the file"
    elif write.get("clipped"):
        level += f", {write['clipped']} samples clipped to full scale"
    out_peak = max((ch["peak"] for ch in run["channels"]), default=0.0)
    in_peak = max((ch.get("input_peak") or 0.0 for ch in run["channels"]), default=0.0)
    louder = (20 * math.log10(out_peak / in_peak) + gain_db
              if in_peak > 0 and out_peak > 0 else None)
    if write.get("clipped"):
        return level, (f"Caution: the output reached {peak:+.1f} dBFS and "
                       f"{write['clipped']} samples were clipped to full scale (audible "
                       f"distortion); --on-clip normalize scales it to --normalize-level "
                       f"instead. Start playback at low volume.")
    if in_file > 0:
        return level, (f"Caution: the output peaks at {in_file:+.1f} dBFS, {in_file:.1f} dB "
                       f"above digital full scale: it will clip when converted to integer "
                       f"samples or played. --on-clip normalize scales it to -1 dBFS "
                       f"(--normalize-level sets the level). Start playback at low volume.")
    if louder is not None and louder > LOUDER_MARGIN_DB:
        return level, (f"Caution: the output is {louder:.1f} dB louder than the input (peak "
                       f"{in_file:+.1f} dBFS); start playback at low volume.")
    return level, None


class _Progress:
    """A progress bar on stderr, only on a terminal and only once a run passes ~1 s."""

    def __init__(self, label: str = "simulating") -> None:
        self.label = label
        self.enabled = sys.stderr.isatty()
        self.started = time.monotonic()
        self.bar = None
        self.shown = 0

    def __call__(self, done: int, total: int | None) -> None:
        if not self.enabled or not total:
            return
        if self.bar is None:
            if time.monotonic() - self.started < 1.0:
                return
            self.bar = click.progressbar(length=total, label=self.label, file=sys.stderr)
            self.bar.__enter__()
        self.bar.update(done - self.shown)
        self.shown = done

    def close(self) -> None:
        if self.bar is not None:
            self.bar.__exit__(None, None, None)


#: Key metrics shown in the run summary, with their labels and display scale.
SUMMARY_METRICS = [
    ("rise_time_s_mean", "rise time", "s"),
    ("fall_time_s_mean", "fall time", "s"),
    ("delay_s_mean", "delay (50 %)", "s"),
    ("overshoot_pct_worst", "overshoot", "%"),
    ("undershoot_pct_worst", "undershoot", "%"),
    ("settling_time_s_longest", "settling time", "s"),
    ("steady_state_gain", "steady-state gain", ""),
    ("predicted_dc_gain", "H(0)", ""),
    ("gain_db", "gain", "dB"),
    ("predicted_gain_db", "predicted gain", "dB"),
    ("phase_deg", "phase", "deg"),
    ("predicted_phase_deg", "predicted phase", "deg"),
    ("thd_pct", "THD", "%"),
    ("tone_gain_error_db_worst", "worst tone gain error against H(j2πf)", "dB"),
]


def _plain(key: str) -> str:
    """A summary key not in :data:`SUMMARY_METRICS` as words: ``preshoot_pct_worst`` ->
    ``preshoot``, ``final_value`` -> ``final value``."""
    for suffix in ("_pct_worst", "_s_longest", "_s_mean", "_s_first", "_worst", "_mean"):
        if key.endswith(suffix):
            key = key[: -len(suffix)]
            break
    return key.replace("_", " ")


def _key_cautions(metrics: dict, name: str, values: dict) -> list[tuple[str, str]]:
    """(label, text) for each summary metric shown on the run line whose value carries a
    transition's caution (the disturbance comparable to what it is measured against), so
    that the terminal line says what the metrics file says: the first transition's text,
    and how many transitions carry one."""
    from simwave.measure.result import KEY_SOURCES

    ch = next((c for c in metrics.get("channels") or [] if c.get("name") == name), None)
    if not ch:
        return []
    out = []
    rows = ch.get("transitions") or []
    for key, label, _unit in SUMMARY_METRICS:
        src = KEY_SOURCES.get(key)
        if src is None or not isinstance(values.get(key), (int, float)):
            continue
        flagged = [t for t in rows if src in (t.get("cautions") or {})]
        if flagged:
            first = flagged[0]
            more = f" ({len(flagged)} of {len(rows)} transitions cautioned)" if rows[1:] else ""
            out.append((label, f"#{first['index']}: {first['cautions'][src]}{more}"))
    return out


def _format_summary(result: dict) -> str:
    run = result["run"]
    acc = run.get("accuracy") or {}
    check = run.get("rate_check") or {}
    lines = [
        f"wrote      {run['output']}",
        f"samples    {run['samples']} ({run['duration_s']:.6g} s at {run['rate_hz']:g} Hz)",
        f"method     {run['method']}, initial state: {run['initial']}",
    ]
    if check:
        lines.append(
            f"model      in-band magnitude error {check['max_in_band_mag_error_db']:+.3g} dB at "
            f"{check['at_hz']:.4g} Hz (where |H| is within 20 dB of its peak)"
        )
    if acc.get("max_mag_error_db") is not None:
        lines.append(
            f"           to {acc['band_hz']:.4g} Hz (|H| within 60 dB of peak): "
            f"{acc['max_mag_error_db']:+.3g} dB at {acc['max_mag_error_at_hz']:.4g} Hz, "
            f"{acc['max_phase_error_deg']:+.3g} deg at {acc['max_phase_error_at_hz']:.4g} Hz"
        )
    if run.get("oversample"):
        o = run["oversample"]
        before = o["in_band_error_at_input_rate"]["max_in_band_mag_error_db"]
        after = o["in_band_error_at_model_rate"]["max_in_band_mag_error_db"]
        lines.append(
            f"oversample x{o['factor']}: model at {o['model_rate_hz']:g} Hz; in-band magnitude "
            f"error {before:+.3g} dB -> {after:+.3g} dB; decimator "
            f"{o.get('decimator', {}).get('taps', '?')}-tap linear-phase FIR"
        )
    width = max(8, *(len(ch["name"]) for ch in run["channels"]))
    lines.append(f"{'channel':<{width + 2}} {'peak':<12} {'peak at (s)':<13} RMS")
    for ch in run["channels"]:
        unit = f" {ch['unit']}" if ch["unit"] else ""
        lines.append(
            f"  {ch['name']:<{width}} {ch['peak']:<12.6g} {ch['peak_time_s']:<13.6g} "
            f"{ch['rms']:.6g}{unit}"
        )
    if result.get("metrics"):
        from simwave.measure import key_metrics
        from simwave.measure.result import key_bounds, key_missing, marked

        for name, values in key_metrics(result["metrics"]).items():
            bounds, missing = key_bounds(values), key_missing(values)
            shown = []
            for key, label, unit in SUMMARY_METRICS:
                v = values.get(key)
                if isinstance(v, (int, float)):
                    text = marked(v, bounds.get(key), f"{v:.4g}{(' ' + unit) if unit else ''}")
                    shown.append(f"{label} {text}")
                elif key in missing:
                    shown.append(f"{label} n/a")
            if shown:
                lines.append(f"metrics    {name}: " + ", ".join(shown))
            by_reason: dict[str, list[str]] = {}
            for key, why in missing.items():
                label = next((lb for k, lb, _ in SUMMARY_METRICS if k == key), _plain(key))
                by_reason.setdefault(why, []).append(label)
            for why, labels in by_reason.items():
                lines.append(f"           {name} {', '.join(labels)} n/a: {why}")
            if bounds:
                lines.append(
                    f"           {name}: \u2265 marks a lower bound, \u2264 an upper bound "
                    "(see the metrics file for why)"
                )
            for label, why in _key_cautions(result["metrics"], name, values):
                lines.append(f"           {name} {label}: caution - {why}")
        for ch in result["metrics"].get("channels") or []:
            # a sine or tone fit on part of the steady-state window: which part, and why
            for part in (ch.get("fit_window"), (ch.get("sine") or {}).get("fit_window")):
                if part and part.get("note"):
                    lines.append(f"           {part['note']}")
    level = audio_level_lines(run)[0]
    if level:
        lines.append(f"level      {level}")
    lines.append(f"time       {run['elapsed_s']:.3f} s")
    return "\n".join(lines)


@main.command("run")
@click.argument("source", metavar="INPUT")
@system_options
@input_options
@click.option("-o", "--output", required=True, metavar="FILE",
              help="Output file; format from the extension (.wav .flac .csv .h5 ...).")
@method_options()
@click.option("--initial", type=click.Choice(["rest", "settled"]), default="rest",
              show_default=True,
              help="rest: zero initial state; settled: steady state for the first sample.")
@click.option("--initial-output", metavar="LIST", default=None,
              help="ODE systems: output initial conditions y(0), y'(0), ... (comma-separated).")
@click.option("--oversample", type=click.IntRange(1, 64), default=1, show_default=True,
              help="Run the model at N x the input rate and decimate back (anti-alias FIR).")
@click.option("--with-input", is_flag=True,
              help="Write the input beside the output (CSV columns / HDF5 dataset).")
@click.option("--subtype", metavar="SUBTYPE", default=None,
              help="Audio output sample format, e.g. FLOAT (default), PCM_16, PCM_24.")
@click.option("--on-clip", type=click.Choice(["error", "clip", "normalize"]), default="error",
              show_default=True, help="Integer audio output beyond full scale.")
@click.option("--compression", type=click.Choice(["gzip", "lzf"]), default=None,
              help="HDF5 output: compress the datasets (default: none). Sampled float data "
                   "hardly compresses: gzip saves ~10-15 % and takes ~20x the write time, lzf "
                   "~5 % at ~15x (benchmarks/bench_writers.py).")
@click.option("--normalize-level", metavar="DBFS", default=None,
              help="Peak level that --on-clip normalize scales a too-loud output to "
                   "(default -1 dBFS).")
@click.option("--keep-going", is_flag=True,
              help="Write the output even if it turns NaN/infinite (unstable system).")
@click.option("--metrics", metavar="FILE.json", default=None,
              help="Measure the output against the input and write the metrics as JSON.")
@click.option("--settling-band", metavar="PCT", default=None,
              help="Settling tolerance band in percent of the transition (default 2).")
@click.option("--plot", "plot_path", metavar="FILE", default=None,
              help="Draw input and output with the first transition's metrics (.png or .svg).")
@click.option("--report", "with_report", is_flag=True,
              help="Also write OUTPUT's name with .report.html: one self-contained page of "
                   "the run (metrics, figures, cautions).")
@click.option("--json", "as_json", is_flag=True, help="Print the run report as JSON.")
def run_command(source, system_spec, output, method, prewarp, match_frequency, initial,
                initial_output, oversample, with_input, subtype, on_clip, normalize_level,
                compression, keep_going, metrics, settling_band, plot_path, with_report, as_json,
                **reader_kwargs):
    """Run INPUT through the system and write the output.

    INPUT is a waveform file (WAV, FLAC, CSV, HDF5, ...) or a generated
    signal, e.g. 'step:rate=10k,duration=50m,time=5m'.
    """
    from simwave.model.parse import parse_number
    from simwave.run import RunJob, execute
    from simwave.cli.app import sweep_output_folders
    from simwave.signals.atomic import guard_outputs

    # Every path this command writes, checked together before any work: none is an
    # input (waveform or system file), no two are the same file.
    report_target = None
    if with_report:
        from simwave.report import run_report_path

        report_target = run_report_path(output)
    guard_outputs({"-o/--output": output, "--metrics": metrics, "--plot": plot_path,
                   "--report": report_target},
                  {"the input": source if os.path.exists(source) else None,
                   "the system file": system_spec.file})
    sweep_output_folders([output, metrics, plot_path])
    system = resolve_system(system_spec)
    reader = read_options(reader_kwargs)
    if plot_path is not None:
        from simwave.plots import check_plot_path

        check_plot_path(plot_path)  # a bad plot name fails before any work
    report_path = None
    if with_report:
        from simwave.report import check_report_path, run_report_path

        report_path = check_report_path(run_report_path(output))
    write_options = {}
    if subtype is not None:
        write_options["subtype"] = subtype
    if on_clip != "error":
        write_options["on_clip"] = on_clip
    if compression is not None:
        write_options["compression"] = compression
    if normalize_level is not None:
        write_options["normalize_level_dbfs"] = parse_number(normalize_level, "--normalize-level")
    measure_options = {}
    if settling_band is not None:
        measure_options["settling_band_pct"] = parse_number(settling_band, "--settling-band")
    job = RunJob(
        system=system,
        source=source,
        output=output,
        method=method,
        initial=initial,
        **model_kwargs(prewarp, match_frequency),
        initial_output=(tuple(parse_number_list(initial_output, "--initial-output"))
                    if initial_output is not None else None),
        oversample=oversample,
        read_options=reader,
        write_options=write_options,
        include_input=with_input,
        keep_going=keep_going,
        metrics=metrics,
        measure_options=measure_options,
    )
    progress = _Progress()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            result = execute(job, progress=progress)
        finally:
            progress.close()
    if plot_path is not None:
        from simwave.plots import plot_run
        from simwave.run import input_read_options, output_read_options

        try:
            plot_run(output, source, result.get("metrics"), plot_path,
                     read_options=output_read_options(job, len(result["run"]["channels"])),
                     input_read_options=input_read_options(job))
        except SimwaveError as exc:  # same rule as the metrics step: the output stands
            caught_plot = f"{plot_path}: plot not written: {exc} (the output {output} is complete)"
            result["plot_error"] = str(exc)
            plot_path = None
            click.echo(f"Warning: {caught_plot}", err=True)
    if report_path is not None:
        from simwave.report import write_run_report

        write_run_report(result, job, report_path)
    if as_json:
        from simwave.guards import null_reasons_note, with_null_reasons

        clean, reasons = with_null_reasons(json.loads(json.dumps(result, default=str)))
        note = null_reasons_note(reasons)
        if note:
            click.echo(f"Warning: {note}", err=True)
        click.echo(json.dumps(clean, indent=2, allow_nan=False))
    else:
        click.echo(_format_summary(result))
        if metrics and result.get("metrics") is not None:
            click.echo(f"wrote      {metrics}")
        if plot_path:
            click.echo(f"wrote      {plot_path}")
        if report_path:
            click.echo(f"wrote      {report_path}")
    shown = set()
    for w in caught:
        text = str(w.message)
        if text not in shown:
            shown.add(text)
            click.echo(f"Warning: {text}", err=True)
    caution = audio_level_lines(result["run"])[1]
    if caution:
        click.echo(caution, err=True)
