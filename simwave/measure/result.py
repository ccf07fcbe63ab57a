"""The measurement result: a plain dictionary, its JSON form, a printed table, key metrics."""

from __future__ import annotations

import copy
import json
import math
from typing import Any

import numpy as np


#: Types returned as they are by :func:`_clean` (the common leaves: checked by exact type
#: first, before the isinstance chain that numpy scalars and subclasses need).
_PLAIN = (str, int, bool, type(None))


def _clean(obj: Any) -> Any:
    """Plain JSON-friendly copy: numpy scalars to Python, non-finite floats to None with a
    reason in the enclosing dictionary's ``null_reasons``."""
    t = type(obj)
    if t in _PLAIN:
        return obj
    if t is float:
        return obj if math.isfinite(obj) else None
    if isinstance(obj, dict):
        out: dict = {}
        extra: dict = {}
        for k, v in obj.items():
            if isinstance(v, (float, np.floating)) and not math.isfinite(float(v)):
                out[k] = None
                extra[k] = f"not a finite number ({float(v)})"
            else:
                out[k] = _clean(v)
        if extra:
            reasons = dict(out.get("null_reasons") or {})
            for k, why in extra.items():
                reasons.setdefault(k, why)
            out["null_reasons"] = reasons
        return out
    if isinstance(obj, (list, tuple)):
        return [_clean(v) for v in obj]
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        v = float(obj)
        return v if math.isfinite(v) else None
    return obj


class MeasurementResult:
    """What :func:`simwave.measure` found.

    ``to_dict()`` gives the plain dictionary (see the module docs of
    :mod:`simwave.measure` for its layout), ``to_json()`` its JSON text, ``format()``
    (also ``str()``) a table for people.
    """

    def __init__(self, data: dict) -> None:
        self._data = _clean(data)

    def to_dict(self) -> dict:
        """A deep copy of the result as plain Python (JSON-friendly) values."""
        return copy.deepcopy(self._data)

    def to_json(self, indent: int | None = 2) -> str:
        """The result as JSON text (``null`` for missing values, reasons beside them)."""
        return json.dumps(self._data, indent=indent, allow_nan=False)

    @property
    def channels(self) -> list[dict]:
        return self._data["channels"]

    def __getitem__(self, key: str) -> Any:
        return self._data[key]

    def key_metrics(self) -> dict:
        """Flat per-channel scalars; see :func:`key_metrics`."""
        return key_metrics(self._data)

    def format(self) -> str:
        """A printed table of the result."""
        return format_result(self._data)

    def __str__(self) -> str:
        return self.format()

    def __repr__(self) -> str:
        kinds = ", ".join(f"{c['name']}: {c['kind']}" for c in self._data["channels"])
        return f"MeasurementResult({kinds})"

    def _repr_html_(self) -> str:
        from simwave.notebook import measurement_html

        return measurement_html(self.key_metrics())


# ----------------------------------------------------------------------------- marks
#: How a bound is written before its value: a lower bound is "at least" (>=), an upper
#: bound "at most" (<=).
BOUND_MARKS = {"lower": "\u2265", "upper": "\u2264", "lower and upper": "~"}


def marked(value: Any, bound: str | None, text: str) -> str:
    """``text`` (the value already formatted) with its bound mark, or ``n/a`` for None."""
    if value is None:
        return "n/a"
    mark = BOUND_MARKS.get(bound or "", "")
    return f"{mark}{text}"


def row_bound(row: dict, key: str) -> str | None:
    """"lower"/"upper" when ``row[key]`` is a bound, else None (``row["bounds"]``)."""
    return (row.get("bounds") or {}).get(key)


# ----------------------------------------------------------------------------- key metrics
def _stat(ch: dict, section: str, key: str, what: str) -> Any:
    v = (ch.get(section) or {}).get(key) or {}
    return v.get(what) if isinstance(v, dict) else None


#: Key metric -> the transition-row key it summarizes.
KEY_SOURCES = {
    "rise_time_s_mean": "rise_time_s",
    "fall_time_s_mean": "fall_time_s",
    "overshoot_pct_worst": "overshoot_pct",
    "undershoot_pct_worst": "undershoot_pct",
    "preshoot_pct_worst": "preshoot_pct",
    "settling_time_s_longest": "settling_time_s",
    "delay_s_mean": "delay_s",
}


def _key_marks(ch: dict, m: dict) -> tuple[str, str]:
    """The ``bounds`` and ``missing`` texts of one channel's key metrics: which are bounds,
    and why a transition metric is missing (the first reason found)."""
    summ = ch.get("transition_summary") or {}
    bounds, missing = [], []
    for key, src in KEY_SOURCES.items():
        b = (summ.get(src) or {}).get("bound")
        if b and m.get(key) is not None:
            bounds.append(f"{key} {b}")
        if m.get(key) is None and (summ.get(src) or {}).get("missing"):
            why = next(
                (
                    (t.get("null_reasons") or {}).get(src)
                    for t in ch.get("transitions") or []
                    if (t.get("null_reasons") or {}).get(src)
                ),
                None,
            )
            if why:
                missing.append(f"{key}: {why}")
    for key, section in (("final_value", "steady_state"), ("steady_state_gain", "steady_state"),
                         ("gain_db", "sine"), ("thd_pct", "sine")):
        why = ((ch.get(section) or {}).get("null_reasons") or {}).get(key)
        if m.get(key) is None and why:
            missing.append(f"{key}: {why}")
    tones_why = (ch.get("null_reasons") or {}).get("tones")
    if m.get("tone_gain_error_db_worst") is None and ch.get("kind") == "multitone" and tones_why:
        missing.append(f"tone_gain_error_db_worst: {tones_why}")
    if m.get("transitions") == 0 and (ch.get("null_reasons") or {}).get("transitions"):
        missing.append(f"transitions: {ch['null_reasons']['transitions']}")
    return "; ".join(bounds), "; ".join(missing)


def key_bounds(m: dict) -> dict:
    """``{key metric: "lower" | "upper"}`` from a key-metrics row's ``bounds`` text."""
    out = {}
    for part in (m.get("bounds") or "").split(";"):
        key, _, side = part.strip().partition(" ")
        if key:
            out[key] = side
    return out


def key_missing(m: dict) -> dict:
    """``{key metric: reason}`` from a key-metrics row's ``missing`` text."""
    out = {}
    for part in (m.get("missing") or "").split("; "):
        key, sep, why = part.partition(": ")
        if sep:
            out[key.strip()] = why
    return out


def key_metrics(result: dict | MeasurementResult) -> dict:
    """Flat scalar metrics per channel, for summary tables (batch runs, spreadsheets).

    Parameters
    ----------
    result : dict or MeasurementResult
        A result dictionary (``to_dict()``) or the result object.

    Returns
    -------
    dict
        ``{channel_name: {metric: float | int | str | None}}``. Metrics: ``kind``,
        ``transitions``, ``rise_time_s_mean``, ``fall_time_s_mean``,
        ``overshoot_pct_worst``, ``undershoot_pct_worst``, ``preshoot_pct_worst``,
        ``settling_time_s_longest`` (None when any transition never settles),
        ``not_settled``, ``delay_s_mean``, ``peak_time_s_first``, ``final_value``,
        ``steady_state_gain``, ``predicted_dc_gain``, ``steady_state_error``, ``mean``,
        ``rms``, ``ripple_pp``, ``frequency_hz``, ``gain_db``, ``phase_deg``,
        ``predicted_gain_db``, ``predicted_phase_deg``, ``thd_pct``, ``sinad_db``,
        ``tone_gain_error_db_worst``, ``flags`` (number of measured-vs-predicted
        differences beyond tolerance), ``bounds`` (text: which of these are bounds,
        e.g. ``"settling_time_s_longest lower"``; empty when none), ``missing`` (text:
        why a missing transition or steady-state metric is missing; empty when none).
    """
    data = result.to_dict() if isinstance(result, MeasurementResult) else result
    pred = data.get("predicted") or {}
    out: dict = {}
    for ch in data.get("channels", []):
        trans = ch.get("transitions") or []
        ss = ch.get("steady_state") or {}
        sine = ch.get("sine") or {}
        tones = ch.get("tones") or []
        settle = (ch.get("transition_summary") or {}).get("settling_time_s") or {}
        not_settled = int(settle.get("missing", 0)) if settle else 0
        first_peak = next(
            (t.get("peak_time_s") for t in trans if t.get("peak_time_s") is not None), None
        )
        tone_errs = [
            abs(t["gain_db"] - t["predicted_gain_db"])
            for t in tones
            if t.get("gain_db") is not None and t.get("predicted_gain_db") is not None
        ]
        m = {
            "kind": ch.get("kind"),
            "transitions": len(trans),
            "rise_time_s_mean": _stat(ch, "transition_summary", "rise_time_s", "mean"),
            "fall_time_s_mean": _stat(ch, "transition_summary", "fall_time_s", "mean"),
            "overshoot_pct_worst": _stat(ch, "transition_summary", "overshoot_pct", "worst"),
            "undershoot_pct_worst": _stat(ch, "transition_summary", "undershoot_pct", "worst"),
            "preshoot_pct_worst": _stat(ch, "transition_summary", "preshoot_pct", "worst"),
            "settling_time_s_longest": (None if not_settled else settle.get("worst")),
            "not_settled": not_settled,
            "delay_s_mean": _stat(ch, "transition_summary", "delay_s", "mean"),
            "peak_time_s_first": first_peak,
            "final_value": ss.get("final_value"),
            "steady_state_gain": ss.get("steady_state_gain"),
            "predicted_dc_gain": pred.get("dc_gain"),
            "steady_state_error": ss.get("steady_state_error"),
            "mean": ss.get("mean"),
            "rms": ss.get("rms"),
            "ripple_pp": ss.get("ripple_pp"),
            "frequency_hz": sine.get("frequency_hz"),
            "gain_db": sine.get("gain_db"),
            "phase_deg": sine.get("phase_deg"),
            "predicted_gain_db": sine.get("predicted_gain_db"),
            "predicted_phase_deg": sine.get("predicted_phase_deg"),
            "thd_pct": sine.get("thd_pct"),
            "sinad_db": sine.get("sinad_db"),
            "tone_gain_error_db_worst": max(tone_errs) if tone_errs else None,
            "flags": sum(1 for r in ch.get("comparison") or [] if r.get("flag")),
        }
        m["bounds"], m["missing"] = _key_marks(ch, m)
        out[ch["name"]] = m
    return out


# ----------------------------------------------------------------------------- table
def _num(v: Any, unit: str = "") -> str:
    if v is None:
        return "-"
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, (int,)) and not isinstance(v, bool):
        return f"{v}{unit}"
    if isinstance(v, float):
        if unit == " s":
            return _eng_time(v)
        return f"{v:.5g}{unit}"
    return str(v)


def _mk(row: dict, key: str, unit: str = "") -> str:
    """A row's value as table text: ``n/a`` when missing, marked when a bound."""
    v = row.get(key)
    return marked(v, row_bound(row, key), _num(v, unit))


def _eng_time(v: float) -> str:
    a = abs(v)
    for scale, name in ((1.0, "s"), (1e-3, "ms"), (1e-6, "us"), (1e-9, "ns")):
        if a >= scale or scale == 1e-9:
            return f"{v / scale:.5g} {name}"
    return f"{v:g} s"


def _table(headers: list[str], rows: list[list[str]]) -> list[str]:
    widths = [
        max(len(h), *(len(r[i]) for r in rows)) if rows else len(h) for i, h in enumerate(headers)
    ]
    lines = ["  " + "  ".join(h.rjust(w) for h, w in zip(headers, widths, strict=True))]
    for r in rows:
        lines.append("  " + "  ".join(c.rjust(w) for c, w in zip(r, widths, strict=True)))
    return lines


def _reasons(d: dict, indent: str = "  ") -> list[str]:
    return [f"{indent}{k}: n/a - {why}" for k, why in (d.get("null_reasons") or {}).items()]


def format_result(data: dict) -> str:
    """Human-readable tables of a result dictionary."""
    rec = data["record"]
    lines = [
        f"Record: {rec['n_samples']} samples at {rec['rate_hz']:g} Hz "
        f"({_eng_time(rec['duration_s'])}), {rec['n_channels']} channel(s)"
    ]
    src = data.get("source") or {}
    if src.get("output"):
        lines.append(f"File: {src['output']}")
    opts = data.get("options") or {}
    lv = opts.get("reference_levels_pct") or []
    lines.append(
        f"Reference levels {'/'.join(f'{p:g}' for p in lv)} %, settling band "
        f"±{opts.get('settling_band_pct', 0):g} %, state levels by {opts.get('state_level_method')}"
    )
    for inp in data.get("input") or []:
        lines.append(
            f"Input {inp['name']}: {inp['kind']}"
            + (f", {len(inp.get('transitions', []))} transition(s)" if "transitions" in inp else "")
        )
    pred = data.get("predicted") or {}
    if pred.get("system"):
        lines.append(f"System: {pred['system']}")
    for ch in data["channels"]:
        lines.append("")
        unit = f" [{ch['unit']}]" if ch.get("unit") else ""
        lines.append(
            f"Channel {ch['name']}{unit}: {ch['kind']}"
            + (f" (input {ch['input_channel']})" if ch.get("input_channel") else "")
        )
        sl = ch.get("state_levels")
        if sl:
            lines.append(
                f"  state levels: low {_num(sl['low'])}, high {_num(sl['high'])} "
                f"({sl['method']})" + (f"; {sl['note']}" if sl.get("note") else "")
            )
            if sl.get("response_onset_delay_s") is not None:
                lines.append(
                    "  segments end where the output starts to answer the next input "
                    f"transition: {_num(sl['response_onset_delay_s'], ' s')} after the input "
                    "starts to move (response onset delay)"
                )
        trans = ch.get("transitions")
        if trans:
            rows = []
            for t in trans:
                rows.append(
                    [
                        str(t["index"]),
                        t["direction"],
                        _mk(t, "crossing_50_s", " s"),
                        _mk(t, "transition_duration_s", " s"),
                        _mk(t, "delay_s", " s"),
                        _mk(t, "overshoot_pct"),
                        _mk(t, "undershoot_pct"),
                        _mk(t, "preshoot_pct"),
                        _mk(t, "peak_time_s", " s"),
                        _mk(t, "settling_time_s", " s"),
                        _mk(t, "disturbance_rms"),
                    ]
                )
            lines.append("  transitions:")
            lines.extend(
                _table(
                    [
                        "#",
                        "dir",
                        "50% at",
                        "10-90%",
                        "delay",
                        "over %",
                        "under %",
                        "pre %",
                        "peak time",
                        "settling",
                        "disturb.",
                    ],
                    rows[:50],
                )
            )
            if len(rows) > 50:
                lines.append(f"  ... {len(rows) - 50} more (see --json)")
            lines.append(
                "  (\u2265 lower bound, \u2264 upper bound; settling: last entry into the "
                "band around the final level, from the time origin; disturb.: RMS of noise "
                "and hum about the levels)"
            )
            for t in trans[:50]:
                if t.get("levels_note"):
                    lines.append(f"  #{t['index']} levels: {t['levels_note']}")
                for k, why in (t.get("null_reasons") or {}).items():
                    if k != "delay_s":
                        lines.append(f"  #{t['index']} {k}: n/a - {why}")
                for k, b in (t.get("bounds") or {}).items():
                    why = (t.get("bound_reasons") or {}).get(k, "")
                    lines.append(f"  #{t['index']} {k}: {b} bound" + (f" - {why}" if why else ""))
                for k, why in (t.get("cautions") or {}).items():
                    lines.append(f"  #{t['index']} {k}: caution - {why}")
        for u in (ch.get("unmatched_input_transitions") or [])[:50]:
            lines.append(
                f"  input transition #{u['input_transition']} at "
                f"{_eng_time(u['input_crossing_50_s'])}: {u['reason']}"
            )
        if ch.get("pulses"):
            ps = ch["pulse_summary"]
            for key in ("pulse_duration_s", "period_s", "duty_pct"):
                if key in ps and ps[key].get("count"):
                    u = " s" if key.endswith("_s") else ""
                    lines.append(
                        f"  {key}: mean {_num(ps[key]['mean'], u)}, min "
                        f"{_num(ps[key]['min'], u)}, max {_num(ps[key]['max'], u)} "
                        f"over {ps[key]['count']} pulse(s)"
                    )
        ss = ch.get("steady_state") or {}
        if ss:
            parts = [
                f"{k} {_num(ss[k])}"
                for k in (
                    "final_value",
                    "steady_state_gain",
                    "steady_state_error",
                    "mean",
                    "rms",
                    "ripple_pp",
                )
                if ss.get(k) is not None
            ]
            lines.append(
                f"  steady state ({_eng_time(ss['window_start_s'])} to "
                f"{_eng_time(ss['window_end_s'])}): " + ", ".join(parts)
            )
            lines.extend(_reasons(ss, "  "))
        sine = ch.get("sine")
        if sine:
            parts = []
            for k, u in (
                ("frequency_hz", " Hz"),
                ("amplitude", ""),
                ("gain_db", " dB"),
                ("phase_deg", " deg"),
                ("predicted_gain_db", " dB"),
                ("predicted_phase_deg", " deg"),
                ("thd_pct", " %"),
                ("sinad_db", " dB"),
            ):
                if sine.get(k) is not None:
                    parts.append(f"{k} {_num(sine[k])}{u}")
            lines.append("  sine (" + str(sine.get("fit", "-")) + " fit): " + ", ".join(parts))
            lines.extend(_reasons(sine, "  "))
        if ch.get("tones"):
            rows = [
                [
                    _num(t["frequency_hz"]),
                    _num(t.get("gain_db")),
                    _num(t.get("predicted_gain_db")),
                    _num(t.get("phase_deg")),
                    _num(t.get("predicted_phase_deg")),
                ]
                for t in ch["tones"]
            ]
            lines.append("  tones:")
            lines.extend(_table(["f Hz", "gain dB", "pred dB", "phase deg", "pred deg"], rows))
        comp = ch.get("comparison") or []
        if comp:
            rows = [
                [
                    r["quantity"],
                    _num(r["measured"]),
                    _num(r["predicted"]),
                    _num(r["difference"]),
                    _num(r["tolerance"]),
                    {True: "FLAG", False: "ok", None: "-"}[r["flag"]],
                ]
                for r in comp
            ]
            lines.append("  measured vs predicted:")
            lines.extend(
                _table(["quantity", "measured", "predicted", "difference", "tolerance", ""], rows)
            )
        lines.extend(_reasons(ch, "  "))
    for note in data.get("notes") or []:
        lines.append(f"Note: {note}")
    return "\n".join(lines)
