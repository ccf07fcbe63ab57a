"""State levels and reference levels of a two-state waveform (IEEE Std 181-2011).

The histogram is accumulated block by block over a fixed range (the channel's
minimum to maximum, found in an earlier pass), so memory is one fixed-size
array of counts per channel whatever the record length.
"""

from __future__ import annotations

import bisect
import functools
import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from simwave.errors import MeasurementError

#: Bins of the level histogram over [min, max]: the level resolution is range / HISTOGRAM_BINS
#: (3e-5 of the range), held as one int64 array per channel (256 KiB).
HISTOGRAM_BINS = 2**15

#: A half of the histogram counts as holding a state when its (smoothed) peak density is at
#: least this many times the half's mean density. A flat half (a ramp, noise) has a ratio
#: near 1. Our own choice; IEEE Std 181-2011 leaves the test for bimodality to the user.
PEAK_TO_MEAN_MIN = 3.0

#: Option values: "histogram" (the default: the IEEE 181 histogram, checked against and,
#: where ringing fools it, replaced by the settled ends of the state intervals; per
#: transition from input-aligned segments when a reference input is given), "segment"
#: (the segment ends wherever they can be found, see :mod:`simwave.measure.segments`),
#: "minmax" (smallest and largest sample, nothing else).
STATE_LEVEL_METHODS = ("histogram", "minmax", "segment")


@dataclass
class StateLevels:
    """The two state levels of a channel and how they were found.

    Attributes
    ----------
    low, high : float
        Lower and upper state levels (signal units), ``low < high``.
    method : str
        ``"histogram"`` (IEEE Std 181 histogram mode method) or ``"minmax"``.
    note : str or None
        Why the minmax fallback was used, when it was.
    """

    low: float
    high: float
    method: str
    note: str | None = None

    @property
    def amplitude(self) -> float:
        """Waveform amplitude: upper minus lower state level (IEEE Std 181-2011 term)."""
        return self.high - self.low

    def to_dict(self) -> dict:
        d = {
            "low": self.low,
            "high": self.high,
            "amplitude": self.amplitude,
            "method": self.method,
        }
        if self.note:
            d["note"] = self.note
        return d


class LevelHistogram:
    """Counts of samples in ``HISTOGRAM_BINS`` equal bins over ``[lo, hi]``, per channel.

    Parameters
    ----------
    lo, hi : ndarray, shape (n_channels,)
        Range of each channel (its minimum and maximum).
    """

    def __init__(self, lo: np.ndarray, hi: np.ndarray, n_bins: int = HISTOGRAM_BINS) -> None:
        self.lo = np.asarray(lo, dtype=np.float64)
        self.hi = np.asarray(hi, dtype=np.float64)
        self.n_bins = int(n_bins)
        self.counts = np.zeros((self.lo.size, self.n_bins), dtype=np.int64)
        # sum of the samples in each bin: a sharp state is then located at the mean of its
        # own samples rather than at a bin centre
        self.sums = np.zeros((self.lo.size, self.n_bins), dtype=np.float64)
        span = self.hi - self.lo
        self._scale = np.where(span > 0, self.n_bins / np.where(span > 0, span, 1.0), 0.0)
        self._centers: dict[int, np.ndarray] = {}

    def add(self, block: np.ndarray) -> None:
        """Add a block of samples, shape ``(n, n_channels)``."""
        self.add_columns([block[:, c] for c in range(self.counts.shape[0])])

    def add_columns(self, columns: Sequence[np.ndarray],
                    channels: Sequence[int] | None = None) -> None:
        """Add a block of samples given as one 1-D array per channel (the same counts and
        sums as :meth:`add` of those columns side by side, without joining them); only
        those of ``channels`` (indices into ``columns``) when given."""
        for c in range(len(columns)) if channels is None else channels:
            x = columns[c]
            # (x - lo) * scale in one temporary: the same two roundings as the expression
            t = np.subtract(x, self.lo[c])
            t *= self._scale[c]
            idx = t.astype(np.int64)
            np.clip(idx, 0, self.n_bins - 1, out=idx)
            self.counts[c] += np.bincount(idx, minlength=self.n_bins)
            self.sums[c] += np.bincount(idx, weights=x, minlength=self.n_bins)

    def centers(self, c: int) -> np.ndarray:
        """Bin centres of channel ``c`` (signal units; computed once, read-only)."""
        cache = self._centers
        if c not in cache:
            w = (self.hi[c] - self.lo[c]) / self.n_bins
            x = self.lo[c] + _half_steps(self.n_bins) * w
            x.flags.writeable = False
            cache[c] = x
        return cache[c]

    def fraction_near(self, c: int, levels: Sequence[float], half_width: float) -> float:
        """Fraction of the samples within ``half_width`` of any of ``levels``."""
        counts = self.counts[c]
        # only the bins holding samples: the sums are of integers, exact in any order
        held = np.flatnonzero(counts)
        x = self.centers(c)[held]
        near = np.zeros(held.size, dtype=bool)
        for lv in levels:
            near |= np.abs(x - lv) <= half_width
        total = counts.sum()
        return float(counts[held][near].sum() / total) if total else 0.0


@functools.lru_cache(maxsize=4)
def _half_steps(n_bins: int) -> np.ndarray:
    """``np.arange(n_bins) + 0.5``: bin centres in bins (computed once, read-only)."""
    x = np.arange(n_bins) + 0.5
    x.flags.writeable = False
    return x


def _weighted_quantile(
    x: np.ndarray, w: np.ndarray, q: float, cw: np.ndarray | None = None
) -> float:
    """The ``q`` quantile of ``x`` weighted by ``w`` (``cw``: ``np.cumsum(w)`` if known)."""
    cw = np.cumsum(w) if cw is None else cw
    return float(x[min(int(np.searchsorted(cw, q * cw[-1])), x.size - 1)])


def _smoothed(w: np.ndarray, h_bins: float) -> np.ndarray:
    """Gaussian smoothing of histogram counts (kernel sd ``h_bins`` bins, zero outside).

    Same kernel as scipy.ndimage.gaussian_filter1d (truncated at 4 sd, normalized);
    wide kernels go through an FFT convolution, whose cost does not grow with the
    kernel (a direct one over 2**15 bins with a kernel thousands of bins wide took
    ~70 ms per call on short, noisy records), narrow ones through
    :func:`narrow_gaussian`, scipy.ndimage's own sums.
    """
    if h_bins < 0.5:
        return w
    radius = int(4.0 * h_bins + 0.5)
    if radius < 64:
        return narrow_gaussian(w, h_bins)
    k = np.exp(-0.5 * (np.arange(-radius, radius + 1) / h_bins) ** 2)
    return fft_convolve_same(w, k / k.sum())


#: :func:`narrow_gaussian` computes separately the stretches of output that nonzero counts
#: reach when more than this many zero bins (beyond the kernel) lie between them.
_SPLIT_GAP = 512


def narrow_gaussian(w: np.ndarray, h_bins: float) -> np.ndarray:
    """``scipy.ndimage.gaussian_filter1d(w, h_bins, mode="constant")`` for 1-D float64
    ``w`` of non-negative counts, same bits, without importing scipy.ndimage.

    That import costs 0.25-0.3 s (it loads scipy.special and, through scipy's array-API
    layer, numpy.testing, numpy.f2py, unittest and every text codec): paid by every
    batch worker whose records' histograms need a narrow kernel, and by a one-off
    ``simwave measure``. The kernel is scipy's (``_gaussian_kernel1d``: exp(-0.5 / sd^2
    x^2) over x = -r..r, r = int(4 sd + 0.5), divided by its sum, reversed for the
    correlation), and each output is formed as ndimage's correlation forms it for a
    symmetric kernel (scipy/ndimage/src/ni_filters.c): the centre sample times the
    centre weight, then (x[i-j] + x[i+j]) w_j added for j from r down to 1, with zeros
    beyond the ends. Only stretches of output that some nonzero count reaches are
    computed (the rest is +0., as ndimage's sums of +0. give): a histogram's counts lie
    around a few levels. tests/test_measure_windows.py compares it with scipy.ndimage on
    3,000 histograms, bit for bit.
    """
    radius = int(4.0 * float(h_bins) + 0.5)
    x = np.arange(-radius, radius + 1)
    phi = np.exp(-0.5 / (h_bins * h_bins) * x**2)
    k = (phi / phi.sum())[::-1]
    n = w.size
    out = np.zeros(n)
    nz = np.flatnonzero(w)
    if nz.size == 0:
        return out
    gaps = np.flatnonzero(np.diff(nz) > 2 * radius + _SPLIT_GAP)
    for first, last in zip(np.r_[nz[0], nz[gaps + 1]], np.r_[nz[gaps], nz[-1]], strict=True):
        lo, hi = max(int(first) - radius, 0), min(int(last) + radius, n - 1)
        m = hi - lo + 1
        pad = np.zeros(m + 2 * radius)  # inputs lo - r .. hi + r, zero beyond the ends
        src_lo, src_hi = max(lo - radius, 0), min(hi + radius, n - 1)
        pad[src_lo - lo + radius : src_hi - lo + radius + 1] = w[src_lo : src_hi + 1]
        acc = out[lo : hi + 1]
        np.multiply(pad[radius : radius + m], k[radius], out=acc)
        pair = np.empty(m)
        for j in range(radius, 0, -1):  # acc += (x[i-j] + x[i+j]) * w_j, in place
            np.add(pad[radius - j : radius - j + m], pad[radius + j : radius + j + m], out=pair)
            pair *= k[radius - j]
            acc += pair
    return out


def fft_convolve_same(a: np.ndarray, k: np.ndarray) -> np.ndarray:
    """Linear convolution of 1-D ``a`` and ``k`` by FFT, the central ``a.size`` points.

    The same steps as ``scipy.signal.fftconvolve(a, k, mode="same")`` (real FFTs of the
    next fast length, product, inverse, centred slice), so the two agree bit for bit
    (tests/test_measure_windows.py), without importing scipy.signal (about a second on a
    loaded machine, paid by every process that measures) or scipy.fft (0.2-0.3 s): numpy's
    FFT is the same pocketfft code as scipy.fft's, and :func:`next_fast_len` picks scipy's
    length, so the transforms agree bit for bit too (same test).
    """
    n = a.size + k.size - 1
    nf = next_fast_len(n)
    spec = np.fft.rfft(a, nf) * np.fft.rfft(k, nf)
    full = np.fft.irfft(spec, nf)[:n]
    start = (n - a.size) // 2
    return full[start : start + a.size]


@functools.lru_cache(maxsize=1)
def _smooth_lengths() -> list[int]:
    """Every 5-smooth number up to 2^22, sorted."""
    top = 1 << 22
    out = []
    p5 = 1
    while p5 <= top:
        p35 = p5
        while p35 <= top:
            p = p35
            while p <= top:
                out.append(p)
                p *= 2
            p35 *= 3
        p5 *= 5
    return sorted(out)


def next_fast_len(n: int) -> int:
    """Smallest 5-smooth number (2^a 3^b 5^c) >= ``n``: scipy.fft.next_fast_len(n, real=True)
    (the lengths pocketfft's real transforms factor fastest), without importing scipy.fft."""
    if 6 < n <= 1 << 22:
        table = _smooth_lengths()
        return table[bisect.bisect_left(table, int(n))]
    if n <= 6:
        return max(int(n), 1)
    best = 1 << (int(n) - 1).bit_length()  # the next power of two is a candidate
    p5 = 1
    while p5 < best:
        p35 = p5
        while p35 < best:
            # the smallest power of two times p35 that reaches n
            q = -(-int(n) // p35)
            cand = p35 << (q - 1).bit_length()
            if cand < best:
                best = cand
            p35 *= 3
        p5 *= 5
    return best


def _silverman_bandwidth(w: np.ndarray, x: np.ndarray) -> float:
    """Silverman's rule-of-thumb kernel width for samples ``x`` with counts ``w``.

    References
    ----------
    B. W. Silverman, *Density Estimation for Statistics and Data Analysis*, Chapman & Hall,
    1986, eq. (3.31): h = 0.9 min(sd, IQR/1.34) n^(-1/5).
    """
    n = float(w.sum())
    mean = float(np.sum(w * x) / n)
    sd = math.sqrt(max(float(np.sum(w * (x - mean) ** 2) / n), 0.0))
    # the quartiles from the bins holding samples only: the counts' running sum is exact
    # (integers), and the first bin where it reaches q n holds samples, so the same bins
    held = np.flatnonzero(w)
    xh = x[held]
    cw = np.cumsum(w[held])
    iqr = _weighted_quantile(xh, w, 0.75, cw) - _weighted_quantile(xh, w, 0.25, cw)
    spread = min(sd, iqr / 1.34) if iqr > 0 else sd
    return 0.9 * spread * n ** (-0.2)


#: Standard deviation of a normal distribution cut to its full width at half maximum
#: (|x| <= sqrt(2 ln 2) sigma), in units of sigma: sqrt(1 - 2 a phi(a) / (2 Phi(a) - 1))
#: with a = 1.1774 (truncated-normal variance; Johnson, Kotz & Balakrishnan, *Continuous
#: Univariate Distributions*, vol. 1, 2nd ed., ch. 13, sec. 10.1).
_FWHM_SD_RATIO = 0.6186


def _fwhm(smooth: np.ndarray, w: np.ndarray) -> tuple[int, int, float]:
    """Bins (lo, hi) of the highest peak down to half its height, and the samples there."""
    k = int(np.argmax(smooth))
    below = smooth < 0.5 * smooth[k]
    # the last bin below half height before the peak and the first after it
    i = int(np.argmax(below[k - 1 :: -1])) if k > 0 else 0
    lo = k - i if k > 0 and below[k - 1 - i] else 0
    i = int(np.argmax(below[k:]))
    hi = k + i - 1 if below[k + i] else smooth.size - 1
    return lo, hi, float(w[lo : hi + 1].sum())


def _half_mode(
    counts: np.ndarray, x: np.ndarray, width: float, sums: np.ndarray | None = None
) -> tuple[float, float] | None:
    """Mode of one half of the histogram, and its peak-to-mean density ratio.

    The counts are smoothed with a Gaussian kernel before taking the mode, so that noise
    does not pick a random bin. The kernel width starts at Silverman's rule of thumb for
    the whole half and is then re-estimated from the samples under the peak alone (its
    full width at half maximum, corrected to the spread of a normal peak), until it stops
    shrinking or the narrower peak would hold less than half the samples of the wider
    one: a sharp state (a settled, clean level) is then located to the bin width, a noisy
    one with a kernel matched to its noise, and the turning points of ringing that has
    not died out are not taken for a state. The peak is refined by a parabola
    through the largest smoothed bin and its neighbours.

    References
    ----------
    B. W. Silverman, *Density Estimation for Statistics and Data Analysis*, 1986, eq. 3.31.
    """
    n = counts.sum()
    if n == 0:
        return None
    w = counts.astype(np.float64)
    h_bins = _silverman_bandwidth(w, x) / width
    smooth = _smoothed(w, h_bins)
    peak = _fwhm(smooth, w)
    for _ in range(12):
        lo, hi, n_loc = peak
        if n_loc <= 1 or h_bins < 0.5:
            break
        wl, xl = w[lo : hi + 1], x[lo : hi + 1]
        m = float(np.sum(wl * xl) / n_loc)
        sd_loc = math.sqrt(max(float(np.sum(wl * (xl - m) ** 2) / n_loc), 0.0)) / _FWHM_SD_RATIO
        # Silverman (1986) eq. 3.31 applied to the peak's own samples
        h_new = 0.9 * sd_loc * n_loc ** (-0.2) / width
        if h_new >= 0.8 * h_bins:
            break
        smooth_new = _smoothed(w, h_new)
        peak_new = _fwhm(smooth_new, w)
        if peak_new[2] < 0.5 * n_loc:
            # the narrower peak holds a minority of the samples: a turning point of
            # ringing that has not died out, not a state; keep the wider kernel
            break
        h_bins, smooth, peak = h_new, smooth_new, peak_new
    k = int(np.argmax(smooth))
    mean_density = n / smooth.size
    if h_bins < 0.5 and sums is not None and counts[k] > 0:
        # unsmoothed: the state is sharper than a bin; use the mean of its samples
        return float(sums[k] / counts[k]), float(smooth[k] / mean_density)
    offset = 0.0
    if 0 < k < smooth.size - 1:
        a, b, c = smooth[k - 1], smooth[k], smooth[k + 1]
        den = a - 2.0 * b + c
        if den < 0:
            # vertex of the parabola through three equally spaced points
            offset = 0.5 * (a - c) / den
    return float(x[k] + offset * width), float(smooth[k] / mean_density)


def state_levels(hist: LevelHistogram, c: int, method: str = "histogram") -> StateLevels:
    """State levels of channel ``c`` by the histogram mode method, or min/max.

    Parameters
    ----------
    hist : LevelHistogram
        The channel's accumulated histogram.
    c : int
        Channel index in ``hist``.
    method : {"histogram", "minmax", "segment"}
        ``"histogram"`` (and ``"segment"``, whose starting point this is): split the
        histogram at the midpoint of its range and take the mode of each half (falls back
        to min/max, and says so, when a half holds no clear peak). ``"minmax"``: the
        smallest and largest sample.

    Returns
    -------
    StateLevels

    References
    ----------
    IEEE Std 181-2011, *IEEE Standard for Transitions, Pulses, and Related Waveforms*,
    clause 5.2 (state-level algorithms: histogram mode; min/max as the simple
    alternative). Clause number from memory.
    """
    lo, hi = float(hist.lo[c]), float(hist.hi[c])
    if method not in STATE_LEVEL_METHODS:
        raise MeasurementError(
            f"unknown state-level method {method!r}; use one of {', '.join(STATE_LEVEL_METHODS)}"
        )
    if method == "minmax":
        return StateLevels(lo, hi, "minmax")
    # "segment" starts from the histogram too: its transitions cut the record into segments
    counts = hist.counts[c]
    x = hist.centers(c)
    width = (hi - lo) / hist.n_bins
    half = hist.n_bins // 2  # IEEE Std 181: split the bimodal histogram at its midpoint
    sums = hist.sums[c]
    low = _half_mode(counts[:half], x[:half], width, sums[:half])
    high = _half_mode(counts[half:], x[half:], width, sums[half:])
    problems = []
    if low is None or low[1] < PEAK_TO_MEAN_MIN:
        problems.append("lower")
    if high is None or high[1] < PEAK_TO_MEAN_MIN:
        problems.append("upper")
    if problems:
        return StateLevels(
            lo,
            hi,
            "minmax",
            note=(
                f"histogram not bimodal (no clear peak in the {' and '.join(problems)} half); "
                "min/max used"
            ),
        )
    return StateLevels(low[0], high[0], "histogram")


def check_percentages(reference_levels_pct: Sequence[float], settling_band_pct: float) -> None:
    """Validate reference levels (ascending, inside (0, 100) %) and the settling band."""
    try:
        pcts = [float(p) for p in reference_levels_pct]
    except (TypeError, ValueError):
        raise MeasurementError(
            f"reference levels must be three numbers in percent, got {reference_levels_pct!r}"
        ) from None
    if len(pcts) != 3:
        raise MeasurementError(
            f"reference levels must be three percentages (low, mid, high), got {len(pcts)}"
        )
    for p in pcts:
        if not (0.0 < p < 100.0) or not math.isfinite(p):
            raise MeasurementError(f"reference level {p:g} % is outside (0, 100) %")
    if not pcts[0] < pcts[1] < pcts[2]:
        raise MeasurementError(
            f"reference levels must rise: low < mid < high, got {pcts[0]:g}, {pcts[1]:g}, "
            f"{pcts[2]:g} %"
        )
    band = float(settling_band_pct)
    if not (0.0 < band < 100.0) or not math.isfinite(band):
        raise MeasurementError(f"settling band ±{band:g} % is outside (0, 100) %")


def reference_values(levels: StateLevels, pcts: Sequence[float]) -> tuple[float, float, float]:
    """Reference levels in signal units: low + p/100 * amplitude (IEEE Std 181-2011, 5.3)."""
    return tuple(levels.low + float(p) / 100.0 * levels.amplitude for p in pcts)  # type: ignore
