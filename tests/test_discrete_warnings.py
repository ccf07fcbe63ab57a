"""Warnings that catch what a method gets wrong, and stay quiet where the output is exact.

Outside checks named beside each test: the bilinear warping formula
Omega = 2/T tan(w T/2) (Oppenheim & Schafer, *Discrete-Time Signal
Processing*, 3rd ed., sec. 7.2.2); the steady-state response of a linear
system to a sine, |H(jw)| and arg H(jw) (any signals-and-systems text); the
half-power half-width zeta w_n of a resonance, Q = 1/(2 zeta) (Ogata, *Modern
Control Engineering*, 5th ed., sec. 8-2, from memory); scipy.signal.lsim for
the analog sine response.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
import scipy.signal as sig

import simwave
from simwave import System, Waveform
from simwave.discrete import ModelWarning, discretize
from simwave.discrete.accuracy import check_frequencies, method_check

F0 = 1000.0
RATE = 48_000.0


def resonator(q: float, f0: float = F0) -> System:
    w0 = 2 * math.pi * f0
    return System.from_zpk([], np.roots([1.0, w0 / q, w0 * w0]), w0 * w0)


def run_and_collect(system, rate, method, x, **kw):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        out = simwave.simulate(system, Waveform(x, rate), method=method, **kw)
    return out, [str(w.message) for w in caught]


def test_grid_holds_the_resonance_and_its_half_power_width():
    # Q = 1000 at 1 kHz: half-power half-width zeta f_n = 0.5 Hz. A 96-point log grid
    # from 0.1 Hz to 21.6 kHz steps 10 % at a time and can miss it; the check's grid has
    # f_n and f_n +- 0.5 Hz (Ogata sec. 8-2: half-power points at f_n (1 +- zeta)).
    system = resonator(1000.0)
    f = check_frequencies(system, RATE, 0.1, 0.45 * RATE)
    for want in (F0, F0 - 0.5, F0 + 0.5):
        assert np.min(np.abs(f - want)) <= 1e-9 * F0, want


def test_bilinear_through_a_q_1000_resonance_warns_with_prewarp_remedy():
    system = resonator(1000.0)
    x = np.sin(2 * np.pi * F0 * np.arange(int(2.0 * RATE)) / RATE)
    out, texts = run_and_collect(system, RATE, "bilinear", x)
    joined = "\n".join(texts)
    assert "half-power half-widths" in joined  # the warping warning, relative to the width
    assert "of the largest steady output for a steady sine" in joined  # the steady-sine check
    assert "prewarp at the resonance (1000 Hz" in joined
    # The warning is right: the steady output of a 1 kHz sine is far from the analog one.
    # Analog steady state: amplitude |H(j w0)| = Q = 1000 (Ogata sec. 8-2); the bilinear
    # model puts the resonance 2.85 half-widths away (O&S 7.2.2), so the output is small.
    tail = out.data[-int(0.2 * RATE):, 0]
    analog_amp = abs(system.frequency_response(F0))
    assert np.max(np.abs(tail)) < 0.5 * analog_amp


def test_prewarped_bilinear_at_the_resonance_is_quiet_about_it():
    # Prewarping at f0 maps f0 exactly (O&S sec. 7.2.2): no warping warning.
    system = resonator(1000.0)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        model = discretize(system, RATE, "bilinear", prewarp_hz=F0)
    assert not [w for w in caught if "resonance" in str(w.message)]
    h = model.frequency_response(F0)
    assert abs(h - system.frequency_response(F0)) <= 1e-6 * abs(system.frequency_response(F0))


def test_step_invariant_phase_lag_is_reported():
    # Zero-order hold lags smooth inputs by half a sample: e^{-j w T/2}, 3.75 deg at
    # 1 kHz / 48 kHz, |e^{-j 3.75 deg} - 1| = 6.5 % (Franklin, Powell & Workman, 3rd ed.,
    # sec. 6.3.1, the hold's delay; values computed here).
    system = resonator(0.707)
    model = discretize(system, RATE, "step-invariant")
    check = method_check(model)
    assert check["poor"]
    expected = abs(np.exp(-1j * math.pi * F0 / RATE) - 1) * abs(system.frequency_response(F0))
    peak = np.max(np.abs(system.frequency_response(np.geomspace(10, 20e3, 4000))))
    assert check["max_sine_error"] >= 0.9 * expected / peak
    assert check["sine_phase_error_deg"] < 0  # a lag
    _, texts = run_and_collect(system, RATE, "step-invariant", np.zeros(1000))
    assert any("half a sample" in t and "ramp-invariant" in t for t in texts), texts


@pytest.mark.parametrize("case", [
    ("ramp-invariant", sig.butter(4, 2 * np.pi * 1.0, analog=True, output="zpk"), 1e6),
    ("step-invariant", sig.butter(4, 2 * np.pi * 1.0, analog=True, output="zpk"), 1e6),
    ("bilinear", sig.butter(4, 2 * np.pi * 10.0, analog=True, output="zpk"), 1e6),
    ("ramp-invariant", sig.butter(4, 2 * np.pi * 1000.0, analog=True, output="zpk"), 48e3),
])
def test_no_warning_where_the_output_is_exact(case):
    # At fs/fc = 1e5 ... 1e6 every method's frequency error is far below 1 % and the
    # realization is exact to round-off: nothing to warn about (and no advice to lower
    # the rate, which the magnitude-only check once gave through round-off).
    method, (z, p, k), rate = case
    system = System.from_zpk(z, p, k)
    _, texts = run_and_collect(system, rate, method, np.ones(20_000))
    assert texts == []
    model = discretize(system, rate, method)
    check = method_check(model)
    assert not check["poor"]
    report = model.accuracy()
    own = report.suggested_rate_hz[method]
    assert own is not None and own <= rate  # never "lower the rate to be exact"


def test_forced_sections_far_above_the_corner_say_round_off_not_method():
    # Sections at fs/fc = 1e6 lose digits (O&S 3rd ed., coefficient quantization of
    # direct-form sections near z = 1); the remedy must point at the realization.
    z, p, k = sig.butter(4, 2 * np.pi * 1.0, analog=True, output="zpk")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelWarning)
        model = discretize(System.from_zpk(z, p, k), 1e6, "step-invariant",
                           realization="sections")
    assert model.options["realization"] == "sections"
    assert model.options["sections_round_off_level"] > 1e-6
    from simwave.discrete.accuracy import method_warning

    check = method_check(model)
    check["poor"] = True  # format the text even if the check itself stays under 1 %
    text = method_warning(check, model.accuracy().to_dict(), model.method, model.rate, 1,
                          model.system, model.options)
    assert "round-off of the second-order sections" in text
    assert "raise the rate" not in text
