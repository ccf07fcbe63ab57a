"""The report's figures as inline SVG: the project's own plots, made compact and accessible.

The figures are :func:`simwave.plots.plot_run` (input and output overlaid, the
measured transition annotated) and :func:`simwave.plots.plot_frequency` (the
discrete model against the analog H(j2πf)), drawn with matplotlib's SVG backend
so their lines stay sharp at any zoom and in print. To put many of them in one
page:

* each figure's element ids (clip paths, markers, the artists' names) and the
  references to them get a prefix of its own, so they are unique in the page;
* the XML prolog, DOCTYPE and metadata (a creation date) are dropped, and path
  coordinates are rounded to 0.1 pt (a tenth of a printer's point, far below
  what a screen or a printer resolves), which takes about a quarter off the size;
* the ``<svg>`` element gets ``role="img"`` and an ``aria-label`` (its alt text).
"""

from __future__ import annotations

import io
import re
import warnings
from typing import Any, Mapping

#: Coordinates in path data are rounded to this many decimals (points).
DECIMALS = 1

_NUMBER = re.compile(r"(-?\d+\.\d)\d+")
_PATH_D = re.compile(r'(\sd=")([^"]*)(")')


def svg_text(fig: Any, salt: str, alt: str) -> str:
    """A matplotlib figure as compact inline SVG markup with its alt text.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    salt : str
        Unique within the page (element ids are derived from it).
    alt : str
        What the figure shows, for people who cannot see it.
    """
    from matplotlib import rc_context

    from simwave.plots import _STYLE

    buf = io.StringIO()
    with rc_context({**_STYLE, "svg.hashsalt": salt}):
        fig.savefig(buf, format="svg", metadata={"Date": None})
    text = buf.getvalue()
    start = text.index("<svg")
    text = text[start:]
    text = re.sub(r"<metadata>.*?</metadata>\s*", "", text, flags=re.S)
    text = _PATH_D.sub(lambda m: m.group(1) + _NUMBER.sub(r"\1", m.group(2)) + m.group(3), text)
    text = _prefix_ids(text, salt)
    label = (alt.replace("&", "&amp;").replace('"', "&quot;").replace("<", "&lt;")
             .replace(">", "&gt;"))
    text = text.replace("<svg ", f'<svg role="img" aria-label="{label}" focusable="false" ', 1)
    # the figure scales with the page (its own width/height would fix it in points)
    text = re.sub(r'(<svg[^>]*?)\swidth="[^"]*"\sheight="[^"]*"', r"\1", text, count=1)
    return text.strip()


def _prefix_ids(text: str, prefix: str) -> str:
    """Every element id of one figure, and every reference to it, prefixed (unique in a page).

    matplotlib names elements by their artists' ``gid`` (``axes_1``, ``patch_2``,
    the plots' own ``analog``, ``output``...), which repeat from figure to figure.
    """
    ids = set(re.findall(r'\sid="([^"]+)"', text))
    if not ids:
        return text

    def fix(m: re.Match) -> str:
        name = m.group(2)
        return f"{m.group(1)}{prefix}-{name}{m.group(3)}" if name in ids else m.group(0)

    text = re.sub(r"(url\(#)([^)]+)(\))", fix, text)
    text = re.sub(r'((?:xlink:)?href="#)([^"]+)(")', fix, text)
    seen: dict[str, int] = {}

    def number(m: re.Match) -> str:  # a name given to several artists (magnitude and phase)
        name = m.group(2)
        seen[name] = seen.get(name, 0) + 1
        tail = "" if seen[name] == 1 else f"-{seen[name]}"
        return f"{m.group(1)}{prefix}-{name}{tail}{m.group(3)}"

    return re.sub(r'(\sid=")([^"]+)(")', number, text)


def system_from_provenance(prov: Mapping[str, Any]):
    """The analog system a run recorded (its zeros, poles, gain and dead time)."""
    from simwave.model.system import System

    zeros = [complex(str(z).replace(" ", "")) for z in prov.get("zeros") or []]
    poles = [complex(str(p).replace(" ", "")) for p in prov.get("poles") or []]
    return System.from_zpk(zeros, poles, float(prov["gain"]),
                           delay_s=float(prov.get("dead_time_s") or 0.0),
                           name=prov.get("system_name"), text=prov.get("system"))


def model_key(prov: Mapping[str, Any]) -> tuple:
    """What decides a frequency figure: the system, method, model rate and method options."""
    return (prov.get("system_name"), tuple(map(str, prov.get("zeros") or [])),
            tuple(map(str, prov.get("poles") or [])), prov.get("gain"),
            prov.get("dead_time_s"), prov.get("method"), prov.get("model_rate_hz"),
            prov.get("prewarp_hz"), prov.get("match_hz"))


def frequency_svg(prov: Mapping[str, Any], salt: str) -> tuple[str, str]:
    """The model's frequency response against the analog H(s), as (svg, alt text)."""
    from simwave.plots import format_hz, plot_frequency

    system = system_from_provenance(prov)
    rate = float(prov["model_rate_hz"])
    method = str(prov.get("method") or "ramp-invariant")
    opts = {k: float(prov[k]) for k in ("prewarp_hz", "match_hz") if prov.get(k) is not None}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the run recorded the model's warnings already
        fig = plot_frequency(system, rate=rate, method=method,
                             title=f"{prov.get('system_name') or 'system'}: {method} model at "
                                   f"{format_hz(rate)} against the analog H(s)", **opts)
    alt = (f"Frequency response of {prov.get('system_name') or 'the system'}: magnitude in dB "
           f"and phase in degrees against frequency on a log axis, the analog H(j2\u03c0f) as a "
           f"solid line and the {method} model at {format_hz(rate)} dashed, Nyquist marked; "
           "beside them the s-plane and z-plane pole-zero maps.")
    try:
        return svg_text(fig, salt, alt), alt
    finally:
        _close(fig)


def overlay_svg(pair: Any, salt: str) -> tuple[str, str]:
    """A pair's input and output overlaid, with its measured transition annotated (svg, alt).

    Raises
    ------
    SimwaveError
        The output or input file cannot be read (the caller shows the message).
    """
    from simwave.plots import plot_run

    doc = pair.load() or {}
    source = pair.source or ((doc.get("run") or {}).get("provenance") or {}).get("input")
    inp = _read_input(source, pair) if source else None
    fig = plot_run(pair.output, inp, doc.get("metrics"), read_options=pair.output_read or None,
                   title=f"{pair.input} through {pair.system}")
    thin_lines(fig)
    chans = ((doc.get("metrics") or {}).get("channels") or [])
    first = next((c for c in chans if c.get("transitions")), None)
    if first is not None:
        t = first["transitions"][0]
        what = (f"below, a close-up of the first {t.get('direction', '')} transition of channel "
                f"{first.get('name')} with its state levels, 10/50/90 % reference levels, "
                "transition duration, overshoot peak and settling band")
    else:
        what = "no transition was measured, so there is no close-up"
    alt = (f"Input and output of {pair.input} through {pair.system} over time"
           f"{'' if inp is not None else ' (output only: the input could not be read back)'}; "
           f"{what}.")
    try:
        return svg_text(fig, salt, alt), alt
    finally:
        _close(fig)


#: Most points per drawn line in a report figure: a min/max pair per bucket of ~1/1000 of
#: the axis keeps every peak visible at any width a page is read or printed at.
MAX_LINE_POINTS = 2400


def thin_lines(fig: Any, max_points: int = MAX_LINE_POINTS) -> None:
    """Redraw every long line of ``fig`` as its min/max envelope of ``max_points`` points.

    :func:`simwave.plots.plot_run` keeps up to 8000 points per line (for a figure on its
    own); sixty such figures of noisy records would pass 10 MB as SVG.
    """
    import numpy as np

    from simwave.plots import _envelope

    for ax in fig.axes:
        for line in ax.get_lines():
            x = np.asarray(line.get_xdata(), dtype=float)
            y = np.asarray(line.get_ydata(), dtype=float)
            if x.size > max_points and x.size == y.size:
                line.set_data(*_envelope(x, y, max_points))


def _read_input(source: str, pair: Any):
    """The pair's input, read as the run read it; with the row's rate as the last resort."""
    import simwave
    from simwave.errors import SimwaveError

    try:
        return simwave.read(source, **dict(pair.input_read))
    except SimwaveError:
        rate = (pair.rows[0] if pair.rows else {}).get("rate_hz")
        if pair.input_read or not rate:
            return None
        try:
            return simwave.read(source, rate=rate)
        except SimwaveError:
            return None


def _close(fig: Any) -> None:
    fig.clear()
