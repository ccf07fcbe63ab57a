"""Pieces of the streaming read path shared by every file format.

A reader yields :class:`Rows`: consecutive samples with enough bookkeeping to
name the place of a problem (file line for CSV, sample index otherwise). The
stages here work on those pieces with bounded carry-over, so memory does not
grow with the file:

* :class:`TimeAxis` checks a time column against a uniform grid, or
  resamples it onto one by linear interpolation;
* :class:`GapFiller` rejects NaN/inf, or fills short gaps linearly;
* :func:`rechunk` turns pieces of any length into blocks of a fixed length;
* :class:`ChannelStats` accumulates min, max, mean and RMS.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable, Iterable, Iterator

import numpy as np

from simwave.errors import WaveformError

#: Accepted relative deviation of a sampling interval from the nominal one.
JITTER_TOLERANCE = 1e-6


@dataclass
class Rows:
    """Consecutive samples from a file.

    Attributes
    ----------
    values : ndarray, shape (n, n_channels), float64
    time : ndarray, shape (n,), float64, or None
        Time column in seconds, when the file has one.
    place : callable
        ``place(i)`` names row ``i`` for an error message ("line 812", "sample 96000").
    """

    values: np.ndarray
    time: np.ndarray | None
    place: Callable[[int], str]

    def __len__(self) -> int:
        return int(self.values.shape[0])

    def tail(self, start: int) -> "Rows":
        place = self.place
        return Rows(
            self.values[start:],
            None if self.time is None else self.time[start:],
            lambda i: place(i + start),
        )

    def head(self, stop: int) -> "Rows":
        return Rows(self.values[:stop], None if self.time is None else self.time[:stop], self.place)


def join_rows(a: Rows | None, b: Rows) -> Rows:
    """Rows ``a`` followed by rows ``b`` (places kept)."""
    if a is None or len(a) == 0:
        return b
    na = len(a)
    pa, pb = a.place, b.place
    time = None
    if a.time is not None and b.time is not None:
        time = np.concatenate([a.time, b.time])
    return Rows(
        np.concatenate([a.values, b.values]),
        time,
        lambda i: pa(i) if i < na else pb(i - na),
    )


def sample_places(start: int, rate: float | None = None, t0: float = 0.0) -> Callable[[int], str]:
    """Place names ``sample N (t = x s)`` for rows numbered from ``start``."""
    if rate:
        return lambda i: f"sample {start + i} (t = {t0 + (start + i) / rate:.9g} s)"
    return lambda i: f"sample {start + i}"


def _grid_tolerance(t: np.ndarray, dt: float) -> np.ndarray:
    # Allowance: the stated relative jitter, plus a few units in the last place of the
    # time values themselves (decimal text -> binary float64 rounding, IEEE 754-2019).
    return JITTER_TOLERANCE * dt + 4.0 * np.spacing(np.abs(t))


class TimeAxis:
    """Checks or resamples a streamed time column.

    Parameters
    ----------
    where : str
        File name (and dataset) for messages.
    dt : float
        Nominal sampling interval in seconds.
    t_first : float
        Time of the first row (the grid origin).
    resample : bool
        False: an interval off the nominal one by more than
        :data:`JITTER_TOLERANCE` (relative) is an error naming the row.
        True: rows are linearly interpolated onto ``t_first + k*dt`` and the
        rows found off that grid are counted in :attr:`off_grid`.
    check : bool
        False skips the regularity check (the caller gave its own rate);
        time going backwards or repeating is still an error.

    Notes
    -----
    Linear interpolation between neighbouring rows: the first-order hold,
    e.g. Oppenheim & Schafer, *Discrete-Time Signal Processing*, 3rd ed.,
    sec. 4.6 (reconstruction by linear interpolation).
    """

    def __init__(self, where: str, dt: float, t_first: float, resample: bool = False,
                 check: bool = True) -> None:
        self.where = where
        self.dt = float(dt)
        self.t_first = float(t_first)
        self.resample = resample
        self.check = check
        self.prev_t: float | None = None
        self.prev_v: np.ndarray | None = None
        self.next_k = 0
        self.off_grid = 0

    def _intervals(self, t: np.ndarray) -> tuple[np.ndarray, int]:
        """Intervals ending at each row (from the previous piece's last time when known),
        and the index of the row the first interval ends at."""
        if self.prev_t is not None:
            return np.diff(t, prepend=self.prev_t), 0
        return np.diff(t), 1

    def _monotonic(self, rows: Rows) -> None:
        t = rows.time
        d, base = self._intervals(t)
        bad = np.flatnonzero(~(d > 0))
        if bad.size:
            i = int(bad[0]) + base
            prev = t[i - 1] if i >= 1 else self.prev_t
            if not math.isfinite(t[i]):
                raise WaveformError(f"{self.where}, {rows.place(i)}: time is {t[i]}")
            word = "repeats" if t[i] == prev else "goes backwards"
            raise WaveformError(
                f"{self.where}, {rows.place(i)}: time {word} ({t[i]:.10g} s after {prev:.10g} s)"
            )

    def feed(self, rows: Rows) -> Rows:
        """Check (or resample) one piece; returns the rows to pass on."""
        if len(rows) == 0:
            return rows
        self._monotonic(rows)
        if self.resample:
            out = self._resample(rows)
        else:
            if self.check:
                self._check_regular(rows)
            out = rows
        self.prev_t = float(rows.time[-1])
        self.prev_v = rows.values[-1].copy()
        return out

    def _check_regular(self, rows: Rows) -> None:
        t = rows.time
        d, base = self._intervals(t)
        tol = _grid_tolerance(t if base == 0 else t[1:], self.dt)
        bad = np.flatnonzero(np.abs(d - self.dt) > tol)
        if bad.size:
            i = int(bad[0]) + base
            rel = (d[bad[0]] - self.dt) / self.dt
            raise WaveformError(
                f"{self.where}, {rows.place(i)}: irregular sampling: interval {d[bad[0]]:.10g} s "
                f"differs from {self.dt:.10g} s by {rel:+.2e} (relative; limit "
                f"{JITTER_TOLERANCE:g}); resample onto a uniform grid (resample / --resample)"
            )

    def _resample(self, rows: Rows) -> Rows:
        t, v = rows.time, rows.values
        # rows off the grid: the affected-row count reported to the user
        k_near = np.rint((t - self.t_first) / self.dt)
        dev = np.abs(t - (self.t_first + k_near * self.dt))
        self.off_grid += int(np.count_nonzero(dev > _grid_tolerance(t, self.dt)))
        if self.prev_t is not None:
            t = np.concatenate([[self.prev_t], t])
            v = np.concatenate([self.prev_v[np.newaxis, :], v])
        t_end = t[-1] + JITTER_TOLERANCE * self.dt
        k_stop = int(math.floor((t_end - self.t_first) / self.dt)) + 1
        k = np.arange(self.next_k, max(k_stop, self.next_k), dtype=np.float64)
        grid = self.t_first + k * self.dt
        out = np.empty((grid.size, v.shape[1]))
        for c in range(v.shape[1]):
            out[:, c] = np.interp(grid, t, v[:, c])
        start = self.next_k
        self.next_k += grid.size
        return Rows(out, grid, sample_places(start, 1.0 / self.dt, self.t_first))


class GapFiller:
    """Rejects non-finite samples, or fills gaps of up to ``max_gap`` samples.

    Parameters
    ----------
    where : str
        File name for messages.
    max_gap : int
        0 rejects any NaN or infinity; N > 0 replaces each run of at most N
        non-finite samples in a channel by linear interpolation between the
        finite neighbours (first-order hold, as in :class:`TimeAxis`).
        A longer run, or one at the start or end of the record, is an error.
    channels : list of str
        Channel names for messages.
    """

    def __init__(self, where: str, max_gap: int, channels: list[str]) -> None:
        self.where = where
        self.max_gap = int(max_gap)
        self.channels = channels
        self.pending: Rows | None = None
        self.prev_row: np.ndarray | None = None
        self.filled = 0

    def _error(self, rows: Rows, i: int, c: int, extra: str) -> WaveformError:
        x = rows.values[i, c]
        return WaveformError(
            f"{self.where}, {rows.place(i)}, channel {self.channels[c]!r}: {x} value{extra}"
        )

    def feed(self, rows: Rows) -> Rows:
        """Returns the rows that are final; holds back an unfinished trailing gap."""
        data = join_rows(self.pending, rows)
        self.pending = None
        v = data.values
        # all finite exactly when the smallest and largest are (numpy's min and max are
        # NaN when any value is): two reductions instead of a mask of the whole block
        if v.size == 0 or (math.isfinite(v.min()) and math.isfinite(v.max())):
            if len(data):
                self.prev_row = v[-1].copy()
            return data
        finite = np.isfinite(v)
        if self.max_gap <= 0:
            i, c = np.argwhere(~finite)[0]
            raise self._error(data, int(i), int(c),
                              " (to interpolate short gaps give --fill-gaps N;"
                              " fill_gaps=N in Python)")
        v = v.copy()
        n = v.shape[0]
        hold_from = n
        for c in np.flatnonzero(~finite.all(axis=0)):
            bad = ~finite[:, c]
            edges = np.diff(np.concatenate([[0], bad.astype(np.int8), [0]]))
            starts = np.flatnonzero(edges == 1)
            stops = np.flatnonzero(edges == -1)
            for s, e in zip(starts, stops, strict=False):
                length = e - s
                if length > self.max_gap:
                    raise self._error(data, int(s), int(c),
                                      f" starts a gap longer than {self.max_gap} samples")
                if e == n:  # may continue in the next piece
                    hold_from = min(hold_from, int(s))
                    continue
                if s == 0:
                    if self.prev_row is None:
                        raise self._error(data, 0, int(c), " at the start of the record"
                                          " (a gap is filled only between finite samples)")
                    left = self.prev_row[c]
                else:
                    left = v[s - 1, c]
                right = v[e, c]
                frac = np.arange(1, length + 1) / (length + 1)
                v[s:e, c] = left + (right - left) * frac
                self.filled += int(length)
        out = Rows(v, data.time, data.place)
        if hold_from < n:
            self.pending = out.tail(hold_from)
            out = out.head(hold_from)
        if len(out):
            self.prev_row = out.values[-1].copy()
        return out

    def finish(self) -> None:
        """Error if the record ends inside a gap."""
        if self.pending is not None and len(self.pending):
            p = self.pending
            bad = np.argwhere(~np.isfinite(p.values))[0]
            raise self._error(p, int(bad[0]), int(bad[1]), " at the end of the record"
                              " (a gap is filled only between finite samples)")


def rechunk(pieces: Iterable[np.ndarray], size: int) -> Iterator[np.ndarray]:
    """Regroup 2-D arrays into blocks of exactly ``size`` rows (the last may be short)."""
    buf: list[np.ndarray] = []
    have = 0
    for p in pieces:
        if p.shape[0] == 0:
            continue
        if have == 0 and p.shape[0] >= size:
            # fast path: slice big pieces without copying through the buffer
            n_full = p.shape[0] // size * size
            for i in range(0, n_full, size):
                yield p[i:i + size]
            p = p[n_full:]
            if p.shape[0] == 0:
                continue
        buf.append(p)
        have += p.shape[0]
        while have >= size:
            joined = np.concatenate(buf) if len(buf) > 1 else buf[0]
            yield joined[:size]
            rest = joined[size:]
            buf = [rest] if rest.shape[0] else []
            have = rest.shape[0]
    if have:
        yield np.concatenate(buf) if len(buf) > 1 else buf[0]


class ChannelStats:
    """Running min, max, mean and RMS per channel (one pass, constant memory).

    Mean and RMS use float64 sums per block accumulated with ``math.fsum``
    (Shewchuk's exactly rounded summation, as documented for ``math.fsum``).
    """

    def __init__(self, n_channels: int) -> None:
        self.n = 0
        self.min = np.full(n_channels, np.inf)
        self.max = np.full(n_channels, -np.inf)
        self._sums: list[list[float]] = [[] for _ in range(n_channels)]
        self._squares: list[list[float]] = [[] for _ in range(n_channels)]

    def add(self, block: np.ndarray) -> None:
        if block.shape[0] == 0:
            return
        self.n += block.shape[0]
        np.minimum(self.min, block.min(axis=0), out=self.min)
        np.maximum(self.max, block.max(axis=0), out=self.max)
        s = block.sum(axis=0)
        q = np.einsum("ij,ij->j", block, block)
        for c in range(block.shape[1]):
            self._sums[c].append(float(s[c]))
            self._squares[c].append(float(q[c]))

    def add_constant(self, values: np.ndarray, count: int) -> None:
        """Account for ``count`` rows all equal to ``values`` (one per channel) at once."""
        if count <= 0:
            return
        self.n += int(count)
        np.minimum(self.min, values, out=self.min)
        np.maximum(self.max, values, out=self.max)
        for c, v in enumerate(np.asarray(values, dtype=np.float64)):
            self._sums[c].append(float(v) * count)
            self._squares[c].append(float(v) * float(v) * count)

    def result(self) -> list[dict[str, float]]:
        out = []
        for c in range(len(self._sums)):
            if self.n == 0:
                out.append({"min": math.nan, "max": math.nan, "mean": math.nan, "rms": math.nan})
                continue
            out.append({
                "min": float(self.min[c]),
                "max": float(self.max[c]),
                "mean": math.fsum(self._sums[c]) / self.n,
                # root-mean-square: sqrt of the mean of the squared samples
                "rms": math.sqrt(max(math.fsum(self._squares[c]), 0.0) / self.n),
            })
        return out
