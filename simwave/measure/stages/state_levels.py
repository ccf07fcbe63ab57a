"""Stage 1, state levels: the two state levels of every channel, and the plateaus of a
staircase.

In: a :class:`~simwave.measure.stages.work.Work` after the record scan (each channel's
range). One pass over the record fills, per channel (outputs and references):
``levels`` (IEEE Std 181 histogram, or min/max), ``refs`` (reference levels),
``two_state_fraction``, ``window`` (the steady-state window's samples), ``windows``
(window summary) and ``disturbance_pp``; a reference with more than two levels (or hum
that keeps its samples off them) gets ``staircase`` and ``multilevel``. Then, for an
output with no reference input, up to four more passes check the histogram's levels
against the ends of the output's own state intervals and replace them where ringing fools
the histogram (``levels``, ``segments``, ``level_mode``, ``established``); the full round
also finds the transitions on the histogram's reference levels (``speculated``), which
the transitions stage takes instead of a pass of its own when those levels are kept. An
output of more than two settled levels (or of two that neither establishes) gets
``staircase`` and ``multilevel`` from its own plateaus, with no pass.

Out: ``w.hist`` and the channel fields above. Next: :mod:`.classify`.
"""

from __future__ import annotations

import functools

import numpy as np

from simwave.measure import levels as lv
from simwave.measure import plateaus as pl
from simwave.measure import segments as seg
from simwave.measure.stages import output_aligned, work
from simwave.measure.stages.work import Channel, Work
from simwave.measure.transient import EdgeFinder

#: A waveform counts as two-state when at least this fraction of its samples lies
#: within 10 % of the amplitude of one of its state levels (our choice; a sine has
#: about 41 %, a clean pulse train nearly 100 %).
TWO_STATE_FRACTION = 0.5
#: Without a reference input, the first round of output state intervals looks at this
#: many (the second, on the levels they give, at all of them).
FIRST_ROUND_SEGMENTS = 64


def run(w: Work) -> None:
    """The state levels of every channel (see the module's docstring)."""
    pass_levels(w)
    plateaus: dict = {}  # per output channel, found once for both calls
    output_staircases(w, two_levels=False, found=plateaus)
    levels_from_output_intervals(w)
    output_staircases(w, two_levels=True, found=plateaus)
    output_aligned.own_intervals(w)


def pass_levels(w: Work) -> None:
    """Pass 2: level histograms and the steady-state window."""
    chans = w.outs + w.refs
    hist = lv.LevelHistogram(np.array([c.lo for c in chans]), np.array([c.hi for c in chans]))
    parts: list[list[np.ndarray]] = [[] for _ in chans]
    n_out = len(w.outs)
    w.hist_later = histogram_later(w)
    now = [c for c in range(len(chans)) if c not in w.hist_later]
    wsize = pl.window_size(w.n, w.rate)
    for ch in chans:
        ch.windows = pl.WindowStats(wsize)
    for start, a, b in w.src.blocks():
        cols = work.columns(a, b)
        hist.add_columns(cols, now)
        for ch, col in zip(chans, cols, strict=True):
            ch.windows.feed(col)
        end = start + a.shape[0]
        if end > w.w_start:
            lo = max(w.w_start - start, 0)
            for c in range(len(chans)):
                parts[c].append(cols[c][lo:].copy())
    for c, ch in enumerate(chans):
        ch.window = np.concatenate(parts[c]) if parts[c] else np.empty(0)
        if ch.constant:
            ch.null_reasons["state_levels"] = f"constant channel (every sample is {ch.lo:g})"
            continue
        ch.defer_levels(functools.partial(histogram_levels, w, hist, c))
        ch.disturbance_pp = pl.quiet_span(ch.windows)
        if c >= n_out and w.o.state_level_method != "minmax":
            staircase(w, ch)
    w.hist = hist


def histogram_later(w: Work) -> set[int]:
    """The output channels whose level histogram the state-levels pass leaves for later:
    those beside a reference input. They are measured on the input's transitions as a
    rule, and their histogram is then never read; it is filled, in a pass of its own, only
    if their levels are (:func:`histogram_levels`). None with the min/max method: the
    transitions stage then reads every output's levels (no input-aligned stage), and
    leaving them for later would only add that pass."""
    if w.o.state_level_method == "minmax":
        return set()
    return {c for c in range(len(w.outs)) if w.ref_for(c) is not None}


def histogram_levels(w: Work, hist: lv.LevelHistogram, c: int) -> tuple:
    """Channel ``c``'s state levels from ``hist``, the fraction of its samples near them and
    its reference levels (computed when first needed: :meth:`Channel.defer_levels`). A
    histogram left for later (``w.hist_later``) is filled first, from the same blocks in
    the same order as the state-levels pass would have (the same counts and sums)."""
    if c in w.hist_later:
        w.hist_later.discard(c)
        for _start, a, b in w.src.blocks():
            hist.add_columns(work.columns(a, b), [c])
    levels = lv.state_levels(hist, c, w.o.state_level_method)
    half = 0.1 * levels.amplitude
    return (levels, hist.fraction_near(c, (levels.low, levels.high), half),
            lv.reference_values(levels, w.o.reference_levels_pct))


def staircase(w: Work, ch: Channel) -> None:
    """A reference of more than two levels, or of two with hum or noise that keeps its
    samples away from them, is measured transition by transition between its plateaus."""
    sc = pl.find_plateaus(ch.windows, w.n, rest_first=w.rest_sample)
    ch.staircase = sc
    if not sc.usable():
        return
    if ch.two_state_fraction >= TWO_STATE_FRACTION and sc.n_levels <= 2:
        return  # two clean states: the histogram's levels serve every transition
    set_multilevel(w, ch, sc)


def output_staircases(w: Work, two_levels: bool, found: dict | None = None) -> None:
    """Without a reference input, an output of more than two settled levels (a staircase,
    set-point changes; before the output's state intervals are read, which only serve
    two levels), or (``two_levels``, after them) of two that neither the histogram nor its
    own state intervals establish (ringing that keeps its samples off them), is measured
    transition by transition between its own plateaus: the transitions come from the
    output itself (:mod:`.output_aligned` then reads each one's levels from the settled
    ends beside it). ``found``: the plateaus of each channel, kept between the two calls."""
    o = w.o
    if o.state_level_method == "minmax" or o.signal_kind not in ("auto", "transitions"):
        return
    if o.signal_kind == "auto" and (o.sine_hz is not None or o.tones_hz is not None):
        return
    for c, ch in enumerate(w.outs):
        if w.ref_for(c) is not None or ch.constant or ch.levels is None or ch.multilevel:
            continue
        sc = (found or {}).get(c)
        if sc is None:
            sc = pl.held_plateaus(pl.find_plateaus(ch.windows, w.n, rest_first=w.rest_sample))
            sc = output_aligned.own_plateaus(w, ch, sc, ch.windows)  # starts or ends moving
            if found is not None:
                found[c] = sc
        if not sc.usable(pl.MIN_COVER_OUTPUT):
            continue
        two_state = ch.established or ch.two_state_fraction >= TWO_STATE_FRACTION
        if (not two_levels and sc.n_levels > 2) or (
            two_levels and sc.n_levels == 2 and not two_state
        ):
            ch.staircase = sc
            # the two-level reading of the output's intervals does not apply
            ch.segments, ch.level_mode, ch.established = [], None, False
            set_multilevel(w, ch, sc)


def set_multilevel(w: Work, ch: Channel, sc: pl.Staircase) -> None:
    """Mark a channel as measured between its plateaus, with their extremes as levels."""
    ch.multilevel = True
    lo = min(p.level for p in sc.plateaus)
    hi = max(p.level for p in sc.plateaus)
    ch.levels = lv.StateLevels(
        lo,
        hi,
        "window plateaus (multi-level)",
        note=(
            f"{sc.n_levels} levels: each transition has its own initial and final level "
            "(the plateaus before and after it)"
        ),
    )
    ch.refs = lv.reference_values(ch.levels, w.o.reference_levels_pct)


def levels_from_output_intervals(w: Work) -> None:
    """Without a reference input: the state levels from the ends of the output's own
    state intervals, to check the histogram against (and replace it where ringing fools
    it). Transitions are found first with wide hysteresis (25/75 % of the histogram or
    min/max levels), the intervals' ends give levels, the transitions are found again
    on those, and the intervals' ends measured again."""
    o = w.o
    if o.state_level_method == "minmax":
        return
    forced_other = o.signal_kind not in ("auto", "transitions") or (
        o.signal_kind == "auto" and (o.sine_hz is not None or o.tones_hz is not None)
    )
    if forced_other:
        return
    cands = [
        c
        for c, ch in enumerate(w.outs)
        if w.ref_for(c) is None and ch.levels is not None and not ch.constant
        and not ch.multilevel
    ]
    if not cands:
        return
    refs = {c: lv.reference_values(w.outs[c].levels, (25.0, 50.0, 75.0)) for c in cands}
    found: dict[int, tuple] = {}
    for rnd in range(2):
        # the second round reads the whole record: the transitions on the channel's
        # current (histogram) reference levels are found in the same pass, for the
        # transitions stage to use if these levels are kept
        also = {c: EdgeFinder(*w.outs[c].refs) for c in refs} if rnd else None
        edges = work.find_edges(w, refs, FIRST_ROUND_SEGMENTS if rnd == 0 else None, also)
        for c, f in (also or {}).items():
            w.outs[c].speculated = (f.low, f.mid, f.high), f.edges
        # end each segment where a linear edge would leave the level: a quarter of
        # the 25-75 % time before the wide provisional transitions, an eighth of the
        # 10-90 % time before the final ones
        lead = 0.25 if rnd == 0 else 0.125
        segs = {c: seg.segments_between(e, w.n, lead) for c, e in edges.items() if e}
        if rnd == 0:
            # the first segments are enough for provisional levels, and tell a two-state
            # waveform from a sine (whose segments never settle) at little cost
            segs = {c: ss[:FIRST_ROUND_SEGMENTS] for c, ss in segs.items()}
        work.collect(w, segs)
        found = {}
        for c, ss in segs.items():
            # the first round's levels are provisional (the segments are cut on the
            # histogram's levels): a turning-point end is not refused there
            work.decide(w, ss, w.outs[c], strict=rnd > 0)
            low, m_low, _ = seg.pooled_level(ss, 0)
            high, m_high, _ = seg.pooled_level(ss, 1)
            if low is None or high is None or not high - low > work.min_change(w.outs[c]):
                continue
            if rnd == 0 and not established(m_low, m_high):
                continue  # the ends of the segments establish no state
            found[c] = (low, high, m_low, m_high, ss)
        if not found:
            return
        refs = {
            c: lv.reference_values(lv.StateLevels(f[0], f[1], ""), o.reference_levels_pct)
            for c, f in found.items()
        }
    for c, (low, high, m_low, m_high, ss) in found.items():
        choose_interval_levels(w, c, low, high, m_low, m_high, ss)


def choose_interval_levels(w: Work, c, low, high, m_low, m_high, ss) -> None:
    ch, o = w.outs[c], w.o
    hist = ch.levels
    est = established(m_low, m_high)
    if not est and o.state_level_method != "segment":
        return  # the intervals' ends are no better than the histogram
    ch.established = est
    amp = high - low
    tol = 0.5 * o.settling_band_pct / 100.0 * amp
    if (
        o.state_level_method == "histogram"
        and hist.method == "histogram"
        and abs(hist.low - low) <= tol
        and abs(hist.high - high) <= tol
    ):
        ch.segments, ch.level_mode = ss, "output state intervals (check)"
        return  # the histogram agrees with the settled intervals: keep the standard's
    if o.state_level_method == "segment":
        why = "state-level method 'segment' asked for"
    elif hist.method == "histogram":
        off = max(abs(hist.low - low), abs(hist.high - high))
        why = (
            f"the histogram modes (low {hist.low:.6g}, high {hist.high:.6g}) differ from "
            f"the state intervals' ends by {100.0 * off / amp:.3g} % of the amplitude "
            "(a histogram is fooled e.g. by the turning points of ringing in a short record)"
        )
    else:
        why = (hist.note or "the histogram gave no levels").replace("; min/max used", "")
    method = work.method_text(m_low, m_high, "output state intervals")
    ch.levels = lv.StateLevels(low, high, method, note=why)
    ch.refs = lv.reference_values(ch.levels, o.reference_levels_pct)
    ch.two_state_fraction = w.hist.fraction_near(c, (low, high), 0.1 * amp)
    ch.segments, ch.level_mode = ss, "output state intervals"


def established(*methods: str | None) -> bool:
    """Levels found settled or extrapolated from ringing: the record establishes them."""
    return all(m in (seg.METHOD_END, seg.METHOD_EXTRAPOLATED, seg.METHOD_REST) for m in methods)
