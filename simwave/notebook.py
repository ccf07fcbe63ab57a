"""Rich notebook display: compact HTML tables and small inline plots.

Jupyter and IPython call an object's ``_repr_html_`` to show it (IPython's
rich display protocol); :class:`~simwave.System`, :class:`~simwave.Waveform`,
:class:`~simwave.run.RunReport` and :class:`~simwave.measure.MeasurementResult`
delegate to the functions here. Tables show the values the objects hold, to
the digits given; the plots are drawn with matplotlib's Agg backend as a
small PNG embedded in the HTML, and are left out (the table stays) when
matplotlib cannot draw.
"""

from __future__ import annotations

import base64
import html
import io
import math
from typing import Any, Callable, Sequence

import numpy as np

#: Samples drawn per channel in a waveform's preview (min/max per bucket keeps peaks).
PREVIEW_POINTS = 600
_STYLE = "border-collapse:collapse;font-size:12px"
_CELL = "padding:1px 8px;text-align:left;vertical-align:top"


def _text(value: Any) -> str:
    if value is None:
        return "—"
    if isinstance(value, float):
        return f"{value:.6g}" if math.isfinite(value) else str(value)
    return str(value)


def table(rows: Sequence[Sequence[Any]], header: Sequence[str] | None = None,
          caption: str | None = None) -> str:
    """An HTML table of ``rows`` (values shown to 6 significant digits, None as —)."""
    out = [f'<table style="{_STYLE}">']
    if caption:
        out.append(f'<caption style="text-align:left;font-weight:bold">'
                   f'{html.escape(caption)}</caption>')
    if header:
        out.append("<tr>" + "".join(f'<th style="{_CELL}">{html.escape(str(h))}</th>'
                                    for h in header) + "</tr>")
    for row in rows:
        out.append("<tr>" + "".join(f'<td style="{_CELL}">{html.escape(_text(v))}</td>'
                                    for v in row) + "</tr>")
    out.append("</table>")
    return "".join(out)


def inline_plot(draw: Callable[[Any], None], size: tuple[float, float] = (4.2, 1.8)) -> str:
    """``<img>`` of a small figure drawn by ``draw(axes)``; "" when matplotlib cannot draw."""
    try:
        from matplotlib.figure import Figure
    except ImportError:  # pragma: no cover - matplotlib is a dependency
        return ""
    fig = Figure(figsize=size, dpi=80, layout="constrained")
    ax = fig.add_subplot()
    ax.tick_params(labelsize=7)
    draw(ax)
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    data = base64.b64encode(buf.getvalue()).decode("ascii")
    return f'<img src="data:image/png;base64,{data}" alt="preview"/>'


def side_by_side(left: str, right: str) -> str:
    if not right:
        return left
    return (f'<div style="display:flex;gap:12px;align-items:flex-start">'
            f"<div>{left}</div><div>{right}</div></div>")


# ---------------------------------------------------------------- the four objects
def system_html(system: Any) -> str:
    """Table of what a System is, beside its magnitude response."""
    d = system.to_dict()
    rows = [
        ("name", d["name"]),
        ("entered as", d["text"]),
        ("order", f"{d['order']} (relative degree {d['relative_degree']})"),
        ("poles (rad/s)", ", ".join(_complex(p) for p in system.poles) or "none"),
        ("zeros (rad/s)", ", ".join(_complex(z) for z in system.zeros) or "none"),
        ("gain factor k", d["gain"]),
        ("DC gain", d["dc_gain"]),
        ("stability", d["stability"]),
        ("-3 dB bandwidth (Hz)", d["bandwidth_3db_hz"]),
        ("dead time (s)", d["dead_time_s"] or None),
    ]
    rows = [r for r in rows if r[1] is not None or r[0] in ("DC gain",)]
    return side_by_side(table(rows, caption="System"), inline_plot(
        lambda ax: _draw_magnitude(ax, system)))


def _complex(z: complex) -> str:
    z = complex(z)
    return f"{z.real:.4g}" if z.imag == 0 else f"{z.real:.4g}{z.imag:+.4g}j"


def _draw_magnitude(ax: Any, system: Any) -> None:
    roots = np.abs(np.concatenate([np.atleast_1d(system.poles), np.atleast_1d(system.zeros)]))
    roots = roots[roots > 0] / (2 * np.pi)
    lo, hi = (roots.min() / 100, roots.max() * 100) if roots.size else (0.01, 100.0)
    f = np.logspace(np.log10(lo), np.log10(hi), 200)
    with np.errstate(divide="ignore"):
        mag = 20 * np.log10(np.abs(system.frequency_response(f)))
    ax.semilogx(f, mag, color="#0072B2")
    ax.set_xlabel("frequency (Hz)", fontsize=7)
    ax.set_ylabel("|H| (dB)", fontsize=7)
    ax.grid(True, which="both", alpha=0.3)


def waveform_html(wave: Any) -> str:
    """Rate, length and per-channel range and RMS, beside a preview of the samples."""
    head = table([("samples", wave.n_samples), ("rate (Hz)", wave.rate),
                  ("duration (s)", wave.duration), ("t0 (s)", wave.t0)], caption="Waveform")
    rows = []
    for i, (name, unit) in enumerate(zip(wave.channels, wave.units, strict=True)):
        x = wave.data[:, i]
        finite = x[np.isfinite(x)]
        if finite.size:
            rows.append((name, unit or "—", float(finite.min()), float(finite.max()),
                         float(np.sqrt(np.mean(finite ** 2)))))
        else:
            rows.append((name, unit or "—", None, None, None))
    chans = table(rows, header=("channel", "unit", "min", "max", "RMS"))
    plot = inline_plot(lambda ax: _draw_preview(ax, wave)) if wave.n_samples > 1 else ""
    return side_by_side(head + chans, plot)


def _draw_preview(ax: Any, wave: Any) -> None:
    n = wave.n_samples
    colours = ("#0072B2", "#D55E00", "#009E73", "#CC79A7")
    for i in range(min(wave.n_channels, len(colours))):
        x = wave.data[:, i]
        if n > PREVIEW_POINTS:  # min and max of each bucket: peaks stay visible
            edges = np.linspace(0, n, PREVIEW_POINTS // 2 + 1).astype(int)
            lo = np.minimum.reduceat(x, edges[:-1])
            hi = np.maximum.reduceat(x, edges[:-1])
            idx = np.repeat(edges[:-1], 2)
            y = np.column_stack([lo, hi]).ravel()
        else:
            idx, y = np.arange(n), x
        ax.plot(wave.t0 + idx / wave.rate, y, lw=0.8, color=colours[i], label=wave.channels[i])
    ax.set_xlabel("time (s)", fontsize=7)
    if wave.n_channels > 1:
        ax.legend(fontsize=6, loc="best")
    ax.grid(True, alpha=0.3)


def run_report_html(report: Any) -> str:
    """What a run wrote: output, size, model, levels and warnings."""
    head = table([("output", report.output), ("samples", report.n_samples),
                  ("rate (Hz)", report.rate), ("method", report.method),
                  ("initial state", report.initial), ("warnings", len(report.warnings)),
                  ("time (s)", report.elapsed_s)], caption="Run")
    rows = list(zip(report.channels, report.units, report.peak, report.peak_time_s, report.rms,
                    strict=True))
    chans = table(rows, header=("channel", "unit", "peak |y|", "peak at (s)", "RMS"))
    notes = "".join(f"<div>warning: {html.escape(w)}</div>" for w in report.warnings)
    return head + chans + notes


def measurement_html(key_metrics: dict[str, dict[str, Any]]) -> str:
    """Key metrics, one column per channel; rows where every channel is null are left out."""
    names = list(key_metrics)
    metrics: list[str] = []
    for values in key_metrics.values():
        for k in values:
            if k not in metrics:
                metrics.append(k)
    rows = [[k] + [key_metrics[c].get(k) for c in names] for k in metrics
            if any(key_metrics[c].get(k) is not None for c in names)]
    return table(rows, header=["metric"] + names, caption="Measurement (null: see to_dict())")
