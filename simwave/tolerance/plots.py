"""A study's figures: metric distributions with the limits, metrics against the swept
parameter, and the worst build's output over the nominal one.

Built with the object-oriented matplotlib API on Agg and written atomically through
:func:`simwave.plots.save_figure`; colours from the same Okabe-Ito palette, every
series also told apart by line style or marker.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from simwave.plots import OKABE_ITO, SERIES, _new_figure, save_figure, time_scale
from simwave.tolerance import builds as B
from simwave.tolerance.summary import ANALYSIS_ROLES, MODEL_INPUT, metric_value, model_value

LIMIT_COLOR = OKABE_ITO["vermillion"]
NOMINAL_COLOR = OKABE_ITO["black"]
#: Most panels in one figure.
MAX_PANELS = 9


def plot_files(study: Any) -> dict[str, str]:
    """Label -> path of the figures a study draws."""
    files = {"distribution plot": study.path_of("distributions.png")}
    if study.sweep:
        files["sweep plot"] = study.path_of("sweep.png")
    files["worst-build plot"] = study.path_of("worst-build.png")
    return files


def _panels(doc: dict[str, Any]) -> list[dict[str, Any]]:
    """Rows worth a panel: limited metrics first, then the others that vary."""
    rows = doc["metrics"]
    limited = [r for r in rows if r["limit_min"] is not None or r["limit_max"] is not None]
    varying = [r for r in doc["model"] + rows if r not in limited and r["min"] is not None
               and r["max"] is not None and r["max"] > r["min"]]
    return (limited + varying)[:MAX_PANELS]


def _row_value(r: dict | None, row: dict) -> float | None:
    """One build's value of a summary row's quantity (a model figure or a measured metric)."""
    if row["input"] == MODEL_INPUT:
        return model_value(r, row["metric"])
    return metric_value(r, row["input"], row["channel"], row["metric"])


def _values(study, builds, results, row) -> list[float]:
    roles = ANALYSIS_ROLES[study.analysis]
    out = []
    for b in builds:
        if b.role not in roles:
            continue
        v = _row_value(results.get(b.index), row)
        if v is not None:
            out.append(v)
    return out


def _title(row: dict[str, Any]) -> str:
    where = "H(s)" if row["input"] == MODEL_INPUT else row["input"]
    ch = f" [{row['channel']}]" if row["channel"] else ""
    return f"{row['metric']}\n{where}{ch}"


def _panel_grid(doc: dict[str, Any]):
    """A figure with one panel per metric to draw (up to three across): (fig, axes, panels)."""
    panels = _panels(doc)
    n = max(1, len(panels))
    cols = min(3, n)
    rows = math.ceil(n / cols)
    fig = _new_figure((4.2 * cols, 3.0 * rows))
    return fig, fig.subplots(rows, cols, squeeze=False).ravel(), panels


def plot_distributions(study, builds, results, doc, path: str | None = None):
    """Histogram of each metric over the analysis builds, nominal and limits drawn."""
    fig, axes, panels = _panel_grid(doc)
    for ax, row in zip(axes, panels, strict=False):
        vals = _values(study, builds, results, row)
        if vals:
            lo, hi = min(vals), max(vals)
            # values that differ only in their last digits: one bar (numpy cannot split
            # such a range into finite-sized bins)
            narrow = not (hi - lo) > 1e-9 * max(abs(hi), abs(lo))
            bins = 1 if narrow else min(40, max(5, int(math.sqrt(len(vals)))))
            ax.hist(vals, bins=bins, color=SERIES[0], alpha=0.75, label="builds",
                    range=(lo - 0.5, hi + 0.5) if narrow and lo == hi else None)
        if row["nominal"] is not None:
            ax.axvline(row["nominal"], color=NOMINAL_COLOR, ls="--", lw=1.2, label="nominal")
        for key, ls in (("limit_min", ":"), ("limit_max", "-.")):
            if row[key] is not None:
                ax.axvline(row[key], color=LIMIT_COLOR, ls=ls, lw=1.6,
                           label="limit " + key.split("_")[1])
        share = row.get("share_inside")
        extra = f"\ninside limits: {share * 100:.3g} %" if share is not None else ""
        ax.set_title(_title(row) + extra, fontsize=8)
        ax.tick_params(labelsize=7)
        ax.legend(fontsize=6)
    for ax in axes[len(panels):]:
        ax.set_visible(False)
    if not panels:
        axes[0].set_visible(True)
        axes[0].text(0.5, 0.5, "no metric varies across the builds", ha="center")
    fig.suptitle(f"{doc['system']['name']}: {doc['analysis']}, "
                 f"{doc['counts']['analysis_builds']} builds", fontsize=10)
    if path:
        save_figure(fig, path)
    return fig


def plot_sweep(study, builds, results, doc, path: str | None = None):
    """Each limited (or varying) metric against the first swept parameter; with two swept
    parameters one line per value of the second."""
    names = list(study.sweep)
    fig, axes, panels = _panel_grid(doc)
    sweep_builds = [b for b in builds if b.role == "sweep"]
    xs_axis = study.sweep[names[0]]
    log_x = len(xs_axis) > 2 and min(xs_axis) > 0 and not np.allclose(
        np.diff(xs_axis), np.diff(xs_axis)[0], rtol=1e-9)
    groups = study.sweep[names[1]] if len(names) > 1 else [None]
    for ax, row in zip(axes, panels, strict=False):
        for gi, g in enumerate(groups):
            xs, ys = [], []
            for b in sweep_builds:
                if g is not None and b.values[names[1]] != g:
                    continue
                r = results.get(b.index)
                v = (model_value(r, row["metric"]) if row["input"] == MODEL_INPUT
                     else metric_value(r, row["input"], row["channel"], row["metric"]))
                xs.append(b.values[names[0]])
                ys.append(np.nan if v is None else v)
            if g is None:
                _corner_band(ax, builds, results, row, names[0], xs)
            label = "nominal others" if g is None else f"{names[1]} = {g:.4g}"
            ax.plot(xs, ys, color=SERIES[gi % len(SERIES)], marker="os^vD<>"[gi % 7], ms=3,
                    lw=1.2, label=label)
        for key, ls in (("limit_min", ":"), ("limit_max", "-.")):
            if row[key] is not None:
                ax.axhline(row[key], color=LIMIT_COLOR, ls=ls, lw=1.6,
                           label="limit " + key.split("_")[1])
        if log_x:
            ax.set_xscale("log")
        ax.set_xlabel(names[0], fontsize=8)
        ax.set_title(_title(row), fontsize=8)
        ax.tick_params(labelsize=7)
        ax.legend(fontsize=6)
    for ax in axes[len(panels):]:
        ax.set_visible(False)
    statement = (doc.get("sweep") or {}).get("statement") or ""
    fig.suptitle(f"{doc['system']['name']}: sweep of {', '.join(names)}\n{statement}",
                 fontsize=9)
    if path:
        save_figure(fig, path)
    return fig


def _corner_band(ax, builds, results, row, name, xs) -> None:
    """Shade the range over the other parameters' corners at each sweep point."""
    lo, hi = [], []
    for x in xs:
        vals = []
        for b in builds:
            if b.role != "sweep-corner" or b.values[name] != x:
                continue
            v = _row_value(results.get(b.index), row)
            if v is not None:
                vals.append(v)
        lo.append(min(vals) if vals else np.nan)
        hi.append(max(vals) if vals else np.nan)
    if not all(np.isnan(lo)):
        ax.fill_between(xs, lo, hi, color=SERIES[0], alpha=0.2, lw=0,
                        label="range over tolerance corners")


def plot_worst(study, builds, doc, path: str | None = None):
    """The worst build's output over the nominal build's on the input that decided it."""
    from simwave.tolerance.worker import run_build

    fig = _new_figure((8.0, 4.0))
    ax = fig.subplots()
    worst = doc.get("worst_build")
    if not worst:
        ax.text(0.5, 0.5, "no worst build: no analysis build was measured", ha="center")
        if path:
            save_figure(fig, path)
        return fig
    ref = next(r for r in study.inputs if r.label == worst["input"])
    nominal_vals = B.nominal_values(study.parameters)
    nom = run_build(study.template, nominal_vals, [ref], study.measure_options,
                    keep_waveforms=True)
    bad = run_build(study.template, worst["values"], [ref], study.measure_options,
                    keep_waveforms=True)
    pair_n = (nom.get("waveforms") or {}).get(ref.label)
    pair_w = (bad.get("waveforms") or {}).get(ref.label)
    if pair_n is None or pair_w is None:
        ax.text(0.5, 0.5, "the nominal or the worst build did not run on this input",
                ha="center")
    else:
        wf_in, y_nom = pair_n
        _, y_bad = pair_w
        t = np.arange(y_nom.data.shape[0]) / y_nom.rate + (y_nom.t0 or 0.0)
        factor, unit = time_scale(float(t[-1] - t[0]) if t.size > 1 else 1.0)
        ax.plot(t * factor, wf_in.data[:, 0], color="#888888", lw=0.8, ls=":", label="input")
        ax.plot(t * factor, y_nom.data[:, 0], color=NOMINAL_COLOR, lw=1.2, ls="--",
                label="nominal build")
        ax.plot(t * factor, y_bad.data[:, 0], color=LIMIT_COLOR, lw=1.2,
                label=f"worst build #{worst['build']} ({worst['detail'] or worst['role']})")
        ax.set_xlabel(f"time [{unit}]")
    vals = ", ".join(f"{k} = {v:.5g}" for k, v in worst["values"].items())
    ax.set_title(f"{worst['why']}\n{vals}", fontsize=8)
    ax.legend(fontsize=7)
    if path:
        save_figure(fig, path)
    return fig


def draw_all(study, builds, results, doc, files: dict[str, str]) -> None:
    plot_distributions(study, builds, results, doc, files["distribution plot"])
    if "sweep plot" in files:
        plot_sweep(study, builds, results, doc, files["sweep plot"])
    plot_worst(study, builds, doc, files["worst-build plot"])
