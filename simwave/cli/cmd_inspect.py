"""``simwave inspect``: what a system H(s) is, as a readable table or as JSON.

The command is three steps, each reusable: :func:`build_report` makes a
JSON-ready dict, :func:`format_report` renders it as text (one formatter per
section, listed in :data:`SECTION_FORMATTERS`; other modules may append their
own), and the click command prints one of the two.
"""

from __future__ import annotations

import json
import math
import warnings
from collections.abc import Callable, Sequence
from typing import TYPE_CHECKING, Any

import click

from simwave import __version__
from simwave.cli.app import main
from simwave.cli.system_input import parse_number_list, resolve_system, system_options
from simwave.cli.model_options import method_options, model_kwargs
from simwave.cli.renamed import renamed_option
from simwave.errors import SimwaveError

if TYPE_CHECKING:  # numpy and scipy load only when a command runs
    from simwave.model.system import System

#: Significant digits in the text table (--json gives exact values).
DIGITS = 4


# ----------------------------------------------------------------------------- report
def frequency_points(system: System, f_hz: Sequence[float]) -> list[dict[str, float]]:
    """Magnitude (linear and dB) and phase (degrees, wrapped to (-180, 180]) at ``f_hz``."""
    import numpy as np

    f = np.asarray(f_hz, dtype=np.float64)
    h = system.frequency_response(f)
    out = []
    for fi, hi in zip(f, h, strict=True):
        mag = float(abs(hi))
        with np.errstate(divide="ignore"):
            db = 20 * math.log10(mag) if mag > 0 else -math.inf
        out.append({
            "f_hz": float(fi),
            "magnitude": mag if math.isfinite(mag) else "inf",
            "gain_db": db if math.isfinite(db) else ("inf" if db > 0 else "-inf"),
            "phase_deg": float(np.degrees(np.angle(hi))) if math.isfinite(mag) else "nan",
        })
    return out


def build_report(system: System, *, at_hz: Sequence[float] | None = None) -> dict[str, Any]:
    """Everything ``inspect`` shows, as a JSON-ready dict.

    Sections: ``system`` (:meth:`System.to_dict`), and ``frequency_response``
    when ``at_hz`` is given. Callers may add sections of their own and a
    formatter for them in :data:`SECTION_FORMATTERS`.
    """
    report: dict[str, Any] = {"simwave_version": __version__, "system": system.to_dict()}
    if at_hz:
        report["frequency_response"] = frequency_points(system, at_hz)
    return report


# ----------------------------------------------------------------------------- text helpers
def fmt(x: Any) -> str:
    """A number to DIGITS significant digits ('inf' and friends pass through)."""
    if isinstance(x, str):
        return x
    x = float(x)
    if x == 0:
        return "0"
    return f"{x:.{DIGITS}g}"


_BIG = ((1e9, "G"), (1e6, "M"), (1e3, "k"))
_SMALL = ((1.0, ""), (1e-3, "m"), (1e-6, "\u00b5"), (1e-9, "n"), (1e-12, "p"))


def fmt_db(x: Any) -> str:
    """Decibels to 0.001 dB (so round-off such as -2e-15 dB shows as 0 dB)."""
    if isinstance(x, str):
        return f"{x} dB"
    return f"{fmt(round(float(x), 3))} dB"


def fmt_hz(x: Any) -> str:
    """Frequency with k/M/G above 1 kHz, plain below (0.1592 Hz)."""
    if isinstance(x, str) or not math.isfinite(x):
        return f"{x} Hz"
    for scale, prefix in _BIG:
        if abs(float(fmt(x))) >= scale:  # after rounding: 999.99 Hz shows as 1 kHz
            return f"{fmt(x / scale)} {prefix}Hz"
    return f"{fmt(x)} Hz"


def fmt_s(x: Any) -> str:
    """Time in s, ms, µs, ns, ps."""
    if isinstance(x, str) or not math.isfinite(x):
        return "infinite" if str(x) == "inf" or x == math.inf else str(x)
    if x == 0:
        return "0 s"
    for scale, prefix in _SMALL:
        if abs(x) >= scale:
            return f"{fmt(x / scale)} {prefix}s"
    return f"{fmt(x)} s"


def fmt_root(re: float, im: float) -> str:
    """A real value, or the upper member of a conjugate pair written as a±bj."""
    if im == 0:
        return fmt(re)
    return f"{fmt(re)}\u00b1{fmt(abs(im))}j"


def fmt_roots(values: list[dict[str, float]]) -> list[str]:
    """Roots as text, one entry per real root and per conjugate pair."""
    return [fmt_root(v["re"], v["im"]) for v in values if v["im"] >= 0]


def fmt_poly(coeffs: Sequence[float], var: str = "s") -> str:
    """Coefficients (descending powers) as 's^2 + 1.414 s + 1'."""
    n = len(coeffs) - 1
    names = [var if k == 1 else (f"{var}^{k}" if k else "") for k in range(n, -1, -1)]
    return fmt_terms(coeffs, names)


def fmt_ode_side(coeffs: Sequence[float], var: str) -> str:
    """One side of an ODE as "y'' + 3 y' + 2 y" (y^(n) from the fourth derivative on)."""
    n = len(coeffs) - 1
    names = [var + "'" * k if k <= 3 else f"{var}^({k})" for k in range(n, -1, -1)]
    return fmt_terms(coeffs, names)


def fmt_terms(coeffs: Sequence[float], names: Sequence[str]) -> str:
    """'c1 name1 + c2 name2 ...', leaving out zero terms and unit coefficients."""
    terms: list[str] = []
    for c, name in zip(coeffs, names, strict=True):
        if c == 0:
            continue
        coef = "" if (abs(c) == 1 and name) else fmt(abs(c))
        term = f"{coef} {name}".strip()
        if not terms:
            terms.append(term if c > 0 else f"-{term}")
        else:
            terms.append(f"{'+' if c > 0 else '-'} {term}")
    return " ".join(terms) if terms else "0"


def _rows(pairs: Sequence[tuple[str, str]]) -> list[str]:
    width = max(len(k) for k, _ in pairs) + 3
    return [f"{k:<{width}}{v}" for k, v in pairs]


def _table(header: Sequence[str], rows: Sequence[Sequence[str]]) -> list[str]:
    widths = [max(len(str(r[i])) for r in [header, *rows]) for i in range(len(header))]
    def line(r):
        return "   ".join(f"{c!s:<{w}}" for c, w in zip(r, widths, strict=False)).rstrip()
    return [line(header), *(line(r) for r in rows)]


def _parameter_text(prm: dict[str, Any]) -> str:
    """'10000 (as written: 10k ±1%; band 9900 to 10100, uniform)'."""
    text = fmt(prm["nominal"])
    tol = prm.get("tolerance")
    if prm.get("text") and prm["text"] != repr(prm["nominal"]):
        text += f"   (as given: {prm['text']})"
    if tol:
        dist = tol["distribution"] + (f", limits at {fmt(tol['sigmas'])} sigma"
                                      if tol["distribution"] == "normal" else "")
        text += f"   band {fmt(tol['low'])} to {fmt(tol['high'])}, {dist}"
    return text


# ----------------------------------------------------------------------------- sections
def format_system(d: dict[str, Any]) -> list[str]:
    """The ``system`` section: key facts, then one row per pole mode, then the zeros."""
    pairs: list[tuple[str, str]] = []
    if d.get("name"):
        pairs.append(("name", d["name"]))
    if d.get("text"):
        pairs.append(("entered as", " ".join(str(d["text"]).split())))
    for prm in d.get("parameters") or []:
        pairs.append((f"parameter {prm['name']}", _parameter_text(prm)))
    num, den = fmt_poly(d["numerator"]), fmt_poly(d["denominator"])
    num = f"({num})" if " " in num else num
    den = f"({den})" if " " in den else den
    pairs.append(("H(s)", f"{num} / {den}"))
    if d.get("ode"):
        a = fmt_ode_side(d["ode"]["a"], "y")
        b = fmt_ode_side(d["ode"]["b"], "x")
        pairs.append(("ODE (a_n = 1)", f"{a} = {b}"))
    pairs.append(("order", f"{d['order']} (relative degree {d['relative_degree']})"))
    pairs.append(("gain factor k", fmt(d["gain"])))
    dc = d["dc_gain"]
    if dc in ("inf", "-inf"):
        dc_text = f"infinite ({'negative, ' if dc == '-inf' else ''}pole at s = 0)"
    elif dc == 0:
        dc_text = "0 (zero at s = 0)"
    else:
        dc_text = f"{fmt(dc)} ({fmt_db(d['dc_gain_db'])})"
    pairs.append(("DC gain", dc_text))
    pairs.append(("high-frequency gain", fmt(d["high_frequency_gain"])))
    pairs.append(("stability", d["stability"]))
    bw = d["bandwidth_3db_hz"]
    bw_text = fmt_hz(bw) if bw is not None else f"not defined: {d['bandwidth_note']}"
    pairs.append(("-3 dB bandwidth", bw_text))
    pairs.append(("dead time", fmt_s(d["dead_time_s"]) if d["dead_time_s"] else "none"))
    lines = _rows(pairs)
    lines.append("")
    rows = []
    for m in d["pole_modes"]:
        p = m["pole"]
        if m["kind"] == "real":
            rows.append([fmt_root(p["re"], 0.0), f"real, {m['mode']}",
                         fmt_s(m["time_constant_s"]), "", ""])
        else:
            rows.append([fmt_root(p["re"], p["im"]), f"pair, {m['mode']}",
                         fmt_s(m["time_constant_s"]), fmt_hz(m["natural_frequency_hz"]),
                         fmt(m["damping_ratio"])])
    if rows:
        header = ["poles (rad/s)", "mode", "time constant", "natural freq.", "damping"]
        lines += _table(header, rows)
    else:
        lines.append("poles (rad/s)   none")
    width = max([len("poles (rad/s)")] + [len(r[0]) for r in rows]) + 3  # the poles column
    zeros = fmt_roots(d["zeros_rad_s"])
    lines.append(f"{'zeros (rad/s)':<{width}}" + (", ".join(zeros) if zeros else "none"))
    for note in d.get("notes", []):
        lines.append(f"note: {note}")
    return lines


def format_frequency_response(points: list[dict[str, Any]]) -> list[str]:
    """The ``frequency_response`` section: gain and phase at the requested frequencies."""
    rows = [[fmt_hz(p["f_hz"]), fmt_db(p["gain_db"]), f"{fmt(p['phase_deg'])} deg"]
            for p in points]
    return _table(["frequency", "gain", "phase"], rows)


#: (report key, formatter) in print order; append to add a section.
def _format_discrete(d: dict[str, Any]) -> list[str]:
    from simwave.discrete.accuracy import format_discrete_section

    return format_discrete_section(d)


SECTION_FORMATTERS: list[tuple[str, Callable[[Any], list[str]]]] = [
    ("system", format_system),
    ("frequency_response", format_frequency_response),
    ("discrete", _format_discrete),
]


def format_report(report: dict[str, Any]) -> str:
    """The report as a readable text table (values to 4 significant digits)."""
    blocks = []
    for key, formatter in SECTION_FORMATTERS:
        if key in report:
            blocks.append("\n".join(formatter(report[key])))
    blocks.append(f"(values to {DIGITS} significant digits; --json gives exact values)")
    return "\n\n".join(blocks)


# ----------------------------------------------------------------------------- command
@main.command("inspect")
@system_options
@click.option("--at-hz", "at_hz", metavar="LIST", default=None,
              help="Also list gain (dB) and phase (deg) at these frequencies in Hz, e.g. '50, 1k'.")
@click.option("--rate", metavar="HZ", default=None,
              help="Also discretize at this sample rate and report the model's error against "
                   "H(j2*pi*f), with the lowest rate per method for --error-limit.")
@method_options(default=None, when="for --rate")
@click.option("--band-hz", "band", metavar="HZ|LO,HI", default=None,
              help="Band for the error report (default: up to 0.45 x rate or 60 dB down).")
@renamed_option("--band", new="--band-hz", param="band", metavar="HZ|LO,HI")
@click.option("--error-limit", metavar="DB", default=None,
              help="Magnitude-error limit for the suggested sample rates (default 0.1 dB).")
@click.option("--json", "as_json", is_flag=True, help="Print the report as JSON (exact numbers).")
@click.option("--plot", "plot_path", metavar="FILE", default=None,
              help="Also draw magnitude, phase and pole-zero maps (with --rate: the discrete "
                   "model too) to FILE (.png or .svg).")
def inspect_command(system_spec, at_hz: str | None, rate: str | None, method: str | None,
                    prewarp: str | None, match_frequency: str | None, band: str | None,
                    error_limit: str | None, as_json: bool, plot_path: str | None) -> None:
    """Show what a system H(s) is: poles, zeros, gains, stability, modes, bandwidth.

    Zeros and poles are in rad/s, frequencies in Hz, times in seconds. With
    --rate, also the discrete model's accuracy at that rate.
    """
    from simwave.discrete.accuracy import discrete_section
    from simwave.model.parse import parse_number

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        system = resolve_system(system_spec)
    for w in caught:  # one plain line each; the table repeats them as notes
        click.echo(f"Warning: {w.message}", err=True)
    if plot_path is not None:
        from simwave.plots import check_plot_path
        from simwave.signals.atomic import guard_outputs

        guard_outputs({"--plot": plot_path}, {"the system file": system_spec.file})
        check_plot_path(plot_path)  # before any work: a bad name fails at once
    freqs = parse_number_list(at_hz, "--at-hz") if at_hz is not None else None
    if freqs is not None:
        bad = [f for f in freqs if not f >= 0]
        if bad:
            raise SimwaveError(f"--at-hz: frequencies must be >= 0 Hz, got {bad[0]:g}")
    report = build_report(system, at_hz=freqs)
    if rate is not None:
        from simwave.guards import check_rate, model_failures

        rate_hz = check_rate(parse_number(rate, "--rate"), "--rate")
        with warnings.catch_warnings(record=True) as caught, \
                model_failures(system, rate_hz, method or "ramp-invariant"):
            warnings.simplefilter("always")
            report["discrete"] = discrete_section(
                system, rate_hz, method,
                **model_kwargs(prewarp, match_frequency),
                band_hz=parse_number_list(band, "--band-hz") if band else None,
                limit_db=parse_number(error_limit, "--error-limit") if error_limit else 0.1,
            )
        for w in caught:  # the report lists them again
            click.echo(f"Warning: {w.message}", err=True)
    elif any(v is not None for v in (method, prewarp, match_frequency, band, error_limit)):
        raise SimwaveError(
            "--method, --prewarp, --match-hz, --band-hz and --error-limit need --rate"
        )
    if as_json:
        from simwave.guards import null_reasons_note, with_null_reasons

        report, reasons = with_null_reasons(report)
        note = null_reasons_note(reasons)
        if note:
            click.echo(f"Warning: {note}", err=True)
    click.echo(json.dumps(report, indent=2, allow_nan=False) if as_json
               else format_report(report))
    if plot_path is not None:
        _plot(system, plot_path, rate, method, prewarp, match_frequency)


def _plot(system: System, path: str, rate: str | None, method: str | None,
          prewarp: str | None, match_frequency: str | None) -> None:
    """``--plot``: the frequency plot, with the same discrete model as the report."""
    from simwave.model.parse import parse_number
    from simwave.plots import plot_frequency

    opts = model_kwargs(prewarp, match_frequency)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # already printed with the report
        plot_frequency(system, path, rate=parse_number(rate, "--rate") if rate else None,
                       method=method or "ramp-invariant", **opts)
    click.echo(f"plot written to {path}", err=True)
