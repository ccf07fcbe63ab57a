"""Round trips through every format, files from other writers, streaming == whole read.

External references: scipy.io.wavfile, numpy.savetxt, h5py and the standard
csv module write the "foreign" files; PCM accuracy of half an LSB is common
practice for a rounding quantizer (Widrow & Kollar, *Quantization Noise*,
2008, ch. 1: rounding error is within +/- q/2).
"""

import csv
import os

import h5py
import numpy as np
import pytest
import soundfile as sf
from scipy.io import wavfile

import simwave
import simwave.signals
from simwave import Waveform
from simwave.errors import WaveformError


@pytest.fixture
def wave3():
    rng = np.random.default_rng(7)
    data = rng.uniform(-0.95, 0.95, (20000, 3))
    return Waveform(data, 48000.0, t0=0.25, channels=["left", "right", "probe"],
                    units=["V", "V", "A"], attrs={"site": "bench 2", "cal": {"gain": 1.5}})


@pytest.mark.parametrize("name,keeps_meta", [("x.csv", True), ("x.h5", True), ("x.wav", True),
                                             ("x.aiff", True), ("x.w64", False)])
def test_float_formats_round_trip_exactly(tmp_path, wave3, name, keeps_meta):
    path = tmp_path / name
    opts = {"subtype": "DOUBLE"} if name.endswith((".wav", ".aiff", ".w64")) else {}
    simwave.write(path, wave3, **opts)
    back = simwave.read(path)
    np.testing.assert_array_equal(back.data, wave3.data)
    assert back.rate == wave3.rate
    if keeps_meta:  # W64 has no string chunk in libsndfile: names, units, t0 not kept
        assert back.t0 == pytest.approx(wave3.t0, abs=1e-12)
        assert back.channels == wave3.channels and back.units == wave3.units
        assert back.attrs["cal"] == {"gain": 1.5}


def test_float32_wav_default_round_trip_within_float32_precision(tmp_path, wave3):
    res = simwave.write(tmp_path / "f.wav", wave3)
    assert res.subtype == "FLOAT"
    back = simwave.read(tmp_path / "f.wav")
    np.testing.assert_array_equal(back.data, wave3.data.astype(np.float32).astype(np.float64))


@pytest.mark.parametrize("ext", ["wav", "aiff", "rf64", "w64", "caf"])
def test_float_samples_stored_as_libsndfile_stores_doubles(tmp_path, ext):
    # simwave rounds FLOAT blocks to binary32 itself (one write instead of libsndfile's
    # buffered conversion); the stored samples must be the ones libsndfile's own conversion
    # of the doubles gives (a C cast, round to nearest: IEEE Std 754-2019, sec. 5.4.2),
    # big-endian containers (AIFF, CAF) included. Ties at half a binary32 step, the
    # subnormal range, signed zeros and values near the binary32 largest are included.
    rng = np.random.default_rng(11)
    x = rng.standard_normal((30000, 2)) * 0.3
    f32 = rng.standard_normal(1000).astype(np.float32).astype(np.float64)
    ulp = np.spacing(f32.astype(np.float32)).astype(np.float64)
    x[:1000, 0] = f32 + ulp / 2  # exact ties: round half to even
    x[:1000, 1] = f32 - ulp / 2
    x[1000:1008, 0] = [0.0, -0.0, 1e-45, -1e-45, 7e-46, 1.5e-40, 3.4e38, -3.4028234e38]
    ref = tmp_path / f"ref.{ext}"
    sf.write(ref, x, 48000, subtype="FLOAT")
    ours = tmp_path / f"ours.{ext}"
    simwave.write(ours, Waveform(x, 48000.0))
    got, _ = sf.read(ours, dtype="float32")
    want, _ = sf.read(ref, dtype="float32")
    assert got.tobytes() == want.tobytes()


@pytest.mark.parametrize("ext", ["wav", "aiff", "caf"])
def test_float_files_read_as_libsndfile_widens_them(tmp_path, ext):
    # FLOAT files are read as binary32 and widened by numpy; the values (bits, NaN and
    # infinities included) must be those libsndfile's own reading as doubles gives
    rng = np.random.default_rng(12)
    x = (rng.standard_normal((70000, 3)) * 0.3).astype(np.float32)
    x[:8, 0] = [0.0, -0.0, 1e-45, -1.4e-40, np.inf, -np.inf, np.nan, 3.4028235e38]
    path = tmp_path / f"f.{ext}"
    sf.write(path, x, 48000, subtype="FLOAT")
    want, _ = sf.read(path, dtype="float64", always_2d=True)
    for select in ([0, 1, 2], [2], [1, 0]):
        src = simwave.signals.audio.AudioSource(str(path))
        got = np.concatenate([r.values for r in src.rows(select)])
        src.close()
        assert got.dtype == np.float64 and got.tobytes() == want[:, select].tobytes()


@pytest.mark.parametrize("subtype,bits", [("PCM_U8", 8), ("PCM_16", 16), ("PCM_24", 24),
                                          ("PCM_32", 32)])
@pytest.mark.parametrize("container", ["wav", "flac", "rf64", "wavex"])
def test_pcm_round_trip_within_half_lsb(tmp_path, wave3, subtype, bits, container):
    if not sf.check_format(container.upper(), subtype):
        pytest.skip(f"{container} has no {subtype}")
    path = tmp_path / f"p.{'wav' if container in ('rf64', 'wavex') else container}"
    simwave.write(path, wave3, format=container, subtype=subtype)
    back = simwave.read(path)
    assert sf.info(str(path)).subtype == subtype
    lsb = 2.0 ** -(bits - 1)
    # rounding quantizer: error within q/2 (Widrow & Kollar 2008, ch. 1; common practice)
    assert np.max(np.abs(back.data - wave3.data)) <= lsb / 2 * (1 + 1e-9)
    assert back.channels == wave3.channels


@pytest.mark.parametrize("subtype", ["ULAW", "ALAW"])
def test_companded_subtypes_round_trip(tmp_path, subtype):
    # G.711 mu-law / A-law keep about 13-14 bits near zero and ~2^-7 relative error at large
    # amplitude (ITU-T G.711); the bound below is loose on purpose (stated from memory)
    x = np.linspace(-0.9, 0.9, 4000)
    w = Waveform(x, 8000.0)
    simwave.write(tmp_path / "c.wav", w, subtype=subtype)
    back = simwave.read(tmp_path / "c.wav")
    assert sf.info(str(tmp_path / "c.wav")).subtype == subtype
    assert np.all(np.abs(back.data[:, 0] - x) <= 0.04 * np.abs(x) + 1e-3)


def test_scipy_wavfile_int16_reads_as_code_over_32768(tmp_path):
    codes = np.array([[0, 1], [32767, -32768], [-1, 12345]], dtype=np.int16)
    wavfile.write(tmp_path / "s.wav", 22050, codes)  # scipy.io.wavfile as independent writer
    w = simwave.read(tmp_path / "s.wav")
    assert w.rate == 22050 and w.n_channels == 2
    np.testing.assert_array_equal(w.data, codes / 32768.0)
    assert w.units == ["FS", "FS"]


def test_scipy_wavfile_float32_reads_identically(tmp_path):
    x = np.random.default_rng(1).standard_normal((1000, 4)).astype(np.float32) * 3
    wavfile.write(tmp_path / "f.wav", 96000, x)
    w = simwave.read(tmp_path / "f.wav")
    np.testing.assert_array_equal(w.data, x.astype(np.float64))  # beyond full scale kept


def test_numpy_savetxt_csv_reads_identically(tmp_path):
    t = np.arange(500) / 2000.0
    v = np.column_stack([np.sin(2 * np.pi * 50 * t), np.cos(2 * np.pi * 50 * t)])
    np.savetxt(tmp_path / "n.csv", np.column_stack([t, v]), delimiter=",",
               header="time,vin [V],vout [V]", comments="", fmt="%.17g")
    w = simwave.read(tmp_path / "n.csv")
    assert w.rate == 2000.0 and w.channels == ["vin", "vout"] and w.units == ["V", "V"]
    np.testing.assert_array_equal(w.data, v)


def test_standard_csv_module_file_reads_identically(tmp_path):
    rows = [(i / 100.0, float(i) ** 0.5, -i * 0.25) for i in range(300)]
    with open(tmp_path / "c.csv", "w", newline="") as fh:
        out = csv.writer(fh)
        out.writerow(["t", "a (mA)", "b"])
        out.writerows(rows)
    w = simwave.read(tmp_path / "c.csv")
    assert w.rate == pytest.approx(100.0) and w.channels == ["a", "b"] and w.units == ["mA", ""]
    np.testing.assert_array_equal(w.data, np.array(rows)[:, 1:])


def test_h5py_written_file_reads_identically(tmp_path):
    x = np.random.default_rng(3).standard_normal((5000, 2))
    with h5py.File(tmp_path / "d.h5", "w") as f:
        g = f.create_group("run1")
        ds = g.create_dataset("signal", data=x.astype(np.float32))
        ds.attrs["sample_rate"] = 25000.0
        ds.attrs["units"] = "V"
        g.attrs["operator"] = "anon"
    w = simwave.read(tmp_path / "d.h5")
    assert w.rate == 25000.0 and w.units == ["V", "V"]
    np.testing.assert_array_equal(w.data, x.astype(np.float32).astype(np.float64))


def test_h5py_sibling_time_dataset_gives_rate(tmp_path):
    t = 1.5 + np.arange(1000) / 500.0
    with h5py.File(tmp_path / "t.h5", "w") as f:
        f["time"] = t
        f["v"] = np.arange(1000.0)
    w = simwave.read(tmp_path / "t.h5")
    assert w.rate == 500.0 and w.t0 == 1.5
    assert w.data[-1, 0] == 999.0


@pytest.mark.parametrize("name", ["b.wav", "b.csv", "b.h5", "b.flac"])
def test_blocks_equal_whole_read_and_carry_t0(tmp_path, wave3, name):
    opts = {"subtype": "PCM_24"} if name.endswith(".flac") else {}
    simwave.write(tmp_path / name, wave3, **opts)
    whole = simwave.read(tmp_path / name)
    pieces = list(simwave.blocks(tmp_path / name, 3001))
    assert [p.n_samples for p in pieces[:-1]] == [3001] * (len(pieces) - 1)
    np.testing.assert_array_equal(np.concatenate([p.data for p in pieces]), whole.data)
    for i, p in enumerate(pieces):
        assert p.t0 == pytest.approx(whole.t0 + i * 3001 / whole.rate, abs=1e-12)


def test_csv_blocks_across_many_chunks(tmp_path, monkeypatch):
    import simwave.signals.csvfile as csvfile

    w = simwave.generate("white-noise", 1000, 5, seed=2)
    simwave.write(tmp_path / "n.csv", w)
    monkeypatch.setattr(csvfile, "CHUNK_BYTES", 997)  # forces ~100 chunks with cut lines
    pieces = list(simwave.blocks(tmp_path / "n.csv", 333))
    np.testing.assert_array_equal(np.concatenate([p.data for p in pieces]), w.data)


def test_channel_selection_by_name_and_index(tmp_path, wave3):
    simwave.write(tmp_path / "s.h5", wave3)
    w = simwave.read(tmp_path / "s.h5", channels="probe,0")
    assert w.channels == ["probe", "left"] and w.units == ["A", "V"]
    np.testing.assert_array_equal(w.data, wave3.data[:, [2, 0]])
    with pytest.raises(WaveformError, match="no channel named 'nope'"):
        simwave.read(tmp_path / "s.h5", channels=["nope"])


def test_audio_full_scale_scaling_and_calibration_round_trip(tmp_path):
    x = np.linspace(-4.0, 6.0, 1001)
    w = Waveform(x, 1000.0, channels=["v"], units=["V"])
    simwave.write(tmp_path / "v.wav", w, full_scale=5.0, offset=1.0, subtype="PCM_24")
    raw = sf.read(str(tmp_path / "v.wav"))[0]
    np.testing.assert_allclose(raw, (x - 1.0) / 5.0, atol=2 ** -24)
    back = simwave.read(tmp_path / "v.wav")  # the file records its calibration
    np.testing.assert_allclose(back.data[:, 0], x, atol=5 * 2 ** -24)
    forced = simwave.read(tmp_path / "v.wav", full_scale=10, offset=0)
    np.testing.assert_allclose(forced.data[:, 0], raw * 10, atol=1e-12)
    assert forced.units == ["V"]


def test_integer_subtype_clipping_error_clip_and_normalize(tmp_path):
    x = np.array([0.0, 0.5, 2.0, -1.5, 0.25])
    w = Waveform(x, 8000.0)
    with pytest.raises(WaveformError, match=r"exceeds digital full scale.*\+6\.02 dBFS"):
        simwave.write(tmp_path / "c.wav", w, subtype="PCM_16")
    assert not os.path.exists(tmp_path / "c.wav")
    res = simwave.write(tmp_path / "c.wav", w, subtype="PCM_16", on_clip="clip")
    assert res.clipped == 2 and res.peak_dbfs == pytest.approx(20 * np.log10(2.0))
    np.testing.assert_allclose(sf.read(str(tmp_path / "c.wav"))[0], [0, 0.5, 32767 / 32768, -1,
                                                                      0.25])
    res = simwave.write(tmp_path / "n.wav", w, subtype="PCM_16", on_clip="normalize")
    # the peak (2.0) goes to -1 dBFS, the default level: gain 10^(-1/20) / 2
    assert res.gain == pytest.approx(10 ** (-1 / 20) / 2) and res.clipped == 0
    back = simwave.read(tmp_path / "n.wav")  # calibration recorded: original values back
    np.testing.assert_allclose(back.data[:, 0], x, atol=2 / 32768)


def test_streaming_normalize_matches_whole_file_normalize(tmp_path):
    w = simwave.generate("sine", 8000, 1, frequency=50, amplitude=3)
    simwave.write(tmp_path / "a.wav", w, subtype="PCM_16", on_clip="normalize")
    with simwave.open_writer(tmp_path / "b.wav", 8000, ["sine"], subtype="PCM_16",
                             on_clip="normalize") as out:
        for b in simwave.signals.generate_blocks("sine", 8000, 1, 999, frequency=50, amplitude=3):
            out.write(b)
    assert out.result.gain == pytest.approx(10 ** (-1 / 20) / 3)
    assert sf.read(str(tmp_path / "a.wav"), dtype="int16")[0].tolist() == \
        sf.read(str(tmp_path / "b.wav"), dtype="int16")[0].tolist()
    assert not [p for p in os.listdir(tmp_path) if p.startswith(".")]  # spool removed


def test_extra_streams_hdf5_csv_audio(tmp_path):
    x = simwave.generate("ramp", 1000, 0.1)
    y = x.with_data(x.data * 2, channels=["y"], units=["V"])
    simwave.write(tmp_path / "o.h5", y, extra={"input": x}, dataset="/run/output")
    with h5py.File(tmp_path / "o.h5") as f:
        assert set(f["run"]) == {"output", "input"}
    back_in = simwave.read(tmp_path / "o.h5", dataset="/run/input")
    np.testing.assert_array_equal(back_in.data, x.data)
    simwave.write(tmp_path / "o.csv", y, extra={"input": x})
    w = simwave.read(tmp_path / "o.csv")
    assert w.channels == ["y", "input/ramp"]
    np.testing.assert_array_equal(w.data[:, 1], x.data[:, 0])
    simwave.write(tmp_path / "o.wav", y, extra={"input": x}, subtype="DOUBLE")
    assert simwave.info(tmp_path / "o.wav").channels == ["y", "input/ramp"]


def test_hdf5_several_outputs_into_one_file(tmp_path):
    a = simwave.generate("sine", 1000, 0.5, frequency=10)
    b = simwave.generate("square", 1000, 0.5, frequency=10)
    simwave.write(tmp_path / "m.h5", a, dataset="/a")
    simwave.write(tmp_path / "m.h5", b, dataset="/b", mode="add")
    with pytest.raises(WaveformError, match="/a already exists"):
        simwave.write(tmp_path / "m.h5", b, dataset="/a", mode="add")
    np.testing.assert_array_equal(simwave.read(tmp_path / "m.h5", dataset="/a").data, a.data)
    np.testing.assert_array_equal(simwave.read(tmp_path / "m.h5", dataset="/b").data, b.data)
    with pytest.raises(WaveformError, match="2 datasets could be the signal"):
        simwave.read(tmp_path / "m.h5")


def test_writer_refuses_input_and_leaves_nothing_on_failure(tmp_path):
    w = simwave.generate("step", 100, 1)
    src = tmp_path / "in.csv"
    simwave.write(src, w)
    before = src.read_bytes()
    with pytest.raises(WaveformError, match="refusing to write over the input"):
        simwave.write(src, w, protect=[str(src)])
    link = tmp_path / "alias.csv"
    os.link(src, link)  # same file, other name: os.path.samefile catches it
    with pytest.raises(WaveformError, match="refusing"):
        simwave.write(link, w, protect=[str(src)])
    assert src.read_bytes() == before
    out = tmp_path / "out.h5"
    with pytest.raises(RuntimeError, match="boom"):
        with simwave.open_writer(out, 100, 1) as wr:
            wr.write(np.zeros((10, 1)))
            raise RuntimeError("boom")
    assert sorted(os.listdir(tmp_path)) == ["alias.csv", "in.csv"]
    # failure while replacing an existing file keeps the old file intact
    simwave.write(out, w)
    old = out.read_bytes()
    with pytest.raises(WaveformError):
        with simwave.open_writer(out, 100, 1) as wr:
            wr.write(np.zeros((10, 2)))  # wrong channel count
    assert out.read_bytes() == old
    assert sorted(os.listdir(tmp_path)) == ["alias.csv", "in.csv", "out.h5"]


def test_info_reads_headers_and_stats(tmp_path, wave3):
    simwave.write(tmp_path / "i.wav", wave3, subtype="PCM_24")
    meta = simwave.info(tmp_path / "i.wav")
    assert (meta.format, meta.subtype, meta.rate, meta.n_samples, meta.n_channels) == \
        ("WAV", "PCM_24", 48000.0, 20000, 3)
    assert meta.duration == pytest.approx(20000 / 48000) and meta.stats is None
    full = simwave.info(tmp_path / "i.wav", stats=True)
    back = simwave.read(tmp_path / "i.wav").data
    for c, s in enumerate(full.stats):
        assert s["min"] == back[:, c].min() and s["max"] == back[:, c].max()
        assert s["rms"] == pytest.approx(np.sqrt(np.mean(back[:, c] ** 2)), rel=1e-12)
        assert s["mean"] == pytest.approx(np.mean(back[:, c]), abs=1e-15)
