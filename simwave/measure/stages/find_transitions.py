"""Stage 2, transitions: every transition of each channel of kind "transitions".

In: a :class:`~simwave.measure.stages.work.Work` after :mod:`.classify` (each channel's
``kind``, ``refs``, and for a staircase its ``staircase`` plateaus). One pass over the
record: a two-state channel's transitions are found by an IEEE Std 181 edge finder on its
reference levels; a multi-level channel's in each gap between plateaus, on that gap's own
levels. An output whose transitions the state-levels stage already found on these
reference levels (``speculated``) is not read again; with none left, there is no pass.
Out: each channel's ``edges`` (:class:`~simwave.measure.transient.Edge`). With a
reference input, the output's transitions are found again, one per input transition, by
:mod:`.input_aligned` (next).
"""

from __future__ import annotations

import numpy as np

from simwave.measure import plateaus as pl
from simwave.measure.stages.work import Channel, Work, columns
from simwave.measure.transient import EdgeFinder


def run(w: Work) -> None:
    """One pass: the transitions of every channel of kind "transitions".

    An output whose reference input has transitions is found again, one transition per
    input transition, by :mod:`.input_aligned`, which replaces these: it is left out of
    the pass (its histogram levels, which the pass would need, are then never computed,
    see :meth:`~simwave.measure.stages.work.Channel.defer_levels`), and found in a second
    pass only when its input turns out to have no transition.
    """
    chans = w.outs + w.refs
    later = [c for c, ch in enumerate(w.outs) if _redone_per_input(w, c, ch)]
    _find(w, chans, [i for i, ch in enumerate(chans) if i not in later and _active(ch)])
    _find(w, chans, [c for c in later if not w.refs[w.ref_for(c)].edges and _active(chans[c])])


def _active(ch: Channel) -> bool:
    return ch.kind == "transitions" and ch.refs is not None


def _redone_per_input(w: Work, c: int, ch: Channel) -> bool:
    """Output ``c`` is measured per input transition by :mod:`.input_aligned` if its input
    has transitions (the same test as that stage's, less the input's transitions, which
    this stage finds)."""
    ri = w.ref_for(c)
    return (w.o.state_level_method != "minmax" and ri is not None
            and ch.kind == "transitions" and not ch.constant)


def _find(w: Work, chans: list[Channel], active: list[int]) -> None:
    """The transitions of channels ``active`` (indices into ``chans``), in one pass."""
    for i in list(active):
        ch = chans[i]
        if not ch.multilevel and ch.speculated is not None and ch.speculated[0] == ch.refs:
            # found by the state-levels stage on these very reference levels
            ch.edges = list(ch.speculated[1])
            active.remove(i)
    if not active:
        return
    gaps: dict[int, list] = {}
    for i in active:
        if chans[i].multilevel:
            gaps[i] = pl.gap_finders(chans[i].staircase, w.o.reference_levels_pct)
        else:
            chans[i].finder = EdgeFinder(*chans[i].refs)
    spans = {
        i: (np.array([g[0] for g in gs]), np.array([g[1] for g in gs]))
        for i, gs in gaps.items()
    }
    for start, a, b in w.src.blocks():
        cols = columns(a, b)
        last = start + a.shape[0] - 1
        for i in active:
            if i in gaps:
                lo, hi = spans[i]
                for g in np.flatnonzero((lo <= last) & (hi >= start)):
                    glo, ghi, finder = gaps[i][g][:3]
                    s0, s1 = max(glo, start), min(ghi, last)
                    finder.feed(cols[i][s0 - start : s1 - start + 1], s0)
            else:
                chans[i].finder.feed(cols[i], start)
    for i in active:
        if i in gaps:
            chans[i].edges = pl.edges_from_gaps(gaps[i])
        else:
            chans[i].edges = chans[i].finder.edges
