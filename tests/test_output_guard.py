"""Nothing lost: every path a command writes is checked against its inputs and its other outputs.

Also: an output value that does not fit the output's sample type is refused (with the
time and channel), never written as infinity; scaling happens only on request.
"""

from __future__ import annotations

import hashlib
import json
import os

import h5py
import numpy as np
import pytest
import soundfile as sf
from click.testing import CliRunner

import simwave
from simwave.cli import main
from simwave.errors import SimwaveError
from simwave.run import RunJob, execute
from simwave.signals.audio import FLOAT32_MAX

STEP = "step:rate=1k,duration=0.1,time=10m"
SINE = "sine:rate=1k,duration=1,frequency=10"


def _digest(path) -> str:
    with open(path, "rb") as fh:
        return hashlib.sha256(fh.read()).hexdigest()


def _cli(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


@pytest.fixture()
def folder(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "sys.toml").write_text('expression = "1/(s/100 + 1)"\n')
    return tmp_path


def _only(folder, *names):
    """The folder holds exactly these names (no output, no temporary part file)."""
    assert sorted(os.listdir(folder)) == sorted(names)


# ----------------------------------------------------------------------------- run
def test_run_metrics_over_the_system_file_is_refused(folder):
    before = _digest(folder / "sys.toml")
    result = _cli("run", STEP, "-s", "sys.toml", "-o", "out.csv", "--metrics", "sys.toml")
    assert result.exit_code == 2
    assert "sys.toml (--metrics): is the system file" in result.output
    assert "Traceback" not in result.output
    assert _digest(folder / "sys.toml") == before
    _only(folder, "sys.toml")  # refused before any work: no output either


def test_run_metrics_over_the_output_is_refused(folder):
    result = _cli("run", STEP, "-s", "sys.toml", "-o", "out.h5", "--metrics", "out.h5")
    assert result.exit_code == 2
    assert "named by both -o/--output and --metrics" in result.output
    _only(folder, "sys.toml")


def test_run_plot_and_metrics_on_one_file_are_refused(folder):
    result = _cli("run", STEP, "-s", "sys.toml", "-o", "out.h5", "--plot", "o.svg",
                  "--metrics", "o.svg")
    assert result.exit_code == 2
    assert "named by both --metrics and --plot" in result.output
    _only(folder, "sys.toml")


def test_run_metrics_over_the_input_is_refused_through_another_spelling(folder):
    simwave.write("in.csv", simwave.read(STEP))
    before = _digest(folder / "in.csv")
    os.mkdir(folder / "sub")
    result = _cli("run", "in.csv", "-s", "sys.toml", "-o", "out.csv",
                  "--metrics", "sub/../in.csv")
    assert result.exit_code == 2
    assert "is the input" in result.output
    assert _digest(folder / "in.csv") == before


def test_run_metrics_through_a_link_to_the_system_file_is_refused(folder):
    os.symlink("sys.toml", folder / "link.json")
    before = _digest(folder / "sys.toml")
    result = _cli("run", STEP, "-s", "sys.toml", "-o", "out.csv", "--metrics", "link.json")
    assert result.exit_code == 2
    assert "is the system file" in result.output
    assert _digest(folder / "sys.toml") == before


def test_run_with_distinct_paths_still_writes_all_three(folder):
    result = _cli("run", STEP, "-s", "sys.toml", "-o", "out.csv", "--metrics", "m.json",
                  "--plot", "p.svg")
    assert result.exit_code == 0, result.output
    _only(folder, "sys.toml", "out.csv", "m.json", "p.svg")
    with open(folder / "m.json") as fh:
        assert "run" in json.load(fh)


def test_execute_refuses_metrics_over_its_output(folder):
    with pytest.raises(SimwaveError, match="named by both"):
        execute(RunJob(system="1/(s+1)", source=STEP, output="o.csv", metrics="o.csv"))
    _only(folder, "sys.toml")


# ----------------------------------------------------------------------------- measure
def test_measure_output_over_the_reference_is_refused(folder):
    simwave.write("in.csv", simwave.read(STEP))
    assert _cli("run", "in.csv", "-s", "sys.toml", "-o", "out.csv").exit_code == 0
    before = _digest(folder / "in.csv")
    result = _cli("measure", "out.csv", "--reference", "in.csv", "--metrics", "in.csv")
    assert result.exit_code == 2
    assert "is the reference" in result.output
    assert _digest(folder / "in.csv") == before
    result = _cli("measure", "out.csv", "--reference", "in.csv", "--metrics", "m.svg", "--plot",
                  "m.svg")
    assert result.exit_code == 2
    assert "named by both --metrics and --plot" in result.output
    assert not (folder / "m.svg").exists()


# ----------------------------------------------------------------------------- batch journal
def test_batch_journal_that_is_a_link_is_not_followed(folder):
    out = folder / "out"
    out.mkdir()
    victim = folder / "notes.txt"
    victim.write_text("keep me\n")
    os.symlink(victim, out / ".simwave-batch-journal.jsonl")
    result = CliRunner().invoke(main, ["batch", "-s", "1/(s/100+1)", STEP, "-o", str(out),
                                       "-j", "1", "--force"])
    assert result.exit_code == 2, result.output
    assert "journal is a symbolic link" in result.output
    assert victim.read_text() == "keep me\n"
    assert os.path.islink(out / ".simwave-batch-journal.jsonl")


# ----------------------------------------------------------------------------- sample range
def test_binary32_range_is_the_standard_one():
    # IEEE Std 754-2019, binary32 format: largest finite value (2 - 2**-23) * 2**127.
    assert FLOAT32_MAX == (2 - 2**-23) * 2.0**127


def test_float_wav_refuses_values_beyond_binary32(folder):
    result = _cli("run", SINE, "-s", "1e39", "-o", "g1.wav")
    assert result.exit_code == 2
    line = result.output.strip().splitlines()[-1]
    assert line.startswith("Error: g1.wav: sample ") and "(t = " in line
    assert "channel 'sine'" in line and "--subtype DOUBLE" in line
    _only(folder, "sys.toml")


def test_float_wav_clip_and_normalize_only_on_request(folder):
    assert _cli("run", SINE, "-s", "1e39", "-o", "c.wav", "--on-clip", "clip").exit_code == 0
    x, _ = sf.read(folder / "c.wav")
    assert np.isfinite(x).all() and np.max(np.abs(x)) == pytest.approx(FLOAT32_MAX, rel=1e-7)
    assert _cli("run", SINE, "-s", "1e39", "-o", "n.wav", "--on-clip", "normalize").exit_code == 0
    y, _ = sf.read(folder / "n.wav", always_2d=True)
    assert np.isfinite(y).all()
    # normalized into range, not clipped: the waveform's shape is kept
    reference = simwave.read(SINE).data[:, 0]
    scale = np.max(np.abs(y[:, 0])) / np.max(np.abs(reference))
    np.testing.assert_allclose(y[:, 0], scale * reference, rtol=0, atol=1e-6 * FLOAT32_MAX)
    # 64-bit samples hold the value itself
    assert _cli("run", SINE, "-s", "1e39", "-o", "d.wav", "--subtype", "DOUBLE").exit_code == 0
    z, _ = sf.read(folder / "d.wav")
    assert np.max(np.abs(z)) > 9.9e38


def test_unstable_system_beyond_binary32_is_refused_before_float64_overflows(folder):
    # 1/(s - 1) grows as exp(t): from 1 to past 3.4e38 by t = ln(3.4e38) = 88.7 s, long
    # before float64's 1.8e308 (t = 709.8 s), which the divergence check catches.
    result = _cli("run", "step:rate=100,duration=120", "-s", "1/(s-1)", "-o", "u.wav")
    assert result.exit_code == 2
    assert "beyond the range of 32-bit float samples" in result.output
    t = float(result.output.split("(t = ")[1].split(" s)")[0])
    assert 88 < t < 90.5
    _only(folder, "sys.toml")


def test_hdf5_float32_refuses_values_beyond_binary32(folder):
    wave = simwave.Waveform(np.array([[1.0], [1e39], [2.0]]), 10.0)
    with pytest.raises(SimwaveError, match=r"sample 1 \(t = 0.1 s\), channel 0"):
        simwave.write("f.h5", wave, dtype="float32")
    _only(folder, "sys.toml")
    simwave.write("f.h5", wave)  # float64 (the default) holds it
    with h5py.File(folder / "f.h5") as f:
        assert f["/waveform"][1, 0] == 1e39


def test_text_written_atomically_is_the_text_in_utf8(tmp_path):
    from simwave.signals.atomic import write_text_atomic

    target = tmp_path / "m.json"
    text = '{"unit": "\u00b5V",\r\n "x": 1}\n' * 5000  # > 64 kB: more than one write may be needed
    write_text_atomic(str(target), text)
    assert target.read_bytes() == text.encode("utf-8")  # newlines as given, no translation
    write_text_atomic(str(target), "second")
    assert target.read_bytes() == b"second" and os.listdir(tmp_path) == ["m.json"]
