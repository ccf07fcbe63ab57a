"""`simwave info`: header facts and streaming statistics, text and JSON; errors exit 2."""

import json

import h5py
import numpy as np
import pytest
from click.testing import CliRunner

import simwave
from simwave.cli import main


def run(*args):
    return CliRunner().invoke(main, list(args))


def test_info_text_and_json_stats_match_numpy(tmp_path):
    x = np.column_stack([np.linspace(-1, 1, 1000), np.full(1000, 0.5)])
    w = simwave.Waveform(x, 2000.0, channels=["a", "b"], units=["V", "A"])
    simwave.write(tmp_path / "w.csv", w)
    r = run("info", str(tmp_path / "w.csv"))
    assert r.exit_code == 0, r.output
    assert "rate       2000 Hz" in r.output and "samples    1000 (0.5 s)" in r.output
    assert "a     V     -1   1    " in r.output
    d = json.loads(run("info", str(tmp_path / "w.csv"), "--json").output)
    assert d["channels"] == ["a", "b"] and d["units"] == ["V", "A"]
    assert d["stats"][0]["rms"] == pytest.approx(np.sqrt(np.mean(x[:, 0] ** 2)), rel=1e-14)
    assert d["stats"][1] == {"min": 0.5, "max": 0.5, "mean": 0.5, "rms": 0.5}


def test_info_hdf5_dataset_choice_and_rate_option(tmp_path):
    with h5py.File(tmp_path / "d.h5", "w") as f:
        f["a"] = np.arange(10.0)
        f["b"] = np.arange(20.0)
    r = run("info", str(tmp_path / "d.h5"))
    assert r.exit_code == 2 and "2 datasets could be the signal (/a, /b)" in r.output
    r = run("info", str(tmp_path / "d.h5"), "--dataset", "/b")
    assert r.exit_code == 2 and "no sample rate" in r.output
    r = run("info", str(tmp_path / "d.h5"), "--dataset", "/b", "--rate", "1k", "--json")
    d = json.loads(r.output)
    assert d["rate"] == 1000.0 and d["n_samples"] == 20 and d["stats"][0]["max"] == 19.0


def test_info_reader_options_reach_the_reader(tmp_path):
    (tmp_path / "g.csv").write_text("t,v\n0,1\n1,\n2,3\n3,4\n")
    r = run("info", str(tmp_path / "g.csv"))
    assert r.exit_code == 2 and "line 3, channel 'v': nan value" in r.output
    r = run("info", str(tmp_path / "g.csv"), "--fill-gaps", "1", "--json")
    d = json.loads(r.output)
    assert d["stats"][0]["mean"] == 2.5 and "filled samples: 1" in d["notes"]
    simwave.write(tmp_path / "s.wav", simwave.generate("square", 1000, 1, frequency=5,
                                                       amplitude=0.5))
    d = json.loads(run("info", str(tmp_path / "s.wav"), "--full-scale", "10", "--json").output)
    assert d["units"] == ["V"] and d["stats"][0]["max"] == 5.0


def test_info_missing_file_one_line_exit_2(tmp_path):
    r = run("info", str(tmp_path / "none.wav"))
    assert r.exit_code == 2 and r.output.strip().count("\n") == 0
    assert r.output.startswith("Error: ") and "no such file" in r.output
