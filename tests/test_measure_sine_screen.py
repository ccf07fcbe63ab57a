"""The spectral-concentration screen that spares noise the four-parameter sine fit
(simwave.measure.stages.classify.could_be_sine): it must pass every window the fit
would accept, and turn long white noise away."""

from __future__ import annotations

import math

import numpy as np
import pytest

from simwave import Waveform
from simwave.measure import measure
from simwave.measure import steady as st
from simwave.measure.stages import classify


def test_on_bin_tone_is_fully_concentrated():
    # The periodic Hann window's DFT has exactly three non-zero lines (1/2, -1/4, -1/4 of
    # the window length: Harris, Proc. IEEE 66(1), 1978, sec. on the Hann window), so a
    # tone on a bin keeps all of its windowed energy within +/-1 bin of it.
    n = 4096
    y = np.cos(2 * math.pi * 300 * np.arange(n) / n + 0.4)
    share, centre = st.tone_concentration(st.hann_magnitude(y))
    assert share == pytest.approx(1.0, abs=1e-12)
    assert abs(centre - 300) <= st.CONCENTRATION_HALF_BINS


def test_long_white_noise_is_screened_out():
    # White noise spreads its energy evenly over the n/2 bins: 17 bins of 32,768 hold about
    # 5e-4 of it on average; the largest band a few times that (our bound 0.02).
    rng = np.random.default_rng(11)
    for seed in range(5):
        y = np.random.default_rng(seed).standard_normal(65536)
        assert not classify.could_be_sine(st.hann_magnitude(y))
    y = 3.0 + 0.1 * rng.standard_normal(65536)
    assert not classify.could_be_sine(st.hann_magnitude(y))


def _accepted_fit(y, rate):
    t = np.arange(y.size) / rate
    fit = st.fit_tones(y, t, [st.spectrum_peak_hz(y, rate)], refine=True)
    return fit.explained >= classify.SINE_AUTO_EXPLAINED and fit.tones[0].frequency_hz > 0


@pytest.mark.parametrize("cycles", [10.3, 37.5, 1000.0, 4000.77, 32700.2])
@pytest.mark.parametrize("disturbance", ["noise", "harmonic", "burst"])
def test_every_sine_the_fit_accepts_passes_the_screen(cycles, disturbance):
    # Sines at the edge of acceptance (residual near 10 % of the AC power: explained
    # fraction just above SINE_AUTO_EXPLAINED): white noise, a strong 3rd harmonic, and a
    # burst in the middle of the window, where the Hann weight is largest (the case the
    # bound in classify.SINE_MIN_CONCENTRATION is written for).
    n, rate = 65536, 48000.0
    k = np.arange(n)
    rng = np.random.default_rng(int(cycles * 10))
    sine = 1.0 * np.sin(2 * math.pi * cycles * k / n + 0.7) + 0.25
    if disturbance == "noise":
        d = rng.standard_normal(n)
    elif disturbance == "harmonic":
        third = 3 * cycles < n / 2
        d = np.sin(2 * math.pi * 3 * cycles * k / n) if third else rng.standard_normal(n)
    else:
        d = np.where(np.abs(k - n / 2) < n / 40, rng.standard_normal(n), 0.0)
    # scale the disturbance to 0.105 of the sine's power (explained about 0.905)
    d = d * math.sqrt(0.105 * 0.5 / np.mean(d * d))
    y = sine + d
    assert _accepted_fit(y, rate)
    assert classify.could_be_sine(st.hann_magnitude(y))


def test_noise_measured_without_the_sine_fit(monkeypatch):
    # The end result is unchanged ("other"), and the four-parameter fit is not run.
    calls = []
    real = st.fit_tones
    monkeypatch.setattr(st, "fit_tones", lambda *a, **kw: calls.append(1) or real(*a, **kw))
    y = 0.1 * np.random.default_rng(3).standard_normal(200_000)
    r = measure(Waveform(y, 48000.0)).to_dict()
    assert r["channels"][0]["kind"] == "other"
    assert calls == []
