"""simwave.measure: the passes over the record and the assembly of the result.

Memory: the record is read in blocks (``block_size`` samples) in several passes
(1: count, range, NaN check; 2: level histograms and the steady-state window;
without a reference input, up to four more for the output's own state intervals
(transitions, segment ends, twice; the first segment pass stops after 64 segments);
3: transitions; with a reference input, two more for the input-aligned segment ends
and each input transition's output transition, and, when the output answers the input
late, three more (its response onset delay, then the segment ends and output
transitions again on segments cut that much later); 4: crossing values and
aberration/settling regions). Held at once: one block per stream, one histogram of
32768 counts per channel, the steady-state window (the last ``steady_fraction`` of
the record, at most ``max_window_samples`` samples per channel), one segment per
channel (at most ``max_window_samples`` samples: its last ones) and the lists of
transitions and segments.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, fields
from typing import Any

import numpy as np

from simwave.errors import MeasurementError
from simwave.measure import levels as lv
from simwave.measure import plateaus as pl
from simwave.measure import quality
from simwave.measure import segments as seg
from simwave.measure import steady as st
from simwave.measure.predict import Predictions, compare_rows, predictions_for
from simwave.measure.result import MeasurementResult
from simwave.measure.source import MeasureSource
from simwave.measure.transient import (
    WORST_IS_MAX,
    Edge,
    EdgeFinder,
    EdgeRegions,
    pulse_table,
    summarize,
)

from simwave.measure.kinds import SIGNAL_KINDS  # noqa: E402 - re-exported

#: A waveform counts as two-state when at least this fraction of its samples lies
#: within 10 % of the amplitude of one of its state levels (our choice; a sine has
#: about 41 %, a clean pulse train nearly 100 %).
TWO_STATE_FRACTION = 0.5
#: A sine (or a set of tones) is taken as present when the fit accounts for this
#: fraction of the AC power (auto detection) ...
SINE_AUTO_EXPLAINED = 0.9
#: ... and at least this fraction when a sine fit is asked for (SINAD >= 0 dB).
SINE_MIN_EXPLAINED = 0.5
#: A window is a ramp when a straight line explains this fraction of its variance.
RAMP_R2 = 0.999
#: Most samples of the steady-state window the sine and tone fits use (its last ones).
FIT_MAX = 1 << 16
#: Fewest samples a steady-state window may have.
MIN_WINDOW = 8
#: A level change smaller than this fraction of the channel's range is no transition
#: (input-aligned segments: the output did not follow that input transition; our choice).
NO_CHANGE_FRACTION = 0.05
#: Input-aligned segments end this many times the next input transition's 10-90 % time
#: before its start (a linear edge spends 1/8 of its 10-90 % time below 10 %).
INPUT_LEAD = 0.125
#: Without a reference input, the first round of output state intervals looks at this
#: many (the second, on the levels they give, at all of them).
FIRST_ROUND_SEGMENTS = 64


def _established(*methods: str | None) -> bool:
    """Levels found settled or extrapolated from ringing: the record establishes them."""
    return all(m in (seg.METHOD_END, seg.METHOD_EXTRAPOLATED, seg.METHOD_REST) for m in methods)


def _turns_inside_band(after: seg.Segment, r: EdgeRegions, allowance: float) -> bool:
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


def _method_text(m_low: str | None, m_high: str | None, basis: str) -> str:
    """How a pair of state levels was found, e.g. "segment end (input-aligned)"."""
    if m_low == m_high:
        return f"{m_low} ({basis})"
    return f"low: {m_low}, high: {m_high} ({basis})"


@dataclass
class MeasureOptions:
    """Options of :func:`simwave.measure.measure` (all keyword arguments)."""

    reference_levels_pct: tuple = (10.0, 50.0, 90.0)
    settling_band_pct: float = 2.0
    harmonics: int = 10
    sine_hz: float | None = None
    tones_hz: list | None = None
    steady_fraction: float = 0.25
    state_level_method: str = "histogram"
    segment_end_fraction: float = seg.SEGMENT_END_FRACTION
    signal_kind: str = "auto"
    reference_channel: Any = None
    discrete: Any = None
    gain_tolerance_db: float = 0.1
    phase_tolerance_deg: float = 1.0
    overshoot_tolerance_pct: float = 1.0
    time_tolerance_pct: float = 2.0
    block_size: int = 65536
    max_window_samples: int = 1_000_000
    read_options: dict = field(default_factory=dict)
    reference_read_options: dict | None = None
    rest_before_record: bool = True

    @classmethod
    def from_kwargs(cls, opts: dict) -> "MeasureOptions":
        known = {f.name for f in fields(cls)}
        unknown = sorted(set(opts) - known)
        if unknown:
            raise MeasurementError(
                f"unknown measurement option {unknown[0]!r}; known: {', '.join(sorted(known))}"
            )
        o = cls(**opts)
        o.validate()
        return o

    def validate(self) -> None:
        lv.check_percentages(self.reference_levels_pct, self.settling_band_pct)
        self.reference_levels_pct = tuple(float(p) for p in self.reference_levels_pct)
        self.settling_band_pct = float(self.settling_band_pct)
        if self.state_level_method not in lv.STATE_LEVEL_METHODS:
            raise MeasurementError(
                f"unknown state-level method {self.state_level_method!r}; use one of "
                f"{', '.join(lv.STATE_LEVEL_METHODS)}"
            )
        if self.signal_kind not in SIGNAL_KINDS:
            raise MeasurementError(
                f"unknown signal kind {self.signal_kind!r}; use one of {', '.join(SIGNAL_KINDS)}"
            )
        if not (isinstance(self.harmonics, (int, np.integer)) and 2 <= self.harmonics <= 1000):
            raise MeasurementError(
                f"harmonics must be a whole number from 2 to 1000, got {self.harmonics!r}"
            )
        frac = float(self.steady_fraction)
        if not (0.0 < frac <= 1.0):
            raise MeasurementError(f"steady-state fraction must be in (0, 1], got {frac:g}")
        self.steady_fraction = frac
        try:
            sef = float(self.segment_end_fraction)
        except (TypeError, ValueError):
            raise MeasurementError(
                f"segment end fraction must be a number in (0, 0.5], got "
                f"{self.segment_end_fraction!r}"
            ) from None
        if not (0.0 < sef <= 0.5):
            raise MeasurementError(f"segment end fraction must be in (0, 0.5], got {sef:g}")
        self.segment_end_fraction = sef
        if self.sine_hz is not None:
            f = float(self.sine_hz)
            if not (f > 0 and math.isfinite(f)):
                raise MeasurementError(
                    f"sine frequency must be a positive number of hertz, got {self.sine_hz!r}"
                )
            self.sine_hz = f
        if self.tones_hz is not None:
            tones = [float(f) for f in self.tones_hz]
            if not tones or any(not (f > 0 and math.isfinite(f)) for f in tones):
                raise MeasurementError(
                    f"tone frequencies must be positive numbers of hertz, got {self.tones_hz!r}"
                )
            self.tones_hz = sorted(tones)
        for name in (
            "gain_tolerance_db",
            "phase_tolerance_deg",
            "overshoot_tolerance_pct",
            "time_tolerance_pct",
        ):
            v = float(getattr(self, name))
            if not (v >= 0 and math.isfinite(v)):
                raise MeasurementError(f"{name} must be >= 0, got {v:g}")
            setattr(self, name, v)
        if int(self.block_size) < 16:
            raise MeasurementError(f"block_size must be at least 16 samples, got {self.block_size}")
        self.block_size = int(self.block_size)
        self.max_window_samples = max(int(self.max_window_samples), MIN_WINDOW)

    def to_dict(self) -> dict:
        return {
            "reference_levels_pct": list(self.reference_levels_pct),
            "settling_band_pct": self.settling_band_pct,
            "harmonics": int(self.harmonics),
            "sine_hz": self.sine_hz,
            "tones_hz": self.tones_hz,
            "steady_fraction": self.steady_fraction,
            "state_level_method": self.state_level_method,
            "segment_end_fraction": self.segment_end_fraction,
            "signal_kind": self.signal_kind,
            "reference_channel": self.reference_channel,
            "gain_tolerance_db": self.gain_tolerance_db,
            "phase_tolerance_deg": self.phase_tolerance_deg,
            "overshoot_tolerance_pct": self.overshoot_tolerance_pct,
            "time_tolerance_pct": self.time_tolerance_pct,
            "rest_before_record": bool(self.rest_before_record),
        }


# ---------------------------------------------------------------------------- passes
@dataclass
class _Scan:
    n: int = 0
    lo: np.ndarray | None = None
    hi: np.ndarray | None = None
    sum: np.ndarray | None = None
    sumsq: np.ndarray | None = None


def _scan(arrays, label: str, channels: list[str], rate: float, t0: float) -> _Scan:
    """Pass 1: sample count, range, sums; stops at the first NaN or infinity."""
    s = _Scan()
    for blk in arrays:
        bad = ~np.isfinite(blk)
        if bad.any():
            r, c = np.argwhere(bad)[0]
            i = s.n + int(r)
            raise MeasurementError(
                f"{label}: channel {channels[c]!r}, sample {i} (t = {t0 + i / rate:.6g} s): "
                f"value is {blk[r, c]!r}; measurements need finite samples"
            )
        if blk.shape[0] == 0:
            continue
        lo, hi = blk.min(axis=0), blk.max(axis=0)
        if s.lo is None:
            s.lo, s.hi = lo, hi
            s.sum, s.sumsq = blk.sum(axis=0), (blk * blk).sum(axis=0)
        else:
            s.lo, s.hi = np.minimum(s.lo, lo), np.maximum(s.hi, hi)
            s.sum += blk.sum(axis=0)
            s.sumsq += (blk * blk).sum(axis=0)
        s.n += blk.shape[0]
    return s


@dataclass
class _Chan:
    """Working state of one channel (output or reference) through the passes."""

    name: str
    unit: str
    lo: float
    hi: float
    mean: float
    rms: float
    levels: lv.StateLevels | None = None
    two_state_fraction: float = 0.0
    refs: tuple | None = None
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
    _seg_starts: np.ndarray | None = None

    @property
    def constant(self) -> bool:
        return self.hi == self.lo

    @property
    def fit_window(self) -> np.ndarray:
        """The last part of the steady-state window the sine and tone fits use (their cost
        grows with it; ``FIT_MAX`` samples are thousands of cycles of an audio tone)."""
        return self.window if self.window.size <= FIT_MAX else self.window[-FIT_MAX:]


def measure(
    waveform: Any, reference: Any = None, system: Any = None, **opts: Any
) -> MeasurementResult:
    """Measure what a waveform did: transient and steady-state metrics, and H(s) predictions.

    Parameters
    ----------
    waveform : Waveform, numpy array or path
        The record to measure, usually a system's output. A path is read block by block
        with :func:`simwave.blocks` (``read_options`` are passed on). A plain numpy array
        (1-D: one channel; 2-D: rows are samples) needs ``rate=`` (Hz), which also
        applies to a numpy array ``reference``.
    reference : Waveform, numpy array or path, optional
        The input that produced it: same rate and length; one channel (used for every
        output channel) or one per output channel. Input transitions give the time origin
        for delay, peak and settling times; input levels give steady-state gain and error;
        an input sine or multi-tone gives gain and phase.
    system : System, optional
        The continuous-time model; its predictions (H(0), H(j2 pi f), second-order
        overshoot and peak time) are set beside the measured values.
    **opts
        ``reference_levels_pct`` (10, 50, 90); ``settling_band_pct`` (2.0, percent of
        amplitude); ``harmonics`` (10: THD over harmonics 2..10); ``sine_hz`` (known sine
        frequency: three-parameter fit; else estimated: four-parameter fit); ``tones_hz``
        (tone list for multi-tone input; else detected in the input's spectrum);
        ``steady_fraction`` (0.25: the steady-state window is this last part of the
        record); ``state_level_method`` ("histogram": IEEE Std 181 histogram, with levels
        per transition from the settled ends of the input-aligned segments when a
        reference input has transitions, and checked against the ends of the output's
        own state intervals without one; "segment": those segment ends wherever found;
        "minmax": smallest and largest sample only; the method used is reported);
        ``segment_end_fraction`` (0.2: the part of a segment, at its end, whose median is
        its level; with a reference input a segment ends where the output starts to answer
        the next input transition: where the input starts to move plus the output's
        response onset delay, ``state_levels.response_onset_delay_s``);
        ``signal_kind`` ("auto",
        "transitions", "sine", "multitone", "ramp", "other"); ``reference_channel`` (take
        the input from this channel of ``waveform``); ``discrete`` (a DiscreteSystem: its
        accuracy report sets the tolerances); ``gain_tolerance_db`` (0.1),
        ``phase_tolerance_deg`` (1.0), ``overshoot_tolerance_pct`` (1.0 percentage point),
        ``time_tolerance_pct`` (2.0) for flagging measured-vs-predicted differences;
        ``block_size``; ``max_window_samples``; ``read_options`` (for a file ``waveform``,
        and for a file ``reference`` unless ``reference_read_options`` is given).

    Returns
    -------
    MeasurementResult
        ``.to_dict()``, ``.to_json()``, ``.format()``; see :mod:`simwave.measure`.

    Raises
    ------
    MeasurementError
        Empty record, NaN or infinite samples, every channel constant, a reference of
        another rate or length, levels or band outside (0, 100) %, a sine asked for where
        there is none, unknown options.

    References
    ----------
    IEEE Std 181-2011 (transitions, pulses, state levels, aberrations, settling; state
    levels by other methods than the histogram allowed when stated);
    A. C. Aitken, Proc. Roy. Soc. Edinburgh 46 (1926) (delta-squared extrapolation of
    ringing turning points, :mod:`simwave.measure.segments`);
    IEEE Std 1057-2017 (sine fits, THD, SINAD); K. Ogata, *Modern Control Engineering*,
    5th ed., sec. 5-3 (second-order step response: overshoot and peak time).
    """
    from simwave.signals.waveform import as_waveform

    rate = opts.pop("rate", None)
    waveform = as_waveform(waveform, rate, "waveform")
    reference = as_waveform(reference, rate, "reference")
    o = MeasureOptions.from_kwargs(opts)
    if isinstance(system, str):
        from simwave.model.system import System

        parse = getattr(System, "parse", None)
        if parse is None:
            raise MeasurementError(
                "system text cannot be parsed in this installation; pass a System"
            )
        system = parse(system)
    src = MeasureSource(
        waveform,
        reference,
        o.reference_channel,
        o.block_size,
        o.read_options,
        o.reference_read_options,
    )
    m = _Measurement(src, system, o)
    if o.rest_before_record and src.prepend_rest_sample():
        m.rest_sample = True
        m.t0 = src.t0
        m.notes.append(
            "at-rest convention: the input and output are 0 before the record, and the input's "
            "first sample is not, so the input steps at the first sample; one sample of 0 is "
            "counted before the record (rest_before_record=False to drop the convention)"
        )
    return m.run()


class _Measurement:
    def __init__(self, src: MeasureSource, system: Any, o: MeasureOptions) -> None:
        self.src, self.system, self.o = src, system, o
        self.rate, self.t0 = src.rate, src.t0
        self.notes: list[str] = []
        self.rest_sample = False  # one sample of 0 put before the record (at-rest convention)

    # ------------------------------------------------------------------ helpers
    def t(self, idx: float) -> float:
        """Absolute time (s) of a fractional sample index."""
        return self.t0 + idx / self.rate

    def ref_for(self, c: int) -> int | None:
        if not self.refs:
            return None
        return 0 if len(self.refs) == 1 else c

    # ------------------------------------------------------------------ main
    def run(self) -> MeasurementResult:
        src, o = self.src, self.o
        oi = src.out.info
        s_out = _scan(src.out.arrays(), oi.label, oi.channels, self.rate, self.t0)
        if s_out.n == 0:
            raise MeasurementError(f"{oi.label}: no samples to measure")
        n = self.n = s_out.n
        self.outs = self._chans(s_out, oi.channels, oi.units)
        self.refs: list[_Chan] = []
        if src.ref is not None:
            ri = src.ref.info
            s_ref = _scan(src.ref.arrays(), ri.label, ri.channels, self.rate, self.t0)
            if s_ref.n != n:
                raise MeasurementError(
                    f"{ri.label}: the reference has {s_ref.n} samples, the output {n} "
                    f"({oi.label}); they must be the same length"
                )
            if len(ri.channels) not in (1, len(oi.channels)):
                raise MeasurementError(
                    f"{ri.label}: the reference has {len(ri.channels)} channels; give one, "
                    f"or one per output channel ({len(oi.channels)})"
                )
            self.refs = self._chans(s_ref, ri.channels, ri.units)
        if all(c.constant for c in self.outs):
            vals = ", ".join(f"{c.name} = {c.lo:g}" for c in self.outs)
            raise MeasurementError(f"{oi.label}: constant waveform ({vals}): nothing to measure")
        w_len = min(max(int(round(o.steady_fraction * n)), 1), o.max_window_samples)
        self.w_start = n - w_len
        if w_len < n * o.steady_fraction - 0.5:
            self.notes.append(f"steady-state window capped at {w_len} samples (max_window_samples)")
        self.regions: dict[int, list[EdgeRegions]] = {}
        self.pre_step_value: dict[int, float] = {}
        self._values: dict[int, dict[int, float]] = {}
        self._pass_levels()
        self._levels_from_output_intervals()
        self._classify()
        self._pass_edges()
        self._input_aligned_levels()
        self._pass_regions()
        self.pred = predictions_for(self.system, self.o, self.rate)
        return MeasurementResult(self._assemble())

    def _chans(self, s: _Scan, names, units) -> list[_Chan]:
        out = []
        for c in range(len(names)):
            mean = float(s.sum[c] / s.n)
            rms = math.sqrt(max(float(s.sumsq[c] / s.n), 0.0))
            out.append(_Chan(names[c], units[c], float(s.lo[c]), float(s.hi[c]), mean, rms))
        return out

    def _pass_levels(self) -> None:
        """Pass 2: level histograms and the steady-state window."""
        chans = self.outs + self.refs
        hist = lv.LevelHistogram(np.array([c.lo for c in chans]), np.array([c.hi for c in chans]))
        parts: list[list[np.ndarray]] = [[] for _ in chans]
        n_out = len(self.outs)
        wsize = pl.window_size(self.n, self.rate)
        for ch in chans:
            ch.windows = pl.WindowStats(wsize)
        for start, a, b in self.src.blocks():
            blk = a if b is None else np.concatenate([a, b], axis=1)
            hist.add(blk)
            for i, ch in enumerate(chans):
                ch.windows.feed(blk[:, i])
            end = start + blk.shape[0]
            if end > self.w_start:
                lo = max(self.w_start - start, 0)
                for c in range(len(chans)):
                    parts[c].append(blk[lo:, c].copy())
        for c, ch in enumerate(chans):
            ch.window = np.concatenate(parts[c]) if parts[c] else np.empty(0)
            if ch.constant:
                ch.null_reasons["state_levels"] = f"constant channel (every sample is {ch.lo:g})"
                continue
            ch.levels = lv.state_levels(hist, c, self.o.state_level_method)
            half = 0.1 * ch.levels.amplitude
            ch.two_state_fraction = hist.fraction_near(c, (ch.levels.low, ch.levels.high), half)
            ch.refs = lv.reference_values(ch.levels, self.o.reference_levels_pct)
            ch.disturbance_pp = pl.quiet_span(ch.windows)
            if c >= n_out and self.o.state_level_method != "minmax":
                self._staircase(ch)
        self.hist = hist
        self._n_out = n_out

    def _staircase(self, ch: _Chan) -> None:
        """A reference of more than two levels, or of two with hum or noise that keeps its
        samples away from them, is measured transition by transition between its plateaus."""
        sc = pl.find_plateaus(ch.windows, self.n, rest_first=self.rest_sample)
        ch.staircase = sc
        if not sc.usable():
            return
        if ch.two_state_fraction >= TWO_STATE_FRACTION and sc.n_levels <= 2:
            return  # two clean states: the histogram's levels serve every transition
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
        ch.refs = lv.reference_values(ch.levels, self.o.reference_levels_pct)

    # ------------------------------------------------------------------ segment levels
    def _collect(self, segs_by_c: dict[int, list]) -> None:
        """One pass: each output channel's segments analysed at their ends (the pass stops
        early once every list is done)."""
        cols = {
            c: seg.SegmentCollector(ss, self.o.segment_end_fraction, self.o.max_window_samples)
            for c, ss in segs_by_c.items()
            if ss
        }
        if not cols:
            return
        for start, a, _b in self.src.blocks():
            for c, col in cols.items():
                col.feed(a[:, c], start)
            if all(col.done for col in cols.values()):
                break
        for col in cols.values():
            col.finish()

    def _find_edges(
        self, refs_by_c: dict[int, tuple], limit: int | None = None
    ) -> dict[int, list[Edge]]:
        """One pass: transitions of output channels with the given reference levels (the
        first ``limit`` of each; the pass stops once every channel has them)."""
        finders = {c: EdgeFinder(*r) for c, r in refs_by_c.items()}
        if finders:
            for start, a, _b in self.src.blocks():
                for c, f in finders.items():
                    if limit is None or len(f.edges) < limit:
                        f.feed(a[:, c], start)
                if limit is not None and all(len(f.edges) >= limit for f in finders.values()):
                    break
        return {c: f.edges[:limit] for c, f in finders.items()}

    def _min_change(self, ch: _Chan) -> float:
        """Smallest level change that counts as a transition of this channel."""
        return NO_CHANGE_FRACTION * (ch.hi - ch.lo)

    def _decide(self, segs: list, ch: _Chan, strict: bool = True) -> None:
        """Each segment's level, its settling judged against the transitions beside it."""
        meds = [s.median for s in segs]
        floor = self._min_change(ch)
        for i, s in enumerate(segs):
            amps = [abs(meds[k] - meds[i]) for k in (i - 1, i + 1) if 0 <= k < len(segs)]
            # a still-approaching end moves away from the level before (the one after,
            # for the first segment)
            other = i - 1 if i > 0 else i + 1
            away = int(np.sign(meds[i] - meds[other])) if 0 <= other < len(segs) else 0
            s.decide(max(amps + [floor]), self.o.settling_band_pct, away, strict=strict)
            if self.rest_sample and s.start == 0 and s.length < seg.MIN_END_WINDOW:
                # the segment before a step at the first sample: only the sample of 0 put
                # before the record (and the output's first answer-free samples); its level
                # is the at-rest convention's 0
                s.level, s.method, s.settled, s.note = 0.0, seg.METHOD_REST, True, None

    def _levels_from_output_intervals(self) -> None:
        """Without a reference input: the state levels from the ends of the output's own
        state intervals, to check the histogram against (and replace it where ringing fools
        it). Transitions are found first with wide hysteresis (25/75 % of the histogram or
        min/max levels), the intervals' ends give levels, the transitions are found again
        on those, and the intervals' ends measured again."""
        o = self.o
        if o.state_level_method == "minmax":
            return
        forced_other = o.signal_kind not in ("auto", "transitions") or (
            o.signal_kind == "auto" and (o.sine_hz is not None or o.tones_hz is not None)
        )
        if forced_other:
            return
        cands = [
            c
            for c, ch in enumerate(self.outs)
            if self.ref_for(c) is None and ch.levels is not None and not ch.constant
        ]
        if not cands:
            return
        refs = {c: lv.reference_values(self.outs[c].levels, (25.0, 50.0, 75.0)) for c in cands}
        found: dict[int, tuple] = {}
        for rnd in range(2):
            edges = self._find_edges(refs, FIRST_ROUND_SEGMENTS if rnd == 0 else None)
            # end each segment where a linear edge would leave the level: a quarter of
            # the 25-75 % time before the wide provisional transitions, an eighth of the
            # 10-90 % time before the final ones
            lead = 0.25 if rnd == 0 else 0.125
            segs = {c: seg.segments_between(e, self.n, lead) for c, e in edges.items() if e}
            if rnd == 0:
                # the first segments are enough for provisional levels, and tell a two-state
                # waveform from a sine (whose segments never settle) at little cost
                segs = {c: ss[:FIRST_ROUND_SEGMENTS] for c, ss in segs.items()}
            self._collect(segs)
            found = {}
            for c, ss in segs.items():
                # the first round's levels are provisional (the segments are cut on the
                # histogram's levels): a turning-point end is not refused there
                self._decide(ss, self.outs[c], strict=rnd > 0)
                low, m_low, _ = seg.pooled_level(ss, 0)
                high, m_high, _ = seg.pooled_level(ss, 1)
                if low is None or high is None or not high - low > self._min_change(self.outs[c]):
                    continue
                if rnd == 0 and not _established(m_low, m_high):
                    continue  # the ends of the segments establish no state
                found[c] = (low, high, m_low, m_high, ss)
            if not found:
                return
            refs = {
                c: lv.reference_values(lv.StateLevels(f[0], f[1], ""), o.reference_levels_pct)
                for c, f in found.items()
            }
        for c, (low, high, m_low, m_high, ss) in found.items():
            self._choose_interval_levels(c, low, high, m_low, m_high, ss)

    def _choose_interval_levels(self, c, low, high, m_low, m_high, ss) -> None:
        ch, o = self.outs[c], self.o
        hist = ch.levels
        established = _established(m_low, m_high)
        if not established and o.state_level_method != "segment":
            return  # the intervals' ends are no better than the histogram
        ch.established = established
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
        method = _method_text(m_low, m_high, "output state intervals")
        ch.levels = lv.StateLevels(low, high, method, note=why)
        ch.refs = lv.reference_values(ch.levels, o.reference_levels_pct)
        ch.two_state_fraction = self.hist.fraction_near(c, (low, high), 0.1 * amp)
        ch.segments, ch.level_mode = ss, "output state intervals"

    # ------------------------------------------------------------------ kinds
    def _window_t(self, m: int) -> np.ndarray:
        # the window (or its last part, for fits) ends at the record's last sample
        return (self.n - m + np.arange(m, dtype=np.float64)) / self.rate

    def _auto_kind(self, ch: _Chan, is_reference: bool) -> str:
        if ch.constant:
            return "constant"
        if ch.two_state_fraction >= TWO_STATE_FRACTION or ch.established or ch.multilevel:
            return "transitions"
        y = ch.fit_window
        if y.size >= MIN_WINDOW and np.ptp(y) > 0:
            t = self._window_t(y.size)
            # a straight line first: a slow sine fits a short stretch of ramp too
            if st.line_fit(y, t)[2] >= RAMP_R2:
                return "ramp"
            if is_reference:
                tones = st.find_tones(y, self.rate)
                if len(tones) >= 2:
                    fit = st.fit_tones(y, t, tones, refine=True)
                    if fit.explained >= SINE_AUTO_EXPLAINED:
                        return "multitone"
            try:
                f0 = st.spectrum_peak_hz(y, self.rate)
                fit = st.fit_tones(y, t, [f0], refine=True)
                if fit.explained >= SINE_AUTO_EXPLAINED and fit.tones[0].frequency_hz > 0:
                    return "sine"
            except MeasurementError:
                pass
            if not is_reference:
                tones = st.find_tones(y, self.rate)
                if len(tones) >= 2:
                    fit = st.fit_tones(y, t, tones, refine=True)
                    if fit.explained >= SINE_AUTO_EXPLAINED:
                        return "multitone"
        return "other"

    def _classify(self) -> None:
        o = self.o
        forced = o.signal_kind != "auto"
        if o.tones_hz is not None and not forced:
            forced, kind_opt = True, "multitone"
        elif o.sine_hz is not None and not forced:
            forced, kind_opt = True, "sine"
        else:
            kind_opt = o.signal_kind
        for r in self.refs:
            r.kind = kind_opt if forced else self._auto_kind(r, True)
            r.kind_source = "option" if forced else "input"
        for c, ch in enumerate(self.outs):
            ri = self.ref_for(c)
            if forced:
                ch.kind, ch.kind_source = kind_opt, "option"
            elif ri is not None:
                ch.kind, ch.kind_source = self.refs[ri].kind, "input"
            else:
                ch.kind, ch.kind_source = self._auto_kind(ch, False), "output"
            if ch.kind == "constant" and ri is None:
                ch.kind = "other"
        if forced and kind_opt in ("sine", "multitone"):
            # a sine asked for: it must be there (in the input, else in the output)
            for ch in self.refs or self.outs:
                self._require_sine(ch, kind_opt)

    def _require_sine(self, ch: _Chan, kind: str) -> None:
        y = ch.fit_window
        if y.size < MIN_WINDOW or ch.constant or np.ptp(y) == 0:
            raise MeasurementError(
                f"channel {ch.name!r}: no sine: the steady-state window is flat or too short"
            )
        t = self._window_t(y.size)
        if kind == "sine":
            f = self.o.sine_hz or st.spectrum_peak_hz(y, self.rate)
            fit = st.fit_tones(y, t, [f], refine=self.o.sine_hz is None)
        elif self.o.tones_hz is not None:
            return  # a given tone list is measured as it is
        else:
            tones = st.find_tones(y, self.rate)
            if not tones:
                raise MeasurementError(f"channel {ch.name!r}: no tones found in its spectrum")
            fit = st.fit_tones(y, t, tones, refine=True)
        if fit.explained < SINE_MIN_EXPLAINED:
            what = "sine" if kind == "sine" else "tones"
            raise MeasurementError(
                f"channel {ch.name!r}: no {what} present: the fit accounts for only "
                f"{100 * fit.explained:.1f} % of its AC power in the steady-state window"
            )

    # ------------------------------------------------------------------ pass 3
    def _pass_edges(self) -> None:
        chans = self.outs + self.refs
        active = [
            i for i, ch in enumerate(chans) if ch.kind == "transitions" and ch.refs is not None
        ]
        if not active:
            return
        gaps: dict[int, list] = {}
        for i in active:
            if chans[i].multilevel:
                gaps[i] = pl.gap_finders(chans[i].staircase, self.o.reference_levels_pct)
            else:
                chans[i].finder = EdgeFinder(*chans[i].refs)
        spans = {
            i: (np.array([g[0] for g in gs]), np.array([g[1] for g in gs]))
            for i, gs in gaps.items()
        }
        for start, a, b in self.src.blocks():
            blk = a if b is None else np.concatenate([a, b], axis=1)
            last = start + blk.shape[0] - 1
            for i in active:
                if i in gaps:
                    lo, hi = spans[i]
                    for g in np.flatnonzero((lo <= last) & (hi >= start)):
                        glo, ghi, finder = gaps[i][g][:3]
                        s0, s1 = max(glo, start), min(ghi, last)
                        finder.feed(blk[s0 - start : s1 - start + 1, i], s0)
                else:
                    chans[i].finder.feed(blk[:, i], start)
        for i in active:
            if i in gaps:
                chans[i].edges = pl.edges_from_gaps(gaps[i])
            else:
                chans[i].edges = chans[i].finder.edges

    # ------------------------------------------------------------------ input-aligned levels
    def _input_aligned_levels(self) -> None:
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
        o = self.o
        if o.state_level_method == "minmax":
            return
        todo: dict[int, list] = {}
        for c, ch in enumerate(self.outs):
            ri = self.ref_for(c)
            if ch.kind != "transitions" or ch.constant or ri is None or not self.refs[ri].edges:
                continue
            # end each segment where the input starts to move (a linear input edge spends
            # 1/8 of its 10-90 % time below 10 %), plus a sample
            todo[c] = seg.segments_between(self.refs[ri].edges, self.n, INPUT_LEAD)
        if not todo:
            return
        self._collect(todo)
        found = self._aligned_round(todo)
        delays = self._onset_delays(found)
        redo: dict[int, list] = {}
        for c, (delay, _thr) in delays.items():
            if delay <= 0:
                continue
            in_edges = self.refs[self.ref_for(c)].edges
            stops: list = [None] * len(in_edges)
            for i, e in found[c][1].items():
                stops[i] = e.k_start - 1  # the output's own transition has begun
            redo[c] = seg.segments_between(
                in_edges, self.n, INPUT_LEAD, delay=delay, stops=stops
            )
        if redo:
            self._collect(redo)
            found.update(self._aligned_round(redo))
        for c, (segs, matched, unmatched) in found.items():
            ch = self.outs[c]
            ch.segments, ch.level_mode = segs, "input-aligned"
            ch.onset_delay, ch.onset_allowance = delays.get(c, (None, 0.0))
            if not ch.onset_delay:
                ch.onset_allowance = 0.0  # cut where the input starts: none of its response
            ch.edges = [matched[i] for i in sorted(matched)]
            ch.edge_info = [
                {"match": i, "before": segs[i], "after": segs[i + 1]} for i in sorted(matched)
            ]
            ch.unmatched = sorted(unmatched)
            self._aligned_channel_levels(c, ch, segs)

    def _aligned_round(self, todo: dict[int, list]) -> dict[int, tuple]:
        """Levels of the input-aligned segments (already collected) and, in one pass, the
        output transition of each input transition: {channel: (segments, {input transition:
        output Edge}, [(input transition, why there is no output transition)])}."""
        o = self.o
        plans: dict[int, list] = {}
        unmatched: dict[int, list] = {}
        for c, segs in todo.items():
            ch = self.outs[c]
            in_edges = self.refs[self.ref_for(c)].edges
            self._decide(segs, ch)
            plans[c], unmatched[c] = [], []
            for i in range(len(in_edges)):
                a, b = segs[i], segs[i + 1]
                amp = b.level - a.level
                if not abs(amp) > self._min_change(ch):
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
        self._pass_aligned_edges(plans)
        found: dict[int, tuple] = {}
        for c, plan in plans.items():
            in_edges = self.refs[self.ref_for(c)].edges
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

    def _onset_delays(self, found: dict[int, tuple]) -> dict[int, tuple[int, float]]:
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
                hi = min(int(e.k_start) + seg.ONSET_RUN, self.n - 1)
                if int(e.k_start) < lo:
                    rows.append([before.end, lo, hi, None, before.end])
                    continue
                thr = seg.onset_threshold(
                    before, after.level - before.level, self.o.settling_band_pct
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
            for start, a, _b in self.src.blocks():
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

    def _pass_aligned_edges(self, plans: dict[int, list]) -> None:
        """One pass feeding each input transition's own edge finder its search region (from
        the end window of the segment before to the end of the segment after)."""
        spans = {
            c: (np.array([p[1] for p in pl]), np.array([p[2] for p in pl]))
            for c, pl in plans.items()
            if pl
        }
        if not spans:
            return
        for start, a, _b in self.src.blocks():
            last = start + a.shape[0] - 1
            for c, (lo, hi) in spans.items():
                y = a[:, c]
                for r in np.flatnonzero((lo <= last) & (hi >= start)):
                    _, rlo, rhi, _, _, finder = plans[c][r]
                    s0, s1 = max(rlo, start), min(rhi, last)
                    finder.feed(y[s0 - start : s1 - start + 1], s0)

    def _aligned_channel_levels(self, c: int, ch: _Chan, segs: list) -> None:
        """The channel's two state levels: the segments' levels pooled by input state."""
        if self.refs[self.ref_for(c)].multilevel:
            lvls = [s.level for s in segs if math.isfinite(s.level)]
            if len(lvls) >= 2:
                ch.levels = lv.StateLevels(
                    min(lvls),
                    max(lvls),
                    "segment ends (input-aligned, multi-level)",
                    note="each transition has its own initial and final level",
                )
                ch.refs = lv.reference_values(ch.levels, self.o.reference_levels_pct)
            return
        g0, m0, _ = seg.pooled_level(segs, 0)
        g1, m1, _ = seg.pooled_level(segs, 1)
        if g0 is None or g1 is None or not abs(g1 - g0) > self._min_change(ch):
            return  # the output does not follow the input's two states: keep the histogram
        (low, m_low), (high, m_high) = sorted(((g0, m0), (g1, m1)))
        method = _method_text(m_low, m_high, "input-aligned")
        unsettled = [s for s in segs if not s.settled]
        note = None
        if unsettled:
            note = (
                f"{len(unsettled)} of {len(segs)} segments not settled at their ends "
                "(see each transition's initial/final level details)"
            )
        ch.levels = lv.StateLevels(low, high, method, note=note)
        ch.refs = lv.reference_values(ch.levels, self.o.reference_levels_pct)

    # ------------------------------------------------------------------ pass 4
    def _pass_regions(self) -> None:
        chans = self.outs + self.refs
        need: dict[int, np.ndarray] = {}
        # the output just before the last input transition: its initial level for the
        # steady-state gain of a step
        self.pre_step_index: dict[int, int] = {}
        for c in range(len(self.outs)):
            ri = self.ref_for(c)
            if ri is not None and self.refs[ri].edges:
                self.pre_step_index[c] = self.refs[ri].edges[-1].k_start
        for i, ch in enumerate(chans):
            idx = {k for e in ch.edges for k in e.needed_indices() if 0 <= k < self.n}
            if i in self.pre_step_index:
                idx.add(self.pre_step_index[i])
            if idx:
                need[i] = np.asarray(sorted(idx), dtype=np.int64)
        regions: dict[int, list[EdgeRegions]] = {}
        for c, ch in enumerate(self.outs):
            if ch.edges:
                regions[c] = self._regions_for(c, ch)
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
        for start, a, b in self.src.blocks():
            blk = a if b is None else np.concatenate([a, b], axis=1)
            last = start + blk.shape[0] - 1
            for i, idx in need.items():
                lo, hi = np.searchsorted(idx, [start, last + 1])
                for k in idx[lo:hi]:
                    values[i][int(k)] = float(blk[k - start, i])
            for c, rs in regions.items():
                s0, s1 = spans[c]
                y = blk[:, c]
                p = None if start == 0 else float(prev[c])
                # regions overlapping [start-1, last] (start-1: pending right neighbours)
                cand = np.flatnonzero((s0 <= last) & (s1 >= start - 1))
                for r in cand:
                    rs[r].update(y, start, p)
            prev = blk[-1, :].copy()
        for i, ch in enumerate(chans):
            for e in ch.edges:
                e.set_instants(values[i], ch.refs)
        self.pre_step_value = {c: values[c][k] for c, k in self.pre_step_index.items()}
        self.regions = regions
        self._values = values

    def _regions_for(self, c: int, ch: _Chan) -> list[EdgeRegions]:
        ri = self.ref_for(c)
        in_edges: list[Edge] = self.refs[ri].edges if ri is not None else []
        in_mids = np.array([e.k_mid for e in in_edges], dtype=np.int64)
        lvls = ch.levels
        band_abs = self.o.settling_band_pct / 100.0 * lvls.amplitude
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
                post_end = pre_starts[i + 1] - 1 if i + 1 < len(ch.edges) else self.n - 1
            post_end = max(post_end, e.j)
            if ch.edge_info:
                initial = ch.edge_info[i]["before"].level
                final = ch.edge_info[i]["after"].level
                band_abs = self.o.settling_band_pct / 100.0 * abs(final - initial)
            else:
                final = lvls.high if e.direction > 0 else lvls.low
                initial = lvls.low if e.direction > 0 else lvls.high
            r = EdgeRegions(e, pre_starts[i], post_end, initial, final, band_abs)
            r.match = matches[i]  # type: ignore[attr-defined]
            out.append(r)
        return out

    # ------------------------------------------------------------------ assembly
    def _assemble(self) -> dict:
        o = self.o
        oi = self.src.out.info
        res: dict = {
            "measurement": "simwave.measure",
            "schema": 1,
            "source": {
                "output": oi.path,
                "reference": (self.src.ref.info.path if self.src.ref is not None else None),
                "reference_channel": (
                    str(o.reference_channel) if o.reference_channel is not None else None
                ),
            },
            "record": {
                "rate_hz": self.rate,
                "t0_s": self.t0 + (1.0 / self.rate if self.rest_sample else 0.0),
                "n_samples": self.n - int(self.rest_sample),
                "duration_s": (self.n - int(self.rest_sample)) / self.rate,
                "n_channels": len(self.outs),
                "rest_sample_before": self.rest_sample,
            },
            "options": o.to_dict(),
            "steady_window_s": [self.t(self.w_start), self.t(self.n - 1)],
            "predicted": self.pred.to_dict(),
            "input": [self._input_dict(r) for r in self.refs],
            "channels": [self._channel_dict(c, ch) for c, ch in enumerate(self.outs)],
            "notes": list(self.notes),
        }
        return res

    def _levels_dict(self, ch: _Chan) -> dict:
        p = self.o.reference_levels_pct
        return {
            "low_pct": p[0],
            "mid_pct": p[1],
            "high_pct": p[2],
            "low": ch.refs[0],
            "mid": ch.refs[1],
            "high": ch.refs[2],
        }

    def _input_dict(self, r: _Chan) -> dict:
        d: dict = {
            "name": r.name,
            "unit": r.unit,
            "kind": r.kind,
            "kind_source": r.kind_source,
            "min": r.lo,
            "max": r.hi,
            "mean": r.mean,
            "rms": r.rms,
        }
        if r.kind == "transitions" and r.levels is not None:
            d["state_levels"] = r.levels.to_dict()
            d["reference_levels"] = self._levels_dict(r)
            d["transitions"] = [
                {
                    "index": i,
                    "direction": e.name,
                    "start_s": self.t(e.start),
                    "crossing_50_s": self.t(e.mid),
                    "end_s": self.t(e.end),
                    "transition_duration_s": (e.end - e.start) / self.rate,
                    "initial_level": e.initial_level,
                    "final_level": e.final_level,
                }
                for i, e in enumerate(r.edges)
            ]
            if r.multilevel:
                d["disturbance_pp"] = r.staircase.disturbance_pp
        if r.null_reasons:
            d["null_reasons"] = dict(r.null_reasons)
        return d

    def _channel_dict(self, c: int, ch: _Chan) -> dict:
        ri = self.ref_for(c)
        ref = self.refs[ri] if ri is not None else None
        d: dict = {
            "name": ch.name,
            "unit": ch.unit,
            "input_channel": ref.name if ref is not None else None,
            "kind": ch.kind,
            "kind_source": ch.kind_source,
            "min": ch.lo,
            "max": ch.hi,
            "mean": ch.mean,
            "rms": ch.rms,
        }
        reasons = dict(ch.null_reasons)
        comparisons: list[dict] = []
        if ch.kind == "transitions":
            self._transient_section(c, ch, ref, d, reasons)
        d["steady_state"] = self._steady_section(c, ch, ref)
        if ch.kind == "sine":
            d["sine"] = self._sine_section(ch, ref)
        elif ch.kind == "multitone":
            d["tones"], tone_reasons = self._tones_section(ch, ref)
            reasons.update(tone_reasons)
        comparisons = compare_rows(d, self.pred, self.o)
        d["comparison"] = comparisons
        if reasons:
            d["null_reasons"] = reasons
        return d

    def _transient_section(
        self, c: int, ch: _Chan, ref: _Chan | None, d: dict, reasons: dict
    ) -> None:
        if ch.levels is None:
            d["state_levels"] = None
            d["transitions"] = []
            reasons.setdefault("transitions", reasons.get("state_levels", "no state levels"))
            return
        d["state_levels"] = ch.levels.to_dict()
        d["reference_levels"] = self._levels_dict(ch)
        if ch.level_mode:
            d["state_levels"]["basis"] = ch.level_mode
        if ch.level_mode == "input-aligned":
            # segments end this long after the input starts to move (see _input_aligned_levels)
            sl = d["state_levels"]
            if ch.onset_delay is not None:
                sl["response_onset_delay_s"] = ch.onset_delay / self.rate
            else:
                sl["response_onset_delay_s"] = None
                sl["null_reasons"] = {
                    "response_onset_delay_s": (
                        "no output transition starts from a settled state quiet enough (three "
                        "robust deviations of its noise within half of the "
                        f"±{self.o.settling_band_pct:g} % band) to show where the output starts "
                        "to answer the input: segments end where the input starts to move"
                    )
                }
        rows = [
            self._transition_row(c, ch, r, ref, i) for i, r in enumerate(self.regions.get(c, []))
        ]
        d["transitions"] = rows
        if ch.unmatched and ref is not None:
            d["unmatched_input_transitions"] = [
                {
                    "input_transition": i,
                    "input_crossing_50_s": self.t(ref.edges[i].mid),
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
        multilevel = ref is not None and ref.multilevel
        pulses = [] if multilevel else pulse_table(ch.edges, self.rate, self.t0)
        if pulses:
            d["pulses"] = pulses
            d["pulse_summary"] = summarize(
                pulses, ("pulse_duration_s", "period_s", "duty_pct"), worst=False
            )

    def _transition_levels(self, ch: _Chan, r: EdgeRegions, index: int, row: dict) -> tuple:
        """Per-transition state and reference levels, how they were found, and whether the
        final level is established (settled or extrapolated)."""
        refs = r.edge.refs if r.edge.refs is not None else ch.refs
        lo, hi = min(r.initial, r.final), max(r.initial, r.final)
        amp = hi - lo
        p = self.o.reference_levels_pct
        info = ch.edge_info[index] if ch.edge_info else None
        if info is not None:
            before, after = info["before"], info["after"]
            method = _method_text(
                before.method if r.final > r.initial else after.method,
                after.method if r.final > r.initial else before.method,
                "input-aligned",
            )
            row["initial_level_detail"] = before.detail(self.rate, self.t0, amp)
            row["final_level_detail"] = after.detail(self.rate, self.t0, amp)
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

    def _segment_after(self, ch: _Chan, index: int, e: Edge):
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

    def _transition_row(
        self, c: int, ch: _Chan, r: EdgeRegions, ref: _Chan | None, index: int
    ) -> dict:
        e, rate = r.edge, self.rate
        reasons: dict = {}
        dur = (e.end - e.start) / rate
        dur_key = "rise_time_s" if e.direction > 0 else "fall_time_s"
        row: dict = {
            "index": index,
            "direction": e.name,
            "start_s": self.t(e.start),
            "crossing_50_s": self.t(e.mid),
            "end_s": self.t(e.end),
            dur_key: dur,
            "transition_duration_s": dur,
            "initial_level": r.initial,
            "final_level": r.final,
        }
        amp, refs, initial_ok, final_ok = self._transition_levels(ch, r, index, row)
        if ch.edge_info:
            vals = self._values.get(c, {})
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
            row["input_crossing_50_s"] = self.t(ie.mid)
            row["delay_s"] = (e.mid - ie.mid) / rate
        else:
            origin, origin_name = e.start, "output transition start (low reference level instant)"
            row["input_transition"] = None
            row["delay_s"] = None
            reasons["delay_s"] = (
                "no reference input given" if ref is None else "no input transition precedes it"
            )
        row["time_origin"] = origin_name
        row["time_origin_s"] = self.t(origin)
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
        row["settling_band_pct"] = self.o.settling_band_pct
        si = r.settle_instant()
        if ch.edge_info:
            approaching = [
                w
                for w, d in (("initial", "initial_level_detail"), ("final", "final_level_detail"))
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
            which = " and ".join(
                w for w, ok in (("initial", initial_ok), ("final", final_ok)) if not ok
            )
            row["levels_note"] = (
                f"{which} level not established: its segment neither settles nor rings enough "
                "to extrapolate (the record gives it too little time); the instants are found "
                "on the median of the segment's end as a provisional level"
            )
            why = (
                f"{which} level not established: its segment neither settles nor rings enough "
                "to extrapolate (see levels_note)"
            )
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
            for w, ok in (("initial", initial_ok), ("final", final_ok)):
                if not ok:
                    row[f"{w}_level"] = None
                    reasons[f"{w}_level"] = provisional
            for k in ("start_s", "crossing_50_s", "end_s", "delay_s"):
                if row.get(k) is not None:
                    row[k] = None
                    reasons[k] = (
                        f"{why}: the reference levels, and so this instant, are not known"
                    )
        elif (
            si is not None
            and (after := self._segment_after(ch, index, e)) is not None
            and not after.settled
            and not _turns_inside_band(after, r, ch.onset_allowance if ch.edge_info else 0.0)
        ):
            # inside the band for a moment, but the end of its segment still moves by more
            # than the band: it has not settled, it is passing through (IEEE Std 181-2011:
            # settling means entering the band and remaining in it)
            row["settling_time_s"] = None
            row["settled_at_s"] = None
            where = "the end of the record" if r.post_end >= self.n - 1 else "the next transition"
            if after.method == seg.METHOD_EXTRAPOLATED:
                reasons["settling_time_s"] = (
                    f"never settles before {where}: it comes into the "
                    f"±{self.o.settling_band_pct:g} % band only "
                    f"{1e3 * (r.post_end - si) / rate:.3g} ms before the output starts to "
                    "answer it, and its ringing does not turn back inside the band in that "
                    "time (it is only passing through the band)"
                )
            else:
                reasons["settling_time_s"] = (
                    f"never settles before {where}: the last part of the segment after it still "
                    f"moves by {100.0 * after.drift / amp:.3g} % of amplitude, more than the "
                    f"±{self.o.settling_band_pct:g} % band (it is only passing through the band)"
                )
        elif si is None:
            row["settling_time_s"] = None
            row["settled_at_s"] = None
            where = "the end of the record" if r.post_end >= self.n - 1 else "the next transition"
            reasons["settling_time_s"] = (
                f"never settles before {where}: over its last tenth it is still up to "
                f"{100.0 * r.tail_dev / amp:.3g} % of amplitude from the final level, "
                f"outside the ±{self.o.settling_band_pct:g} % band"
            )
        else:
            row["settling_time_s"] = max(0.0, (si - origin) / rate)
            row["settled_at_s"] = self.t(si)
        if reasons:
            row["null_reasons"] = reasons
        before = ch.edge_info[index]["before"] if ch.edge_info else None
        after = ch.edge_info[index]["after"] if ch.edge_info else self._segment_after(ch, index, e)
        fallback = pl.disturbance_rms_from_pp(ch.disturbance_pp, ch.windows.size)
        end_s = self.t(after.end if after is not None else r.post_end)
        quality.annotate(
            row, amp, self.o.settling_band_pct, rate, before, after, fallback, end_s,
            n_post=max(r.post_end - e.j, 2),
        )
        return row

    # ------------------------------------------------------------------ steady state
    def _steady_section(self, c: int, ch: _Chan, ref: _Chan | None) -> dict:
        y = ch.window
        d: dict = {
            "window_start_s": self.t(self.w_start),
            "window_end_s": self.t(self.n - 1),
            "window_samples": int(y.size),
        }
        reasons: dict = {}
        if y.size < MIN_WINDOW:
            for k in ("mean", "rms", "ripple_pp", "final_value"):
                d[k] = None
                reasons[k] = (
                    f"record too short for steady state: the window holds {y.size} samples "
                    f"(at least {MIN_WINDOW} needed)"
                )
            d["null_reasons"] = reasons
            return d
        d.update(st.window_stats(y))
        x = ref.window if ref is not None else None
        t = self._window_t(y.size)
        if ch.kind in ("transitions", "constant"):
            self._steady_step(c, ch, ref, y, x, d, reasons)
        elif ch.kind == "ramp" and x is not None:
            self._steady_ramp(y, x, t, d, reasons)
        if reasons:
            d["null_reasons"] = reasons
        return d

    def _steady_step(self, c, ch, ref, y, x, d, reasons) -> None:
        d["final_value"] = float(np.mean(y))
        edges_in_window = [e for e in ch.edges if e.j >= self.w_start]
        blocked = None
        if edges_in_window:
            blocked = (
                f"the steady-state window contains {len(edges_in_window)} output transition(s), "
                f"the first at {self.t(edges_in_window[0].j):.6g} s"
            )
        elif ch.levels is not None and ch.kind == "transitions":
            band_abs = self.o.settling_band_pct / 100.0 * ch.levels.amplitude
            dev = float(np.max(np.abs(y - d["final_value"])))
            d["settled_in_window"] = bool(dev <= band_abs)
            if dev > band_abs:
                blocked = (
                    f"output not settled in the steady-state window: it deviates up to "
                    f"{100.0 * dev / ch.levels.amplitude:.3g} % of amplitude from its mean, "
                    f"outside the ±{self.o.settling_band_pct:g} % band"
                )
        if x is None:
            for k in ("steady_state_gain", "steady_state_error"):
                d[k] = None
                reasons[k] = "no reference input given"
            if blocked:
                d["final_value"] = None
                reasons["final_value"] = blocked
            return
        ref_edges_in_window = [e for e in ref.edges if e.j >= self.w_start]
        if ref_edges_in_window and not blocked:
            blocked = "the steady-state window contains an input transition"
        if blocked:
            for k in ("final_value", "steady_state_gain", "steady_state_error"):
                d[k] = None
                reasons[k] = blocked
            return
        x_final = float(np.mean(x))
        d["input_final_value"] = x_final
        y_final = d["final_value"]
        if ref.edges and ref.levels is not None and c in self.pre_step_value:
            last_in = ref.edges[-1]
            x_init = ref.levels.low if last_in.direction > 0 else ref.levels.high
            if last_in.initial_level is not None:
                x_init = last_in.initial_level
            y_init = self.pre_step_value[c]
            if ch.level_mode == "input-aligned" and len(ch.segments) >= 2:
                # the settled end of the segment before the last input transition
                before = ch.segments[-2]
                y_init = before.level
                d["initial_output_level_method"] = before.method
            elif ch.levels is not None:
                # snap to the output state level it sits at (noise), if it is near one
                near = min((ch.levels.low, ch.levels.high), key=lambda v: abs(v - y_init))
                if abs(near - y_init) <= 0.1 * ch.levels.amplitude:
                    y_init = near
            d["initial_output_level"] = y_init
            dx = x_final - x_init
            d["steady_state_gain"] = (y_final - y_init) / dx
            d["steady_state_gain_basis"] = (
                "step: (final output - output before the input step) / (input step size)"
            )
            d["steady_state_error"] = x_final - y_final
            d["steady_state_error_pct"] = 100.0 * (x_final - y_final) / abs(dx)
        else:
            if x_final == 0:
                d["steady_state_gain"] = None
                reasons["steady_state_gain"] = "input final value is 0: no gain to form"
            else:
                d["steady_state_gain"] = y_final / x_final
                d["steady_state_gain_basis"] = "final output value / final input value"
            d["steady_state_error"] = x_final - y_final
        d["error_definition"] = "input - output, averaged over the steady-state window"

    def _steady_ramp(self, y, x, t, d, reasons) -> None:
        sx, _, r2x = st.line_fit(x, t)
        sy, _, _ = st.line_fit(y, t)
        err = x - y
        se, e_end, _ = st.line_fit(err, t)
        d["input_slope_per_s"] = sx
        d["output_slope_per_s"] = sy
        d["steady_state_error"] = e_end
        d["error_trend_per_s"] = se
        d["error_definition"] = "input - output at the end of the window (straight-line fit)"
        if sx == 0:
            d["steady_state_gain"] = None
            d["ramp_lag_s"] = None
            reasons["steady_state_gain"] = reasons["ramp_lag_s"] = "input slope is 0"
        else:
            d["steady_state_gain"] = sy / sx
            d["steady_state_gain_basis"] = "ramp: output slope / input slope"
            d["ramp_lag_s"] = e_end / sx

    # ------------------------------------------------------------------ sine / tones
    def _estimate_frequency(self, y: np.ndarray, t: np.ndarray) -> float:
        """Four-parameter fit from an interpolated FFT peak, then the same fit with the
        harmonics tied to the fundamental, so distortion cannot pull the frequency."""
        f0 = st.fit_tones(y, t, [st.spectrum_peak_hz(y, self.rate)], refine=True).tones[0]
        hfit, _ = st.harmonic_fit(
            y, t, f0.frequency_hz, self.rate, int(self.o.harmonics), refine=True
        )
        return hfit.tones[0].frequency_hz

    def _sine_section(self, ch: _Chan, ref: _Chan | None) -> dict:
        o = self.o
        y = ch.fit_window
        d: dict = {}
        reasons: dict = {}
        t = self._window_t(y.size)
        if y.size < MIN_WINDOW or np.ptp(y) == 0:
            d["frequency_hz"] = None
            reasons["frequency_hz"] = "steady-state window too short or flat for a sine fit"
            d["null_reasons"] = reasons
            return d
        if o.sine_hz is not None:
            f, fsrc, d["fit"] = o.sine_hz, "given", "three-parameter"
        elif ref is not None and ref.fit_window.size >= MIN_WINDOW and np.ptp(ref.fit_window) > 0:
            f, fsrc = self._estimate_frequency(ref.fit_window, t), "four-parameter fit of the input"
            d["fit"] = "four-parameter"
        else:
            f, fsrc = self._estimate_frequency(y, t), "four-parameter fit of this channel"
            d["fit"] = "four-parameter"
        cycles = f * y.size / self.rate
        d["frequency_hz"] = f
        d["frequency_source"] = fsrc
        d["cycles_in_window"] = cycles
        if cycles < 1.0:
            for k in ("amplitude", "gain_db", "phase_deg", "thd_pct", "thd_db", "sinad_db"):
                d[k] = None
                reasons[k] = (
                    f"record too short: the steady-state window holds {cycles:.2f} cycles "
                    "(at least 1 needed)"
                )
            d["null_reasons"] = reasons
            return d
        # IEEE Std 1057: the sine fit at the (given or estimated) frequency; its residual
        # is the noise and distortion for SINAD
        out_fit = st.fit_tones(y, t, [f])
        # fundamental and harmonics fitted together: amplitude, phase and THD free of the
        # harmonics' leakage into a fundamental-only fit
        hfit, top = st.harmonic_fit(y, t, f, self.rate, int(o.harmonics))
        tone = hfit.tones[0]
        d["amplitude"] = tone.amplitude
        d["offset"] = hfit.offset
        d["output_phase_deg"] = math.degrees(tone.phase_rad)
        d["fit_explains_pct"] = 100.0 * out_fit.explained
        if ref is not None:
            it = st.harmonic_fit(ref.fit_window, t, f, self.rate, int(o.harmonics))[0].tones[0]
            d["input_amplitude"] = it.amplitude
            d["input_phase_deg"] = math.degrees(it.phase_rad)
            if it.amplitude == 0 or tone.amplitude == 0:
                d["gain_db"] = d["phase_deg"] = None
                reasons["gain_db"] = reasons["phase_deg"] = "zero fundamental amplitude"
            else:
                ratio = tone.amplitude / it.amplitude
                d["gain"] = ratio
                d["gain_db"] = 20.0 * math.log10(ratio)
                d["phase_deg"] = math.degrees(st._wrap(tone.phase_rad - it.phase_rad))
        else:
            d["gain_db"] = d["phase_deg"] = None
            reasons["gain_db"] = reasons["phase_deg"] = "no reference input given"
        if self.system is not None:
            h = complex(self.system.frequency_response(f))
            if h != 0:
                d["predicted_gain_db"] = 20.0 * math.log10(abs(h))
                d["predicted_phase_deg"] = math.degrees(math.atan2(h.imag, h.real))
        if out_fit.explained < SINE_MIN_EXPLAINED:
            for k in ("thd_pct", "thd_db", "sinad_db"):
                d[k] = None
                reasons[k] = (
                    f"no sine present in this channel: the fit accounts for only "
                    f"{100 * out_fit.explained:.1f} % of its AC power"
                )
        else:
            d["harmonics_counted"] = top
            if top < 2:
                d["thd_pct"] = d["thd_db"] = None
                reasons["thd_pct"] = reasons["thd_db"] = "no harmonic below the Nyquist frequency"
            else:
                thd = st.thd_ratio(hfit)
                d["thd_pct"] = 100.0 * thd
                d["thd_db"] = 20.0 * math.log10(thd) if thd > 0 else None
                if thd == 0:
                    reasons["thd_db"] = "no harmonic content at all (THD = 0)"
                d["harmonics"] = [
                    {
                        "order": k + 1,
                        "frequency_hz": h.frequency_hz,
                        "amplitude": h.amplitude,
                        "relative_pct": 100.0 * h.amplitude / tone.amplitude,
                    }
                    for k, h in enumerate(hfit.tones)
                    if k >= 1
                ]
            sd = st.sinad_db(out_fit)
            d["sinad_db"] = sd if math.isfinite(sd) else None
            if not math.isfinite(sd):
                reasons["sinad_db"] = "the fit residual is exactly 0"
        if reasons:
            d["null_reasons"] = reasons
        return d

    def _tones_section(self, ch: _Chan, ref: _Chan | None) -> tuple[list, dict]:
        o = self.o
        y = ch.fit_window
        t = self._window_t(y.size)
        reasons: dict = {}
        if y.size < MIN_WINDOW:
            reasons["tones"] = "record too short for steady state"
            return [], reasons
        basis = ref.fit_window if ref is not None else y
        if o.tones_hz is not None:
            freqs = list(o.tones_hz)
        else:
            found = st.find_tones(basis, self.rate) if np.ptp(basis) > 0 else []
            if not found:
                reasons["tones"] = "no tones found in the " + (
                    "input" if ref is not None else "output"
                )
                return [], reasons
            freqs = [tn.frequency_hz for tn in st.fit_tones(basis, t, found, refine=True).tones]
        freqs = [f for f in freqs if f < 0.5 * self.rate]
        out_fit = st.fit_tones(y, t, freqs)
        in_fit = st.fit_tones(ref.fit_window, t, freqs) if ref is not None else None
        rows = []
        for k, f in enumerate(freqs):
            row: dict = {
                "frequency_hz": f,
                "amplitude": out_fit.tones[k].amplitude,
                "output_phase_deg": math.degrees(out_fit.tones[k].phase_rad),
            }
            rr: dict = {}
            if in_fit is not None:
                it = in_fit.tones[k]
                row["input_amplitude"] = it.amplitude
                if it.amplitude > 0 and out_fit.tones[k].amplitude > 0:
                    row["gain_db"] = 20.0 * math.log10(out_fit.tones[k].amplitude / it.amplitude)
                    row["phase_deg"] = math.degrees(
                        st._wrap(out_fit.tones[k].phase_rad - it.phase_rad)
                    )
                else:
                    row["gain_db"] = row["phase_deg"] = None
                    rr["gain_db"] = rr["phase_deg"] = "zero amplitude at this tone"
            else:
                row["gain_db"] = row["phase_deg"] = None
                rr["gain_db"] = rr["phase_deg"] = "no reference input given"
            if self.system is not None:
                h = complex(self.system.frequency_response(f))
                if h != 0:
                    row["predicted_gain_db"] = 20.0 * math.log10(abs(h))
                    row["predicted_phase_deg"] = math.degrees(math.atan2(h.imag, h.real))
            if rr:
                row["null_reasons"] = rr
            rows.append(row)
        return rows, reasons


__all__ = ["measure", "MeasureOptions", "Predictions"]
