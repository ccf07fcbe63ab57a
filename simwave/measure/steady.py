"""Steady-state metrics: window statistics, sine fits (IEEE Std 1057), THD, SINAD, tones.

All functions here work on the steady-state window, a bounded slice at the end of
the record (see :func:`simwave.measure.measure`), held in memory.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.signal import windows

from simwave.errors import MeasurementError


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


def _design(tc: np.ndarray, w: np.ndarray) -> np.ndarray:
    cols = []
    for wk in w:
        cols.append(np.cos(wk * tc))
        cols.append(np.sin(wk * tc))
    cols.append(np.ones_like(tc))
    return np.column_stack(cols)


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
    model linearised in the frequency, started from ``freqs_hz``, with step halving
    when a step would increase the residual.

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
    y = np.asarray(y, dtype=np.float64)
    t = np.asarray(t, dtype=np.float64)
    t_mid = 0.5 * (t[0] + t[-1])
    tc = t - t_mid  # centred time keeps the columns well conditioned
    w = 2.0 * math.pi * np.asarray(freqs_hz, dtype=np.float64)
    ac_rms = float(np.std(y))

    def solve(wv: np.ndarray) -> tuple[np.ndarray, float]:
        d = _design(tc, wv)
        coef, *_ = np.linalg.lstsq(d, y, rcond=None)
        r = y - d @ coef
        return coef, float(np.dot(r, r))

    coef, rss = solve(w)
    iterations, converged = 0, not refine
    if refine:
        span = t[-1] - t[0]
        for it in range(1, max_iter + 1):
            iterations = it
            k = w.size
            a, b = coef[0 : 2 * k : 2], coef[1 : 2 * k : 2]
            d = _design(tc, w)
            # IEEE Std 1057 four-parameter fit: the extra column per tone is the
            # derivative of the model with respect to its angular frequency.
            extra = [tc * (-a[i] * np.sin(w[i] * tc) + b[i] * np.cos(w[i] * tc)) for i in range(k)]
            d4 = np.column_stack([d, *extra])
            sol, *_ = np.linalg.lstsq(d4, y, rcond=None)
            dw = sol[2 * k + 1 :]
            step, accepted = 1.0, False
            for _ in range(30):
                w_try = w + step * dw
                coef_try, rss_try = solve(w_try)
                if rss_try <= rss * (1.0 + 1e-15) + 1e-300:
                    accepted = True
                    break
                step *= 0.5
            if not accepted:
                converged = True  # no descent direction left: at the minimum to precision
                break
            w, coef, rss = w_try, coef_try, rss_try
            if np.all(np.abs(step * dw) * max(span, 1e-300) <= 1e-12):
                converged = True
                break
    k = w.size
    tones = []
    for i in range(k):
        a, b = float(coef[2 * i]), float(coef[2 * i + 1])
        amp = math.hypot(a, b)
        # a cos(wt) + b sin(wt) = R cos(wt + phi), phi = atan2(-b, a); then move the
        # phase origin from the window centre back to the record start.
        phi = math.atan2(-b, a) - w[i] * t_mid
        tones.append(ToneFit(float(w[i] / (2.0 * math.pi)), amp, _wrap(phi)))
    resid_rms = math.sqrt(max(rss, 0.0) / y.size)
    return SineFit(tones, float(coef[-1]), resid_rms, ac_rms, iterations, converged)


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
    n = y.size
    spec = np.abs(np.fft.rfft((y - np.mean(y)) * windows.hann(n, sym=False)))
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
    spec = np.abs(np.fft.rfft((y - np.mean(y)) * windows.blackmanharris(n, sym=False)))
    if spec.size < 10:
        return []
    spec[0] = 0.0
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
    y: np.ndarray, t: np.ndarray, f_hz: float, rate: float, n_harmonics: int
) -> tuple[SineFit, int]:
    """Joint least-squares fit of the fundamental and harmonics 2..N below Nyquist.

    Returns the fit and the highest harmonic order included.
    """
    orders = [k for k in range(1, n_harmonics + 1) if k * f_hz < 0.5 * rate]
    fit = fit_tones(y, t, [k * f_hz for k in orders])
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
