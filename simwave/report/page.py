"""The report page: one self-contained HTML file (styles, script and figures inline).

Nothing on the page is fetched: no external scripts, styles, fonts or images,
and a Content-Security-Policy meta element forbids every fetch (``default-src
'none'``; the one script is allowed by its SHA-256 hash), so the file opens the
same from a disk, a share or an e-mail attachment. Without JavaScript (some
mail readers) everything is readable; the script only adds sorting and
filtering of the results table.

Layout: title and the job in one line; cautions; failures and warnings; the
per-system comparison with tolerance verdicts; the table of every (input,
system, channel) row; each system with its model's frequency response; each
pair with its input/output figure. Headings go h1 > h2 > h3 in order.
Verdicts are told by a word and a shape as well as a colour (Okabe-Ito
colours, as in the project's plots).
"""

from __future__ import annotations

import base64
import datetime as _dt
import hashlib
import html
import json
import os
from typing import Any, Iterable, Mapping, Sequence

from simwave.report.values import (
    Cell, bound_kind, cell_text, column_unit, null_reasons_in, number_text, read_cell,
)

#: Columns the results table shows by default, in this order, when the summary has them.
KEY_COLUMNS = ("input", "system", "channel", "status", "verdict", "kind",
               "overshoot_pct_worst", "undershoot_pct_worst", "settling_time_s_longest",
               "not_settled", "rise_time_s_mean", "delay_s_mean", "steady_state_gain",
               "steady_state_error", "gain_db", "thd_pct", "tone_gain_error_db_worst",
               "record_peak", "flags")
#: Columns of the results table kept on paper (A4 portrait has room for about ten).
PRINT_COLUMNS = ("input", "system", "channel", "verdict", "overshoot_pct_worst",
                 "settling_time_s_longest", "rise_time_s_mean", "delay_s_mean",
                 "steady_state_error", "gain_db", "thd_pct")
#: Columns about the run rather than the result (shown with "all columns").
RUN_COLUMNS = ("reused", "elapsed_s", "samples", "duration_s", "rate_hz", "output",
               "metrics_file", "record_rms", "warnings", "limits", "error")
#: Column headings for people (other columns show their summary name).
HEADINGS = {
    "input": "input", "system": "system", "channel": "channel", "status": "status",
    "verdict": "tolerance verdict", "kind": "record kind",
    "overshoot_pct_worst": "overshoot, worst (%)",
    "undershoot_pct_worst": "undershoot, worst (%)", "preshoot_pct_worst": "preshoot, worst (%)",
    "settling_time_s_longest": "settling time, longest",
    "not_settled": "transitions never settled", "rise_time_s_mean": "rise time, mean",
    "fall_time_s_mean": "fall time, mean", "delay_s_mean": "delay (50 %), mean",
    "steady_state_gain": "steady-state gain", "steady_state_error": "steady-state error",
    "gain_db": "gain at the tone (dB)", "thd_pct": "THD (%)",
    "tone_gain_error_db_worst": "tone gain vs H(s), worst (dB)", "record_peak": "output peak",
    "flags": "differences from H(s) flagged", "record_rms": "output RMS",
    "elapsed_s": "time to run", "rate_hz": "sample rate", "duration_s": "duration",
    "transitions": "transitions", "peak_time_s_first": "peak time, first transition",
    "predicted_dc_gain": "H(0)", "mean": "mean (steady window)", "rms": "RMS (steady window)",
    "ripple_pp": "ripple, peak to peak", "frequency_hz": "tone frequency",
    "phase_deg": "phase at the tone (deg)", "predicted_gain_db": "H(s) gain at the tone (dB)",
    "predicted_phase_deg": "H(s) phase at the tone (deg)", "sinad_db": "SINAD (dB)",
    "final_value": "final value", "samples": "samples", "reused": "reused",
    "output": "output file", "metrics_file": "metrics file", "warnings": "warnings",
    "limits": "tolerance bands (as written)", "error": "error",
}
#: The verdict kinds: (word shown, icon id, colour name), colours from Okabe-Ito.
VERDICTS = {
    "pass": ("pass", "i-pass", "#009E73"),
    "fail": ("fail", "i-fail", "#D55E00"),
    "not measured": ("not measured", "i-none", "#0072B2"),
    "no bands": ("no bands set", "i-dash", "#555555"),
    "run failed": ("run failed", "i-fail", "#D55E00"),
    "not run": ("not run", "i-dash", "#555555"),
}
#: Most pairs drawn in full in one page; beyond it the worst cases are drawn and the
#: rest link to their files.
MAX_DETAILED = 60
#: Most pairs drawn when a batch has more than MAX_DETAILED: its worst cases.
MAX_WORST = 30
#: Most frequency-response figures (one per system, method and rate).
MAX_MODELS = 24

CAUTIONS = (
    ("Simulation is not verification.",
     "These results come from a model of H(s) run on recorded or generated signals. They do "
     "not verify built hardware: component tolerances, non-linearity, noise, saturation, "
     "layout and the real sensor are not in the model. Test the built circuit."),
    ("Medical, protection and other safety-related signal chains.",
     "Where a wrong filter can hurt someone (patient monitoring, relay protection, machine "
     "safety), follow the applicable standards and licensed engineering practice; these "
     "numbers do not replace them."),
    ("Loud audio.",
     "Audio written by simwave can be loud: a system with gain or resonance raises the level "
     "above the input's. Start playback at low volume."),
)

_ICONS = (
    '<svg class="defs" aria-hidden="true" focusable="false" width="0" height="0">'
    '<symbol id="i-pass" viewBox="0 0 16 16"><circle cx="8" cy="8" r="7" fill="currentColor"/>'
    '<path d="M4.5 8.3l2.4 2.4 4.6-5" stroke="#fff" stroke-width="2" fill="none"/></symbol>'
    '<symbol id="i-fail" viewBox="0 0 16 16"><path d="M8 1l7 13H1z" fill="currentColor"/>'
    '<path d="M8 5.5v4.2M8 11.2v1.4" stroke="#fff" stroke-width="1.8"/></symbol>'
    '<symbol id="i-none" viewBox="0 0 16 16"><path d="M8 1.5l6.5 6.5-6.5 6.5-6.5-6.5z" '
    'fill="none" stroke="currentColor" stroke-width="2"/></symbol>'
    '<symbol id="i-dash" viewBox="0 0 16 16"><rect x="2" y="6.5" width="12" height="3" '
    'fill="currentColor"/></symbol></svg>'
)

CSS = """
:root{--ink:#1b1b1b;--muted:#555;--line:#c8c8c8;--head:#f1f1f1;--focus:#0072B2}
*{box-sizing:border-box}
body{font:15px/1.45 system-ui,-apple-system,"Segoe UI",Roboto,"DejaVu Sans",sans-serif;
 color:var(--ink);background:#fff;margin:0 auto;max-width:1200px;padding:0 1.2rem 3rem}
h1{font-size:1.55rem;margin:1.2rem 0 .3rem}h2{font-size:1.25rem;margin:2rem 0 .5rem;
 border-bottom:2px solid var(--ink);padding-bottom:.15rem}
h3{font-size:1.05rem;margin:1.5rem 0 .4rem}
.job{font-size:1rem;margin:.2rem 0 .8rem}.muted{color:var(--muted)}
nav ul{display:flex;flex-wrap:wrap;gap:.3rem 1.2rem;padding:0;margin:.4rem 0;list-style:none}
a{color:#005a8c}a:focus,button:focus,input:focus,select:focus{outline:3px solid var(--focus);
 outline-offset:1px}
.caution{border-left:5px solid #D55E00;background:#fff6ef;padding:.5rem .9rem;margin:.6rem 0}
.caution p{margin:.25rem 0}
table{border-collapse:collapse;margin:.4rem 0;font-size:.86rem}
table.channel{max-width:60rem}
th,td{border:1px solid var(--line);padding:.22rem .45rem;vertical-align:top;text-align:left}
thead th{background:var(--head)}td.num{text-align:right;white-space:nowrap}
.scroll{overflow-x:auto;max-width:100%}
th button{font:inherit;font-weight:bold;background:none;border:0;padding:0;cursor:pointer;
 color:inherit;text-align:left}
th button::after{content:" \\2195";color:var(--muted)}
th[aria-sort=ascending] button::after{content:" \\2191";color:var(--ink)}
th[aria-sort=descending] button::after{content:" \\2193";color:var(--ink)}
.v{white-space:nowrap;font-weight:600}.v svg{width:1em;height:1em;vertical-align:-.12em;
 margin-right:.25em}
.defs{position:absolute;width:0;height:0;overflow:hidden}
.why{font-size:.78em;vertical-align:super;margin-left:.1em}
.extra{display:none}.show-all .extra{display:table-cell}
.controls{display:flex;flex-wrap:wrap;gap:.5rem 1.4rem;align-items:center;margin:.4rem 0}
.controls label{font-weight:600}
.problems li{margin:.2rem 0}.error{color:#8a2d00}
figure{margin:.6rem 0 1rem;max-width:100%}figure svg{width:100%;height:auto;max-width:980px}
figcaption{font-size:.85rem;color:var(--muted)}
.pair{border-top:1px solid var(--line);margin-top:1.2rem}
dl.meta{display:grid;grid-template-columns:max-content 1fr;gap:.1rem 1rem;margin:.4rem 0}
dl.meta dt{font-weight:600}dl.meta dd{margin:0}
footer{margin-top:3rem;font-size:.85rem;color:var(--muted)}
@media print{
 @page{size:A4;margin:14mm 12mm}
 body{font-size:9.5pt;max-width:none;padding:0}
 nav,.controls,.noprint{display:none}
 h2{break-after:avoid}h3{break-after:avoid}
 table{font-size:7.5pt}th,td{padding:1px 3px}.scroll{overflow:visible}
 .extra,.show-all .extra{display:none}
 td,th{overflow-wrap:anywhere;word-break:break-word}
 #rows-table td.num{white-space:normal}
 th button::after,th[aria-sort] button::after{content:""}
 figure{break-inside:avoid}figure svg{max-width:100%}
 .pair{break-before:auto}a{color:inherit;text-decoration:none}
 tr[hidden]{display:table-row}
}
"""

#: Sorting and filtering of the results table (plain JavaScript, no library).
SCRIPT = """
(function () {
  "use strict";
  var table = document.getElementById("rows-table");
  if (!table) { return; }
  var body = table.tBodies[0];
  var rows = Array.prototype.slice.call(body.rows);
  var heads = Array.prototype.slice.call(table.tHead.rows[0].cells);
  var count = document.getElementById("rows-count");
  function key(row, i) {
    var cell = row.cells[i];
    var s = cell.getAttribute("data-s");
    if (s === null) {
      var v = JSON.parse(cell.getAttribute("data-v") || "null");
      if (v !== null && typeof v === "object") { v = "value" in v ? v.value : null; }
      if (v === null || v === "") { return null; }
      return typeof v === "number" ? v : String(v).toLowerCase();
    }
    if (s === "") { return null; }
    var n = Number(s);
    return isNaN(n) ? s.toLowerCase() : n;
  }
  function sortBy(i) {
    var th = heads[i];
    var dir = th.getAttribute("aria-sort") === "ascending" ? "descending" : "ascending";
    heads.forEach(function (h) { h.removeAttribute("aria-sort"); });
    th.setAttribute("aria-sort", dir);
    var sign = dir === "ascending" ? 1 : -1;
    var order = rows.map(function (r, k) { return [key(r, i), k, r]; });
    order.sort(function (a, b) {
      if (a[0] === null || b[0] === null) {
        return a[0] === b[0] ? a[1] - b[1] : (a[0] === null ? 1 : -1);
      }
      if (typeof a[0] !== typeof b[0]) { return typeof a[0] === "number" ? -1 : 1; }
      if (a[0] < b[0]) { return -sign; }
      if (a[0] > b[0]) { return sign; }
      return a[1] - b[1];
    });
    order.forEach(function (e) { body.appendChild(e[2]); });
    var note = document.getElementById("sort-state");
    if (note) { note.textContent = "Sorted by " + th.textContent.trim() + ", " + dir + "."; }
  }
  heads.forEach(function (th, i) {
    var b = th.querySelector("button");
    if (b) { b.addEventListener("click", function () { sortBy(i); }); }
  });
  var text = document.getElementById("rows-filter");
  var verdict = document.getElementById("rows-verdict");
  function filter() {
    var q = text.value.trim().toLowerCase();
    var v = verdict.value;
    var shown = 0;
    rows.forEach(function (r) {
      var ok = (!q || r.getAttribute("data-text").indexOf(q) !== -1) &&
               (!v || r.getAttribute("data-verdict") === v);
      r.hidden = !ok;
      if (ok) { shown += 1; }
    });
    count.textContent = shown + " of " + rows.length + " rows shown.";
  }
  text.addEventListener("input", filter);
  verdict.addEventListener("change", filter);
  var all = document.getElementById("rows-all");
  all.addEventListener("change", function () {
    table.classList.toggle("show-all", all.checked);
  });
  document.documentElement.classList.add("js");
}());
"""


def esc(text: Any) -> str:
    """HTML-escaped text (quotes too)."""
    return html.escape(str(text), quote=True)


def verdict_of(row: Mapping[str, Any]) -> tuple[str, str]:
    """(verdict kind, detail) of a summary row: its status, then its tolerance-band text.

    The band text is the summary's ``limits`` column as written: ``pass``,
    ``fail: ...``, ``not measured: ...`` or a mixture (``pass; not measured: x``).
    """
    status = str(row.get("status") or "")
    if status == "failed":
        return "run failed", str(row.get("error") or "")
    if status and status != "ok":
        return "not run", status
    text = str(row.get("limits") or "").strip()
    low = text.lower()
    if not text:
        return "no bands", ""
    if low.startswith("fail"):
        return "fail", text
    if low.startswith("pass"):
        return "pass", text
    if low.startswith("not measured"):
        return "not measured", text
    return "not measured", text


def badge(kind: str) -> str:
    word, icon, colour = VERDICTS[kind]
    return (f'<span class="v" style="color:{colour}"><svg aria-hidden="true" focusable="false">'
            f'<use href="#{icon}"/></svg><span style="color:#1b1b1b">{esc(word)}</span></span>')


class Footnotes:
    """Numbered reasons for missing values and bounds, listed once under a table."""

    def __init__(self, prefix: str) -> None:
        self.prefix = prefix
        self.numbers: dict[str, int] = {}

    def mark(self, reason: str) -> str:
        n = self.numbers.setdefault(reason, len(self.numbers) + 1)
        return f'<a class="why" href="#{self.prefix}-{n}" aria-label="note {n}">{n}</a>'

    def html(self, heading: str) -> str:
        if not self.numbers:
            return ""
        items = "".join(f'<li id="{self.prefix}-{n}">{esc(r)}</li>'
                        for r, n in self.numbers.items())
        return f'<p><strong>{esc(heading)}</strong></p><ol class="notes">{items}</ol>'


def value_html(cell: Cell, unit: str, notes: Footnotes | None) -> str:
    text = esc(cell_text(cell, unit))
    if cell.reason and (cell.missing or cell.bound):
        if notes is not None:
            return text + notes.mark(str(cell.reason))
        return f"{text} <span class=\"muted\">({esc(cell.reason)})</span>"
    return text


# ----------------------------------------------------------------------------- building
class Page:
    """Builds the page of one :class:`~simwave.report.study.Study`."""

    #: The verdict of a row (kind, detail); a study of another kind brings its own.
    verdict = staticmethod(verdict_of)
    results_heading = "All results: one row per input, system and output channel"

    def heading(self, column: str) -> str:
        """A column's heading for people."""
        return HEADINGS.get(column, column)

    def display(self, row: Mapping[str, Any], column: str) -> str | None:
        """Text for a cell the generic number/bound/gap reading does not cover (None: none)."""
        return None

    def __init__(self, study: Any, *, max_detailed: int = MAX_DETAILED,
                 figures: bool = True, log: Any = None) -> None:
        self.study = study
        self.max_detailed = max_detailed
        self.figures = figures
        self.say = log or (lambda _t: None)
        self.salt = 0
        self.reasons: dict[tuple[int, Any], dict[str, str]] = {}
        self.prov: dict[int, dict[str, Any]] = {}
        self.written: list[str] = []
        self.models: dict[tuple, dict[str, Any]] = {}
        self.detailed: list[Any] = []

    # ---------------------------------------------------------------- gathering
    def gather(self) -> None:
        """Read every pair's metrics file once: null reasons, provenance, warnings."""
        from simwave.report.figures import model_key

        self.detailed = self.choose_detailed()
        keep = {p.index for p in self.detailed}
        for pair in self.study.pairs:
            doc = pair.load()
            if doc is None:
                continue
            metrics = doc.get("metrics") or {}
            for ch in metrics.get("channels") or []:
                self.reasons[(pair.index, ch.get("name"))] = null_reasons_in(
                    ch, {"predicted": metrics.get("predicted") or {}})
            prov = (doc.get("run") or {}).get("provenance") or {}
            self.prov[pair.index] = prov
            if prov.get("written"):
                self.written.append(str(prov["written"]))
            if prov.get("poles") is not None and prov.get("model_rate_hz"):
                key = model_key(prov)
                entry = self.models.setdefault(key, {"prov": prov, "pairs": [],
                                                     "id": f"model-{len(self.models)}"})
                entry["pairs"].append(pair.index)
            if pair.index not in keep:
                pair.doc = {"run": {"warnings": (doc.get("run") or {}).get("warnings"),
                                    "provenance": prov}}  # the rest is not needed again

    def choose_detailed(self) -> list[Any]:
        """The pairs drawn in full: all of them up to the limit, else the worst cases first."""
        pairs = self.study.pairs
        if len(pairs) <= self.max_detailed:
            return list(pairs)
        chosen: list[Any] = []

        def add(p: Any) -> None:
            if p is not None and p not in chosen and p.output:
                chosen.append(p)

        for name, entry in self.study.comparison.items():
            for value in entry.values():
                if isinstance(value, Mapping) and "input" in value:
                    add(self.study.pair_of({"input": value["input"], "system": name}))
        for row in self.study.rows:
            kind, _ = self.verdict(row)
            if kind == "fail" or (row.get("not_settled") or 0) or (row.get("flags") or 0):
                add(self.study.pair_of(row))
        return chosen[: min(self.max_detailed, MAX_WORST)]

    def cell(self, row: Mapping[str, Any], column: str) -> Cell:
        pair = self.study.pair_of(row)
        reasons = self.reasons.get((pair.index, row.get("channel"))) if pair else None
        return read_cell(row, column, reasons)

    # ---------------------------------------------------------------- sections
    def build(self) -> str:
        self.gather()
        s = self.study
        title = self.title()
        parts = [
            f"<header><h1>{esc(title)}</h1>",
            f'<p class="job">{self.job_line()}</p>',
            self.nav(),
            "</header><main>",
            self.comparison() if s.kind != "run" else "",
            self.problems(),
            self.cautions(),
            self.rows_table(),
            self.systems_section(),
            self.pairs_section(),
            "</main>",
            self.footer(),
        ]
        script = SCRIPT.strip()
        digest = base64.b64encode(hashlib.sha256(script.encode()).digest()).decode()
        csp = (f"default-src 'none'; script-src 'sha256-{digest}'; style-src 'unsafe-inline'; "
               "img-src data:; base-uri 'none'; form-action 'none'")
        return (
            "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
            f'<meta http-equiv="Content-Security-Policy" content="{csp}">\n'
            '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
            '<link rel="icon" href="data:,">\n'
            f"<title>{esc(title)}</title>\n<style>{CSS.strip()}</style>\n</head>\n<body>\n"
            + _ICONS + "\n" + "\n".join(p for p in parts if p)
            + f"\n<script>{script}</script>\n</body>\n</html>\n"
        )

    def title(self) -> str:
        s = self.study
        if s.kind == "run":
            p = s.pairs[0]
            return f"simwave run: {p.input} through {p.system}"
        n_in = len({r['input'] for r in s.rows})
        n_sys = len({r['system'] for r in s.rows})
        return f"simwave batch: {n_in} input(s) \u00d7 {n_sys} system(s)"

    def job_line(self) -> str:
        s = self.study
        inputs = list(dict.fromkeys(str(r["input"]) for r in s.rows))
        systems = list(dict.fromkeys(str(r["system"]) for r in s.rows))
        opts = [v.get("run_options") or {} for v in s.systems.values() if isinstance(v, Mapping)]
        methods = sorted({str(p.get("method")) for p in self.prov.values() if p.get("method")}
                         | {str(o["method"]) for o in opts if o.get("method")})
        rates = sorted({float(r["rate_hz"]) for r in s.rows
                        if isinstance(r.get("rate_hz"), (int, float))})
        versions = sorted({str(p.get("simwave_version")) for p in self.prov.values()
                           if p.get("simwave_version")})
        when = max(self.written) if self.written else None
        c = s.counts

        def listing(items: Sequence[str], most: int = 6) -> str:
            shown = ", ".join(items[:most])
            return shown + (f" and {len(items) - most} more" if len(items) > most else "")

        bits = [
            f"<strong>Inputs</strong> {esc(listing(inputs))}",
            f"<strong>systems</strong> {esc(listing(systems))}",
            f"<strong>method</strong> {esc(', '.join(methods) or 'not recorded')}",
            "<strong>rate</strong> " + esc(", ".join(number_text(r, "Hz") for r in rates)
                                           or "not recorded"),
            "<strong>run</strong> " + esc(_when(when) if when else "time not recorded"),
            "<strong>simwave</strong> " + esc(", ".join(versions) or _version()),
        ]
        if s.kind == "batch" and c:
            bits.append(f"<strong>pairs</strong> {c.get('pairs', 0)}: {c.get('ok', 0)} ok, "
                        f"{c.get('failed', 0)} failed, {c.get('not_run', 0)} not run"
                        + (" (interrupted)" if s.interrupted else ""))
        return "; ".join(bits) + "."

    def nav(self) -> str:
        items = [("comparison", "Per-system comparison")] if self.study.kind == "batch" else []
        items += [("problems", "Failures and warnings"), ("cautions", "Cautions"),
                  ("results", "All results"), ("systems", "Systems and models"),
                  ("pairs", "Each input and system")]
        links = "".join(f'<li><a href="#{a}">{esc(t)}</a></li>' for a, t in items)
        return f'<nav aria-label="Contents"><ul>{links}</ul></nav>'

    def cautions(self) -> str:
        audio = self.audio_levels()
        items = []
        for head, text in CAUTIONS:
            extra = ""
            if head.startswith("Loud audio") and audio:
                extra = " Audio outputs here: " + "; ".join(
                    f"{esc(name)} peak {esc(level)}" for name, level in audio) + "."
            items.append(f"<p><strong>{esc(head)}</strong> {esc(text)}{extra}</p>")
        return ('<section id="cautions" aria-labelledby="h-cautions"><h2 id="h-cautions">'
                f'Cautions</h2><div class="caution">{"".join(items)}</div></section>')

    def audio_levels(self) -> list[tuple[str, str]]:
        out = []
        for pair in self.study.pairs:
            write = ((pair.doc or {}).get("run") or {}).get("write") or {}
            if write.get("peak_dbfs") is not None:
                name = os.path.basename(pair.output or pair.label)
                out.append((name, f"{write['peak_dbfs']:+.1f} dBFS"))
        return out[:20]

    def problems(self) -> str:
        s = self.study
        failed, warned, notrun, bands = [], [], [], []
        for pair in s.pairs:
            link = self.pair_link(pair)
            if pair.status == "failed":
                failed.append(f"<li>{link}: <span class=\"error\">{esc(pair.error or 'failed')}"
                              "</span></li>")
            elif pair.status and pair.status != "ok":
                notrun.append(f"<li>{link}: {esc(pair.status)}</li>")
            if pair.doc_error and pair.status == "ok":
                failed.append(f"<li>{link}: <span class=\"error\">{esc(pair.doc_error)}"
                              "</span></li>")
            for w in pair.warnings:
                warned.append(f"<li>{link}: {esc(w)}</li>")
        for row in s.rows:
            kind, detail = self.verdict(row)
            if kind == "fail":
                pair = s.pair_of(row)
                where = self.pair_link(pair) if pair else esc(row["input"])
                bands.append(f"<li>{where}, channel {esc(row.get('channel'))}: "
                             f"{badge('fail')} {esc(detail)}</li>")
        out = ['<section id="problems" aria-labelledby="h-problems">'
               '<h2 id="h-problems">Failures and warnings</h2>']
        if not (failed or warned or notrun or bands):
            out.append("<p>No pair failed, none was left unrun, no tolerance band was "
                       "exceeded and no warning was raised.</p>")
        for head, items in (("Pairs that failed", failed), ("Pairs not run", notrun),
                            ("Outside tolerance bands", bands), ("Warnings", warned)):
            if items:
                out.append(f'<p><strong>{head} ({len(items)})</strong></p>'
                           f'<ul class="problems">{"".join(items)}</ul>')
        for note in s.notes:
            out.append(f"<p>{esc(note)}</p>")
        out.append("</section>")
        return "".join(out)

    def pair_link(self, pair: Any) -> str:
        if pair in self.detailed:
            return f'<a href="#{pair.anchor}">{esc(pair.label)}</a>'
        if pair.metrics_path and os.path.exists(pair.metrics_path):
            return f'<a href="{esc(self.rel(pair.metrics_path))}">{esc(pair.label)}</a>'
        return esc(pair.label)

    def rel(self, path: str) -> str:
        return os.path.relpath(path, self.study.folder).replace(os.sep, "/")

    # ---------------------------------------------------------------- comparison
    def comparison(self) -> str:
        from simwave.batch.summary import COMPARISON

        comp = self.study.comparison
        names = list(comp)
        if not names:
            return ('<section id="comparison" aria-labelledby="h-comparison"><h2 id="h-comparison">'
                    "Per-system comparison</h2><p>The summary holds no comparison.</p></section>")
        notes = Footnotes("cmp-why")
        labels = {key: label for key, label, _, _ in COMPARISON}
        quantities = [k for k, _, _, _ in COMPARISON if any(k in comp[n] for n in names)]
        quantities += [k for n in names for k, v in comp[n].items()
                       if isinstance(v, Mapping) and "value" in v and k not in quantities]
        quantities = list(dict.fromkeys(quantities))
        head = "".join(f'<th scope="col">{esc(n)}</th>' for n in names)
        body = [self._cmp_row("pairs ok / failed / not run",
                              [f"{comp[n].get('ok', 0)} / {comp[n].get('failed', 0)} / "
                               f"{comp[n].get('not_run', 0)}" for n in names])]
        body.append(self._cmp_row("tolerance bands", [self.bands_text(n) for n in names]))
        body.append(self._cmp_row("tolerance verdicts (rows)",
                                  [self.verdict_counts(n) for n in names], raw=True))
        for key in quantities:
            if all(comp[n].get(key) is None for n in names):
                continue  # no system has it (a sine quantity in a batch of steps)
            cells = [self._cmp_cell(n, key, comp[n].get(key), notes) for n in names]
            body.append(self._cmp_row(labels.get(key, key).replace(" (s)", ""), cells, raw=True))
        body.append(self._cmp_row("channels never settled",
                                  [str(comp[n].get("not_settled", 0)) for n in names]))
        body.append(self._cmp_row("differences from H(s) flagged",
                                  [str(comp[n].get("flags", 0)) for n in names]))
        body.append(self._cmp_row("rows outside tolerance bands",
                                  [str(comp[n].get("limit_failures", 0)) for n in names]))
        return ('<section id="comparison" aria-labelledby="h-comparison"><h2 id="h-comparison">'
                "Per-system comparison</h2><p>Worst case of each quantity across the inputs "
                "(pairs that ran ok), with the input it came from.</p>"
                '<div class="scroll"><table id="comparison-table"><caption class="muted">'
                "quantities down, systems across</caption><thead><tr>"
                f'<th scope="col">quantity</th>{head}</tr></thead><tbody>{"".join(body)}'
                f"</tbody></table></div>{notes.html('Why a value is missing')}</section>")

    @staticmethod
    def _cmp_row(label: str, cells: list[str], raw: bool = False) -> str:
        tds = "".join(f"<td>{c if raw else esc(c)}</td>" for c in cells)
        return f'<tr><th scope="row">{esc(label)}</th>{tds}</tr>'

    def _cmp_cell(self, system: str, key: str, entry: Any, notes: Footnotes) -> str:
        from simwave.batch.summary import COMPARISON

        unit = column_unit(key)
        if isinstance(entry, Mapping) and entry.get("value") is not None:
            column = {k: col for k, _, col, _ in COMPARISON}.get(key, key)
            source = next((r for r in self.study.rows if r.get("system") == system
                           and r.get("input") == entry.get("input")
                           and r.get("channel") == entry.get("channel")), None)
            from_row = self.cell(source, column) if source is not None else None
            bound = bound_kind(entry.get("bound")) or (
                from_row.bound if from_row is not None and from_row.value == entry["value"]
                else "")
            cell = Cell(entry, entry.get("value"), bound,
                        entry.get("reason") or (from_row.reason if from_row else None))
            where = entry.get("input_name") or entry.get("input")
            pair = self.study.pair_of({"input": entry.get("input"), "system": system})
            link = self.pair_link(pair) if pair else esc(where)
            if pair:
                link = link.replace(esc(pair.label), esc(where))
            return f"{value_html(cell, unit, notes)} <span class=\"muted\">({link})</span>"
        reason = entry.get("reason") if isinstance(entry, Mapping) else None
        if not reason:
            column = {k: col for k, _, col, _ in COMPARISON}.get(key, key)
            whys = [self.cell(r, column).reason for r in self.study.rows
                    if r.get("system") == system and r.get("status") == "ok"]
            whys = list(dict.fromkeys(w for w in whys if w))
            reason = ("no pair of this system that ran ok gives a value"
                      + (": " + "; ".join(whys) if whys else ""))
        return value_html(Cell(entry, None, "", reason), unit, notes)

    def bands_text(self, system: str) -> str:
        limits = (self.study.systems.get(system) or {}).get("limits") or {}
        if not limits:
            return "none set"
        parts = []
        for metric, band in limits.items():
            lo, hi = ((list(band) + [None, None])[:2] if isinstance(band, (list, tuple))
                      else (None, None))
            unit = column_unit(metric)
            if lo is not None and hi is not None:
                parts.append(f"{number_text(lo, unit)} \u2264 {metric} \u2264 "
                             f"{number_text(hi, unit)}")
            elif hi is not None:
                parts.append(f"{metric} \u2264 {number_text(hi, unit)}")
            elif lo is not None:
                parts.append(f"{metric} \u2265 {number_text(lo, unit)}")
        return "; ".join(parts)

    def verdict_counts(self, system: str) -> str:
        counts: dict[str, int] = {}
        for row in self.study.rows:
            if row.get("system") == system:
                kind, _ = self.verdict(row)
                counts[kind] = counts.get(kind, 0) + 1
        return " ".join(f"{badge(k)}\u00a0{counts[k]}" for k in VERDICTS if counts.get(k))

    # ---------------------------------------------------------------- results table
    def table_columns(self) -> tuple[list[str], list[str]]:
        """(shown, extra) columns: key columns first; all-empty columns left out."""
        cols = list(self.study.columns)
        rows = self.study.rows

        def has_value(c: str) -> bool:
            return any(r.get(c) not in (None, "") for r in rows)

        shown = [c for c in KEY_COLUMNS if c == "verdict" or (c in cols and has_value(c))]
        extra = [c for c in cols if c not in shown and has_value(c)]
        return shown, extra

    def rows_table(self) -> str:
        shown, extra = self.table_columns()
        empty = [c for c in self.study.columns if c not in shown and c not in extra]
        notes = Footnotes("why")
        heads = []
        for c in shown + extra:
            heads.append(f'<th scope="col" data-col="{esc(c)}"><button type="button">'
                         f"{esc(self.heading(c))}</button></th>")
        body = []
        for row in self.study.rows:
            kind, _ = self.verdict(row)
            text = " ".join(str(row.get(c) or "") for c in ("input", "system", "channel",
                                                             "status")) + " " + kind
            tds = [self._row_cell(row, c, c in extra, notes, kind) for c in shown + extra]
            body.append(f'<tr data-verdict="{esc(kind)}" data-text="{esc(text.lower())}">'
                        + "".join(tds) + "</tr>")
        options = "".join(f'<option value="{esc(k)}">{esc(VERDICTS[k][0])}</option>'
                          for k in VERDICTS)
        files = ", ".join(f'<a href="{esc(self.rel(p))}">{esc(os.path.basename(p))}</a>'
                          for p in self.study.summary_files)
        empty_note = (f"<p class=\"muted\">Columns with no value in any row (left out): "
                      f"{esc(', '.join(empty))}.</p>" if empty else "")
        return (
            '<section id="results" aria-labelledby="h-results"><h2 id="h-results">'
            f"{esc(self.results_heading)}</h2>"
            f"<p>{_count(len(self.study.rows), 'row')}"
            + (", exactly as the summary holds them" if self.study.kind != "run" else "")
            + (f" ({files})" if files else "") + ". Values to 4 significant digits; "
            "\u2265 and \u2264 mark bounds, n/a a value that could not be measured, each with "
            "its reason in the numbered notes below the table.</p>"
            '<div class="controls noprint">'
            '<span><label for="rows-filter">Filter rows</label> '
            '<input id="rows-filter" type="search" placeholder="input, system, channel..."></span>'
            '<span><label for="rows-verdict">Tolerance verdict</label> '
            f'<select id="rows-verdict"><option value="">any</option>{options}</select></span>'
            '<span><input id="rows-all" type="checkbox"> <label for="rows-all">show all '
            "columns</label></span>"
            f'<span id="rows-count" aria-live="polite">{len(self.study.rows)} of '
            f"{len(self.study.rows)} rows shown.</span>"
            '<span id="sort-state" class="muted" aria-live="polite">Sort by any column with '
            "its header button.</span></div>"
            '<noscript><p class="muted">Sorting and filtering need JavaScript; the table '
            "reads the same without it.</p></noscript>"
            + self.column_styles(shown, extra)
            + '<div class="scroll"><table id="rows-table"><thead><tr>' + "".join(heads)
            + "</tr></thead><tbody>" + "\n".join(body) + "</tbody></table></div>"
            + notes.html("Why a value is missing or only a bound") + empty_note + "</section>"
        )

    def column_styles(self, shown: list[str], extra: list[str]) -> str:
        """Which columns are extra, screen-only or numeric, as CSS rules by position.

        One rule per column instead of a class on each of thousands of cells.
        """
        cols = shown + extra
        numeric = {c for c in cols if any(
            isinstance(self.cell_value(r, c), (int, float))
            and not isinstance(self.cell_value(r, c), bool) for r in self.study.rows)}

        def sel(names: Iterable[str], tags: str = "td,th", table: str = "#rows-table") -> str:
            return ",".join(f"{table} {t}:nth-child({cols.index(c) + 1})"
                            for c in names for t in tags.split(","))

        rules = []
        if extra:
            rules.append(f"{sel(extra, table='#rows-table:not(.show-all)')}{{display:none}}")
        if numeric:
            rules.append(f"{sel(numeric, 'td')}{{text-align:right;white-space:nowrap}}")
        hidden = [c for c in cols if c in extra or c not in PRINT_COLUMNS]
        if hidden:
            rules.append(f"@media print{{{sel(hidden)}{{display:none}}}}")
        return "<style>" + "".join(rules) + "</style>"

    @staticmethod
    def cell_value(row: Mapping[str, Any], c: str) -> Any:
        v = row.get(c)
        return v.get("value") if isinstance(v, Mapping) else v

    def _row_cell(self, row: Mapping[str, Any], c: str, extra: bool, notes: Footnotes,
                  kind: str) -> str:
        if c == "verdict":
            return (f'<td data-s="{esc(VERDICTS[kind][0])}">{badge(kind)}</td>')
        raw = row.get(c)
        data_v = esc(json.dumps(raw, allow_nan=False, sort_keys=True)) if _jsonable(raw) else ""
        special = self.display(row, c)
        if special is not None:
            first = raw[0] if isinstance(raw, list) and raw else raw
            numeric = isinstance(first, (int, float)) and not isinstance(first, bool)
            sort = repr(float(first)) if numeric else special
            return f'<td data-s="{esc(sort)}" data-v="{data_v}">{esc(special)}</td>'
        cell = self.cell(row, c)
        # the sort key is the JSON value itself unless the value sits inside a dictionary
        sort = None
        if isinstance(raw, Mapping):
            sort = "" if cell.missing or cell.value is None else str(cell.value)
        if c == "input":
            pair = self.study.pair_of(row)
            content = self.pair_link(pair).replace(esc(pair.label), esc(row[c])) if pair \
                else esc(row[c])
        elif c in ("output", "metrics_file") and cell.value:
            path = os.path.join(self.study.data_dir or self.study.folder, str(cell.value))
            content = f'<a href="{esc(self.rel(path))}">{esc(cell.value)}</a>'
        elif c == "status":
            content = esc(cell.value or "")
        elif cell.value is None and not cell.reason:
            content = ""
        else:
            content = value_html(cell, column_unit(c), notes)
        data_s = "" if sort is None else f' data-s="{esc(sort)}"'
        return f'<td{data_s} data-v="{data_v}">{content}</td>'

    # ---------------------------------------------------------------- systems
    def systems_section(self) -> str:
        out = ['<section id="systems" aria-labelledby="h-systems"><h2 id="h-systems">'
               "Systems and their discrete models</h2>"]
        models = list(self.models.values())
        for name, info in self.study.systems.items():
            info = info if isinstance(info, Mapping) else {}
            out.append(f'<h3 id="system-{esc(_slug(name))}">{esc(name)}</h3><dl class="meta">')
            out.append(f"<dt>defined as</dt><dd>{esc(_definition_text(info.get('definition')))}"
                       "</dd>")
            opts = info.get("run_options") or {}
            if opts:
                out.append("<dt>run options</dt><dd>" + esc(", ".join(
                    f"{k} {v}" for k, v in opts.items() if v is not None)) + "</dd>")
            out.append(f"<dt>tolerance bands</dt><dd>{esc(self.bands_text(name))}</dd></dl>")
            mine = [m for m in models if m["prov"].get("system_name") == name]
            if not mine:
                out.append("<p>No model of this system was recorded (no pair of it finished).</p>")
            for m in mine[:MAX_MODELS]:
                out.append(self.model_figure(m))
            if len(mine) > MAX_MODELS:
                out.append(f"<p>{len(mine) - MAX_MODELS} more models of this system are not "
                           "drawn (see the pairs' metrics files).</p>")
        out.append("</section>")
        return "".join(out)

    def model_figure(self, m: Mapping[str, Any]) -> str:
        from simwave.errors import SimwaveError
        from simwave.report.figures import frequency_svg

        prov = m["prov"]
        rate = prov.get("model_rate_hz")
        head = (f"{prov.get('method')} model at {number_text(float(rate), 'Hz')}"
                + (f", prewarped at {number_text(float(prov['prewarp_hz']), 'Hz')}"
                   if prov.get("prewarp_hz") else ""))
        used = len(m["pairs"])
        if not self.figures:
            return f'<p id="{m["id"]}">{esc(head)} (figures not drawn).</p>'
        self.say(f"drawing the frequency response of {prov.get('system_name')}")
        try:
            svg, alt = frequency_svg(prov, self._salt())
        except (SimwaveError, ValueError, KeyError) as exc:
            return f'<p id="{m["id"]}">{esc(head)}: frequency response not drawn ({esc(exc)}).</p>'
        return (f'<figure id="{m["id"]}">{svg}<figcaption>{esc(head)}, used by {used} '
                f"pair(s). Solid: the analog H(j2\u03c0f) from the recorded zeros, poles and "
                "gain; dashed: the discrete model.</figcaption></figure>")

    def _salt(self) -> str:
        self.salt += 1
        return f"simwave-report-{self.salt}"

    # ---------------------------------------------------------------- pairs
    def pairs_section(self) -> str:
        s = self.study
        out = ['<section id="pairs" aria-labelledby="h-pairs"><h2 id="h-pairs">'
               "Each input and system</h2>"]
        if len(self.detailed) < len(s.pairs):
            out.append(f"<p>{len(s.pairs)} pairs: the {len(self.detailed)} worst cases (the "
                       "worst of each quantity per system, then rows outside their bands, never "
                       "settled or flagged) are drawn here; every other pair links to its files "
                       "in the table above and below.</p>")
        for pair in self.detailed:
            out.append(self.pair_html(pair))
        rest = [p for p in s.pairs if p not in self.detailed]
        if rest:
            out.append('<h3 id="other-pairs">Other pairs (files only)</h3><ul>')
            for p in rest:
                links = [f'<a href="{esc(self.rel(f))}">{esc(os.path.basename(f))}</a>'
                         for f in (p.output, p.metrics_path) if f]
                out.append(f"<li>{esc(p.label)}: {esc(p.status)}"
                           + (f" ({', '.join(links)})" if links else "") + "</li>")
            out.append("</ul>")
        out.append("</section>")
        return "".join(out)

    def pair_html(self, pair: Any) -> str:
        from simwave.errors import SimwaveError
        from simwave.report.figures import model_key, overlay_svg

        doc = pair.load() or {}
        run = doc.get("run") or {}
        row = pair.rows[0] if pair.rows else {}
        out = [f'<section class="pair" id="{pair.anchor}" aria-labelledby="h-{pair.anchor}">'
               f'<h3 id="h-{pair.anchor}">{esc(pair.label)}</h3><dl class="meta">']
        out.append(f"<dt>status</dt><dd>{esc(pair.status)}</dd>")
        if pair.error:
            out.append(f'<dt>error</dt><dd class="error">{esc(pair.error)}</dd>')
        if row.get("samples") is not None:
            out.append("<dt>record</dt><dd>" + esc(
                f"{row['samples']} samples, {number_text(row.get('duration_s'), 's')} at "
                f"{number_text(row.get('rate_hz'), 'Hz')}") + "</dd>")
        prov = run.get("provenance") or {}
        if prov:
            out.append("<dt>model</dt><dd>" + esc(
                f"{prov.get('method')}, initial state {prov.get('initial')}"
                + (f", oversampled \u00d7{prov['oversample']}" if (prov.get('oversample') or 1) > 1
                   else "")) + self._accuracy(run) + "</dd>")
        for f, what in ((pair.output, "output"), (pair.metrics_path, "metrics")):
            if f and os.path.exists(f):
                out.append(f'<dt>{what} file</dt><dd><a href="{esc(self.rel(f))}">'
                           f"{esc(os.path.basename(f))}</a></dd>")
        out.append("</dl>")
        warns = list(pair.warnings) + [str(w) for w in (run.get("accuracy") or {}).get("warnings")
                                       or []]
        if pair.doc_error:
            warns.insert(0, pair.doc_error)
        if warns:
            out.append("<p><strong>Warnings</strong></p><ul>"
                       + "".join(f"<li>{esc(w)}</li>" for w in dict.fromkeys(warns)) + "</ul>")
        for r in pair.rows:
            out.append(self.channel_table(pair, r))
        if pair.status == "ok" and pair.output and self.figures:
            self.say(f"drawing {pair.label}")
            try:
                svg, alt = overlay_svg(pair, self._salt())
                out.append(f"<figure>{svg}<figcaption>{esc(alt)}</figcaption></figure>")
            except (SimwaveError, OSError, ValueError) as exc:
                out.append(f"<p>Input/output figure not drawn: {esc(exc)}</p>")
            except (TypeError, KeyError, IndexError) as exc:  # a plotting bug: say so, go on
                out.append(f"<p>Input/output figure not drawn: the plot failed "
                           f"({esc(type(exc).__name__)}: {esc(exc)}); please report it.</p>")
        if prov.get("poles") is not None and prov.get("model_rate_hz"):
            m = self.models.get(model_key(prov))
            if m:
                out.append(f'<p>Frequency response of this model: <a href="#{m["id"]}">'
                           f"{esc(prov.get('system_name'))}, {esc(prov.get('method'))} at "
                           f"{esc(number_text(float(prov['model_rate_hz']), 'Hz'))}</a>.</p>")
        out.append("</section>")
        return "".join(out)

    @staticmethod
    def _accuracy(run: Mapping[str, Any]) -> str:
        acc = run.get("accuracy") or {}
        if acc.get("max_mag_error_db") is None:
            return ""
        return esc(f"; largest magnitude error against H(s) "
                   f"{number_text(acc['max_mag_error_db'], 'dB')} at "
                   f"{number_text(acc.get('max_mag_error_at_hz'), 'Hz')} (band to "
                   f"{number_text(acc.get('band_hz'), 'Hz')})")

    def channel_table(self, pair: Any, row: Mapping[str, Any]) -> str:
        """The channel's metrics: measured values, bounds, and the reasons for gaps."""
        if row.get("status") != "ok":
            return ""
        shown, extra = self.table_columns()
        skip = ({"input", "system", "channel", "status", "verdict", "kind", "bounds", "missing"}
                | set(RUN_COLUMNS))
        lines = []
        for c in [c for c in shown + extra if c not in skip]:
            cell = self.cell(row, c)
            generic = cell.missing and (cell.reason or "").startswith("not measured:")
            if cell.value is None and (not cell.reason or generic):
                continue
            lines.append(f'<tr><th scope="row">{esc(HEADINGS.get(c, c))}</th>'
                         f"<td>{value_html(cell, column_unit(c), None)}</td></tr>")
        kind, detail = self.verdict(row)
        lines.append(f'<tr><th scope="row">tolerance verdict</th><td>{badge(kind)}'
                     + (f" {esc(detail)}" if detail and detail != "pass" else "") + "</td></tr>")
        ch = pair.channel(row.get("channel"))
        notes = []
        levels = ch.get("state_levels") or {}
        if levels.get("note"):
            notes.append(f"state levels: {levels['note']}")
        for k, why in self.reasons.get((pair.index, row.get("channel")), {}).items():
            notes.append(f"{k}: not available \u2014 {why}")
        note_html = ("<ul class=\"muted\">" + "".join(f"<li>{esc(n)}</li>" for n in notes)
                     + "</ul>") if notes else ""
        return (f'<table class="channel"><caption>channel {esc(row.get("channel"))}'
                f"{(' (' + esc(row.get('kind')) + ' record)') if row.get('kind') else ''}"
                f"</caption><tbody>{''.join(lines)}</tbody></table>{note_html}")

    def footer(self) -> str:
        return (f"<footer><p>Made by simwave {esc(_version())} on {esc(_when(_now()))}. One "
                "self-contained file: nothing on this page is fetched from anywhere.</p>"
                "</footer>")


# ----------------------------------------------------------------------------- helpers
def _jsonable(value: Any) -> bool:
    try:
        json.dumps(value, allow_nan=False)
        return True
    except (TypeError, ValueError):
        return False


def _count(n: int, word: str) -> str:
    return f"{n} {word}" + ("" if n == 1 else "s")


def _slug(text: str) -> str:
    return "".join(ch if ch.isalnum() or ch in "-_." else "-" for ch in str(text))


def _definition_text(defn: Any) -> str:
    if defn is None:
        return "not recorded"
    if isinstance(defn, str):
        return defn
    if isinstance(defn, Mapping):
        parts = []
        for k, v in defn.items():
            if k == "name":
                continue
            if isinstance(v, Mapping):
                v = ", ".join(f"{a}={b}" for a, b in v.items())
            parts.append(f"{k}: {v}")
        return "; ".join(parts)
    return str(defn)


def _version() -> str:
    from simwave import __version__

    return __version__


def _now() -> str:
    """Now in UTC (``SOURCE_DATE_EPOCH`` fixes it, as for the runs' provenance)."""
    from simwave.epoch import utc_now

    return utc_now().isoformat()


def _when(stamp: str) -> str:
    """An ISO time as ``2026-12-02 13:23 UTC`` (as given when it does not parse)."""
    try:
        t = _dt.datetime.fromisoformat(stamp)
    except ValueError:
        return stamp
    if t.tzinfo is not None:
        t = t.astimezone(_dt.timezone.utc)
        return t.strftime("%Y-%m-%d %H:%M UTC")
    return t.strftime("%Y-%m-%d %H:%M")


def render(study: Any, **options: Any) -> str:
    """The page of a study as HTML text (see :class:`Page` for the options)."""
    if study.kind == "tolerance":
        from simwave.report.tolerance import TolerancePage

        return TolerancePage(study, **options).build()
    return Page(study, **options).build()
