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


def run(w: Work) -> None:
    """Scan output and reference; set ``n``, ``outs``, ``refs`` and ``w_start``."""
    src, o = w.src, w.o
    oi = src.out.info
    s_out = scan(src.out.arrays(), oi.label, oi.channels, w.rate, w.t0)
    if s_out.n == 0:
        raise MeasurementError(f"{oi.label}: no samples to measure")
    n = w.n = s_out.n
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
