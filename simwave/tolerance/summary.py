"""From build results to the study's summary: per input and metric, and per model figure.

The summary document (``tolerance-summary.json``) is a pure function of the study
and the build results, so the same seed gives the same bytes on every engine. Its
layout (schema 1)::

    summary "simwave tolerance study", schema 1, analysis, study_file,
    system{name, text, kind, dead_time_s, run_options},
    parameters[ {name, nominal, text, tolerance{kind, amount, distribution, sigmas,
                                                low, high, text} | null} ],
    seed, draws, inputs[labels], measure_options, limits{metric: [min, max]},
    methods{sensitivity, percentiles, share_interval, corners, worst_build},
    counts{builds, analysis_builds, ok, unstable, not_realizable, failed},
    problem_builds[ {build, role, detail, status, reason, values{name: value}} ],
    all_limits{builds, meeting, share, interval_95[low, high] | null, note} | null,
    model[ row ], metrics[ row ],
    transfer_sensitivity[ {parameter, f_hz, magnitude, phase_deg} ],
    worst_build{build, role, detail, values, why, input} | null,
    sweep{parameters, points[ {point, build, values, status, reason, corners,
                               corners_meeting, corner_problems, meets_all_limits,
                               tightest{input, channel, metric, value, margin,
                                        relative_margin[, build, corner]}} ],
          meeting[point indices], best, statement} | null,
    notes[...]

    row = {input, channel, metric, nominal, min, max, mean, std, p5, p50, p95,
           builds, measured, not_measured, not_measured_reason, not_run, limit_min, limit_max,
           inside, share_inside, share_interval_95[low, high] | null, share_note,
           sensitivity{parameter: S | null}, sensitivity_notes{parameter: reason},
           moves_most{parameter, sensitivity, swing} | null}

Model rows have ``input`` "(model)" and ``channel`` "": figures read from H(s)
of each build (exact), not measured from a waveform.
"""

from __future__ import annotations

import csv
import io
import math
import os
from typing import Any

from simwave.tolerance import builds as B
from simwave.tolerance import stats as S
from simwave.tolerance.worker import MODEL_FIGURES

SCHEMA = 1
MODEL_INPUT = "(model)"
ANALYSIS_ROLES = {"corners": ("corner",), "monte-carlo": ("draw",), "sweep": ("sweep",)}

METHODS = {
    "sensitivity": ("normalised sensitivity (dM/M)/(dx/x) by a central finite difference "
                    "with each toleranced parameter at the ends of its band, the others "
                    "nominal (the secant across the band; the derivative when M is linear "
                    "in x there)"),
    "percentiles": "linear interpolation between order statistics (Hyndman & Fan 1996, "
                   "definition 7; numpy's default)",
    "share_interval": "Wilson score interval, 95 % (Wilson 1927); for random draws only",
    "corners": "every combination of tolerance limits (normal: the stated limits, at the "
               "stated number of sigma)",
    "worst_build": "the analysis build with the smallest relative margin to any limit; "
                   "without limits, the one farthest from the nominal in any metric "
                   "(relative)",
}


def _numeric_keys(results: dict[int, dict]) -> list[tuple[str, str, str]]:
    """(input, channel, metric) triples with a numeric value in some build."""
    seen: dict[tuple[str, str, str], None] = {}
    for r in results.values():
        for label, entry in (r.get("inputs") or {}).items():
            for ch, m in (entry.get("metrics") or {}).items():
                for k, v in m.items():
                    if isinstance(v, (int, float)) and not isinstance(v, bool):
                        seen.setdefault((label, ch, k), None)
    return list(seen)


def _limited_keys(study: Any, results: dict[int, dict],
                  keys: list[tuple[str, str, str]]) -> list[tuple[str, str, str]]:
    """``keys`` plus every limited metric of every (input, channel) seen, numeric or not:
    a limit on a metric that no build could measure is a row with its reason, not a gap."""
    out = dict.fromkeys(keys)
    for r in results.values():
        for label, entry in (r.get("inputs") or {}).items():
            for ch in entry.get("metrics") or {}:
                for metric in study.limits:
                    out.setdefault((label, ch, metric), None)
    return list(out)


def missing_reason(r: dict | None, label: str, ch: str, metric: str) -> str | None:
    """Why ``metric`` has no value in build ``r`` (the measurement's own reason), if known."""
    from simwave.measure.result import key_missing

    if not r or r.get("status") != "ok" or label == MODEL_INPUT:
        return None
    m = (((r.get("inputs") or {}).get(label) or {}).get("metrics") or {}).get(ch) or {}
    return key_missing(m).get(metric)


def metric_value(r: dict | None, label: str, ch: str, metric: str) -> float | None:
    if not r or r.get("status") != "ok":
        return None
    if label == MODEL_INPUT:
        v = (r.get("model") or {}).get(metric)
    else:
        v = (((r.get("inputs") or {}).get(label) or {}).get("metrics") or {}).get(ch, {}).get(
            metric)
    return float(v) if isinstance(v, (int, float)) and not isinstance(v, bool) else None


def model_value(r: dict | None, metric: str) -> float | None:
    """A model figure exists for unstable builds too (read from H(s))."""
    if not r:
        return None
    v = (r.get("model") or {}).get(metric)
    return float(v) if isinstance(v, (int, float)) and not isinstance(v, bool) else None


def summarize(study: Any, builds: list[B.Build], results: dict[int, dict],
              notes: list[str]) -> dict[str, Any]:
    """The summary document (see the module docs)."""
    roles = ANALYSIS_ROLES[study.analysis]
    analysis = [b for b in builds if b.role in roles]
    by_role_detail = {(b.role, b.detail): b for b in builds}
    nominal = results.get(0)
    params = study.parameters
    swept = set(study.sweep)
    stepped = [p for p in B.toleranced(params) if p.name not in swept]
    random = study.analysis == "monte-carlo"

    def row(label: str, ch: str, metric: str, getter) -> dict[str, Any]:
        vals = [getter(results.get(b.index)) for b in analysis]
        not_run = sum(1 for b in analysis if (results.get(b.index) or {}).get("status") != "ok")
        band = study.limits.get(metric) if label != MODEL_INPUT else None
        out: dict[str, Any] = {"input": label, "channel": ch, "metric": metric,
                               "nominal": getter(nominal)}
        sp = S.spread(vals)
        out.update({k: sp[k] for k in ("min", "max", "mean", "std", "p5", "p50", "p95")})
        out.update({"builds": len(analysis), "measured": sp["measured"],
                    "not_measured": sp["not_measured"] - not_run if label != MODEL_INPUT
                    else sp["not_measured"], "not_run": not_run if label != MODEL_INPUT else 0})
        out["limit_min"], out["limit_max"] = band if band else (None, None)
        if band:
            k = sum(1 for v in vals if S.inside(v, band))
            out["inside"] = k
            out["share_inside"] = k / len(analysis) if analysis else None
            out["share_interval_95"] = list(S.wilson_interval(k, len(analysis))) \
                if random and analysis else None
            out["share_note"] = None if random else (
                "corners and sweep points are not a random sample: no interval")
        else:
            out.update(inside=None, share_inside=None, share_interval_95=None,
                       share_note="no limit on this metric")
        sens: dict[str, float | None] = {}
        why: dict[str, str] = {}
        best = None
        for p in stepped:
            h = B.step_size(p)
            lo = getter(results.get(by_role_detail[("step", f"{p.name}-")].index))
            hi = getter(results.get(by_role_detail[("step", f"{p.name}+")].index))
            s_val, reason = S.secant_sensitivity(lo, hi, out["nominal"], h)
            sens[p.name] = s_val
            if reason:
                why[p.name] = reason
            if lo is not None and hi is not None:
                swing = hi - lo
                if best is None or abs(swing) > abs(best["swing"]):
                    best = {"parameter": p.name, "sensitivity": s_val, "swing": swing}
        if best is not None and best["swing"] == 0:
            best = None
        out["sensitivity"], out["sensitivity_notes"], out["moves_most"] = sens, why, best
        out["not_measured_reason"] = None
        if out["not_measured"]:
            for r in [nominal, *(results.get(b.index) for b in analysis)]:
                reason = missing_reason(r, label, ch, metric) if getter(r) is None else None
                if reason:
                    out["not_measured_reason"] = reason
                    break
        return out

    metrics = []
    for label, ch, metric in _limited_keys(study, results, _numeric_keys(results)):
        metrics.append(row(label, ch, metric,
                           lambda r, a=label, c=ch, m=metric: metric_value(r, a, c, m)))
    model = [row(MODEL_INPUT, "", m, lambda r, m=m: model_value(r, m)) for m in MODEL_FIGURES
             if any(model_value(r, m) is not None for r in results.values())]

    counts = {"builds": len(builds), "analysis_builds": len(analysis)}
    for status in ("ok", "unstable", "not realizable", "failed"):
        counts[status.replace(" ", "_")] = sum(
            1 for b in builds if (results.get(b.index) or {}).get("status") == status)
    problems = [{"build": b.index, "role": b.role, "detail": b.detail,
                 "status": results[b.index]["status"], "reason": results[b.index].get("reason"),
                 "values": b.values}
                for b in builds if (results.get(b.index) or {}).get("status") != "ok"]
    labels = [ref.label for ref in study.inputs]
    doc: dict[str, Any] = {
        "summary": "simwave tolerance study",
        "schema": SCHEMA,
        "analysis": study.analysis,
        "study_file": os.path.basename(study.path) if study.path else None,
        "system": {"name": study.template.name, "text": study.template.text,
                   "kind": study.template.kind, "dead_time_s": study.template.dead_time_s,
                   "run_options": study.template.run_options},
        "parameters": [p.to_dict() for p in params.values()],
        "seed": study.seed if study.analysis == "monte-carlo" else None,
        "draws": study.draws if study.analysis == "monte-carlo" else None,
        "inputs": labels,
        "measure_options": study.measure_options,
        "limits": {k: list(v) for k, v in study.limits.items()},
        "methods": METHODS,
        "counts": counts,
        "problem_builds": problems,
        "all_limits": _all_limits(study, analysis, results, labels, random),
        "model": model,
        "metrics": metrics,
        "transfer_sensitivity": _transfer(study),
        "worst_build": worst_build(study, analysis, results, metrics),
        "sweep": design_search(study, analysis, results, labels, builds)
        if study.sweep else None,
        "notes": list(notes),
    }
    return doc


def _limited_values(study: Any, r: dict | None, labels: list[str]):
    """(input, channel, metric, value, band) for every limit on every input and channel."""
    for label in labels:
        entry = ((r or {}).get("inputs") or {}).get(label) or {}
        channels = list((entry.get("metrics") or {}).keys()) or [""]
        for ch in channels:
            for metric, band in study.limits.items():
                yield label, ch, metric, metric_value(r, label, ch, metric), band


def meets_all(study: Any, r: dict | None, labels: list[str]) -> tuple[bool, dict | None]:
    """Whether a build meets every limit on every input, and its tightest margin."""
    if not r or r.get("status") != "ok":
        return False, None
    worst = None
    ok = True
    for label, ch, metric, v, band in _limited_values(study, r, labels):
        m, rel = S.margin(v, band)
        if m is None:
            ok = False
            cand = {"input": label, "channel": ch, "metric": metric, "value": None,
                    "margin": None, "relative_margin": None,
                    "note": missing_reason(r, label, ch, metric) or "not measured"}
            if worst is None or worst.get("relative_margin") is not None:
                worst = cand
            continue
        if m < 0:
            ok = False
        if worst is None or (worst.get("relative_margin") is not None
                             and rel < worst["relative_margin"]):
            worst = {"input": label, "channel": ch, "metric": metric, "value": v,
                     "margin": m, "relative_margin": rel}
    return ok, worst


def _all_limits(study: Any, analysis: list, results: dict, labels: list[str],
                random: bool) -> dict | None:
    if not study.limits or not analysis:
        return None
    k = sum(1 for b in analysis if meets_all(study, results.get(b.index), labels)[0])
    n = len(analysis)
    return {"builds": n, "meeting": k, "share": k / n,
            "interval_95": list(S.wilson_interval(k, n)) if random else None,
            "note": "builds that are unstable, not realizable, failed or not measured count "
                    "as not meeting the limits"}


def _transfer(study: Any) -> list[dict[str, Any]]:
    """Bode sensitivity of H(j2πf) to each toleranced parameter at DC and at the nominal
    -3 dB frequency (where those exist)."""
    import numpy as np

    values = B.nominal_values(study.parameters)
    try:
        system = study.template.build(values)
    except Exception:  # noqa: BLE001 - reported as a problem build already
        return []
    freqs = []
    if math.isfinite(system.dc_gain) and system.dc_gain != 0:
        freqs.append(0.0)
    bw, _ = system.bandwidth_3db()
    if bw is not None and math.isfinite(bw):
        freqs.append(float(bw))
    out = []
    for p in B.toleranced(study.parameters):
        if p.name in study.sweep or not freqs:
            continue
        try:
            sv = S.transfer_sensitivity(study.template, values, p.name, freqs)
        except Exception:  # noqa: BLE001 - a step that makes H(s) improper
            continue
        for f, s in zip(freqs, sv, strict=True):
            out.append({"parameter": p.name, "f_hz": f, "magnitude": float(abs(s)),
                        "phase_deg": float(np.degrees(np.angle(s))) if s != 0 else 0.0})
    return out


def worst_build(study: Any, analysis: list, results: dict, metrics: list[dict]) -> dict | None:
    labels = [ref.label for ref in study.inputs]
    best: tuple[float, Any, dict] | None = None
    if study.limits:
        for b in analysis:
            r = results.get(b.index)
            if not r or r.get("status") != "ok":
                continue
            _, w = meets_all(study, r, labels)
            if w is None:
                continue
            key = -math.inf if w.get("relative_margin") is None else w["relative_margin"]
            if best is None or key < best[0]:
                why = (f"tightest margin: {w['metric']} on {w['input']}"
                       if w.get("relative_margin") is not None else
                       f"{w['metric']} not measured on {w['input']} ({w['note']})")
                best = (key, b, {"why": why, "input": w["input"], "margin": w})
    else:
        nominal = results.get(0)
        for b in analysis:
            r = results.get(b.index)
            if not r or r.get("status") != "ok":
                continue
            for row in metrics:
                v0 = metric_value(nominal, row["input"], row["channel"], row["metric"])
                v = metric_value(r, row["input"], row["channel"], row["metric"])
                if v0 is None or v is None or v0 == 0:
                    continue
                dev = abs(v - v0) / abs(v0)
                if best is None or -dev < best[0]:
                    best = (-dev, b, {"why": f"farthest from nominal: {row['metric']} on "
                                             f"{row['input']} ({dev * 100:.4g} %)",
                                      "input": row["input"], "margin": None})
    if best is None:
        return None
    _, b, info = best
    return {"build": b.index, "role": b.role, "detail": b.detail, "values": b.values, **info}


def design_search(study: Any, analysis: list, results: dict, labels: list[str],
                  all_builds: list | None = None) -> dict:
    """Sweep points that meet every limit on every input (and, when the study runs them,
    at every corner of the other parameters' tolerances), with their tightest margin."""
    all_builds = all_builds or []
    points = []
    for b in analysis:
        r = results.get(b.index)
        ok, w = meets_all(study, r, labels) if study.limits else (None, None)
        corners = [c for c in all_builds if c.role == "sweep-corner" and c.point == b.point]
        met = 0
        for c in corners:
            c_ok, c_w = meets_all(study, results.get(c.index), labels) if study.limits \
                else (None, None)
            met += bool(c_ok)
            if study.limits:
                ok = ok and c_ok
                if c_w is not None and (w is None or (
                        w.get("relative_margin") is not None and (
                        c_w.get("relative_margin") is None
                        or c_w["relative_margin"] < w["relative_margin"]))):
                    w = dict(c_w, build=c.index, corner=c.detail)
        bad = [results.get(c.index) or {} for c in corners
               if (results.get(c.index) or {}).get("status") != "ok"]
        points.append({"point": b.point, "build": b.index,
                       "values": {n: b.values[n] for n in study.sweep},
                       "status": (r or {}).get("status"), "reason": (r or {}).get("reason"),
                       "corners": len(corners), "corners_meeting": met if study.limits else None,
                       "corner_problems": len(bad),
                       "meets_all_limits": ok, "tightest": w})
    if not study.limits:
        return {"parameters": list(study.sweep), "points": points, "meeting": None,
                "best": None, "statement": "no [limits] given: no design search"}
    meeting = [p for p in points if p["meets_all_limits"]]
    if meeting:
        best = max(meeting, key=lambda p: p["tightest"]["relative_margin"]
                   if p["tightest"] else math.inf)
        vals = ", ".join(f"{n} = {v:.6g}" for n, v in best["values"].items())
        w = best["tightest"]
        where = " at every corner" if any(p["corners"] for p in points) else ""
        statement = (f"{len(meeting)} of {len(points)} points meet every limit on every "
                     f"input{where}; the widest margin is at {vals} (tightest: {w['metric']} on "
                     f"{w['input']}, margin {w['margin']:.6g}, {w['relative_margin'] * 100:.3g} % "
                     "of the limit)") if w else f"{len(meeting)} of {len(points)} points meet"
    else:
        best = None
        where = " at every corner" if any(p["corners"] for p in points) else ""
        statement = (f"none of the {len(points)} points meets every limit on every "
                     f"input{where}")
    return {"parameters": list(study.sweep), "points": points,
            "meeting": [p["point"] for p in meeting], "best": best, "statement": statement}


# ----------------------------------------------------------------------------- tables
SUMMARY_COLUMNS = ("input", "channel", "metric", "nominal", "min", "p5", "p50", "p95", "max",
                   "mean", "std", "builds", "measured", "not_measured", "not_run", "limit_min",
                   "limit_max", "inside", "share_inside", "share_low_95", "share_high_95",
                   "moves_most", "moves_most_sensitivity", "moves_most_swing", "sensitivities",
                   "not_measured_reason")


def _cell(v: Any) -> str:
    if v is None:
        return ""
    if isinstance(v, float):
        return repr(v)
    return str(v)


def summary_csv(doc: dict[str, Any]) -> str:
    """One row per model figure and per (input, channel, metric)."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(SUMMARY_COLUMNS)
    for r in doc["model"] + doc["metrics"]:
        iv = r.get("share_interval_95") or [None, None]
        mm = r.get("moves_most") or {}
        sens = "; ".join(f"{k}={_cell(v) or 'n/a'}" for k, v in r["sensitivity"].items())
        w.writerow([_cell(x) for x in (
            r["input"], r["channel"], r["metric"], r["nominal"], r["min"], r["p5"], r["p50"],
            r["p95"], r["max"], r["mean"], r["std"], r["builds"], r["measured"],
            r["not_measured"], r["not_run"], r["limit_min"], r["limit_max"], r["inside"],
            r["share_inside"], iv[0], iv[1], mm.get("parameter"), mm.get("sensitivity"),
            mm.get("swing"), sens, r.get("not_measured_reason"))])
    return buf.getvalue()


def builds_csv(study: Any, builds: list[B.Build], results: dict[int, dict]) -> str:
    """Every build: role, status and reason, its parameter values, its model figures."""
    names = list(study.parameters)
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["build", "role", "detail", "status", "reason", *names, *MODEL_FIGURES])
    for b in builds:
        r = results.get(b.index) or {}
        w.writerow([b.index, b.role, b.detail, r.get("status", "not run"),
                    _cell(r.get("reason")), *(repr(b.values[n]) for n in names),
                    *(_cell(model_value(r, m)) for m in MODEL_FIGURES)])
    return buf.getvalue()


def build_metrics_csv(study: Any, builds: list[B.Build], results: dict[int, dict]) -> str:
    """Every build on every input and channel: the key metrics as measured."""
    keys: list[str] = []
    for r in results.values():
        for entry in (r.get("inputs") or {}).values():
            for m in (entry.get("metrics") or {}).values():
                for k in m:
                    if k not in keys:
                        keys.append(k)
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["build", "input", "channel", "status", "error", *keys])
    for b in builds:
        r = results.get(b.index) or {}
        for label in (ref.label for ref in study.inputs):
            entry = (r.get("inputs") or {}).get(label)
            if entry is None:
                w.writerow([b.index, label, "", r.get("status", "not run"),
                            _cell(r.get("reason")), *([""] * len(keys))])
                continue
            chans = entry.get("metrics") or {"": {}}
            for ch, m in chans.items():
                w.writerow([b.index, label, ch, entry["status"], _cell(entry.get("error")),
                            *(_cell(m.get(k)) for k in keys)])
    return buf.getvalue()
