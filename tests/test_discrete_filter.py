"""DiscreteSystem: block processing, initial states, output initial conditions."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
import scipy.signal as sig
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from simwave import System
from simwave.discrete import METHODS, ModelWarning, discretize
from simwave.errors import DiscretizationError


def quiet(*args, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelWarning)
        return discretize(*args, **kw)


_SYS = System.from_zpk([-30.0], [-12.0, -4 + 25j, -4 - 25j], 900.0)
_RATE = 200.0
_MODELS = {
    (m, d): quiet(_SYS, _RATE, m, delay_s=d / _RATE)
    for m in METHODS
    for d in (0.0, 3.0, 2.4)
}
_DATA = np.random.default_rng(5).standard_normal((700, 3)) + [1.5, -0.5, 0.0]


def _split(n: int, cuts: list[int]) -> list[tuple[int, int]]:
    edges = sorted({0, n, *[min(c, n) for c in cuts]})
    pieces = [(a, b) for a, b in zip(edges[:-1], edges[1:], strict=True)]
    # Also empty blocks in between.
    return [(a, a) for a, _ in pieces[::3]] + pieces if pieces else [(0, 0)]


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    key=st.sampled_from(sorted(_MODELS)),
    cuts=st.lists(st.integers(0, 700), max_size=25),
    initial=st.sampled_from(["rest", "settled"]),
    give_first=st.booleans(),
)
def test_blocks_of_any_size_equal_one_call_bit_for_bit(key, cuts, initial, give_first):
    # Property: processing in blocks of any sizes (0 and 1 included) is bit-for-bit
    # the same as one call, whatever the method, dead time and initial state.
    model = _MODELS[key]
    x = _DATA
    whole = model.filter(x, initial=initial)
    first = x[0] if give_first else None
    state = model.initial_state(first, initial, n_channels=x.shape[1])
    pieces = []
    for a, b in sorted(_split(x.shape[0], cuts), key=lambda ab: (ab[0], ab[1])):
        out, state = model.process(x[a:b], state)
        assert out.shape == (b - a, x.shape[1])
        pieces.append(out)
    assert np.array_equal(np.concatenate(pieces), whole)


def test_one_dimensional_block_is_one_channel():
    model = _MODELS[("ramp-invariant", 2.4)]
    y2 = model.filter(_DATA[:, :1])
    y1 = model.filter(_DATA[:, 0])
    assert y1.shape == (700,)
    assert np.array_equal(y1, y2[:, 0])


def test_channels_are_independent():
    # Each channel of a multi-channel run equals that channel run alone (bit for bit).
    model = _MODELS[("bilinear", 3.0)]
    y = model.filter(_DATA)
    for c in range(3):
        assert np.array_equal(y[:, c], model.filter(_DATA[:, c]))


def test_state_is_used_once():
    model = _MODELS[("step-invariant", 0.0)]
    state = model.initial_state(np.zeros(1))
    _, nxt = model.process(np.ones(5), state)
    with pytest.raises(DiscretizationError, match="already used"):
        model.process(np.ones(5), state)
    model.process(np.ones(5), nxt)


def test_channel_mismatch_is_an_error():
    model = _MODELS[("step-invariant", 0.0)]
    state = model.initial_state(np.zeros(2))
    with pytest.raises(DiscretizationError, match="channels"):
        model.process(np.ones((5, 3)), state)


def test_process_matches_sosfilt_on_same_sections():
    # Reference: scipy.signal.sosfilt on the model's own sections from zero state
    # (step-invariant: at rest needs no first-sample correction).
    model = _MODELS[("step-invariant", 0.0)]
    y_ref = sig.sosfilt(model.sos, _DATA, axis=0)
    assert np.array_equal(model.filter(_DATA), y_ref)


@pytest.mark.parametrize("method", METHODS)
@pytest.mark.parametrize("delay", [0.0, 3.0, 2.4])
def test_settled_start_has_no_transient(method, delay):
    # A constant input at an offset from a settled start: the output is the model's DC
    # gain times the offset from the first sample on (no start-up transient).
    model = _MODELS[(method, delay)]
    x = np.full((400, 2), [3.0, -0.25])
    y = model.filter(x, initial="settled")
    expected = model.dc_gain * x[0]
    np.testing.assert_allclose(y, np.broadcast_to(expected, y.shape), rtol=1e-10, atol=1e-12)
    # At rest the same input does produce a transient (the check can fail).
    assert np.max(np.abs(model.filter(x) - expected)) > 0.1


def test_settled_needs_finite_dc_gain():
    integrator = System.from_zpk([], [0.0, -10.0], 10.0)
    model = quiet(integrator, 100.0, "ramp-invariant")
    with pytest.raises(DiscretizationError, match="DC gain"):
        model.initial_state(np.ones(1), "settled")


def test_unknown_initial_mode():
    with pytest.raises(DiscretizationError, match="rest, settled"):
        _MODELS[("bilinear", 0.0)].initial_state(np.ones(1), "warm")


# ------------------------------------------------------------------ ODE initial conditions
_ODE = System.from_ode([1, 3, 2], [1])  # y'' + 3y' + 2y = x


@pytest.mark.parametrize("method", ["step-invariant", "ramp-invariant", "impulse-invariant",
                                    "matched-z"])
def test_ode_zero_input_response_closed_form(method):
    # y'' + 3y' + 2y = 0, y(0) = 1, y'(0) = 0: y = 2 exp(-t) - exp(-2t) (roots -1, -2;
    # any ODE text, e.g. Ogata 5th ed., sec. 2-3). The poles of these models are exactly
    # exp(pT), so the analog zero-input response is reproduced at the samples.
    rate = 100.0
    t = np.arange(500) / rate
    y = quiet(_ODE, rate, method).filter(np.zeros(t.size), output_ics=[1.0, 0.0])
    np.testing.assert_allclose(y, 2 * np.exp(-t) - np.exp(-2 * t), rtol=0, atol=1e-12)


@pytest.mark.parametrize("method", ["step-invariant", "ramp-invariant"])
def test_ode_initial_conditions_plus_step_closed_form(method):
    # y'' + 3y' + 2y = 1 (unit step from t = 0), y(0) = 1, y'(0) = -2. Closed form
    # (undetermined coefficients, e.g. Ogata 5th ed., sec. 2-3): y = 1/2 + A e^-t + B e^-2t
    # with A + B = 1/2 and -A - 2B = -2, so B = 3/2, A = -1.
    rate = 100.0
    t = np.arange(400) / rate
    ref = 0.5 - np.exp(-t) + 1.5 * np.exp(-2 * t)
    y = discretize(_ODE, rate, method).filter(np.ones(t.size), output_ics=[1.0, -2.0])
    np.testing.assert_allclose(y, ref, rtol=0, atol=1e-12)


def test_ode_initial_conditions_with_dead_time():
    # y'' + 3y' + 2y = x(t - 0.035): the zero-input response starts at t = 0, the input's
    # effect 3.5 samples later (superposition of the two closed forms above).
    rate = 100.0
    sysm = System.from_ode([1, 3, 2], [1], delay_s=0.035)
    t = np.arange(300) / rate
    td = t - 0.035
    forced = np.where(td >= 0, 0.5 - np.exp(-td) + 0.5 * np.exp(-2 * td), 0.0)
    zir = 2 * np.exp(-t) - np.exp(-2 * t)
    y = discretize(sysm, rate, "ramp-invariant").filter(np.ones(t.size), output_ics=[1.0, 0.0])
    np.testing.assert_allclose(y, zir + forced, rtol=0, atol=1e-12)


def test_ode_initial_conditions_bilinear_close_to_analog():
    # The bilinear model's own zero-input response (trapezoidal rule) is close to the
    # analog one at a rate well above the poles; not exact by nature.
    rate = 1000.0
    t = np.arange(3000) / rate
    y = quiet(_ODE, rate, "bilinear").filter(np.zeros(t.size), output_ics=[1.0, 0.0])
    err = np.max(np.abs(y - (2 * np.exp(-t) - np.exp(-2 * t))))
    assert 1e-9 < err < 1e-5


def test_ode_initial_conditions_per_channel():
    rate = 100.0
    t = np.arange(200) / rate
    ics = np.array([[1.0, 0.0], [0.0, 1.0]])  # columns: channels
    y = discretize(_ODE, rate, "ramp-invariant").filter(np.zeros((t.size, 2)), output_ics=ics)
    np.testing.assert_allclose(y[:, 0], 2 * np.exp(-t) - np.exp(-2 * t), atol=1e-12)
    # y(0) = 0, y'(0) = 1: y = exp(-t) - exp(-2t).
    np.testing.assert_allclose(y[:, 1], np.exp(-t) - np.exp(-2 * t), atol=1e-12)


def test_ode_initial_conditions_errors():
    model = discretize(_ODE, 100.0, "ramp-invariant")
    with pytest.raises(DiscretizationError, match="needs 2 values"):
        model.initial_state(np.zeros(1), output_ics=[1.0, 0.0, 0.0])
    with pytest.raises(DiscretizationError, match="initial='rest'"):
        model.initial_state(np.zeros(1), "settled", output_ics=[1.0, 0.0])
    tf = discretize(System.from_coeffs([1], [1, 3, 2]), 100.0)
    with pytest.raises(DiscretizationError, match="ODE"):
        tf.initial_state(np.zeros(1), output_ics=[1.0, 0.0])


def test_third_order_ode_zero_input_response():
    # y''' + 6y'' + 11y' + 6y = 0 (roots -1, -2, -3), y(0) = 0, y'(0) = 0, y''(0) = 2:
    # y = e^-t - 2 e^-2t + e^-3t (check: y(0) = 0, y'(0) = -1 + 4 - 3 = 0, y''(0) = 1 - 8 + 9 = 2).
    sysm = System.from_ode([1, 6, 11, 6], [1, 0])
    rate = 50.0
    t = np.arange(300) / rate
    y = discretize(sysm, rate, "ramp-invariant").filter(np.zeros(t.size), output_ics=[0, 0, 2])
    ref = np.exp(-t) - 2 * np.exp(-2 * t) + np.exp(-3 * t)
    np.testing.assert_allclose(y, ref, rtol=0, atol=1e-12)
    assert math.isfinite(y[-1])


def test_frequency_response_equals_scipy_sosfreqz():
    # Reference: scipy.signal.sosfreqz on the same sections (a 6th-order elliptic design).
    import numpy as np
    import scipy.signal as sg

    from simwave import System

    model = System.design("elliptic", 6, 1000, ripple_db=0.5, attenuation_db=60).discretize(
        48000.0, "bilinear")
    f = np.geomspace(1.0, 23_900.0, 400)
    _, ref = sg.sosfreqz(model.sos, worN=f, fs=48000.0)
    got = model.frequency_response(f, dead_time=False)
    np.testing.assert_allclose(got, ref, rtol=1e-10, atol=0)


def test_own_section_pairing_matches_scipy_zpk2sos():
    # Reference: scipy.signal.zpk2sos (pairing "nearest"); the same sections' shape and
    # the same response to 1e-12 for random conjugate-closed sets up to order 12.
    import numpy as np
    import scipy.signal as sg

    from simwave.discrete.filter import _pair_zpk

    rng = np.random.default_rng(42)

    def roots(n, rmax):
        out = []
        while len(out) < n:
            if n - len(out) >= 2 and rng.random() < 0.6:
                q = rng.uniform(0, rmax) * np.exp(1j * rng.uniform(0, np.pi))
                out += [q, np.conj(q)]
            else:
                out.append(complex(rng.uniform(-rmax, rmax)))
        return np.array(out)

    w = np.linspace(0, np.pi, 256)
    for _ in range(200):
        n = int(rng.integers(1, 13))
        z, p, k = roots(n, 1.5), roots(n, 0.999), rng.uniform(0.1, 2.0)
        ours, ref = _pair_zpk(z, p, k), sg.zpk2sos(z, p, k)
        assert ours.shape == ref.shape
        _, h_ours = sg.sosfreqz(ours, worN=w)
        _, h_ref = sg.sosfreqz(ref, worN=w)
        assert np.max(np.abs(h_ours - h_ref)) <= 1e-12 * np.max(np.abs(h_ref))
