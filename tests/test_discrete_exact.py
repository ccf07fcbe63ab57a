"""Exact at every sample rate: discrete models against independent high-precision references.

References are computed here, outside simwave's code:
- exact analog step and impulse responses by partial fractions in 40-digit
  mpmath from the system's own poles, zeros and gain (tests/exact_reference.py);
- closed forms from sympy's inverse Laplace transform where they exist;
- the exact discrete models of the bilinear and matched-z methods by mapping
  the analog roots in 40-digit mpmath and summing the z-domain partial
  fractions (Oppenheim & Schafer, *Discrete-Time Signal Processing*, 3rd ed.,
  sec. 3.3, partial-fraction inversion of the z-transform, and sec. 7.2.2,
  the bilinear map; Franklin, Powell & Workman, *Digital Control of Dynamic
  Systems*, 3rd ed., sec. 6.3.3, matched pole-zero);
- the matrix exponential in 40-digit mpmath (mpmath.expm).

The accuracy target, 1e-10 of the peak, is the project's (exact means the
analog samples to within float64 round-off grown over long records).
"""

from __future__ import annotations


import mpmath as mp
import numpy as np
import pytest
import scipy.signal as sig
import sympy as sp

from simwave import System
from simwave.discrete.realization import exp_increment

from discrete_helpers import butter, quiet
from exact_reference import (
    as_mp,
    impulse_response,
    linear_between_samples_response,
    residues,
    sample_indices,
    step_response,
)

TARGET = 1e-10


def spread(taus):
    taus = np.asarray(taus, dtype=float)
    return [], -1.0 / taus, float(1.0 / np.prod(taus))


def step_error(zpk, rate, duration, method):
    """max |model step response - exact analog step response| / peak, and the model."""
    z, p, k = zpk
    n = int(round(duration * rate))
    idx = sample_indices(n)
    ref = step_response(z, p, k, idx / rate)
    model = quiet(System.from_zpk(z, p, k), rate, method)
    y = model.filter(np.ones(n))
    return float(np.max(np.abs(y[idx] - ref)) / np.max(np.abs(ref))), model


# The cases of the accuracy table (the last column of each: seconds simulated). The fast
# suite runs shortened records (the transient and its peak included); the slow suite the
# whole settling.
TABLE = {
    "butterworth 4, 1 Hz at 1 MHz": (butter(4, 1.0), 1e6, 0.5, 3.0),
    "butterworth 8, 0.1 Hz at 48 kHz": (butter(8, 0.1), 48e3, 8.0, 40.0),
    "butterworth 4, 0.01 Hz at 48 kHz": (butter(4, 0.01), 48e3, 15.0, 200.0),
    "butterworth 8, 0.01 Hz at 48 kHz": (butter(8, 0.01), 48e3, 15.0, 300.0),
    "time constants 1 us ... 1000 s at 1 MHz": (
        spread([1e-6, 1e-5, 1e-3, 1e-1, 10.0, 1000.0]), 1e6, 0.5, 3.0),
}


@pytest.mark.parametrize("method", ["step-invariant", "ramp-invariant"])
@pytest.mark.parametrize("case", sorted(TABLE))
def test_hold_methods_exact_on_the_table(case, method):
    zpk, rate, short, _ = TABLE[case]
    err, model = step_error(zpk, rate, short, method)
    assert err <= TARGET, (case, method, err, model.options["realization"])
    # Where sections would lose digits the incremental form is chosen on its own.
    assert model.options["realization"] == "incremental"


@pytest.mark.slow
@pytest.mark.parametrize("method", ["step-invariant", "ramp-invariant"])
@pytest.mark.parametrize("case", sorted(TABLE))
def test_hold_methods_exact_on_the_table_whole_settling(case, method):
    zpk, rate, _, full = TABLE[case]
    err, _ = step_error(zpk, rate, full, method)
    assert err <= TARGET, (case, method, err)


HARDER = {
    # fs/fc = 1e7, the top of the target range
    "butterworth 4, 1 Hz at 10 MHz": (butter(4, 1.0), 1e7, 0.6),
    # order 20 at fs/fc = 1e5
    "butterworth 20, 10 Hz at 1 MHz": (butter(20, 10.0), 1e6, 0.5),
    # time constants spread over 1e9 (1 us ... 1000 s) with a resonance between
    "spread 1e9 with a Q = 20 pair": (
        ([-3.0], list(-1.0 / np.array([1e-6, 1e-4, 1e3])) + [-5 + 200j, -5 - 200j], 4e4),
        1e6, 0.5),
    # non-minimum phase, fs/fc ~ 1e6
    "right-half-plane zero at 1 MHz": (([2 * np.pi * 2.0], [-2 * np.pi, -2 * np.pi * 3.0],
                                        -2 * np.pi * 3.0 / 2.0), 1e6, 0.7),
}


@pytest.mark.slow
@pytest.mark.parametrize("method", ["step-invariant", "ramp-invariant"])
@pytest.mark.parametrize("case", sorted(HARDER))
def test_hold_methods_exact_on_harder_cases(case, method):
    zpk, rate, duration = HARDER[case]
    err, _ = step_error(zpk, rate, duration, method)
    assert err <= TARGET, (case, method, err)


def test_fs_fc_1e7_fast():
    # fs/fc = 1e7 on a shorter record (the first 0.25 s of the step response).
    err, model = step_error(butter(4, 1.0), 1e7, 0.25, "step-invariant")
    assert err <= TARGET, err


@pytest.mark.parametrize("method", ["step-invariant", "ramp-invariant"])
def test_double_integrator_parabola_over_a_million_samples(method):
    # 1/s^2 driven by a unit step is t^2/2: sympy's inverse Laplace transform of 1/s^3.
    s, t = sp.symbols("s t", positive=True)
    closed = sp.inverse_laplace_transform(1 / s**3, s, t)
    assert sp.simplify(closed - t**2 / 2) == 0
    rate, n = 1e3, 1_000_000
    model = quiet(System.from_zpk([], [0.0, 0.0], 1.0), rate, method)
    assert model.options["realization"] == "incremental"
    y = model.filter(np.ones(n))
    tk = np.arange(n) / rate
    ref = tk**2 / 2  # exact in float64 to 1 ulp (k^2 is an exact integer below 2^53)
    assert np.max(np.abs(y - ref)) <= TARGET * ref[-1]


def test_integrator_with_a_pole_over_a_million_samples():
    # 1/(s (s + 1)), unit step: t - 1 + e^{-t} (sympy inverse Laplace of 1/(s^2 (s + 1))).
    s, t = sp.symbols("s t", positive=True)
    closed = sp.lambdify(t, sp.inverse_laplace_transform(1 / (s**2 * (s + 1)), s, t), "mpmath")
    rate, n = 1e4, 1_000_000
    model = quiet(System.from_zpk([], [0.0, -1.0], 1.0), rate, "ramp-invariant")
    y = model.filter(np.ones(n))
    idx = sample_indices(n, 400)
    mp.mp.dps = 40
    ref = np.array([float(closed(mp.mpf(int(k)) / int(rate))) for k in idx])
    assert np.max(np.abs(y[idx] - ref)) <= TARGET * np.max(np.abs(ref))


@pytest.mark.parametrize("zpk,rate", [
    (butter(4, 1.0), 1e6),
    (spread([1e-6, 1e-3, 1.0, 100.0]), 1e6),
    (butter(6, 1000.0), 48e3),
])
def test_impulse_invariant_equals_T_h_nT(zpk, rate):
    # Impulse invariance: h[n] = T h_c(nT), h[0] = T h_c(0+)/2 (O&S 3rd ed., sec. 7.2.1;
    # Jackson, IEEE SP Letters 7(10), 2000).
    z, p, k = zpk
    n = int(rate * 0.5)
    model = quiet(System.from_zpk(z, p, k), rate, "impulse-invariant")
    x = np.zeros(n)
    x[0] = 1.0
    y = model.filter(x)
    idx = sample_indices(n, 600)
    idx1 = idx[idx > 0]
    ref = impulse_response(z, p, k, idx1 / rate) / rate
    h0 = impulse_response(z, p, k, [1e-300])[0] / rate / 2
    peak = max(np.max(np.abs(ref)), abs(h0))
    assert np.max(np.abs(y[idx1] - ref)) <= TARGET * peak
    assert abs(y[0] - h0) <= TARGET * peak


def _exact_discrete_step(zd, pd, kd, n_idx):
    """Step response of k prod(z - z_i)/prod(z - p_i), equal degrees, distinct poles, mpmath."""
    # H(z) = k + sum r_i/(z - p_i); step response s[n] = k + sum r_i (1 - p_i^n)/(1 - p_i).
    pd, res = residues(zd, pd, kd)
    out = []
    for n in n_idx:
        acc = kd
        for pi, ri in zip(pd, res, strict=True):
            acc += ri * (1 - pi ** int(n)) / (1 - pi)
        out.append(float(mp.re(acc)))
    return np.array(out)


@pytest.mark.parametrize("zpk,rate", [
    (butter(4, 1.0), 1e6),
    (butter(8, 0.1), 48e3),
    (butter(4, 1000.0), 48e3),
])
def test_bilinear_equals_its_exact_discrete_model(zpk, rate):
    # Exact model: z = (K + s)/(K - s), K = 2 fs, zeros at infinity to z = -1, gain
    # k prod(K - z)/prod(K - p) (O&S 3rd ed., sec. 7.2.2), all in 40-digit mpmath.
    z, p, k = zpk
    mp.mp.dps = 40
    K = 2 * mp.mpf(rate)
    zd = [(K + as_mp(r)) / (K - as_mp(r)) for r in z] + [mp.mpf(-1)] * (len(p) - len(z))
    pd = [(K + as_mp(r)) / (K - as_mp(r)) for r in p]
    kd = mp.mpf(k)
    for r in z:
        kd *= K - as_mp(r)
    for r in p:
        kd /= K - as_mp(r)
    n = int(rate * 3.0 / (np.min(np.abs(p)) / (2 * np.pi)))
    n = min(n, 1_500_000)
    idx = sample_indices(n, 500)
    ref = _exact_discrete_step(zd, pd, kd, idx)
    model = quiet(System.from_zpk(z, p, k), rate, "bilinear")
    y = model.filter(np.ones(n))
    assert np.max(np.abs(y[idx] - ref)) <= TARGET * np.max(np.abs(ref))


@pytest.mark.parametrize("zpk,rate", [
    (butter(4, 1.0), 1e6),
    (([-2 * np.pi * 0.05], [-2 * np.pi * 0.01, -2 * np.pi * 0.2 + 2j * np.pi, -2 * np.pi * 0.2
                            - 2j * np.pi], 3.0), 48e3),
])
def test_matched_z_equals_its_exact_discrete_model(zpk, rate):
    # Exact model: poles and zeros z = e^{sT}, zeros at infinity to z = -1, gain matched
    # at DC (Franklin, Powell & Workman, 3rd ed., sec. 6.3.3), in 40-digit mpmath.
    z, p, k = zpk
    mp.mp.dps = 40
    T = 1 / mp.mpf(rate)
    zd = [mp.exp(as_mp(r) * T) for r in z] + [mp.mpf(-1)] * (len(p) - len(z))
    pd = [mp.exp(as_mp(r) * T) for r in p]
    h0 = mp.mpf(k)
    for r in z:
        h0 *= -as_mp(r)
    for r in p:
        h0 /= -as_mp(r)
    unit = mp.mpf(1)
    for r in zd:
        unit *= 1 - r
    for r in pd:
        unit /= 1 - r
    kd = h0 / unit
    n = min(int(rate * 3.0 / (np.min(np.abs(p)) / (2 * np.pi))), 1_500_000)
    idx = sample_indices(n, 500)
    ref = _exact_discrete_step(zd, pd, kd, idx)
    model = quiet(System.from_zpk(z, p, k), rate, "matched-z")
    y = model.filter(np.ones(n))
    assert np.max(np.abs(y[idx] - ref)) <= TARGET * np.max(np.abs(ref))


def test_ordinary_case_keeps_sections_and_their_output():
    # A 1 kHz Butterworth at 48 kHz: sections are exact enough, so they run, unchanged:
    # the output is scipy.signal.sosfilt on the model's own sections.
    z, p, k = butter(4, 1000.0)
    model = quiet(System.from_zpk(z, p, k), 48e3, "step-invariant")
    assert model.options["realization"] == "sections"
    x = np.random.default_rng(2).standard_normal(5000)
    assert np.array_equal(model.filter(x), sig.sosfilt(model.sos, x))
    # and the step response is exact to the same target (partial fractions, mpmath)
    err, _ = step_error((z, p, k), 48e3, 0.01, "step-invariant")
    assert err <= TARGET


def test_hold_zeros_and_gain_keep_the_dc_gain_far_above_the_corner():
    # Hold equivalents keep H(0) exactly (Franklin, Powell & Workman, 3rd ed., sec. 6.3:
    # the zero-order-hold equivalent of a step is exact at the samples). The model's own
    # zeros, poles and gain give it back at fs/fc = 4.8e6 (was 4 % off when the gain was
    # matched at a frequency where |H| is 1e-19 of its peak).
    z, p, k = butter(4, 0.01)
    for method in ("step-invariant", "ramp-invariant"):
        model = quiet(System.from_zpk(z, p, k), 48e3, method)
        zd, pd, kd = model.zpk
        T = 1 / 48e3
        # 1 - p_i from expm1 of the analog poles, 1 - z_i from the zeros as stored
        dc = kd * np.prod(1 - zd) / np.prod(-np.expm1(np.asarray(p) * T))
        assert abs(dc.real - 1.0) <= 1e-6, (method, dc)


@pytest.mark.parametrize("scale", [1e-9, 1e-4, 1.0, 40.0])
def test_exp_increment_equals_mpmath_expm_minus_identity(scale):
    # mpmath.expm at 40 digits, minus I, compared entry by entry relative to each entry's
    # own size (the point of the increment form: small entries keep their digits).
    rng = np.random.default_rng(3)
    A = np.tril(rng.standard_normal((5, 5))) * scale
    A[1, 2] = 0.7 * scale  # a modal-like pair
    mp.mp.dps = 40
    ref = mp.expm(mp.matrix(A.tolist())) - mp.eye(5)
    ref = np.array([[float(ref[i, j]) for j in range(5)] for i in range(5)])
    got = exp_increment(A)
    big = np.abs(ref) > 1e-300
    rel = np.abs(got[big] - ref[big]) / np.maximum(np.abs(ref[big]), 1e-14 * np.max(np.abs(ref)))
    assert np.max(rel) <= 1e-12, np.max(rel)


@pytest.mark.parametrize("method", ["ramp-invariant", "step-invariant", "bilinear",
                                    "impulse-invariant", "matched-z"])
def test_incremental_form_blocks_and_settled_start(method):
    # Far above the corner (fs/fc = 1e6) every method runs incrementally. Splitting the
    # input into blocks of any size gives the same bits (the first-pass state and its
    # refinement are carried separately), and a settled start on a constant input stays
    # at DC gain x input (steady state of a linear system: Ogata, Modern Control
    # Engineering, 5th ed., 5-8).
    z, p, k = butter(4, 1.0)
    model = quiet(System.from_zpk(z, p, k), 1e6, method)
    assert model.realization == "incremental"
    u = np.random.default_rng(0).standard_normal((50_000, 2))
    whole = model.filter(u)
    state = model.initial_state(u[0], "rest")
    parts = []
    for a, b in [(0, 1), (1, 1), (1, 7000), (7000, 33_000), (33_000, 50_000)]:
        out, state = model.process(u[a:b], state)
        parts.append(out)
    assert np.array_equal(np.concatenate(parts), whole)
    y = model.filter(np.full(100_000, 2.5), initial="settled")
    assert np.max(np.abs(y - 2.5 * model.dc_gain)) <= 1e-12
    assert abs(model.dc_gain - 1.0) <= 1e-6  # H(0) = 1 (impulse-invariant: close, not equal)


@pytest.mark.parametrize("method", ["ramp-invariant", "step-invariant"])
def test_ode_initial_conditions_far_above_the_natural_frequency(method):
    # y'' + 2 zeta w y' + w^2 y = w^2 x, y(0) = 1, y'(0) = 0, no input: the free response
    # e^{-zeta w t} (cos(w_d t) + zeta/sqrt(1 - zeta^2) sin(w_d t)) (Ogata, Modern Control
    # Engineering, 5th ed., sec. 5-3, the second-order system; from memory), at 1 MHz.
    w, zeta = 2 * np.pi * 1.0, 0.5
    system = System.parse(f"y'' + {2 * zeta * w} y' + {w * w} y = {w * w} x")
    model = quiet(system, 1e6, method)
    assert model.realization == "incremental"
    n = 600_000
    y = model.filter(np.zeros(n), output_ics=[1.0, 0.0])
    t = np.arange(n) / 1e6
    wd = w * np.sqrt(1 - zeta**2)
    ref = np.exp(-zeta * w * t) * (np.cos(wd * t) + zeta / np.sqrt(1 - zeta**2) * np.sin(wd * t))
    assert np.max(np.abs(y - ref)) <= TARGET


def test_a_fast_and_a_very_slow_pole_in_one_section_is_never_run():
    # Poles at 1 - 1e-9 and 1 - 1e-6 in one section: its denominator sums to 1e-15 at z = 1,
    # so float64 coefficients (relative 1.1e-16 each, summing to ~4.4e-16) move the slow
    # pole by tens of percent (Oppenheim & Schafer, 3rd ed., pole sensitivity of direct-form
    # sections). The round-off estimate sees it, and such a system runs incrementally.
    from simwave.discrete.incremental import section_round_off

    a = np.poly([1 - 1e-9, 1 - 1e-6])
    assert section_round_off(np.array([[1.0, 0.0, 0.0, *a]])) > 1e-2
    rate = 1e6
    taus = np.array([1e3, 1.0, 1e-6])  # slow poles at 1 - 1e-9 and 1 - 1e-6 at 1 MHz
    model = quiet(System.from_zpk([], -1 / taus, 1 / np.prod(taus)), rate, "step-invariant")
    assert model.realization == "incremental"


# ---------------------------------------------------------------- the at-rest start
def _rest_run(model, x, closed: bool):
    """The model's at-rest output for x, with the closed-form start or with the fit."""
    model._cache.pop("rest", None)
    if not closed:
        model._cache["rest"] = model._rest_fit()
    y = model.filter(x)
    model._cache.pop("rest", None)
    return y


@pytest.mark.parametrize("zpk,rate", [
    (butter(2, 1000.0), 48e3),
    (butter(4, 1000.0), 48e3),
    (butter(8, 1000.0), 48e3),
    (([0.0], list(np.roots([1, 2 * np.pi * 20.0, (2 * np.pi * 1000.0) ** 2])),
      2 * np.pi * 20.0), 48e3),  # a Q = 50 band-pass
])
def test_closed_form_rest_start_against_the_exact_response(zpk, rate):
    # Reference: the exact analog response to the input linear between samples, at rest
    # before t = 0, by modes in 40-digit mpmath (tests/exact_reference.py). A unit first
    # sample alone (the start's own response) and a noise record with an offset.
    z, p, k = zpk
    model = quiet(System.from_zpk(z, p, k), rate, "ramp-invariant")
    assert model.realization == "sections"
    closed = model._rest_closed_form()
    assert closed is not None
    rng = np.random.default_rng(7)
    pulse = np.zeros(1500)
    pulse[0] = 1.0
    for x in (pulse, 0.2 * rng.standard_normal(600) + 3.0):
        ref = linear_between_samples_response(z, p, k, x, rate)
        peak = np.max(np.abs(ref))
        err_closed = np.max(np.abs(_rest_run(model, x, True) - ref)) / peak
        err_fit = np.max(np.abs(_rest_run(model, x, False) - ref)) / peak
        assert err_closed <= 1e-11, err_closed  # the sections' own round-off, <= 1e-11
        # as exact as the least-squares fit it replaced, within the sections' round-off
        assert err_closed <= 1.5 * err_fit + 1e-14, (err_closed, err_fit)


def test_closed_form_rest_start_with_a_double_pole():
    # 1/(s + 1)^2 (a double pole: no modal form), unit first sample then zeros. Exact
    # output: S(t) - R(t)/T + R(t - T)/T with the step response S = 1 - (1 + t) e^-t and
    # its integral R = t - 2 + (t + 2) e^-t (sympy's inverse Laplace transforms of
    # 1/(s (s+1)^2) and 1/(s^2 (s+1)^2), checked below), in 40-digit mpmath.
    s, t = sp.symbols("s t", positive=True)
    S = sp.inverse_laplace_transform(1 / (s * (s + 1) ** 2), s, t)
    R = sp.inverse_laplace_transform(1 / (s**2 * (s + 1) ** 2), s, t)
    assert sp.simplify(S - (1 - (1 + t) * sp.exp(-t))) == 0
    assert sp.simplify(R - (t - 2 + (t + 2) * sp.exp(-t))) == 0
    rate, n = 100.0, 2000
    model = quiet(System.from_zpk([], [-1.0, -1.0], 1.0), rate, "ramp-invariant",
                  realization="sections")
    assert model._rest_closed_form() is not None
    mp.mp.dps = 40
    T = mp.mpf(1) / 100
    Sf, Rf = sp.lambdify(t, S, "mpmath"), sp.lambdify(t, R, "mpmath")
    ref = np.array([float(Sf(tk) - Rf(tk) / T + (Rf(tk - T) / T if k else 0))
                    for k, tk in ((k, mp.mpf(k) / 100) for k in range(n))])
    ref[0] = 0.0  # y(0) of a strictly proper system at rest
    x = np.zeros(n)
    x[0] = 1.0
    peak = np.max(np.abs(ref))
    err_closed = np.max(np.abs(_rest_run(model, x, True) - ref)) / peak
    err_fit = np.max(np.abs(_rest_run(model, x, False) - ref)) / peak
    assert err_closed <= 1e-11 and err_closed <= 1.5 * err_fit + 1e-14, (err_closed, err_fit)


@pytest.mark.parametrize("zpk,rate", [(butter(4, 1.0), 1e6), (butter(4, 1.0), 1e7),
                                      (butter(8, 0.1), 48e3)])
def test_closed_form_declines_sections_forced_far_beyond_their_limit(zpk, rate):
    # Sections forced at fs/fc 1e6-1e7: their rounded poles are no longer the model's,
    # so the closed form (which would leave 1e-8 of the start's response, against 1e-9
    # for the fit, measured against the analog sequence) declines by its own check and
    # the fit is used. auto runs these models in the incremental form, no fit at all.
    z, p, k = zpk
    model = quiet(System.from_zpk(z, p, k), rate, "ramp-invariant", realization="sections")
    assert model._rest_closed_form() is None
    np.testing.assert_array_equal(model._rest_correction(), model._rest_fit())
    assert quiet(System.from_zpk(z, p, k), rate, "ramp-invariant").realization == "incremental"
