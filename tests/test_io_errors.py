"""Bad input: one-line WaveformError naming the file, the place and the problem."""

import h5py
import numpy as np
import pytest
import soundfile as sf

import simwave
from simwave.errors import WaveformError


def _one_line(exc):
    msg = str(exc.value)
    assert "\n" not in msg
    return msg


def test_missing_empty_and_unknown_extension(tmp_path):
    with pytest.raises(WaveformError, match="nope.wav: no such file") as e:
        simwave.read(tmp_path / "nope.wav")
    _one_line(e)
    (tmp_path / "e.csv").write_bytes(b"")
    with pytest.raises(WaveformError, match="e.csv: empty file"):
        simwave.read(tmp_path / "e.csv")
    (tmp_path / "x.xyz").write_text("1\n")
    with pytest.raises(WaveformError, match=r"unknown file extension \.xyz"):
        simwave.read(tmp_path / "x.xyz")
    with pytest.raises(WaveformError, match="unknown file extension"):
        simwave.write(tmp_path / "y.xyz", simwave.generate("step", 10, 1))


def test_truncated_and_corrupt_audio(tmp_path):
    sf.write(str(tmp_path / "a.wav"), np.zeros((1000, 2)), 8000, subtype="PCM_16")
    raw = (tmp_path / "a.wav").read_bytes()
    (tmp_path / "t.wav").write_bytes(raw[:-1001])
    with pytest.raises(WaveformError, match=r"t\.wav: truncated: data chunk declares 4000 bytes"):
        simwave.read(tmp_path / "t.wav")
    (tmp_path / "c.wav").write_bytes(b"RIFF" + b"\x00garbage" * 20)
    with pytest.raises(WaveformError, match=r"c\.wav: not a readable audio file") as e:
        simwave.info(tmp_path / "c.wav")
    _one_line(e)


def test_hdf5_path_missing_lists_datasets_there(tmp_path):
    with h5py.File(tmp_path / "d.h5", "w") as f:
        f["run/a"] = np.zeros(10)
        f["run/b"] = np.zeros(10)
        f["cube"] = np.zeros((2, 3, 4))
        f["names"] = np.array([b"x", b"y"])
    with pytest.raises(WaveformError, match=r"no dataset /run/c; datasets in /run: /run/a, /run/b"):
        simwave.read(tmp_path / "d.h5", dataset="/run/c", rate=1)
    with pytest.raises(WaveformError, match=r"dataset /cube: 3-D \(shape \(2, 3, 4\)\)"):
        simwave.read(tmp_path / "d.h5", dataset="/cube", rate=1)
    with pytest.raises(WaveformError, match=r"dataset /names: not numeric"):
        simwave.read(tmp_path / "d.h5", dataset="/names", rate=1)
    with pytest.raises(WaveformError, match=r"2 datasets could be the signal \(/run/a, /run/b\)"):
        simwave.read(tmp_path / "d.h5")
    with pytest.raises(WaveformError, match=r"dataset /run/a: no sample rate \(attributes"):
        simwave.read(tmp_path / "d.h5", dataset="/run/a")
    with pytest.raises(WaveformError, match=r"/run is a group; datasets there"):
        simwave.read(tmp_path / "d.h5", dataset="/run")


def test_not_hdf5_and_rate_not_positive(tmp_path):
    (tmp_path / "f.h5").write_text("not hdf5")
    with pytest.raises(WaveformError, match=r"f\.h5: not a readable HDF5 file"):
        simwave.read(tmp_path / "f.h5")
    (tmp_path / "v.csv").write_text("1\n2\n")
    with pytest.raises(WaveformError, match="sample rate must be > 0 Hz"):
        simwave.read(tmp_path / "v.csv", rate=0)
    with pytest.raises(WaveformError, match="rate must be > 0"):
        simwave.open_writer(tmp_path / "o.csv", -5, 1)


def test_option_for_another_format_is_refused(tmp_path):
    simwave.write(tmp_path / "a.wav", simwave.generate("step", 100, 1))
    with pytest.raises(WaveformError, match="option dataset applies to HDF5 files only"):
        simwave.read(tmp_path / "a.wav", dataset="/x")
    with pytest.raises(WaveformError, match="option subtype applies to audio files only"):
        simwave.write(tmp_path / "a.csv", simwave.generate("step", 100, 1), subtype="PCM_16")


def test_audio_needs_whole_hertz(tmp_path):
    w = simwave.Waveform(np.zeros(10), 1000.5)
    with pytest.raises(WaveformError, match="whole number of hertz"):
        simwave.write(tmp_path / "a.wav", w)
    assert list(tmp_path.iterdir()) == []
