"""Stage 0, record: the first pass, which every other stage builds on.

In: a :class:`~simwave.measure.source.MeasureSource` (output and optional reference) and
the options. One pass over each stream: sample count, range, mean and RMS per channel; the
first NaN or infinity is refused with its channel, sample and time; a reference of another
length or channel count, and an output whose every channel is constant, are refused.
Out: a :class:`~simwave.measure.stages.work.Work` with ``n``, ``outs``, ``refs`` (one
:class:`~simwave.measure.stages.work.Channel` each) and ``w_start`` (first sample of the
steady-state window). Next: :mod:`.state_levels`.
"""

from __future__ import annotations

import math

from simwave.errors import MeasurementError
from simwave.measure.stages.work import Channel, Scan, Work, scan


#: Largest magnitude measured. Levels' spreads, uncertainties and the RMS square the
#: samples; float64 overflows past 1.8e308 (its square root is 1.3e154), and sums over
#: many samples need a margin below that.
MEASURE_MAX = 1e150
#: Smallest range (maximum minus minimum) of a channel that is not constant. The squares
#: of smaller differences fall below float64's normal numbers (2.2e-308) and keep only a
#: few significant bits, which the measured spreads and noise would then stand on.
MEASURE_MIN_RANGE = 1e-150


def check_magnitudes(s: Scan, label: str, names) -> None:
    """Refuse a channel whose values the measurement cannot square in float64, by name."""
    for c, name in enumerate(names):
        lo, hi = float(s.lo[c]), float(s.hi[c])
        big = max(abs(lo), abs(hi))
        if big > MEASURE_MAX:
            raise MeasurementError(
                f"{label}: channel {name!r} reaches {big:g}; beyond {MEASURE_MAX:g} the "
                "squares the measurement takes overflow float64: measure it scaled (in "
                "other units)")
        if 0.0 < hi - lo < MEASURE_MIN_RANGE:
            raise MeasurementError(
                f"{label}: channel {name!r} spans only {hi - lo:g}; below "
                f"{MEASURE_MIN_RANGE:g} the squares the measurement takes fall below "
                "float64's normal range: measure it scaled (in other units)")


def run(w: Work) -> None:
    """Scan output and reference; set ``n``, ``outs``, ``refs`` and ``w_start``."""
    src, o = w.src, w.o
    oi = src.out.info
    s_out = scan(src.out.arrays(), oi.label, oi.channels, w.rate, w.t0)
    if s_out.n == 0:
        raise MeasurementError(f"{oi.label}: no samples to measure")
    n = w.n = s_out.n
    check_magnitudes(s_out, oi.label, oi.channels)
    w.outs = channels(s_out, oi.channels, oi.units)
    w.refs = []
    if src.ref is not None:
        ri = src.ref.info
        s_ref = scan(src.ref.arrays(), ri.label, ri.channels, w.rate, w.t0)
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
        check_magnitudes(s_ref, ri.label, ri.channels)
        w.refs = channels(s_ref, ri.channels, ri.units)
    if all(c.constant for c in w.outs):
        vals = ", ".join(f"{c.name} = {c.lo:g}" for c in w.outs)
        raise MeasurementError(f"{oi.label}: constant waveform ({vals}): nothing to measure")
    w_len = min(max(int(round(o.steady_fraction * n)), 1), o.max_window_samples)
    w.w_start = n - w_len
    if w_len < n * o.steady_fraction - 0.5:
        w.notes.append(f"steady-state window capped at {w_len} samples (max_window_samples)")


def channels(s: Scan, names, units) -> list[Channel]:
    """One working channel per scanned channel, with its range, mean and RMS."""
    out = []
    for c in range(len(names)):
        mean = float(s.sum[c] / s.n)
        rms = math.sqrt(max(float(s.sumsq[c] / s.n), 0.0))
        out.append(Channel(names[c], units[c], float(s.lo[c]), float(s.hi[c]), mean, rms))
    return out
