"""Figures: the run (input and output, with the measured transition drawn in), the
frequency response of a system and its discrete model, and a batch comparison chart.

Every function builds a :class:`matplotlib.figure.Figure` with the object-oriented
API on an Agg canvas (no pyplot, no display, no global state), returns it, and
writes it to ``path`` when one is given: PNG or SVG by the file extension,
atomically (a temporary file beside the target, renamed at the end).

Drawn values come from the measurement dictionary (:func:`simwave.measure`'s
``to_dict()``), never recomputed here, so the picture shows exactly what the
numbers say.

Colours are the Okabe-Ito palette, chosen to stay distinct for the common forms
of colour-vision deficiency (M. Okabe and K. Ito, "Color Universal Design (CUD):
how to make figures and presentations that are friendly to colorblind people",
J*Fly, 2008); every quantity is also told apart by line style or marker, so the
figures survive greyscale printing.
"""

from __future__ import annotations

import csv
import json
import math
import os
import sys
import textwrap
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
from matplotlib import rc_context
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.patches import Circle

from simwave.errors import SimwaveError

#: Okabe-Ito colours (see the module docstring).
OKABE_ITO = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "bluish_green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish_purple": "#CC79A7",
}
#: Series colours in order (systems in a comparison, channels, ...): yellow is left
#: out, it is too light on white.
SERIES = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000")
INPUT_COLOR = "#555555"
OUTPUT_COLOR = OKABE_ITO["blue"]
LEVEL_COLOR = "#333333"
RISE_COLOR = OKABE_ITO["orange"]
PEAK_COLOR = OKABE_ITO["vermillion"]
SETTLE_COLOR = OKABE_ITO["bluish_green"]

#: File formats by extension.
FORMATS = {".png": "png", ".svg": "svg"}
#: Most samples drawn per line; longer records are drawn as a min/max envelope
#: (every peak stays visible, the file stays small).
MAX_POINTS = 8000
#: Most channels drawn in the overview of a run.
MAX_CHANNELS = 6

_STYLE = {
    "font.size": 9,
    "axes.titlesize": 10,
    "axes.titleweight": "bold",
    "axes.labelsize": 9,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "grid.color": "#dddddd",
    "grid.linewidth": 0.6,
    "legend.frameon": False,
    "legend.fontsize": 8,
    "lines.linewidth": 1.3,
    "savefig.dpi": 110,
    "svg.fonttype": "none",
    "svg.hashsalt": "simwave",  # same figure, same SVG bytes
}


class PlotError(SimwaveError):
    """A plot cannot be made or written (bad path or extension, nothing to draw)."""


# ----------------------------------------------------------------------------- output
def check_plot_path(path: str | os.PathLike[str]) -> str:
    """Check a plot target before any work is done; return it as a string.

    Raises
    ------
    PlotError
        Extension other than ``.png`` or ``.svg``, a directory, or a folder that
        does not exist.
    """
    p = os.fspath(path)
    if os.path.isdir(p):
        raise PlotError(f"{p}: is a directory, not a plot file name")
    ext = os.path.splitext(p)[1].lower()
    if ext not in FORMATS:
        shown = ext or "no extension"
        raise PlotError(
            f"{p}: cannot write a plot as {shown}; use a file name ending in .png or .svg"
        )
    from simwave.signals.atomic import check_target_folder

    check_target_folder(p, PlotError)
    return p


def save_figure(fig: Figure, path: str | os.PathLike[str]) -> str:
    """Write ``fig`` to ``path`` (PNG or SVG by extension), atomically.

    Returns
    -------
    str
        The path written.

    Raises
    ------
    PlotError
        Bad extension or folder (see :func:`check_plot_path`), or the file cannot
        be written; nothing is left under the target name then.
    """
    from simwave.signals.atomic import atomic_file

    p = check_plot_path(path)
    fmt = FORMATS[os.path.splitext(p)[1].lower()]
    try:
        with atomic_file(p) as tmp, rc_context(_STYLE):
            fig.savefig(tmp, format=fmt)
    except SimwaveError as exc:
        raise PlotError(str(exc)) from None
    return p


def _new_figure(size: tuple[float, float]) -> Figure:
    fig = Figure(figsize=size, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


# ----------------------------------------------------------------------------- number text
_PREFIXES = ((1.0, ""), (1e-3, "m"), (1e-6, "\u00b5"), (1e-9, "n"))


def time_scale(span_s: float) -> tuple[float, str]:
    """(factor, unit) to show times of about ``span_s`` seconds: s, ms, µs or ns."""
    for scale, prefix in _PREFIXES:
        if abs(span_s) >= scale:
            return 1.0 / scale, prefix + "s"
    return 1e9, "ns"


def format_seconds(value: float | None, digits: int = 3) -> str:
    """A time as text with an SI prefix, e.g. ``29.3 ms`` (``n/a`` for None)."""
    if value is None or not math.isfinite(value):
        return "n/a"
    if value == 0:
        return "0 s"
    factor, unit = time_scale(value)
    return f"{value * factor:.{digits}g} {unit}"


def format_hz(value: float) -> str:
    """A frequency as text, e.g. ``50 Hz``, ``1.5 kHz``."""
    for scale, prefix in ((1e9, "G"), (1e6, "M"), (1e3, "k")):
        if abs(value) >= scale:
            return f"{value / scale:.4g} {prefix}Hz"
    return f"{value:.4g} Hz"


def _with_unit(label: str, unit: str) -> str:
    return f"{label} ({unit})" if unit else label


# ----------------------------------------------------------------------------- inputs
def _as_waveform(source: Any, read_options: Mapping[str, Any] | None, what: str):
    from simwave.signals.waveform import Waveform

    if isinstance(source, Waveform):
        return source
    if isinstance(source, (str, os.PathLike)):
        import simwave

        return simwave.read(os.fspath(source), **dict(read_options or {}))
    raise PlotError(f"{what} must be a Waveform or a file path, got {type(source).__name__}")


def metrics_dict(metrics: Any) -> dict | None:
    """The measurement dictionary from any of the forms simwave hands out.

    Accepts a :class:`simwave.measure.MeasurementResult`, its ``to_dict()``, the
    ``{"run": ..., "metrics": ...}`` dictionary of :func:`simwave.run.execute`
    (and the JSON file ``simwave run --metrics`` writes), or a path to either JSON
    file. Returns None for None.
    """
    if metrics is None:
        return None
    if isinstance(metrics, (str, os.PathLike)):
        p = os.fspath(metrics)
        try:
            with open(p, encoding="utf-8") as fh:
                metrics = json.load(fh)
        except OSError as exc:
            raise PlotError(f"metrics file {p}: cannot be read ({exc.strerror})") from None
        except ValueError as exc:
            raise PlotError(f"metrics file {p}: not valid JSON ({exc})") from None
    if hasattr(metrics, "to_dict") and not isinstance(metrics, Mapping):
        metrics = metrics.to_dict()
    if not isinstance(metrics, Mapping):
        raise PlotError(f"metrics must be a measurement dictionary, got {type(metrics).__name__}")
    if "channels" not in metrics and isinstance(metrics.get("metrics"), Mapping):
        metrics = metrics["metrics"]
    if "channels" not in metrics:
        raise PlotError("metrics: no 'channels' list; pass a simwave.measure result")
    return dict(metrics)


def _envelope(t: np.ndarray, y: np.ndarray, max_points: int = MAX_POINTS):
    """At most ``max_points`` points that keep every bucket's minimum and maximum."""
    n = y.size
    if n <= max_points:
        return t, y
    buckets = max_points // 2
    edges = np.linspace(0, n, buckets + 1).astype(np.int64)
    lo = np.minimum.reduceat(y, edges[:-1])
    hi = np.maximum.reduceat(y, edges[:-1])
    tt = np.repeat(t[edges[:-1]], 2)
    yy = np.empty(2 * buckets)
    yy[0::2], yy[1::2] = lo, hi
    return tt, yy


def _column(wave, name: str | None, fallback: int | None):
    """Channel ``name`` of ``wave`` (by name, else by position ``fallback``), or None."""
    if wave is None:
        return None
    if name is not None and name in wave.channels:
        return wave.data[:, wave.channels.index(name)]
    if fallback is not None and 0 <= fallback < wave.n_channels:
        return wave.data[:, fallback]
    return None


def _pick_channel(chans: list[dict], channel: int | str | None) -> int:
    if channel is None:
        for i, ch in enumerate(chans):
            if ch.get("transitions"):
                return i
        return 0
    names = [c.get("name") for c in chans]
    if isinstance(channel, str) and channel in names:
        return names.index(channel)
    try:
        i = int(channel)
    except (TypeError, ValueError):
        raise PlotError(
            f"no measured channel {channel!r}; the channels are {', '.join(map(str, names))}"
        ) from None
    if not -len(chans) <= i < len(chans):
        raise PlotError(f"channel index {i} out of range: {len(chans)} measured channel(s)")
    return i % len(chans)


# ----------------------------------------------------------------------------- time plot
def plot_run(
    output: Any,
    input: Any = None,  # noqa: A002 - the trade's word for the stimulus
    metrics: Any = None,
    path: str | os.PathLike[str] | None = None,
    *,
    channel: int | str | None = None,
    transition: int = 0,
    read_options: Mapping[str, Any] | None = None,
    input_read_options: Mapping[str, Any] | None = None,
    title: str | None = None,
) -> Figure:
    """Input and output over time, and a close-up of one measured transition.

    Top: one panel per measured channel with the input and the output overlaid.
    Bottom (when the chosen channel has transitions): the chosen transition with
    its state levels, the reference levels (10/50/90 % by default), the
    rise- or fall-time span and the overshoot peak; beside it the settling
    detail with the settling band and the settling instant. All drawn values are
    read from ``metrics``.

    Parameters
    ----------
    output : Waveform or path
        The output record (a file is read whole).
    input : Waveform, path or None
        The input that produced it (the reference of the measurement). When the
        measurement took its input from a channel of ``output`` that channel is
        used.
    metrics : dict, MeasurementResult, path or None
        The measurement of ``output`` (:func:`simwave.measure` result, its
        ``to_dict()``, the ``{"run", "metrics"}`` dict of
        :func:`simwave.run.execute`, or such a JSON file). None: measured here
        with default options.
    path : path, optional
        Write the figure there (``.png`` or ``.svg``).
    channel : int or str, optional
        Measured channel to close in on (name or index among the measured
        channels); default the first with transitions.
    transition : int
        Index of the transition in that channel's list (default the first).
    read_options, input_read_options : dict, optional
        Reader options (``rate``, ``dataset``, ...) for file ``output`` / ``input``.
    title : str, optional
        Figure title.

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    PlotError
        Bad path or extension, a channel or transition that does not exist.

    References
    ----------
    .. [1] IEEE Std 181-2011, *IEEE Standard for Transitions, Pulses, and Related
           Waveforms*: state levels, reference levels, transition duration,
           overshoot, settling.
    """
    if path is not None:
        check_plot_path(path)
    out = _as_waveform(output, read_options, "output")
    inp = _as_waveform(input, input_read_options, "input") if input is not None else None
    data = metrics_dict(metrics)
    if data is None:
        import simwave

        data = simwave.measure(out, reference=inp).to_dict()
    chans = list(data.get("channels") or [])
    if not chans:
        raise PlotError("the measurement has no channels to draw")
    chosen = _pick_channel(chans, channel)
    ch = chans[chosen]
    rows = ch.get("transitions") or []
    if rows and not -len(rows) <= transition < len(rows):
        raise PlotError(
            f"transition {transition} does not exist: channel {ch.get('name')} has "
            f"{len(rows)} transition(s) (0 to {len(rows) - 1})"
        )
    row = rows[transition] if rows else None
    shown = list(range(len(chans)))[:MAX_CHANNELS]
    if chosen not in shown:
        shown[-1] = chosen

    with rc_context(_STYLE):
        n_top = len(shown)
        fig = _new_figure((9.0, 2.1 * n_top + (3.4 if row else 0.4)))
        heights = [1.0] * n_top + ([1.55] if row else [])
        grid = fig.add_gridspec(len(heights), 2, height_ratios=heights, width_ratios=[1.5, 1])
        t = out.time
        nxt = rows[transition + 1] if row and transition % len(rows) + 1 < len(rows) else None
        limit = float(nxt["start_s"]) if nxt else float(t[-1])
        window = _zoom_window(row, t, limit) if row else None
        first_ax = None
        for k, ci in enumerate(shown):
            c = chans[ci]
            ax = fig.add_subplot(grid[k, :], sharex=first_ax)
            first_ax = first_ax or ax
            y = _column(out, c.get("name"), ci)
            x = _input_column(inp, out, c)
            unit = c.get("unit") or ""
            ax_in = _input_axes(ax, x, y, _input_unit(inp, out, c))
            if x is not None:
                ax_in.plot(*_envelope(t, x), color=INPUT_COLOR, lw=0.9, label="input",
                           gid="input")
            if y is not None:
                ax.plot(*_envelope(t, y), color=OUTPUT_COLOR, label="output", gid="output")
            ax.set_ylabel(_with_unit(str(c.get("name")), unit))
            if ci == chosen and window is not None:
                ax.axvspan(window[0], window[1], color=RISE_COLOR, alpha=0.15, lw=0,
                           gid="zoom-window")
            if k == 0:
                handles, labels = _handles(ax, ax_in)
                ax.legend(handles, labels, loc="lower right", bbox_to_anchor=(1.0, 1.0), ncol=2)
            if k == n_top - 1:
                ax.set_xlabel("time (s)")
            else:
                ax.tick_params(labelbottom=False)
        if row:
            _draw_transition(fig.add_subplot(grid[n_top, 0]), fig.add_subplot(grid[n_top, 1]),
                             out, inp, ch, chosen, row, transition % len(rows), window, limit)
        elif ch.get("kind") not in (None, "transitions"):
            fig.text(0.01, 0.005, f"channel {ch.get('name')}: {ch.get('kind')} signal, no "
                     "transition to close in on", fontsize=8, color=LEVEL_COLOR)
        fig.suptitle(title or _run_title(data, out), fontsize=11, fontweight="bold")
    if path is not None:
        save_figure(fig, path)
    return fig


def _run_title(data: Mapping[str, Any], out) -> str:
    src = (data.get("source") or {}).get("output")
    name = out.attrs.get("system_name") or (os.path.basename(str(src)) if src else None)
    return f"{name}: input and output" if name else "input and output"


def _input_column(inp, out, c: Mapping[str, Any]):
    name = c.get("input_channel")
    if name is None:
        return None
    if inp is not None:
        col = _column(inp, name, 0 if inp.n_channels == 1 else None)
        if col is not None:
            return col
    return _column(out, name, None)


def _input_unit(inp, out, c: Mapping[str, Any]) -> str:
    name = c.get("input_channel")
    for wave in (inp, out):
        if wave is not None and name in wave.channels:
            return wave.units[wave.channels.index(name)]
    if inp is not None and inp.n_channels == 1:
        return inp.units[0]
    return ""


#: The input gets its own (right-hand) axis when its range and the output's differ
#: by more than this factor: a gain of 100 would flatten it to a line otherwise.
SCALE_RATIO = 3.0


def _input_axes(ax, x, y, unit: str):
    """``ax`` itself, or a right-hand twin axis for an input of a very different range."""
    if x is None or y is None or x.size == 0 or y.size == 0:
        return ax
    rx = float(np.ptp(x)) or float(np.max(np.abs(x))) or 1.0
    ry = float(np.ptp(y)) or float(np.max(np.abs(y))) or 1.0
    if 1.0 / SCALE_RATIO <= rx / ry <= SCALE_RATIO:
        return ax
    twin = ax.twinx()
    twin.spines["right"].set_visible(True)
    twin.grid(False)
    twin.set_ylabel(_with_unit("input, right axis", unit), color=INPUT_COLOR, fontsize=8)
    twin.tick_params(axis="y", colors=INPUT_COLOR, labelsize=7)
    return twin


def _handles(ax, ax_in):
    handles, labels = ax.get_legend_handles_labels()
    if ax_in is not ax:
        h2, l2 = ax_in.get_legend_handles_labels()
        handles, labels = h2 + handles, l2 + labels
    return handles, labels


def _num_or(value: Any, default: float) -> float:
    return float(value) if isinstance(value, (int, float)) else float(default)


def _instant(row: Mapping[str, Any], key: str) -> float:
    """A transition instant, falling back to its 50 % instant (and the others) when the
    measurement gives none (null with a reason)."""
    for k in (key, "crossing_50_s", "start_s", "end_s", "time_origin_s"):
        if isinstance(row.get(k), (int, float)):
            return float(row[k])
    return 0.0


def _value_text(row: Mapping[str, Any], key: str, text) -> str:
    """``text(value)`` marked as a bound, or ``n/a`` when the value is missing."""
    from simwave.measure.result import marked, row_bound

    v = row.get(key)
    return marked(v, row_bound(dict(row), key), text(v) if v is not None else "")


def _zoom_window(row: Mapping[str, Any], t: np.ndarray, limit: float):
    """(start, end) in seconds around one transition: origin, peak and settling included,
    not past ``limit`` (the next transition's start, or the end of the record)."""
    start, end = _instant(row, "start_s"), _instant(row, "end_s")
    origin = _num_or(row.get("time_origin_s"), start)
    dur = max(end - start, 1e-12)
    lo = min(origin, start) - max(dur, 0.15 * (end - min(origin, start)))
    hi = end + 2.0 * dur
    if row.get("peak_time_s") is not None:
        hi = max(hi, origin + float(row["peak_time_s"]) + dur)
    if row.get("settled_at_s") is not None:
        settled = float(row["settled_at_s"])
        hi = max(hi, settled + 0.25 * (settled - lo))
    return max(lo, float(t[0])), min(hi, limit, float(t[-1]))


def _draw_transition(ax, ax_settle, out, inp, ch, ci, row, index, window, limit) -> None:
    t = out.time
    lo_s, hi_s = window
    factor, unit = time_scale(hi_s - lo_s)
    origin = _num_or(row.get("time_origin_s"), _instant(row, "start_s"))
    sel = (t >= lo_s) & (t <= hi_s)
    tt = (t[sel] - origin) * factor
    y = _column(out, ch.get("name"), ci)
    x = _input_column(inp, out, ch)
    vunit = ch.get("unit") or ""
    name = ch.get("name")
    is_rise = "rise_time_s" in row
    dur_key = "rise_time_s" if is_rise else "fall_time_s"
    dur_word = "rise time" if is_rise else "fall time"
    # the transition's own state and reference levels when the measurement gives them
    # (input-aligned segments), else the channel's
    levels = row.get("state_levels") or ch.get("state_levels") or {}
    refs = row.get("reference_levels") or ch.get("reference_levels") or {}

    ax_in = _input_axes(ax, x, y, _input_unit(inp, out, ch))
    if x is not None:
        ax_in.plot(tt, x[sel], color=INPUT_COLOR, lw=0.9, label="input", gid="input")
    ax.plot(tt, y[sel], color=OUTPUT_COLOR, label="output", gid="output")
    # state levels (as measured: histogram, min/max or segment ends)
    for key, word, dy, va in (("low", "low state", 2, "bottom"), ("high", "high state", -2, "top")):
        if levels.get(key) is not None:
            ax.axhline(levels[key], color=LEVEL_COLOR, ls="--", lw=0.8, gid=f"state-{key}")
            ax.annotate(f"{word} {levels[key]:.6g}", xy=(1.0, levels[key]),
                        xycoords=("axes fraction", "data"), xytext=(-2, dy),
                        textcoords="offset points", ha="right", va=va, fontsize=7,
                        color=LEVEL_COLOR)
    # reference levels
    for key in ("low", "mid", "high"):
        if refs.get(key) is not None:
            ax.axhline(refs[key], color=LEVEL_COLOR, ls=":", lw=0.8, gid=f"reference-{key}")
            ax.annotate(f"{refs.get(key + '_pct', ''):g} %", xy=(0.0, refs[key]),
                        xycoords=("axes fraction", "data"), xytext=(2, 2),
                        textcoords="offset points", ha="left", va="bottom", fontsize=7,
                        color=LEVEL_COLOR)
    # rise / fall time span: from the start to the end instant of the transition
    start = (_instant(row, "start_s") - origin) * factor
    end = (_instant(row, "end_s") - origin) * factor
    y_mid = refs.get("mid", 0.5 * (levels.get("low", 0.0) + levels.get("high", 1.0)))
    ax.plot([start, end], [y_mid, y_mid], color=RISE_COLOR, lw=2.4, solid_capstyle="butt",
            marker="|", markersize=10, gid="rise-time-span", label=dur_word)
    if refs.get("low") is not None and refs.get("high") is not None:
        first, last = (refs["low"], refs["high"]) if is_rise else (refs["high"], refs["low"])
        ax.plot([start, start], [first, y_mid], color=RISE_COLOR, lw=0.8, ls="-")
        ax.plot([end, end], [y_mid, last], color=RISE_COLOR, lw=0.8, ls="-")
    ax.annotate(f"{dur_word} {_value_text(row, dur_key, format_seconds)}", xy=(end, y_mid),
                xytext=(6, -10 if is_rise else 4), textcoords="offset points", fontsize=8,
                color="#8a5d00", gid="rise-time-text")
    # time origin of peak and settling times
    ax.axvline(0.0, color=LEVEL_COLOR, lw=0.6, ls="-.", gid="time-origin")
    # overshoot peak (peak_time_s counts from the time origin)
    over = f"overshoot {_value_text(row, 'overshoot_pct', lambda v: f'{v:.3g} %')}"
    if row.get("peak_time_s") is not None and row.get("peak_value") is not None:
        tp = float(row["peak_time_s"]) * factor
        ax.plot([tp], [row["peak_value"]], ls="none", marker="v" if is_rise else "^",
                color=PEAK_COLOR, markersize=7, gid="overshoot-peak", label="peak")
        ax.annotate(over, xy=(tp, row["peak_value"]), xytext=(8, 6 if is_rise else -12),
                    textcoords="offset points", fontsize=8, color=PEAK_COLOR,
                    gid="overshoot-text")
    else:
        ax.text(0.02, 0.95, over, transform=ax.transAxes, va="top", fontsize=8,
                color=PEAK_COLOR, gid="overshoot-text")
    ax.set_xlim(tt[0] if tt.size else None, tt[-1] if tt.size else None)
    ax.set_xlabel(f"time from the {row.get('time_origin', 'time origin')} ({unit})", fontsize=8)
    ax.set_ylabel(_with_unit(str(name), vunit))
    ax.set_title(f"{name}: transition {index} ({row.get('direction', '')})", loc="left")
    handles, labels = _handles(ax, ax_in)
    ax.legend(handles, labels, loc="lower right" if is_rise else "upper right",
              bbox_to_anchor=(1.0, 0.08) if is_rise else (1.0, 0.92), fontsize=7)

    _draw_settling(ax_settle, out, ch, ci, row, origin, factor, unit, levels, limit)


def _draw_settling(ax, out, ch, ci, row, origin, factor, unit, levels, limit) -> None:
    t = out.time
    y = _column(out, ch.get("name"), ci)
    final = row.get("final_level")
    band_pct = row.get("settling_band_pct")
    amplitude = levels.get("amplitude")
    settled = row.get("settled_at_s")
    if final is None or band_pct is None or amplitude is None:
        why = (row.get("null_reasons") or {}).get("settling_time_s") or "no final level"
        ax.text(0.02, 0.95, "settling time n/a: " + textwrap.fill(str(why), 48),
                transform=ax.transAxes, va="top", fontsize=7, color=PEAK_COLOR,
                gid="settling-text")
        ax.set_axis_off()
        return
    band = band_pct / 100.0 * amplitude  # the band as simwave.measure defines it
    t_from = _instant(row, "end_s")
    t_to = float(settled) if settled is not None else limit
    t_to = min(limit, t_to + 0.3 * max(t_to - t_from, 0.0))
    sel = (t >= t_from) & (t <= t_to)
    ax.axhspan(final - band, final + band, color=SETTLE_COLOR, alpha=0.18, lw=0,
               gid="settling-band", label=f"\u00b1{band_pct:g} % band")
    ax.axhline(final, color=LEVEL_COLOR, ls="--", lw=0.7)
    ax.plot((t[sel] - origin) * factor, y[sel], color=OUTPUT_COLOR, gid="output")
    span = 6.0 * band
    ax.set_ylim(final - span, final + span)
    if settled is not None:
        ts = (float(settled) - origin) * factor
        ax.axvline(ts, color=SETTLE_COLOR, lw=1.6, gid="settling-instant")
        ax.annotate(f"settled {_value_text(row, 'settling_time_s', format_seconds)}",
                    xy=(ts, final + span),
                    xytext=(-4, -12), textcoords="offset points", ha="right", fontsize=8,
                    color="#006b4f", gid="settling-text")
    else:
        text = f"settling time n/a: not settled within \u00b1{band_pct:g} %"
        if row.get("settling_time_s") is not None:  # a bound, without a settling instant
            text = f"settling time {_value_text(row, 'settling_time_s', format_seconds)}"
        ax.text(0.02, 0.95, text, transform=ax.transAxes,
                va="top", fontsize=8, color=PEAK_COLOR, gid="settling-text")
    if sel.any():
        ax.set_xlim((t_from - origin) * factor, (t_to - origin) * factor)
    vunit = ch.get("unit") or ""
    ax.set_xlabel(f"time from the {row.get('time_origin', 'time origin')} ({unit})", fontsize=8)
    ax.set_ylabel(_with_unit("near the final level", vunit), fontsize=8)
    ax.set_title("settling", loc="left")
    ax.legend(loc="lower right", fontsize=7)


# ----------------------------------------------------------------------------- frequency plot
def _frequency_grid(system, rate: float | None, f_range_hz) -> tuple[np.ndarray, float, float]:
    if f_range_hz is not None:
        lo, hi = (float(v) for v in f_range_hz)
        if not (0 < lo < hi and math.isfinite(hi)):
            raise PlotError(f"frequency range must be 0 < low < high Hz, got {f_range_hz!r}")
    else:
        roots = np.concatenate([np.atleast_1d(system.poles), np.atleast_1d(system.zeros)])
        mags = np.abs(roots[np.abs(roots) > 0]) / (2 * math.pi)
        if mags.size:
            lo, hi = float(mags.min()) / 30.0, float(mags.max()) * 30.0
            lo = max(lo, sys.float_info.min)  # not 0 Hz for a root at a subnormal frequency
        else:
            lo, hi = 1.0, 1e4
        if rate is not None:
            hi = max(hi, rate)  # past Nyquist: where the analog response goes on
    return np.geomspace(lo, hi, 1200), lo, hi


def _db(h: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        db = 20.0 * np.log10(np.abs(h))
    db[~np.isfinite(db)] = np.nan
    return db


def _phase_deg(h: np.ndarray) -> np.ndarray:
    ok = np.isfinite(h) & (h != 0)
    out = np.full(h.shape, np.nan)
    if ok.any():
        out[ok] = np.degrees(np.unwrap(np.angle(h[ok])))
    return out


def plot_frequency(
    system: Any,
    path: str | os.PathLike[str] | None = None,
    *,
    rate: float | None = None,
    method: str = "ramp-invariant",
    discrete: Any = None,
    f_range_hz: Sequence[float] | None = None,
    title: str | None = None,
    **discretize_options: Any,
) -> Figure:
    """Magnitude and phase of H(j2πf), of its discrete model, and the pole-zero maps.

    Left: magnitude (dB) and unwrapped phase (degrees) against frequency on a log
    axis, the analog response and (with ``rate`` or ``discrete``) the discrete
    model's response on the same axes, the Nyquist frequency marked. Right: the
    s-plane pole-zero map and, for a discrete model, the z-plane map with the
    unit circle. Poles are drawn as ×, zeros as ○ (the usual convention).

    Parameters
    ----------
    system : simwave.System
        The analog system.
    path : path, optional
        Write the figure there (``.png`` or ``.svg``).
    rate : float, optional
        Sample rate (Hz) of a discrete model made here with ``method`` and
        ``discretize_options`` (``prewarp_hz``, ``match_hz``, ``delay_s``).
    method : str
        Discretization method for ``rate`` (default ``ramp-invariant``).
    discrete : DiscreteSystem, optional
        A discrete model already made (its own rate and method are used).
    f_range_hz : (low, high), optional
        Frequency axis range in Hz (default: from the poles and zeros, up to
        Nyquist).
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure

    References
    ----------
    .. [1] A. V. Oppenheim and R. W. Schafer, *Discrete-Time Signal Processing*,
           3rd ed., Pearson, 2010, sec. 5.1-5.3 (frequency response, pole-zero
           plots, the unit circle); section numbers from memory.
    """
    if path is not None:
        check_plot_path(path)
    if discrete is None and rate is not None:
        discrete = system.discretize(float(rate), method, **discretize_options)
    d_rate = float(discrete.rate) if discrete is not None else None
    f, lo, hi = _frequency_grid(system, d_rate, f_range_hz)
    h_a = system.frequency_response(f)
    name = getattr(system, "name", None) or "H(s)"

    with rc_context(_STYLE):
        fig = _new_figure((10.0, 6.2))
        grid = fig.add_gridspec(2, 2, width_ratios=[1.75, 1])
        ax_m = fig.add_subplot(grid[0, 0])
        ax_p = fig.add_subplot(grid[1, 0], sharex=ax_m)
        ax_m.semilogx(f, _db(h_a), color=OUTPUT_COLOR, label="analog H(j2\u03c0f)", gid="analog")
        ax_p.semilogx(f, _phase_deg(h_a), color=OUTPUT_COLOR, label="analog", gid="analog")
        if discrete is not None:
            nyq = d_rate / 2.0
            fd = f[f < nyq * (1 - 1e-9)]
            h_d = discrete.frequency_response(fd)
            label = f"discrete, {discrete.method} at {format_hz(d_rate)}"
            ax_m.semilogx(fd, _db(h_d), color=PEAK_COLOR, ls="--", label=label, gid="discrete")
            ax_p.semilogx(fd, _phase_deg(h_d), color=PEAK_COLOR, ls="--", label="discrete",
                          gid="discrete")
            for ax in (ax_m, ax_p):
                if lo <= nyq <= hi:
                    ax.axvline(nyq, color=LEVEL_COLOR, lw=0.9, ls=":", gid="nyquist")
            if lo <= nyq <= hi:
                ax_m.annotate(f"Nyquist {format_hz(nyq)}", xy=(nyq, 1.0),
                              xycoords=("data", "axes fraction"), xytext=(-3, -3),
                              textcoords="offset points", ha="right", va="top", fontsize=7,
                              color=LEVEL_COLOR)
        db = _db(h_a)
        top = np.nanmax(db) if np.isfinite(db).any() else 0.0
        bottom = np.nanmin(db) if np.isfinite(db).any() else -100.0
        ax_m.set_ylim(max(bottom, top - 140.0) - 5.0, top + 10.0)
        ax_m.set_ylabel("magnitude (dB)")
        ax_m.set_title(f"{name}: frequency response", loc="left")
        ax_m.legend(loc="lower left")
        ax_m.tick_params(labelbottom=False)
        ax_p.set_ylabel("phase (degrees, unwrapped)")
        ax_p.set_xlabel("frequency (Hz)")
        ax_p.set_xlim(lo, hi)

        if discrete is not None:
            _draw_s_plane(fig.add_subplot(grid[0, 1]), system)
            _draw_z_plane(fig.add_subplot(grid[1, 1]), discrete)
        else:
            _draw_s_plane(fig.add_subplot(grid[:, 1]), system)
        if title:
            fig.suptitle(title, fontsize=11, fontweight="bold")
    if path is not None:
        save_figure(fig, path)
    return fig


def _roots_with_counts(roots: np.ndarray, tol: float) -> list[tuple[complex, int]]:
    """Coincident roots merged, with their multiplicity (to label stacked markers)."""
    out: list[tuple[complex, int]] = []
    for r in np.atleast_1d(roots).astype(np.complex128):
        for i, (v, n) in enumerate(out):
            if abs(v - r) <= tol:
                out[i] = (v, n + 1)
                break
        else:
            out.append((complex(r), 1))
    return out


def _mark_roots(ax, roots, marker: str, color: str, label: str, gid: str, scale: float) -> None:
    merged = _roots_with_counts(np.asarray(roots), 1e-6 * max(scale, 1e-30))
    if not merged:
        return
    xs = [v.real for v, _ in merged]
    ys = [v.imag for v, _ in merged]
    style = {"mfc": "none"} if marker == "o" else {}
    ax.plot(xs, ys, ls="none", marker=marker, color=color, markersize=8, mew=1.6, label=label,
            gid=gid, **style)
    for v, n in merged:
        if n > 1:
            ax.annotate(f"\u00d7{n}", xy=(v.real, v.imag), xytext=(5, 4),
                        textcoords="offset points", fontsize=7, color=color)


def _draw_s_plane(ax, system) -> None:
    poles, zeros = np.atleast_1d(system.poles), np.atleast_1d(system.zeros)
    finite = np.concatenate([poles, zeros]).astype(np.complex128)
    scale = float(np.max(np.abs(finite))) if finite.size else 1.0
    ax.axhline(0, color=LEVEL_COLOR, lw=0.6)
    ax.axvline(0, color=LEVEL_COLOR, lw=0.6)
    _mark_roots(ax, poles, "x", OUTPUT_COLOR, "poles", "s-poles", scale)
    _mark_roots(ax, zeros, "o", PEAK_COLOR, "zeros", "s-zeros", scale)
    # keep the origin and the imaginary axis in view, and some room around the roots
    lim = 1.15 * (scale or 1.0)
    ax.plot([-lim, 0.2 * lim], [-lim, lim], ls="none")
    ax.set_aspect("equal", adjustable="datalim")
    ax.set_xlabel("real part \u03c3 (rad/s)")
    ax.set_ylabel("imaginary part \u03c9 (rad/s)")
    ax.set_title("s-plane (\u00d7 poles, \u25cb zeros)", loc="left", fontsize=9)
    ax.ticklabel_format(style="sci", scilimits=(-3, 4))


#: Half-width of the z-plane view: the unit circle and a little around it.
Z_VIEW = 1.35


def _draw_z_plane(ax, discrete) -> None:
    zeros, poles, _ = discrete.zpk
    ax.add_patch(Circle((0, 0), 1.0, fill=False, color=LEVEL_COLOR, lw=0.9, ls="--",
                        gid="unit-circle"))
    ax.axhline(0, color=LEVEL_COLOR, lw=0.6)
    ax.axvline(0, color=LEVEL_COLOR, lw=0.6)
    _mark_roots(ax, poles, "x", OUTPUT_COLOR, "poles", "z-poles", 1.0)
    _mark_roots(ax, zeros, "o", PEAK_COLOR, "zeros", "z-zeros", 1.0)
    outside = [(w, v) for w, roots in (("pole", poles), ("zero", zeros))
               for v, _ in _roots_with_counts(np.asarray(roots), 1e-9)
               if abs(v) > Z_VIEW]
    if outside:
        text = "outside the view: " + ", ".join(
            f"{w} at z = {v.real:.4g}" + (f"{v.imag:+.3g}j" if v.imag else "")
            for w, v in outside[:4]) + (" ..." if len(outside) > 4 else "")
        ax.text(0.02, 0.02, text, transform=ax.transAxes, fontsize=7, color=LEVEL_COLOR,
                gid="z-outside")
    ax.set_xlim(-Z_VIEW, Z_VIEW)
    ax.set_ylim(-Z_VIEW, Z_VIEW)
    ax.set_aspect("equal", adjustable="box")
    ax.set_xlabel("real part of z")
    ax.set_ylabel("imaginary part of z")
    ax.set_title(f"z-plane, {discrete.method} model", loc="left", fontsize=9)


# ----------------------------------------------------------------------------- batch chart
#: Axis labels of summary metric columns (units added by the chart).
METRIC_LABELS = {
    "overshoot_pct_worst": ("overshoot, worst", "%"),
    "undershoot_pct_worst": ("undershoot, worst", "%"),
    "preshoot_pct_worst": ("preshoot, worst", "%"),
    "settling_time_s_longest": ("settling time, longest", "s"),
    "rise_time_s_mean": ("rise time, mean", "s"),
    "fall_time_s_mean": ("fall time, mean", "s"),
    "delay_s_mean": ("delay, mean", "s"),
    "peak_time_s_first": ("peak time, first", "s"),
    "gain_db": ("gain at the sine frequency", "dB"),
    "predicted_gain_db": ("predicted gain at the sine frequency", "dB"),
    "phase_deg": ("phase at the sine frequency", "degrees"),
    "thd_pct": ("THD", "%"),
    "sinad_db": ("SINAD", "dB"),
    "steady_state_error": ("steady-state error", ""),
    "ripple_pp": ("ripple, peak to peak", ""),
    "record_peak": ("output peak |y|", ""),
    "tone_gain_error_db_worst": ("gain vs H(s), worst", "dB"),
    "not_settled": ("transitions never settled", ""),
    "flags": ("differences from H(s) flagged", ""),
}


def summary_rows(summary: Any) -> list[dict]:
    """Batch summary rows from a BatchResult, a list of dicts, or summary.json / summary.csv."""
    if hasattr(summary, "rows") and not isinstance(summary, (str, os.PathLike)):
        return [dict(r) for r in summary.rows]
    if isinstance(summary, (str, os.PathLike)):
        p = os.fspath(summary)
        try:
            with open(p, encoding="utf-8", newline="") as fh:
                if p.lower().endswith(".csv"):
                    return [{k: _csv_value(v) for k, v in r.items()} for r in csv.DictReader(fh)]
                doc = json.load(fh)
        except OSError as exc:
            raise PlotError(f"batch summary {p}: cannot be read ({exc.strerror})") from None
        except ValueError as exc:
            raise PlotError(f"batch summary {p}: not valid JSON ({exc})") from None
        if not isinstance(doc, Mapping) or not isinstance(doc.get("rows"), list):
            raise PlotError(f"batch summary {p}: no 'rows' list (is it a simwave batch summary?)")
        return [dict(r) for r in doc["rows"]]
    if isinstance(summary, Sequence):
        return [dict(r) for r in summary]
    raise PlotError(f"batch summary must be rows or a summary file, got {type(summary).__name__}")


def _csv_value(text: str | None) -> Any:
    if text is None or text == "":
        return None
    try:
        return float(text)
    except ValueError:
        return text


def _short(label: str) -> str:
    return os.path.basename(str(label).rstrip("/")) or str(label)


def plot_batch(
    summary: Any,
    path: str | os.PathLike[str] | None = None,
    *,
    metrics: Sequence[str] = ("overshoot_pct_worst", "settling_time_s_longest"),
    title: str | None = None,
) -> Figure:
    """Compare candidate systems: each metric across the inputs, one bar per system.

    One panel per metric; inputs along the axis, a bar per system in a fixed
    colour, the value written on each bar. Inputs where no system has a value for
    a metric are left out of that panel; a missing value beside others is marked
    "n/a".

    Parameters
    ----------
    summary : BatchResult, list of dict, or path
        Summary rows (``simwave batch``'s summary.json or summary.csv, or the
        rows of :func:`simwave.batch.run_batch`'s result). Rows whose status is
        not ``ok`` are skipped.
    path : path, optional
        Write the figure there (``.png`` or ``.svg``).
    metrics : sequence of str
        Summary metric columns, e.g. ``overshoot_pct_worst``,
        ``settling_time_s_longest``, ``gain_db``.
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure
    """
    if path is not None:
        check_plot_path(path)
    rows = [r for r in summary_rows(summary) if r.get("status") in (None, "ok")]
    if not rows:
        raise PlotError("the batch summary has no finished (status ok) rows to draw")
    metrics = list(metrics)
    if not metrics:
        raise PlotError("give at least one metric to chart")
    unknown = [m for m in metrics if not any(m in r for r in rows)]
    if unknown:
        raise PlotError(f"no summary column {unknown[0]!r}; columns include "
                        f"{', '.join(sorted(METRIC_LABELS))}")
    systems: list[str] = []
    inputs: list[str] = []
    multi = len({r.get("channel") for r in rows}) > 1
    for r in rows:
        if str(r.get("system")) not in systems:
            systems.append(str(r.get("system")))
        key = _short(r.get("input")) + (f" / {r.get('channel')}" if multi else "")
        if key not in inputs:
            inputs.append(key)
    values: dict[tuple[str, str, str], float | None] = {}
    unsettled: set[tuple[str, str]] = set()
    for r in rows:
        key = _short(r.get("input")) + (f" / {r.get('channel')}" if multi else "")
        for m in metrics:
            v = r.get(m)
            values[(m, key, str(r.get("system")))] = (
                float(v) if isinstance(v, (int, float)) and math.isfinite(v) else None)
        if isinstance(r.get("not_settled"), (int, float)) and r["not_settled"] > 0:
            unsettled.add((key, str(r.get("system"))))

    with rc_context(_STYLE):
        fig = _new_figure((max(7.0, 1.5 + 1.3 * len(inputs) * max(1, len(systems)) / 2),
                           1.0 + 2.6 * len(metrics)))
        axes = fig.subplots(len(metrics), 1, squeeze=False)[:, 0]
        for ax, m in zip(axes, metrics, strict=True):
            _bar_panel(ax, m, inputs, systems, values, unsettled)
        handles, labels = axes[0].get_legend_handles_labels()
        for ax in axes[1:]:
            for h, lbl in zip(*ax.get_legend_handles_labels(), strict=True):
                if lbl not in labels:
                    handles.append(h)
                    labels.append(lbl)
        fig.legend(handles, labels, loc="outside lower center", ncol=len(labels))
        fig.suptitle(title or "candidate systems compared across inputs", fontsize=11,
                     fontweight="bold")
    if path is not None:
        save_figure(fig, path)
    return fig


def _bar_panel(ax, metric: str, inputs: list[str], systems: list[str], values,
               unsettled: set[tuple[str, str]]) -> None:
    label, unit = METRIC_LABELS.get(metric, (metric, ""))
    shown = [i for i in inputs if any(values.get((metric, i, s)) is not None for s in systems)]
    factor = 1.0
    if unit == "s":
        biggest = max((abs(values[(metric, i, s)]) for i in shown for s in systems
                       if values.get((metric, i, s)) is not None), default=1.0)
        factor, unit = time_scale(biggest)
    ax.set_ylabel({"%": "percent", "": "value"}.get(unit, unit))
    ax.grid(axis="x", visible=False)
    if not shown:
        ax.text(0.5, 0.5, f"no values of {metric}", transform=ax.transAxes, ha="center",
                va="center", color=LEVEL_COLOR)
        ax.set_xticks([])
        return
    width = 0.8 / max(1, len(systems))
    x = np.arange(len(shown))
    for k, s in enumerate(systems):
        color = SERIES[k % len(SERIES)]
        vals = [values.get((metric, i, s)) for i in shown]
        pos = x - 0.4 + width * (k + 0.5)
        heights = [0.0 if v is None else v * factor for v in vals]
        bars = ax.bar(pos, heights, width * 0.92, color=color, label=s, gid=f"bars:{s}")
        for b, v, i in zip(bars, vals, shown, strict=True):
            text = "n/a" if v is None else f"{v * factor:.3g}"
            if v is None and metric.startswith("settling") and (i, s) in unsettled:
                text = "never\nsettled"
            ax.annotate(text, xy=(b.get_x() + b.get_width() / 2, b.get_height()),
                        xytext=(0, 2 if b.get_height() >= 0 else -9),
                        textcoords="offset points", ha="center", fontsize=7)
    ax.axhline(0, color=LEVEL_COLOR, lw=0.7)
    ax.margins(y=0.15)
    ax.set_xticks(x, shown)
    ax.set_title(_with_unit(label, unit), loc="left")


__all__ = [
    "PlotError", "plot_run", "plot_frequency", "plot_batch", "save_figure", "check_plot_path",
    "metrics_dict", "summary_rows", "format_seconds", "OKABE_ITO",
]
