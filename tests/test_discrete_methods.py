"""The five discretization methods against outside references.

Each check names its source: textbook formulas (Oppenheim & Schafer,
Discrete-Time Signal Processing, 3rd ed.; Franklin, Powell & Workman, Digital
Control of Dynamic Systems, 3rd ed.; Ogata, Modern Control Engineering, 5th
ed.; Jackson 2000) or reference libraries (scipy.signal, sympy).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
import scipy.signal as sig
import sympy as sp

from simwave import System
from simwave.discrete import METHODS, DiscreteSystem, ModelWarning, discretize
from simwave.errors import DiscretizationError, SimwaveError


def random_stable_zpk(rng: np.random.Generator, order: int):
    """Random stable H(s): poles with |p| in [0.5, 20] rad/s, up to `order` real zeros."""
    poles: list[complex] = []
    while len(poles) < order:
        if order - len(poles) >= 2 and rng.random() < 0.5:
            w = rng.uniform(0.5, 20.0)
            zeta = rng.uniform(0.05, 0.9)
            p = complex(-zeta * w, w * math.sqrt(1 - zeta**2))
            poles += [p, p.conjugate()]
        else:
            poles.append(complex(-rng.uniform(0.5, 20.0)))
    nz = int(rng.integers(0, order + 1))
    zeros = list(-rng.uniform(-5.0, 20.0, nz))  # some right-half-plane zeros too
    return zeros, poles, float(rng.uniform(0.5, 3.0))


def quiet_discretize(*args, **kw) -> DiscreteSystem:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelWarning)
        return discretize(*args, **kw)


# ----------------------------------------------------------------------------- bilinear
@pytest.mark.parametrize(
    "zpk",
    [
        ([], [-2 * np.pi * 1000], 2 * np.pi * 1000),
        sig.butter(4, 2 * np.pi * 1000, analog=True, output="zpk"),
        sig.cheby1(5, 1, 2 * np.pi * 3000, analog=True, output="zpk"),
        sig.ellip(4, 0.5, 40, [2 * np.pi * 300, 2 * np.pi * 900], "bandpass", analog=True,
                  output="zpk"),
    ],
)
def test_bilinear_equals_scipy_bilinear_zpk(zpk):
    # Reference: scipy.signal.bilinear_zpk (O&S 3rd ed., sec. 7.2.2, s = 2/T (z-1)/(z+1)).
    z, p, k = zpk
    rate = 48_000.0
    model = quiet_discretize(System.from_zpk(z, p, k), rate, "bilinear")
    zr, pr, kr = sig.bilinear_zpk(z, p, k, fs=rate)
    zd, pd, kd = model.zpk
    np.testing.assert_allclose(np.sort_complex(zd), np.sort_complex(zr), rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(np.sort_complex(pd), np.sort_complex(pr), rtol=1e-12, atol=1e-12)
    assert kd == pytest.approx(kr, rel=1e-12)


def test_bilinear_prewarp_equals_scipy_with_warped_constant():
    # O&S 3rd ed., eq. 7.26: Omega = (2/T) tan(w/2); prewarping at f0 uses
    # K = w0 / tan(w0 T / 2) in place of 2/T, i.e. scipy.signal.bilinear_zpk with fs = K/2.
    z, p, k = sig.butter(2, 2 * np.pi * 5000, analog=True, output="zpk")
    rate, f0 = 20_000.0, 5000.0
    model = quiet_discretize(System.from_zpk(z, p, k), rate, "bilinear", prewarp_hz=f0)
    w0 = 2 * np.pi * f0
    zr, pr, kr = sig.bilinear_zpk(z, p, k, fs=w0 / math.tan(w0 / rate / 2) / 2)
    np.testing.assert_allclose(np.sort_complex(model.zpk[1]), np.sort_complex(pr), rtol=1e-12)
    assert model.zpk[2] == pytest.approx(kr, rel=1e-12)


@pytest.mark.parametrize("f0", [100.0, 2500.0, 9000.0])
def test_bilinear_prewarp_matches_analog_response_at_f0(f0):
    # O&S 3rd ed., sec. 7.2.2: with prewarping, the discrete response at f0 equals H(j 2 pi f0).
    pair = -2 * np.pi * 800 * (0.3 + 0.95j)
    sysm = System.from_zpk([-2 * np.pi * 50], [pair, np.conj(pair), -2 * np.pi * 4000], 3e7)
    rate = 20_000.0
    model = quiet_discretize(sysm, rate, "bilinear", prewarp_hz=f0)
    hd = model.frequency_response(f0)
    ha = sysm.frequency_response(f0)
    assert abs(hd) == pytest.approx(abs(ha), rel=1e-10)
    assert np.angle(hd / ha) == pytest.approx(0.0, abs=1e-10)
    # Without prewarping the same point is off (the check can fail).
    plain = quiet_discretize(sysm, rate, "bilinear")
    assert abs(plain.frequency_response(f0) / ha - 1) > 1e-6


# ----------------------------------------------------------------------------- hold methods
@pytest.mark.parametrize("order", [1, 2, 3, 4, 5, 6, 7, 8])
def test_ramp_and_step_invariant_equal_lsim(order):
    # Reference: scipy.signal.lsim, interp=True (first-order hold: input linear between
    # samples, system at rest at t = 0) and interp=False (zero-order hold), to 1e-9 of the
    # output's largest value, first sample included.
    rng = np.random.default_rng(100 + order)
    for _ in range(3):
        z, p, k = random_stable_zpk(rng, order)
        sysm = System.from_zpk(z, p, k)
        rate = float(rng.choice([50.0, 100.0, 400.0]))
        n = 300
        t = np.arange(n) / rate
        u = rng.standard_normal(n) + 0.7  # offset: the first sample is far from 0
        for method, interp in (("ramp-invariant", True), ("step-invariant", False)):
            y = quiet_discretize(sysm, rate, method).filter(u)
            _, y_ref, _ = sig.lsim((z, p, k), u, t, interp=interp)
            scale = np.max(np.abs(y_ref))
            assert np.max(np.abs(y - y_ref)) <= 1e-9 * scale, (method, z, p, k, rate)


def test_ramp_invariant_multichannel_equals_lsim_per_channel():
    # Reference: scipy.signal.lsim (first-order hold), each channel separately.
    rng = np.random.default_rng(7)
    z, p, k = random_stable_zpk(rng, 4)
    sysm = System.from_zpk(z, p, k)
    rate, n = 200.0, 250
    u = rng.standard_normal((n, 3)) * [1.0, 5.0, 0.01] + [2.0, -1.0, 0.0]
    y = quiet_discretize(sysm, rate, "ramp-invariant").filter(u)
    t = np.arange(n) / rate
    for c in range(3):
        _, y_ref, _ = sig.lsim((z, p, k), u[:, c], t, interp=True)
        assert np.max(np.abs(y[:, c] - y_ref)) <= 1e-9 * np.max(np.abs(y_ref))


def test_twelfth_order_butterworth_sections_are_stable_and_exact():
    # 12th-order Butterworth (scipy.signal.butter, analog): all section poles inside the
    # unit circle, and the ramp/step-invariant output equals scipy.signal.lsim.
    z, p, k = sig.butter(12, 1.0, analog=True, output="zpk")
    sysm = System.from_zpk(z, p, k)
    rate, n = 20.0, 800
    u = np.random.default_rng(12).standard_normal(n)
    t = np.arange(n) / rate
    for method, interp in (("ramp-invariant", True), ("step-invariant", False)):
        model = quiet_discretize(sysm, rate, method)
        radii = np.abs(np.concatenate([np.roots(row[3:]) for row in model.sos]))
        assert np.all(radii < 1.0)
        _, y_ref, _ = sig.lsim((z, p, k), u, t, interp=interp)
        assert np.max(np.abs(model.filter(u) - y_ref)) <= 1e-9 * np.max(np.abs(y_ref))
    for method in METHODS:
        model = quiet_discretize(sysm, rate, method)
        radii = np.abs(np.concatenate([np.roots(row[3:]) for row in model.sos]))
        assert np.all(radii < 1.0), method


@pytest.mark.parametrize("method", ["step-invariant", "ramp-invariant"])
def test_first_order_step_closed_form(method):
    # First-order lag step response y = 1 - exp(-t/tau) (Ogata 5th ed., sec. 5-2), exact at
    # the samples for both hold methods (a step is both held and piecewise linear).
    tau, rate = 0.004, 1000.0
    sysm = System.from_zpk([], [-1 / tau], 1 / tau)
    t = np.arange(50) / rate
    y = discretize(sysm, rate, method).filter(np.ones(50))
    np.testing.assert_allclose(y, 1 - np.exp(-t / tau), rtol=0, atol=1e-13)


@pytest.mark.parametrize("zeta", [0.1, 0.4, 0.7])
@pytest.mark.parametrize("method", ["step-invariant", "ramp-invariant"])
def test_second_order_underdamped_step_closed_form(method, zeta):
    # Ogata, Modern Control Engineering, 5th ed., eq. (5-10):
    # c(t) = 1 - exp(-zeta wn t) (cos wd t + zeta/sqrt(1 - zeta^2) sin wd t).
    wn, rate = 2 * np.pi * 50, 2000.0
    sysm = System.from_coeffs([wn**2], [1, 2 * zeta * wn, wn**2])
    t = np.arange(400) / rate
    wd = wn * math.sqrt(1 - zeta**2)
    ratio = zeta / math.sqrt(1 - zeta**2)
    c = 1 - np.exp(-zeta * wn * t) * (np.cos(wd * t) + ratio * np.sin(wd * t))
    y = discretize(sysm, rate, method).filter(np.ones(t.size))
    np.testing.assert_allclose(y, c, rtol=0, atol=1e-12)


def test_ramp_invariant_ramp_input_closed_form():
    # First-order lag, unit-ramp response y = t - tau (1 - exp(-t/tau)) (Ogata 5th ed.,
    # sec. 5-2): exact at the samples only for the ramp-invariant method.
    tau, rate = 0.01, 500.0
    sysm = System.from_zpk([], [-1 / tau], 1 / tau)
    t = np.arange(100) / rate
    ref = t - tau * (1 - np.exp(-t / tau))
    y = discretize(sysm, rate, "ramp-invariant").filter(t)
    np.testing.assert_allclose(y, ref, rtol=0, atol=1e-14)
    y_zoh = discretize(sysm, rate, "step-invariant").filter(t)
    assert np.max(np.abs(y_zoh - ref)) > 1e-4  # a held input is not a ramp


# ----------------------------------------------------------------------------- impulse invariance
_s, _t = sp.symbols("s t", positive=True)


@pytest.mark.parametrize(
    "expr",
    [
        2 / (_s + 2),  # simple real pole, h jumps at t = 0
        (_s + 3) / ((_s + 1) ** 2 * (_s + 2)),  # repeated pole
        5 / (_s**2 + 2 * _s + 26),  # complex pair, continuous at 0
        (3 * _s + 1) / (_s**2 + 4 * _s + 13),  # complex pair with a jump at 0
        1 / (_s + 1) ** 3,  # triple pole
    ],
)
def test_impulse_invariant_equals_sympy_inverse_laplace(expr):
    # O&S 3rd ed., sec. 7.2.1: h[n] = T h_c(nT), h_c from sympy's inverse Laplace
    # transform of the same H(s); h[0] = T h_c(0+)/2 (Jackson, IEEE SPL 7(10), 2000).
    rate = 40.0
    T = 1 / rate
    hc = sp.lambdify(_t, sp.inverse_laplace_transform(expr, _s, _t), "numpy")
    num, den = (
        np.array([float(c) for c in sp.Poly(e, _s).all_coeffs()]) for e in sp.fraction(expr)
    )
    model = quiet_discretize(System.from_coeffs(num, den), rate, "impulse-invariant")
    n = 120
    h = model.filter(np.r_[1.0, np.zeros(n - 1)])
    tn = np.arange(1, n) * T
    np.testing.assert_allclose(h[1:], T * hc(tn), rtol=1e-10, atol=1e-13)
    h0_plus = float(sp.limit(sp.inverse_laplace_transform(expr, _s, _t), _t, 0, "+"))
    assert h[0] == pytest.approx(T * h0_plus / 2, abs=1e-14)


def test_impulse_invariant_biproper_keeps_direct_term():
    # H(s) = (s + 1)/(s + 5) = 1 - 4/(s + 5): the direct term stays as D delta[n]
    # (D = 1), the rest is T h_c(nT) with the half-sample correction at n = 0 (Jackson 2000).
    rate = 100.0
    T = 1 / rate
    model = quiet_discretize(System.from_coeffs([1, 1], [1, 5]), rate, "impulse-invariant")
    h = model.filter(np.r_[1.0, np.zeros(49)])
    n = np.arange(1, 50)
    np.testing.assert_allclose(h[1:], T * (-4) * np.exp(-5 * n * T), rtol=1e-12)
    assert h[0] == pytest.approx(1.0 + T * (-4) / 2, rel=1e-13)


def test_impulse_invariant_versus_scipy_cont2discrete():
    # scipy.signal.cont2discrete(method='impulse') gives h[n] = T h_c(nT) for n >= 0,
    # including n = 0. simwave deliberately differs at n = 0 only: h[0] = T h_c(0+)/2
    # (Jackson 2000), the average of h_c(0-) = 0 and h_c(0+).
    z, p, k = [-3.0], [-1.0, -2.0 + 4j, -2.0 - 4j], 6.0
    rate = 50.0
    A, B, C, D = sig.zpk2ss(z, p, k)
    Ad, Bd, Cd, Dd, _ = sig.cont2discrete((A, B, C, D), 1 / rate, method="impulse")
    n = 80
    _, h_ref = sig.dimpulse((Ad, Bd, Cd, Dd, 1 / rate), n=n)
    h_ref = np.squeeze(h_ref[0])
    h = discretize(System.from_zpk(z, p, k), rate, "impulse-invariant").filter(
        np.r_[1.0, np.zeros(n - 1)]
    )
    np.testing.assert_allclose(h[1:], h_ref[1:], rtol=1e-10, atol=1e-14)
    assert h[0] == pytest.approx(h_ref[0] / 2, rel=1e-12)


# ----------------------------------------------------------------------------- matched z
def test_matched_z_poles_are_exp_pT_and_dc_gain_matched():
    # Franklin, Powell & Workman, 3rd ed., sec. 6.3.3: z = exp(sT) for poles and finite
    # zeros, zeros at infinity to z = -1, gain matched at DC.
    z, p, k = [-40.0], [-10.0, -30 + 80j, -30 - 80j], 500.0
    rate = 300.0
    sysm = System.from_zpk(z, p, k)
    model = discretize(sysm, rate, "matched-z")
    zd, pd, kd = model.zpk
    expected = np.exp(np.array(sysm.poles, dtype=complex) / rate)
    assert np.array_equal(np.sort_complex(pd), np.sort_complex(expected))
    assert np.sort_complex(zd)[0] == -1.0 and np.sum(zd == -1.0) == 2
    assert np.any(np.isclose(zd, math.exp(-40.0 / rate), rtol=0, atol=1e-15))
    assert model.dc_gain == pytest.approx(sysm.dc_gain, rel=1e-12)


def test_matched_z_high_pass_matches_gain_at_stated_frequency():
    # DC gain is 0 for a high-pass: the gain is matched at a stated frequency instead.
    sysm = System.from_zpk([0.0, 0.0], [-2 * np.pi * 100 * (0.7 + 0.7j),
                                       -2 * np.pi * 100 * (0.7 - 0.7j)], 1.0)
    rate = 8000.0
    model = discretize(sysm, rate, "matched-z", match_hz=1000.0)
    assert abs(model.frequency_response(1000.0)) == pytest.approx(
        abs(sysm.frequency_response(1000.0)), rel=1e-12)
    auto = discretize(sysm, rate, "matched-z")
    f_auto = auto.options["gain_matched_at_hz"]
    assert 0 < f_auto < rate / 2
    assert abs(auto.frequency_response(f_auto)) == pytest.approx(
        abs(sysm.frequency_response(f_auto)), rel=1e-12)


# ----------------------------------------------------------------------------- dead time
@pytest.mark.parametrize("method", ["ramp-invariant", "step-invariant"])
def test_dead_time_2_5_samples_closed_form(method):
    # H(s) = exp(-s tau_d)/(tau s + 1) with tau_d = 2.5 samples: the delayed step response
    # y = 1 - exp(-(t - tau_d)/tau) for t >= tau_d (Ogata 5th ed., sec. 5-2, shifted by the
    # dead time), exact at the samples by the modified z-transform (Franklin, Powell &
    # Workman, 3rd ed., ch. 6).
    tau, rate = 0.01, 1000.0
    td = 2.5 / rate
    sysm = System.from_zpk([], [-1 / tau], 1 / tau)
    model = discretize(sysm, rate, method, delay_s=td)
    assert model.delay_samples == pytest.approx(2.5)
    t = np.arange(80) / rate
    ref = np.where(t >= td, 1 - np.exp(-(t - td) / tau), 0.0)
    np.testing.assert_allclose(model.filter(np.ones(t.size)), ref, rtol=0, atol=1e-14)


def test_dead_time_2_5_samples_ramp_input_closed_form():
    # Delayed unit-ramp response of a first-order lag, y = (t - td) - tau (1 - exp(-(t - td)/tau))
    # for t >= td (Ogata 5th ed., sec. 5-2, shifted): exact for the ramp-invariant method.
    tau, rate = 0.01, 1000.0
    td = 2.5 / rate
    sysm = System.from_zpk([], [-1 / tau], 1 / tau, delay_s=td)
    t = np.arange(80) / rate
    d = t - td
    ref = np.where(d >= 0, d - tau * (1 - np.exp(-d / tau)), 0.0)
    y = discretize(sysm, rate, "ramp-invariant").filter(t)
    np.testing.assert_allclose(y, ref, rtol=0, atol=1e-15)


@pytest.mark.parametrize("method", METHODS)
def test_whole_sample_dead_time_is_an_exact_shift(method):
    # A pure delay of 3 samples: the output is the undelayed output shifted by exactly 3.
    sysm = System.from_zpk([-5.0], [-20.0, -3 + 9j, -3 - 9j], 40.0)
    rate = 200.0
    u = np.random.default_rng(3).standard_normal(100)
    y0 = quiet_discretize(sysm, rate, method).filter(u)
    y3 = quiet_discretize(sysm, rate, method, delay_s=3 / rate).filter(u)
    assert np.array_equal(y3[:3], np.zeros(3))
    assert np.array_equal(y3[3:], y0[:-3])


def test_fractional_dead_time_thiran_for_other_methods():
    # Thiran allpass (Thiran 1971): exact magnitude, group delay d at DC.
    sysm = System.from_zpk([], [-50.0], 50.0)
    rate = 1000.0
    model = quiet_discretize(sysm, rate, "bilinear", delay_s=2.3 / rate)
    assert model.options["thiran_delay_samples"] == pytest.approx(1.3)
    assert model.options["delay_line_samples"] == 1
    nodelay = quiet_discretize(sysm, rate, "bilinear")
    f = np.array([0.01, 50.0, 200.0])
    ratio = model.frequency_response(f) / nodelay.frequency_response(f)
    np.testing.assert_allclose(np.abs(ratio), 1.0, rtol=1e-12)
    # Low-frequency phase equals a 2.3-sample delay.
    assert np.angle(ratio[0]) == pytest.approx(-2 * np.pi * 0.01 * 2.3 / rate, rel=1e-9)


# ----------------------------------------------------------------------------- bad input
@pytest.mark.parametrize("rate", [0, -48000, float("nan"), float("inf"), "fast"])
def test_bad_rate(rate):
    with pytest.raises(DiscretizationError, match="rate"):
        discretize(System.from_zpk([], [-1.0], 1.0), rate)


def test_unknown_method_lists_known():
    with pytest.raises(DiscretizationError) as err:
        discretize(System.from_zpk([], [-1.0], 1.0), 100.0, "tustin-ish")
    for name in METHODS:
        assert name in str(err.value)
    assert isinstance(err.value, SimwaveError)
    assert "\n" not in str(err.value)


def test_prewarp_at_or_above_nyquist():
    sysm = System.from_zpk([], [-1.0], 1.0)
    for f0 in (50.0, 80.0, 0.0, -3.0):
        with pytest.raises(DiscretizationError, match="prewarp"):
            discretize(sysm, 100.0, "bilinear", prewarp_hz=f0)
    with pytest.raises(DiscretizationError, match="bilinear"):
        discretize(sysm, 100.0, "ramp-invariant", prewarp_hz=10.0)


def test_negative_dead_time_and_unknown_option():
    sysm = System.from_zpk([], [-1.0], 1.0)
    with pytest.raises(DiscretizationError, match="dead time"):
        discretize(sysm, 100.0, delay_s=-0.1)
    with pytest.raises(DiscretizationError, match="unknown discretization option"):
        discretize(sysm, 100.0, prewarp=10.0)


def test_unstable_system_warns_and_still_runs():
    sysm = System.from_zpk([], [2.0], 1.0)
    with pytest.warns(ModelWarning, match="unstable"):
        model = discretize(sysm, 100.0, "step-invariant")
    y = model.filter(np.ones(100))
    # Step response of 1/(s - 2) is (exp(2t) - 1)/2 (inverse Laplace of 1/(s (s - 2))).
    t = np.arange(100) / 100.0
    np.testing.assert_allclose(y, (np.exp(2 * t) - 1) / 2, rtol=1e-12)
    assert any("unstable" in w for w in model.warnings)


def test_pole_above_nyquist_warns():
    sysm = System.from_zpk([], [-2 * np.pi * 700.0], 2 * np.pi * 700.0)
    with pytest.warns(ModelWarning, match="Nyquist"):
        discretize(sysm, 1000.0, "ramp-invariant")


def test_default_method_is_ramp_invariant():
    model = discretize(System.from_zpk([], [-1.0], 1.0), 100.0)
    assert model.method == "ramp-invariant"
    assert model.options["method"] == "ramp-invariant"
