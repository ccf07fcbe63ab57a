"""Transitions, aberrations and settling of two-state waveforms (IEEE Std 181-2011).

Everything here works on blocks of samples with a small carried state, so a
record of any length is measured in constant memory apart from the list of
transitions found.

Definitions used (IEEE Std 181-2011 terms; the aberration regions are ours, as
the standard leaves their extent to the user):

* A transition is found with hysteresis between the low and high reference
  levels: a rising transition is the first sample at or above the high
  reference level after the waveform was last at or below the low reference
  level (and mirrored for falling). Noise that wiggles around one reference
  level therefore cannot produce a false transition.
* Its start is the last crossing of the near reference level before that sample,
  its 50 % instant the last crossing of the mid reference level, its end the
  first crossing of the far reference level; each crossing instant is linearly
  interpolated between the two samples around it. Transition duration (rise or
  fall time) = end - start.
* Pre-transition aberration region: from one transition duration (at least 3
  samples) before the start, or from the matched input transition's start when
  that is earlier, to the start; never before the previous transition's end.
  Preshoot = largest excursion beyond the initial state level there.
* Post-transition aberration region: from the end of the transition to the
  start of the next transition's pre-transition region (or the end of the
  record); with a reference input, to the end of the transition's segment, where
  the output starts to answer the next input transition
  (:mod:`simwave.measure.segments`). Overshoot = largest excursion beyond the
  final state level there; undershoot = largest excursion back short of the final
  state level after the waveform first reached it. Both in percent of the waveform
  amplitude.
* Settling time: from the time origin (the matched input transition's 50 %
  instant, else this transition's start) to the last instant the waveform is
  outside the band final level +/- band % of amplitude, searched from the start
  of the transition to the end of its post-transition region. It has settled when
  the waveform remains in the band from there to the region's end and that part is
  settled (its final level read from a flat segment end) or holds a whole swing of
  ringing that converges (the swings after it are smaller still).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np


@dataclass
class Edge:
    """A transition found by :class:`EdgeFinder` (indices are global sample indices).

    ``k_start`` is the last sample at or beyond the near reference level, ``k_mid`` the
    last sample on the near side of the mid reference level, ``j`` the first sample at or
    beyond the far reference level. The crossings lie between ``k`` and ``k + 1``
    (``j - 1`` and ``j`` for the far level).
    """

    direction: int  # +1 rising, -1 falling
    k_start: int
    k_mid: int
    j: int
    # crossing instants in (fractional) sample indices, filled from looked-up values
    start: float = math.nan
    mid: float = math.nan
    end: float = math.nan
    # this transition's own reference levels (low, mid, high) when its state levels are
    # its own (input-aligned segments); None: the channel's
    refs: tuple | None = None
    # the levels before and after it when it has its own (a multi-level record), else None
    initial_level: float | None = None
    final_level: float | None = None

    @property
    def name(self) -> str:
        return "rising" if self.direction > 0 else "falling"

    def needed_indices(self) -> list[int]:
        return [self.k_start, self.k_start + 1, self.k_mid, self.k_mid + 1, self.j - 1, self.j]

    def set_instants(self, values: dict[int, float], refs: tuple[float, float, float]) -> None:
        low, mid, high = self.refs if self.refs is not None else refs
        near, far = (low, high) if self.direction > 0 else (high, low)
        self.start = _cross(values, self.k_start, near)
        self.mid = _cross(values, self.k_mid, mid)
        self.end = _cross(values, self.j - 1, far)


def _cross(values: dict[int, float], k: int, level: float) -> float:
    """Instant (fractional index) where the line through samples k, k+1 meets ``level``."""
    y0, y1 = values[k], values[k + 1]
    if y1 == y0:
        return float(k)
    frac = (level - y0) / (y1 - y0)
    return k + min(max(frac, 0.0), 1.0)


class EdgeFinder:
    """Find transitions of one channel with hysteresis between the low and high reference levels.

    Feed blocks in order with :meth:`feed`; the transitions are in :attr:`edges`.

    References
    ----------
    IEEE Std 181-2011, clause 5.3 (reference levels, reference level instants) and the
    state boundaries of clause 3; hysteresis between the low and high reference levels is
    our choice, so that noise crossing one level repeatedly is not a transition.
    """

    def __init__(
        self, low: float, mid: float, high: float, seed_state: int = -1, seed_index: int = -1
    ) -> None:
        self.low, self.mid, self.high = low, mid, high
        # index of the last sample at/below low or at/above high, and that state (0 low,
        # 1 high, -1 not yet known); a seed says which state the waveform is known to be in
        # at ``seed_index`` (the settled level before an input transition)
        self.last_event = seed_index if seed_state >= 0 else -1
        self.last_state = seed_state
        self.last_below_mid = seed_index if seed_state == 0 else -1
        self.last_above_mid = seed_index if seed_state == 1 else -1
        self.edges: list[Edge] = []

    def feed(self, y: np.ndarray, start: int) -> None:
        n = y.size
        if n == 0:
            return
        # events: samples at or above the high reference level (state 1), else at or below
        # the low one (state 0); a transition is an event whose state differs from the
        # event before it. Found from the runs of each state (few, even where nearly every
        # sample is an event), not sample by sample.
        above = y >= self.high
        below = y <= self.low
        below &= ~above
        many = 2 * max(n // RUNS_PER_SAMPLE, 1)
        if n >= RUNS_MIN_BLOCK:
            ca = above[1:] != above[:-1]
            cb = below[1:] != below[:-1]
        if n < RUNS_MIN_BLOCK or np.count_nonzero(ca) > many or np.count_nonzero(cb) > many:
            # short runs (noise about a reference level): event by event
            first = last = np.flatnonzero(below | above)
            states = above[first].astype(np.int8)
        else:
            a_first, a_last = _runs(above, ca)
            b_first, b_last = _runs(below, cb)
            first = np.concatenate((a_first, b_first))
            order = np.argsort(first, kind="stable")
            first = first[order]
            last = np.concatenate((a_last, b_last))[order]
            states = np.concatenate(
                (np.ones(a_first.size, np.int8), np.zeros(b_first.size, np.int8))
            )[order]
        if first.size:
            changes = np.flatnonzero(states[1:] != states[:-1]) + 1
            if self.last_state >= 0 and states[0] != self.last_state:
                changes = np.concatenate(([0], changes))
            for c in changes.tolist():
                local = int(first[c])
                direction = 1 if states[c] == 1 else -1
                prev_idx = self.last_event if c == 0 else start + int(last[c - 1])
                k_mid = self._last_near_mid(y, start, prev_idx, local, direction)
                self.edges.append(Edge(direction, int(prev_idx), k_mid, start + local))
            self.last_state = int(states[-1])
            self.last_event = start + int(last[-1])
        # the last samples below and above the mid reference level, carried to the next block
        # (the block's last sample is one of them unless it lies on the level)
        if y[-1] < self.mid:
            self.last_below_mid = start + n - 1
        else:
            below_mid = y < self.mid
            if below_mid.any():
                self.last_below_mid = start + n - 1 - int(np.argmax(below_mid[::-1]))
        if y[-1] > self.mid:
            self.last_above_mid = start + n - 1
        else:
            above_mid = y > self.mid
            if above_mid.any():
                self.last_above_mid = start + n - 1 - int(np.argmax(above_mid[::-1]))

    def _last_near_mid(self, y: np.ndarray, start: int, prev_idx: int, local: int,
                       direction: int) -> int:
        """The last sample before ``local`` on the near side of the mid reference level
        (below it for a rising transition): searched back to the previous event, which is
        on the near side, else taken from what earlier blocks carried."""
        lo = max(prev_idx - start, 0)
        part = y[lo:local]
        near = part < self.mid if direction > 0 else part > self.mid
        if near.any():
            return start + lo + part.size - 1 - int(np.argmax(near[::-1]))
        return self.last_below_mid if direction > 0 else self.last_above_mid


#: Above this many runs of one state per this many samples a block's events are taken one by
#: one rather than run by run (cheaper then; the same transitions either way).
RUNS_PER_SAMPLE = 32
#: ... and a block shorter than this (a short record: the runs' bookkeeping costs more
#: than it saves) too.
RUNS_MIN_BLOCK = 4096


#: Samples per chunk of the settling search's running maximum (:meth:`EdgeRegions._track_turn`
#: on long stretches).
TURN_CHUNK = 256


def _signed(s: int, y: np.ndarray) -> np.ndarray:
    """``s * y`` for ``s`` = +1 or -1 (y itself, or its negation: the same values)."""
    return y if s > 0 else np.negative(y)


def _runs(mask: np.ndarray, changed: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """First and last local index of every run of True in ``mask`` (non-empty;
    ``changed``: ``mask[1:] != mask[:-1]``)."""
    change = np.flatnonzero(changed) + 1
    into = mask[change]
    first = change[into]
    last = change[~into] - 1
    if mask[0]:
        first = np.concatenate(([0], first))
    if mask[-1]:
        last = np.concatenate((last, [mask.size - 1]))
    return first, last


@dataclass
class EdgeRegions:
    """Running reductions over one output transition's aberration and settling regions.

    Values are kept in "signed" form ``s * y`` (``s`` = +1 rising, -1 falling) so that
    the same code finds the overshoot of rising and falling transitions.
    """

    edge: Edge
    pre_start: int
    post_end: int
    initial: float
    final: float
    band_abs: float
    s: int = field(init=False)
    pre_min: float = math.inf
    peak_idx: int = -1
    peak_val: float = -math.inf
    peak_left: float | None = None
    peak_right: float | None = None
    reached_idx: int = -1
    after_reach_min: float = math.inf
    last_out: int = -1
    last_out_val: float = math.nan
    last_out_next: float | None = None
    tail_start: int = 0
    tail_dev: float = 0.0
    # since the last sample outside the band: the side it came in from (-1 below, +1 above),
    # its running extreme in that direction and the largest turn back from it
    entry_side: int = 0
    run_extreme: float = math.nan
    turn: float = 0.0

    def __post_init__(self) -> None:
        self.s = self.edge.direction
        length = self.post_end - self.edge.j + 1
        self.tail_start = self.post_end - max(1, length // 10) + 1

    def update(self, y: np.ndarray, start: int, prev: float | None) -> None:
        """Take in one block ``y`` starting at global index ``start`` (``prev``: sample before)."""
        s, e = self.s, self.edge
        last = start + y.size - 1
        # right neighbours left pending at the end of the previous block
        if self.peak_idx == start - 1 and self.peak_right is None:
            self.peak_right = float(y[0])
        if self.last_out == start - 1 and self.last_out_next is None:
            self.last_out_next = float(y[0])
        lo, hi = max(self.pre_start, start), min(e.k_start, last)
        if lo <= hi:
            pre = _signed(s, y[lo - start : hi - start + 1])
            self.pre_min = min(self.pre_min, float(np.min(pre)))
        # settling: the last sample outside the band, from the start of the transition on
        lo, hi = max(e.k_start, start), min(self.post_end, last)
        settle_lo, dist = lo, None
        if lo <= hi:
            seg = y[lo - start : hi - start + 1]
            dist = np.abs(seg - self.final)
            out = np.flatnonzero(dist > self.band_abs)
            inside = seg
            if out.size:
                k = lo + int(out[-1])
                self.last_out = k
                self.last_out_val = float(y[k - start])
                self.last_out_next = float(y[k - start + 1]) if k < last else None
                self.entry_side = 1 if self.last_out_val > self.final else -1
                self.run_extreme, self.turn = math.nan, 0.0
                inside = seg[int(out[-1]) + 1 :]
            self._track_turn(inside)
        lo, hi = max(e.j, start), min(self.post_end, last)
        if lo > hi:
            return
        sy = _signed(s, y[lo - start : hi - start + 1])
        a = int(np.argmax(sy))
        if sy[a] > self.peak_val:
            k = lo + a
            self.peak_idx, self.peak_val = k, float(sy[a])
            if k > start:
                self.peak_left = float(s * y[k - start - 1])
            else:
                self.peak_left = None if prev is None else float(s * prev)
            self.peak_right = float(s * y[k - start + 1]) if k < last else None
        if self.reached_idx < 0:
            r = np.flatnonzero(sy >= s * self.final)
            if r.size:
                self.reached_idx = lo + int(r[0])
                self.after_reach_min = min(self.after_reach_min, float(np.min(sy[r[0] :])))
        else:
            self.after_reach_min = min(self.after_reach_min, float(np.min(sy)))
        tl = max(self.tail_start, lo)
        if tl <= hi:
            # |y - final| over the tail: part of the settling search's (which covers it)
            dev = float(np.max(dist[tl - settle_lo : hi - settle_lo + 1]))
            self.tail_dev = max(self.tail_dev, dev)

    def _track_turn(self, inside: np.ndarray) -> None:
        """Largest turn back of the waveform inside the band since it last came in: after
        coming in from below, how far it fell back from its running maximum (from above:
        rose back from its running minimum)."""
        if inside.size == 0 or self.entry_side == 0:
            return
        v = _signed(-self.entry_side, inside)  # rising into the band from below: v rises too
        if v.size >= 4 * TURN_CHUNK:
            self._track_turn_chunked(v)
            return
        if not math.isnan(self.run_extreme):
            v = np.concatenate(([self.run_extreme], v))
        run = np.maximum.accumulate(v)
        self.turn = max(self.turn, float(np.max(run - v)))
        self.run_extreme = float(run[-1])

    def _track_turn_chunked(self, v: np.ndarray) -> None:
        """:meth:`_track_turn` on a long stretch, by chunks of ``TURN_CHUNK`` samples: where
        a chunk does not raise the running maximum (the settled part, as a rule), its largest
        fall is the maximum before it less the chunk's minimum, from two reductions; the
        running maximum is taken sample by sample only over the chunks that raise it (chunks
        that do not raise it never change it, so one running maximum over those chunks in
        order is the whole record's). Each difference is then one the sample-by-sample
        running maximum also forms, so the same largest turn."""
        n = v.size
        starts = np.arange(0, n, TURN_CHUNK)
        cmax = np.maximum.reduceat(v, starts)
        cmin = np.minimum.reduceat(v, starts)
        m = -math.inf if math.isnan(self.run_extreme) else self.run_extreme
        before = np.empty_like(cmax)  # the running maximum before each chunk
        before[0] = m
        np.maximum.accumulate(cmax[:-1], out=before[1:])
        np.maximum(before[1:], m, out=before[1:])
        quiet = cmax <= before
        turn = self.turn
        if quiet.any():
            turn = max(turn, float(np.max(before[quiet] - cmin[quiet])))
        if not quiet.all():
            w = v[np.repeat(~quiet, TURN_CHUNK)[:n]]
            if math.isfinite(m):
                w = np.concatenate(([m], w))
            run = np.maximum.accumulate(w)
            turn = max(turn, float(np.max(run - w)))
        self.turn = turn
        self.run_extreme = float(max(before[-1], cmax[-1]))

    # ------------------------------------------------------------------ results
    def peak(self) -> tuple[float, float] | None:
        """(peak value in signal units, fractional index), refined by a parabola, or None
        when the extreme lies at the end of the post-transition region (no peak yet)."""
        if self.peak_idx < 0 or self.peak_idx >= self.post_end:
            return None
        v, idx = self.peak_val, float(self.peak_idx)
        if (
            self.peak_left is not None
            and self.peak_right is not None
            and self.peak_idx > self.edge.j
        ):
            a, b, c = self.peak_left, self.peak_val, self.peak_right
            den = a - 2.0 * b + c
            if den < 0:
                # vertex of the parabola through the three samples around the maximum
                p = 0.5 * (a - c) / den
                idx += p
                v = b - 0.25 * (a - c) * p
        return self.s * v, idx

    def settle_instant(self) -> float | None:
        """Fractional index of the last exit from the band, or None if still outside at the end."""
        if self.last_out < 0:
            return float(self.edge.k_start)
        if self.last_out >= self.post_end or self.last_out_next is None:
            return None
        y0, y1 = self.last_out_val, self.last_out_next
        bound = self.final + math.copysign(self.band_abs, y0 - self.final)
        if y1 == y0:
            return float(self.last_out)
        frac = min(max((bound - y0) / (y1 - y0), 0.0), 1.0)
        return self.last_out + frac


def pulse_table(edges: list[Edge], rate: float, t0: float) -> list[dict]:
    """Per-pulse durations, periods and duty (IEEE Std 181-2011 pulse duration at 50 %).

    A pulse is a transition followed by one in the opposite direction; its duration is
    the time between their 50 % instants. Pulses start with the direction of the first
    transition (positive pulses when it rises). The period is the time to the next
    transition in the same direction as this pulse's first one; duty = duration / period.
    """
    out = []
    if len(edges) < 2:
        return out
    first_dir = edges[0].direction
    starts = [i for i, e in enumerate(edges) if e.direction == first_dir]
    for n, i in enumerate(starts):
        if i + 1 >= len(edges):
            break
        a, b = edges[i], edges[i + 1]
        duration = (b.mid - a.mid) / rate
        row = {
            "index": n,
            "polarity": "positive" if first_dir > 0 else "negative",
            "start_s": t0 + a.mid / rate,
            "pulse_duration_s": duration,
            "period_s": None,
            "duty_pct": None,
        }
        if n + 1 < len(starts):
            period = (edges[starts[n + 1]].mid - a.mid) / rate
            row["period_s"] = period
            row["duty_pct"] = 100.0 * duration / period
        else:
            row["null_reasons"] = {
                "period_s": "last pulse: no following pulse in the record",
                "duty_pct": "last pulse: no following pulse in the record",
            }
        out.append(row)
    return out


#: Summary statistics across transitions: for these, larger is worse ("worst" = max).
WORST_IS_MAX = (
    "rise_time_s",
    "fall_time_s",
    "overshoot_pct",
    "undershoot_pct",
    "preshoot_pct",
    "settling_time_s",
    "delay_s",
)


def summarize(rows: list[dict], keys: tuple[str, ...], worst: bool) -> dict:
    """min/mean/max (and worst, or standard deviation) of each key across rows, with counts."""
    out = {}
    for key in keys:
        vals = [r[key] for r in rows if isinstance(r.get(key), (int, float))]
        missing = sum(1 for r in rows if key in r and r[key] is None)
        if not vals and not missing:
            continue
        entry: dict = {"count": len(vals)}
        if vals:
            arr = np.asarray(vals, dtype=np.float64)
            entry.update(min=float(arr.min()), mean=float(arr.mean()), max=float(arr.max()))
            if worst:
                entry["worst"] = float(arr.max())
            else:
                entry["std"] = float(arr.std())
        if missing:
            entry["missing"] = missing
        marks = {(r.get("bounds") or {}).get(key) for r in rows if r.get(key) is not None}
        marks.discard(None)
        if marks:
            # a statistic over bounds is itself a bound (of the same side)
            entry["bound"] = marks.pop() if len(marks) == 1 else "lower and upper"
        out[key] = entry
    return out
