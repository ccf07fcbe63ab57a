"""Stage 2c, output-aligned transitions: without a reference input, an output measured
between its own plateaus (a staircase, set-point changes: ``multilevel`` from
:mod:`.state_levels`) is cut into one segment per state at its own transitions, each
segment's level read at its settled end (or extrapolated from its ringing), and each
transition searched again between the two on those levels.

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


def run(w: Work) -> None:
    """Per-transition levels and transitions of multi-level outputs without a reference."""
    if w.o.state_level_method == "minmax":
        return
    todo: dict[int, list] = {}
    cuts: dict[int, list] = {}
    for c, ch in enumerate(w.outs):
        if w.ref_for(c) is not None or not ch.multilevel or ch.kind != "transitions":
            continue
        if ch.edges:
            cuts[c] = list(ch.edges)
            todo[c] = seg.segments_between(cuts[c], w.n, OUTPUT_LEAD)
    if not todo:
        return
    work.collect(w, todo)
    for c, (segs, matched, _unmatched) in aligned_round(w, todo, cuts).items():
        ch = w.outs[c]
        ch.segments, ch.level_mode = segs, "output-aligned"
        ch.edges = [matched.get(i, e) for i, e in enumerate(cuts[c])]
        ch.edge_info = [
            {"match": None, "before": segs[i], "after": segs[i + 1]}
            for i in range(len(cuts[c]))
        ]
