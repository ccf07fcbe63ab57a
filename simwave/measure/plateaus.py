"""Transitions between any number of levels: staircases, up/down sequences, steps with hum.

The two-state search (:class:`simwave.measure.transient.EdgeFinder` on the histogram's
levels) needs a waveform that spends most of its time at two levels. A staircase (0 -> 1 ->
2.5 -> 0.5 -> 1.5), a set-point sequence or a step with mains hum on it does not. Here the
record is summarised in short windows (their mean, minimum and maximum; one 50 Hz period long
where the record allows, so a window's span shows the whole hum and its mean nearly none of
it), and:

* the disturbance: the span (peak to peak) of the quieter windows (the first quartile of all
  window spans): what noise and hum alone do within a window (a window holding a step spans
  more);
* plateaus: runs of windows no wider than the disturbance allows whose means agree with
  each other; their level is the mean over their windows;
* transitions: between consecutive plateaus whose levels differ by more than the disturbance's
  span; each found at sample level (its 10/50/90 % instants) between the plateaus, on its own
  reference levels, by the hysteresis search of :class:`EdgeFinder` seeded with the state the
  waveform is in before it (IEEE Std 181-2011's two-state definitions applied per
  transition, with the plateaus on either side as its two states).

Memory: three numbers per window (a 10-minute 48 kHz record: 30,000 windows, 0.7 MB).

References
----------
IEEE Std 181-2011, clauses 5.2-5.3 (state levels, reference levels and instants of a
transition between two states). The first-quartile span as the disturbance and the window
length are our choices.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from simwave.measure.transient import Edge, EdgeFinder

#: Window length: one period of 50 Hz mains (20 ms), so the window means hardly hold hum of 50
#: or 60 Hz and their spans hold all of it (our choice) ...
WINDOW_S = 0.02
#: ... but never fewer windows than this in the record (short records) ...
MIN_WINDOWS = 24
#: ... nor fewer samples than this in a window.
MIN_WINDOW_SAMPLES = 4
#: A window is flat when its span is at most this many times the disturbance's span (our
#: choice: the spans of windows of normal noise scatter by some 10 % about their typical
#: value), or this fraction of the record's range, whichever is larger (clean records).
FLAT_FACTOR = 1.6
FLAT_RANGE_FRACTION = 1e-3
#: Fewest windows in a plateau (one could be a window caught half-way along a slow edge).
MIN_PLATEAU_WINDOWS = 2
#: Plateaus must cover at least this fraction of the record for it to be a staircase ...
MIN_COVER = 0.5
#: ... and of an output's (no reference input), whose ringing after each step takes part
#: of every state (our choice; a sine or noise has no run of flat windows at two levels).
MIN_COVER_OUTPUT = 0.25
#: An output's plateau is a state it holds when it lasts at least this fraction of the
#: typical state (:func:`held_plateaus`; our choice).
HELD_FRACTION = 0.25
#: ... and it differs from the next by more than this many disturbance spans (our choice:
#: 1.5 spans are 4 RMS of hum, and 7 to 10 RMS of white noise over windows of 40 to 400
#: samples, under the 10 RMS a step must have to be told from the disturbance).
HELD_STEP_SPANS = 1.5


@dataclass
class Plateau:
    """A run of flat windows at one level: samples ``start``..``end`` (inclusive)."""

    start: int
    end: int
    level: float
    windows: int
    spread: float = 0.0  # largest window span in it


@dataclass
class WindowStats:
    """Mean, minimum and maximum of consecutive windows of ``size`` samples, fed in blocks."""

    size: int
    means: list = field(default_factory=list)
    mins: list = field(default_factory=list)
    maxs: list = field(default_factory=list)
    _carry: np.ndarray = field(default_factory=lambda: np.empty(0))
    # arrays() and the quiet span, computed once after the last feed (read-only)
    _cache: dict = field(default_factory=dict, repr=False, compare=False)

    def feed(self, y: np.ndarray) -> None:
        self._cache.clear()
        size = self.size
        if self._carry.size:
            # the window the carried samples began, completed from this block (only it is
            # joined: the block itself is not copied behind the carry)
            need = size - self._carry.size
            if y.size < need:
                self._carry = np.concatenate([self._carry, y])
                return
            self._add(np.concatenate([self._carry, y[:need]]).reshape(1, size))
            y = y[need:]
        m = (y.size // size) * size
        if m:
            self._add(y[:m].reshape(-1, size))
        self._carry = np.array(y[m:], dtype=np.float64)

    def _add(self, w: np.ndarray) -> None:
        # each row's mean is its own pairwise sum over the row divided by the size, the
        # same whatever rows stand beside it (tests/test_measure_fused.py compares)
        self.means.append(w.mean(axis=1))
        self.mins.append(w.min(axis=1))
        self.maxs.append(w.max(axis=1))

    def arrays(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(means, minima, maxima) of the whole windows, and of the last partial one if it
        holds at least half a window (read-only arrays, made once after the last feed)."""
        got = self._cache.get("arrays")
        if got is None:
            got = self._cache["arrays"] = self._arrays()
        return got

    def _arrays(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        means, mins, maxs = (list(a) for a in (self.means, self.mins, self.maxs))
        if self._carry.size >= max(self.size // 2, 1):
            c = self._carry
            means.append(np.array([c.mean()]))
            mins.append(np.array([c.min()]))
            maxs.append(np.array([c.max()]))
        out = tuple(np.concatenate(a) if a else np.empty(0) for a in (means, mins, maxs))
        for a in out:
            a.flags.writeable = False
        return out  # type: ignore[return-value]


def quiet_span(stats: WindowStats) -> float:
    """The disturbance's span (peak to peak): the first quartile of the window spans (what
    noise and hum alone do in a window, where a quarter of the record or more is quiet)."""
    got = stats._cache.get("quiet")
    if got is None:
        _, mins, maxs = stats.arrays()
        got = stats._cache["quiet"] = first_quartile(maxs - mins) if mins.size else 0.0
    return got


def first_quartile(a: np.ndarray) -> float:
    """``float(np.percentile(a, 25))`` of a 1-D array of finite values (at least one), in
    numpy's steps without its wrapping (it costs some 60 us a call, paid three times by a
    short record): the default "linear" method's virtual index (n - 1) / 4 (exact in
    binary), the two order statistics beside it by one partition, and numpy's ``_lerp``
    (a + (b - a) g, or b - (b - a) (1 - g) when g >= 0.5), so the same bits
    (tests/test_measure_windows.py compares)."""
    n = a.size
    v = (n - 1) / 4.0
    lo = int(math.floor(v))
    hi = lo + 1
    if v >= n - 1:
        lo = hi = -1  # numpy's index of the last one (one value), weight v - (-1)
    # numpy's partition points (the ends too), so equal values (0. and -0.) land alike
    p = np.partition(a, np.unique(np.array([0, -1, lo, hi])))
    x0, x1 = p[lo], p[hi]
    g = v - lo
    d = x1 - x0
    return float(x1 - d * (1.0 - g) if g >= 0.5 else x0 + d * g)


def window_size(n: int, rate: float) -> int:
    """Samples per window for a record of ``n`` samples at ``rate``."""
    w = int(round(WINDOW_S * rate))
    w = min(w, n // MIN_WINDOWS)
    return max(w, MIN_WINDOW_SAMPLES)


@dataclass
class Staircase:
    """What :func:`find_plateaus` found: the plateaus, the disturbance, the window size."""

    plateaus: list[Plateau]
    disturbance_pp: float
    window: int
    n: int

    @property
    def cover(self) -> float:
        return sum(p.end - p.start + 1 for p in self.plateaus) / max(self.n, 1)

    @property
    def n_levels(self) -> int:
        """Distinct levels among the plateaus (levels closer than the disturbance are one)."""
        lv = sorted(p.level for p in self.plateaus)
        tol = self.step_floor
        return 1 + sum(1 for a, b in zip(lv, lv[1:], strict=False) if b - a > tol) if lv else 0

    @property
    def step_floor(self) -> float:
        """Smallest level change that counts as a transition."""
        return max(self.disturbance_pp, self._range_floor)

    _range_floor: float = 0.0

    def usable(self, cover: float = MIN_COVER) -> bool:
        """A staircase: at least one transition, and plateaus over ``cover`` of the record
        (most of it for an input; an output's ringing takes more of it)."""
        return len(self.plateaus) >= 2 and self.cover >= cover


def find_plateaus(stats: WindowStats, n: int, rest_first: bool = False) -> Staircase:
    """Plateaus of a record summarised by ``stats`` (``n`` samples in all).

    ``rest_first``: sample 0 is the at-rest sample put before the record (0 by convention):
    it is a plateau of its own at level 0.
    """
    means, mins, maxs = stats.arrays()
    size = stats.size
    if means.size == 0:
        return Staircase([], 0.0, size, n)
    span = maxs - mins
    rng = float(maxs.max() - mins.min())
    dist = quiet_span(stats)
    floor = FLAT_RANGE_FRACTION * rng
    flat_tol = max(FLAT_FACTOR * dist, floor)
    step_floor = max(dist, floor)
    runs: list[list[int]] = []
    total = 0.0  # running sum of the current run's window means (its level in O(1))
    mv = means.tolist()  # Python floats: the same values, without numpy's per-item cost
    for i in np.flatnonzero(span <= flat_tol).tolist():
        if runs and runs[-1][-1] == i - 1:
            cur = runs[-1]
            level = total / len(cur)
            if abs(mv[i] - level) <= step_floor:
                cur.append(i)
                total += mv[i]
                continue
        runs.append([i])
        total = mv[i]
    plateaus = []
    for r in runs:
        if len(r) < MIN_PLATEAU_WINDOWS:
            continue
        start, end = r[0] * size, min((r[-1] + 1) * size, n) - 1
        if rest_first and start == 0:
            start = 1  # sample 0 is the rest sample: a plateau of its own below
        plateaus.append(
            Plateau(start, end, float(np.mean(means[r])), len(r), float(np.max(span[r])))
        )
    # neighbours at one level (a noisy window between them split them) are one plateau
    merged: list[Plateau] = []
    for p in plateaus:
        if merged and abs(p.level - merged[-1].level) <= step_floor:
            q = merged[-1]
            w = q.windows + p.windows
            merged[-1] = Plateau(
                q.start, p.end, (q.level * q.windows + p.level * p.windows) / w, w,
                max(q.spread, p.spread),
            )
        else:
            merged.append(p)
    if rest_first and (not merged or merged[0].start > 0):
        rest = Plateau(0, 0, 0.0, 0, 0.0)
        if merged and abs(merged[0].level) <= step_floor:
            merged[0].start = 1  # starts at rest: no step at the first sample
        else:
            merged.insert(0, rest)
    sc = Staircase(merged, dist, size, n)
    sc._range_floor = floor
    return sc


def held_plateaus(sc: Staircase, fraction: float = HELD_FRACTION) -> Staircase:
    """The plateaus an output holds, without those of its ringing: with noise, the slow
    swings of a ringing output after a step have flat windows at their turning points,
    which pass as short plateaus. A state is held at least ``fraction`` of the typical
    state's length (the length-weighted median: half the plateaus' samples lie in longer
    ones; our choice); neighbours left within ``HELD_STEP_SPANS`` disturbance spans of
    each other are joined (a still-ringing overshoot held long enough is no state of its
    own). A state held much more briefly than the others, or a change of level smaller
    than that, is then read as part of a transition (the limits of this rule)."""
    if len(sc.plateaus) < 3:
        return sc
    lengths = np.sort([p.end - p.start + 1 for p in sc.plateaus])
    # the length-weighted median: half the plateaus' samples lie in longer ones
    cum = np.cumsum(lengths)
    typical = float(lengths[int(np.searchsorted(cum, 0.5 * cum[-1]))])
    kept = [p for p in sc.plateaus if p.end - p.start + 1 >= fraction * typical or p.windows == 0]
    merged: list[Plateau] = []
    for p in kept:
        if merged and abs(p.level - merged[-1].level) <= HELD_STEP_SPANS * sc.step_floor:
            q = merged[-1]
            w = max(q.windows + p.windows, 1)
            merged[-1] = Plateau(q.start, p.end, (q.level * q.windows + p.level * p.windows) / w,
                                 q.windows + p.windows, max(q.spread, p.spread))
        else:
            merged.append(p)
    out = Staircase(merged, sc.disturbance_pp, sc.window, sc.n)
    out._range_floor = sc._range_floor
    return out


def gap_finders(sc: Staircase, pcts: tuple) -> list[tuple[int, int, EdgeFinder, Plateau, Plateau]]:
    """For each pair of consecutive plateaus, the stretch between them (from the last window
    of the first to the first window of the second) and a hysteresis edge finder on their
    own reference levels, seeded with the first plateau's state."""
    out = []
    for a, b in zip(sc.plateaus, sc.plateaus[1:], strict=False):
        lo_lv, hi_lv = min(a.level, b.level), max(a.level, b.level)
        amp = hi_lv - lo_lv
        refs = tuple(lo_lv + p / 100.0 * amp for p in pcts)
        rising = b.level > a.level
        lo = max(a.end - sc.window, a.start)
        hi = min(b.start + sc.window, b.end)
        finder = EdgeFinder(*refs, seed_state=0 if rising else 1, seed_index=lo)
        out.append((lo, hi, finder, a, b))
    return out


def edges_from_gaps(gaps: list) -> list[Edge]:
    """One transition per gap: the first the seeded finder found in the right direction, or,
    when it found none (an edge that never crossed its far reference level inside the
    stretch), the stretch itself with its middle as the 50 % sample."""
    edges = []
    for lo, hi, finder, a, b in gaps:
        direction = 1 if b.level > a.level else -1
        e = next((e for e in finder.edges if e.direction == direction), None)
        if e is None:
            mid = (lo + hi) // 2
            e = Edge(direction, lo, mid, max(hi, lo + 1))
        e.refs = (finder.low, finder.mid, finder.high)
        e.initial_level, e.final_level = a.level, b.level
        edges.append(e)
    return edges


def disturbance_rms_from_pp(pp: float, window: int) -> float:
    """A rough RMS from a window's peak-to-peak span: normal noise of deviation sigma spans
    about 2 sqrt(2 ln w) sigma in w samples (the expected extreme of w normal samples, common
    practice; from memory), a sine of RMS r spans 2 sqrt(2) r; the smaller factor of the two
    is used, so the RMS is not understated."""
    noise_factor = 2.0 * math.sqrt(2.0 * math.log(max(window, 2)))
    return pp / max(min(noise_factor, 2.0 * math.sqrt(2.0)), 1e-12)
