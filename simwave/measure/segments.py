"""State levels from the settled ends of the intervals between transitions.

IEEE Std 181-2011 finds state levels from the histogram of the whole waveform
(the mode method) and allows other methods provided the method is stated. The
histogram is fooled by ringing in a short record: the density of a sinusoid piles
up at its turning points, so a lightly damped pulse response gives "states" at
its overshoot peaks. Here the record is cut into segments, each holding one
state: between the transitions of the reference input ("input-aligned"), or
between the output's own transitions when there is no input ("output state
intervals"). Each segment's level is read where it has had the longest time to
settle, at its end.

Where an input-aligned segment ends: where the OUTPUT starts to answer the next input
transition, not where the input does (a system with lag or dead time goes on settling
toward the current level after the input's next edge has begun). That instant is the
input's start (1/8 of its 10-90 % time before its 10 % instant, where a linear edge
leaves its level) plus the output's response onset delay: on the transitions that start
from a settled segment, the number of samples after that start during which the output
stays within :func:`onset_threshold` of its level (a tenth of the settling band's
half-width, or three robust deviations of the segment end when noise is larger; it has
left when ``ONSET_RUN`` samples in a row lie beyond), less one, the smallest over those
transitions; never past the near reference level instant of the output's own next
transition. The input's start alone is a safe cut (a causal system cannot answer
earlier) and is kept when no transition starts from a settled segment quiet enough
(three robust deviations of its noise within half the band's half-width) to show where
the output leaves it. The level window, the settled test and the settling search all use
the same segment.

The level:

* ``segment end``: the median of the last ``fraction`` of the segment, when that
  window is settled: the medians of its four quarters span no more than the
  settling band (a percentage of the transition amplitude), beyond what the noise
  of the window explains.
* ``turning-point extrapolation``: when the end is not settled and the segment
  rings (at least three turning points alternating about the level with
  shrinking size), the level the ringing converges to, from the last three turning
  points by Aitken's delta-squared process. Exact when the turning points shrink
  geometrically, as those of a second-order (or one dominant pole pair) response
  do (from Ogata, sec. 5-3, eq. 5-10: the extremes of the underdamped step response
  lie pi / omega_d apart and their distances from the final value fall by
  exp(-zeta pi / sqrt(1 - zeta^2)) each time); an approximation otherwise.
* ``segment end, still approaching``: the end moves steadily on, away from the level
  before, without turning back (a first-order lag given too little time): the median of
  its last five samples, the value nearest the final one, flagged not settled; the
  amplitude it gives is a lower bound.
* ``segment end, not settled``: none of these (ringing with fewer than three turning
  points, a hump): the end-window median, flagged; the level is not established.

Memory: the pass holds the samples of the current segment only (at most ``cap``
samples per channel: the last ``cap`` of a longer segment).

References
----------
IEEE Std 181-2011, *IEEE Standard for Transitions, Pulses, and Related Waveforms*,
clause 5.2 (state levels; methods other than the histogram allowed when stated).
A. C. Aitken, "On Bernoulli's numerical solution of algebraic equations", Proc. Roy.
Soc. Edinburgh 46 (1926), pp. 289-305 (the delta-squared process; volume and pages
quoted from memory).
K. Ogata, *Modern Control Engineering*, 5th ed., sec. 5-3.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from simwave.measure.joining import array_root, joined_1d

#: Default part of a segment, at its end, whose median is the segment's level (the brief
#: of this method: the last 10-20 %; our choice).
SEGMENT_END_FRACTION = 0.2
#: Fewest samples in the end window (four quarters of at least two samples).
MIN_END_WINDOW = 8
#: Hysteresis of the turning-point search, in robust noise standard deviations, so noise
#: alone does not make turning points (our choice).
NOISE_HYSTERESIS = 4.0
#: A turning point closer to the one before than this fraction of the spacing of the two
#: before is not a swing of the ringing (our choice; the swings of a damped response are
#: equally long).
SHORT_SWING = 0.5
#: A segment end holding the segment's extreme is settled only when the segment has stayed
#: near its end level for at least this part of its length: as long as it took to get there.
#: A response at a turning point of slow ringing looks flat over a short end window but has
#: been near that value only briefly (our choice; it refuses records cut short near a peak).
DWELL_FRACTION = 0.5
#: A channel's quiet-window span is allowed for as a disturbance only up to this fraction of
#: the transition amplitude (a step of 10 noise RMS has windows spanning some 0.7 of it; a
#: sine's quiet-window span is the whole sine; our choice).
DISTURBANCE_MAX = 0.75
#: ... when its end window turns by more than this fraction of the band's half-width (beyond
#: what noise explains; our choice).
TURN_FRACTION = 0.02
#: Points kept of a segment's deviation-from-the-end profile.
BACK_POINTS = 256
#: Samples of a segment held at once (the last ones of a longer segment).
DEFAULT_CAP = 1_000_000

METHOD_END = "segment end"
METHOD_EXTRAPOLATED = "turning-point extrapolation"
METHOD_APPROACHING = "segment end, still approaching"
METHOD_UNSETTLED = "segment end, not settled"
#: The segment before a step at the first sample: the at-rest convention (input and output
#: 0 before the record), not a measurement.
METHOD_REST = "at rest before the record (convention)"


#: A segment's turning-point result when no search was needed: (extrapolated,
#: turning_points, residual, tp_reason).
NO_TURNING: tuple = (None, 0, None, None)


@dataclass
class Segment:
    """One state's interval of a channel and its level.

    ``start``/``end`` are global sample indices (inclusive). The measured fields are
    filled by :func:`analyse_segment`, the decision (``level``, ``method``,
    ``settled``) by :meth:`decide`.
    """

    index: int
    start: int
    end: int
    state: int = -1  # 0 lower, 1 upper (from the transitions around it), -1 unknown
    w_start: int = -1
    n_window: int = 0
    median: float = math.nan
    drift: float = math.nan  # span of the medians of the end window's quarters
    quarters: tuple = ()  # those medians, in time order
    end_value: float = math.nan  # median of the last (up to) five samples
    allowance: float = 0.0  # part of that span the window's noise explains
    noise: float = 0.0  # robust noise standard deviation in the end window
    scatter: float = 0.0  # robust deviation of the end window about its median (noise, hum)
    rms_dev: float = 0.0  # RMS deviation of the end window about its median
    peak_dev: float = 0.0  # largest deviation of the end window from its median
    disturbance: float = 0.0  # the channel's disturbance span allowed for in the settled test
    # largest deviation from the end median over the last k samples, at a few k (increasing):
    # how long the segment has stayed near its end level
    back_k: np.ndarray = field(default_factory=lambda: np.empty(0, dtype=np.int64))
    back_dev: np.ndarray = field(default_factory=lambda: np.empty(0))
    # the turning-point search's result, (extrapolated, turning_points, residual,
    # tp_reason) (see the properties below), or the arguments of a search left for when it
    # is first read
    _turning: tuple = field(default=NO_TURNING, repr=False)
    _turning_later: tuple | None = field(default=None, repr=False)
    # the decision
    level: float = math.nan
    method: str = ""
    settled: bool = False
    note: str | None = None

    @property
    def length(self) -> int:
        return self.end - self.start + 1

    def _turning_result(self) -> tuple:
        if self._turning_later is not None:
            args, self._turning_later = self._turning_later, None
            self._turning = turning_point_level(*args)
        return self._turning

    @property
    def extrapolated(self) -> float | None:
        """Level from the last three turning points of the end's ringing, or None."""
        return self._turning_result()[0]

    @property
    def turning_points(self) -> int:
        """Turning points of the ringing found (0: none searched or none found)."""
        return self._turning_result()[1]

    @property
    def residual(self) -> float | None:
        """Size (abs) of the last turning point used, or None."""
        return self._turning_result()[2]

    @property
    def tp_reason(self) -> str | None:
        """Why there is no extrapolated level, when one was searched and none found."""
        return self._turning_result()[3]

    def decide(
        self, amplitude: float, band_pct: float, away: int = 0, disturbance: float = 0.0,
        strict: bool = True,
    ) -> None:
        """Choose the level: settled end median, else turning-point extrapolation, else the
        last value of a steady approach, else the end median flagged not settled.

        ``amplitude``: the size of the transition(s) next to this segment, which scales
        the settling band; ``away``: +1 or -1, the direction away from the neighbouring
        level (0: unknown), in which a still-approaching end moves; ``disturbance``: the
        span (peak to peak) that noise and hum give the channel where it is quiet: the
        quarters of a settled end may differ by that much (hum over a quarter shorter than
        its period) on top of the band; ``strict``: refuse ends at a turning point (see
        :meth:`_at_turning_point`; off for provisional levels, which are measured again).
        """
        tol = band_pct / 100.0 * abs(amplitude)
        self.note = None
        if disturbance > DISTURBANCE_MAX * abs(amplitude):
            disturbance = 0.0  # that large it is the signal itself (a sine), no disturbance
        self.disturbance = disturbance
        if self.length < MIN_END_WINDOW:
            self.level, self.method, self.settled = self.median, METHOD_UNSETTLED, False
            self.note = (
                f"segment of only {self.length} samples: too short to tell whether it settled"
            )
            return
        near = tol + self.allowance + disturbance
        if self.drift <= near and not (strict and self._at_turning_point(near, away, tol)):
            self.level, self.method, self.settled = self.median, METHOD_END, True
            return
        self.settled = False
        drift_pct = 100.0 * self.drift / abs(amplitude) if amplitude else math.inf
        if self.extrapolated is not None:
            self.level, self.method = self.extrapolated, METHOD_EXTRAPOLATED
            self.note = (
                f"end of the segment not settled (its last part still moves by "
                f"{drift_pct:.3g} % of the amplitude); level extrapolated from the last three "
                f"of {self.turning_points} turning points of its ringing"
            )
            return
        q = np.asarray(self.quarters)
        if away and q.size == 4 and self.turning_points == 0 and np.all(away * np.diff(q) > 0):
            self.level, self.method = self.end_value, METHOD_APPROACHING
            self.note = (
                f"still approaching its final level at the end of the segment (its last part "
                f"moves on by {drift_pct:.3g} % of the amplitude without turning back); the "
                "level is its last value: the amplitude is a lower bound"
            )
            return
        self.level, self.method = self.median, METHOD_UNSETTLED
        self.note = (
            f"end of the segment not settled: its last part still moves by {drift_pct:.3g} % "
            f"of the amplitude, outside the ±{band_pct:g} % band"
            + (f"; no extrapolation ({self.tp_reason})" if self.tp_reason else "")
        )

    def _at_turning_point(self, near: float, away: int, tol: float = 0.0) -> bool:
        """The end window turns (an inner quarter's median lies beyond both outer ones by
        more than their noise allows, in the direction the segment travelled) or swings back
        all through (against the way the segment came, past a peak), and the segment
        has been near its end level for less than ``DWELL_FRACTION`` of its length: the record
        ends at a turning point of slow ringing (flat for a moment, then swinging back), not
        at a settled level."""
        # single samples stray from the end level by their noise (four robust deviations);
        # of a segment longer than the samples held (its last ``cap``), the held part
        held = int(self.back_k[-1]) if len(self.back_k) else self.length
        if len(self.quarters) != 4 or self.dwell(near + 4.0 * self.scatter) >= (
            DWELL_FRACTION * min(self.length, held)
        ):
            return False
        q = np.asarray(self.quarters)
        signs = [away] if away else [1, -1]
        least = self.allowance + TURN_FRACTION * tol
        for sgn in signs:
            v = sgn * q
            k = int(np.argmax(v))
            # an inner quarter beyond both outer ones by more than their noise allows
            if k in (1, 2) and v[k] - max(v[0], v[3]) > least:
                return True
        # swinging back (against the way it came) all through the end window: past a peak
        if away and bool(np.all(away * np.diff(q) < 0)) and away * (q[0] - q[3]) > least:
            return True
        # near its end level only briefly: only a steady approach (still moving on the way it
        # came, the tail of a first-order lag) counts as settled; an end whose quarters scatter
        # (a turn the noise may hide) does not
        steady = away and bool(np.all(away * np.diff(q) >= 0))
        return not steady

    def dwell(self, within: float) -> int:
        """How many samples, at the end of the segment, lie within ``within`` of its end
        median (from the few points kept; the segment's held part only)."""
        if len(self.back_k) == 0:
            return self.length
        i = int(np.searchsorted(self.back_dev, within, side="right"))
        if i >= len(self.back_k):
            return self.length if self.back_k[-1] >= self.length else int(self.back_k[-1])
        return int(self.back_k[i - 1]) if i > 0 else 0

    def detail(self, rate: float, t0: float, amplitude: float) -> dict:
        """Dictionary for the result: how this level was found."""
        d: dict = {
            "method": self.method,
            "settled": bool(self.settled),
            "segment_s": [t0 + self.start / rate, t0 + self.end / rate],
            "window_s": [t0 + self.w_start / rate, t0 + self.end / rate],
            "end_median": self.median,
            "end_drift_pct": (100.0 * self.drift / abs(amplitude) if amplitude else None),
        }
        if self.method == METHOD_EXTRAPOLATED:
            d["turning_points"] = self.turning_points
            if self.residual is not None and amplitude:
                d["last_turning_point_pct"] = 100.0 * self.residual / abs(amplitude)
        if self.note:
            d["note"] = self.note
        return d


def _robust_noise(w: np.ndarray) -> float:
    """Noise standard deviation from second differences: 1.4826 MAD / sqrt(6).

    Second differences remove a level and a slope, so slow ringing hardly counts; for
    white noise of deviation sigma they have deviation sigma sqrt(6). The factor 1.4826
    turns a median absolute deviation into a standard deviation for normal noise
    (common practice; e.g. Huber & Ronchetti, *Robust Statistics*, 2nd ed.; section not
    checked, from memory).
    """
    if w.size < 5:
        return 0.0
    d2 = np.diff(w, 2)
    d2 -= median_in_place(d2)
    return float(1.4826 * median_in_place(np.abs(d2, out=d2)) / math.sqrt(6.0))


def median(a: np.ndarray) -> float:
    """``float(np.median(a))`` of a 1-D array of finite values (at least one), without
    np.median's wrapping (a third of its cost on a few thousand samples): the same
    middle order statistics and, for an even count, the same (a + b) / 2, so the same bits
    (:func:`median_in_place` on a copy, as np.partition makes)."""
    return median_in_place(np.array(a))


def median_in_place(a: np.ndarray) -> float:
    """:func:`median` of an array the caller owns and no longer needs in its order: it may
    be reordered (no copy). The same value: the middle order statistics do not depend on
    the order of the samples, nor on how they are found."""
    n = a.size
    h = n >> 1
    i = h - 1 + (n & 1)  # the middle order statistics i and h (i == h for an odd count)
    ks: tuple = (i, h, -1) if i != h else (h, -1)
    if n >= BRACKET_MIN:
        a, i, h = _bracketed(a, i, h)
        ks = (i, h) if i != h else (h,)
    # numpy's partition points (np.median's, the last one too; the bracketed values have
    # no need of it), so equal values land alike
    a.partition(ks)
    # np.median takes np.mean of the middle one or two, whose sum starts from 0. (which
    # makes -0. into 0.), divided by the count
    if n & 1:
        return float((0.0 + a[h]) / 1.0)
    return float(((0.0 + a[i]) + a[h]) / 2.0)


#: Arrays of at least this many values have their middle narrowed down to a bracket before
#: it is partitioned (see :func:`_bracketed`); below it a partition costs less.
BRACKET_MIN = 4096

#: Values sampled (evenly spaced) to place a bracket, and its half-width in the sorted
#: sample's ranks: about 3.5 standard deviations of the sample rank of the population's
#: middle, sqrt(m) / 2 (Floyd & Rivest, CACM 18(3), 1975, the sampling step of their
#: SELECT; the constants are our choice).
BRACKET_SAMPLE = 1024
BRACKET_HALF = 56


def _bracketed(a: np.ndarray, i: int, j: int) -> tuple[np.ndarray, int, int]:
    """The values of ``a`` from which its order statistics ``i <= j`` are still to be
    selected, and their ranks there: ``a`` narrowed, while it is long, to the values
    between two order statistics of an evenly spaced sample of it that enclose the
    wanted ones (a bracket that misses them leaves ``a`` as it is).

    The values counted below a bracket and those within it give the wanted ranks exactly,
    so a partition of what is left finds the same values as one of the whole array, at a
    small part of its cost on long windows (numpy's partition costs ~10 ns a value here;
    a bracket, a few vectorised passes).
    """
    while a.size >= BRACKET_MIN:
        n = a.size
        sample = a[:: max(1, n // BRACKET_SAMPLE)].copy()
        m = sample.size
        c = (m * (i + j + 1)) // (2 * n)  # the middle's rank in the sample, about
        r_lo, r_hi = max(c - BRACKET_HALF, 0), min(c + BRACKET_HALF, m - 1)
        sample.partition((r_lo, r_hi))
        lo, hi = sample[r_lo], sample[r_hi]
        below = a < lo
        n_below = int(np.count_nonzero(below))
        upto = a <= hi
        if n_below > i or int(np.count_nonzero(upto)) <= j:
            break  # the bracket misses them
        a, i, j = np.compress(np.logical_xor(upto, below, out=upto), a), i - n_below, j - n_below
        if a.size * 2 > n:
            break  # hardly narrower (many equal values): partition what is left
    return a, i, j


@functools.lru_cache(maxsize=64)
def _back_points(n: int) -> tuple[np.ndarray, np.ndarray]:
    """For a segment of ``n`` held samples: the indices (from its end) at which the
    backward running maximum is read, and the starts of the stretches between them
    (computed once per length: a train's segments mostly share theirs)."""
    k = np.linspace(0, n - 1, min(n, BACK_POINTS)).astype(np.int64)
    if not bool(np.all(k[1:] > k[:-1])):
        k = np.unique(k)
    starts = np.concatenate(([0], k[:-1] + 1))
    k.flags.writeable = False
    starts.flags.writeable = False
    return k, starts


@functools.lru_cache(maxsize=256)
def _fit_frame(before: int, after: int) -> tuple:
    """What a :func:`_refined_extreme` fit over samples ``k - before .. k + after`` needs
    besides the samples (it depends on nothing else; computed once, read-only): the
    abscissae scaled to [-1, 1], the Vandermonde matrix, its Gram matrix, the search grid."""
    span = float(max(before, after, 1))
    # (arange(lo, hi + 1) - k) / span: the integers are exact in float64, so the same x
    x = np.arange(-before, after + 1, dtype=np.float64) / span
    deg = 4 if x.size >= 7 else 2
    v = np.vander(x, deg + 1, increasing=True)
    gram = v.T @ v
    grid = np.linspace(x[0], x[-1], 401)
    for a in (x, v, gram, grid):
        a.flags.writeable = False
    return x, v, gram, grid


def _horner(c: list[float], x: float) -> float:
    """``numpy.polynomial.polynomial.polyval(x, c)`` for a float ``x``: the same operations
    (c[-1] + x*0, then c[i] + p*x downwards), so the same bits, without its array set-up."""
    p = c[-1] + x * 0
    for ci in c[-2::-1]:
        p = ci + p * x
    return p


def _refined_extreme(d: np.ndarray, k: int, q: int, sign: int) -> float:
    """Value of the extreme of ``d`` near sample ``k``: the extreme of a least-squares
    polynomial (quartic, or quadratic over fewer than 7 samples) through ``k - q .. k + q``.

    A quartic follows the top of a (damped) cosine over a third of a lobe to a few parts
    per million of its height, and averaging that many samples keeps noise from
    pulling the extreme (the largest noisy sample alone is biased upward).
    """
    lo, hi = max(k - q, 0), min(k + q, d.size - 1)
    npts = hi - lo + 1
    if npts < 3:
        return float(d[k])
    x, v, gram, grid = _fit_frame(k - lo, hi - k)
    deg = v.shape[1] - 1
    try:
        # normal equations of a small, well-scaled (|x| <= 1) least-squares problem
        c = np.linalg.solve(gram, v.T @ d[lo : hi + 1])
    except np.linalg.LinAlgError:
        return float(d[k])
    # the largest value of the polynomial over the span: a fine grid, then Newton's method
    # on p'(x) = 0 from the best grid point
    vals = sign * np.polynomial.polynomial.polyval(grid, c)
    xv = float(grid[int(np.argmax(vals))])
    cl = c.tolist()
    dc = [cl[i] * i for i in range(1, deg + 1)]  # p'(x), increasing powers
    ddc = [dc[i] * i for i in range(1, deg)]  # p''(x)
    x_first, x_last = float(x[0]), float(x[-1])
    for _ in range(8):
        curv = _horner(ddc, xv)
        if sign * curv >= 0:
            break  # at an end of the span, not at a turning point of p
        step = _horner(dc, xv) / curv
        if not (x_first <= xv - step <= x_last):
            break
        xv -= step
        if abs(step) < 1e-13:
            break
    return _horner(cl, xv)

#: Samples per piece searched for a segment's first arrival at its end level (it comes
#: within the transition, near the segment's start, as a rule).
ARRIVAL_PIECE = 4096


def _first_arrival(d: np.ndarray) -> int:
    """Index of the first sample of ``d`` (``d[0] != 0``) at or across 0 from ``d[0]``'s
    side (``sign(d[0]) * d <= 0``), or -1: searched piece by piece, so that the usual
    early arrival costs no pass over the whole segment."""
    above = d[0] > 0
    piece = ARRIVAL_PIECE
    for a in range(0, d.size, piece):
        part = d[a : a + piece]
        hit = part <= 0 if above else part >= 0
        k = int(hit.argmax())
        if hit[k]:
            return a + k
    return -1


def _sign_runs(d: np.ndarray, h: float) -> tuple[np.ndarray, np.ndarray]:
    """Starts and signs of the runs of ``d`` beyond ``+-h``, samples within it skipped:
    a run starts at each sample beyond the band whose last sample beyond it lay on the
    other side (or that is the first beyond it). Empty arrays when no sample is beyond.

    Found from the runs of equal state (+1, 0, -1; int8) rather than from the index of
    every sample beyond the band: a run of a sign starts where a run of equal state
    starts, so the starts of the equal-state runs holding +-1 whose state differs from
    the one before them are the same indices, far fewer to handle.
    """
    state = (d > h).view(np.int8) - (d < -h).view(np.int8)
    if state.size == 0:
        return np.empty(0, np.int64), np.empty(0, np.int8)
    idx = np.flatnonzero(state[1:] != state[:-1])
    idx += 1
    idx = np.concatenate(([0], idx))
    v = state[idx]
    held = v != 0
    idx, v = idx[held], v[held]
    if idx.size == 0:
        return idx, v
    first = np.flatnonzero(v[1:] != v[:-1])
    first += 1
    first = np.concatenate(([0], first))
    return idx[first], v[first]


def turning_point_level(
    y: np.ndarray, level0: float, noise: float
) -> tuple[float | None, int, float | None, str | None]:
    """Level that ringing converges to, from its last three turning points.

    Parameters
    ----------
    y : ndarray, shape (n,)
        The segment's samples (the first ones at the previous level, as a rule).
    level0 : float
        Provisional level (the end-window median): the turning points are the extremes
        of ``y - level0`` between its sign changes (with hysteresis of
        ``NOISE_HYSTERESIS`` noise deviations), counted from the first arrival at
        ``level0``, each refined by a least-squares polynomial. The last one does not
        count when it follows the one before sooner than ``SHORT_SWING`` times their
        spacing: the swings of ringing are equally long, and a short one at the end is
        the onset of the next transition bending the ringing back.
    noise : float
        Robust noise standard deviation.

    Returns
    -------
    level, count, residual, reason
        ``level`` is None (and ``reason`` says why) when there are fewer than three
        turning points or they do not alternate about the level with shrinking size;
        ``residual`` is the distance of the last of the three from ``level``.

    References
    ----------
    A. C. Aitken, Proc. Roy. Soc. Edinburgh 46 (1926): for a sequence converging
    geometrically, L = p3 - (p3 - p2)^2 / ((p3 - p2) - (p2 - p1)) is its limit.
    """
    d = np.asarray(y, dtype=np.float64) - level0
    if d.size < 5:
        return None, 0, None, "segment too short"
    if d[0] != 0:
        arrive = _first_arrival(d)
        if arrive < 0:
            return None, 0, None, "it never reaches its end level (no ringing about it)"
        d = d[arrive:]
    # the largest |d| without an |d| array: max(max d, -min d), the same value
    scale = max(abs(float(d.max())), abs(float(d.min()))) if d.size else 0.0
    h = max(NOISE_HYSTERESIS * noise, 1e-9 * scale)
    starts, signs = _sign_runs(d, h)
    if starts.size == 0:
        return None, 0, None, "no ringing above the noise"
    closed = starts.size - 1  # the last run is still open at the segment's end
    if closed >= 3:
        # extremes of the last three closed runs: a swing cut short is no swing of the
        # ringing (its extremes lie half a damped period apart: Ogata, sec. 5-3); at a
        # segment's end it is the next transition's onset bending the ringing back
        ks = [
            int(starts[r]) + int(np.argmax(signs[r] * d[starts[r] : starts[r + 1]]))
            for r in range(closed - 3, closed)
        ]
        if ks[2] - ks[1] < SHORT_SWING * (ks[1] - ks[0]):
            closed -= 1
    if closed < 3:
        return None, closed, None, f"only {closed} turning point(s) (three needed)"
    p = []
    for r in range(closed - 3, closed):
        a, b = int(starts[r]), int(starts[r + 1])
        k = a + int(np.argmax(signs[r] * d[a:b]))
        if k == 0:
            return None, closed, None, "a turning point lies at the segment's start"
        q = max(1, (b - a) // 3)
        p.append(_refined_extreme(d, k, q, int(signs[r])))
    p1, p2, p3 = p
    den = (p3 - p2) - (p2 - p1)
    if den == 0:
        return None, closed, None, "turning points do not converge"
    lim = p3 - (p3 - p2) ** 2 / den  # Aitken's delta-squared process
    e1, e2, e3 = p1 - lim, p2 - lim, p3 - lim
    if not (e1 * e2 < 0 and e2 * e3 < 0 and abs(e1) > abs(e2) > abs(e3)):
        return None, closed, None, "turning points do not alternate with shrinking size"
    return level0 + lim, closed, abs(e3), None


def analyse_segment(
    seg: Segment, y: np.ndarray, first: int, fraction: float, later: bool = False
) -> None:
    """Fill ``seg``'s measured fields from its samples ``y`` (global index of ``y[0]`` is
    ``first``; ``y`` ends at ``seg.end`` and may hold only the segment's last part).

    ``later``: ``y`` stays as it is after the pass (a view of a record held in memory), so
    the turning-point search, a dozen passes over the segment, runs only if its result is
    read (:meth:`Segment.decide` reads it for an end that has not settled); the result is
    the same whenever it runs."""
    n_seg = seg.length
    w_len = min(max(int(round(fraction * n_seg)), MIN_END_WINDOW), n_seg, y.size)
    w_len = max(w_len, 1)
    w = y[y.size - w_len :]
    seg.w_start = seg.end - w_len + 1
    seg.n_window = int(w_len)
    # one copy of the window, partitioned in place: first within each quarter (their
    # medians, below), then as a whole (a median does not depend on the samples' order)
    wc = np.array(w, dtype=np.float64)
    quarter_meds = None
    if w_len >= MIN_END_WINDOW:
        m = w_len // 4
        quarter_meds = [median_in_place(wc[i * m : (i + 1) * m]) for i in range(3)]
        quarter_meds.append(median_in_place(wc[3 * m :]))
    seg.median = median_in_place(wc)
    seg.end_value = median(w[-min(5, w.size) :])
    seg.noise = _robust_noise(w)
    dev = w - seg.median
    seg.rms_dev = float(np.sqrt(np.mean(dev * dev)))
    absdev = np.abs(dev, out=dev)
    # 1.4826 MAD: the standard deviation of normal noise (common practice, as above); unlike
    # the second differences it also counts slow noise and hum
    seg.peak_dev = float(np.max(absdev))
    seg.scatter = float(1.4826 * median_in_place(absdev))
    if y.size:
        k, starts = _back_points(y.size)
        # running maximum of |y - median| from the end back, read at k only: the largest of
        # each stretch up to the next k, then a running maximum of those (a max is exact,
        # so the same values as the running maximum over every sample, at a quarter the cost)
        # (one temporary, made absolute in place: the same values as np.abs(y - median))
        dev_back = np.subtract(y[::-1], seg.median)
        np.abs(dev_back, out=dev_back)
        stretch = np.maximum.reduceat(dev_back, starts)
        seg.back_k, seg.back_dev = k + 1, np.maximum.accumulate(stretch)
    if quarter_meds is not None:
        m = w_len // 4
        seg.quarters = tuple(quarter_meds)
        seg.drift = max(quarter_meds) - min(quarter_meds)
        # four medians of m normal samples: each has deviation ~1.2533 sigma / sqrt(m)
        # (asymptotic variance of the median, pi sigma^2 / (2 m)); allow +/- 2 of them
        seg.allowance = 4.0 * 1.2533 * seg.noise / math.sqrt(m)
    else:
        seg.quarters = ()
        seg.drift = float(np.ptp(w)) if w.size else 0.0
        seg.allowance = 0.0
    seg._turning, seg._turning_later = NO_TURNING, None
    if y.size >= MIN_END_WINDOW and seg.drift > seg.allowance:
        args = (y, seg.median, seg.noise)
        if later:
            seg._turning_later = args
        else:
            seg._turning = turning_point_level(*args)


class SegmentCollector:
    """Gathers one segment at a time from blocks fed in order and analyses it at its end.

    Parameters
    ----------
    segments : list of Segment
        Disjoint and in time order.
    fraction : float
        End-window fraction (see :func:`analyse_segment`).
    cap : int
        Most samples of one segment held (its last ones).
    lasting : sequence of ndarray
        Arrays the fed blocks may be views of that outlive the pass (a record held in
        memory): a segment that is a view of one of them has its turning-point search left
        until it is read (see :func:`analyse_segment`).
    """

    def __init__(
        self,
        segments: list[Segment],
        fraction: float,
        cap: int = DEFAULT_CAP,
        lasting: Sequence[np.ndarray] = (),
    ) -> None:
        self.segments = segments
        self.fraction = fraction
        self.cap = max(int(cap), MIN_END_WINDOW)
        self.lasting = lasting
        self.cur = 0
        self.parts: list[np.ndarray] = []
        self.held = 0
        self.first = 0

    def _flush(self) -> None:
        seg = self.segments[self.cur]
        # the segment's samples: a view where its parts lie one after the other in one
        # record held in memory (analyse_segment only reads them), else a copy
        y = joined_1d(self.parts) if self.parts else np.empty(0)
        if y.size:
            # a view of an array that outlives the pass (``lasting``) may wait for its
            # turning-point search: holding it costs no memory
            root = array_root(y)
            later = any(root is k for k in self.lasting)
            analyse_segment(seg, y, self.first, self.fraction, later)
        self.parts, self.held = [], 0
        self.cur += 1

    @property
    def done(self) -> bool:
        """True once every segment has been analysed."""
        return self.cur >= len(self.segments)

    def feed(self, y: np.ndarray, start: int) -> None:
        last = start + y.size - 1
        while self.cur < len(self.segments):
            seg = self.segments[self.cur]
            if seg.start > last:
                return
            lo, hi = max(seg.start, start), min(seg.end, last)
            if lo <= hi:
                if not self.parts:
                    self.first = lo
                # a view (no copy): the passes' blocks are never written to, and the
                # segment's samples are joined into one new array when it ends
                self.parts.append(np.asarray(y[lo - start : hi - start + 1], dtype=np.float64))
                self.held += hi - lo + 1
                if self.held > 2 * self.cap:
                    keep = np.concatenate(self.parts)[-self.cap :]
                    self.first = hi - keep.size + 1
                    self.parts, self.held = [keep], keep.size
            if seg.end > last:
                return
            if self.held > self.cap:
                keep = np.concatenate(self.parts)[-self.cap :]
                self.first = seg.end - keep.size + 1
                self.parts, self.held = [keep], keep.size
            self._flush()

    def finish(self) -> None:
        while self.cur < len(self.segments):
            self._flush()


def segments_between(
    edges: list,
    n: int,
    lead: float = 0.0,
    *,
    delay: int = 0,
    stops: list | None = None,
) -> list[Segment]:
    """Segments of a record cut by transitions (objects with ``k_start``, ``j`` and
    ``direction``): before the first, between each pair, after the last. A segment runs
    from the end of one transition (its far reference level instant ``j``) to the start
    of the next (its near reference level sample ``k_start``), so it holds one state.

    ``lead``: end each segment this many times the next transition's duration (``j -
    k_start``) earlier, so that the part of a slow transition before its near reference
    level (a linear edge spends 1/8 of its 10-90 % time below 10 %, a quarter of its
    25-75 % time below 25 %) stays out of the level window.

    ``delay``: move every cut this many samples later (each segment's end and the next
    one's start): the cuts are the transitions of an input, and the output starts to
    answer them only this long after (its response onset delay). ``stops``: for each
    transition, the last sample the segment before it may reach (the output's own
    transition has begun there), or None.
    """
    segs: list[Segment] = []
    lo = 0
    for i, e in enumerate(edges):
        early = int(math.ceil(lead * max(int(e.j) - int(e.k_start), 0)))
        hi = int(e.k_start) - early + int(delay)
        if stops is not None and stops[i] is not None:
            hi = min(hi, int(stops[i]))
        hi = max(hi, lo)
        state = 0 if e.direction > 0 else 1
        segs.append(Segment(i, lo, min(hi, n - 1), state))
        lo = min(int(e.j) + int(delay), n - 1)
        if lo <= hi:
            lo = min(hi + 1, n - 1)
    last_state = (1 if edges[-1].direction > 0 else 0) if edges else -1
    segs.append(Segment(len(edges), lo, n - 1, last_state))
    return segs


#: The output has left a settled state once it is farther from its level than this
#: fraction of the settling band's half-width (a response smaller than that cannot move it
#: across the band's edge by more than as much; our choice) ...
ONSET_BAND_FRACTION = 0.1
#: ... or, when noise or leftover ringing is larger, than this many robust deviations of the
#: state's end window about its median (our choice; with ``ONSET_RUN`` samples in a row
#: needed beyond it, normal noise does it less than once in 10^8 tries) ...
ONSET_MARGIN = 3.0
#: ... but a state whose noise asks for more than this fraction of the band's half-width
#: cannot show where the output leaves it without letting that much of the response in.
ONSET_BAND_MAX = 0.5


def onset_threshold(before: Segment, amplitude: float, band_pct: float) -> float | None:
    """Distance from a settled segment's level beyond which the output has left that state:
    ``ONSET_BAND_FRACTION`` of the settling band's half-width, or ``ONSET_MARGIN`` robust
    deviations of its end window about its median when that is larger (noise, hum,
    leftover ringing); None when that exceeds ``ONSET_BAND_MAX`` of the half-width (the
    state is too noisy for the band to tell where the output leaves it)."""
    tol = band_pct / 100.0 * abs(amplitude)
    thr = max(ONSET_MARGIN * before.scatter, ONSET_BAND_FRACTION * tol)
    return thr if thr <= ONSET_BAND_MAX * tol else None


#: Samples in a row, on one side, beyond the onset threshold: where the output has left its
#: state (a lone noise sample does not; three white-noise samples in a row beyond three
#: deviations on one side: (1.35e-3)^3, about 2.5e-9; our choice).
ONSET_RUN = 3


class DepartureSearch:
    """First sample of the first run of ``ONSET_RUN`` samples in a row on one side of
    ``level``, each farther from it than ``threshold``: where the output leaves a state
    (either way, so that a preshoot counts). Feed blocks in order with :meth:`feed`;
    ``found`` is that global index, or -1.
    """

    def __init__(self, level: float, threshold: float) -> None:
        self.level, self.threshold = level, threshold
        self.found = -1
        self._side = 0  # side and length of the run open at the end of the last block
        self._run = 0
        self._run_start = -1

    def feed(self, y: np.ndarray, start: int) -> None:
        if self.found >= 0 or y.size == 0:
            return
        dev = y - self.level
        side = np.where(dev > self.threshold, 1, np.where(dev < -self.threshold, -1, 0))
        # run starts: a sample whose side differs from the one before (or the block's first)
        prev = np.concatenate(([self._side], side[:-1]))
        new = side != prev
        idx = np.arange(side.size)
        first = np.where(new, idx, 0)
        np.maximum.accumulate(first, out=first)  # local start of the run each sample is in
        length = idx - first + 1
        carried = first == 0
        if self._side != 0:
            length = np.where(carried & (side == self._side), length + self._run, length)
        hit = np.flatnonzero((side != 0) & (length >= ONSET_RUN))
        if hit.size:
            k = int(hit[0])
            if carried[k] and self._side != 0 and side[k] == self._side:
                self.found = self._run_start
            else:
                self.found = start + int(first[k])
            return
        last_first = int(first[-1])
        if side[-1] == 0:
            self._side, self._run, self._run_start = 0, 0, -1
        elif last_first == 0 and self._side == side[-1]:
            self._run += side.size
        else:
            self._side, self._run = int(side[-1]), side.size - last_first
            self._run_start = start + last_first


#: Level methods from the most to the least trustworthy.
QUALITY = (
    METHOD_END, METHOD_REST, METHOD_EXTRAPOLATED, METHOD_APPROACHING, METHOD_UNSETTLED
)


def pooled_level(segs: list[Segment], state: int) -> tuple[float | None, str | None, bool]:
    """One state's level from its segments: the median of the levels found by the most
    trustworthy method any of them has (settled ends before extrapolations before
    still-approaching ends before unsettled ones), that method, and whether they were
    all settled."""
    mine = [s for s in segs if s.state == state and math.isfinite(s.level)]
    if not mine:
        return None, None, False
    best = min(QUALITY.index(s.method) for s in mine)
    use = [s for s in mine if QUALITY.index(s.method) == best]
    return float(np.median([s.level for s in use])), QUALITY[best], best <= 1
