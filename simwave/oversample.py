"""Streaming interpolation to N x rate and anti-alias decimation back to the input rate.

Used by ``simulate(..., oversample=N)``: the discrete model runs at N times
the input rate on an input interpolated consistently with the method (held
between samples for the step-invariant model, linear between samples for the
others), and the model's output is brought back to the input rate by a
linear-phase FIR low-pass evaluated only at the kept instants (polyphase
decimation). The FIR's group delay is a whole number of input samples and is
removed, so the output stays aligned with the input.

References
----------
R. E. Crochiere and L. R. Rabiner, *Multirate Digital Signal Processing*,
Prentice-Hall, 1983, ch. 2-3 (decimation by an integer factor, polyphase form).
J. F. Kaiser, "Nonrecursive digital filter design using the I0-sinh window
function", Proc. IEEE ISCAS, 1974 (window design; scipy.signal.kaiserord).
"""

from __future__ import annotations

import math

import numpy as np
import scipy.signal

#: Decimator pass band ends at this fraction of the input rate ...
PASS_EDGE = 0.40
#: ... and its stop band starts at the input Nyquist frequency.
STOP_EDGE = 0.50
#: Stop-band attenuation of the decimator in dB.
STOP_ATTEN_DB = 80.0


class Upsampler:
    """Interpolate a block stream to ``factor`` x its rate, carrying the last sample.

    Output sample ``n*factor + j`` lies at input time ``n + j/factor``. Linear
    interpolation needs the next input sample, so each call emits the
    intervals that end inside the block; :meth:`finish` emits the last
    interval, holding the final value (nothing is known after the record).
    """

    def __init__(self, factor: int, hold: bool) -> None:
        self.factor = int(factor)
        self.hold = hold
        self._last: np.ndarray | None = None
        self._frac = (np.arange(self.factor, dtype=np.float64) / self.factor)[:, None, None]

    def push(self, block: np.ndarray) -> np.ndarray:
        if block.shape[0] == 0:
            return np.empty((0, block.shape[1]))
        seq = block if self._last is None else np.concatenate([self._last[None, :], block])
        self._last = block[-1].copy()
        if seq.shape[0] < 2:
            return np.empty((0, block.shape[1]))
        start, end = seq[:-1], seq[1:]
        if self.hold:
            up = np.broadcast_to(start[None], (self.factor,) + start.shape)
        else:
            up = start[None] + self._frac * (end - start)[None]
        # (factor, n, ch) -> (n*factor, ch), sample-major
        return np.ascontiguousarray(np.swapaxes(up, 0, 1)).reshape(-1, block.shape[1])

    def finish(self) -> np.ndarray:
        if self._last is None:
            return np.empty((0, 0))
        return np.repeat(self._last[None, :], self.factor, axis=0)


class Decimator:
    """Linear-phase FIR low-pass and keep every ``factor``-th sample, delay removed.

    The FIR has ``2*factor*K + 1`` taps, so its group delay is ``K`` input
    samples exactly. Before the record the model's output is taken as
    ``pre_value`` (0 for a system at rest; the settled output otherwise) and
    after it the last output value is held, an approximation that touches only
    the last ``K`` output samples.
    """

    def __init__(self, factor: int, n_channels: int, pre_value: np.ndarray) -> None:
        self.factor = int(factor)
        width = (STOP_EDGE - PASS_EDGE) * 2.0 / self.factor  # normalised to the high-rate Nyquist
        numtaps, beta = scipy.signal.kaiserord(STOP_ATTEN_DB, width)
        self.k = max(1, math.ceil((numtaps - 1) / (2 * self.factor)))
        self.numtaps = 2 * self.factor * self.k + 1
        cutoff = (PASS_EDGE + STOP_EDGE) / self.factor  # mid transition, high-rate Nyquist units
        self.taps = scipy.signal.firwin(self.numtaps, cutoff, window=("kaiser", beta))
        self.delay = self.factor * self.k  # high-rate samples
        pre = np.broadcast_to(np.asarray(pre_value, dtype=np.float64), (n_channels,))
        self._buf = np.repeat(pre[None, :], self.delay, axis=0)
        self._phase = 0  # index in _buf of the next output's centre, minus delay
        self.n_channels = n_channels

    def push(self, block: np.ndarray) -> np.ndarray:
        buf = np.concatenate([self._buf, block]) if block.size else self._buf
        # Output m has its centre at buffer index delay + phase + m*factor; it needs delay more.
        first = self._phase
        last_start = buf.shape[0] - self.numtaps
        if last_start < first:
            self._buf = buf
            return np.empty((0, self.n_channels))
        count = (last_start - first) // self.factor + 1
        windows = np.lib.stride_tricks.sliding_window_view(buf, self.numtaps, axis=0)
        # windows[i] = buf[i : i+numtaps] with shape (n_win, ch, numtaps)
        sel = windows[first : first + count * self.factor : self.factor]
        out = sel @ self.taps[::-1]
        consumed = first + count * self.factor
        self._buf = buf[consumed:]
        self._phase = 0
        return out

    def finish(self, n_expected_out: int, n_done: int) -> np.ndarray:
        """Flush: hold the last value for the FIR's look-ahead and emit the remaining outputs."""
        remaining = n_expected_out - n_done
        if remaining <= 0:
            return np.empty((0, self.n_channels))
        last = self._buf[-1] if self._buf.shape[0] else np.zeros(self.n_channels)
        pad = np.repeat(last[None, :], self.delay + self.factor, axis=0)
        return self.push(pad)[:remaining]

    def describe(self) -> dict:
        return {
            "taps": int(self.numtaps),
            "pass_edge_fraction_of_rate": PASS_EDGE,
            "stop_edge_fraction_of_rate": STOP_EDGE,
            "stop_band_attenuation_db": STOP_ATTEN_DB,
            "window": "kaiser",
        }
