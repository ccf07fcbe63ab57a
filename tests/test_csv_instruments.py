"""CSV files written the ways bench instruments and data loggers write them.

Every file here is invented for the test. The layouts are the common ones:
metadata lines above the column names, a units line under the names, ``;``
with a decimal comma, tab-separated logger exports, a trailing separator,
time in ms or µs, and a sample-interval line instead of a time column.
Sources for the conventions checked: RFC 4180 (comma-separated values, one
record per line, optional header line, quoted fields); ISO 80000-1:2009,
sec. 7.3.2 (the decimal sign is a comma or a point on the line; from memory).
"""

import json

import numpy as np
import pytest
from click.testing import CliRunner

import simwave
from simwave.cli import main
from simwave.errors import WaveformError


def _write(path, lines, newline="\n"):
    path.write_text(newline.join(lines) + newline, encoding="utf-8")
    return path


def _step(n=200, dt=1e-5, t0=-1e-3):
    t = t0 + np.arange(n) * dt
    return t, np.where(t >= 0, 2.5, 0.1) + 0.001 * np.arange(n)


def _comma(x, fmt):
    return format(x, fmt).replace(".", ",")


SCOPE_META = ["Model;XB-2040", "Serial;QX0042117", "Date;2026-03-14 09:12:44",
              "Vertical scale;0,5 V/div", "Record length;200"]


def test_bench_scope_export_semicolons_decimal_comma_metadata(tmp_path):
    t, v = _step()
    rows = [f"{_comma(a, '.6e')};{_comma(b, '.4f')}" for a, b in zip(t, v, strict=True)]
    p = _write(tmp_path / "scope.csv", SCOPE_META + ["Time (s);CH1 (V)"] + rows, "\r\n")
    w = simwave.read(p)
    assert w.channels == ["CH1"] and w.units == ["V"]
    assert w.rate == pytest.approx(1e5, rel=1e-9) and w.t0 == pytest.approx(-1e-3)
    np.testing.assert_allclose(w.data[:, 0], np.round(v, 4), rtol=0, atol=1e-12)
    md = w.attrs["metadata"]
    assert md["Model"] == "XB-2040" and md["Serial"] == "QX0042117"
    assert md["Vertical scale"] == "0,5 V/div" and list(md)[-1] == "Record length"


def test_names_then_units_line(tmp_path):
    t, v = _step(50)
    rows = [f"{a * 1e3:.6g},{b!r},{-b!r}" for a, b in zip(t.tolist(), v.tolist(), strict=True)]
    p = _write(tmp_path / "two.csv", ["Time,Supply,Sense", "ms,V,mA"] + rows)
    w = simwave.read(p)
    assert w.channels == ["Supply", "Sense"] and w.units == ["V", "mA"]
    assert w.rate == pytest.approx(1e5, rel=1e-9)  # 0.01 ms rows: ms converted to seconds
    np.testing.assert_array_equal(w.data[:, 1], -v)
    assert "metadata" not in w.attrs


def test_tab_logger_with_key_value_metadata_and_bracketed_units_line(tmp_path):
    t = np.arange(40) * 0.25e-3
    rows = [f"{_comma(a * 1e6, '.1f')}\t{_comma(20 + a, '.5f')}" for a in t]
    lines = ["Logger: TK-8 field recorder", "Channel name = bay 3 thermistor", "",
             "Elapsed\tTemperature", "[µs]\t[°C]"] + rows
    w = simwave.read(_write(tmp_path / "log.txt", lines))
    assert w.channels == ["Temperature"] and w.units == ["°C"]
    assert w.rate == pytest.approx(4000.0, rel=1e-9)  # 250 µs rows
    np.testing.assert_allclose(w.data[:, 0], 20 + t, rtol=0, atol=1e-9)
    assert w.attrs["metadata"] == {"Logger": "TK-8 field recorder",
                                   "Channel name": "bay 3 thermistor"}


@pytest.mark.parametrize("unit, scale", [("ms", 1e-3), ("µs", 1e-6), ("us", 1e-6)])
def test_time_column_in_ms_and_us(tmp_path, unit, scale):
    rows = [f"{k * 5},{k % 3}" for k in range(30)]
    w = simwave.read(_write(tmp_path / "u.csv", [f"time ({unit}),v"] + rows))
    assert w.rate == pytest.approx(1 / (5 * scale), rel=1e-12)


@pytest.mark.parametrize("line, rate", [
    ("Sample interval;1,0E-05", 1e5),
    ("Sample interval (us);20", 5e4),
    ("Sampling rate;48 kS/s", 48e3),
    ("Sample rate: 2 kHz", 2e3),
])
def test_sample_interval_or_rate_line_instead_of_time_column(tmp_path, line, rate):
    rows = [f"{_comma(0.5 * k, '.3f')};{_comma(-0.25 * k, '.3f')}" for k in range(20)]
    p = _write(tmp_path / "nt.csv", ["Instrument;DA-16", line, "Start time;0,002", "CH1;CH2"]
               + rows)
    w = simwave.read(p)
    assert w.rate == pytest.approx(rate, rel=1e-12) and w.channels == ["CH1", "CH2"]
    assert w.t0 == pytest.approx(0.002)
    np.testing.assert_allclose(w.data[:, 1], -0.25 * np.arange(20), atol=1e-12)


def test_trailing_separator_and_quoted_fields(tmp_path):
    rows = [f'"{k * 1e-3!r}";"{k}";' for k in range(10)]
    w = simwave.read(_write(tmp_path / "q.csv", ['"Time [s]";"Level [m]";'] + rows))
    assert w.channels == ["Level"] and w.units == ["m"] and w.rate == pytest.approx(1000.0)
    np.testing.assert_array_equal(w.data[:, 0], np.arange(10.0))


def test_explicit_header_line_skip_lines_and_decimal(tmp_path):
    # a metadata line made only of numbers would look like data: say where the names are
    rows = [f"{k},{2 * k}" for k in range(10)]
    p = _write(tmp_path / "odd.csv", ["run sheet", "7,42", "t,v"] + rows)
    with pytest.raises(WaveformError, match=r"line 3, column 1 \('col0'\): 't' is not a number; "
                                            r"if this line holds the column names give "
                                            r"--header-line 3"):
        simwave.read(p)
    w = simwave.read(p, header_line=3)
    assert w.channels == ["v"] and w.attrs["metadata"] == {"line 1": "run sheet", "7": "42"}
    np.testing.assert_array_equal(w.data[:, 0], 2 * np.arange(10.0))
    w2 = simwave.read(p, skip_lines=2)
    np.testing.assert_array_equal(w2.data, w.data)
    # "1,5" alone reads as two fields under the comma default; --decimal , says otherwise
    q = _write(tmp_path / "dc.txt", ["1,5", "2,5", "3,5"])
    assert simwave.read(q, rate=1).n_channels == 2
    np.testing.assert_array_equal(simwave.read(q, rate=1, decimal=",", delimiter=";").data[:, 0],
                                  [1.5, 2.5, 3.5])


def test_detection_failure_says_what_to_do(tmp_path):
    p = _write(tmp_path / "words.csv", ["Model;XB-2040", "Serial;QX0042117", "Time;CH1"])
    with pytest.raises(WaveformError, match=r"words\.csv: no numeric rows.*--header-line N.*"
                                            r"--skip-lines N"):
        simwave.read(p)
    with pytest.raises(WaveformError, match="decimal mark must be"):
        simwave.read(p, decimal="x")


def test_metadata_reaches_the_output_provenance(tmp_path):
    t, v = _step(300)
    rows = [f"{_comma(a, '.6e')};{_comma(b, '.4f')}" for a, b in zip(t, v, strict=True)]
    p = _write(tmp_path / "scope.csv", SCOPE_META + ["Time (s);CH1 (V)"] + rows)
    out = tmp_path / "out.csv"
    done = CliRunner().invoke(main, ["run", str(p), "-s", "1/(1m*s+1)", "-o", str(out)])
    assert done.exit_code == 0, done.output
    head = out.read_text(encoding="utf-8").splitlines()[0]
    attrs = json.loads(head.split("simwave:", 1)[1])["attrs"]
    assert attrs["input_metadata"]["Serial"] == "QX0042117"
    info = CliRunner().invoke(main, ["info", str(p)])
    assert "Serial" in info.output and info.exit_code == 0


def test_cli_options_reach_the_reader(tmp_path):
    rows = [f"{k}\t{3 * k}" for k in range(10)]
    p = _write(tmp_path / "c.txt", ["header junk", "a\tb"] + rows)
    done = CliRunner().invoke(main, ["info", str(p), "--header-line", "2", "--delimiter", "tab",
                                     "--rate", "10", "--json"])
    assert done.exit_code == 0, done.output
    d = json.loads(done.output)
    assert d["channels"] == ["a", "b"] and d["attrs"]["metadata"] == {"line 1": "header junk"}
