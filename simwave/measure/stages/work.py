"""The working state every stage reads and fills, and the block passes they share.

A measurement is a :class:`Work`: the source (blocks of output and reference), the
options, the record's length and rate, and one :class:`Channel` per output channel
(``w.outs``) and per reference channel (``w.refs``). Each stage (see
:mod:`simwave.measure.stages`) reads some fields and fills others; the fields say which
stage fills them.

The helpers at the end are passes over the record used by more than one stage:
:func:`collect` (segments analysed at their ends), :func:`find_edges` (transitions on
given reference levels) and :func:`decide` (each segment's level and settled test).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from simwave.errors import MeasurementError
from simwave.measure import levels as lv
from simwave.measure import plateaus as pl
from simwave.measure import segments as seg
from simwave.measure import steady_parts as sp
from simwave.measure.options import MIN_WINDOW, MeasureOptions
from simwave.measure.predict import monotone_step
from simwave.measure.source import MeasureSource
from simwave.measure.transient import Edge, EdgeFinder, EdgeRegions

#: Most samples of the steady-state window the sine and tone fits use (its last ones).
FIT_MAX = 1 << 16
#: A level change smaller than this fraction of the channel's range is no transition
#: (input-aligned segments: the output did not follow that input transition; our choice).
NO_CHANGE_FRACTION = 0.05
#: Samples per piece fed to an edge finder looking for only the first few transitions.
LIMITED_PIECE = 4096


@dataclass
class Scan:
    """Sample count, range and sums of one stream (pass 1)."""

    n: int = 0
    lo: np.ndarray | None = None
    hi: np.ndarray | None = None
    sum: np.ndarray | None = None
    sumsq: np.ndarray | None = None


def scan(arrays, label: str, channels: list[str], rate: float, t0: float) -> Scan:
    """Pass 1: sample count, range, sums; stops at the first NaN or infinity."""
    s = Scan()
    for blk in arrays:
        if blk.shape[0] == 0:
            continue
        lo, hi = blk.min(axis=0), blk.max(axis=0)
        if not (np.isfinite(lo).all() and np.isfinite(hi).all()):
            # a NaN makes the minimum NaN, an infinity the minimum or maximum infinite: only
            # then is the block searched for the first one
            r, c = np.argwhere(~np.isfinite(blk))[0]
            i = s.n + int(r)
            raise MeasurementError(
                f"{label}: channel {channels[c]!r}, sample {i} (t = {t0 + i / rate:.6g} s): "
                f"value is {blk[r, c]!r}; measurements need finite samples"
            )
        if s.lo is None:
            s.lo, s.hi = lo, hi
            s.sum, s.sumsq = blk.sum(axis=0), (blk * blk).sum(axis=0)
        else:
            s.lo, s.hi = np.minimum(s.lo, lo), np.maximum(s.hi, hi)
            s.sum += blk.sum(axis=0)
            s.sumsq += (blk * blk).sum(axis=0)
        s.n += blk.shape[0]
    return s


class _FromHistogram:
    """A :class:`Channel` field whose value, unless set before it is first read, is the
    histogram's (:meth:`Channel.defer_levels`); kept as ``_<name>``. Not a dataclass
    field (no annotation): the constructor does not take it."""

    def __set_name__(self, owner: type, name: str) -> None:
        self.name = name

    def __get__(self, ch: Any, owner: type | None = None) -> Any:
        return self if ch is None else ch._get(self.name)

    def __set__(self, ch: Any, value: Any) -> None:
        ch._assign(self.name, value)


@dataclass
class Channel:
    """Working state of one channel (output or reference) through the passes."""

    name: str
    unit: str
    lo: float
    hi: float
    mean: float
    rms: float
    # levels, two_state_fraction and refs: properties below (the histogram's, computed
    # when first read)
    _levels: lv.StateLevels | None = None
    _two_state_fraction: float = 0.0
    _refs: tuple | None = None
    levels = _FromHistogram()  # lv.StateLevels | None
    two_state_fraction = _FromHistogram()  # float
    refs = _FromHistogram()  # tuple (low, mid, high reference levels) | None
    kind: str = "other"
    kind_source: str = "auto"
    finder: EdgeFinder | None = None
    edges: list = field(default_factory=list)
    window: np.ndarray | None = None
    null_reasons: dict = field(default_factory=dict)
    # segment levels: "input-aligned" or "output state intervals" when used, the segments,
    # per-transition level information (input-aligned) and input transitions with no
    # output transition
    level_mode: str | None = None
    segments: list = field(default_factory=list)
    edge_info: list = field(default_factory=list)
    unmatched: list = field(default_factory=list)
    # both state levels established (settled or extrapolated) at the ends of the output's
    # own state intervals: a two-state waveform even when ringing keeps most of its
    # samples away from the levels
    established: bool = False
    # without a reference: a two-level output whose levels neither the histogram nor its
    # state intervals establish, measured transition by transition on the levels of the
    # segments beside each (:mod:`.output_aligned`), each level marked as far as it is known
    own_levels: bool = False
    # without a reference: the plateaus at the record's end touch each other at moving
    # levels (a slow approach or turn still going on when the record ends)
    tail_moving: bool = False
    # input-aligned: the output's response onset delay (samples) the segments were cut with;
    # None when no transition starts from a settled segment (cut where the input moves)
    onset_delay: int | None = None
    # the most of the response to the next transition such a segment's end may hold
    onset_allowance: float = 0.0
    # window summary and plateaus (multi-level transitions); multilevel: its transitions are
    # found between plateaus, each with its own levels
    windows: pl.WindowStats | None = None
    staircase: pl.Staircase | None = None
    multilevel: bool = False
    # span (peak to peak) of noise and hum where the channel is quiet (the first quartile
    # of its window spans)
    disturbance_pp: float = 0.0
    # (reference levels, transitions found on them) by the state-levels stage, on the
    # channel's own reference levels while it read the record for other reasons; the
    # transitions stage uses them when the levels were kept (saving a pass)
    speculated: tuple | None = None
    _seg_starts: np.ndarray | None = None
    # the part of the fit window without a level change (steady_parts.SteadyPart), found
    # once by :func:`steady_part_of` when a sine or tone fit needs it
    fit_part: Any = None
    # the histogram's (levels, two_state_fraction, refs), computed when one of them is
    # first read (:meth:`defer_levels`), and which of them were set before that
    _pending: Any = None
    _set_early: set = field(default_factory=set)

    def defer_levels(self, compute: Any) -> None:
        """Take ``levels``, ``two_state_fraction`` and ``refs`` from ``compute()`` when one
        of them is first read. An output with a reference input has its levels read off
        the input-aligned segments as a rule, and the histogram's two half modes (about a
        quarter of measuring a short record) are then never needed; a value set before
        the first read is kept, the others come from ``compute()`` as if computed first."""
        self._pending = compute
        self._set_early = set()

    def _resolve(self) -> None:
        compute, self._pending = self._pending, None
        for name, value in zip(("levels", "two_state_fraction", "refs"), compute(), strict=True):
            if name not in self._set_early:
                setattr(self, "_" + name, value)

    def _get(self, name: str) -> Any:
        if self._pending is not None and name not in self._set_early:
            self._resolve()
        return getattr(self, "_" + name)

    def _assign(self, name: str, value: Any) -> None:
        setattr(self, "_" + name, value)
        if self._pending is not None:
            self._set_early.add(name)
            if len(self._set_early) == 3:
                self._pending = None  # all three replaced: never needed

    @property
    def constant(self) -> bool:
        return self.hi == self.lo

    @property
    def fit_window(self) -> np.ndarray:
        """The last part of the steady-state window the sine and tone fits use (their cost
        grows with it; ``FIT_MAX`` samples are thousands of cycles of an audio tone)."""
        return self.window if self.window.size <= FIT_MAX else self.window[-FIT_MAX:]


class Work:
    """One measurement in progress: what the stages share.

    Filled by :func:`simwave.measure.stages.record.open_record` (``n``, ``outs``, ``refs``,
    ``w_start``), then by each stage in turn (see the stage modules).
    """

    def __init__(self, src: MeasureSource, system: Any, o: MeasureOptions) -> None:
        self.src, self.system, self.o = src, system, o
        self.rate, self.t0 = src.rate, src.t0
        self.notes: list[str] = []
        self.rest_sample = False  # one sample of 0 put before the record (at-rest convention)
        # ... without a reference, because the output leaves 0 from its first sample: the
        # segment before its first transition is the departure from rest (level 0)
        self.rest_output = False
        self.n = 0
        self.outs: list[Channel] = []
        self.refs: list[Channel] = []
        self.w_start = 0  # first sample of the steady-state window
        # state levels stage: the level histogram of every channel (outputs, then references)
        self.hist: lv.LevelHistogram | None = None
        # channels whose histogram the state-levels pass left for when it is read
        self.hist_later: set[int] = set()
        # transition metrics stage: per output channel its transitions' regions, the output
        # just before the last input transition (index and value) and the sample values read
        # at the instants the transitions need, per channel (outputs, then references)
        self.regions: dict[int, list[EdgeRegions]] = {}
        self.pre_step_index: dict[int, int] = {}
        self.pre_step_value: dict[int, float] = {}
        self.values: dict[int, dict[int, float]] = {}
        self.pred: Any = None
        # per output channel: (its part of the result, its null reasons), filled by the
        # transition metrics stage (kind "transitions" only) and the steady-state stage
        self.transient: dict[int, tuple[dict, dict]] = {}
        self.steady: dict[int, tuple[dict, dict]] = {}

    def t(self, idx: float) -> float:
        """Absolute time (s) of a fractional sample index."""
        return self.t0 + idx / self.rate

    def ref_for(self, c: int) -> int | None:
        """Index into ``refs`` of the reference channel of output channel ``c``, if any."""
        if not self.refs:
            return None
        return 0 if len(self.refs) == 1 else c

    def window_t(self, m: int) -> np.ndarray:
        """Times (s from t0) of the last ``m`` samples: the window, or its last part for
        fits, ends at the record's last sample."""
        return (self.n - m + np.arange(m, dtype=np.float64)) / self.rate


def steady_part_of(w: Work, ch: Channel):
    """The part of ``ch``'s fit window without a level change, found once
    (:func:`simwave.measure.steady_parts.steady_part`; the part after a change is used only
    when the system, and so the time its output needs to answer the change, is known)."""
    if ch.fit_part is None:
        y = ch.fit_window
        o = w.o
        given = list(o.tones_hz) if o.tones_hz is not None else (
            [o.sine_hz] if o.sine_hz is not None else None)
        ch.fit_part = sp.steady_part(y, w.window_t(y.size), w.rate, MIN_WINDOW,
                                     sp.settle_samples(w.system, w.rate), given)
    return ch.fit_part


# ---------------------------------------------------------------------------- shared passes
def columns(a: np.ndarray, b: np.ndarray | None) -> list[np.ndarray]:
    """A block's channels as 1-D columns, outputs then references (the order of
    ``w.outs + w.refs``), without joining the two streams' blocks into one (a copy)."""
    cols = [a[:, i] for i in range(a.shape[1])]
    if b is not None:
        cols += [b[:, j] for j in range(b.shape[1])]
    return cols


def collect(w: Work, segs_by_c: dict[int, list]) -> None:
    """One pass: each output channel's segments analysed at their ends (the pass stops
    early once every list is done)."""
    lasting = w.src.lasting_output_arrays()
    cols = {
        c: seg.SegmentCollector(ss, w.o.segment_end_fraction, w.o.max_window_samples, lasting)
        for c, ss in segs_by_c.items()
        if ss
    }
    if not cols:
        return
    for start, a, _b in w.src.blocks():
        for c, col in cols.items():
            col.feed(a[:, c], start)
        if all(col.done for col in cols.values()):
            break
    for col in cols.values():
        col.finish()


def find_edges(
    w: Work,
    refs_by_c: dict[int, tuple],
    limit: int | None = None,
    also: dict[int, EdgeFinder] | None = None,
) -> dict[int, list[Edge]]:
    """One pass: transitions of output channels with the given reference levels (the
    first ``limit`` of each; the pass stops once every channel has them). Without a limit,
    the finders in ``also`` (by channel) are fed the same blocks."""
    finders = {c: EdgeFinder(*r) for c, r in refs_by_c.items()}
    extra = list(also.items()) if also and limit is None else []
    # with a limit, a block is fed in pieces, so that a channel that crosses its levels
    # thousands of times in one block (noise) stops at the limit (the finder carries its
    # state between pieces: the same transitions in any split)
    if finders:
        for start, a, _b in w.src.blocks():
            piece = a.shape[0] if limit is None else LIMITED_PIECE
            for c, f in finders.items():
                for s0 in range(0, a.shape[0], piece):
                    if limit is not None and len(f.edges) >= limit:
                        break
                    f.feed(a[s0 : s0 + piece, c], start + s0)
            for c, f in extra:
                f.feed(a[:, c], start)
            if limit is not None and all(len(f.edges) >= limit for f in finders.values()):
                break
    return {c: f.edges[:limit] for c, f in finders.items()}


def min_change(ch: Channel) -> float:
    """Smallest level change that counts as a transition of this channel."""
    return NO_CHANGE_FRACTION * (ch.hi - ch.lo)


def decide(w: Work, segs: list, ch: Channel, strict: bool = True) -> None:
    """Each segment's level, its settling judged against the transitions beside it."""
    meds = [s.median for s in segs]
    floor = min_change(ch)
    for i, s in enumerate(segs):
        amps = [abs(meds[k] - meds[i]) for k in (i - 1, i + 1) if 0 <= k < len(segs)]
        # a still-approaching end moves away from the level before (the one after,
        # for the first segment)
        other = i - 1 if i > 0 else i + 1
        away = int(np.sign(meds[i] - meds[other])) if 0 <= other < len(segs) else 0
        s.decide(max(amps + [floor]), w.o.settling_band_pct, away, strict=strict)
        first = w.rest_sample and s.start == 0
        if first and (s.length < seg.MIN_END_WINDOW or w.rest_output):
            # the segment before a step at the first sample: only the sample of 0 put
            # before the record (and the output's first answer-free samples; without a
            # reference, the output's departure from rest); its level is the at-rest
            # convention's 0
            s.level, s.method, s.settled, s.note = 0.0, seg.METHOD_REST, True, None
    if not w.refs and strict:
        # (provisional levels, strict=False, are measured again: not judged so closely)
        for i in range(1, len(segs)):
            held_too_briefly(w, segs, i, ch.tail_moving and i == len(segs) - 1)
    approaching = [s for s in segs if s.method == seg.METHOD_APPROACHING]
    if approaching and not (w.refs and monotone_step(w.system)):
        for s in approaching:
            not_a_bound(s, with_input=bool(w.refs))


#: Without a reference input, a segment after a transition counts as settled only when the
#: output has stayed within the band around its end level for at least this many times the
#: stretch of transition left out before the segment (about one to one and a half times
#: the transition's 10-90 % time, with the leads the cuts use): an output at a slow peak
#: of its ringing, or nearly at the end of a slow approach, when the record ends (or the
#: next transition comes) looks flat for a moment (our choice; a settled state is held far
#: longer).
LAST_DWELL_GAPS = 1.5


#: How :func:`not_a_bound`'s notes begin (the transition's reasons name the case from it).
STILL_MOVING = "still moving on at the end of the segment without turning back"


def not_a_bound(s: seg.Segment, with_input: bool = False) -> None:
    """A segment end still moving on without turning back gives no bound on its level
    unless the system is known not to ring: a first-order lag would stop short of where
    it goes, but an underdamped output between reaching its final level and its first
    peak moves the same way and has already passed it; neither the output nor the input
    tells them apart (the input's step says when, not how far). The level is not
    established (its last value stays in the level detail). With the input and a system
    whose step response is monotone (:func:`simwave.measure.predict.monotone_step`) the
    last value is kept as a bound."""
    s.method = seg.METHOD_UNSETTLED
    s.note = (
        f"{STILL_MOVING} (last value {s.end_value:.6g}): "
        f"{'' if with_input else 'without the input, '}a lag that stops farther on cannot be "
        "told from ringing that has already passed its final level, so the level is not known"
    )
    if with_input:
        s.note += (" (given a system whose step response cannot turn back, such as one with "
                   "every pole real and no zeros, the last value would be a bound)")


def held_too_briefly(w: Work, segs: list, i: int, moving: bool = False) -> None:
    """Segment ``i``, judged settled at its end, has not been in the band for long enough
    (``LAST_DWELL_GAPS``) to tell a settled level from a turn of slow ringing or the end of
    a slow approach: it is not settled; its level is extrapolated from its ringing, taken
    as still approaching (the last value), or not established."""
    s, before = segs[i], segs[i - 1]
    if s.method != seg.METHOD_END or not s.quarters:
        return
    gap = s.start - before.end - 1
    amp = abs(s.level - before.level)
    within = w.o.settling_band_pct / 100.0 * amp + s.allowance + 4.0 * s.scatter
    held = s.dwell(within)
    away = int(np.sign(s.median - before.level))
    q = np.asarray(s.quarters)
    # the end window's quarters still move on the way the transition went, by more than
    # the band: noise may have let them pass the settled test, the trend does not
    trend = bool(away) and bool(np.all(away * np.diff(q) > 0)) and (
        away * (q[-1] - q[0]) > w.o.settling_band_pct / 100.0 * amp
    )
    short = held < LAST_DWELL_GAPS * gap
    if not (short or trend or moving):
        return
    s.settled = False
    where = "the record ends" if s.end >= w.n - 1 else "the segment ends"
    if short:
        why = (
            f"{where} {held} samples after the output came within the band around "
            f"its end level, less than {LAST_DWELL_GAPS:g} times the {gap} samples of the "
            "transition before it: too short to tell a settled level from a slow turn or "
            "the end of a slow approach"
        )
    elif trend:
        why = (
            "the medians of its end window's quarters still move on the way the transition "
            "went, by more than the band: the noise let it pass the settled test, its trend "
            "does not"
        )
    else:
        why = (
            "the window plateaus at the end of the record touch each other at levels still "
            "moving: a slow approach or turn goes on when the record ends"
        )
    if s.extrapolated is not None:
        s.level, s.method = s.extrapolated, seg.METHOD_EXTRAPOLATED
        s.note = f"{why}; level extrapolated from the turning points of its ringing"
    elif away and s.turning_points == 0 and np.all(away * np.diff(q) >= 0):
        s.level, s.method = s.end_value, seg.METHOD_APPROACHING
        s.note = f"{why}; still approaching: the level is its last value (a bound)"
    else:
        s.level, s.method = s.median, seg.METHOD_UNSETTLED
        s.note = why


def method_text(m_low: str | None, m_high: str | None, basis: str) -> str:
    """How a pair of state levels was found, e.g. "segment end (input-aligned)"."""
    if m_low == m_high:
        return f"{m_low} ({basis})"
    return f"low: {m_low}, high: {m_high} ({basis})"
