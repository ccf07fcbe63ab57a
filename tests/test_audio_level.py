"""Audio level: cautions only when they matter, normalizing to a stated level, dBFS in info,
speaker names, and the worst tone gain error on the run line.

dBFS here is 20 log10(|peak| / full scale) with full scale = 1.0 in the file's sample
units (AES17-2020 defines full-scale amplitude; a sine whose peak reaches full scale
is 0 dB FS; quoted from memory).
"""

import math

import numpy as np
import pytest
import soundfile as sf
from click.testing import CliRunner

import simwave
from simwave.cli import main


def _run(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


@pytest.fixture
def tone16(tmp_path):
    """A 1 kHz tone at -1 dBFS in a 16-bit WAV (invented test signal)."""
    w = simwave.generate("sine", 48000, 0.2, frequency=1000, amplitude=10 ** (-1 / 20))
    simwave.write(tmp_path / "in.wav", w, subtype="PCM_16")
    return tmp_path / "in.wav"


def _peak_dbfs(path):
    x, _ = sf.read(str(path), always_2d=True)
    return 20 * math.log10(np.max(np.abs(x)))


def test_boost_beyond_full_scale_says_by_how_much_and_what_helps(tone16, tmp_path):
    r = _run("run", tone16, "-s", "1.4", "-o", tmp_path / "boost.wav")
    assert r.exit_code == 0, r.output
    expected = 20 * math.log10(1.4) - 1  # -1 dBFS times a gain of 1.4: +1.92 dBFS
    assert _peak_dbfs(tmp_path / "boost.wav") == pytest.approx(expected, abs=1e-3)
    caution = [ln for ln in r.output.splitlines() if ln.startswith("Caution:")]
    assert caution == [
        f"Caution: the output peaks at {expected:+.1f} dBFS, {expected:.1f} dB above digital "
        "full scale: it will clip when converted to integer samples or played. --on-clip "
        "normalize scales it to -1 dBFS (--normalize-level sets the level). Start playback "
        "at low volume."]


def test_no_caution_after_a_filter_that_lowers_the_level(tone16, tmp_path):
    r = _run("run", tone16, "-s", "0.5", "-o", tmp_path / "cut.wav")
    assert r.exit_code == 0 and "Caution" not in r.output
    assert f"level      peak {20 * math.log10(0.5) - 1:+.1f} dBFS" in r.output


def test_caution_when_louder_than_the_input_by_more_than_the_margin(tmp_path):
    quiet = simwave.generate("sine", 48000, 0.2, frequency=500, amplitude=0.05)  # -26 dBFS
    simwave.write(tmp_path / "q.wav", quiet)
    r = _run("run", tmp_path / "q.wav", "-s", "2", "-o", tmp_path / "x2.wav")  # +6.02 dB
    assert "Caution: the output is 6.0 dB louder than the input (peak -20.0 dBFS)" in r.output
    r = _run("run", tmp_path / "q.wav", "-s", "1.2", "-o", tmp_path / "x12.wav")  # +1.6 dB
    assert r.exit_code == 0 and "Caution" not in r.output


def test_normalize_goes_to_the_stated_level_and_says_the_gain(tone16, tmp_path):
    r = _run("run", tone16, "-s", "1.4", "-o", tmp_path / "n.wav", "--subtype", "PCM_16",
             "--on-clip", "normalize")
    assert r.exit_code == 0, r.output
    peak = 20 * math.log10(1.4) - 1
    # -1 dBFS within one 16-bit step (20 log10(1 - 2^-15 / 0.89) ~ -0.0003 dB)
    assert _peak_dbfs(tmp_path / "n.wav") == pytest.approx(-1.0, abs=1e-3)
    assert f"normalized by {-1 - peak:+.1f} dB to -1.0 dBFS in the file" in r.output
    r = _run("run", tone16, "-s", "1.4", "-o", tmp_path / "n6.wav", "--on-clip", "normalize",
             "--normalize-level", "-6")
    assert _peak_dbfs(tmp_path / "n6.wav") == pytest.approx(-6.0, abs=1e-5)  # float samples


def test_clipping_error_names_the_option_that_helps(tone16, tmp_path):
    r = _run("run", tone16, "-s", "1.4", "-o", tmp_path / "c.wav", "--subtype", "PCM_16")
    assert r.exit_code == 2
    line = r.output.strip().splitlines()[-1]
    assert "exceeds digital full scale (peak so far +1.92 dBFS, 1.92 dB over)" in line
    assert "--on-clip normalize" in line and "full_scale" not in line
    assert "on_clip=" not in line  # the command-line spelling, not Python's


def test_info_levels_in_dbfs_and_stereo_names(tmp_path):
    t = np.arange(4800) / 48000
    x = np.column_stack([0.5 * np.sin(2 * np.pi * 1e3 * t), 0.25 * np.sin(2 * np.pi * 1e3 * t)])
    sf.write(str(tmp_path / "st.wav"), x, 48000, subtype="FLOAT")
    d = simwave.info(tmp_path / "st.wav", stats=True).to_dict()
    assert d["channels"] == ["left", "right"]  # RIFF WAVE: channel 0 left, 1 right
    # sine of amplitude A: peak 20 log10 A, RMS A / sqrt(2) (any circuits text)
    assert d["stats"][0]["peak_dbfs"] == pytest.approx(20 * math.log10(0.5), abs=1e-6)
    assert d["stats"][1]["rms_dbfs"] == pytest.approx(20 * math.log10(0.25 / math.sqrt(2)),
                                                      abs=1e-4)
    r = _run("info", tmp_path / "st.wav")
    assert "peak dBFS" in r.output and "-6.02" in r.output and "-15.05" in r.output


def test_extensible_channel_mask_names_the_speakers(tmp_path):
    p = tmp_path / "six.wav"
    sf.write(str(p), np.zeros((10, 6)), 48000, format="WAVEX", subtype="PCM_16")
    raw = bytearray(p.read_bytes())
    at = raw.find(b"fmt ")
    assert int.from_bytes(raw[at + 8:at + 10], "little") == 0xFFFE  # WAVE_FORMAT_EXTENSIBLE
    # dwChannelMask at byte 20 of the extensible fmt chunk; 0x60F = FL FR FC LFE SL SR
    raw[at + 8 + 20:at + 8 + 24] = (0x60F).to_bytes(4, "little")
    p.write_bytes(bytes(raw))
    assert simwave.info(p).channels == ["left", "right", "center", "lfe", "side-left",
                                        "side-right"]


def test_run_line_shows_the_worst_tone_gain_error(tmp_path):
    tones = "100,1k,5k,11k"
    r = _run("run", f"multitone:rate=48k,duration=0.5,frequencies={tones},amplitude=0.1",
             "-s", "(2*pi*2k)^2/(s^2+1.414*2*pi*2k*s+(2*pi*2k)^2)", "-o", tmp_path / "m.h5",
             "--metrics", tmp_path / "m.json")
    assert r.exit_code == 0, r.output
    import json

    chan = json.loads((tmp_path / "m.json").read_text())["metrics"]["channels"][0]
    worst = max(abs(t["gain_db"] - t["predicted_gain_db"]) for t in chan["tones"])
    assert len(chan["tones"]) == 4
    assert f"worst tone gain error against H(j2πf) {worst:.4g} dB" in r.output
