"""From H(s) to a discrete model by one of five published methods.

Methods (names as the trade uses them):

``bilinear``
    s = K (z - 1)/(z + 1), K = 2/T, or with a prewarp frequency f0,
    K = w0 / tan(w0 T / 2) so that the discrete response equals H(j w0) at f0
    (Oppenheim & Schafer, *Discrete-Time Signal Processing*, 3rd ed., sec. 7.2.2).
``impulse-invariant``
    h[n] = T h_c(nT), with h[0] = T h_c(0+)/2 where h_c jumps at t = 0
    (Oppenheim & Schafer sec. 7.2.1; L. B. Jackson, "A correction to impulse
    invariance", IEEE Signal Processing Letters 7(10), 2000); a biproper H(s)
    keeps its direct term D as D delta[n].
``step-invariant``
    zero-order-hold equivalent: exact samples of the analog output for inputs
    held constant between samples (Franklin, Powell & Workman, *Digital Control
    of Dynamic Systems*, 3rd ed., sec. 6.3.1).
``ramp-invariant``
    triangle-hold (first-order-hold) equivalent: exact samples of the analog
    output for inputs linear between samples (same book, sec. 6.3.2). The
    default, because sampled data is most commonly read as joined by straight
    lines. The system is at rest before the first sample (the convention of
    scipy.signal.lsim), which the filter state makes exact at the first sample.
``matched-z``
    poles and finite zeros mapped by z = e^{sT}, zeros at infinity to z = -1,
    gain matched at DC or, where the DC gain is 0 or infinite, at a stated
    frequency (same book, sec. 6.3.3).

Section numbers of Oppenheim & Schafer 7.2.1/7.2.2 are those the project's
design notes cite; the Franklin, Powell & Workman subsection numbers are
quoted from memory (chapter 6 is the discrete equivalents chapter).

The step- and ramp-invariant models are computed from a state-space
realization with the matrix exponential (Van Loan's block method); their zeros
come from the QZ algorithm on the system pencil, never from high-order
polynomials. The result is a zeros/poles/gain form that
:class:`simwave.discrete.DiscreteSystem` turns into second-order sections.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from simwave.errors import DiscretizationError
from simwave.discrete.names import DEFAULT_METHOD, METHODS  # noqa: F401 - re-exported
from simwave.discrete.realization import (
    analog_state_space,
    delta_gain_response,
    exp_increment,
    hold_increments,
    magnitude,
    pencil_zeros,
    series_state_space,
    tidy_roots,
)

#: Methods whose fractional dead time is exact (modified z-transform).
EXACT_FRACTION_METHODS = ("step-invariant", "ramp-invariant")

#: The log grid of angles (radians per sample) the hold methods' gain is matched among
#: (with DC and the poles' natural frequencies); made once.
_THETA_GRID = np.geomspace(1e-9, math.pi, 48)
_THETA_GRID.flags.writeable = False

#: A dead time within this many samples of a whole number counts as whole.
_WHOLE_TOL = 1e-9


class ModelWarning(UserWarning):
    """The discrete model is usable but has a property the user should know about."""


@dataclass
class Design:
    """A discrete model before it becomes second-order sections (internal).

    ``zeros``, ``poles``, ``gain`` are in z; ``analog`` is the continuous
    (A, B, C, D) it came from; ``correction`` is, for the ramp-invariant
    method, the change a unit first sample makes to the textbook model's
    output at sample 0 and to the analog state at sample 1 (see
    :func:`_hold_design`); ``bilinear_k`` is K of s = K (z - 1)/(z + 1).
    ``increment`` is the same model as an incremental (delta-operator) state
    space (E, G, C, D): x[k+1] = x[k] + E x[k] + G u[k], y[k] = C x[k] + D u[k],
    E = Phi - I block lower triangular with 1 x 1 and 2 x 2 (modal) diagonal
    blocks, every entry to its own relative accuracy (see
    :func:`simwave.discrete.realization.exp_increment`). ``response`` (hold
    methods) is (theta, h): the increment form's frequency response at angles
    theta (radians per sample), what the gain was matched among; the choice of
    realization compares the sections with it.
    """

    zeros: np.ndarray
    poles: np.ndarray
    gain: float
    analog: tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]
    correction: tuple[float, np.ndarray] | None = None
    bilinear_k: float | None = None
    notes: dict[str, Any] = field(default_factory=dict)
    increment: tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray] | None = None
    response: tuple[np.ndarray, np.ndarray] | None = None


# --------------------------------------------------------------------------- validation
def _number(value: Any, what: str) -> float:
    try:
        x = float(value)
    except (TypeError, ValueError):
        raise DiscretizationError(f"{what} must be a number, got {value!r}") from None
    return x


def check_rate(rate_hz: Any) -> float:
    """The sample rate as a float; DiscretizationError unless finite and > 0."""
    rate = _number(rate_hz, "sample rate (Hz)")
    if not math.isfinite(rate) or rate <= 0:
        raise DiscretizationError(
            f"sample rate must be a finite number of hertz above 0, got {rate_hz!r}"
        )
    return rate


def check_method(method: Any) -> str:
    """The method name; DiscretizationError listing the known ones otherwise."""
    name = str(method).strip().lower() if method is not None else DEFAULT_METHOD
    if name not in METHODS:
        raise DiscretizationError(
            f"unknown discretization method {method!r}; known methods: {', '.join(METHODS)}"
        )
    return name


def _check_frequency(value: Any, what: str, rate: float) -> float:
    f = _number(value, what)
    if not math.isfinite(f) or f <= 0:
        raise DiscretizationError(f"{what} must be a finite frequency above 0 Hz, got {value!r}")
    if f >= rate / 2:
        raise DiscretizationError(
            f"{what} {f:g} Hz is at or above the Nyquist frequency {rate / 2:g} Hz "
            f"of the {rate:g} Hz sample rate"
        )
    return f


# --------------------------------------------------------------------------- the methods
def _bilinear_design(zeros, poles, gain, T, prewarp_hz):
    """Bilinear transform with optional prewarping (O&S 3rd ed., sec. 7.2.2).

    s = K (z - 1)/(z + 1) maps a root r to z = (K + r)/(K - r); zeros at
    infinity go to z = -1; the gain becomes k prod(K - z_i)/prod(K - p_i).
    K = 2/T without prewarping; K = w0/tan(w0 T/2) makes the analog frequency
    w0 land exactly on the discrete frequency w0 (Omega = 2/T tan(w T/2)).
    """
    if prewarp_hz is None:
        K = 2.0 / T
    else:
        w0 = 2 * math.pi * prewarp_hz
        K = w0 / math.tan(w0 * T / 2)
    for r in np.concatenate([zeros, poles]):
        if abs(K - r) <= 1e-12 * K:
            raise DiscretizationError(
                f"a root at s = {r.real:g} rad/s equals the bilinear constant K = {K:g}: "
                "it maps to z = infinity; choose another sample rate"
            )
    zd = (K + zeros) / (K - zeros)
    pd = (K + poles) / (K - poles)
    zd = np.concatenate([zd, -np.ones(poles.size - zeros.size)])
    kd = float(np.real(gain * np.prod(K - zeros) / np.prod(K - poles)))
    return zd, pd, kd, K


def _impulse_design(A, B, C, D, T):
    """Impulse invariance with Jackson's half-sample correction, in state space.

    h[n] = T C e^{A n T} B for n >= 1 (O&S sec. 7.2.1) and h[0] = T C B / 2 + D:
    the average of h_c(0-) = 0 and h_c(0+) = C B where the impulse response jumps
    at t = 0 (Jackson 2000), plus the direct term of a biproper H(s). So
    H(z) = (T C B / 2 + D) + C (z I - Phi)^{-1} (T Phi B), Phi = e^{A T}.
    Returned in increment form: E = Phi - I (exp_increment), G = T (B + E B).
    """
    E = exp_increment(A * T)
    Gam = T * (B + E @ B)
    Dd = D + T * (C @ B) / 2.0
    return E, Gam, C, Dd


def _hold_design(A, B, C, D, T, kind, frac):
    """Step- or ramp-invariant model with a fractional input delay frac*T, 0 <= frac < 1.

    Returns (E, Gam, Cd, Dd, correction), E = Phi - I (increment form). The input to the plant on
    [kT, (k+1)T] is the held (step) or linearly interpolated (ramp) input
    delayed by frac*T, so the interval splits at kT + frac*T; integrating each
    piece exactly (hold_integrals) gives the modified z-transform of the held
    system (Franklin, Powell & Workman, 3rd ed., sec. 6.3 and the modified
    z-transform of its dead-time section). A delayed input needs one more state,
    the previous input sample.

    For the ramp method the textbook model x[k+1] = Phi x[k] + Ga u[k-1] +
    Gb u[k] + Gc u[k+1] is made causal with xi = x - Gc u. Its zero state
    implies an input that ramped up to u[0] before t = 0; at rest (the lsim
    convention) the input instead starts at u[0] at t = 0 (after the dead
    time). ``correction`` = (dy0, dxi1): for a unit first sample, the true
    minus textbook output at sample 0 and the true minus textbook analog state
    at sample 1; the output difference after that is C Phi^(k-1) dxi1.
    """
    n = A.shape[0]
    if frac == 0.0:
        E, P0, P1 = hold_increments(A, B, T)
        if kind == "step-invariant":
            return E, P0 + P1, C, D, None
        Gam = P1 + E @ P1 + P0  # Phi P1 + P0
        Dd = D + C @ P1
        dy0 = float(D[0, 0] - Dd[0, 0])  # true y[0] = D u0 (lsim), textbook D + C P1
        dxi1 = P0[:, 0] - Gam[:, 0]  # true x[1] = P0 u0, textbook xi[1] = (Phi P1 + P0) u0
        return E, Gam, C, Dd, (dy0, dxi1)
    E1, P01, P11 = hold_increments(A, B, frac * T)
    E2, P02, P12 = hold_increments(A, B, (1 - frac) * T)
    E = E1 + E2 + E2 @ E1  # Phi2 Phi1 - I

    def phi2(X):
        return X + E2 @ X

    # The previous input sample is an extra state, placed first so that the
    # increment matrix stays block lower triangular: x_d[k+1] = u[k] (E = -1).
    def augment(Ga, Gu, Cx, Cd):
        Ea = np.block([[-np.ones((1, 1)), np.zeros((1, n))], [Ga, E]])
        return Ea, np.vstack([np.ones((1, 1)), Gu]), np.hstack([Cd, C if Cx is None else Cx])

    if kind == "step-invariant":
        # u[k-1] acts on [kT, kT + fT), u[k] on [kT + fT, (k+1)T); y[k] = C x + D u[k-1].
        Ga = phi2(P01 + P11)
        Gb = P02 + P12
        Ea, Ga_, Ca = augment(Ga, Gb, None, D)
        return Ea, Ga_, Ca, np.zeros((1, 1)), None
    f = frac
    # First piece: input runs from f u[k-1] + (1-f) u[k] to u[k];
    # second piece: from u[k] to f u[k] + (1-f) u[k+1].
    Ga = phi2(P01) * f
    Gb = phi2(P01 * (1 - f) + P11) + P02 + P12 * f
    Gc = P12 * (1 - f)
    Ea, Gam, Ca = augment(Ga, Gc + E @ Gc + Gb, None, D * f)
    Dd = C @ Gc + D * (1 - f)
    dy0 = float(0.0 - Dd[0, 0])  # the delayed input is still 0 at t = 0
    x1_true = (P02 + P12 * f)[:, 0]  # input jumps to u0 at fT, then ramps towards u[1]
    dxi1 = x1_true - Gam[1:, 0]
    return Ea, Gam, Ca, Dd, (dy0, dxi1)


def peak_frequency(zeros, poles, gain, f_lo: float, f_hi: float) -> float:
    """Frequency (Hz) of the largest |H| on a log grid over [f_lo, f_hi]."""
    f = np.geomspace(f_lo, f_hi, 400)
    s = 2j * np.pi * f
    with np.errstate(divide="ignore", invalid="ignore"):
        logm = np.log(abs(gain)) + np.sum(np.log(np.abs(s[:, None] - zeros[None, :])), axis=1)
        logm -= np.sum(np.log(np.abs(s[:, None] - poles[None, :])), axis=1)
    logm[~np.isfinite(logm)] = -np.inf
    return float(f[int(np.argmax(logm))])


def _matched_design(zeros, poles, gain, T, rate, match_hz, dc_gain):
    """Matched pole-zero mapping z = e^{sT} (Franklin, Powell & Workman sec. 6.3.3).

    Zeros at infinity go to z = -1. The gain matches H at DC when H(0) is
    finite and non-zero; otherwise at ``match_hz`` (default: where |H| peaks
    on a log grid from 1e-5 to 0.45 times the rate), matching the magnitude,
    with the sign that keeps the phase error under 90 degrees.
    """
    zd = np.exp(zeros * T)
    pd = np.exp(poles * T)
    zd = np.concatenate([zd, -np.ones(poles.size - zeros.size)])
    where = "DC"
    # z - 1 = expm1(sT): products near z = 1 keep their digits.
    wz = np.concatenate([np.expm1(zeros * T), -2.0 * np.ones(poles.size - zeros.size)])
    wp = np.expm1(poles * T)
    if math.isfinite(dc_gain) and dc_gain != 0.0 and match_hz is None:
        unit = np.prod(-wz) / np.prod(-wp)
        kd = float(np.real(dc_gain / unit))
        at = 0.0
    else:
        at = match_hz if match_hz is not None else peak_frequency(
            zeros, poles, gain, rate * 1e-5, 0.45 * rate
        )
        s = 2j * math.pi * at
        ha = gain * np.prod(s - zeros) / np.prod(s - poles)
        ww = np.expm1(s * T)
        unit = np.prod(ww - wz) / np.prod(ww - wp)
        kd = float(abs(ha) / abs(unit))
        if np.real(ha * np.conj(unit)) < 0:
            kd = -kd
        where = f"{at:.6g} Hz"
    return zd, pd, kd, at, where, (wz, wp)


def thiran_zpk(d: float):
    """First-order Thiran allpass with delay d samples at DC: zeros, poles, gain.

    H(z) = (a + z^-1)/(1 + a z^-1), a = (1 - d)/(1 + d): maximally flat group
    delay at DC, unit magnitude at every frequency (J.-P. Thiran, "Recursive
    digital filters with maximally flat group delay", IEEE Trans. Circuit
    Theory 18(6), 1971). Best for 0.5 <= d < 1.5.
    """
    a = (1.0 - d) / (1.0 + d)
    if a == 0.0:
        return np.zeros(0, complex), np.zeros(1, complex), 1.0
    return np.array([-1.0 / a], complex), np.array([-a], complex), a


def split_delay(delay_samples: float) -> tuple[int, float]:
    """Whole and fractional parts of a dead time in samples (fraction in [0, 1))."""
    whole = math.floor(delay_samples)
    frac = delay_samples - whole
    if frac > 1 - _WHOLE_TOL * max(1.0, delay_samples):
        whole, frac = whole + 1, 0.0
    elif frac < _WHOLE_TOL * max(1.0, delay_samples):
        frac = 0.0
    return int(whole), float(frac)


def design(
    zeros: np.ndarray,
    poles: np.ndarray,
    gain: float,
    rate: float,
    method: str,
    *,
    prewarp_hz: float | None = None,
    match_hz: float | None = None,
    frac: float = 0.0,
) -> Design:
    """Discrete zeros/poles/gain of H(s) by ``method`` at ``rate`` Hz (internal).

    ``frac`` is a fractional input delay in samples, handled exactly by the
    hold methods; the others get no fraction here (see :func:`discretize`).
    """
    zeros = np.asarray(zeros, dtype=np.complex128).ravel()
    poles = np.asarray(poles, dtype=np.complex128).ravel()
    T = 1.0 / rate
    A, B, C, D = analog_state_space(zeros, poles, gain)
    notes: dict[str, Any] = {}
    if method == "bilinear":
        zd, pd, kd, K = _bilinear_design(zeros, poles, gain, T, prewarp_hz)
        # z - 1 = 2 r / (K - r) for z = (K + r)/(K - r); zeros at infinity -> z - 1 = -2.
        wz = np.concatenate([2 * zeros / (K - zeros), -2.0 * np.ones(poles.size - zeros.size)])
        wp = 2 * poles / (K - poles)
        inc = analog_state_space(wz, wp, kd)
        return Design(zd, pd, kd, (A, B, C, D), bilinear_k=K, notes=notes, increment=inc)
    if method == "matched-z":
        zd, pd, kd, at, where, (wz, wp) = _matched_design(
            zeros, poles, gain, T, rate, match_hz, _dc_gain(zeros, poles, gain)
        )
        notes["gain_matched_at_hz"] = at
        notes["gain_matched_at"] = where
        inc = analog_state_space(wz, wp, kd)
        return Design(zd, pd, kd, (A, B, C, D), notes=notes, increment=inc)
    correction = None
    if method == "impulse-invariant":
        E, Gam, Cd, Dd = _impulse_design(A, B, C, D, T)
    else:
        E, Gam, Cd, Dd, correction = _hold_design(A, B, C, D, T, method, frac)
    wp = tidy_roots(np.expm1(poles * T))
    if frac > 0:
        wp = np.concatenate([wp, [-1.0]])
    # Zeros of the delta-domain model (E/T, G, C, D): its pencil tends to the analog
    # one as T -> 0, so zeros near z = 1 come out as z - 1 to full relative accuracy.
    wz = pencil_zeros(E / T, Gam / T, Cd, Dd) * T
    thetas = np.concatenate([[0.0], np.abs(poles) * T, _THETA_GRID])
    kd, th, h = delta_gain_response(E, Gam, Cd, Dd, wz, wp, thetas)
    if kd == 0.0:
        wz = np.zeros(0, dtype=np.complex128)
    pd = np.exp(poles * T)
    if frac > 0:
        pd = np.concatenate([pd, [0.0]])
    return Design(tidy_roots(1.0 + wz), tidy_roots(pd), kd, (A, B, C, D),
                  correction=correction, notes=notes, increment=(E, Gam, Cd, Dd),
                  response=(th, h))


def _dc_gain(zeros, poles, gain) -> float:
    n_int = int(np.sum(poles == 0))
    n_diff = int(np.sum(zeros == 0))
    if n_int > n_diff:
        return math.inf
    if n_diff > n_int:
        return 0.0
    z = zeros[zeros != 0]
    p = poles[poles != 0]
    return float(np.real(gain * np.prod(-z) / np.prod(-p)))


# --------------------------------------------------------------------------- warnings
def model_warnings(system, rate: float, method: str, des: Design, prewarp_hz) -> list[str]:
    """Plain-text warnings about a discrete model (each also fit for stderr).

    Rules of thumb used here (common practice, thresholds chosen by simwave):
    a resonance (damping ratio < 0.5) moved by more than 1 % by the bilinear
    frequency warping; impulse invariance when |H| at the Nyquist frequency is
    less than 40 dB below its peak (the aliased tail is then visible).
    """
    out: list[str] = []
    nyq = rate / 2
    poles = np.asarray(system.poles, dtype=complex)
    zeros = np.asarray(system.zeros, dtype=complex)
    if np.any(poles.real > 0):
        p = poles[np.argmax(poles.real)]
        out.append(
            f"the analog system is unstable (pole at {_c(p)} rad/s has a positive real part); "
            "the discrete model follows it and its output grows without bound"
        )
    elif np.any(poles.real == 0):
        out.append(
            "the analog system has poles on the imaginary axis (an integrator or an "
            "undamped resonance): it is only marginally stable and its output can drift"
        )
    for what, roots in (("pole", poles), ("zero", zeros)):
        for r in roots.tolist():  # Python complex: |r| is the same hypot as numpy's scalar
            if r.imag < 0:
                continue
            f = magnitude(r) / (2 * math.pi)
            if f >= nyq:
                out.append(
                    f"{what} at {_c(r)} rad/s ({f:.4g} Hz) is at or above the Nyquist "
                    f"frequency {nyq:.4g} Hz: the {rate:g} Hz model cannot represent it; "
                    "raise the sample rate"
                )
    pd = np.asarray(des.poles)
    if system.is_stable and pd.size and np.max(np.abs(pd)) >= 1.0:
        out.append(
            f"the discrete model is unstable (pole at |z| = {np.max(np.abs(pd)):.6g}) although "
            "the analog system is stable; raise the sample rate or choose another method"
        )
    if method == "bilinear":
        K = des.bilinear_k
        T = 1 / rate
        for p in poles:
            if p.imag <= 0 or abs(p) == 0:
                continue
            zeta = -p.real / abs(p)
            if zeta >= 0.5:
                continue
            w_a = abs(p.imag)
            w_d = 2 / T * math.atan(w_a / K)  # inverse of Omega = K tan(w T / 2)
            shift = (w_d - w_a) / w_a
            # The resonance's half-power half-width is about zeta w_n (Q = 1/(2 zeta)); a
            # shift of a quarter of it already changes the response there by ~25 %.
            widths = abs(w_d - w_a) / max(zeta * abs(p), 1e-300)
            if abs(shift) > 0.01 or widths > 0.25:
                f_a = w_a / 2 / math.pi
                out.append(
                    f"bilinear frequency warping moves the resonance at {f_a:.4g} Hz "
                    f"(Q = {1 / (2 * max(zeta, 1e-300)):.3g}) to {w_d / 2 / math.pi:.6g} Hz "
                    f"({shift * 100:+.3g} %, {widths:.3g} half-power half-widths): steady "
                    f"sines near {f_a:.4g} Hz come out wrong in level and phase; prewarp at "
                    f"the resonance (prewarp {f_a:.6g} Hz), raise the sample rate, or use a "
                    "hold method (ramp-invariant)"
                )
    if method == "impulse-invariant":
        f_peak = peak_frequency(zeros, poles, system.gain, rate * 1e-5, nyq)
        h = np.abs(system.gain) * np.abs(
            np.prod(2j * np.pi * np.array([f_peak, nyq])[:, None] - zeros[None, :], axis=1)
            / np.prod(2j * np.pi * np.array([f_peak, nyq])[:, None] - poles[None, :], axis=1)
        )
        if h[0] > 0 and h[1] > 1e-2 * h[0]:
            down = max(0.0, -20 * math.log10(h[1] / h[0]))
            out.append(
                f"impulse invariance aliases: |H| at the Nyquist frequency ({nyq:.4g} Hz) is only "
                f"{down:.1f} dB below its peak (rule of thumb: want 40 dB or more); the "
                "discrete gain is off near Nyquist"
            )
    return out


def _c(z: complex) -> str:
    z = complex(z)
    if z.imag == 0:
        return f"{z.real:.6g}"
    return f"{z.real:.6g}{z.imag:+.6g}j"


# --------------------------------------------------------------------------- public entry
def discretize(
    system,
    rate_hz: float,
    method: str = DEFAULT_METHOD,
    *,
    prewarp_hz: float | None = None,
    delay_s: float | None = None,
    match_hz: float | None = None,
    realization: str = "auto",
    **extra: Any,
):
    """Discrete model of ``system`` at ``rate_hz`` by a published method.

    Parameters
    ----------
    system : simwave.System
        The analog model H(s), possibly with dead time ``system.delay_s``.
    rate_hz : float
        Sample rate in Hz (finite, > 0).
    method : str
        One of ``bilinear``, ``impulse-invariant``, ``step-invariant``,
        ``ramp-invariant`` (default) and ``matched-z``.
    prewarp_hz : float, optional
        ``bilinear`` only: frequency (Hz, below Nyquist) where the discrete
        response equals H(j 2 pi f0) exactly.
    delay_s : float, optional
        Extra dead time in seconds (>= 0), added to ``system.delay_s``.
    match_hz : float, optional
        ``matched-z`` only: frequency (Hz, below Nyquist) where the gain is
        matched. Default: DC when H(0) is finite and non-zero, else where |H|
        peaks between 1e-5 and 0.45 times the rate (stated in ``options``).
    realization : {"auto", "sections", "incremental"}
        How the model runs. ``sections``: second-order sections through
        scipy.signal.sosfilt (fastest). ``incremental``: a delta-operator state
        space, x[k+1] = x[k] + E x[k] + G u[k], that keeps its digits when poles
        are near z = 1 (rates far above the system's frequencies, stiff systems,
        integrators), several times slower. ``auto`` (default) runs sections
        unless their expected round-off exceeds 1e-11 of the signal or, for the
        hold methods, their frequency response differs from the increment form's
        by more than 5e-11 of its peak (zeros of a high relative degree or a
        fractional dead time that the sections do not carry exactly); the
        choice, the reason and the expected round-off level are in ``options``.

    Returns
    -------
    DiscreteSystem
        Second-order sections (``.sos``, float64, shape (n_sections, 6)),
        zeros/poles/gain in z (``.zpk``), dead time (``.delay_samples``),
        warnings and provenance (``.options``).

    Raises
    ------
    DiscretizationError
        Rate <= 0 or not finite, unknown method, prewarp or match frequency at
        or above Nyquist (or given for a method that does not use it),
        negative dead time, unknown options.

    Warns
    -----
    ModelWarning
        Unstable analog system (the model is still returned), poles or zeros at
        or above Nyquist, strong bilinear warping of a resonance,
        impulse-invariance aliasing, unstable discrete model of a stable system.

    Notes
    -----
    Dead time tau = (whole + fraction) samples. The whole part is an exact
    delay line. The fraction is exact for ``step-invariant`` and
    ``ramp-invariant`` (modified z-transform: the input delayed by a fraction
    of a sample is integrated exactly). For the other methods the fraction is
    approximated by a first-order Thiran allpass (exact magnitude, maximally
    flat group delay at DC), borrowing one whole sample when the fraction is
    below 0.5 so that its delay lies in [0.5, 1.5); its phase error is in the
    accuracy report.

    References
    ----------
    .. [1] A. V. Oppenheim, R. W. Schafer, *Discrete-Time Signal Processing*,
           3rd ed., Pearson, 2010, sec. 7.2.1 (impulse invariance) and 7.2.2
           (bilinear transformation, prewarping).
    .. [2] L. B. Jackson, "A correction to impulse invariance", IEEE Signal
           Processing Letters 7(10), 2000.
    .. [3] G. F. Franklin, J. D. Powell, M. L. Workman, *Digital Control of
           Dynamic Systems*, 3rd ed., Addison-Wesley, 1998, sec. 6.3 (zero-order
           hold, triangle hold and matched pole-zero equivalents) and the
           modified z-transform for dead time.
    .. [4] J.-P. Thiran, "Recursive digital filters with maximally flat group
           delay", IEEE Trans. Circuit Theory 18(6), 1971.

    Examples
    --------
    >>> from simwave import System
    >>> from simwave.discrete import discretize
    >>> lp = System.from_zpk([], [-2 * 3.141592653589793 * 1000], 2 * 3.141592653589793 * 1000)
    >>> model = discretize(lp, 48000, "ramp-invariant")
    >>> model.sos.shape
    (1, 6)
    """
    from simwave.discrete.filter import DiscreteSystem

    if extra:
        raise DiscretizationError(
            f"unknown discretization option(s) {', '.join(sorted(extra))}; "
            "known: prewarp_hz, delay_s, match_hz, realization"
        )
    rate = check_rate(rate_hz)
    name = check_method(method)
    if prewarp_hz is not None:
        if name != "bilinear":
            raise DiscretizationError(
                f"a prewarp frequency applies to the bilinear method only, not {name}"
            )
        prewarp_hz = _check_frequency(prewarp_hz, "prewarp frequency", rate)
    if match_hz is not None:
        if name != "matched-z":
            raise DiscretizationError(
                f"a gain-match frequency applies to the matched-z method only, not {name}"
            )
        match_hz = _check_frequency(match_hz, "gain-match frequency", rate)
    extra_delay = 0.0
    if delay_s is not None:
        extra_delay = _number(delay_s, "dead time (s)")
        if not math.isfinite(extra_delay) or extra_delay < 0:
            raise DiscretizationError(
                f"dead time must be a finite number of seconds >= 0, got {delay_s!r}"
            )
    total_delay_s = float(system.delay_s) + extra_delay
    delay_samples = total_delay_s * rate
    whole, frac = split_delay(delay_samples)

    thiran_d = None
    hold_frac = 0.0
    if frac > 0:
        if name in EXACT_FRACTION_METHODS:
            hold_frac = frac
            frac_how = "modified z-transform (exact at the samples for the method's input reading)"
        else:
            thiran_d = frac
            if frac < 0.5 and whole >= 1:
                thiran_d, whole = frac + 1.0, whole - 1
            frac_how = f"first-order Thiran allpass, {thiran_d:.6g} samples (approximation)"
    else:
        frac_how = "none" if delay_samples == 0 else "exact (whole samples)"

    des = design(
        system.zeros,
        system.poles,
        system.gain,
        rate,
        name,
        prewarp_hz=prewarp_hz,
        match_hz=match_hz,
        frac=hold_frac,
    )
    zd, pd, kd = des.zeros, des.poles, des.gain
    if thiran_d is not None:
        tz, tp, tk = thiran_zpk(thiran_d)
        zd = np.concatenate([zd, tz])
        pd = np.concatenate([pd, tp])
        kd = kd * tk
        des.increment = series_state_space(
            [des.increment, analog_state_space(tz - 1.0, tp - 1.0, tk)]
        )
    options: dict[str, Any] = {
        "method": name,
        "rate_hz": rate,
        "prewarp_hz": prewarp_hz,
        "bilinear_k": des.bilinear_k,
        "dead_time_s": total_delay_s,
        "dead_time_samples": delay_samples,
        "delay_line_samples": whole,
        "fractional_delay_samples": frac,
        "fractional_delay_handling": frac_how,
        "thiran_delay_samples": thiran_d,
        "impulse_t0": "half-sample correction h[0] = T h(0+)/2 (Jackson 2000)"
        if name == "impulse-invariant"
        else None,
    }
    if name == "matched-z":
        options["match_hz"] = match_hz
        options["gain_matched_at_hz"] = des.notes.get("gain_matched_at_hz")
        options["gain_matched_at"] = des.notes.get("gain_matched_at")
    texts = model_warnings(system, rate, name, des, prewarp_hz)
    for text in texts:
        warnings.warn(text, ModelWarning, stacklevel=2)
    return DiscreteSystem(
        system=system,
        rate=rate,
        method=name,
        zpk=(zd, pd, kd),
        delay_samples=delay_samples,
        delay_line=whole,
        options=options,
        warnings=texts,
        design=des,
        hold_frac=hold_frac,
        thiran_d=thiran_d,
        realization=str(realization),
    )
