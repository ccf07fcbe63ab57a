"""Generated signals against their definitions and against scipy.signal."""

import math

import numpy as np
import pytest
from scipy import signal as sps

import simwave
from simwave.errors import WaveformError
from simwave.signals.generate import KINDS, generate_blocks
from simwave.signals.quantity import parse_quantity
from simwave.signals.spec import is_signal_spec, parse_signal_spec

EXAMPLE_PARAMS = {
    "step": {"time": "3m", "rise": "1m"},
    "impulse": {"time": "5m"},
    "pulse": {"width": "2m", "delay": "1m", "edge": "100u"},
    "pulse-train": {"period": "1m", "duty": "30%", "count": 7},
    "square": {"frequency": 130, "duty": 0.3},
    "ramp": {"slope": 50, "time": "1m", "level": 2},
    "sine": {"frequency": "1.1k", "phase": 30},
    "multitone": {"frequencies": "100,1k,3k"},
    "sweep": {"f0": 10, "f1": "2k", "law": "log"},
    "white-noise": {"seed": 4},
    "pink-noise": {"seed": 4, "fmin": 5},
    "pwl": {"points": "0:0,1m:1,1m:-1,4m:0.5"},
}


def test_every_kind_has_an_example():
    assert set(EXAMPLE_PARAMS) == set(KINDS)


@pytest.mark.parametrize("kind", sorted(KINDS))
def test_blocks_are_bit_identical_to_whole_signal(kind):
    whole = simwave.generate(kind, 20000, 7.3, **EXAMPLE_PARAMS[kind])
    parts = list(generate_blocks(kind, 20000, 7.3, 12345, **EXAMPLE_PARAMS[kind]))
    joined = np.concatenate([p.data for p in parts])
    assert joined.shape == whole.data.shape == (146000, 1)
    assert np.array_equal(joined, whole.data)  # bit-identical, not just close
    assert parts[3].t0 == 3 * 12345 / 20000


def test_same_seed_same_noise_other_seed_other_noise():
    a = simwave.generate("white-noise", 1000, 1, seed=11).data
    b = simwave.generate("white-noise", 1000, 1, seed=11).data
    c = simwave.generate("white-noise", 1000, 1, seed=12).data
    assert np.array_equal(a, b) and not np.array_equal(a, c)


def test_sine_rms_is_amplitude_over_root_two():
    # RMS of A sin(wt) over whole periods is A/sqrt(2) (Alexander & Sadiku, Fundamentals of
    # Electric Circuits, 5th ed., sec. 11.4)
    w = simwave.generate("sine", "48k", 1, frequency="1k", amplitude=2.5, phase=17)
    assert np.sqrt(np.mean(w.data ** 2)) == pytest.approx(2.5 / math.sqrt(2), rel=1e-12)
    t = w.time
    np.testing.assert_allclose(w.data[:, 0], 2.5 * np.sin(2 * np.pi * 1000 * t + np.radians(17)),
                               atol=1e-12)


def test_linear_sweep_matches_scipy_chirp_and_instantaneous_frequency():
    rate, T, f0, f1 = 50000.0, 2.0, 100.0, 5000.0
    w = simwave.generate("sweep", rate, T, f0=f0, f1=f1)
    t = w.time
    # scipy.signal.chirp: cos(phase + phi); phi = -90 deg turns it into sin
    ref = sps.chirp(t, f0, T, f1, method="linear", phi=-90)
    np.testing.assert_allclose(w.data[:, 0], ref, atol=1e-8)
    # instantaneous frequency from the analytic signal (Hilbert transform) vs f0+(f1-f0)t/T
    phase = np.unwrap(np.angle(sps.hilbert(w.data[:, 0])))
    f_inst = np.diff(phase) * rate / (2 * np.pi)
    expected = f0 + (f1 - f0) * (t[:-1] + 0.5 / rate) / T
    # average over 1000-sample windows: the FFT-based Hilbert transform leaves a small ripple
    k = 1000
    n = (f_inst.size // k) * k
    got = f_inst[:n].reshape(-1, k).mean(axis=1)
    want = expected[:n].reshape(-1, k).mean(axis=1)
    mid = slice(got.size // 10, got.size * 9 // 10)
    np.testing.assert_allclose(got[mid], want[mid], rtol=2e-4)


def test_log_sweep_matches_scipy_chirp_logarithmic():
    w = simwave.generate("sweep", 48000, 1.5, f0=20, f1=20000, law="log", amplitude=0.7)
    ref = 0.7 * sps.chirp(w.time, 20, 1.5, 20000, method="logarithmic", phi=-90)
    np.testing.assert_allclose(w.data[:, 0], ref, atol=1e-8)


def test_pink_noise_psd_slope_minus_3db_per_octave():
    # 1/f power: -10*log10(2) = -3.01 dB/octave; +/-0.5 dB over three decades (common
    # practice), Welch-averaged PSD (Welch, IEEE Trans. Audio Electroacoust. 15(2), 1967)
    rate = 100000.0
    w = simwave.generate("pink-noise", rate, 40.0, seed=3, amplitude=0.1)
    assert np.std(w.data) == pytest.approx(0.1, rel=0.05)
    f, p = sps.welch(w.data[:, 0], fs=rate, nperseg=1 << 16)
    edges = 10.0 * 2.0 ** np.arange(0, 10.5)  # octave bands from 10 Hz to ~10 kHz
    centres, levels = [], []
    for lo, hi in zip(edges[:-1], edges[1:], strict=True):
        band = (f >= lo) & (f < hi)
        centres.append(math.sqrt(lo * hi))
        levels.append(10 * np.log10(np.mean(p[band] * f[band])) - 10 * np.log10(math.sqrt(lo * hi)))
    x = np.log2(centres)
    slope, icpt = np.polyfit(x, levels, 1)
    assert slope == pytest.approx(-10 * math.log10(2), abs=0.1)
    assert np.max(np.abs(np.asarray(levels) - (slope * x + icpt))) < 0.5


def test_white_noise_level_and_flatness():
    w = simwave.generate("white-noise", 10000, 100, amplitude=0.3, offset=1, seed=1)
    assert np.mean(w.data) == pytest.approx(1.0, abs=0.3 * 5 / 1000)  # 5 sigma of the mean
    assert np.std(w.data) == pytest.approx(0.3, rel=0.01)
    u = simwave.generate("white-noise", 10000, 10, amplitude=0.3, distribution="uniform")
    assert np.max(np.abs(u.data)) <= 0.3 * math.sqrt(3)


def test_pulse_train_duty_and_count_exact():
    w = simwave.generate("pulse-train", "10k", 0.02, period="1m", width="0.3m", count=7,
                         delay="2m")
    x = w.data[:, 0]
    rising = np.flatnonzero(np.diff(x) > 0.5) + 1
    falling = np.flatnonzero(np.diff(x) < -0.5) + 1
    assert len(rising) == len(falling) == 7
    assert np.all(falling - rising == 3) and np.all(np.diff(rising) == 10)
    assert rising[0] == 20 and x.sum() == 21
    d = simwave.generate("pulse-train", "10k", 0.01, period="1m", duty=0.25)
    # width 2.5 samples: samples k with lead <= k < lead + 2.5 are high, 3 per period
    assert d.data.sum() == 30
    assert np.count_nonzero(np.diff(np.concatenate([[0.0], d.data[:, 0]])) > 0.5) == 10


def test_pulse_edges_have_ieee181_transition_duration_and_width():
    # IEEE Std 181-2011: transition duration between 10 % and 90 % reference levels; pulse
    # duration between the 50 % instants
    rate = 1e6
    w = simwave.generate("pulse", rate, 1e-3, width="200u", delay="100u", rise="20u",
                         fall="40u", level=5, base=1)
    x, t = w.data[:, 0], w.time

    def crossing(level, rising):
        idx = np.flatnonzero((x[:-1] < level) & (x[1:] >= level)) if rising else \
            np.flatnonzero((x[:-1] > level) & (x[1:] <= level))
        i = idx[0]
        return t[i] + (level - x[i]) / (x[i + 1] - x[i]) / rate

    lo, mid, hi = 1 + 0.1 * 4, 3.0, 1 + 0.9 * 4
    assert crossing(hi, True) - crossing(lo, True) == pytest.approx(20e-6, abs=1e-9)
    assert crossing(lo, False) - crossing(hi, False) == pytest.approx(40e-6, abs=1e-9)
    assert crossing(mid, False) - crossing(mid, True) == pytest.approx(200e-6, abs=1e-9)


def test_impulse_unit_area_step_ramp_square_pwl():
    imp = simwave.generate("impulse", 8000, 0.1, time="2m")
    assert imp.data.sum() / 8000 == 1.0 and imp.data[16, 0] == 8000
    st = simwave.generate("step", 1000, 0.01, time="3m", level=2, base=-1)
    assert st.data[:3, 0].tolist() == [-1] * 3 and st.data[3:, 0].tolist() == [2] * 7
    r = simwave.generate("ramp", 1000, 0.01, slope=100, time="2m", level=0.5)
    np.testing.assert_allclose(r.data[:, 0], np.clip(100 * np.maximum(r.time - 2e-3, 0), 0, 0.5))
    sq = simwave.generate("square", 1000, 1, frequency=10, duty=0.3, amplitude=2)
    assert np.count_nonzero(sq.data > 0) == 300
    pts = [(0, 0), (2e-3, 1), (5e-3, -2)]
    p = simwave.generate("pwl", 1000, 0.01, points=pts)
    np.testing.assert_allclose(p.data[:, 0], np.interp(p.time, *zip(*pts, strict=True)))


def test_multitone_schroeder_phases_lower_crest_factor():
    f = ",".join(str(100 * k) for k in range(1, 21))
    s = simwave.generate("multitone", 48000, 0.1, frequencies=f)
    z = simwave.generate("multitone", 48000, 0.1, frequencies=f, phases="zero")
    crest = [np.max(np.abs(w.data)) / np.sqrt(np.mean(w.data ** 2)) for w in (s, z)]
    assert crest[0] < 0.5 * crest[1]  # zero phases peak at sqrt(2N) = 6.3; Schroeder far lower


def test_bad_parameters_rate_duration_and_memory_limit():
    with pytest.raises(WaveformError, match="unknown signal kind 'tri'"):
        simwave.generate("tri", 1000, 1)
    with pytest.raises(WaveformError, match="unknown parameter 'wdith'"):
        simwave.generate("pulse", 1000, 1, wdith=1)
    with pytest.raises(WaveformError, match="parameter 'width' is required"):
        simwave.generate("pulse", 1000, 1)
    with pytest.raises(WaveformError, match="duration must be > 0"):
        simwave.generate("step", 1000, 0)
    with pytest.raises(WaveformError, match="rate must be > 0"):
        simwave.generate("step", -1, 1)
    with pytest.raises(WaveformError, match="GiB in memory.*generate_blocks"):
        simwave.generate("sine", "1G", 1000, frequency=1)
    with pytest.raises(WaveformError, match="pulses and their edges do not fit"):
        simwave.generate("pulse-train", 1000, 1, period="10m", width="9m", edge="2m")


def test_engineering_suffixes():
    assert parse_quantity("10u") == 1e-05 and parse_quantity("4.7u") == 4.7e-6
    assert parse_quantity("1m") == 1e-3 and parse_quantity("1M") == 1e6
    assert parse_quantity("2.5 kHz") == 2500.0 and parse_quantity("25%") == 0.25
    assert parse_quantity("3µs") == 3e-6 and parse_quantity("-1.5e-3") == -1.5e-3
    for bad in ("1x", "k", "1 kk", "nan", "1e400"):
        with pytest.raises(WaveformError):
            parse_quantity(bad)


def test_signal_text(tmp_path, monkeypatch):
    kind, rate, dur, params = parse_signal_spec("pulse:rate=10k,duration=0.5,width=1m,delay=10m")
    assert (kind, rate, dur, params) == ("pulse", 1e4, 0.5, {"width": "1m", "delay": "10m"})
    _, _, _, p = parse_signal_spec("multitone:rate=1k,duration=1,frequencies=1,2,3,amplitude=0.1")
    assert p == {"frequencies": "1,2,3", "amplitude": "0.1"}
    assert is_signal_spec("pulse_train:period=1m") and not is_signal_spec("data.csv")
    assert not is_signal_spec("C:/data/x.csv")
    monkeypatch.chdir(tmp_path)
    (tmp_path / "sine:odd").write_text("1\n")
    assert not is_signal_spec("sine:odd")  # an existing file wins
    w = simwave.read("pwl:rate=1k,duration=5m,points=0:0,4m:4")
    np.testing.assert_allclose(w.data[:, 0], [0, 1, 2, 3, 4])
    with pytest.raises(WaveformError, match="duration given twice|given twice"):
        parse_signal_spec("step:duration=1,duration=2")
