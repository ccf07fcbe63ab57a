"""``simwave gen``: write a generated test signal to a file, streaming."""

from __future__ import annotations

import json
import math

import click

from simwave.cli.app import main
from simwave.cli.renamed import renamed_option
from simwave.errors import WaveformError

AUDIO_CAUTION = (
    "Caution: a generated signal near full scale can be very loud and can damage hearing "
    "and speakers; start playback at low volume."
)
BLOCK = 1 << 16


def _kinds_text() -> str:
    from simwave.signals.generate import KINDS

    lines = []
    for kind, (desc, params) in KINDS.items():
        lines.append(f"{kind}: {desc}")
        for name, p in params.items():
            need = "required" if p.required else (
                "optional" if p.default is None else f"default {p.default}")
            choice = f" ({'/'.join(p.choices)})" if p.choices else ""
            lines.append(f"    {name:<12} {p.help}{choice}; {need}")
    lines.append("every kind: units (text, e.g. V)")
    return "\n".join(lines)


@main.command("gen")
@click.argument("kind", required=False)
@click.option("-o", "--output", type=click.Path(dir_okay=False), help="File to write.")
@click.option("--rate", metavar="HZ", help="Sample rate, e.g. 48k.")
@click.option("--duration", metavar="S", help="Record length in seconds, e.g. 0.5 or 500m.")
@click.option("-p", "--param", "params", multiple=True, metavar="NAME=VALUE",
              help="A parameter of the kind (repeatable), e.g. -p width=1m -p delay=10m.")
@click.option("--format", "fmt", metavar="FMT", help="Output format if not from the extension.")
@click.option("--subtype", metavar="SUBTYPE",
              help="Audio sample encoding: FLOAT (default), DOUBLE, PCM_16, PCM_24, ...")
@click.option("--on-clip", type=click.Choice(["error", "clip", "normalize"]), default="error",
              show_default=True, help="Integer audio subtypes: what to do beyond full scale.")
@click.option("--normalize-level", metavar="DBFS", default=None,
              help="Peak level that --on-clip normalize scales a too-loud signal to "
                   "(default -1 dBFS).")
@click.option("--output-full-scale", "full_scale", metavar="VALUE",
              help="Audio: signal value written as digital full scale (default 1).")
@renamed_option("--full-scale", new="--output-full-scale", param="full_scale", metavar="VALUE")
@click.option("--dataset", metavar="PATH", help="HDF5: dataset path (default /waveform).")
@click.option("--add", "add", is_flag=True,
              help="HDF5: add the dataset to an existing file instead of replacing the file.")
@click.option("--json", "as_json", is_flag=True, help="Print the result as JSON.")
@click.option("--kinds", "list_kinds", is_flag=True, help="List the kinds and their parameters.")
def gen(kind, output, rate, duration, params, fmt, subtype, on_clip, normalize_level, full_scale,
        dataset, add, as_json, list_kinds):
    """Write a generated test signal: KIND with --rate, --duration and -p NAME=VALUE, or one
    signal text such as pulse:rate=10k,duration=0.5,width=1m,delay=10m.

    Values take engineering suffixes (1k, 10m, 4.7u, 25%). The signal is
    written block by block, so any duration fits in memory.
    """
    from simwave.signals.formats import resolve_format
    from simwave.signals.generate import coerce_params, generate_blocks, kind_name
    from simwave.signals.io import open_writer
    from simwave.signals.spec import is_signal_spec, parse_signal_spec

    if list_kinds:
        click.echo(_kinds_text())
        return
    if not kind:
        raise WaveformError("give a KIND (or a signal text); `simwave gen --kinds` lists them")
    if not output:
        raise WaveformError("give the output file with -o FILE")
    spec_params: dict[str, str] = {}
    if is_signal_spec(kind):
        kind_, s_rate, s_dur, spec_params = parse_signal_spec(kind)
        for name, given, from_spec in (("rate", rate, s_rate), ("duration", duration, s_dur)):
            if given is not None and from_spec is not None:
                raise WaveformError(f"{name} given twice (in the signal text and as --{name})")
        rate = rate if rate is not None else s_rate
        duration = duration if duration is not None else s_dur
        kind = kind_
    else:
        kind = kind_name(kind)
    for item in params:
        if "=" not in item:
            raise WaveformError(f"-p {item!r}: write NAME=VALUE")
        name, value = item.split("=", 1)
        name = name.strip().lower()
        if name in spec_params:
            raise WaveformError(f"parameter {name} given twice")
        spec_params[name] = value.strip()
    if rate is None or duration is None:
        raise WaveformError(f"{kind}: give --rate and --duration")
    coerce_params(kind, spec_params)  # fail on a bad parameter before creating the file
    opts = {}
    if subtype:
        opts["subtype"] = subtype
    if on_clip != "error":
        opts["on_clip"] = on_clip
    if normalize_level is not None:
        from simwave.model.parse import parse_number

        opts["normalize_level_dbfs"] = parse_number(normalize_level, "--normalize-level")
    if full_scale is not None:
        opts["full_scale"] = full_scale
    if dataset:
        opts["dataset"] = dataset
    if add:
        opts["mode"] = "add"
    pieces = generate_blocks(kind, rate, duration, BLOCK, **spec_params)
    first = next(pieces)
    with open_writer(output, first.rate, first.channels, first.units, first.attrs, 0.0,
                     format=fmt, **opts) as out:
        out.write(first)
        n = first.n_samples
        for piece in pieces:
            out.write(piece)
            n += piece.n_samples
    res = out.result
    family, _ = resolve_format(output, fmt)
    text = ",".join([f"rate={first.rate:g}", f"duration={n / first.rate:g}"]
                    + [f"{k}={v}" for k, v in spec_params.items()])
    if as_json:
        click.echo(json.dumps({"signal": f"{kind}:{text}", **res.to_dict()}, default=str))
    else:
        click.echo(f"wrote      {res.path}")
        click.echo(f"signal     {kind}:{text}")
        click.echo(f"samples    {res.n_samples} ({res.n_samples / first.rate:g} s at "
                   f"{first.rate:g} Hz), {res.n_channels} channel")
        enc = f"{res.format}, {res.subtype}"
        if res.datasets:
            enc += f", dataset {res.datasets[0]}"
        click.echo(f"format     {enc}")
        line = f"peak       {res.peak:.6g}"
        if res.peak_dbfs is not None:
            line += f" ({res.peak_dbfs:+.2f} dBFS)"
        click.echo(line)
        if res.clipped:
            click.echo(f"clipped    {res.clipped} samples")
        if res.gain != 1.0:
            click.echo(f"gain       {res.gain:.6g} ({20 * math.log10(res.gain):+.2f} dB to "
                       f"{res.peak_dbfs + 20 * math.log10(res.gain):+.1f} dBFS; the file "
                       f"records the scale)")
    if family == "audio":
        click.echo(AUDIO_CAUTION, err=True)
