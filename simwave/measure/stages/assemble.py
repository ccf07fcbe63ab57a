"""Stage 5, result: the stages' findings put together as the result dictionary (layout in
:mod:`simwave.measure`), with the predictions of H(s) beside the measured values.

In: a :class:`~simwave.measure.stages.work.Work` after :mod:`.steady_state`
(``w.transient``, ``w.steady``, each channel's scan figures and kind). No pass over the
record. Out: the dictionary :class:`~simwave.measure.result.MeasurementResult` wraps.
"""

from __future__ import annotations

from simwave.measure.predict import compare_rows, predictions_for
from simwave.measure.stages.transition_metrics import levels_dict
from simwave.measure.stages.work import Channel, Work


def run(w: Work) -> dict:
    """The result dictionary."""
    w.pred = predictions_for(w.system, w.o, w.rate)
    o = w.o
    oi = w.src.out.info
    res: dict = {
        "measurement": "simwave.measure",
        "schema": 1,
        "source": {
            "output": oi.path,
            "reference": (w.src.ref.info.path if w.src.ref is not None else None),
            "reference_channel": (
                str(o.reference_channel) if o.reference_channel is not None else None
            ),
        },
        "record": {
            "rate_hz": w.rate,
            "t0_s": w.t0 + (1.0 / w.rate if w.rest_sample else 0.0),
            "n_samples": w.n - int(w.rest_sample),
            "duration_s": (w.n - int(w.rest_sample)) / w.rate,
            "n_channels": len(w.outs),
            "rest_sample_before": w.rest_sample,
        },
        "options": o.to_dict(),
        "steady_window_s": [w.t(w.w_start), w.t(w.n - 1)],
        "predicted": w.pred.to_dict(),
        "input": [input_dict(w, r) for r in w.refs],
        "channels": [channel_dict(w, c, ch) for c, ch in enumerate(w.outs)],
        "notes": list(w.notes),
    }
    return res


def input_dict(w: Work, r: Channel) -> dict:
    """One reference (input) channel's part of the result."""
    d: dict = {
        "name": r.name,
        "unit": r.unit,
        "kind": r.kind,
        "kind_source": r.kind_source,
        "min": r.lo,
        "max": r.hi,
        "mean": r.mean,
        "rms": r.rms,
    }
    if r.kind == "transitions" and r.levels is not None:
        d["state_levels"] = r.levels.to_dict()
        d["reference_levels"] = levels_dict(w, r)
        d["transitions"] = [
            {
                "index": i,
                "direction": e.name,
                "start_s": w.t(e.start),
                "crossing_50_s": w.t(e.mid),
                "end_s": w.t(e.end),
                "transition_duration_s": (e.end - e.start) / w.rate,
                "initial_level": e.initial_level,
                "final_level": e.final_level,
            }
            for i, e in enumerate(r.edges)
        ]
        if r.multilevel:
            d["disturbance_pp"] = r.staircase.disturbance_pp
    if r.null_reasons:
        d["null_reasons"] = dict(r.null_reasons)
    return d


def channel_dict(w: Work, c: int, ch: Channel) -> dict:
    """One output channel's part of the result."""
    ri = w.ref_for(c)
    ref = w.refs[ri] if ri is not None else None
    d: dict = {
        "name": ch.name,
        "unit": ch.unit,
        "input_channel": ref.name if ref is not None else None,
        "kind": ch.kind,
        "kind_source": ch.kind_source,
        "min": ch.lo,
        "max": ch.hi,
        "mean": ch.mean,
        "rms": ch.rms,
    }
    reasons = dict(ch.null_reasons)
    if ch.kind == "transitions":
        part, reasons = w.transient[c]
        d.update(part)
    part, tone_reasons = w.steady[c]
    d.update(part)
    reasons.update(tone_reasons)
    comparisons = compare_rows(d, w.pred, w.o)
    d["comparison"] = comparisons
    if reasons:
        d["null_reasons"] = reasons
    return d
