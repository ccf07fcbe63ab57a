"""Measuring a run's output from the arrays the run kept gives the numbers measuring the files
gives.

``run.execute`` measures a short audio run from its kept input and output (the output
rounded as the file holds it) instead of reading both files back. The reference for these
checks is the old way, measuring the two written files, and libsndfile itself (through
soundfile) for what a FLOAT or DOUBLE WAV reads back as.
"""

from __future__ import annotations

import json
import os
import warnings

import numpy as np
import pytest
import soundfile as sf

import simwave
import simwave.run as run
from simwave.run import RunJob, execute

SECOND_ORDER = "(2*pi*100)^2/(s^2 + 2*0.5*2*pi*100*s + (2*pi*100)^2)"
FIRST_ORDER = "1/(2m*s + 1)"
RATE = 48000.0


def _inputs(folder):
    """Invented records: steps and pulses with noise, a sine, two channels with names,
    units and a start time, values near float32's rounding and subnormal range."""
    rng = np.random.default_rng(11)
    n = 2400
    t = np.arange(n) / RATE
    made = {}
    step = np.zeros(n)
    step[600:] = 0.3
    made["step"] = simwave.Waveform(step + 1e-3 * rng.standard_normal(n), RATE)
    pulse = np.zeros(n)
    pulse[500:1300] = 0.25
    made["pulse"] = simwave.Waveform(pulse + 1e-3 * rng.standard_normal(n), RATE)
    made["sine"] = simwave.Waveform(0.4 * np.sin(2 * np.pi * 150 * t), RATE)
    two = np.column_stack([pulse, 0.5 * step]) + 1e-4 * rng.standard_normal((n, 2))
    made["two"] = simwave.Waveform(two, RATE, t0=0.25, channels=["force", "speed"],
                                   units=["N", "m/s"])
    # float32 rounds these (1 + k * 2**-30 is not a binary32 value), and the tail decays
    # into float32's subnormal range (below 1.2e-38)
    odd = np.zeros(n)
    odd[300:] = 1.0 + np.arange(n - 300) * 2.0**-30
    odd[2000:] = 1e-39 * np.arange(400)
    made["odd"] = simwave.Waveform(odd, RATE)
    # longer than one block (65,536 samples): the kept blocks are gathered
    m = 70000
    train = np.where((np.arange(m) // 9000) % 2 == 1, 0.2, 0.0)
    made["blocks"] = simwave.Waveform(train + 1e-3 * rng.standard_normal(m), RATE)
    paths = {}
    for name, wave in made.items():
        paths[name] = str(folder / f"{name}.wav")
        simwave.write(paths[name], wave, subtype="DOUBLE")
    return paths


@pytest.fixture(scope="module")
def inputs(tmp_path_factory):
    return _inputs(tmp_path_factory.mktemp("inputs"))


def _metrics(job):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = execute(job)
    with open(job.metrics, encoding="utf-8") as fh:
        written = json.load(fh)
    return result, written


@pytest.mark.parametrize("subtype", ["FLOAT", "DOUBLE"])
@pytest.mark.parametrize("system", [SECOND_ORDER, FIRST_ORDER])
def test_metrics_from_kept_arrays_equal_metrics_from_the_files(inputs, tmp_path, monkeypatch,
                                                               subtype, system):
    kept_used = []
    measure_kept = run._measure_kept

    def spy(*args):
        out = measure_kept(*args)
        kept_used.append(out is not None)
        return out

    monkeypatch.setattr(run, "_measure_kept", spy)
    for name, path in inputs.items():
        job = RunJob(system=system, source=path, output=str(tmp_path / f"{name}.out.wav"),
                     metrics=str(tmp_path / f"{name}.json"), write_options={"subtype": subtype})
        from_memory, written_memory = _metrics(job)
        assert kept_used[-1] is True, name  # the kept arrays were measured, no fallback
        monkeypatch.setattr(run, "_measurable_in_memory", lambda job: False)
        from_files, written_files = _metrics(job)
        monkeypatch.undo()
        monkeypatch.setattr(run, "_measure_kept", spy)
        assert from_memory["metrics"] == from_files["metrics"], name
        assert written_memory["metrics"] == written_files["metrics"], name
        # the same text, not only equal values (the metrics JSON is compared as text too)
        assert run.json_text(written_memory["metrics"]) == run.json_text(
            written_files["metrics"])
        assert written_memory["metrics"]["source"] == {
            "output": job.output, "reference": job.source, "reference_channel": None}


@pytest.mark.parametrize("subtype", ["FLOAT", "DOUBLE"])
def test_writer_read_back_is_what_libsndfile_reads(tmp_path, subtype):
    rng = np.random.default_rng(3)
    x = np.concatenate([
        rng.standard_normal(4000) * 10.0 ** rng.integers(-40, 3, 4000),  # many magnitudes
        1.0 + np.arange(200) * 2.0**-29,          # halfway and near-halfway cases of binary32
        [0.0, -0.0, 1e-45, -1e-46, 3.4e38, -3.4e38, 1.4e-45],
    ])[:, None]
    path = str(tmp_path / "x.wav")
    with simwave.open_writer(path, RATE, ["v"], units=["V"], t0=0.125, subtype=subtype) as w:
        w.write(x)
    convert, meta = w.read_back()
    back, rate = sf.read(path, dtype="float64", always_2d=True)  # libsndfile's own reading
    assert convert(x).tobytes() == back.tobytes()
    assert meta == {"rate": float(rate), "t0": 0.125, "channels": ["v"], "units": ["V"]}
    wave = simwave.read(path)
    assert (wave.rate, wave.t0, wave.channels, wave.units) == (
        meta["rate"], meta["t0"], meta["channels"], meta["units"])


@pytest.mark.parametrize("options", [{"subtype": "PCM_16"}, {"subtype": "PCM_24"},
                                     {"full_scale": 2.0}])
def test_outputs_that_change_the_samples_are_measured_from_the_files(inputs, tmp_path,
                                                                     monkeypatch, options):
    called = []
    monkeypatch.setattr(run, "measure_run",
                        lambda *a, _orig=run.measure_run: called.append(1) or _orig(*a))
    job = RunJob(system=FIRST_ORDER, source=inputs["step"], output=str(tmp_path / "o.wav"),
                 metrics=str(tmp_path / "o.json"), write_options=options)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        execute(job)
    assert called == [1]


def test_a_measuring_failure_names_the_file_as_before(tmp_path):
    flat = str(tmp_path / "flat.wav")
    simwave.write(flat, simwave.Waveform(np.full(500, 0.5), RATE))
    job = RunJob(system=FIRST_ORDER, source=flat, output=str(tmp_path / "o.wav"),
                 metrics=str(tmp_path / "o.json"), initial="settled")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = execute(job)
    # a settled first-order system holds the constant: nothing to measure, and the message
    # names the output file as measuring the file did
    assert result["metrics"] is None
    assert result["metrics_error"].startswith(job.output)
    assert not os.path.exists(job.metrics)


def test_write_json_fast_path_gives_the_checked_text(tmp_path):
    from simwave.guards import with_null_reasons

    docs = [
        {"a": 1.5, "b": [1, 2.25, (3.0, np.float64(0.1))], "c": {"d": None, "e": "x"},
         "f": np.arange(3.0), "g": np.int64(7), "h": np.float32(0.1)},
        {"a": float("nan"), "b": [1.0, float("inf")], "c": np.array([1.0, np.nan])},
        {"deep": {"er": [{"x": -float("inf")}]}},
    ]
    for i, doc in enumerate(docs):
        path = str(tmp_path / f"{i}.json")
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            run.write_json(path, doc)
        with open(path, encoding="utf-8") as fh:
            text = fh.read()
        assert text == run.json_text(with_null_reasons(doc)[0])
        assert run._all_finite(doc) == (i == 0)
