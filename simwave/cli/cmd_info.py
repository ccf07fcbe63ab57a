"""``simwave info``: what a waveform file holds, with per-channel statistics (streaming)."""

from __future__ import annotations

import json
import warnings

import click

from simwave.cli.app import main
from simwave.cli.input_options import input_options, read_options


def format_info(d: dict) -> str:
    """The text layout of ``simwave info``."""
    lines = [f"file       {d['path']}"]
    fmt = f"{d['format']}, {d['subtype']}"
    if d.get("dataset"):
        fmt += f", dataset {d['dataset']}"
    lines.append(f"format     {fmt}")
    lines.append(f"rate       {d['rate_hz']:.10g} Hz")
    lines.append(f"samples    {d['n_samples']} ({d['duration_s']:.10g} s), "
                 f"t0 = {d['t0_s']:.10g} s")
    lines.append(f"channels   {d['n_channels']}")
    header = ["#", "name", "unit"]
    rows = []
    stats = d.get("stats")
    levels = bool(stats) and any("peak_dbfs" in s for s in stats)
    if stats:
        header += ["min", "max", "mean", "RMS"]
    if levels:
        header += ["peak dBFS", "RMS dBFS"]
    for i, (name, unit) in enumerate(zip(d["channels"], d["units"], strict=True)):
        row = [str(i), name, unit or "-"]
        if stats:
            s = stats[i]
            row += [f"{s[k]:.6g}" for k in ("min", "max", "mean", "rms")]
        if levels:
            row += [f"{s[k]:+.2f}" if s.get(k) is not None else "-"
                    for k in ("peak_dbfs", "rms_dbfs")]
        rows.append(row)
    widths = [max(len(r[j]) for r in [header] + rows) for j in range(len(header))]
    for r in [header] + rows:
        lines.append("  " + "  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)).rstrip())
    attrs = dict(d.get("attrs") or {})
    metadata = attrs.pop("metadata", None)
    if isinstance(metadata, dict):
        for i, (key, value) in enumerate(metadata.items()):
            lines.append(f"{'metadata' if i == 0 else '':<10} {key}: {value}".rstrip())
    if attrs:
        from simwave.signals.common import dumps

        text = dumps(attrs)
        lines.append(f"attrs      {text if len(text) <= 200 else text[:197] + '...'}")
    for note in d.get("notes") or []:
        lines.append(f"note       {note}")
    return "\n".join(lines)


@main.command("info")
@click.argument("file")
@input_options
@click.option("--no-stats", is_flag=True, help="Skip the pass over the samples (min/max/mean/RMS).")
@click.option("--json", "as_json", is_flag=True, help="Print exact values as JSON.")
def info(file, no_stats, as_json, **kwargs):
    """Describe FILE (audio, CSV or HDF5, or a signal text): rate, duration, channels with
    names and units, sample format, and min, max, mean and RMS per channel.

    The statistics come from one streaming pass, so any file size works.
    """
    from simwave.signals.io import info as file_info

    opts = read_options(kwargs)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        from simwave.cli.cmd_run import _Progress

        progress = _Progress("reading")
        try:
            result = file_info(file, stats=not no_stats, progress=progress, **opts)
        finally:
            progress.close()
    d = result.to_dict()
    for w in caught:
        if str(w.message) not in d["notes"]:
            d["notes"].append(str(w.message))
    if as_json:
        click.echo(json.dumps(d, indent=2))
    else:
        click.echo(format_info(d))
