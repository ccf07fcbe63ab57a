"""The main job end to end: simulate() and `simwave run` against outside references."""

from __future__ import annotations

import contextlib
import json
import os
import warnings

import numpy as np
import pytest
import scipy.signal
from click.testing import CliRunner
from hypothesis import given, settings
from hypothesis import strategies as st

import simwave
from simwave import System, Waveform
from simwave.cli import main
from simwave.errors import SimwaveError



@contextlib.contextmanager
def rate_advice_only():
    """Random or coarse systems may draw the rate safeguard's advice; nothing else may warn."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        yield caught
    others = [str(w.message) for w in caught if "model is off by" not in str(w.message)]
    assert others == []

def random_stable_system(rng: np.random.Generator, order: int) -> System:
    """Random stable system with poles between 20 Hz and 2 kHz (rate 20 kHz in the tests)."""
    poles = []
    while len(poles) < order:
        if order - len(poles) >= 2 and rng.random() < 0.6:
            wn = 2 * np.pi * rng.uniform(20, 2000)
            zeta = rng.uniform(0.05, 0.95)
            re, im = -zeta * wn, wn * np.sqrt(1 - zeta**2)
            poles += [complex(re, im), complex(re, -im)]
        else:
            poles.append(-2 * np.pi * rng.uniform(20, 2000))
    n_zeros = int(rng.integers(0, order + 1))
    zeros = list(-2 * np.pi * rng.uniform(10, 3000, size=n_zeros))
    if n_zeros % 2 == 1 and rng.random() < 0.5:
        zeros[0] = -zeros[0]  # a right-half-plane zero now and then
    gain = float(np.prod(np.abs(poles)) / max(np.prod(np.abs(zeros)), 1.0))
    return System.from_zpk(zeros, poles, gain)


def lsim_reference(system: System, x: np.ndarray, rate: float, interp: bool) -> np.ndarray:
    # Reference: scipy.signal.lsim (state-space solution; interp=True is the first-order
    # hold, linear between samples; interp=False the zero-order hold), system at rest.
    t = np.arange(x.shape[0]) / rate
    lti = scipy.signal.lti(system.zeros, system.poles, system.gain)
    cols = []
    for c in range(x.shape[1]):
        _, y, _ = scipy.signal.lsim(lti, x[:, c], t, interp=interp)
        cols.append(y)
    return np.column_stack(cols)


def assert_close_rel(got: np.ndarray, ref: np.ndarray, rel: float) -> None:
    scale = np.max(np.abs(ref))
    assert np.max(np.abs(got - ref)) <= rel * scale, np.max(np.abs(got - ref)) / scale


@pytest.mark.parametrize("ext", ["wav", "csv", "h5"])
@pytest.mark.parametrize("seed", [1, 2])
def test_ramp_invariant_run_equals_lsim_first_order_hold(tmp_path, ext, seed):
    # Check: scipy.signal.lsim with first-order hold, random stable systems up to order 8,
    # random multi-channel inputs, through each file family; 1e-9 relative.
    rng = np.random.default_rng(seed)
    rate = 20_000.0
    order = int(rng.integers(1, 9)) if seed == 1 else 8
    system = random_stable_system(rng, order)
    x = np.cumsum(rng.standard_normal((1500, 3)), axis=0) * 0.01
    src = tmp_path / f"in.{ext}"
    opts = {"subtype": "DOUBLE"} if ext == "wav" else {}
    simwave.write(src, Waveform(x, rate), **opts)
    x_read = simwave.read(src).data  # the input as the file holds it
    out = tmp_path / f"out.{ext}"
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        report = simwave.simulate(system, src, output=out, write_options=opts)
    # a random system may be coarse for the rate: whatever is warned is also in the run's
    # record, and it is the rate safeguard's advice
    assert [str(w.message) for w in caught] == report.warnings
    assert all("model is off by" in w or "resonance" in w for w in report.warnings)
    y = simwave.read(out).data
    assert y.shape == x.shape
    assert_close_rel(y, lsim_reference(system, x_read, rate, interp=True), 1e-9)


def test_step_invariant_equals_lsim_zero_order_hold():
    rng = np.random.default_rng(7)
    rate = 20_000.0
    system = random_stable_system(rng, 6)
    x = rng.standard_normal((1200, 2))
    with rate_advice_only():
        y = simwave.simulate(system, Waveform(x, rate), method="step-invariant").data
    assert_close_rel(y, lsim_reference(system, x, rate, interp=False), 1e-9)


@pytest.mark.parametrize("ext", ["csv", "h5"])
def test_bilinear_run_equals_sosfilt_on_bilinear_zpk(tmp_path, ext):
    # Reference: scipy.signal.bilinear_zpk + zpk2sos + sosfilt (Oppenheim & Schafer,
    # Discrete-Time Signal Processing, 3rd ed., sec. 7.2.2).
    rng = np.random.default_rng(11)
    rate = 20_000.0
    system = random_stable_system(rng, 7)
    x = rng.standard_normal((2000, 2))
    src = tmp_path / f"in.{ext}"
    simwave.write(src, Waveform(x, rate))
    out = tmp_path / f"out.{ext}"
    simwave.simulate(system, src, method="bilinear", output=out)
    y = simwave.read(out).data
    z, p, k = scipy.signal.bilinear_zpk(system.zeros, system.poles, system.gain, rate)
    ref = scipy.signal.sosfilt(scipy.signal.zpk2sos(z, p, k), x, axis=0)
    assert_close_rel(y, ref, 1e-9)


def test_rc_low_pass_step_from_csv_reaches_63_and_99_percent(tmp_path):
    # Common practice: an RC low-pass step response is 1 - exp(-t/RC): 63.2 % at t = RC,
    # 99.3 % at 5 RC.
    r, c = 10e3, 100e-9  # tau = 1 ms
    tau = r * c
    rate = 100_000.0
    n = 1000
    src = tmp_path / "step.csv"
    with open(src, "w") as fh:
        fh.write("time [s],vin [V]\n")
        for i in range(n):
            fh.write(f"{i / rate!r},{1.0 if i > 0 else 0.0}\n")
    out = tmp_path / "rc.csv"
    # input is 0 at t=0 and 1 V from t = 1/rate (linear in between): the response to that
    # ramp-then-step is exact with the ramp-invariant model; compare at t = tau + 1 sample
    simwave.simulate(f"1/({tau!r}*s + 1)", src, output=out, method="step-invariant")
    y = simwave.read(out)
    assert y.units == ["V"] and y.channels == ["vin"]
    at_tau = y.data[int(round(tau * rate)) + 1, 0]
    at_5tau = y.data[int(round(5 * tau * rate)) + 1, 0]
    assert at_tau == pytest.approx(0.632, abs=5e-4)
    assert at_5tau == pytest.approx(0.993, abs=5e-4)


def test_streaming_and_whole_file_paths_give_identical_bytes(tmp_path):
    rng = np.random.default_rng(3)
    rate = 8000.0
    x = Waveform(rng.standard_normal((10_000, 2)), rate, channels=["a", "b"], units=["V", "V"])
    src = tmp_path / "in.h5"
    simwave.write(src, x)
    system = "1e6/(s^2 + 1400*s + 1e6)"
    streamed = tmp_path / "streamed.csv"
    simwave.simulate(system, src, output=streamed, block_size=777)
    whole = simwave.simulate(system, simwave.read(src))
    whole_path = tmp_path / "whole.csv"
    # same provenance text except the time written: compare the data lines byte for byte
    simwave.write(whole_path, whole)
    data_lines = [ln for ln in open(streamed).read().splitlines() if not ln.startswith("#")]
    whole_lines = [ln for ln in open(whole_path).read().splitlines() if not ln.startswith("#")]
    assert data_lines == whole_lines


@settings(max_examples=25, deadline=None)
@given(
    a=st.floats(-10, 10, allow_nan=False),
    b=st.floats(-10, 10, allow_nan=False),
    seed=st.integers(0, 2**16),
    method=st.sampled_from(["ramp-invariant", "step-invariant", "bilinear", "matched-z",
                            "impulse-invariant"]),
)
def test_superposition(a, b, seed, method):
    # Linearity (any signals-and-systems text): run(a x1 + b x2) = a run(x1) + b run(x2).
    rng = np.random.default_rng(seed)
    rate = 1000.0
    sys_ = "(s + 30)/(s^2 + 40*s + 2500)"
    x1, x2 = rng.standard_normal((200, 2)), rng.standard_normal((200, 2))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        y = simwave.simulate(sys_, Waveform(a * x1 + b * x2, rate), method=method).data
        y1 = simwave.simulate(sys_, Waveform(x1, rate), method=method).data
        y2 = simwave.simulate(sys_, Waveform(x2, rate), method=method).data
    # |H| at 500 Hz is 39.3 dB below its peak: impulse invariance warns (aliasing); the
    # step-invariant model lags smooth inputs by half a sample, 2.6 % of the peak steady
    # output near the 8 Hz resonance (the steady-sine check, magnitude and phase); the
    # other methods stay under its 1 % limit
    texts = [str(w.message) for w in caught]
    aliasing = ["impulse invariance aliases" in t for t in texts]
    lag = ["half a sample" in t for t in texts]
    assert aliasing == ([True] * 3 if method == "impulse-invariant" else [False] * len(texts))
    assert lag == ([True] * 3 if method == "step-invariant" else [False] * len(texts))
    np.testing.assert_allclose(y, a * y1 + b * y2, rtol=0, atol=1e-9 * (1 + abs(a) + abs(b)))


@settings(max_examples=25, deadline=None)
@given(k=st.integers(0, 50), seed=st.integers(0, 2**16),
       method=st.sampled_from(["ramp-invariant", "step-invariant", "bilinear"]))
def test_time_invariance(k, seed, method):
    # Time invariance at zero initial state: delaying the input by k samples delays the
    # output by k samples. The input starts at 0: with the ramp-invariant model a nonzero
    # first sample is a jump at t = 0 from rest (lsim's convention), while after k zeros it
    # would be reached by a ramp, a different analog input.
    rng = np.random.default_rng(seed)
    x = rng.standard_normal((150, 1))
    x[0] = 0.0
    delayed = np.concatenate([np.zeros((k, 1)), x])
    sys_ = "2e4/(s^2 + 150*s + 2e4)"
    with rate_advice_only():
        y = simwave.simulate(sys_, Waveform(x, 1000.0), method=method).data
        yd = simwave.simulate(sys_, Waveform(delayed, 1000.0), method=method).data
    np.testing.assert_allclose(yd[:k], 0.0, atol=1e-15)
    np.testing.assert_allclose(yd[k:], y, rtol=0, atol=1e-12)


def test_settled_start_has_no_false_transient():
    x = np.full((500, 1), 2.5)  # a recording that starts at an offset
    y = simwave.simulate("100/(s^2 + 14*s + 100)", Waveform(x, 1000.0), initial="settled").data
    np.testing.assert_allclose(y, 2.5, rtol=0, atol=1e-10)


def test_oversampling_improves_a_coarse_bilinear_model():
    # At 1 kHz a 200 Hz resonance is warped by the bilinear map; at 8x it is nearly exact.
    # Reference: lsim with the first-order hold on the same (linear between samples) input.
    rate = 1000.0
    sys_ = System.parse("(2*pi*200)^2/(s^2 + 0.2*2*pi*200*s + (2*pi*200)^2)")
    x = np.sin(2 * np.pi * 190 * np.arange(3000) / rate)[:, None]
    ref = lsim_reference(sys_, x, rate, interp=True)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        plain = simwave.simulate(sys_, Waveform(x, rate), method="bilinear").data
    # both the warping of the 199 Hz resonance and the in-band error are announced
    said = " | ".join(str(w.message) for w in caught)
    assert "warping moves the resonance at 199 Hz" in said and "model is off by" in said
    with rate_advice_only():
        over = simwave.simulate(sys_, Waveform(x, rate), method="bilinear", oversample=8)
    err_plain = np.max(np.abs(plain - ref)[1000:])
    err_over = np.max(np.abs(over.data - ref)[1000:])
    assert over.n_samples == x.shape[0]
    assert err_over < 0.1 * err_plain
    acc = over.attrs["oversample"]
    assert acc == 8


def test_multichannel_names_units_and_provenance(tmp_path):
    x = Waveform(np.ones((100, 2)), 1000.0, channels=["left", "right"], units=["V", "mV"])
    out = tmp_path / "y.h5"
    report = simwave.simulate("10/(s+10)", x, output=out, method="matched-z")
    y = simwave.read(out)
    assert y.channels == ["left", "right"] and y.units == ["V", "mV"]
    assert y.attrs["method"] == "matched-z"
    assert y.attrs["system"] == "10/(s+10)"
    assert y.attrs["poles"] == [-10.0]
    assert report.n_samples == 100 and report.channels == ["left", "right"]


def test_with_input_writes_the_input_beside_the_output(tmp_path):
    x = Waveform(np.arange(50.0), 100.0, channels=["v"])
    out = tmp_path / "y.h5"
    simwave.simulate("1/(s+1)", x, output=out, include_input=True)
    np.testing.assert_array_equal(simwave.read(out, dataset="/input").data, x.data)
    csv_out = tmp_path / "y.csv"
    simwave.simulate("1/(s+1)", x, output=csv_out, include_input=True)
    both = simwave.read(csv_out)
    assert both.channels == ["v", "input/v"]
    np.testing.assert_array_equal(both.data[:, 1], x.data[:, 0])


def test_unstable_output_stops_with_the_time_it_diverged(tmp_path):
    out = tmp_path / "y.csv"
    x = Waveform(np.ones(20000), 1000.0)
    with pytest.warns(UserWarning):
        with pytest.raises(SimwaveError, match=r"diverged .* at t = "):
            simwave.simulate("1/(s - 50)", x, output=out)
    assert not out.exists()
    assert [p.name for p in tmp_path.iterdir()] == []


# ----------------------------------------------------------------------------- CLI
def run_cli(*args):
    return CliRunner().invoke(main, list(args))


def test_cli_run_generated_pulse_writes_output_and_metrics(tmp_path):
    out, met = tmp_path / "p.csv", tmp_path / "p.json"
    r = run_cli("run", "pulse:rate=20k,duration=20m,width=5m,delay=2m",
                "-s", "2*pi*500/(s + 2*pi*500)", "-o", str(out), "--metrics", str(met))
    assert r.exit_code == 0, r.output
    assert "samples    400" in r.output and "ramp-invariant" in r.output
    doc = json.loads(met.read_text())
    rise = doc["metrics"]["channels"][0]["transitions"][0]["rise_time_s"]
    # first-order rise time tau*ln 9 (common practice), tau = 1/(2*pi*500)
    assert rise == pytest.approx(np.log(9) / (2 * np.pi * 500), rel=0.01)


@pytest.mark.parametrize(
    "args, message",
    [
        (["missing.csv", "-s", "1/(s+1)"], "missing.csv"),
        (["step:rate=1k,duration=0.1", "-s", "1/(s+"], "column"),
        (["step:rate=1k,duration=0.1", "-s", "1/(s+1)", "-m", "euler"], "euler"),
        (["step:rate=1k,duration=0.1", "-s", "s^2/(s+1)"], "improper"),
        (["step:rate=1k,duration=0.1", "-s", "1/(s+1)", "-m", "bilinear", "--prewarp", "600"],
         "Nyquist"),
    ],
)
def test_cli_run_bad_input_is_one_line_exit_2_and_writes_nothing(tmp_path, args, message):
    out = tmp_path / "out.csv"
    r = run_cli("run", *args, "-o", str(out))
    assert r.exit_code == 2, r.output
    lines = [ln for ln in r.output.splitlines() if ln.startswith("Error:")]
    assert len(lines) == 1 and message in lines[0], r.output
    assert "Traceback" not in r.output
    assert not out.exists() and list(tmp_path.iterdir()) == []


def test_cli_run_refuses_to_overwrite_its_input(tmp_path):
    src = tmp_path / "x.csv"
    simwave.write(src, Waveform(np.ones(10), 100.0))
    before = src.read_bytes()
    r = run_cli("run", str(src), "-s", "1/(s+1)", "-o", str(src))
    assert r.exit_code == 2 and "input" in r.output
    assert src.read_bytes() == before


def test_cli_run_integer_audio_clipping_is_an_error_unless_chosen(tmp_path):
    out = tmp_path / "y.wav"
    spec = "sine:rate=8k,duration=0.1,frequency=100,amplitude=0.9"
    r = run_cli("run", spec, "-s", "4/(s/600+1)", "-o", str(out), "--subtype", "PCM_16")
    assert r.exit_code == 2 and "full scale" in r.output
    assert not out.exists()
    r = run_cli("run", spec, "-s", "4/(s/600+1)", "-o", str(out), "--subtype", "PCM_16",
                "--on-clip", "clip")
    assert r.exit_code == 0, r.output
    assert "Caution" in r.output and "dBFS" in r.output
    assert os.path.getsize(out) > 0


def test_cli_run_plot_and_bad_plot_name(tmp_path):
    out, png = tmp_path / "y.csv", tmp_path / "y.png"
    r = run_cli("run", "step:rate=10k,duration=20m,time=2m", "-s", "2*pi*300/(s+2*pi*300)",
                "-o", str(out), "--metrics", str(tmp_path / "m.json"), "--plot", str(png))
    assert r.exit_code == 0, r.output
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    r = run_cli("run", "step:rate=10k,duration=20m", "-s", "1/(s+1)", "-o",
                str(tmp_path / "z.csv"), "--plot", str(tmp_path / "z.bmpx"))
    assert r.exit_code == 2 and "Error:" in r.output
    assert not (tmp_path / "z.csv").exists()


def test_source_date_epoch_makes_outputs_byte_identical(tmp_path, monkeypatch):
    # reproducible-builds.org SOURCE_DATE_EPOCH convention: the provenance time is fixed.
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1700000000")
    a, b = tmp_path / "a.csv", tmp_path / "b.csv"
    for path in (a, b):
        with pytest.warns(UserWarning, match="ramp-invariant model is off by"):
            simwave.simulate("1/(1m*s+1)", "step:rate=1k,duration=0.05", output=path)
    assert a.read_bytes() == b.read_bytes()
    assert simwave.read(a).attrs["written"] == "2023-11-14T22:13:20+00:00"


@pytest.mark.parametrize("subtype", ["FLOAT", "DOUBLE"])
def test_source_date_epoch_leaves_out_the_float_wav_time_stamp(tmp_path, monkeypatch, subtype):
    # libsndfile's PEAK chunk of float WAV files holds the time of writing (time(NULL), to
    # the second), so two runs a second apart differed; with SOURCE_DATE_EPOCH it is left
    # out, and without it the file keeps its PEAK chunk as before
    wave = Waveform(np.sin(np.arange(2000) / 30.0), 48000.0)
    simwave.write(tmp_path / "plain.wav", wave, subtype=subtype)
    assert b"PEAK" in (tmp_path / "plain.wav").read_bytes()
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1700000000")
    a, b = tmp_path / "a.wav", tmp_path / "b.wav"
    for path in (a, b):
        simwave.write(path, wave, subtype=subtype)
    assert b"PEAK" not in a.read_bytes() and a.read_bytes() == b.read_bytes()
    np.testing.assert_array_equal(simwave.read(a).data, simwave.read(tmp_path / "plain.wav").data)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(allow_nan=True, allow_infinity=True), min_size=1, max_size=20),
       st.text(max_size=8))
def test_metrics_json_reads_back_as_the_standard_library_writes_it(tmp_path_factory, values,
                                                                   text):
    # The metrics file is written by orjson (speed); its numbers must read back to the same
    # float64 values as Python's own json module writes them (shortest round-trip repr), and
    # non-finite values must become null with their reasons, as before.
    from simwave.run import write_json

    path = tmp_path_factory.mktemp("json") / "m.json"
    data = {"values": values, "numpy": np.array(values[:3]), "count": np.int64(len(values)),
            "text": text, "nested": [{"v": v} for v in values[:2]]}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the null-values note
        write_json(path, data)
    got = json.loads(path.read_text(encoding="utf-8"))
    finite = [v if np.isfinite(v) else None for v in values]
    assert got["values"] == finite
    assert [np.float64(v).tobytes() for v in got["values"] if v is not None] == \
        [np.float64(v).tobytes() for v in values if np.isfinite(v)]
    assert got["numpy"] == finite[:3] and got["count"] == len(values) and got["text"] == text
    nulls = [i for i, v in enumerate(values) if not np.isfinite(v)]
    assert sorted(got.get("null_reasons", {})) == sorted(
        [f"values[{i}]" for i in nulls] + [f"numpy[{i}]" for i in nulls if i < 3]
        + [f"nested[{i}].v" for i in nulls if i < 2])
