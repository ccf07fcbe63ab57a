"""Stage 2c, output-aligned transitions: without a reference input, an output measured
between its own plateaus (a staircase, set-point changes: ``multilevel`` from
:mod:`.state_levels`), or a two-level output whose levels neither the histogram nor its
state intervals establish (``own_levels``, from :func:`own_intervals`: a single step, a
record cut short, a step at the first sample) is cut into one segment per state at its
own transitions, each segment's level read at its settled end (or extrapolated from its
ringing), and each transition searched again between the two on those levels.

This is :mod:`.input_aligned` with the output's own transitions as the cuts: every
transition then has its own initial and final level (IEEE Std 181-2011's two-state
definitions applied per transition), read from the settled ends beside it rather than
from the window plateaus, which a still-ringing window can leave out or pull.

In: a :class:`~simwave.measure.stages.work.Work` after :mod:`.find_transitions` (each
multi-level output's ``edges``, found between its plateaus). Two passes (segment ends;
each transition on its segments' levels). Out, per such output channel: ``segments``,
``level_mode`` = "output-aligned", ``edges`` (a transition not found again keeps the
plateau search's), ``edge_info`` (the segments before and after each; no input
transition). Next: :mod:`.transition_metrics`.
"""

from __future__ import annotations

import math

import numpy as np

from simwave.measure import levels as lv
from simwave.measure import plateaus as pl
from simwave.measure import segments as seg
from simwave.measure.stages import work
from simwave.measure.stages.input_aligned import aligned_round
from simwave.measure.stages.work import Work

#: Where the output's own transitions cut it: this many times a transition's 10-90 %
#: time before its start (its near reference level instant). An output starts to answer
#: a step before it reaches its 10 % level: a second-order response of damping 0.05 to 1
#: reaches it 0.16 to 0.43 of its 10-90 % time after it starts, a first-order one 0.05
#: (computed from the closed forms of K. Ogata, *Modern Control Engineering*, 5th ed.,
#: sec. 5-3; 0.5 is our choice). A longer lag (dead time, higher order) leaves part of the
#: answer in the segment's end, which then shows as a level not settled (and said so).
OUTPUT_LEAD = 0.5


#: The first sample of an output that leaves the at-rest level there lies within this
#: fraction of the first block's largest magnitude of 0 (our choice).
REST_NEAR = 0.1
#: The output has left 0 where it lies beyond this fraction of the first block's largest
#: magnitude, or beyond ``REST_NOISE`` robust deviations of its sample-to-sample noise
#: (our choice) ...
REST_DEPART = 0.02
REST_NOISE = 4.0
#: ... and it leaves from the first sample when reaching four times that distance, from
#: where it last left the band, takes at least this fraction of the time it took to leave:
#: a response from rest at sample 0 grows as a power of the time (t: 3 times, t^2: 1 time,
#: t^4: 0.41 times), while an output held at rest until a later step gets there in a
#: fraction of the rest it held (our choice).
REST_GROWTH = 0.3
#: Samples in a row beyond a level that count as reaching it (a lone noise sample does not).
REST_RUN = 3
#: Where a two-level output's own segments (:func:`own_intervals`) end: this many times a
#: transition's 25-75 % time before its 25 % instant. A second-order step response of
#: damping 0.05 to 1 starts 1.18 to 0.55 of its 25-75 % time before it reaches 25 %, a
#: first-order one 0.26 (computed from the closed forms of K. Ogata, *Modern Control
#: Engineering*, 5th ed., sec. 5-3; 1.25 is our choice).
OWN_LEAD = 1.25
#: A two-level output with more transitions than this is not measured transition by
#: transition on its own segments' levels when those do not establish its levels (a
#: periodic waveform: its histogram serves; our choice).
OWN_MAX_CUTS = 64


def _first_run(mask: np.ndarray, run: int = REST_RUN) -> int | None:
    """Index of the first of ``run`` true values in a row in ``mask``, or None."""
    if mask.size < run:
        return None
    together = mask[: mask.size - run + 1].copy()
    for k in range(1, run):
        together &= mask[k : mask.size - run + 1 + k]
    hit = np.flatnonzero(together)
    return int(hit[0]) if hit.size else None


def leaves_rest(head: np.ndarray) -> bool:
    """Whether an output (its first block, ``(n, channels)``) leaves the at-rest level 0
    from its first sample: the first sample lies near 0 (``REST_NEAR``) and the output
    moves away at once, not after a stretch at rest (``REST_DEPART``, ``REST_GROWTH``),
    without swinging back across 0 (a sine does), in at least one channel and with no
    channel starting away from 0. Such an output answers
    a step at the first sample (the at-rest convention: the system was at rest, its output
    0, before the record)."""
    leaves = False
    for c in range(head.shape[1]):
        y = np.abs(head[:, c])
        top = float(np.max(y)) if y.size else 0.0
        if top == 0.0:
            continue
        if y[0] > REST_NEAR * top:
            return False  # away from 0 at its start: not from rest, or the start is not here
        d = np.diff(head[: min(head.shape[0], 512), c])
        # robust deviation of the sample-to-sample noise (1.4826 MAD, common practice)
        noise = 1.4826 * float(np.median(np.abs(d - np.median(d)))) / np.sqrt(2.0)
        thr = max(REST_DEPART * top, REST_NOISE * noise)
        if 4.0 * thr >= top:
            continue
        k4 = _first_run(y > 4.0 * thr)
        if k4 is None:
            continue
        # where it last left the band around 0 before that (hum and noise cross the
        # band's edge and come back; the response does not)
        inside = np.flatnonzero(y[:k4] <= thr)
        k1 = int(inside[-1]) + 1 if inside.size else 0
        # a step response from rest stays on the side it left 0 to (ringing about its
        # final level does not reach back across 0); a sine or tones swing to the other
        sign = np.sign(head[k4, c])
        across = float(np.max(-sign * head[:, c]))
        if k4 - k1 >= REST_GROWTH * k1 and across <= REST_NEAR * top:
            leaves = True
    return leaves


def own_plateaus(w: Work, ch, sc: pl.Staircase, stats: pl.WindowStats) -> pl.Staircase:
    """An output's plateaus without a reference, adjusted where the record starts or ends
    in a transition: an output that leaves rest at its first sample (``w.rest_output``)
    holds no state near 0 but the at-rest one, so a first plateau near 0 (within
    ``REST_NEAR`` of its range) is the slow start of its departure: the at-rest state
    (one sample of 0) replaces it; plateaus that touch each other at the record's end are
    a slow approach still going on when the record ends, one state, not settled
    (``ch.tail_moving``: :func:`~.work.held_too_briefly` says so); and a record cut
    short in a transition gets its last state (:func:`trailing_state`)."""
    ps = list(sc.plateaus)
    tail_moving = False
    means, mins, maxs = stats.arrays()
    rng = float(maxs.max() - mins.min()) if means.size else 0.0
    changed = False
    if w.rest_output and ps and ps[0].start <= 1 and ps[0].windows:
        if abs(ps[0].level) <= REST_NEAR * rng:
            ps[0] = pl.Plateau(0, 0, 0.0, 0, 0.0)
            changed = True
    if w.rest_output and (not ps or ps[0].start > 1):
        ps.insert(0, pl.Plateau(0, 0, 0.0, 0, 0.0))  # the state it leaves at sample 0
        changed = True
    at_end = sc.n - 1 - stats.size  # the last partial window is in no plateau
    while len(ps) >= 3 and ps[-1].end >= at_end and ps[-1].start <= ps[-2].end + 1:
        q, p = ps[-2], ps[-1]
        spread = max(q.spread, p.spread)
        ps[-2:] = [pl.Plateau(q.start, p.end, p.level, q.windows + p.windows, spread)]
        changed = tail_moving = True
    if changed:
        out = pl.Staircase(ps, sc.disturbance_pp, sc.window, sc.n)
        out._range_floor = sc._range_floor
        sc = out
    ch.tail_moving = tail_moving
    return trailing_state(sc, stats)


def trailing_state(sc: pl.Staircase, stats: pl.WindowStats) -> pl.Staircase:
    """A record cut short after a transition whose new state it holds too briefly for a
    plateau (the output still moving when the record ends): that state is added as a
    plateau of no windows at the record's last sample, at the last window's mean (a
    provisional level; :func:`run` reads it again at the end of its segment and marks it
    as far as it is established), so that its transition is found and measured instead
    of being merged with the one before it. Nothing is added when the record ends near
    the last plateau's level."""
    if not sc.plateaus:
        return sc
    last = sc.plateaus[-1]
    means, mins, maxs = stats.arrays()
    i0 = (last.end + 1) // max(stats.size, 1)
    if means.size <= i0:
        return sc
    rng = float(maxs.max() - mins.min())
    floor = max(pl.HELD_STEP_SPANS * sc.step_floor, work.NO_CHANGE_FRACTION * rng)
    if not abs(float(means[-1]) - last.level) > floor:
        return sc
    end = pl.Plateau(sc.n - 1, sc.n - 1, float(means[-1]), 0, 0.0)
    out = pl.Staircase(sc.plateaus + [end], sc.disturbance_pp, sc.window, sc.n)
    out._range_floor = sc._range_floor
    return out


def own_segments(edges: list, n: int) -> list:
    """Segments between transitions found on 25/75 % levels, each ending ``OWN_LEAD``
    times the next transition's 25-75 % time before it, but never losing more than half
    of its length to that (a first-order lag needs far less lead than a slow second-order
    start, and a short state keeps its end window)."""
    segs = seg.segments_between(edges, n, 0.0)
    for s, e in zip(segs, edges, strict=False):
        early = min(math.ceil(OWN_LEAD * max(int(e.j) - int(e.k_start), 0)), s.length // 2)
        s.end = max(s.start, s.end - early)
    return segs


def own_intervals(w: Work) -> None:
    """Without a reference input, a two-level output whose levels neither the histogram
    (confirmed by the ends of its state intervals) nor those ends establish, e.g. a single
    step whose record ends before the output settles, or a step at the first sample (its
    initial state is one sample, the at-rest convention's): its transitions are found with
    wide hysteresis (25/75 % of its range: the extremes include overshoot, so neither a
    peak nor ringing is read as a state), the record cut there, each segment's level read
    at its end (settled, extrapolated from ringing, still approaching, or not settled),
    and, when at least one level is established that way (or the output leaves rest at
    the first sample and makes one transition), every transition is measured on the levels
    of the segments beside it (:func:`run`), each marked for what is not known. One pass
    for the transitions (stopped after ``OWN_MAX_CUTS``), one for the segment ends."""
    o = w.o
    if o.state_level_method != "histogram" or o.signal_kind not in ("auto", "transitions"):
        return
    if o.signal_kind == "auto" and (o.sine_hz is not None or o.tones_hz is not None):
        return
    cands = {
        c: ch
        for c, ch in enumerate(w.outs)
        if w.ref_for(c) is None and not ch.constant and ch.levels is not None
        and not ch.multilevel and not ch.established and ch.level_mode is None
    }
    if not cands:
        return
    refs = {
        c: lv.reference_values(lv.StateLevels(ch.lo, ch.hi, ""), (25.0, 50.0, 75.0))
        for c, ch in cands.items()
    }
    edges = work.find_edges(w, refs, OWN_MAX_CUTS + 1)
    segs = {c: own_segments(e, w.n) for c, e in edges.items() if 0 < len(e) <= OWN_MAX_CUTS}
    work.collect(w, segs)
    for c, ss in segs.items():
        ch = w.outs[c]
        work.decide(w, ss, ch)
        known = [s for s in ss if s.method in (seg.METHOD_END, seg.METHOD_EXTRAPOLATED)]
        from_rest = len(ss) == 2 and ss[0].method == seg.METHOD_REST
        if not known and not from_rest:
            continue
        if not known and ramp_window(w, ch):
            continue  # a ramp from rest, not a step: the kind stage says so
        floor = work.min_change(ch)
        if not any(abs(b.level - a.level) > floor for a, b in zip(ss, ss[1:], strict=False)):
            continue
        low, m_low, _ = seg.pooled_level(ss, 0)
        high, m_high, _ = seg.pooled_level(ss, 1)
        if low is None or high is None or not high - low > floor:
            continue
        why = (
            f"histogram levels ({ch.levels.method}: low {ch.levels.low:.6g}, high "
            f"{ch.levels.high:.6g}) not confirmed by the settled ends of the output's own "
            "state intervals; each transition has its own levels, from the segments "
            "before and after it, marked where the record does not establish them"
        )
        ch.levels = lv.StateLevels(
            low, high, work.method_text(m_low, m_high, "output state intervals"), note=why
        )
        ch.refs = lv.reference_values(ch.levels, o.reference_levels_pct)
        ch.own_levels = True
        # the transitions stage takes these as the channel's (no pass); :func:`run` finds
        # each again on the levels beside it
        ch.speculated = ch.refs, list(edges[c])


def ramp_window(w: Work, ch) -> bool:
    """The channel's steady-state window is a straight line (:mod:`.classify`'s test)."""
    from simwave.measure import steady as st
    from simwave.measure.stages.classify import RAMP_R2

    y = ch.fit_window
    return y.size >= 3 and np.ptp(y) > 0 and st.line_fit(y, w.window_t(y.size))[2] >= RAMP_R2


def run(w: Work) -> None:
    """Per-transition levels and transitions of multi-level outputs without a reference,
    and of two-level ones whose levels are their segments' (``own_levels``)."""
    if w.o.state_level_method == "minmax":
        return
    todo: dict[int, list] = {}
    cuts: dict[int, list] = {}
    for c, ch in enumerate(w.outs):
        if w.ref_for(c) is not None or ch.kind != "transitions":
            continue
        if not (ch.multilevel or ch.own_levels):
            continue
        if ch.edges:
            cuts[c] = list(ch.edges)
            # own levels: cut at its 25/75 % transitions (OWN_LEAD), else at 10/90 %
            if ch.own_levels:
                todo[c] = own_segments(cuts[c], w.n)
            else:
                todo[c] = seg.segments_between(cuts[c], w.n, OUTPUT_LEAD)
    if not todo:
        return
    work.collect(w, todo)
    for c, (segs, matched, _unmatched) in aligned_round(w, todo, cuts).items():
        ch = w.outs[c]
        ch.segments, ch.level_mode = segs, "output-aligned"
        if ch.own_levels:
            # a cut found no transition on the levels beside it (no level change there):
            # dropped; the cuts' own instants are on the wide provisional levels
            keep = sorted(matched)
            ch.edges = [matched[i] for i in keep]
            ch.edge_info = [
                {"match": None, "before": segs[i], "after": segs[i + 1]} for i in keep
            ]
            continue
        ch.edges = [matched.get(i, e) for i, e in enumerate(cuts[c])]
        ch.edge_info = [
            {"match": None, "before": segs[i], "after": segs[i + 1]}
            for i in range(len(cuts[c]))
        ]
