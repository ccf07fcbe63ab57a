"""Stage 3, per-transition metrics: for every output transition its instants, levels,
overshoot, undershoot, preshoot, peak, settling, delay and the disturbance and
uncertainty beside them (IEEE Std 181-2011), and the pulse table.

In: a :class:`~simwave.measure.stages.work.Work` after :mod:`.input_aligned` (each
channel's ``edges``, ``levels``/``refs``, ``segments``/``edge_info``). One pass over the
record reads the sample values the transitions' crossing instants need and runs each
transition's aberration/settling region (:class:`~simwave.measure.transient.EdgeRegions`,
from shortly before it to the next transition or the end of its segment). Out:
``w.regions``, ``w.values``, ``w.pre_step_index``/``w.pre_step_value`` (the output just
before the last input transition, for the steady-state gain), and per output channel of
kind "transitions" ``w.transient[c]`` = (its part of the result: state and reference
levels, ``transitions`` rows, summaries, pulses; its null reasons). Next:
:mod:`.steady_state`.
"""

from __future__ import annotations

import math

import numpy as np

from simwave.measure import plateaus as pl
from simwave.measure import quality
from simwave.measure import segments as seg
from simwave.measure.stages import work
from simwave.measure.stages.work import Channel, Work
from simwave.measure.transient import (
    WORST_IS_MAX,
    Edge,
    EdgeRegions,
    pulse_table,
    summarize,
)


def run(w: Work) -> None:
    """Regions and values (one pass), then each output channel's transition rows."""
    pass_regions(w)
    for c, ch in enumerate(w.outs):
        if ch.kind != "transitions":
            continue
        ri = w.ref_for(c)
        ref = w.refs[ri] if ri is not None else None
        part: dict = {}
        reasons = dict(ch.null_reasons)
        transient_section(w, c, ch, ref, part, reasons)
        w.transient[c] = (part, reasons)


def levels_dict(w: Work, ch: Channel) -> dict:
    """A channel's reference levels, in percent and in its unit."""
    p = w.o.reference_levels_pct
    return {
        "low_pct": p[0],
        "mid_pct": p[1],
        "high_pct": p[2],
        "low": ch.refs[0],
        "mid": ch.refs[1],
        "high": ch.refs[2],
    }


def pass_regions(w: Work) -> None:
    chans = w.outs + w.refs
    need: dict[int, np.ndarray] = {}
    # the output just before the last input transition: its initial level for the
    # steady-state gain of a step
    w.pre_step_index = {}
    for c in range(len(w.outs)):
        ri = w.ref_for(c)
        if ri is not None and w.refs[ri].edges:
            w.pre_step_index[c] = w.refs[ri].edges[-1].k_start
    for i, ch in enumerate(chans):
        idx = {k for e in ch.edges for k in e.needed_indices() if 0 <= k < w.n}
        if i in w.pre_step_index:
            idx.add(w.pre_step_index[i])
        if idx:
            need[i] = np.asarray(sorted(idx), dtype=np.int64)
    regions: dict[int, list[EdgeRegions]] = {}
    for c, ch in enumerate(w.outs):
        if ch.edges:
            regions[c] = regions_for(w, c, ch)
    if not need and not regions:
        return
    values: dict[int, dict[int, float]] = {i: {} for i in need}
    # region lists sorted by start, so each block visits only those it overlaps
    spans = {
        c: (
            np.array([min(r.pre_start, r.edge.k_start) for r in rs]),
            np.array([r.post_end for r in rs]),
        )
        for c, rs in regions.items()
    }
    prev = np.full(len(chans), np.nan)
    for start, a, b in w.src.blocks():
        cols = work.columns(a, b)
        last = start + a.shape[0] - 1
        for i, idx in need.items():
            lo, hi = np.searchsorted(idx, [start, last + 1])
            for k in idx[lo:hi]:
                values[i][int(k)] = float(cols[i][k - start])
        for c, rs in regions.items():
            s0, s1 = spans[c]
            y = cols[c]
            p = None if start == 0 else float(prev[c])
            # regions overlapping [start-1, last] (start-1: pending right neighbours)
            cand = np.flatnonzero((s0 <= last) & (s1 >= start - 1))
            for r in cand:
                rs[r].update(y, start, p)
        prev = np.array([col[-1] for col in cols])
    for i, ch in enumerate(chans):
        for e in ch.edges:
            e.set_instants(values[i], ch.refs)
    w.pre_step_value = {c: values[c][k] for c, k in w.pre_step_index.items()}
    w.regions = regions
    w.values = values


def regions_for(w: Work, c: int, ch: Channel) -> list[EdgeRegions]:
    ri = w.ref_for(c)
    in_edges: list[Edge] = w.refs[ri].edges if ri is not None else []
    in_mids = np.array([e.k_mid for e in in_edges], dtype=np.int64)
    lvls = ch.levels
    band_abs = w.o.settling_band_pct / 100.0 * lvls.amplitude
    pre_starts, matches = [], []
    for i, e in enumerate(ch.edges):
        m = None
        if ch.edge_info:
            m = ch.edge_info[i]["match"]  # input-aligned: found in its own segment
        elif in_mids.size:
            k = int(np.searchsorted(in_mids, e.k_mid, side="right")) - 1
            m = k if k >= 0 else None
        matches.append(m)
        length = max(3, e.j - e.k_start)
        ps = e.k_start - length
        if m is not None:
            ps = min(ps, in_edges[m].k_start)
        floor = ch.edges[i - 1].j + 1 if i > 0 else 0
        pre_starts.append(max(ps, floor, 0))
    out = []
    for i, e in enumerate(ch.edges):
        if ch.edge_info:
            # input-aligned: to the end of its segment, where the output starts to answer
            # the next input transition (the same stretch its final level is read from)
            post_end = ch.edge_info[i]["after"].end
        else:
            post_end = pre_starts[i + 1] - 1 if i + 1 < len(ch.edges) else w.n - 1
        post_end = max(post_end, e.j)
        if ch.edge_info:
            initial = ch.edge_info[i]["before"].level
            final = ch.edge_info[i]["after"].level
            band_abs = w.o.settling_band_pct / 100.0 * abs(final - initial)
        else:
            final = lvls.high if e.direction > 0 else lvls.low
            initial = lvls.low if e.direction > 0 else lvls.high
        r = EdgeRegions(e, pre_starts[i], post_end, initial, final, band_abs)
        r.match = matches[i]  # type: ignore[attr-defined]
        out.append(r)
    return out


def transient_section(
    w: Work, c: int, ch: Channel, ref: Channel | None, d: dict, reasons: dict
) -> None:
    if ch.levels is None:
        d["state_levels"] = None
        d["transitions"] = []
        reasons.setdefault("transitions", reasons.get("state_levels", "no state levels"))
        return
    d["state_levels"] = ch.levels.to_dict()
    d["reference_levels"] = levels_dict(w, ch)
    if ch.level_mode:
        d["state_levels"]["basis"] = ch.level_mode
    if ch.level_mode == "input-aligned":
        # segments end this long after the input starts to move (see _input_aligned_levels)
        sl = d["state_levels"]
        if ch.onset_delay is not None:
            sl["response_onset_delay_s"] = ch.onset_delay / w.rate
        else:
            sl["response_onset_delay_s"] = None
            sl["null_reasons"] = {
                "response_onset_delay_s": (
                    "no output transition starts from a settled state quiet enough (three "
                    "robust deviations of its noise within half of the "
                    f"±{w.o.settling_band_pct:g} % band) to show where the output starts "
                    "to answer the input: segments end where the input starts to move"
                )
            }
    rows = [
        transition_row(w, c, ch, r, ref, i) for i, r in enumerate(w.regions.get(c, []))
    ]
    d["transitions"] = rows
    if ch.unmatched and ref is not None:
        d["unmatched_input_transitions"] = [
            {
                "input_transition": i,
                "input_crossing_50_s": w.t(ref.edges[i].mid),
                "reason": why,
            }
            for i, why in ch.unmatched
        ]
    if not rows:
        if ch.unmatched:
            reasons["transitions"] = (
                "no output transition found for any input transition: " + ch.unmatched[0][1]
            )
        else:
            reasons["transitions"] = (
                "no transition found: the waveform never goes from one reference level "
                f"({ch.refs[0]:.6g}) to the other ({ch.refs[2]:.6g})"
            )
    d["transition_summary"] = summarize(rows, WORST_IS_MAX + ("peak_time_s",), worst=True)
    multilevel = ch.multilevel or (ref is not None and ref.multilevel)
    pulses = [] if multilevel else pulse_table(ch.edges, w.rate, w.t0)
    if pulses:
        d["pulses"] = pulses
        d["pulse_summary"] = summarize(
            pulses, ("pulse_duration_s", "period_s", "duty_pct"), worst=False
        )


def transition_levels(w: Work, ch: Channel, r: EdgeRegions, index: int, row: dict) -> tuple:
    """Per-transition state and reference levels, how they were found, and whether the
    final level is established (settled or extrapolated)."""
    refs = r.edge.refs if r.edge.refs is not None else ch.refs
    lo, hi = min(r.initial, r.final), max(r.initial, r.final)
    amp = hi - lo
    p = w.o.reference_levels_pct
    info = ch.edge_info[index] if ch.edge_info else None
    if info is not None:
        before, after = info["before"], info["after"]
        method = work.method_text(
            before.method if r.final > r.initial else after.method,
            after.method if r.final > r.initial else before.method,
            ch.level_mode or "input-aligned",
        )
        row["initial_level_detail"] = before.detail(w.rate, w.t0, amp)
        row["final_level_detail"] = after.detail(w.rate, w.t0, amp)
        settled = (before.settled, after.settled)
        final_ok = after.method != seg.METHOD_UNSETTLED
        initial_ok = before.method != seg.METHOD_UNSETTLED
    else:
        method = ch.levels.method
        settled = (None, None)
        # the channel's levels (from the output's intervals only when asked for with
        # state_level_method="segment" can they be unsettled)
        final_ok = initial_ok = seg.METHOD_UNSETTLED not in method
    row["state_levels"] = {"low": lo, "high": hi, "amplitude": amp, "method": method}
    row["reference_levels"] = {
        "low_pct": p[0],
        "mid_pct": p[1],
        "high_pct": p[2],
        "low": refs[0],
        "mid": refs[1],
        "high": refs[2],
    }
    if settled[0] is not None:
        row["initial_level_settled"] = bool(settled[0])
        row["final_level_settled"] = bool(settled[1])
    return amp, refs, initial_ok, final_ok


def segment_after(w: Work, ch: Channel, index: int, e: Edge):
    """The segment that holds this transition's final state, if segments were measured."""
    if ch.edge_info:
        return ch.edge_info[index]["after"]
    if not ch.segments:
        return None
    slack = (e.j - e.k_start) + 2
    if getattr(ch, "_seg_starts", None) is None or len(ch._seg_starts) != len(ch.segments):
        ch._seg_starts = np.array([s.start for s in ch.segments])
    k = int(np.searchsorted(ch._seg_starts, e.j))
    near = [i for i in (k - 1, k) if 0 <= i < len(ch.segments)]
    best = ch.segments[min(near, key=lambda i: abs(ch.segments[i].start - e.j))]
    return best if abs(best.start - e.j) <= slack else None


def transition_row(
    w: Work, c: int, ch: Channel, r: EdgeRegions, ref: Channel | None, index: int
) -> dict:
    e, rate = r.edge, w.rate
    reasons: dict = {}
    dur = (e.end - e.start) / rate
    dur_key = "rise_time_s" if e.direction > 0 else "fall_time_s"
    row: dict = {
        "index": index,
        "direction": e.name,
        "start_s": w.t(e.start),
        "crossing_50_s": w.t(e.mid),
        "end_s": w.t(e.end),
        dur_key: dur,
        "transition_duration_s": dur,
        "initial_level": r.initial,
        "final_level": r.final,
    }
    amp, refs, initial_ok, final_ok = transition_levels(w, ch, r, index, row)
    if ch.edge_info:
        vals = w.values.get(c, {})
        near = refs[0] if e.direction > 0 else refs[2]
        v = vals.get(e.k_start)
        if v is not None and e.direction * (v - near) > 0:
            # the finder was seeded with the initial state: the output never was at the
            # near reference level in the search region, so there is no start instant
            row[dur_key] = row["transition_duration_s"] = None
            row["start_s"] = None
            reasons[dur_key] = reasons["transition_duration_s"] = (
                "the output is not at its initial level before this transition (the "
                f"previous segment does not settle to within the {refs[0]:.6g} .. "
                f"{refs[2]:.6g} reference levels): no start instant"
            )
    if ch.edge_info and ref is not None:
        in_lv = ref.levels
        in_edge = ref.edges[ch.edge_info[index]["match"]]
        if in_edge.initial_level is not None:
            dx = in_edge.final_level - in_edge.initial_level
        else:
            dx = (in_lv.high - in_lv.low) * in_edge.direction
        if dx:
            row["level_change_gain"] = (r.final - r.initial) / dx
    m = getattr(r, "match", None)
    if ref is not None and m is not None:
        ie = ref.edges[m]
        origin, origin_name = ie.mid, "input 50 % crossing"
        row["input_transition"] = m
        row["input_crossing_50_s"] = w.t(ie.mid)
        row["delay_s"] = (e.mid - ie.mid) / rate
    else:
        origin, origin_name = e.start, "output transition start (low reference level instant)"
        row["input_transition"] = None
        row["delay_s"] = None
        reasons["delay_s"] = (
            "no reference input given" if ref is None else "no input transition precedes it"
        )
    row["time_origin"] = origin_name
    row["time_origin_s"] = w.t(origin)
    s = r.s
    row["overshoot_pct"] = max(0.0, 100.0 * (r.peak_val - s * r.final) / amp)
    if r.reached_idx >= 0:
        row["undershoot_pct"] = max(0.0, 100.0 * (s * r.final - r.after_reach_min) / amp)
    else:
        row["undershoot_pct"] = None
        reasons["undershoot_pct"] = (
            "the waveform never reaches its final state level after the transition "
            "(monotonic approach): no undershoot to measure"
        )
    if math.isfinite(r.pre_min):
        row["preshoot_pct"] = max(0.0, 100.0 * (s * r.initial - r.pre_min) / amp)
    else:
        row["preshoot_pct"] = None
        reasons["preshoot_pct"] = "no samples before the transition"
    pk = r.peak()
    if pk is None:
        row["peak_value"] = s * r.peak_val
        row["peak_time_s"] = None
        reasons["peak_time_s"] = (
            "no peak: the waveform is still moving toward its extreme at the end of the "
            "post-transition region"
        )
    else:
        row["peak_value"], row["peak_time_s"] = pk[0], (pk[1] - origin) / rate
    row["settling_band_pct"] = w.o.settling_band_pct
    si = r.settle_instant()
    if ch.edge_info:
        approaching = [
            side
            for side, d in (("initial", "initial_level_detail"), ("final", "final_level_detail"))
            if (row.get(d) or {}).get("method") == seg.METHOD_APPROACHING
        ]
    else:
        approaching = ["a state"] if seg.METHOD_APPROACHING in ch.levels.method else []
    if approaching and initial_ok and final_ok:
        row["levels_note"] = (
            f"{' and '.join(approaching)} level still approaching at the end of its "
            "segment: it is the last value reached, so the amplitude is a lower bound and "
            "durations and percentages are relative to it"
        )
    if not (initial_ok and final_ok):
        # a level the record does not establish: the instants are kept (found on the
        # provisional level, the median of the segment's end) but nothing is given in
        # percent of an amplitude that is not known, nor a band around it
        unknown = [side for side, ok in (("initial", initial_ok), ("final", final_ok)) if not ok]
        which = " and ".join(unknown)
        cause = "its segment neither settles nor rings enough to extrapolate"
        notes = [(row.get(f"{side}_level_detail") or {}).get("note") or "" for side in unknown]
        if any(note.startswith(work.STILL_MOVING) for note in notes):
            # the output is still moving on when its segment ends: say why that is no bound
            cause = ("its segment still moves on at its end, which a lag stopping farther on "
                     "and ringing already past its level both do")
        row["levels_note"] = (
            f"{which} level not established: {cause} (the record gives it too little time); "
            "the instants are found on the median of the segment's end as a provisional level"
        )
        why = f"{which} level not established: {cause} (see levels_note)"
        for k in (
            dur_key,
            "transition_duration_s",
            "overshoot_pct",
            "undershoot_pct",
            "preshoot_pct",
            "settling_time_s",
        ):
            row[k] = None
            reasons[k] = why
        row["settled_at_s"] = None
        # the level itself and the instants found on it are provisional: given in the
        # level detail (end_median), not as measured values
        provisional = f"{why}; its provisional value is in the level detail"
        for side, ok in (("initial", initial_ok), ("final", final_ok)):
            if not ok:
                row[f"{side}_level"] = None
                reasons[f"{side}_level"] = provisional
        for k in ("start_s", "crossing_50_s", "end_s", "delay_s"):
            if row.get(k) is not None:
                row[k] = None
                reasons[k] = (
                    f"{why}: the reference levels, and so this instant, are not known"
                )
        if row.get("level_change_gain") is not None:
            # the output's level change over the input's: its provisional level is no
            # measured gain (a still-moving end read as one looked like a gain error)
            row["level_change_gain"] = None
            reasons["level_change_gain"] = f"{why}: the output's level change is not known"
    elif (
        si is not None
        and (after := segment_after(w, ch, index, e)) is not None
        and not after.settled
        and not turns_inside_band(after, r, ch.onset_allowance if ch.edge_info else 0.0)
    ):
        # inside the band for a moment, but the end of its segment still moves by more
        # than the band: it has not settled, it is passing through (IEEE Std 181-2011:
        # settling means entering the band and remaining in it)
        row["settling_time_s"] = None
        row["settled_at_s"] = None
        where = "the end of the record" if r.post_end >= w.n - 1 else "the next transition"
        if after.method == seg.METHOD_EXTRAPOLATED:
            reasons["settling_time_s"] = (
                f"never settles before {where}: it comes into the "
                f"±{w.o.settling_band_pct:g} % band only "
                f"{1e3 * (r.post_end - si) / rate:.3g} ms before the output starts to "
                "answer it, and its ringing does not turn back inside the band in that "
                "time (it is only passing through the band)"
            )
        else:
            reasons["settling_time_s"] = (
                f"never settles before {where}: the last part of the segment after it still "
                f"moves by {100.0 * after.drift / amp:.3g} % of amplitude, more than the "
                f"±{w.o.settling_band_pct:g} % band (it is only passing through the band)"
            )
    elif si is None:
        row["settling_time_s"] = None
        row["settled_at_s"] = None
        where = "the end of the record" if r.post_end >= w.n - 1 else "the next transition"
        reasons["settling_time_s"] = (
            f"never settles before {where}: over its last tenth it is still up to "
            f"{100.0 * r.tail_dev / amp:.3g} % of amplitude from the final level, "
            f"outside the ±{w.o.settling_band_pct:g} % band"
        )
    else:
        row["settling_time_s"] = max(0.0, (si - origin) / rate)
        row["settled_at_s"] = w.t(si)
    if reasons:
        row["null_reasons"] = reasons
    before = ch.edge_info[index]["before"] if ch.edge_info else None
    after = ch.edge_info[index]["after"] if ch.edge_info else segment_after(w, ch, index, e)
    fallback = pl.disturbance_rms_from_pp(ch.disturbance_pp, ch.windows.size)
    end_s = w.t(after.end if after is not None else r.post_end)
    quality.annotate(
        row, amp, w.o.settling_band_pct, rate, before, after, fallback, end_s,
        n_post=max(r.post_end - e.j, 2),
    )
    return row


def turns_inside_band(after: seg.Segment, r: EdgeRegions, allowance: float) -> bool:
    """A segment whose end still rings by more than the band (not settled by the end-window
    test) has settled all the same when its ringing converges (the turning points its level
    is extrapolated from alternate with shrinking size) and, after it last came into the
    band, it turned back inside it: a whole swing of the ringing, up to its extreme, lies
    inside the band, and the swings after it are smaller still. The turn must exceed the
    noise (``NOISE_HYSTERESIS`` deviations) and ``allowance``, the most of the response to
    the next transition the segment's end may hold, so that neither makes it.

    References
    ----------
    IEEE Std 181-2011 (settling: entering the band and remaining in it); the shrinking
    turning points of a damped response, K. Ogata, *Modern Control Engineering*, 5th ed.,
    sec. 5-3.
    """
    if after.method != seg.METHOD_EXTRAPOLATED:
        return False
    return r.turn > max(seg.NOISE_HYSTERESIS * after.noise, allowance)
