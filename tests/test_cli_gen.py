"""`simwave gen`: generated files equal simwave.generate; bad input is exit 2 with one line."""

import json

import numpy as np
import soundfile as sf
from click.testing import CliRunner

import simwave
from simwave.cli import main


def run(*args):
    return CliRunner().invoke(main, list(args))


def test_gen_kind_with_params_writes_the_generated_signal(tmp_path):
    out = tmp_path / "p.wav"
    r = run("gen", "pulse", "-o", str(out), "--rate", "10k", "--duration", "0.5",
            "-p", "width=1m", "-p", "delay=10m")
    assert r.exit_code == 0, r.output
    assert "wrote" in r.stdout and "WAV, FLOAT" in r.output and "+0.00 dBFS" in r.output
    assert "Caution" in r.stderr and "Caution" not in r.stdout  # loud-audio caution on stderr
    ref = simwave.generate("pulse", 10000, 0.5, width="1m", delay="10m")
    data, rate = sf.read(str(out), always_2d=True)
    assert rate == 10000 and np.array_equal(data, ref.data)


def test_gen_signal_text_to_hdf5_and_json(tmp_path):
    out = tmp_path / "s.h5"
    r = run("gen", "sweep:rate=8k,duration=1,f0=10,f1=1k,law=log", "-o", str(out), "--json",
            "--dataset", "/stim/sweep")
    assert r.exit_code == 0, r.output
    d = json.loads(r.output)
    assert d["n_samples"] == 8000 and d["datasets"] == ["/stim/sweep"]
    w = simwave.read(out)
    ref = simwave.generate("sweep", 8000, 1, f0=10, f1=1000, law="log")
    assert np.array_equal(w.data, ref.data)


def test_gen_pcm_overload_is_an_error_and_leaves_nothing(tmp_path):
    r = run("gen", "sine", "-o", str(tmp_path / "s.wav"), "--rate", "8k", "--duration", "0.1",
            "-p", "frequency=100", "-p", "amplitude=2", "--subtype", "PCM_16")
    assert r.exit_code == 2 and r.output.count("\n") == 1
    assert "Error:" in r.output and "exceeds digital full scale" in r.output
    assert list(tmp_path.iterdir()) == []
    r = run("gen", "sine", "-o", str(tmp_path / "s.wav"), "--rate", "8k", "--duration", "0.1",
            "-p", "frequency=100", "-p", "amplitude=2", "--subtype", "PCM_16",
            "--on-clip", "normalize")
    # peak 2 scaled to the default -1 dBFS: gain 10^(-1/20) / 2 = 0.445625
    assert r.exit_code == 0 and "gain       0.445625 (-7.02 dB to -1.0 dBFS" in r.output


def test_gen_bad_inputs_exit_2(tmp_path):
    o = str(tmp_path / "x.csv")
    cases = [
        (["gen", "tri", "-o", o, "--rate", "1k", "--duration", "1"], "unknown signal kind"),
        (["gen", "pulse", "-o", o, "--rate", "1k", "--duration", "1"], "'width' is required"),
        (["gen", "step", "-o", o, "--rate", "1k", "--duration", "0"], "duration must be > 0"),
        (["gen", "step", "-o", o, "--rate", "1k"], "give --rate and --duration"),
        (["gen", "step", "-o", str(tmp_path / "x.zzz"), "--rate", "1k", "--duration", "1"],
         "unknown file extension"),
        (["gen", "step:rate=1k,duration=1", "-o", o, "--rate", "2k"], "rate given twice"),
    ]
    for args, text in cases:
        r = run(*args)
        assert r.exit_code == 2, (args, r.output)
        assert text in r.output and "Traceback" not in r.output
    assert list(tmp_path.iterdir()) == []


def test_gen_kinds_lists_every_kind():
    r = run("gen", "--kinds")
    assert r.exit_code == 0
    for kind in ("step", "impulse", "pulse-train", "pink-noise", "pwl"):
        assert f"{kind}:" in r.output
