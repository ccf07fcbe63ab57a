"""The study summary as readable text (what ``simwave tolerance`` prints)."""

from __future__ import annotations

from typing import Any

from simwave.tolerance.summary import MODEL_INPUT

CAUTION = ("Caution: a tolerance study covers only the parameters and distributions you "
           "gave; ageing, temperature, supply and layout effects are not in it unless you "
           "model them. It is a design aid, not verification of built hardware; for medical, "
           "protection or other safety-related signal chains follow the applicable standards "
           "and licensed engineering practice.")


def _g(v: Any, digits: int = 4) -> str:
    if v is None:
        return "-"
    if isinstance(v, float):
        return f"{v:.{digits}g}"
    return str(v)


def _table(header: list[str], rows: list[list[str]]) -> list[str]:
    widths = [max(len(r[i]) for r in [header, *rows]) for i in range(len(header))]
    return ["  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)).rstrip()
            for r in [header, *rows]]


def _limits(r: dict[str, Any]) -> str:
    lo, hi = r["limit_min"], r["limit_max"]
    if lo is None and hi is None:
        return ""
    if lo is None:
        return f"<= {_g(hi)}"
    if hi is None:
        return f">= {_g(lo)}"
    return f"{_g(lo)} .. {_g(hi)}"


def _inside(r: dict[str, Any]) -> str:
    if r["share_inside"] is None:
        return ""
    text = f"{r['inside']}/{r['builds']} ({r['share_inside'] * 100:.3g} %)"
    iv = r.get("share_interval_95")
    if iv:
        text += f" [{iv[0] * 100:.3g}, {iv[1] * 100:.3g}] %"
    return text


def _moves(r: dict[str, Any]) -> str:
    m = r.get("moves_most")
    if not m:
        return ""
    s = "n/a" if m["sensitivity"] is None else f"{m['sensitivity']:+.3g}"
    return f"{m['parameter']} (S {s}, swing {_g(m['swing'], 3)})"


def _rows(rows: list[dict[str, Any]]) -> list[list[str]]:
    out = []
    for r in rows:
        varies = r["min"] is not None and r["max"] is not None and r["max"] != r["min"]
        limited = r["limit_min"] is not None or r["limit_max"] is not None
        if not (varies or limited):
            continue
        out.append([r["metric"], *(("n/a" if r[k] is None else _g(r[k]))
                                   for k in ("nominal", "min", "p50", "max")),
                    _limits(r), _inside(r), _moves(r)])
    return out


HEADER = ["metric", "nominal", "min", "median", "max", "limits",
          "inside limits [95 % interval]", "moves it most"]


def format_summary(doc: dict[str, Any], files: dict[str, str] | None = None) -> str:
    """The summary as text: parameters, counts, per-input tables, verdicts, files."""
    c = doc["counts"]
    lines = [f"tolerance study: {doc['system']['name']} = {doc['system']['text']}",
             f"analysis: {doc['analysis']}, {c['analysis_builds']} builds "
             f"(+ nominal and {c['builds'] - c['analysis_builds'] - 1} sensitivity steps)"
             + (f", seed {doc['seed']}" if doc.get("seed") is not None else "")]
    for p in doc["parameters"]:
        t = p["tolerance"]
        band = "" if not t else (f"  {_g(t['low'], 6)} .. {_g(t['high'], 6)}, {t['distribution']}"
                                 + (f" (limits at {t['sigmas']:g} sigma)"
                                    if t["distribution"] == "normal" else ""))
        lines.append(f"  {p['name']} = {_g(p['nominal'], 6)}{band}")
    lines.append(f"builds: {c['ok']} ok, {c['unstable']} unstable, {c['not_realizable']} not "
                 f"realizable, {c['failed']} failed")
    for pb in doc["problem_builds"][:10]:
        lines.append(f"  build {pb['build']} ({pb['role']} {pb['detail']}): {pb['status']}: "
                     f"{pb['reason']}")
    if len(doc["problem_builds"]) > 10:
        lines.append(f"  ... {len(doc['problem_builds']) - 10} more in the summary JSON")
    for note in doc["notes"]:
        lines.append(f"note: {note}")
    model = _rows(doc["model"])
    if model:
        lines += ["", "H(s) of each build:"] + _table(HEADER, model)
    inputs: dict[tuple[str, str], list] = {}
    for r in doc["metrics"]:
        inputs.setdefault((r["input"], r["channel"]), []).append(r)
    for (label, ch), rows in inputs.items():
        table = _rows(rows)
        if label == MODEL_INPUT or not table:
            continue
        lines += ["", f"input {label}, channel {ch}:"] + _table(HEADER, table)
        for r in rows:  # a value a build could not measure is n/a with the measurement's reason
            if r.get("not_measured") and (r["limit_min"] is not None
                                          or r["limit_max"] is not None or r["nominal"] is None):
                lines.append(f"  {r['metric']}: not measured in {r['not_measured']} of "
                             f"{r['builds']} builds"
                             + (f": {r['not_measured_reason']}" if r.get("not_measured_reason")
                                else ""))
    lines.append("")
    al = doc.get("all_limits")
    if al:
        iv = al.get("interval_95")
        extra = f", 95 % interval {iv[0] * 100:.3g} to {iv[1] * 100:.3g} %" if iv else ""
        lines.append(f"all limits on all inputs: {al['meeting']} of {al['builds']} builds "
                     f"({al['share'] * 100:.3g} %{extra})")
    w = doc.get("worst_build")
    if w:
        vals = ", ".join(f"{k} = {v:.6g}" for k, v in w["values"].items())
        lines.append(f"worst build: #{w['build']} {w['detail'] or w['role']} ({vals}): "
                     f"{w['why']}")
    if doc.get("sweep"):
        lines.append(f"design search: {doc['sweep']['statement']}")
    lines.append(f"sensitivity: {doc['methods']['sensitivity']}")
    if files:
        lines.append("files: " + ", ".join(files.values()))
    lines.append(CAUTION)
    return "\n".join(lines)
