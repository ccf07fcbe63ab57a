"""The report page of a tolerance study (``simwave tolerance``): same page, the study's content.

Read from the study's output folder as written (``tolerance-summary.json``,
``run-info.json`` and the plots), so the page says nothing the files do not:

* the job in one line (system, toleranced parameters, analysis, builds, seed, inputs);
* whether the design meets its limits: the share of builds meeting every limit on
  every input with its 95 % interval, the worst build and why, the sweep's statement;
* every problem build (unstable, not realizable, failed) with its reason, the notes;
* the cautions, with the study's own (only the tolerances given are in it);
* one sortable, filterable row per (input, channel, metric): nominal, spread,
  percentiles, limits, the share inside them with its interval, the parameter that
  moves it most; a verdict per row (every build inside its limits: pass; some
  outside, not run or not measured: fail, as the study counts them; none run or
  measured: not measured; no limit: no bands);
* the study's plots, embedded (PNG as data URIs: they are the files the study drew).
"""

from __future__ import annotations

import base64
import json
import os
from typing import Any, Mapping

from simwave.report.page import Page, esc
from simwave.report.study import ReportError, Study, read_json
from simwave.report.values import number_text

#: The study's summary file name (see :mod:`simwave.tolerance.study`).
SUMMARY_JSON = "tolerance-summary.json"
#: Plot files a study writes, with what each shows (for the alt text).
PLOTS = {
    "distributions.png": "Distribution of each limited metric over the builds, with the "
                         "limits and the nominal build marked",
    "sweep.png": "The swept metrics against the swept parameter values, with the limits",
    "worst-build.png": "The worst build's output against the nominal build's on the input "
                       "where its margin is smallest",
}
#: Columns of the tolerance table, in order.
COLUMNS = ("input", "channel", "metric", "verdict", "nominal", "min", "p5", "p50", "p95",
           "max", "limit_min", "limit_max", "share_inside", "share_interval_95", "moves_most",
           "builds", "measured", "not_measured", "not_run", "mean", "std", "share_note")
EXTRA = ("builds", "measured", "not_measured", "not_run", "mean", "std", "share_note")
HEADINGS = {"nominal": "nominal", "min": "min", "p5": "5th percentile", "p50": "median",
            "p95": "95th percentile", "max": "max", "limit_min": "lower limit",
            "limit_max": "upper limit", "share_inside": "builds inside limits",
            "share_interval_95": "95 % interval of that share", "moves_most": "moves it most",
            "metric": "metric", "not_measured": "not measured", "not_run": "not run",
            "share_note": "note"}

CAUTION = ("A tolerance study covers only the parameters and distributions given in it; "
           "ageing, temperature, supply and layout effects are not in it unless they were "
           "modelled.")


def is_tolerance_folder(folder: str) -> str | None:
    """The study summary in ``folder`` or one level below, or None."""
    here = os.path.join(folder, SUMMARY_JSON)
    if os.path.isfile(here):
        return here
    below = sorted(os.path.join(folder, d, SUMMARY_JSON) for d in os.listdir(folder)
                   if os.path.isfile(os.path.join(folder, d, SUMMARY_JSON)))
    return below[0] if len(below) == 1 else None


def load_tolerance(summary_path: str) -> Study:
    """The study of a tolerance output folder (its summary, run information and plots)."""
    doc = read_json(summary_path)
    if not isinstance(doc, dict) or not isinstance(doc.get("metrics"), list):
        raise ReportError(f"{summary_path}: not a simwave tolerance summary (no 'metrics' list)")
    folder = os.path.dirname(os.path.abspath(summary_path))
    info: dict[str, Any] = {}
    try:
        with open(os.path.join(folder, "run-info.json"), encoding="utf-8") as fh:
            info = json.load(fh)
    except (OSError, ValueError):
        pass
    rows = list(doc.get("model") or []) + list(doc["metrics"])
    system = doc.get("system") or {}
    files = [os.path.join(folder, n) for n in ("tolerance-summary.csv", SUMMARY_JSON,
                                                "builds.csv", "build-metrics.csv")]
    study = Study(kind="tolerance", folder=folder, rows=rows, columns=list(COLUMNS),
                  comparison={}, systems={str(system.get("name") or "system"): system},
                  pairs=[], counts=dict(doc.get("counts") or {}),
                  measure_options=dict(doc.get("measure_options") or {}),
                  engine=info.get("engine"), elapsed_s=info.get("elapsed_s"),
                  description=doc.get("study_file"),
                  summary_files=[f for f in files if os.path.isfile(f)], data_dir=folder)
    study.extra = {"doc": doc, "info": info}
    return study


def tolerance_verdict(row: Mapping[str, Any]) -> tuple[str, str]:
    """(verdict kind, detail) of a tolerance row from its limits and the builds inside them."""
    if row.get("limit_min") is None and row.get("limit_max") is None:
        return "no bands", ""
    # as the study counts them: a build that did not run (unstable, not realizable,
    # failed) or was not measured does not meet the limits
    builds, measured = row.get("builds") or 0, row.get("measured") or 0
    not_run, inside = row.get("not_run") or 0, row.get("inside")
    if not measured and not not_run:
        return "not measured", "no build measured this metric"
    if inside is None:
        return "not measured", str(row.get("share_note") or "")
    if inside >= builds:
        return "pass", f"all {builds} builds inside the limits"
    return "fail", (f"{builds - inside} of {builds} builds do not meet the limits ("
                    f"{measured - inside} measured outside, {not_run} not run, "
                    f"{row.get('not_measured') or 0} not measured)")


class TolerancePage(Page):
    """The page of a tolerance study (see the module docs)."""

    def __init__(self, study: Study, **options: Any) -> None:
        super().__init__(study, **options)
        self.doc = study.extra["doc"]
        self.info = study.extra["info"]

    verdict = staticmethod(tolerance_verdict)
    results_heading = "Every metric: one row per input, channel and metric"

    def gather(self) -> None:
        self.detailed = []

    def title(self) -> str:
        s = self.doc.get("system") or {}
        return f"simwave tolerance study: {s.get('name') or 'system'} ({self.doc.get('analysis')})"

    def job_line(self) -> str:
        d = self.doc
        system = d.get("system") or {}
        params = ", ".join(f"{p['name']} = {p.get('text') or p.get('nominal')}"
                           for p in d.get("parameters") or [])
        c = d.get("counts") or {}
        bits = [f"<strong>System</strong> {esc(system.get('name'))} = {esc(system.get('text'))}",
                f"<strong>parameters</strong> {esc(params or 'none')}",
                f"<strong>analysis</strong> {esc(d.get('analysis'))}"
                + (f", seed {esc(d['seed'])}" if d.get("seed") is not None else ""),
                f"<strong>builds</strong> {c.get('builds', 0)} ({c.get('analysis_builds', 0)} "
                f"in the analysis): {c.get('ok', 0)} ok, {c.get('unstable', 0)} unstable, "
                f"{c.get('not_realizable', 0)} not realizable, {c.get('failed', 0)} failed",
                f"<strong>inputs</strong> {esc(', '.join(map(str, d.get('inputs') or [])))}",
                "<strong>method</strong> " + esc((system.get("run_options") or {}).get("method")
                                                 or "ramp-invariant"),
                "<strong>simwave</strong> " + esc(_version())]
        return "; ".join(bits) + "."

    def nav(self) -> str:
        items = [("comparison", "Does it meet its limits?"), ("problems", "Problem builds"),
                 ("cautions", "Cautions"), ("results", "Every metric"),
                 ("systems", "System and tolerances"), ("figures", "Plots")]
        links = "".join(f'<li><a href="#{a}">{esc(t)}</a></li>' for a, t in items)
        return f'<nav aria-label="Contents"><ul>{links}</ul></nav>'

    def comparison(self) -> str:
        d = self.doc
        out = ['<section id="comparison" aria-labelledby="h-comparison"><h2 id="h-comparison">'
               "Does the design meet its limits?</h2>"]
        al = d.get("all_limits")
        if al:
            interval = al.get("interval_95")
            share = al.get("share")
            kind = "pass" if al.get("meeting") == al.get("builds") else "fail"
            out.append(f"<p>{self.badge(kind)} <strong>{al.get('meeting')} of "
                       f"{al.get('builds')} builds</strong> meet every limit on every input"
                       + (f" ({share * 100:.3g} %" if share is not None else " (")
                       + (f", 95 % interval {interval[0] * 100:.3g} to {interval[1] * 100:.3g} %)"
                          if interval else ")") + f". <span class=\"muted\">"
                       f"({esc(al.get('note') or '')})</span></p>")
        else:
            out.append("<p>The study sets no limits: it reports spreads only.</p>")
        wb = d.get("worst_build")
        if wb:
            vals = _values(wb.get("values"))
            out.append(f"<p><strong>Worst build:</strong> #{esc(wb.get('build'))} "
                       f"{esc(wb.get('role'))} ({esc(vals)}): {esc(wb.get('why'))}.</p>")
        sweep = d.get("sweep")
        if sweep and sweep.get("statement"):
            out.append(f"<p><strong>Sweep:</strong> {esc(sweep['statement'])}</p>")
        out.append("</section>")
        return "".join(out)

    def badge(self, kind: str) -> str:
        from simwave.report.page import badge

        return badge(kind)

    def problems(self) -> str:
        d = self.doc
        items = [f"<li>build #{esc(p.get('build'))} {esc(p.get('role'))}"
                 f"{(' ' + esc(p['detail'])) if p.get('detail') else ''}: "
                 f"<strong>{esc(p.get('status'))}</strong> \u2014 {esc(p.get('reason'))}"
                 f" ({esc(_values(p.get('values')))})</li>"
                 for p in d.get("problem_builds") or []]
        warns = [f"<li>{esc(w)}</li>" for w in self.info.get("warnings") or []]
        notes = [f"<li>{esc(n)}</li>" for n in d.get("notes") or []]
        out = ['<section id="problems" aria-labelledby="h-problems"><h2 id="h-problems">'
               "Problem builds, warnings and notes</h2>"]
        if not (items or warns or notes):
            out.append("<p>Every build ran; no warning was raised.</p>")
        for head, li in (("Problem builds", items), ("Warnings", warns), ("Notes", notes)):
            if li:
                out.append(f"<p><strong>{head} ({len(li)})</strong></p><ul class=\"problems\">"
                           + "".join(li) + "</ul>")
        out.append("</section>")
        return "".join(out)

    def cautions(self) -> str:
        text = super().cautions()
        return text.replace('<div class="caution">',
                            f'<div class="caution"><p><strong>Tolerances.</strong> '
                            f"{esc(CAUTION)}</p>", 1)

    def table_columns(self) -> tuple[list[str], list[str]]:
        return [c for c in COLUMNS if c not in EXTRA], list(EXTRA)

    def heading(self, column: str) -> str:
        return HEADINGS.get(column, column)

    def display(self, row: Mapping[str, Any], column: str) -> str | None:
        value = row.get(column)
        if column == "share_interval_95" and isinstance(value, list) and len(value) == 2:
            return f"{value[0] * 100:.3g} to {value[1] * 100:.3g} %"
        if column == "share_inside" and isinstance(value, (int, float)):
            return f"{value * 100:.3g} %"
        if column == "moves_most" and isinstance(value, Mapping):
            s = value.get("sensitivity")
            return (f"{value.get('parameter')}"
                    + (f" (S {s:+.3g})" if isinstance(s, (int, float)) else ""))
        if column in ("nominal", "min", "max", "p5", "p50", "p95", "mean", "std",
                      "limit_min", "limit_max") and isinstance(value, (int, float)):
            from simwave.report.values import column_unit

            return number_text(value, column_unit(str(row.get("metric") or "")))
        return None

    def systems_section(self) -> str:
        d = self.doc
        system = d.get("system") or {}
        rows = "".join(
            f"<tr><th scope=\"row\">{esc(p['name'])}</th><td>{esc(p.get('text'))}</td>"
            f"<td>{esc(number_text(p.get('nominal')))}</td>"
            f"<td>{esc(self._band(p.get('tolerance')))}</td></tr>"
            for p in d.get("parameters") or [])
        methods = "".join(f"<dt>{esc(k)}</dt><dd>{esc(v)}</dd>"
                          for k, v in (d.get("methods") or {}).items())
        return ('<section id="systems" aria-labelledby="h-systems"><h2 id="h-systems">'
                "System and tolerances</h2>"
                f"<p>{esc(system.get('name'))}: H(s) = {esc(system.get('text'))}</p>"
                '<table><thead><tr><th scope="col">parameter</th><th scope="col">as given</th>'
                '<th scope="col">nominal</th><th scope="col">band and distribution</th></tr>'
                f"</thead><tbody>{rows}</tbody></table>"
                f'<h3 id="methods">How the numbers are made</h3><dl class="meta">{methods}</dl>'
                "</section>")

    @staticmethod
    def _band(tol: Any) -> str:
        if not isinstance(tol, Mapping):
            return "fixed (no tolerance)"
        return (f"{number_text(tol.get('low'))} to {number_text(tol.get('high'))}, "
                f"{tol.get('distribution')}"
                + (f" ({tol['sigmas']} sigma)" if tol.get("sigmas") else ""))

    def pairs_section(self) -> str:
        out = ['<section id="figures" aria-labelledby="h-figures"><h2 id="h-figures">Plots</h2>']
        found = False
        for name, what in PLOTS.items():
            path = os.path.join(self.study.data_dir, name)
            if not os.path.isfile(path):
                continue
            found = True
            with open(path, "rb") as fh:
                data = base64.b64encode(fh.read()).decode("ascii")
            out.append(f'<figure><img src="data:image/png;base64,{data}" alt="{esc(what)}" '
                       f'style="max-width:100%;height:auto"><figcaption>{esc(what)} '
                       f"({esc(name)}).</figcaption></figure>")
        if not found:
            out.append("<p>The study drew no plots (<code>[output] plots = false</code>).</p>")
        out.append("</section>")
        return "".join(out)


def _values(values: Any) -> str:
    return ", ".join(f"{k} = {number_text(v)}" for k, v in (values or {}).items())


def _version() -> str:
    from simwave import __version__

    return __version__
