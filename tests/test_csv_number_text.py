"""CSV numbers: shortest text that reads back to the same float64, fast path and fallback.

External reference: Python's ``float.__repr__`` gives the shortest decimal string
that rounds back to the same double (Python docs, "Floating Point Arithmetic:
Issues and Limitations"; Gay's algorithm, "Correctly rounded binary-decimal and
decimal-binary conversions", 1990). The writer's text must read back bit for bit,
with Python's ``float()`` and numpy's own parser, and carry no more significant
digits than ``repr``.
"""

import re

import numpy as np
import pytest

import simwave
from simwave.signals.csvfile import format_rows

HARD = [
    0.0, -0.0, 5e-324, -5e-324, 2.2250738585072014e-308, 2.225073858507201e-308,
    1.7976931348623157e308, -1.7976931348623157e308, 0.1, 0.2, 0.30000000000000004,
    1e-5, 1e-7, 1e15, 1e16, 1e17, 1e20, 1e21, 1e22, 123456789012345678.0,
    9007199254740993.0, 2.0833333333333333e-05, 1 / 3, 2 / 3, np.pi, -np.e, 1e-300, 4.35e-310,
]


def _digits(text: str) -> str:
    """Significant digits of a decimal number's text (no sign, point, exponent, edge zeros)."""
    mantissa = re.split(r"[eE]", text.strip())[0].lstrip("+-").replace(".", "")
    return mantissa.strip("0") or "0"


def _random_doubles(n: int) -> np.ndarray:
    # every bit pattern equally likely: all exponents, subnormals included
    bits = np.random.default_rng(11).integers(0, 2**64, size=n, dtype=np.uint64)
    x = bits.view(np.float64)
    return x[np.isfinite(x)]


@pytest.mark.parametrize("values", [np.array(HARD), _random_doubles(3000)],
                         ids=["hard cases", "random bit patterns"])
def test_text_reads_back_bit_exact_with_shortest_digits(values):
    table = values[: values.size // 2 * 2].reshape(-1, 2)
    text = format_rows(table).decode()
    cells = [c for line in text.splitlines() for c in line.split(",")]
    assert len(cells) == table.size
    back = np.array([float(c) for c in cells])
    assert np.array_equal(back.view(np.uint64), table.ravel().view(np.uint64))
    parsed = np.loadtxt(text.splitlines(), delimiter=",", ndmin=2)  # numpy's own parser
    assert np.array_equal(parsed.view(np.uint64), table.view(np.uint64))
    for cell, v in zip(cells, table.ravel().tolist(), strict=True):
        assert len(_digits(cell)) <= len(_digits(repr(v))), (cell, repr(v))


def test_non_finite_blocks_spell_nan_and_infinity():
    table = np.array([[1.5, np.nan], [np.inf, -np.inf], [0.1, -0.0]])
    lines = format_rows(table, ";").decode().splitlines()
    assert lines == ["1.5;nan", "inf;-inf", "0.1;-0.0"]


def test_written_file_reads_back_bit_exact_with_other_delimiters(tmp_path):
    x = np.column_stack([np.linspace(-1, 1, 4000) / 3,
                         np.random.default_rng(2).standard_normal(4000) * 1e-9])
    for delim in (",", "\t", ";"):
        path = tmp_path / f"o{len(delim)}{ord(delim[0])}.csv"
        simwave.write(path, simwave.Waveform(x, 48000.0), delimiter=delim)
        back = simwave.read(path)
        assert np.array_equal(back.data.view(np.uint64), x.view(np.uint64))
        assert back.rate == 48000.0


def test_audio_peak_search_matches_argmax_of_abs():
    # The audio writer finds the peak without an abs() temporary; numpy's argmax of |x|
    # (first occurrence of the largest) is the reference, ties and NaN included.
    from simwave.signals.audio import _abs_peak

    rng = np.random.default_rng(5)
    cases = [rng.standard_normal((257, 3)), np.array([[0.5, -0.5], [0.5, 0.25]]),
             np.array([[-0.5, 0.5]]), np.array([[0.0, -0.0]]), np.array([[1.0, np.nan, -2.0]]),
             np.array([[1.0], [-np.inf], [np.inf]])]
    for x in cases:
        flat, peak = _abs_peak(x)
        ref = int(np.argmax(np.abs(x)))
        assert flat == ref
        assert (np.isnan(peak) and np.isnan(np.abs(x).flat[ref])) or peak == np.abs(x).flat[ref]


def test_hdf5_compression_is_an_explicit_choice(tmp_path):
    import h5py

    x = np.random.default_rng(3).standard_normal((5000, 2))
    simwave.write(tmp_path / "plain.h5", simwave.Waveform(x, 1000.0))
    simwave.write(tmp_path / "gz.h5", simwave.Waveform(x, 1000.0), compression="gzip")
    with h5py.File(tmp_path / "plain.h5") as f, h5py.File(tmp_path / "gz.h5") as g:
        assert f["/waveform"].compression is None
        assert g["/waveform"].compression == "gzip"
        assert np.array_equal(f["/waveform"][()], x) and np.array_equal(g["/waveform"][()], x)
