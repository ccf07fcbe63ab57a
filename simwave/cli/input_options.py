"""One click option group for every command that reads a waveform file.

Usage::

    @main.command()
    @click.argument("file")
    @input_options
    def cmd(file, **kwargs):
        opts = read_options(kwargs)      # pops the reader options out of kwargs
        wave = simwave.read(file, **opts)
"""

from __future__ import annotations

from typing import Any, Callable

import click

#: click parameter name -> reader option name
_OPTION_NAMES = {
    "dataset": "dataset",
    "input_rate": "rate",
    "channels": "channels",
    "time_column": "time_column",
    "resample": "resample",
    "fill_gaps": "fill_gaps",
    "full_scale": "full_scale",
    "input_offset": "offset",
    "input_format": "format",
    "delimiter": "delimiter",
    "decimal": "decimal",
    "header_line": "header_line",
    "skip_lines": "skip_lines",
}

_DECORATORS = [
    click.option("--dataset", metavar="PATH", default=None,
                 help="HDF5: path of the dataset to read (needed when the file holds several)."),
    click.option("--rate", "input_rate", metavar="HZ", default=None,
                 help="Sample rate where the file has none (e.g. 10k); overrides the file's "
                      "own with a warning."),
    click.option("--channels", metavar="LIST", default=None,
                 help="Channels to read, names or indices, comma-separated (e.g. 0,2 or "
                      "vin,vout)."),
    click.option("--time-column", metavar="NAME|INDEX|none", default=None,
                 help="CSV: the time column (default: found by name: time, t, seconds, ...)."),
    click.option("--header-line", metavar="N", type=click.IntRange(min=0), default=None,
                 help="CSV: line number of the column names (1 = first line; 0 = none); "
                      "a non-numeric line after it holds the units; lines above it are "
                      "kept as metadata (default: detected)."),
    click.option("--skip-lines", metavar="N", type=click.IntRange(min=0), default=None,
                 help="CSV: lines at the top to keep as metadata without looking for names "
                      "in them (default: detected)."),
    click.option("--delimiter", metavar="CHAR", default=None,
                 help="CSV: field separator (',', ';', 'tab' or 'space'; default: detected)."),
    click.option("--decimal", type=click.Choice([".", ","]), default=None,
                 help="CSV: decimal mark (default: detected)."),
    click.option("--resample", is_flag=True, default=False,
                 help="CSV/HDF5 time axis: interpolate irregular rows onto a uniform grid "
                      "(linear) instead of refusing them."),
    click.option("--fill-gaps", metavar="N", type=click.IntRange(min=0), default=0,
                 help="Interpolate gaps of up to N NaN/empty samples (default 0: refuse them)."),
    click.option("--full-scale", metavar="VOLTS", default=None,
                 help="Audio: physical value of digital full scale (one value, or one per "
                      "channel comma-separated); samples become volts."),
    click.option("--offset", "input_offset", metavar="VOLTS", default=None,
                 help="Audio: added after --full-scale scaling."),
    click.option("--input-format", metavar="FMT", default=None,
                 help="Input format when the extension does not tell: csv, hdf5, wav, flac, ..."),
]


def input_options(func: Callable[..., Any]) -> Callable[..., Any]:
    """Add the reader options (``--dataset``, ``--rate``, ``--channels``, ...) to a command."""
    for deco in reversed(_DECORATORS):
        func = deco(func)
    return func


def read_options(kwargs: dict[str, Any], pop: bool = True) -> dict[str, Any]:
    """The reader options given on the command line, as keyword arguments for
    :func:`simwave.read`, :func:`simwave.blocks` and :func:`simwave.info`.

    Options left at their defaults are omitted. With ``pop`` they are removed
    from ``kwargs``.
    """
    opts: dict[str, Any] = {}
    for cli_name, name in _OPTION_NAMES.items():
        value = kwargs.pop(cli_name, None) if pop else kwargs.get(cli_name)
        if value is None or value is False or (name == "fill_gaps" and value == 0):
            continue
        opts[name] = value
    if "time_column" in opts and str(opts["time_column"]).lower() == "none":
        opts["time_column"] = False
    if "delimiter" in opts:
        opts["delimiter"] = {"tab": "\t", "space": " "}.get(opts["delimiter"].lower(),
                                                            opts["delimiter"])
    return opts
