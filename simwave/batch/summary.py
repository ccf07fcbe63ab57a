"""The batch summary: one row per (input, system, channel), tolerance bands, per-system comparison.

The table is written as CSV (for a spreadsheet) and JSON (rows plus the batch
counts and the comparison), both atomically. Metric columns are the flat
per-channel scalars of :func:`simwave.measure.key_metrics`.
"""

from __future__ import annotations

import csv
import io
import math
import os
from typing import Any, Iterable, Mapping, Sequence

from simwave.batch.plan import BatchPlan, Pair

#: Columns before the metrics. ``elapsed_s`` is the only timing column.
BASE_COLUMNS = ("input", "system", "channel", "status", "error", "reused", "elapsed_s",
                "samples", "duration_s", "rate_hz", "output", "metrics_file", "record_peak",
                "record_rms", "warnings")
#: Columns after the metrics.
TAIL_COLUMNS = ("limits",)
#: Columns that depend on timing, not on the data (excluded when comparing two runs).
TIMING_COLUMNS = ("elapsed_s",)


def metric_columns() -> list[str]:
    """The key-metric column names, in :func:`simwave.measure.key_metrics` order."""
    from simwave.measure import key_metrics

    return list(key_metrics({"channels": [{"name": "x"}]})["x"])


def columns() -> list[str]:
    """All summary columns, in order."""
    return list(BASE_COLUMNS) + metric_columns() + list(TAIL_COLUMNS)


def check_limits(values: Mapping[str, Any], limits: Mapping[str, tuple]) -> str:
    """The verdict of a row against its tolerance bands.

    Returns ``"pass"``, ``"fail: metric=value > max; ..."``, or ``""`` when no
    band applies. A metric the record does not have (no transitions in a sine
    record, no sine in a step record) is not judged and is listed after
    ``"not measured:"``; the one exception is a settling time that is missing
    because a transition never settled, which fails.
    """
    if not limits:
        return ""
    problems, missing = [], []
    for metric, (lo, hi) in limits.items():
        v = values.get(metric)
        if v is None or (isinstance(v, float) and math.isnan(v)):
            if metric == "settling_time_s_longest" and (values.get("not_settled") or 0) > 0:
                problems.append("settling_time_s_longest: never settled within the band")
            else:
                missing.append(metric)
            continue
        if lo is not None and v < lo:
            problems.append(f"{metric}={v:.6g} < {lo:g}")
        if hi is not None and v > hi:
            problems.append(f"{metric}={v:.6g} > {hi:g}")
    if problems:
        verdict = "fail: " + "; ".join(problems)
    else:
        verdict = "pass" if len(missing) < len(limits) else ""
    if missing:
        verdict += ("; " if verdict else "") + "not measured: " + ", ".join(missing)
    return verdict


def pair_rows(plan: BatchPlan, pair: Pair, result: Mapping[str, Any] | None,
              reused: bool = False) -> list[dict[str, Any]]:
    """Summary rows of one pair: one per output channel, or one row when it has no output."""
    mcols = metric_columns()
    out_rel = os.path.relpath(pair.output, plan.output_dir)
    met_rel = os.path.relpath(pair.metrics, plan.output_dir)
    base = {c: None for c in BASE_COLUMNS}
    base.update({m: None for m in mcols})
    # a generated signal is known by its name; its text is in the output's provenance
    name = pair.input.label if pair.input.is_file else pair.input.stem
    base.update(input=name, system=pair.system.name, channel=None)
    if result is None:
        base.update(status="not run", reused=False, limits="")
        return [base]
    base.update(status=result["status"], error=result.get("error"), reused=bool(reused),
                elapsed_s=result.get("elapsed_s"), samples=result.get("samples"),
                duration_s=result.get("duration_s"), rate_hz=result.get("rate_hz"),
                warnings=" | ".join(result.get("warnings") or []) or None, limits="")
    if result["status"] != "ok":
        return [base]
    base.update(output=out_rel, metrics_file=met_rel)
    limits = {**plan.limits, **dict(pair.system.limits)}
    rows = []
    metrics = result.get("metrics") or {}
    for ch in result.get("channels") or [{"name": None}]:
        row = dict(base)
        # record_*: the whole output record (run report); the metric columns' mean and rms
        # are those of the steady-state window (simwave.measure).
        row.update(channel=ch.get("name"), record_peak=ch.get("peak"), record_rms=ch.get("rms"))
        for key, value in (metrics.get(ch.get("name")) or {}).items():
            if key in mcols:
                row[key] = value
        row["limits"] = check_limits(row, limits)
        rows.append(row)
    return rows


def _cell(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return repr(value) if math.isfinite(value) else ("nan" if math.isnan(value) else
                                                         ("inf" if value > 0 else "-inf"))
    return str(value)


def rows_csv(rows: Iterable[Mapping[str, Any]], cols: Sequence[str]) -> str:
    """The rows as CSV text (header first; empty cell for a missing value; floats round-trip)."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(cols)
    for row in rows:
        w.writerow([_cell(row.get(c)) for c in cols])
    return buf.getvalue()


def write_text_atomic(path: str, text: str) -> None:
    """Write text through a temporary file beside ``path`` and rename it over (atomic)."""
    from simwave.signals.atomic import write_text_atomic as write

    write(path, text)


# ----------------------------------------------------------------------------- comparison
#: (key, label, metric column, reduction) for the per-system comparison.
COMPARISON = (
    ("overshoot_pct_worst", "overshoot, worst (%)", "overshoot_pct_worst", "max"),
    ("undershoot_pct_worst", "undershoot, worst (%)", "undershoot_pct_worst", "max"),
    ("settling_time_s_longest", "settling time, longest (s)", "settling_time_s_longest", "max"),
    ("rise_time_s_mean", "rise time, longest mean (s)", "rise_time_s_mean", "max"),
    ("delay_s_mean", "delay, longest mean (s)", "delay_s_mean", "max"),
    ("steady_state_error", "steady-state error, largest |e|", "steady_state_error", "absmax"),
    ("thd_pct", "THD, worst (%)", "thd_pct", "max"),
    ("tone_gain_error_db_worst", "gain vs H(s), worst (dB)", "tone_gain_error_db_worst", "max"),
    ("record_peak", "output peak |y|, largest", "record_peak", "max"),
)


def compare_systems(plan: BatchPlan, rows: Sequence[Mapping[str, Any]]) -> dict[str, Any]:
    """Per-system worst cases across inputs (rows with status ok).

    Returns
    -------
    dict
        ``{system: {"pairs", "ok", "failed", "not_run", "not_settled", "flags",
        "limit_failures", <quantity>: {"value", "input", "channel"} or None}}``.
    """
    out: dict[str, Any] = {}
    short = {e.label: e.stem for e in plan.inputs}
    for system in plan.systems:
        mine = [r for r in rows if r["system"] == system.name]
        by_pair: dict[str, str] = {}
        for r in mine:
            by_pair.setdefault(r["input"], r["status"])
        ok_rows = [r for r in mine if r["status"] == "ok"]
        entry: dict[str, Any] = {
            "pairs": len(by_pair),
            "ok": sum(1 for s in by_pair.values() if s == "ok"),
            "failed": sum(1 for s in by_pair.values() if s == "failed"),
            "not_run": sum(1 for s in by_pair.values() if s == "not run"),
            "not_settled": sum(1 for r in ok_rows if (r.get("not_settled") or 0) > 0),
            "flags": sum(int(r.get("flags") or 0) for r in ok_rows),
            "limit_failures": sum(1 for r in ok_rows
                                  if str(r.get("limits") or "").startswith("fail")),
            "limits_set": bool(plan.limits or system.limits),
        }
        for key, _, col, how in COMPARISON:
            best = None
            for r in ok_rows:
                v = r.get(col)
                if v is None or isinstance(v, str) or (isinstance(v, float) and math.isnan(v)):
                    continue
                score = abs(v) if how == "absmax" else v
                if best is None or score > best[0]:
                    best = (score, v, r)
            entry[key] = None if best is None else {
                "value": best[1], "input": best[2]["input"], "channel": best[2]["channel"],
                "input_name": short.get(best[2]["input"], best[2]["input"])}
        out[system.name] = entry
    return out


def _fmt(v: Any) -> str:
    if v is None:
        return "-"
    if isinstance(v, float):
        return f"{v:.4g}"
    return str(v)


def format_comparison(comparison: Mapping[str, Any], max_width: int = 44) -> str:
    """The per-system comparison as a text table: quantities down, systems across.

    Each cell is the worst value and, in brackets, the input it came from; a
    column is as wide as its longest cell (at most ``max_width`` characters).
    """
    names = list(comparison)
    if not names:
        return ""
    label_w = max(len(lbl) for _, lbl, _, _ in COMPARISON) + 2
    table: list[tuple[str, list[str]]] = []

    def line(label: str, cells: list[str]) -> None:
        table.append((label, cells))

    line("pairs ok / failed / not run",
         [f"{comparison[n]['ok']} / {comparison[n]['failed']} / {comparison[n]['not_run']}"
          for n in names])
    for key, label, _, _ in COMPARISON:
        cells = []
        for n in names:
            e = comparison[n].get(key)
            cells.append("-" if e is None else
                         f"{_fmt(e['value'])} ({e.get('input_name') or e['input']})")
        if all(c == "-" for c in cells):
            continue
        line(label, cells)
    line("channels never settled", [str(comparison[n]["not_settled"]) for n in names])
    line("differences from H(s) flagged", [str(comparison[n]["flags"]) for n in names])
    if any(comparison[n].get("limits_set", True) for n in names):  # only where limits are set
        line("outside tolerance bands",
             [str(comparison[n]["limit_failures"]) if comparison[n].get("limits_set", True)
              else "no limits" for n in names])
    widths = [min(max_width, max([len(n)] + [len(cells[i]) for _, cells in table]) + 2)
              for i, n in enumerate(names)]

    def fit(text: str, w: int) -> str:
        return (text if len(text) <= w - 2 else text[: w - 3] + "~").ljust(w)

    head = "".join(fit(n, w) for n, w in zip(names, widths, strict=True))
    lines = [("".ljust(label_w) + head).rstrip()]
    for label, cells in table:
        lines.append((label.ljust(label_w)
                      + "".join(fit(c, w) for c, w in zip(cells, widths, strict=True))).rstrip())
    return "\n".join(lines)
