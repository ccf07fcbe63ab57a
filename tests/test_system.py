"""System: constructors agree with each other and with scipy.signal; properties vs textbooks."""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pytest
from scipy import signal

from simwave import System
from simwave.errors import InvalidSystemError, SimwaveError
from simwave.model.system import PoleZeroCancellationWarning


def rel_close(a, b, rtol=1e-12):
    a, b = np.asarray(a, dtype=complex), np.asarray(b, dtype=complex)
    assert a.shape == b.shape, (a, b)
    scale = np.maximum(np.abs(b), 1e-300)
    assert np.all(np.abs(a - b) <= rtol * scale), (a, b)


def sorted_roots(r):
    return np.sort_complex(np.asarray(r, dtype=complex))


# ----------------------------------------------------------------------------- constructors
# One system in four forms: a notch pair at +-2 krad/s over a real pole at -100 rad/s and a
# pair with wn = 2 krad/s, zeta = 0.075.
TEXT = "(s^2 + 4e6)/((s+100)*(s^2 + 300*s + 4e6))"
ODE = "y''' + 400y'' + 4.03e6y' + 4e8y = x'' + 4e6x"
NUM = [1.0, 0.0, 4e6]
DEN = [1.0, 400.0, 4.03e6, 4e8]  # (s + 100)(s^2 + 300 s + 4e6), expanded by hand
ZEROS = [2000j, -2000j]
POLES = [-100.0, -150 + 1j * math.sqrt(4e6 - 150**2), -150 - 1j * math.sqrt(4e6 - 150**2)]


def four_forms():
    return {
        "parse": System.parse(TEXT),
        "parse_ode": System.parse(ODE),
        "from_coeffs": System.from_coeffs(NUM, DEN),
        "from_ode": System.from_ode(DEN, NUM),
        "from_zpk": System.from_zpk(ZEROS, POLES, 1.0),
    }


@pytest.mark.parametrize("form", ["parse", "parse_ode", "from_coeffs", "from_ode", "from_zpk"])
def test_forms_agree_with_scipy_tf2zpk_and_zpk2tf(form):
    # Reference: scipy.signal.tf2zpk / zpk2tf on the hand-expanded coefficients.
    sys = four_forms()[form]
    z_ref, p_ref, k_ref = signal.tf2zpk(NUM, DEN)
    rel_close(sorted_roots(sys.zeros), sorted_roots(z_ref))
    rel_close(sorted_roots(sys.poles), sorted_roots(p_ref))
    rel_close(sys.gain, k_ref)
    b_ref, a_ref = signal.zpk2tf(ZEROS, POLES, 1.0)
    # The zero coefficient of s^1 is compared absolutely against the size of the others.
    np.testing.assert_allclose(sys.num, np.real(b_ref), rtol=1e-12, atol=1e-12 * 4e6)
    np.testing.assert_allclose(sys.den, np.real(a_ref), rtol=1e-12)
    np.testing.assert_allclose(sys.den, DEN, rtol=1e-12)


def test_forms_agree_with_each_other():
    forms = four_forms()
    ref = forms["from_zpk"]
    for name, sys in forms.items():
        rel_close(sorted_roots(sys.poles), sorted_roots(ref.poles))
        rel_close(sorted_roots(sys.zeros), sorted_roots(ref.zeros))
        rel_close(sys.gain, ref.gain)
        f = np.array([0.0, 10.0, 318.0, 1000.0])
        rel_close(sys.frequency_response(f), ref.frequency_response(f), rtol=1e-9), name


def test_from_ode_normalizes_a_n_to_one():
    sys = System.from_ode([2, 6, 4], [4, 2])
    np.testing.assert_array_equal(sys.ode[0], [1, 3, 2])
    np.testing.assert_array_equal(sys.ode[1], [2, 1])
    np.testing.assert_allclose(sys.den, [1, 3, 2])
    np.testing.assert_allclose(sys.num, [2, 1])


def test_parsed_ode_is_kept_for_initial_conditions():
    sys = System.parse("2y'' + 6y' + 4y = 4x' + 2x")
    np.testing.assert_array_equal(sys.ode[0], [1, 3, 2])
    np.testing.assert_array_equal(sys.ode[1], [2, 1])
    assert System.parse("1/(s+1)").ode is None


def test_frequency_response_matches_scipy_freqs_zpk():
    # Reference: scipy.signal.freqs_zpk evaluates H(jw) from zeros, poles and gain.
    sys = System.from_zpk(ZEROS, POLES, 3.0)
    f = np.logspace(0, 4, 50)
    _, h_ref = signal.freqs_zpk(ZEROS, POLES, 3.0, worN=2 * np.pi * f)
    rel_close(sys.frequency_response(f), h_ref, rtol=1e-11)


def test_dead_time_is_a_pure_phase_lag():
    sys = System.parse("exp(-1m*s) * 10/(s+10)")
    base = System.parse("10/(s+10)")
    f = np.array([1.0, 50.0, 250.0])
    # exp(-j w T): magnitude 1, phase -w T (definition of a transport delay)
    ratio = sys.frequency_response(f) / base.frequency_response(f)
    np.testing.assert_allclose(np.abs(ratio), 1.0, rtol=1e-14)
    np.testing.assert_allclose(ratio, np.exp(-2j * np.pi * f * 1e-3), rtol=1e-12)


def test_with_delay_adds_dead_time_and_records_it():
    sys = System.parse("exp(-1m*s)/(s+1)").with_delay(2e-3)
    assert sys.delay_s == pytest.approx(3e-3)
    assert "exp(-0.002*s)" in sys.text
    with pytest.raises(InvalidSystemError):
        sys.with_delay(-1.0)


# ----------------------------------------------------------------------------- textbook properties
@pytest.mark.parametrize("zeta", [0.05, 0.2, 0.5, 1 / math.sqrt(2), 0.9])
@pytest.mark.parametrize("wn", [1.0, 2 * math.pi * 50, 2 * math.pi * 12e3])
def test_second_order_natural_frequency_and_damping(zeta, wn):
    # Ogata, Modern Control Engineering, 5th ed., sec. 5-3 (section number from memory):
    # wn^2/(s^2 + 2 zeta wn s + wn^2)
    # has poles -zeta wn +- j wd with wd = wn sqrt(1 - zeta^2).
    sys = System.from_coeffs([wn**2], [1.0, 2 * zeta * wn, wn**2])
    (mode,) = sys.pole_modes()
    assert mode["kind"] == "pair"
    assert mode["natural_frequency_hz"] == pytest.approx(wn / (2 * math.pi), rel=1e-12)
    assert mode["damping_ratio"] == pytest.approx(zeta, rel=1e-12)
    wd = wn * math.sqrt(1 - zeta**2)
    assert mode["damped_frequency_hz"] == pytest.approx(wd / (2 * math.pi), rel=1e-12)
    assert mode["time_constant_s"] == pytest.approx(1 / (zeta * wn), rel=1e-12)
    assert sys.dc_gain == pytest.approx(1.0, rel=1e-14)
    assert sys.stability == "stable"


@pytest.mark.parametrize("zeta", [0.1, 0.4, 1 / math.sqrt(2), 1.0, 2.0])
def test_second_order_bandwidth_formula(zeta):
    # Closed form of the -3 dB bandwidth of wn^2/(s^2 + 2 zeta wn s + wn^2), from solving
    # |H(j w)|^2 = 1/2: w_b = wn sqrt(1 - 2 zeta^2 + sqrt(4 zeta^4 - 4 zeta^2 + 2))
    # (e.g. Nise, Control Systems Engineering, sec. 10.8; the formula is re-derived here,
    # the citation is from memory).
    wn = 2 * math.pi * 100
    sys = System.from_coeffs([wn**2], [1.0, 2 * zeta * wn, wn**2])
    wb = wn * math.sqrt(1 - 2 * zeta**2 + math.sqrt(4 * zeta**4 - 4 * zeta**2 + 2))
    assert sys.bandwidth_hz == pytest.approx(wb / (2 * math.pi), rel=1e-10)


def test_overdamped_second_order_gives_two_time_constants():
    # Ogata sec. 5-3, overdamped case: poles -zeta wn +- wn sqrt(zeta^2 - 1).
    wn, zeta = 10.0, 2.0
    sys = System.from_coeffs([wn**2], [1.0, 2 * zeta * wn, wn**2])
    p1 = -zeta * wn + wn * math.sqrt(zeta**2 - 1)
    p2 = -zeta * wn - wn * math.sqrt(zeta**2 - 1)
    taus = sorted(m["time_constant_s"] for m in sys.pole_modes())
    assert taus == pytest.approx(sorted([-1 / p1, -1 / p2]), rel=1e-12)
    assert all(m["kind"] == "real" and m["mode"] == "decaying" for m in sys.pole_modes())


def test_first_order_time_constant_and_bandwidth():
    # Ogata sec. 5-2: 1/(T s + 1) has time constant T; its -3 dB frequency is 1/(2 pi T).
    tau = 4.7e3 * 100e-9  # an RC of 4.7 kOhm and 100 nF
    sys = System.parse("1/(4.7k*100n*s + 1)")
    (mode,) = sys.pole_modes()
    assert mode["time_constant_s"] == pytest.approx(tau, rel=1e-12)
    assert sys.bandwidth_hz == pytest.approx(1 / (2 * math.pi * tau), rel=1e-10)
    assert 20 * math.log10(abs(sys.frequency_response(sys.bandwidth_hz))) == pytest.approx(
        20 * math.log10(1 / math.sqrt(2)), abs=1e-9)


@pytest.mark.parametrize(
    "text, dc, hf",
    [
        ("1/s", math.inf, 0.0),
        ("-1/s", -math.inf, 0.0),
        ("10/(s*(s+1))", math.inf, 0.0),
        ("s/(s+1)", 0.0, 1.0),
        ("s/s", 1.0, 1.0),          # nothing cancelled, but the limit at s = 0 is still 1
        ("(s+2)/(s+1)", 2.0, 1.0),
        ("3(s+2)/(s^2+4s+8)", 0.75, 0.0),
        ("-5", -5.0, -5.0),
    ],
)
def test_dc_and_high_frequency_gain(text, dc, hf):
    # H(0) and lim H(s) for s -> infinity, worked by hand from each expression.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PoleZeroCancellationWarning)
        sys = System.parse(text)
    assert sys.dc_gain == pytest.approx(dc, rel=1e-14)
    assert sys.high_frequency_gain == pytest.approx(hf, rel=1e-14)


@pytest.mark.parametrize(
    "text, verdict",
    [
        ("1/(s+1)", "stable"),
        ("1/(s^2 + 0.001 s + 1)", "stable"),
        ("1/s", "marginally stable"),
        ("1/(s^2 + 1)", "marginally stable"),
        ("1/(s*(s^2 + 4)*(s+1))", "marginally stable"),
        ("1/s^2", "unstable"),             # repeated pole on the axis
        ("1/(s^2 + 1)^2", "unstable"),
        ("1/(s - 1)", "unstable"),
        ("1/(s^2 - 0.1 s + 1)", "unstable"),
    ],
)
def test_stability_classification(text, verdict):
    # Ogata sec. 5-6: stable if all poles are in the open left half plane; simple poles on
    # the jw axis give a bounded, non-decaying response; repeated ones or RHP poles grow.
    sys = System.parse(text)
    assert sys.stability == verdict
    assert sys.is_stable == (verdict == "stable")


def test_bandwidth_not_defined_cases_say_why():
    assert System.parse("1/s").bandwidth_3db() == (None, "DC gain is infinite (pole at s = 0)")
    bw, why = System.parse("s/(s+1)").bandwidth_3db()
    assert bw is None and "DC gain is 0" in why
    bw, why = System.parse("10(s+1)/(s+10)").bandwidth_3db()  # lead network: rises
    assert bw is None and "not low-pass-like" in why


def test_bandwidth_with_resonant_peak_is_the_first_drop():
    # Above the peak, the magnitude of a lightly damped pair crosses -3 dB once; the
    # closed form (see test_second_order_bandwidth_formula) must still hold.
    wn, zeta = 1.0, 0.05
    sys = System.from_coeffs([1], [1, 2 * zeta * wn, 1])
    wb = wn * math.sqrt(1 - 2 * zeta**2 + math.sqrt(4 * zeta**4 - 4 * zeta**2 + 2))
    assert sys.bandwidth_hz == pytest.approx(wb / (2 * math.pi), rel=1e-10)


def test_relative_degree_and_order():
    sys = System.parse("(s+1)/(s^3 + 2s^2 + 3s + 4)")
    assert sys.order == 3
    assert sys.relative_degree == 2


# ----------------------------------------------------------------------------- state space
@pytest.mark.parametrize(
    "sys",
    [
        System.parse("1/(s^2+1.4142135623730951*s+1)"),
        System.from_zpk(ZEROS, POLES, 3.0),
        System.parse("(s+3)(s+5)/((s+1)(s+2)(s+4))"),
        System.parse("2"),
        System.parse("(s^2 + 2s + 5)/(s^2 + s + 3)"),
    ],
    ids=["butter2", "notch3", "real3", "gain", "biproper"],
)
def test_state_space_has_the_same_transfer_function(sys):
    # Reference: scipy.signal.ss2tf of (A, B, C, D) must give back num/den.
    A, B, C, D = sys.state_space
    assert A.shape == (sys.order, sys.order)
    if sys.order:
        b, a = signal.ss2tf(A, B, C, D)
        np.testing.assert_allclose(a, sys.den, rtol=1e-10, atol=1e-10 * np.max(np.abs(sys.den)))
        num = np.concatenate([np.zeros(a.size - sys.num.size), sys.num])
        np.testing.assert_allclose(b[0], num, rtol=1e-10, atol=1e-10 * np.max(np.abs(num)))
        rel_close(sorted_roots(np.linalg.eigvals(A)), sorted_roots(sys.poles), rtol=1e-9)
    else:
        assert D[0, 0] == sys.gain


def test_state_space_of_high_order_design_matches_frequency_response():
    sys = System.design("butterworth", 12, 1e3)
    A, B, C, D = sys.state_space
    f = np.array([10.0, 500.0, 1000.0, 2000.0])
    h = np.array([(C @ np.linalg.solve(2j * np.pi * fi * np.eye(A.shape[0]) - A, B))[0, 0]
                  + D[0, 0] for fi in f])
    rel_close(h, sys.frequency_response(f), rtol=1e-9)


def test_sections_multiply_back_to_h():
    sys = System.design("chebyshev1", 7, 2e3, ripple_db=0.5)
    f = np.array([100.0, 1e3, 2e3, 5e3])
    s = 2j * np.pi * f
    h = np.ones_like(s)
    for b0, b1, b2, a0, a1, a2 in sys.sections:
        h *= (b0 * s**2 + b1 * s + b2) / (a0 * s**2 + a1 * s + a2)
    rel_close(h, sys.frequency_response(f), rtol=1e-10)


# ----------------------------------------------------------------------------- combination
def test_series_is_the_product():
    a, b = System.parse("1/(s+1)"), System.parse("2(s+3)/(s^2+2s+5)")
    f = np.array([0.0, 0.3, 3.0])
    for c in (a.series(b), a * b):
        rel_close(c.frequency_response(f), a.frequency_response(f) * b.frequency_response(f))
        assert c.order == 3


def test_parallel_is_the_sum():
    a, b = System.parse("1/(s+1)"), System.parse("2/(s+2)")
    c = a + b
    # 1/(s+1) + 2/(s+2) = (3s + 4)/((s+1)(s+2)), by hand
    np.testing.assert_allclose(c.num, [3, 4])
    np.testing.assert_allclose(c.den, [1, 3, 2])
    f = np.array([0.0, 0.2, 5.0])
    rel_close(c.frequency_response(f), a.frequency_response(f) + b.frequency_response(f))


def test_subtraction_and_scalars():
    a = System.parse("1/(s+1)")
    rel_close((2 * a).frequency_response([0.5]), 2 * a.frequency_response([0.5]))
    rel_close((a - 1).frequency_response([0.5]), a.frequency_response([0.5]) - 1)


def test_unity_feedback_of_an_integrator_plant():
    # Ogata sec. 2-3: C/R = G/(1+G); for G = 1/(s(s+1)) that is 1/(s^2 + s + 1).
    g = System.parse("1/(s*(s+1))")
    c = g.feedback()
    np.testing.assert_allclose(c.num, [1])
    np.testing.assert_allclose(c.den, [1, 1, 1], rtol=1e-14)
    assert c.stability == "stable"


def test_feedback_with_a_sensor_in_the_return_path():
    # C/R = G/(1 + G H), checked pointwise against the definition.
    g = System.parse("100/(s^2 + 10s + 100)")
    h = System.parse("50/(s + 50)")
    c = g.feedback(h)
    f = np.array([0.0, 0.7, 2.0, 30.0])
    gf, hf = g.frequency_response(f), h.frequency_response(f)
    rel_close(c.frequency_response(f), gf / (1 + gf * hf), rtol=1e-10)
    assert c.order == 3


def test_dead_time_rules_for_combination():
    a = System.parse("exp(-1m*s)/(s+1)")
    b = System.parse("exp(-2m*s)/(s+2)")
    assert (a * b).delay_s == pytest.approx(3e-3)
    same = System.parse("exp(-1m*s)*2/(s+2)")
    assert (a + same).delay_s == pytest.approx(1e-3)  # a common dead time factors out
    with pytest.raises(InvalidSystemError, match="not form a rational"):
        a + b
    with pytest.raises(InvalidSystemError, match="dead time"):
        a.feedback()
    with pytest.raises(InvalidSystemError, match="dead time"):
        System.parse("1/(s+1)").feedback(a)


def test_algebraic_loop_is_an_error():
    with pytest.raises(InvalidSystemError, match="algebraic loop"):
        System.parse("(s+1)/(s+2)").feedback(-1)


# ----------------------------------------------------------------------------- warnings and errors
def test_near_cancellation_warns_and_keeps_both():
    with pytest.warns(PoleZeroCancellationWarning, match="nothing is cancelled"):
        sys = System.parse("(s+1)/((s+1.0000000001)*(s+2))")
    assert sys.order == 2
    assert len(sys.near_cancellations) == 1
    assert sys.to_dict()["notes"]


def test_distinct_roots_do_not_warn():
    with warnings.catch_warnings():
        warnings.simplefilter("error", PoleZeroCancellationWarning)
        System.parse("(s+1.01)/((s+1)*(s+2))")


@pytest.mark.parametrize(
    "make, fragment",
    [
        (lambda: System.from_coeffs([1], []), "denominator is empty"),
        (lambda: System.from_coeffs([1], [0, 0, 0]), "denominator is empty or all zero"),
        (lambda: System.from_coeffs([0, 0], [1, 1]), "numerator is empty or all zero"),
        (lambda: System.from_coeffs([float("nan")], [1, 1]), "NaN or infinity"),
        (lambda: System.from_coeffs([1], [1, float("inf")]), "NaN or infinity"),
        (lambda: System.from_coeffs([1, 0, 0], [1, 1]), "not realizable as a causal filter"),
        (lambda: System.from_coeffs([1], [1] + [0] * 61), "above the limit of 60"),
        (lambda: System.from_ode([0, 0], [1]), "output-side coefficients a are empty"),
        (lambda: System.from_ode([1, 1], [1, 0, 0]), "derivative order 2"),
        (lambda: System.from_zpk([], [-1], 0), "gain is 0"),
        (lambda: System.from_zpk([], [-1 + 1j], 1), "conjugate"),
        (lambda: System.from_zpk([-1, -2], [-1], 1), "not realizable"),
        (lambda: System.parse("s^2/(s+1)"), "not realizable as a causal filter"),
        (lambda: System.parse("1/(s+1)^61"), "above the limit of 60"),
        (lambda: System.parse("y' = x''"), "not realizable"),
        (lambda: System.from_coeffs([1], [1e-300, 1e300]), "range"),
    ],
)
def test_bad_systems_raise_simwave_errors(make, fragment):
    with pytest.raises(SimwaveError, match=None) as info:
        make()
    assert fragment in str(info.value)
    assert "\n" not in str(info.value)


def test_to_dict_is_strict_json():
    for text in ("1/(s^2+1.4142135623730951*s+1)", "1/s", "s/(s+1)", "exp(-1m*s)/(s+1)",
                 "y'' + 3y' + 2y = 2x' + x"):
        d = System.parse(text).to_dict()
        json.dumps(d, allow_nan=False)  # raises on NaN/inf floats
    assert System.parse("1/s").to_dict()["dc_gain"] == "inf"


def test_to_dict_numbers_are_exact():
    sys = System.parse("1/(s^2+1.4142135623730951*s+1)")
    d = json.loads(json.dumps(sys.to_dict()))
    assert [complex(p["re"], p["im"]) for p in d["poles_rad_s"]] == list(sys.poles)
    assert d["denominator"] == list(sys.den)


def test_high_order_frequency_response_stays_finite():
    sys = System.design("butterworth", 60, 1.0)
    f = np.array([1e-3, 0.9, 1.0, 1.1, 10.0])
    h = sys.frequency_response(np.concatenate([f, [1e6]]))
    assert np.all(np.isfinite(h))
    # Butterworth magnitude 1/sqrt(1 + (f/fc)^(2n)) (Williams & Taylor, Electronic Filter
    # Design Handbook, ch. 2), here n = 60.
    np.testing.assert_allclose(np.abs(h[:-1]), 1 / np.sqrt(1 + f**120), rtol=1e-9)
