"""Steady-state metrics: IEEE Std 1057 sine fits, THD, SINAD, tones, final value, errors."""

from __future__ import annotations

import math

import numpy as np
import pytest

from simwave import System, Waveform
from simwave.errors import MeasurementError
from simwave.measure import measure
from simwave.measure.steady import fit_tones, spectrum_peak_hz


def second_order_response(f: float, zeta: float, wn: float) -> complex:
    """H(j w) of wn^2 / (s^2 + 2 zeta wn s + wn^2) in closed form: magnitude
    wn^2 / sqrt((wn^2 - w^2)^2 + (2 zeta wn w)^2), phase -atan2(2 zeta wn w, wn^2 - w^2)
    (Ogata, Modern Control Engineering, 5th ed., sec. 7-2, quadratic factor)."""
    w = 2 * math.pi * f
    mag = wn**2 / math.hypot(wn**2 - w**2, 2 * zeta * wn * w)
    return mag * complex(
        math.cos(-math.atan2(2 * zeta * wn * w, wn**2 - w**2)),
        math.sin(-math.atan2(2 * zeta * wn * w, wn**2 - w**2)),
    )


@pytest.mark.parametrize("refine", [False, True])
def test_sine_fit_recovers_amplitude_and_phase(refine):
    # IEEE Std 1057-2017 three-parameter (known f) and four-parameter (f estimated,
    # started from an interpolated FFT peak) fits on a clean sine with a non-integer
    # number of cycles: amplitude to 1e-6 relative, phase to 1e-6 rad.
    fs, n = 10_000.0, 7_740
    f, amp, phase, offset = 123.456789, 2.5, -2.2, 0.75
    t = np.arange(n) / fs
    assert 0.1 < (f * n / fs) % 1 < 0.9  # non-integer cycles (95.56)
    y = amp * np.cos(2 * math.pi * f * t + phase) + offset
    start = f if not refine else spectrum_peak_hz(y, fs)
    fit = fit_tones(y, t, [start], refine=refine)
    tone = fit.tones[0]
    assert tone.amplitude == pytest.approx(amp, rel=1e-6)
    assert abs(math.remainder(tone.phase_rad - phase, 2 * math.pi)) < 1e-6
    assert fit.offset == pytest.approx(offset, abs=1e-9)
    if refine:
        assert abs(start - f) > 1e-6  # the FFT start really was off ...
        assert tone.frequency_hz == pytest.approx(f, rel=1e-9)  # ... and the fit found f


def test_four_parameter_fit_in_noise_matches_scipy_curve_fit():
    # Reference library: scipy.optimize.curve_fit on the same model from the same start.
    from scipy.optimize import curve_fit

    rng = np.random.default_rng(7)
    fs, n = 1000.0, 3000
    t = np.arange(n) / fs
    y = 1.3 * np.cos(2 * math.pi * 17.37 * t + 0.4) + 0.1 + rng.normal(0, 0.05, n)
    f0 = spectrum_peak_hz(y, fs)
    fit = fit_tones(y, t, [f0], refine=True)

    def model(tt, a, b, c, f):
        return a * np.cos(2 * math.pi * f * tt) + b * np.sin(2 * math.pi * f * tt) + c

    p, _ = curve_fit(model, t, y, p0=[1, 0, 0, f0])
    assert fit.tones[0].frequency_hz == pytest.approx(p[3], rel=1e-9)
    assert fit.tones[0].amplitude == pytest.approx(math.hypot(p[0], p[1]), rel=1e-7)


def sine_record(zeta, wn, f, fs, periods, amp=1.0):
    """Input sine and the analytic steady-state output |H| A cos(wt + arg H)."""
    n = int(periods * fs / f)
    t = np.arange(n) / fs
    h = second_order_response(f, zeta, wn)
    x = amp * np.sin(2 * math.pi * f * t)
    y = abs(h) * amp * np.sin(2 * math.pi * f * t + math.atan2(h.imag, h.real))
    return Waveform(x, fs), Waveform(y, fs), h


@pytest.mark.parametrize("f", [3.3, 9.7, 31.0])
def test_gain_phase_of_second_order_steady_state(f):
    # Measured gain/phase of the steady-state output of a second-order system equal
    # |H(j2 pi f)| and arg H(j2 pi f) from the closed form (Ogata sec. 7-2).
    zeta, wn = 0.2, 2 * math.pi * 10
    x, y, h = sine_record(zeta, wn, f, fs=2000.0, periods=40.3)
    system = System.from_coeffs([wn**2], [1, 2 * zeta * wn, wn**2])
    ch = measure(y, x, system).to_dict()["channels"][0]
    assert ch["kind"] == "sine"
    s = ch["sine"]
    assert s["frequency_hz"] == pytest.approx(f, rel=1e-9)
    assert s["gain_db"] == pytest.approx(20 * math.log10(abs(h)), abs=1e-7)
    assert s["phase_deg"] == pytest.approx(math.degrees(math.atan2(h.imag, h.real)), abs=1e-6)
    assert s["predicted_gain_db"] == pytest.approx(20 * math.log10(abs(h)), abs=1e-9)
    assert s["predicted_phase_deg"] == pytest.approx(
        math.degrees(math.atan2(h.imag, h.real)), abs=1e-7
    )
    rows = {r["quantity"]: r for r in ch["comparison"]}
    assert rows["sine gain_db"]["flag"] is False and rows["sine phase_deg"]["flag"] is False


def test_gain_phase_of_simulated_response_from_rest():
    # Whole response from rest by scipy.signal.lsim (reference library): the start-up
    # transient is left out by the steady-state window (last 25 %), and gain/phase match
    # the closed form to the accuracy of lsim's interpolation.
    from scipy import signal

    zeta, wn, f, fs = 0.3, 2 * math.pi * 20, 13.0, 5000.0
    t = np.arange(int(3.0 * fs)) / fs
    x = np.sin(2 * math.pi * f * t)
    _, y, _ = signal.lsim(([wn**2], [1, 2 * zeta * wn, wn**2]), x, t)
    h = second_order_response(f, zeta, wn)
    ch = measure(Waveform(y, fs), Waveform(x, fs)).to_dict()["channels"][0]
    assert ch["sine"]["gain_db"] == pytest.approx(20 * math.log10(abs(h)), abs=1e-3)
    assert ch["sine"]["phase_deg"] == pytest.approx(
        math.degrees(math.atan2(h.imag, h.real)), abs=0.05
    )


def test_wrong_model_is_flagged():
    # The check can fail: a model with a different damping is flagged.
    zeta, wn = 0.2, 2 * math.pi * 10
    x, y, _ = sine_record(zeta, wn, 9.7, fs=2000.0, periods=40.3)
    wrong = System.from_coeffs([wn**2], [1, 2 * 0.3 * wn, wn**2])
    ch = measure(y, x, wrong).to_dict()["channels"][0]
    assert any(r["flag"] for r in ch["comparison"])


def test_thd_of_known_harmonics():
    # THD = sqrt(sum of harmonic amplitudes^2) / fundamental (IEEE Std 1057-2017):
    # 1 % 2nd + 0.5 % 3rd -> sqrt(1 + 0.25) % = 1.118 %, to 1e-4 absolute.
    fs, f = 48_000.0, 997.0
    t = np.arange(int(0.25 * fs)) / fs
    w = 2 * math.pi * f
    y = np.cos(w * t) + 0.01 * np.cos(2 * w * t + 0.3) + 0.005 * np.cos(3 * w * t - 1.1)
    s = measure(Waveform(y, fs)).to_dict()["channels"][0]["sine"]
    assert s["thd_pct"] == pytest.approx(100 * math.sqrt(0.01**2 + 0.005**2), abs=1e-4)
    assert s["thd_pct"] == pytest.approx(1.118, abs=1e-3)
    assert s["thd_db"] == pytest.approx(20 * math.log10(math.sqrt(1.25e-4)), abs=1e-4)
    assert s["harmonics"][0]["relative_pct"] == pytest.approx(1.0, abs=1e-6)
    assert s["harmonics"][1]["relative_pct"] == pytest.approx(0.5, abs=1e-6)
    assert s["fit"] == "four-parameter"


def test_thd_respects_harmonic_count():
    fs, f = 48_000.0, 1000.0
    t = np.arange(int(0.1 * fs)) / fs
    w = 2 * math.pi * f
    y = np.cos(w * t) + 0.02 * np.cos(5 * w * t)
    few = measure(Waveform(y, fs), harmonics=4, sine_hz=f).to_dict()["channels"][0]["sine"]
    many = measure(Waveform(y, fs), harmonics=5, sine_hz=f).to_dict()["channels"][0]["sine"]
    assert few["thd_pct"] == pytest.approx(0.0, abs=1e-9)
    assert many["thd_pct"] == pytest.approx(2.0, abs=1e-9)
    assert many["fit"] == "three-parameter"


def test_sinad_of_sine_in_noise():
    # SINAD = fundamental RMS / RMS of the fit residual (IEEE Std 1057-2017). White
    # noise of known sigma: SINAD = 20 log10((A / sqrt 2) / sigma), within 0.1 dB.
    rng = np.random.default_rng(11)
    fs, f, a, sigma = 10_000.0, 211.3, 1.0, 0.01
    t = np.arange(200_000) / fs
    y = a * np.cos(2 * math.pi * f * t) + rng.normal(0, sigma, t.size)
    s = measure(Waveform(y, fs)).to_dict()["channels"][0]["sine"]
    assert s["sinad_db"] == pytest.approx(20 * math.log10(a / math.sqrt(2) / sigma), abs=0.1)


def test_multitone_gain_phase_at_each_tone():
    # Three tones through a second-order system (analytic steady state, Ogata sec. 7-2):
    # tones found in the input spectrum, gain and phase at each equal H(j2 pi f_k).
    zeta, wn, fs = 0.4, 2 * math.pi * 50, 4000.0
    tones = [(12.5, 1.0, 0.0), (47.0, 0.5, 1.0), (133.3, 0.25, -2.0)]
    t = np.arange(int(4.0 * fs)) / fs
    x = np.zeros_like(t)
    y = np.zeros_like(t)
    for f, a, p in tones:
        h = second_order_response(f, zeta, wn)
        x += a * np.cos(2 * math.pi * f * t + p)
        y += abs(h) * a * np.cos(2 * math.pi * f * t + p + math.atan2(h.imag, h.real))
    system = System.from_coeffs([wn**2], [1, 2 * zeta * wn, wn**2])
    ch = measure(Waveform(y, fs), Waveform(x, fs), system).to_dict()["channels"][0]
    assert ch["kind"] == "multitone"
    got = ch["tones"]
    assert [round(r["frequency_hz"], 6) for r in got] == [12.5, 47.0, 133.3]
    for r, (f, _, _) in zip(got, tones, strict=True):
        h = second_order_response(f, zeta, wn)
        assert r["gain_db"] == pytest.approx(20 * math.log10(abs(h)), abs=1e-6)
        assert r["phase_deg"] == pytest.approx(math.degrees(math.atan2(h.imag, h.real)), abs=1e-5)
        assert r["predicted_gain_db"] == pytest.approx(20 * math.log10(abs(h)), abs=1e-9)
    assert not any(r["flag"] for r in ch["comparison"])
    # a given tone list is used as is
    ch2 = measure(Waveform(y, fs), Waveform(x, fs), tones_hz=[47.0]).to_dict()["channels"][0]
    assert [r["frequency_hz"] for r in ch2["tones"]] == [47.0]


def first_order_step_record(tau, k, fs, dur, t_step):
    t = np.arange(int(dur * fs)) / fs
    x = (t > t_step).astype(float)
    y = np.where(t > t_step, k * (1 - np.exp(-(t - t_step) / tau)), 0.0)
    return Waveform(y, fs), Waveform(x, fs)


def test_step_steady_state_gain_and_error():
    # First-order lag K / (tau s + 1) driven by a unit step: final value K, steady-state
    # error 1 - K (Ogata sec. 5-8, steady-state error of a type-0 system; here the
    # plain input-minus-output error), gain set beside H(0) = K.
    tau, k, fs = 0.05, 0.8, 2000.0
    out, inp = first_order_step_record(tau, k, fs, 2.0, 0.1 - 0.5 / fs)
    system = System.from_coeffs([k], [tau, 1])
    ch = measure(out, inp, system).to_dict()["channels"][0]
    ss = ch["steady_state"]
    assert ss["final_value"] == pytest.approx(k, rel=1e-9)
    assert ss["steady_state_gain"] == pytest.approx(k, rel=1e-9)
    assert ss["steady_state_error"] == pytest.approx(1 - k, rel=1e-9)
    assert ss["steady_state_error_pct"] == pytest.approx(100 * (1 - k), rel=1e-9)
    assert ss["ripple_pp"] == pytest.approx(0.0, abs=1e-9)
    row = next(r for r in ch["comparison"] if r["quantity"].startswith("steady_state_gain"))
    assert row["predicted"] == pytest.approx(k) and row["flag"] is False


def test_ramp_steady_state_error():
    # Unit-ramp response of 1 / (T s + 1): c(t) = t - T + T e^{-t/T}, so the error
    # r - c tends to T (Ogata, Modern Control Engineering, 5th ed., sec. 5-2).
    tau, fs = 0.1, 1000.0
    t = np.arange(int(3.0 * fs)) / fs
    x = 2.0 * t
    y = 2.0 * (t - tau + tau * np.exp(-t / tau))
    ss = measure(Waveform(y, fs), Waveform(x, fs)).to_dict()["channels"][0]["steady_state"]
    assert ss["steady_state_error"] == pytest.approx(2.0 * tau, rel=1e-6)
    assert ss["ramp_lag_s"] == pytest.approx(tau, rel=1e-6)
    assert ss["error_trend_per_s"] == pytest.approx(0.0, abs=1e-6)
    assert ss["steady_state_gain"] == pytest.approx(1.0, rel=1e-6)


def test_ripple_mean_rms_over_last_part():
    # A settled level with a small ripple riding on it: mean, RMS and peak-to-peak over
    # the window equal the definitions computed directly on the same samples.
    fs = 1000.0
    t = np.arange(4000) / fs
    y = 5.0 + 0.02 * np.sin(2 * math.pi * 50 * t)
    y[:100] = 0.0
    ch = measure(Waveform(y, fs), steady_fraction=0.1).to_dict()["channels"][0]
    ss = ch["steady_state"]
    w = y[-400:]
    assert ss["window_samples"] == 400
    assert ss["mean"] == pytest.approx(w.mean(), rel=1e-12)
    assert ss["rms"] == pytest.approx(math.sqrt(np.mean(w * w)), rel=1e-12)
    assert ss["ripple_pp"] == pytest.approx(np.ptp(w), rel=1e-12)


def test_no_sine_present_is_an_error_when_asked():
    rng = np.random.default_rng(0)
    y = rng.normal(size=5000)
    with pytest.raises(MeasurementError, match="no sine present"):
        measure(Waveform(y, 1000.0), signal_kind="sine")


def test_sine_record_too_short():
    fs = 1000.0
    t = np.arange(1000) / fs
    y = np.sin(2 * math.pi * 2.0 * t)  # 2 cycles in the record, 0.5 in the last 25 %
    s = measure(Waveform(y, fs), sine_hz=2.0).to_dict()["channels"][0]["sine"]
    assert s["gain_db"] is None and "record too short" in s["null_reasons"]["gain_db"]
