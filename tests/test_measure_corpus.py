"""A corpus of generated records with known truth, measured and checked transition by
transition.

Each record is an input staircase or up/down sequence (or a single step, at the first sample
or later) and the output of a first-order or second-order system (zeta 0.1 to 1), built by
superposing the closed-form unit-step responses of tests/truth.py (K. Ogata, *Modern Control
Engineering*, 5th ed., sec. 5-3), each state held long enough for the response before it to
die out (at least three settling times, so the truth of every transition is that of one
step). Noise and mains hum (50 or 60 Hz with a third harmonic) are added at several levels to
output and input; some records are cut short before the last transition settles.

Checked, and printed: transitions found where the step is at least 10 times the disturbance
RMS (>= 99 %); every numeric metric (levels, rise/fall time, delay, overshoot, settling time)
within the truth bracketed by what the measurement reports about the disturbance, or marked
as a bound on the right side of the truth, or null with a reason; no crash.

Brackets (our choices, from the measurement's own reports): levels within 4 standard
uncertainties plus 3 disturbance RMS plus 0.1 % of the step; the delay within 2 samples plus
3 reported instant uncertainties, a duration within 2 samples plus its reported uncertainty;
overshoot within its reported
uncertainty plus 0.15 percentage points (the peak read near a sample); settling time between
the truth for the band narrowed and widened by the disturbance's peak, plus 2 samples.

The same records are measured a second time from the output alone (no reference input):
transitions then come from the output itself, each with its own levels, and the settling time
runs from the output's own 10 % instant (the truth's too). A step at the first sample then
has its initial level from the at-rest convention (the output is 0 before the record), and
a level the record does not establish (cut short, still moving, at a slow peak) must be
null with its reason or a bound, never a value outside the truth's bracket.

The full corpus (>= 300 records) runs with SIMWAVE_SLOW=1; by default every fifth record.
Counts: ``python tests/test_measure_corpus.py [COUNT] [--output-only]``.
"""

from __future__ import annotations

import functools
import math
import os

import numpy as np
import pytest

import simwave
from simwave import Waveform
from truth import metrics as closed_form_metrics
from truth import step_response

ZETAS = (0.1, 0.2, 0.3, 0.5, 0.707, 1.0)
PATTERNS = ("step", "first-sample", "staircase", "updown")
DISTURBANCES = (
    ("clean", 0.0, 0.0),
    ("noise", 0.002, 0.0),
    ("noise", 0.02, 0.0),
    ("hum", 0.0, 0.01),
    ("hum+noise", 0.005, 0.03),
)
N_RECORDS = 320
SAMPLE_EVERY = 5


@functools.lru_cache(maxsize=None)
def _unit_truth(kind: str, zeta: float, band_pct: float) -> dict:
    """Metrics of the unit-time-scale step (tau = 1 or wn = 1), cached by band."""
    if kind == "first":
        return closed_form_metrics("first", tau=1.0, band_pct=band_pct)
    return closed_form_metrics("second", zeta=zeta, wn=1.0, band_pct=band_pct)


def truth_for(kind: str, zeta: float, scale: float, band_pct: float) -> dict:
    """Metrics for time scale ``scale`` (tau, or 1 / wn): times scale, percentages do not."""
    band = float(f"{band_pct:.3g}")
    u = _unit_truth(kind, zeta, band)
    return {k: (v * scale if k.endswith("_s") and v is not None else v) for k, v in u.items()}


def make_record(i: int) -> dict:
    """Record number i: input, output and the truth of each transition."""
    rng = np.random.default_rng(1000 + i)
    kind = "first" if i % 7 == 0 else "second"
    zeta = ZETAS[i % len(ZETAS)]
    pattern = PATTERNS[(i // 2) % len(PATTERNS)]
    dist_name, noise_rel, hum_rel = DISTURBANCES[(i // 3) % len(DISTURBANCES)]
    cut = i % 11 == 5
    fs = float(rng.choice([2000.0, 5000.0, 10000.0]))
    scale = float(rng.uniform(30, 200)) / fs  # tau or 1/wn: 30..200 samples
    settle = truth_for(kind, zeta, scale, 2.0)["settling_time_s"]
    hold = max(3.0 * settle, 0.05)  # every state outlasts the response before it
    if pattern in ("step", "first-sample"):
        levels = [0.0, float(rng.uniform(0.5, 2.0)) * rng.choice([-1, 1])]
    else:
        n = int(rng.integers(3, 6))
        levels = [0.0]
        for _ in range(n):
            step = float(rng.uniform(0.5, 2.0))
            up = rng.random() < 0.5 if pattern == "staircase" else len(levels) % 2 == 1
            levels.append(levels[-1] + (step if up or pattern == "staircase" else -step))
    first_at = 0 if pattern == "first-sample" else int(round(hold * fs))
    steps = []  # (instant in s, change)
    for k in range(1, len(levels)):
        idx = first_at + (k - 1) * int(round(hold * fs))
        t_k = (idx - 0.5) / fs  # between samples idx - 1 and idx
        steps.append((t_k, levels[k] - levels[k - 1]))
    n_samples = first_at + (len(levels) - 1) * int(round(hold * fs))
    if cut:
        n_samples = int(round(steps[-1][0] * fs + 0.5 * settle * fs))
    t = np.arange(n_samples) / fs
    x = np.full(n_samples, levels[0])
    y = np.full(n_samples, levels[0])
    for t_k, d in steps:
        x = x + d * (t > t_k)
        tt = t - t_k
        y = y + d * (step_response(kind, tt, tau=scale, zeta=zeta, wn=1.0 / scale))
    min_step = min(abs(d) for _, d in steps)
    noise = noise_rel * min_step
    hum_amp = hum_rel * min_step
    hum_f = float(rng.choice([50.0, 60.0]))
    dist_rms = math.sqrt(noise**2 + hum_amp**2 / 2 * (1 + 0.3**2))

    def disturb(v: np.ndarray) -> np.ndarray:
        ph = rng.uniform(0, 2 * np.pi)
        h = hum_amp * (np.sin(2 * np.pi * hum_f * t + ph) + 0.3 * np.sin(6 * np.pi * hum_f * t))
        return v + h + noise * rng.standard_normal(v.size)

    return {
        "i": i, "kind": kind, "zeta": zeta, "scale": scale, "fs": fs, "pattern": pattern,
        "disturbance": dist_name, "cut": cut, "steps": steps, "levels": levels,
        "x": Waveform(disturb(x), fs), "y": Waveform(disturb(y), fs), "dist_rms": dist_rms,
    }


def _check_value(row: dict, key: str, truth: float, bracket: float, tally: dict,
                 where: str) -> None:
    v = row.get(key)
    tally["metrics"] += 1
    if v is None:
        if not (row.get("null_reasons") or {}).get(key):
            tally["bad"].append(f"{where} {key}: null without a reason")
        else:
            tally["null"] += 1
        return
    bound = (row.get("bounds") or {}).get(key)
    if bound == "lower":
        ok = v <= truth + bracket
    elif bound == "upper":
        ok = v >= truth - bracket
    else:
        ok = abs(v - truth) <= bracket
    if bound:
        tally["bound"] += 1
    if not ok:
        tally["bad"].append(
            f"{where} {key}: {v:.6g} vs truth {truth:.6g} (bracket {bracket:.3g}"
            f"{', ' + bound + ' bound' if bound else ''})"
        )
    elif not bound:
        tally["value"] += 1


def check_record(rec: dict, tally: dict) -> None:
    fs = rec["fs"]
    T = 1.0 / fs
    try:
        d = simwave.measure(rec["y"], reference=rec["x"]).to_dict()
    except Exception as exc:  # a crash is what this corpus counts
        tally["crashes"].append(f"record {rec['i']}: {type(exc).__name__}: {exc}")
        return
    ch = d["channels"][0]
    rows = ch.get("transitions") or []
    by_input = {}
    for r in rows:
        if r.get("input_crossing_50_s") is not None:
            by_input.setdefault(round(r["input_crossing_50_s"] * fs), r)
    for k, (t_k, delta) in enumerate(rec["steps"]):
        big = abs(delta) >= 10 * rec["dist_rms"]
        where = f"record {rec['i']} ({rec['kind']}, zeta {rec['zeta']}, {rec['pattern']}, " \
                f"{rec['disturbance']}{', cut' if rec['cut'] else ''}) transition {k}"
        row = by_input.get(round(t_k * fs)) or by_input.get(round(t_k * fs) + 1) or \
            by_input.get(round(t_k * fs) - 1)
        _count(tally, big, row is not None, where)
        if row is None:
            continue
        u_t = (row.get("uncertainty") or {}).get("crossing_50_s") or 0.0
        tr = truth_for(rec["kind"], rec["zeta"], rec["scale"], 2.0)
        _check_value(row, "delay_s", tr["delay_s"], 2 * T + 3 * u_t, tally, where)
        _check_row(row, rec, k, tally, where, origin_s=0.0, slack_s=0.0)


def _count(tally: dict, big: bool, found: bool, where: str) -> None:
    """A step of at least 10 disturbance RMS counts toward the transitions found."""
    if big:
        tally["eligible"] += 1
        tally["found"] += found
        if not found:
            tally["missed"].append(where)


def _check_row(row: dict, rec: dict, k: int, tally: dict, where: str, origin_s: float,
               slack_s: float) -> None:
    """Levels, duration, overshoot and settling of transition k against the truth; the
    settling time counted from ``origin_s`` after the step (within ``slack_s`` more)."""
    T = 1.0 / rec["fs"]
    delta = rec["steps"][k][1]
    a, b = rec["levels"][k], rec["levels"][k + 1]
    unc = row.get("uncertainty") or {}
    rms = row.get("disturbance_rms") or 0.0
    peak = row.get("disturbance_peak") or 0.0
    for key, truth in (("initial_level", a), ("final_level", b)):
        u = unc.get(key) or 0.0
        _check_value(row, key, truth, 4 * u + 3 * rms + 1e-3 * abs(delta), tally, where)
    tr = truth_for(rec["kind"], rec["zeta"], rec["scale"], 2.0)
    dur_key = "rise_time_s" if b > a else "fall_time_s"
    u_d = unc.get("transition_duration_s") or 0.0
    _check_value(row, dur_key, tr["rise_time_s"], 2 * T + u_d, tally, where)
    _check_value(row, "overshoot_pct", tr["overshoot_pct"],
                 (unc.get("overshoot_pct") or 0.0) + 0.15, tally, where)
    # settling: the truth for the band narrowed and widened by the disturbance's peak
    d_pct = 100.0 * peak / abs(delta)
    wide = truth_for(rec["kind"], rec["zeta"], rec["scale"], 2.0 + d_pct)["settling_time_s"]
    if 2.0 - d_pct > 0.05:
        narrow = truth_for(rec["kind"], rec["zeta"], rec["scale"], 2.0 - d_pct)[
            "settling_time_s"]
    else:
        narrow = math.inf
    mid = 0.5 * (wide + min(narrow, 10 * wide)) - origin_s
    half = 0.5 * (min(narrow, 10 * wide) - wide) + 2 * T + slack_s
    _check_value(row, "settling_time_s", mid, half, tally, where)


def check_record_output_only(rec: dict, tally: dict) -> None:
    """The same record measured from its output alone: every transition found from the
    output, each with its own levels (IEEE Std 181-2011's two-state definitions applied per
    transition); the settling time then runs from the output's own start (its 10 % instant),
    and there is no delay (nothing to delay from)."""
    fs = rec["fs"]
    T = 1.0 / fs
    try:
        d = simwave.measure(rec["y"]).to_dict()
    except Exception as exc:  # a crash is what this corpus counts
        tally["crashes"].append(f"record {rec['i']} (output only): {type(exc).__name__}: {exc}")
        return
    rows = d["channels"][0].get("transitions") or []
    tr = truth_for(rec["kind"], rec["zeta"], rec["scale"], 2.0)

    def off(r: dict, t_k: float) -> float:
        """How far a row is from the step at t_k: by its 50 % instant, or where a level is
        not established (instants null, with their reason) by its start (time origin)."""
        if r.get("crossing_50_s") is not None:
            return abs(r["crossing_50_s"] - (t_k + tr["delay_s"]))
        return abs(r["time_origin_s"] - (t_k + tr["start_s"]))

    used: set[int] = set()
    for k, (t_k, delta) in enumerate(rec["steps"]):
        big = abs(delta) >= 10 * rec["dist_rms"]
        where = f"record {rec['i']} output only ({rec['kind']}, zeta {rec['zeta']}, " \
                f"{rec['pattern']}, {rec['disturbance']}{', cut' if rec['cut'] else ''}) " \
                f"transition {k}"
        # the output's own instant of this step: its truth, within half a rise time
        near = [j for j, r in enumerate(rows) if j not in used
                and off(r, t_k) <= 0.5 * tr["rise_time_s"] + 3 * T]
        j = min(near, key=lambda j: off(rows[j], t_k), default=None)
        _count(tally, big, j is not None, where)
        if j is None:
            continue
        used.add(j)
        row = rows[j]
        a, b = rec["levels"][k], rec["levels"][k + 1]
        if row.get("direction") != ("rising" if b > a else "falling"):
            tally["bad"].append(f"{where}: direction {row.get('direction')}")
        # settling from the output's 10 % instant (which the disturbance moves by u_t)
        u_t = (row.get("uncertainty") or {}).get("crossing_50_s") or 0.0
        _check_row(row, rec, k, tally, where, origin_s=tr["start_s"], slack_s=3 * u_t)


def _tally() -> dict:
    return {"eligible": 0, "found": 0, "missed": [], "metrics": 0, "value": 0, "bound": 0,
            "null": 0, "bad": [], "crashes": []}


def _run(indices, check=check_record) -> dict:
    tally = _tally()
    n = 0
    for i in indices:
        check(make_record(i), tally)
        n += 1
    tally["records"] = n
    return tally


def _report(t: dict) -> str:
    found = 100.0 * t["found"] / max(t["eligible"], 1)
    return (
        f"corpus: {t['records']} records, {t['eligible']} transitions with step >= 10x the "
        f"disturbance RMS, {t['found']} found ({found:.2f} %); {t['metrics']} metrics: "
        f"{t['value']} values within the bracket, {t['bound']} marked bounds, {t['null']} null "
        f"with a reason, {len(t['bad'])} outside; {len(t['crashes'])} crashes"
    )


def _assert(t: dict) -> None:
    print(_report(t))
    for line in (t["crashes"] + t["missed"] + t["bad"])[:40]:
        print("  " + line)
    assert not t["crashes"]
    assert t["found"] >= 0.99 * t["eligible"]
    assert not t["bad"]


def test_corpus_sample():
    t = _run(range(0, N_RECORDS, SAMPLE_EVERY))
    _assert(t)
    assert t["records"] >= 60


@pytest.mark.slow
def test_corpus_full():
    t = _run(range(N_RECORDS))
    _assert(t)
    assert t["records"] >= 300


def multi_level(i: int) -> bool:
    """Record i is a staircase or up/down sequence that is not cut short."""
    return PATTERNS[(i // 2) % len(PATTERNS)] in ("staircase", "updown") and i % 11 != 5


def test_corpus_output_only_sample():
    t = _run([i for i in range(0, N_RECORDS, 2) if multi_level(i)], check_record_output_only)
    _assert(t)
    assert t["records"] >= 60


@pytest.mark.slow
def test_corpus_output_only_full():
    t = _run([i for i in range(N_RECORDS) if multi_level(i)], check_record_output_only)
    _assert(t)
    assert t["records"] >= 140


def test_corpus_output_only_steps_and_cut_records_sample():
    """Single steps (later or at the first sample, from rest) and records cut short before
    the last transition settles, from the output alone: every fifth record."""
    t = _run([i for i in range(0, N_RECORDS, SAMPLE_EVERY) if not multi_level(i)],
             check_record_output_only)
    _assert(t)
    assert t["records"] >= 30


@pytest.mark.slow
def test_corpus_output_only_steps_and_cut_records():
    t = _run([i for i in range(N_RECORDS) if not multi_level(i)], check_record_output_only)
    _assert(t)
    assert t["records"] >= 170


if __name__ == "__main__":  # python tests/test_measure_corpus.py [count] [--output-only]
    import sys

    args = [a for a in sys.argv[1:] if not a.startswith("--")]
    count = int(args[0]) if args else N_RECORDS
    only = "--output-only" in sys.argv
    if only:
        for name, keep in (("multi-level, not cut", multi_level),
                           ("single steps and cut records", lambda i: not multi_level(i))):
            t = _run([i for i in range(count) if keep(i)], check_record_output_only)
            print(f"output only, {name}: " + _report(t))
        os.sys.exit(0)
    t = _run(range(count), check_record)
    print("with the input: " + _report(t))
    for line in (t["crashes"] + t["missed"] + t["bad"])[:40]:
        print("  " + line)
    os.sys.exit(0)
