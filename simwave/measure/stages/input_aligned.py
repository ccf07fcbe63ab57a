"""Stage 2b, input-aligned transitions: with a reference input of transitions, the output
cut into one segment per input state, each segment's level read at its settled end, and
the output transition that answers each input transition searched between the two.

In: a :class:`~simwave.measure.stages.work.Work` after :mod:`.find_transitions` (the
reference channels' ``edges``). Two to five passes (segment ends; each input transition's
output transition; when the output answers late: its response onset delay, then both
again on segments cut that much later). Out, per output channel answering a reference:
``segments``, ``level_mode`` = "input-aligned", ``onset_delay``, ``onset_allowance``,
``edges`` (replacing stage 2's), ``edge_info`` (the segments before and after each),
``unmatched`` and ``levels``/``refs`` pooled from the segments. Next:
:mod:`.transition_metrics`.
"""

from __future__ import annotations

import math

import numpy as np

from simwave.measure import levels as lv
from simwave.measure import segments as seg
from simwave.measure.stages import work
from simwave.measure.stages.work import NO_CHANGE_FRACTION, Channel, Work
from simwave.measure.transient import Edge, EdgeFinder

#: Input-aligned segments end this many times the next input transition's 10-90 % time
#: before its start (a linear edge spends 1/8 of its 10-90 % time below 10 %).
INPUT_LEAD = 0.125


def run(w: Work) -> None:
    """With a reference input of transitions: cut each output channel into one segment
    per input state; every transition's initial level is the settled end of the segment
    before it, its final level the settled end of its own segment; the output transition
    is then searched between the two, on its own reference levels.

    A segment ends where the output starts to answer the next input transition, not
    where the input does: first the record is cut where the input starts to move, which
    a causal system cannot answer earlier; on the transitions that start from a settled
    segment the output's response onset delay is measured (the first sample after the
    cut that leaves the range the output kept over that segment's end window, see
    :func:`simwave.measure.segments.onset_threshold`), and the record is cut again that
    much later (the smallest delay found), never past the start (near reference level
    instant) of the output's own next transition. The level reading (last part of the
    segment), the settled check and the settling search all use these segments.
    """
    o = w.o
    if o.state_level_method == "minmax":
        return
    todo: dict[int, list] = {}
    for c, ch in enumerate(w.outs):
        ri = w.ref_for(c)
        if ch.kind != "transitions" or ch.constant or ri is None or not w.refs[ri].edges:
            continue
        # end each segment where the input starts to move (a linear input edge spends
        # 1/8 of its 10-90 % time below 10 %), plus a sample
        todo[c] = seg.segments_between(w.refs[ri].edges, w.n, INPUT_LEAD)
    if not todo:
        return
    work.collect(w, todo)
    found = aligned_round(w, todo)
    delays = onset_delays(w, found)
    redo: dict[int, list] = {}
    for c, (delay, _thr) in delays.items():
        if delay <= 0:
            continue
        in_edges = w.refs[w.ref_for(c)].edges
        stops: list = [None] * len(in_edges)
        for i, e in found[c][1].items():
            stops[i] = e.k_start - 1  # the output's own transition has begun
        redo[c] = seg.segments_between(
            in_edges, w.n, INPUT_LEAD, delay=delay, stops=stops
        )
    if redo:
        work.collect(w, redo)
        found.update(aligned_round(w, redo))
    for c, (segs, matched, unmatched) in found.items():
        ch = w.outs[c]
        ch.segments, ch.level_mode = segs, "input-aligned"
        ch.onset_delay, ch.onset_allowance = delays.get(c, (None, 0.0))
        if not ch.onset_delay:
            ch.onset_allowance = 0.0  # cut where the input starts: none of its response
        ch.edges = [matched[i] for i in sorted(matched)]
        ch.edge_info = [
            {"match": i, "before": segs[i], "after": segs[i + 1]} for i in sorted(matched)
        ]
        ch.unmatched = sorted(unmatched)
        aligned_channel_levels(w, c, ch, segs)


def aligned_round(
    w: Work, todo: dict[int, list], cuts: dict[int, list] | None = None
) -> dict[int, tuple]:
    """Levels of the input-aligned segments (already collected) and, in one pass, the
    output transition of each input transition: {channel: (segments, {input transition:
    output Edge}, [(input transition, why there is no output transition)])}. ``cuts``:
    the transitions the segments were cut at, per channel, when not the reference's
    (the output's own, :mod:`.output_aligned`)."""
    o = w.o
    plans: dict[int, list] = {}
    unmatched: dict[int, list] = {}
    for c, segs in todo.items():
        ch = w.outs[c]
        in_edges = cuts[c] if cuts is not None else w.refs[w.ref_for(c)].edges
        work.decide(w, segs, ch)
        plans[c], unmatched[c] = [], []
        for i in range(len(in_edges)):
            a, b = segs[i], segs[i + 1]
            amp = b.level - a.level
            if not abs(amp) > work.min_change(ch):
                unmatched[c].append(
                    (
                        i,
                        f"the output level hardly changes across it (from {a.level:.6g} "
                        f"to {b.level:.6g}, less than {100 * NO_CHANGE_FRACTION:g} % of "
                        "the channel's range): no output transition",
                    )
                )
                continue
            lo_, hi_ = min(a.level, b.level), max(a.level, b.level)
            refs = lv.reference_values(lv.StateLevels(lo_, hi_, ""), o.reference_levels_pct)
            direction = 1 if amp > 0 else -1
            seed = 0 if direction > 0 else 1  # the output sits at its initial level
            finder = EdgeFinder(*refs, seed_state=seed, seed_index=a.w_start)
            plans[c].append((i, a.w_start, b.end, direction, refs, finder))
    pass_aligned_edges(w, plans)
    found: dict[int, tuple] = {}
    for c, plan in plans.items():
        in_edges = cuts[c] if cuts is not None else w.refs[w.ref_for(c)].edges
        matched: dict[int, Edge] = {}
        for i, _lo, _hi, direction, refs, finder in plan:
            e = next(
                (
                    e
                    for e in finder.edges
                    if e.direction == direction and e.j >= in_edges[i].k_start
                ),
                None,
            )
            if e is None:
                unmatched[c].append(
                    (
                        i,
                        "the output does not pass from its level before to its level after "
                        f"this input transition (reference levels {refs[0]:.6g} and "
                        f"{refs[2]:.6g}) before the next input transition",
                    )
                )
                continue
            e.refs = refs
            matched[i] = e
        found[c] = (todo[c], matched, unmatched[c])
    return found


def onset_delays(w: Work, found: dict[int, tuple]) -> dict[int, tuple[int, float]]:
    """Each channel's response onset delay, in samples, and the onset threshold it was
    found with (the most of the response a segment's end may then hold).

    Over the output transitions whose segment before is settled: the number of samples
    after that segment's end (where the input starts to move) during which the output
    stays within the onset threshold of its level, less one (the last of them may hold
    up to a threshold's worth of the response already); the smallest of these. One
    pass, stopped once every search is done. A channel with no such transition is left
    out (its segments stay cut where the input starts to move)."""
    searches: dict[int, list] = {}
    for c, (segs, matched, _) in found.items():
        rows = []
        for i, e in matched.items():
            before, after = segs[i], segs[i + 1]
            if not (before.settled and before.method in (seg.METHOD_END, seg.METHOD_REST)):
                continue
            # up to the output's own transition start (and the run that may begin there)
            lo = before.end + 1
            hi = min(int(e.k_start) + seg.ONSET_RUN, w.n - 1)
            if int(e.k_start) < lo:
                rows.append([before.end, lo, hi, None, before.end])
                continue
            thr = seg.onset_threshold(
                before, after.level - before.level, w.o.settling_band_pct
            )
            if thr is None:
                continue  # too noisy for the band to show where the output leaves it
            rows.append([before.end, lo, hi, seg.DepartureSearch(before.level, thr), None])
        if rows:
            searches[c] = rows
    if not searches:
        return {}
    pending = sum(1 for rows in searches.values() for r in rows if r[4] is None)
    if pending:
        for start, a, _b in w.src.blocks():
            last = start + a.shape[0] - 1
            for c, rows in searches.items():
                for r in rows:
                    if r[4] is not None or r[1] > last or r[2] < start:
                        continue
                    s0, s1 = max(r[1], start), min(r[2], last)
                    r[3].feed(a[s0 - start : s1 - start + 1, c], s0)
                    if r[3].found >= 0:
                        # a sample short of the last one still in the state: that one
                        # may already hold up to a threshold's worth of the response
                        r[4] = r[3].found - 2
                        pending -= 1
                    elif s1 == r[2]:
                        r[4] = r[2]  # still in it at the output's transition start
                        pending -= 1
            if pending <= 0:
                break
    out: dict[int, tuple[int, float]] = {}
    for c, rows in searches.items():
        done = [r for r in rows if r[4] is not None]
        if done:
            r = min(done, key=lambda r: int(r[4]) - int(r[0]))
            out[c] = (max(0, int(r[4]) - int(r[0])), r[3].threshold if r[3] else 0.0)
    return out


def pass_aligned_edges(w: Work, plans: dict[int, list]) -> None:
    """One pass feeding each input transition's own edge finder its search region (from
    the end window of the segment before to the end of the segment after)."""
    spans = {
        c: (np.array([p[1] for p in pl]), np.array([p[2] for p in pl]))
        for c, pl in plans.items()
        if pl
    }
    if not spans:
        return
    for start, a, _b in w.src.blocks():
        last = start + a.shape[0] - 1
        for c, (lo, hi) in spans.items():
            y = a[:, c]
            for r in np.flatnonzero((lo <= last) & (hi >= start)):
                _, rlo, rhi, _, _, finder = plans[c][r]
                s0, s1 = max(rlo, start), min(rhi, last)
                finder.feed(y[s0 - start : s1 - start + 1], s0)


def aligned_channel_levels(w: Work, c: int, ch: Channel, segs: list) -> None:
    """The channel's two state levels: the segments' levels pooled by input state."""
    if w.refs[w.ref_for(c)].multilevel:
        lvls = [s.level for s in segs if math.isfinite(s.level)]
        if len(lvls) >= 2:
            ch.levels = lv.StateLevels(
                min(lvls),
                max(lvls),
                "segment ends (input-aligned, multi-level)",
                note="each transition has its own initial and final level",
            )
            ch.refs = lv.reference_values(ch.levels, w.o.reference_levels_pct)
        return
    g0, m0, _ = seg.pooled_level(segs, 0)
    g1, m1, _ = seg.pooled_level(segs, 1)
    if g0 is None or g1 is None or not abs(g1 - g0) > work.min_change(ch):
        return  # the output does not follow the input's two states: keep the histogram
    (low, m_low), (high, m_high) = sorted(((g0, m0), (g1, m1)))
    method = work.method_text(m_low, m_high, "input-aligned")
    unsettled = [s for s in segs if not s.settled]
    note = None
    if unsettled:
        note = (
            f"{len(unsettled)} of {len(segs)} segments not settled at their ends "
            "(see each transition's initial/final level details)"
        )
    ch.levels = lv.StateLevels(low, high, method, note=note)
    ch.refs = lv.reference_values(ch.levels, w.o.reference_levels_pct)
