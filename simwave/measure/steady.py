"""Steady-state metrics: window statistics, sine fits (IEEE Std 1057), THD, SINAD, tones.

All functions here work on the steady-state window, a bounded slice at the end of
the record (see :func:`simwave.measure.measure`), held in memory.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from simwave.errors import MeasurementError


#: Periodic (DFT-even) sum-of-cosines windows: Hann and the 4-term Blackman-Harris (F. J.
#: Harris, "On the use of windows for harmonic analysis with the discrete Fourier
#: transform", Proc. IEEE 66(1), 1978).
HANN = (0.5, 0.5)
BLACKMAN_HARRIS_4 = (0.35875, 0.48829, 0.14128, 0.01168)


def cosine_window(n: int, coeffs: tuple) -> np.ndarray:
    """Periodic sum-of-cosines window of ``n`` points: sum_k a_k cos(k x), x from -pi in
    ``n + 1`` equal steps, the last point dropped (Harris 1978). Evaluated in the same
    order as ``scipy.signal.windows.general_cosine(n, coeffs, sym=False)``, so the two
    agree bit for bit (tests/test_measure_windows.py), without importing scipy.signal
    (about a second on a loaded machine) for two windows."""
    if n <= 1:
        return np.ones(n)
    x = np.linspace(-np.pi, np.pi, n + 1, dtype=np.float64)
    w = np.zeros(n + 1, dtype=np.float64)
    for k, a in enumerate(np.asarray(coeffs, dtype=np.float64)):
        w += a * np.cos(k * x)
    return w[:-1]


@dataclass
class ToneFit:
    """One sinusoid y = amplitude * cos(2 pi f t + phase) of a least-squares fit.

    ``t`` is seconds from the first sample of the record (not of the fit window), so
    phases of two channels fitted on the same window compare directly.
    """

    frequency_hz: float
    amplitude: float
    phase_rad: float


@dataclass
class SineFit:
    """Result of a (multi-)sine least-squares fit on one window."""

    tones: list[ToneFit]
    offset: float
    residual_rms: float
    ac_rms: float  # RMS of the window about its mean
    iterations: int
    converged: bool

    @property
    def explained(self) -> float:
        """Fraction of the window's AC power the fitted sinusoids account for."""
        if self.ac_rms == 0:
            return 0.0
        return max(0.0, 1.0 - (self.residual_rms / self.ac_rms) ** 2)


def _wrap(phase: float) -> float:
    """Phase wrapped to (-pi, pi]."""
    w = math.remainder(phase, 2.0 * math.pi)
    return math.pi if w == -math.pi else w


#: Rows per chunk when forming the normal equations: the design matrix is never held
#: whole, so a long window costs time, not memory.
_CHUNK = 32768


def _design(tc: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Columns cos(w_k t), sin(w_k t) for each k, then a column of ones."""
    d = np.empty((tc.size, 2 * w.size + 1))
    d[:, -1] = 1.0
    k = np.arange(1, w.size + 1)
    if w.size > 2 and w[0] > 0 and np.allclose(w, k * w[0], rtol=1e-15, atol=0):
        # harmonic series: e^{jkwt} by repeated multiplication, far cheaper than k cos/sin
        # evaluations; the rounding grows like k * 1e-16, negligible for k <= 1000
        z = np.exp(1j * w[0] * tc)
        zk = z.copy()
        for i in range(w.size):
            d[:, 2 * i] = zk.real
            d[:, 2 * i + 1] = zk.imag
            zk *= z
        return d
    ph = np.outer(tc, w)
    d[:, 0:-1:2] = np.cos(ph)
    d[:, 1:-1:2] = np.sin(ph)
    return d


def _with_derivatives(
    tc: np.ndarray, w: np.ndarray, mix: np.ndarray, coef: np.ndarray
) -> np.ndarray:
    """Design columns plus, per free frequency parameter j, the model's derivative
    sum_k mix[k, j] t (-a_k sin(w_k t) + b_k cos(w_k t)) (IEEE Std 1057 four-parameter fit)."""
    d = _design(tc, w)
    a, b = coef[0 : 2 * w.size : 2], coef[1 : 2 * w.size : 2]
    per_tone = tc[:, None] * (-a * d[:, 1:-1:2] + b * d[:, 0:-1:2])
    return np.column_stack([d, per_tone @ mix])


def _solve(y: np.ndarray, tc: np.ndarray, build) -> np.ndarray:
    """Least squares by chunked normal equations with column scaling."""
    g = None
    rhs = None
    for s0 in range(0, y.size, _CHUNK):
        dm = build(tc[s0 : s0 + _CHUNK])
        if g is None:
            g = np.zeros((dm.shape[1], dm.shape[1]))
            rhs = np.zeros(dm.shape[1])
        g += dm.T @ dm
        rhs += dm.T @ y[s0 : s0 + _CHUNK]
    diag = np.diag(g)
    scale = 1.0 / np.sqrt(np.where(diag > 0, diag, 1.0))
    z, *_ = np.linalg.lstsq(g * scale[:, None] * scale[None, :], rhs * scale, rcond=None)
    return z * scale


def _rss(y: np.ndarray, tc: np.ndarray, w: np.ndarray, coef: np.ndarray) -> float:
    total = 0.0
    for s0 in range(0, y.size, _CHUNK):
        r = y[s0 : s0 + _CHUNK] - _design(tc[s0 : s0 + _CHUNK], w) @ coef
        total += float(np.dot(r, r))
    return total


def _fit_sinusoids(
    y: np.ndarray, t: np.ndarray, theta: np.ndarray, mix: np.ndarray, refine: bool, max_iter: int
) -> SineFit:
    """Fit sum_k A_k cos(w_k t + phi_k) + C with w = mix @ theta (rad/s).

    ``mix`` is the identity for independent tones and a column of harmonic orders for a
    harmonic series. With ``refine`` the parameters ``theta`` are estimated by
    Gauss-Newton steps on the model linearised in them, halving a step that would raise
    the residual.
    """
    y = np.asarray(y, dtype=np.float64)
    t = np.asarray(t, dtype=np.float64)
    t_mid = 0.5 * (t[0] + t[-1])
    tc = t - t_mid  # centred time keeps the columns well conditioned
    theta = np.asarray(theta, dtype=np.float64)
    w = mix @ theta
    coef = _solve(y, tc, lambda tt: _design(tt, w))
    rss = _rss(y, tc, w, coef)
    span = max(float(t[-1] - t[0]), 1e-300)
    iterations, converged = 0, not refine
    n_tones = w.size
    for it in range(1, (max_iter if refine else 0) + 1):
        iterations = it
        wc, cc = w, coef
        sol = _solve(y, tc, lambda tt, wc=wc, cc=cc: _with_derivatives(tt, wc, mix, cc))
        dtheta = sol[2 * n_tones + 1 :]
        if np.all(np.abs(mix @ dtheta) * span <= 1e-10):
            converged = True  # the step would move the phase at the ends by < 1e-10 rad
            break
        step, accepted = 1.0, False
        for _ in range(8):
            w_try = mix @ (theta + step * dtheta)
            coef_try = _solve(y, tc, lambda tt, wt=w_try: _design(tt, wt))
            rss_try = _rss(y, tc, w_try, coef_try)
            if rss_try <= rss:
                accepted = True
                break
            step *= 0.5
        if not accepted:
            converged = True  # no descent left: at the minimum to working precision
            break
        gained = rss - rss_try
        theta, w, coef, rss = theta + step * dtheta, w_try, coef_try, rss_try
        if gained <= 1e-13 * rss:
            converged = True  # residual no longer falls: at the minimum to working precision
            break
    tones = []
    for i in range(n_tones):
        a, b = float(coef[2 * i]), float(coef[2 * i + 1])
        # a cos(wt) + b sin(wt) = R cos(wt + phi), phi = atan2(-b, a); then move the
        # phase origin from the window centre back to the record start.
        phi = math.atan2(-b, a) - w[i] * t_mid
        tones.append(ToneFit(float(w[i] / (2.0 * math.pi)), math.hypot(a, b), _wrap(phi)))
    return SineFit(
        tones,
        float(coef[-1]),
        math.sqrt(max(rss, 0.0) / y.size),
        float(np.std(y)),
        iterations,
        converged,
    )


def fit_tones(
    y: np.ndarray,
    t: np.ndarray,
    freqs_hz: list[float],
    *,
    refine: bool = False,
    max_iter: int = 60,
) -> SineFit:
    """Least-squares fit of sinusoids at given frequencies plus an offset.

    With one frequency and ``refine=False`` this is the IEEE Std 1057 three-parameter
    (known-frequency) fit; with ``refine=True`` the frequencies are estimated too,
    which for one frequency is the four-parameter fit: Gauss-Newton iterations on the
    model linearised in the frequency, started from ``freqs_hz``.

    Parameters
    ----------
    y : ndarray, shape (n,)
        Samples of the window.
    t : ndarray, shape (n,)
        Their times in seconds from the start of the record.
    freqs_hz : list of float
        Known (or initial) frequencies.
    refine : bool
        Estimate the frequencies as well.

    Returns
    -------
    SineFit

    References
    ----------
    IEEE Std 1057-2017, *IEEE Standard for Digitizing Waveform Recorders*: the
    three-parameter (known frequency, linear least squares) and four-parameter
    (iterative, frequency estimated) sine-wave fits. The multi-tone form is the
    same least squares with one cosine/sine pair per tone.
    """
    theta = 2.0 * math.pi * np.asarray(freqs_hz, dtype=np.float64)
    return _fit_sinusoids(y, t, theta, np.eye(theta.size), refine, max_iter)


def spectrum_peak_hz(y: np.ndarray, rate: float) -> float:
    """Frequency of the largest spectral peak, interpolated between FFT bins.

    Hann window, then a parabola through the logarithms of the three largest-bin
    magnitudes (Gaussian interpolation): a start value within a small fraction of a
    bin for the four-parameter fit.

    References
    ----------
    M. Gasior and J. L. Gonzalez, "Improving FFT frequency measurement resolution by
    parabolic and Gaussian spectrum interpolation", AIP Conf. Proc. 732, 2004.
    """
    return peak_hz_of(hann_magnitude(y), y.size, rate)


def hann_magnitude(y: np.ndarray) -> np.ndarray:
    """|rfft| of the window about its mean, Hann-weighted (the spectrum the peak and the
    concentration below are read from)."""
    return np.abs(np.fft.rfft((y - np.mean(y)) * cosine_window(y.size, HANN)))


def peak_hz_of(spec: np.ndarray, n: int, rate: float) -> float:
    """:func:`spectrum_peak_hz` on a spectrum already taken by :func:`hann_magnitude`."""
    if spec.size < 3:
        raise MeasurementError("window too short for a spectrum")
    k = int(np.argmax(spec[1:])) + 1
    offset = 0.0
    if 1 <= k < spec.size - 1 and spec[k - 1] > 0 and spec[k + 1] > 0:
        la, lb, lc = np.log(spec[k - 1]), np.log(spec[k]), np.log(spec[k + 1])
        den = la - 2.0 * lb + lc
        if den < 0:
            offset = 0.5 * (la - lc) / den
    return (k + offset) * rate / n


#: Half-width in bins of the band :func:`tone_concentration` sums: the Hann main lobe is
#: +/-2 bins and its sidelobes fall 18 dB per octave, so a tone leaves far less than 1e-4
#: of its windowed energy outside +/-8 bins (Harris 1978, Hann window figures).
CONCENTRATION_HALF_BINS = 8


def tone_concentration(spec: np.ndarray) -> tuple[float, int]:
    """Spectral concentration of a Hann spectrum from :func:`hann_magnitude`: the largest
    fraction of the windowed energy found in any ``2 * CONCENTRATION_HALF_BINS + 1``
    consecutive bins, and the centre bin of that band.

    A sine holds nearly all of its windowed energy in one such band; white noise spreads
    its energy evenly, so any one band of a long window holds a small share (about
    17 / (n / 2) of it, a few times more at its largest).
    """
    p = spec * spec
    total = float(p.sum())
    width = 2 * CONCENTRATION_HALF_BINS + 1
    if total <= 0 or p.size <= width:
        return 1.0, 0
    c = np.concatenate(([0.0], np.cumsum(p)))
    band = c[width:] - c[:-width]
    j = int(np.argmax(band))
    return float(band[j]) / total, j + CONCENTRATION_HALF_BINS


def find_tones(
    y: np.ndarray, rate: float, threshold_db: float = -50.0, max_tones: int = 64
) -> list[float]:
    """Frequencies of the tones in a window: spectral peaks within ``threshold_db`` of the
    largest and 20 dB above the median level.

    A 4-term Blackman-Harris window (sidelobes near -92 dB) keeps one tone's sidelobes
    from passing as another tone; a peak must be the largest within +/-4 bins (its main
    lobe). Frequencies are interpolated as in :func:`spectrum_peak_hz`.

    References
    ----------
    F. J. Harris, "On the use of windows for harmonic analysis with the discrete
    Fourier transform", Proc. IEEE 66(1), 1978 (4-term Blackman-Harris window).
    """
    n = y.size
    win = cosine_window(n, BLACKMAN_HARRIS_4)
    # remove the window-weighted mean: it takes out the offset's main lobe exactly, where
    # the plain mean of a non-integer number of cycles would leave a false low tone
    spec = np.abs(np.fft.rfft((y - np.dot(win, y) / win.sum()) * win))
    if spec.size < 10:
        return []
    spec[:4] = 0.0  # inside the DC main lobe (+/-4 bins): no tone can be told from an offset
    db = 20.0 * np.log10(np.maximum(spec, 1e-300))
    top = float(db.max())
    floor = float(np.median(db[1:]))
    limit = max(top + threshold_db, floor + 20.0)
    out = []
    for k in np.flatnonzero(db >= limit):
        lo, hi = max(1, k - 4), min(spec.size, k + 5)
        if k == 0 or spec[k] < spec[lo:hi].max() or k == spec.size - 1:
            continue
        la, lb, lc = np.log(spec[k - 1] + 1e-300), np.log(spec[k]), np.log(spec[k + 1] + 1e-300)
        den = la - 2.0 * lb + lc
        offset = 0.5 * (la - lc) / den if den < 0 else 0.0
        out.append(((k + offset) * rate / n, float(spec[k])))
    out.sort(key=lambda p: -p[1])
    return sorted(f for f, _ in out[:max_tones])


def harmonic_fit(
    y: np.ndarray,
    t: np.ndarray,
    f_hz: float,
    rate: float,
    n_harmonics: int,
    *,
    refine: bool = False,
    max_iter: int = 60,
) -> tuple[SineFit, int]:
    """Joint least-squares fit of the fundamental and harmonics 2..N below Nyquist.

    With ``refine=True`` the fundamental frequency is estimated too, every harmonic
    tied to k times it: the four-parameter fit extended to a harmonic series, so that
    harmonics cannot bias the fundamental's frequency (as they do a sine-only fit on a
    non-integer number of cycles).

    Returns the fit (tones in harmonic order) and the highest harmonic order included.

    References
    ----------
    IEEE Std 1057-2017, four-parameter sine fit; the harmonic columns are the same least
    squares with one cosine/sine pair per harmonic.
    """
    orders = [k for k in range(1, n_harmonics + 1) if k * f_hz < 0.5 * rate]
    mix = np.asarray(orders, dtype=np.float64)[:, None]
    fit = _fit_sinusoids(y, t, np.array([2.0 * math.pi * f_hz]), mix, refine, max_iter)
    return fit, orders[-1]


def thd_ratio(fit: SineFit) -> float:
    """Total harmonic distortion: RMS of harmonics 2..N over RMS of the fundamental.

    References
    ----------
    IEEE Std 1057-2017 (THD: root-sum-square of the harmonic amplitudes relative to the
    fundamental amplitude).
    """
    fund = fit.tones[0].amplitude
    if fund == 0:
        return math.inf
    return math.sqrt(sum(h.amplitude**2 for h in fit.tones[1:])) / fund


def sinad_db(fit: SineFit) -> float:
    """SINAD = 20 log10(fundamental RMS / RMS of the fit residual) in dB.

    References
    ----------
    IEEE Std 1057-2017: signal to noise-and-distortion ratio, the noise and distortion
    being the residual of the sine fit.
    """
    sig_rms = fit.tones[0].amplitude / math.sqrt(2.0)
    if fit.residual_rms == 0:
        return math.inf
    return 20.0 * math.log10(sig_rms / fit.residual_rms)


def window_stats(y: np.ndarray) -> dict:
    """Mean, RMS and peak-to-peak ripple of a window."""
    return {
        "mean": float(np.mean(y)),
        "rms": float(math.sqrt(np.mean(y * y))),
        "ripple_pp": float(np.max(y) - np.min(y)),
    }


def line_fit(y: np.ndarray, t: np.ndarray) -> tuple[float, float, float]:
    """Least-squares straight line through a window: (slope per s, value at t[-1], R^2)."""
    tc = t - t.mean()
    den = float(np.dot(tc, tc))
    if den == 0:
        return 0.0, float(y[-1]), 0.0
    slope = float(np.dot(tc, y - y.mean()) / den)
    fitted = y.mean() + slope * tc
    ss_tot = float(np.sum((y - y.mean()) ** 2))
    ss_res = float(np.sum((y - fitted) ** 2))
    r2 = 1.0 - ss_res / ss_tot if ss_tot > 0 else 0.0
    return slope, float(fitted[-1]), r2
