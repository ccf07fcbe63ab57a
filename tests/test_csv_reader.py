"""CSV reading rules: delimiters, decimal comma, units, time column, uniform sampling, gaps."""

import warnings

import numpy as np
import pytest

import simwave
from simwave.errors import WaveformError
from simwave.signals.io import WaveformWarning


def _write(path, text):
    path.write_text(text, encoding="utf-8")
    return path


@pytest.mark.parametrize("delim", [",", ";", "\t", "  "])
def test_delimiters_detected(tmp_path, delim):
    lines = [delim.join(["time", "a[V]", "b"])] + [
        delim.join([f"{i * 0.001:.3f}", str(i), str(-i)]) for i in range(5)]
    w = simwave.read(_write(tmp_path / "d.csv", "\n".join(lines) + "\n"))
    assert w.channels == ["a", "b"] and w.units == ["V", ""] and w.rate == pytest.approx(1000)
    np.testing.assert_array_equal(w.data[:, 1], [0, -1, -2, -3, -4])


def test_decimal_comma_with_semicolons_and_comments(tmp_path):
    text = "# logger export\n# site: shed\nZeit (ms);U (V)\n0;1,5\n0,5;2,25\n\n1;-3,0e-1\n"
    w = simwave.read(_write(tmp_path / "dc.csv", text), time_column="Zeit")
    assert w.rate == pytest.approx(2000.0)  # 0.5 ms interval
    assert w.units == ["V"] and w.channels == ["U"]
    np.testing.assert_array_equal(w.data[:, 0], [1.5, 2.25, -0.3])


def test_no_header_needs_rate(tmp_path):
    p = _write(tmp_path / "n.txt", "1 2\n3 4\n5 6\n")
    with pytest.raises(WaveformError, match="no time column and no sample rate"):
        simwave.read(p)
    w = simwave.read(p, rate="1k")
    assert w.channels == ["col0", "col1"] and w.rate == 1000.0
    w = simwave.read(p, time_column=0)
    assert w.rate == pytest.approx(0.5) and w.t0 == 1.0


def test_jitter_within_tolerance_accepted_and_beyond_refused(tmp_path):
    t = np.arange(100) * 1e-3
    t[40] += 0.5e-6 * 1e-3  # 0.5e-6 relative to the interval: accepted
    text = "time,v\n" + "".join(f"{a!r},{i}\n" for i, a in enumerate(t.tolist()))
    w = simwave.read(_write(tmp_path / "ok.csv", text))
    assert w.rate == pytest.approx(1000.0, rel=1e-9) and w.n_samples == 100
    t[60] += 5e-6 * 1e-3  # 5e-6 relative: refused, naming the line (header is line 1)
    text = "time,v\n" + "".join(f"{a!r},{i}\n" for i, a in enumerate(t.tolist()))
    with pytest.raises(WaveformError, match=r"bad\.csv, line 62: irregular sampling"):
        simwave.read(_write(tmp_path / "bad.csv", text))


def test_time_backwards_and_repeating(tmp_path):
    with pytest.raises(WaveformError, match=r"line 5: time goes backwards \(0.1 s after 0.2 s\)"):
        simwave.read(_write(tmp_path / "b.csv", "t,v\n0,1\n0.1,1\n0.2,1\n0.1,1\n"))
    with pytest.raises(WaveformError, match=r"line 5: time repeats"):
        simwave.read(_write(tmp_path / "r.csv", "t,v\n0,1\n0.1,1\n0.2,1\n0.2,1\n"))


def test_resample_irregular_rows_by_linear_interpolation(tmp_path):
    # rows at 0, 1, 2, 3.5, 4 ms of a straight line: interpolation is exact on a line
    t = [0.0, 1e-3, 2e-3, 3.5e-3, 4e-3, 5e-3]
    text = "time,v\n" + "".join(f"{a!r},{1000 * a * 2!r}\n" for a in t)
    p = _write(tmp_path / "irr.csv", text)
    with pytest.raises(WaveformError, match="irregular sampling"):
        simwave.read(p)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        w = simwave.read(p, resample=True, rate=1000)
    assert w.n_samples == 6 and w.attrs["resampled_rows"] == 1
    np.testing.assert_allclose(w.data[:, 0], [0, 2, 4, 6, 8, 10], atol=1e-12)
    assert any(issubclass(c.category, WaveformWarning) and "1 row(s) off" in str(c.message)
               for c in caught)


def test_resample_matches_numpy_interp_across_chunks(tmp_path, monkeypatch):
    import simwave.signals.csvfile as csvfile

    rng = np.random.default_rng(5)
    t = np.cumsum(rng.uniform(0.5e-3, 1.5e-3, 3000))
    v = np.sin(2 * np.pi * 3 * t)
    pairs = zip(t.tolist(), v.tolist(), strict=True)
    text = "time,v\n" + "".join(f"{a!r},{b!r}\n" for a, b in pairs)
    p = _write(tmp_path / "r.csv", text)
    monkeypatch.setattr(csvfile, "CHUNK_BYTES", 1500)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WaveformWarning)
        w = simwave.read(p, resample=True, rate=1000)
    grid = t[0] + np.arange(w.n_samples) / 1000.0
    assert grid[-1] <= t[-1] + 1e-9 and grid[-1] + 1e-3 > t[-1]
    np.testing.assert_allclose(w.data[:, 0], np.interp(grid, t, v), rtol=0, atol=1e-12)


def test_nan_rejected_then_short_gaps_filled(tmp_path):
    text = "t,a,b\n0,0,0\n1,1,,\n"  # 4 fields on line 3: ragged
    with pytest.raises(WaveformError, match=r"line 3: 4 fields, expected 3"):
        simwave.read(_write(tmp_path / "rag.csv", text))
    text = "t,a,b\n0,0,10\n1,,11\n2,nan,12\n3,3,13\n4,4,inf\n5,5,15\n"
    p = _write(tmp_path / "g.csv", text)
    with pytest.raises(WaveformError, match=r"g\.csv, line 3, channel 'a': nan value"):
        simwave.read(p)
    with pytest.raises(WaveformError, match="longer than 1 samples"):
        simwave.read(p, fill_gaps=1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WaveformWarning)
        w = simwave.read(p, fill_gaps=2)
    np.testing.assert_allclose(w.data, [[0, 10], [1, 11], [2, 12], [3, 13], [4, 14], [5, 15]])
    assert w.attrs["filled_samples"] == 3


def test_gap_fill_across_block_boundaries_equals_whole(tmp_path, monkeypatch):
    import simwave.signals.csvfile as csvfile

    x = np.arange(2000.0)
    x[::37] = np.nan
    x[0] = 0.0
    text = "v\n" + "".join("\n" if np.isnan(a) else f"{a!r}\n" for a in x.tolist())
    text = text.replace("\n\n", "\nnan\n")
    p = _write(tmp_path / "gap.csv", text)
    monkeypatch.setattr(csvfile, "CHUNK_BYTES", 300)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WaveformWarning)
        pieces = list(simwave.blocks(p, 101, rate=10, fill_gaps=1))
    got = np.concatenate([b.data[:, 0] for b in pieces])
    np.testing.assert_allclose(got, np.arange(2000.0))
    assert pieces[-1].attrs["filled_samples"] == np.isnan(x).sum()


def test_non_numeric_cell_names_line_and_column(tmp_path):
    p = _write(tmp_path / "x.csv", "time,vin,vout\n0,1,2\n0.1,1,abc\n")
    with pytest.raises(WaveformError, match=r"x\.csv, line 3, column 3 \('vout'\): 'abc' is not"):
        simwave.read(p)


def test_no_numeric_rows_and_only_comments(tmp_path):
    with pytest.raises(WaveformError, match="no numeric rows"):
        simwave.read(_write(tmp_path / "h.csv", "time,v\n"))
    with pytest.raises(WaveformError, match="no numeric rows"):
        simwave.read(_write(tmp_path / "c.csv", "# nothing\n# here\n"))


def test_time_units_converted_and_written_file_header(tmp_path):
    p = _write(tmp_path / "u.csv", "time [us],i [mA]\n0,1\n10,2\n20,3\n")
    w = simwave.read(p)
    assert w.rate == pytest.approx(1e5) and w.units == ["mA"]
    simwave.write(tmp_path / "o.csv", w)
    lines = (tmp_path / "o.csv").read_text().splitlines()
    assert lines[0].startswith("# simwave: {") and lines[1] == "time [s],i [mA]"
    # shortest digits in either layout (1e-05 or 0.00001); the values are what matter
    assert [float(v) for v in lines[3].split(",")] == [1e-05, 2.0]
    assert lines[3].replace("0.00001", "1e-05") == "1e-05,2.0"
