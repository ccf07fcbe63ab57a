"""Shared system input: option values, the --design text, TOML system files and tables."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from simwave import System
from simwave.cli.system_input import (
    SystemSpec,
    load_system_file,
    parse_complex_list,
    parse_design_text,
    parse_number_list,
    resolve_system,
    system_from_mapping,
)
from simwave.errors import SimwaveError

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"

# One second-order system, H(s) = (2s + 1)/(s^2 + 3s + 2), poles -1 and -2, zero -0.5.
NUM, DEN = [2.0, 1.0], [1.0, 3.0, 2.0]


def same_tf(sys: System, num=NUM, den=DEN) -> None:
    np.testing.assert_allclose(sys.num / sys.den[0], num, rtol=1e-12)
    np.testing.assert_allclose(sys.den / sys.den[0], den, rtol=1e-12)


# ----------------------------------------------------------------------------- lists
def test_number_lists_take_suffixes_and_constant_expressions():
    assert parse_number_list("1, 4.7k, 2.2n", "x") == pytest.approx([1, 4700, 2.2e-9], rel=1e-15)
    assert parse_number_list("2*pi*50", "x") == [2 * math.pi * 50]
    assert parse_number_list("", "x") == []


def test_complex_lists():
    assert parse_complex_list("-1+2j, -1-2j, -3", "x") == [-1 + 2j, -1 - 2j, -3]


@pytest.mark.parametrize("text, fragment", [("1,,2", "empty item"), ("1, s", "contains s"),
                                            ("1, foo", "unknown name")])
def test_bad_lists(text, fragment):
    with pytest.raises(SimwaveError, match=fragment):
        parse_number_list(text, "--numerator")


# ----------------------------------------------------------------------------- --design text
def test_design_text():
    a = parse_design_text("butterworth lowpass order=4 cutoff_hz=1k")
    b = System.design("butterworth", 4, 1e3)
    np.testing.assert_array_equal(a.poles, b.poles)
    c = parse_design_text(
        "elliptic bandpass order=3 cutoff_hz=300,3kHz ripple_db=0.5dB attenuation_db=60")
    d = System.design("elliptic", 3, (300, 3e3), "bandpass", ripple_db=0.5, attenuation_db=60)
    np.testing.assert_array_equal(c.poles, d.poles)
    # the kind defaults to lowpass
    np.testing.assert_array_equal(parse_design_text("bessel-delay order=3 cutoff_hz=100").poles,
                                  System.design("bessel-delay", 3, 100).poles)


@pytest.mark.parametrize(
    "text, fragment",
    [
        ("butterworth lowpass order=4", "cutoff_hz= is missing"),
        ("butterworth lowpass cutoff_hz=1k", "order= is missing"),
        ("butterworth lowpass order=4 cutoff_hz=0", "above 0 Hz"),
        ("butterworth lowpass order=4.5 cutoff_hz=1k", "whole number"),
        ("butterworth lowpass order=4 cutoff_hz=1k q=3", "unknown setting 'q'"),
        ("butterworth order=4 cutoff_hz=1k lowpass", "after the settings"),
        ("order=4 cutoff_hz=1k", "write the family"),
        ("foo lowpass order=4 cutoff_hz=1k", "unknown filter family"),
        ("butterworth lowpass order=4 order=5 cutoff_hz=1k", "given twice"),
    ],
)
def test_bad_design_text(text, fragment):
    with pytest.raises(SimwaveError, match=None) as info:
        parse_design_text(text)
    assert fragment in str(info.value)


# ----------------------------------------------------------------------------- options
@pytest.mark.parametrize(
    "spec",
    [
        SystemSpec(system="(2s+1)/(s^2+3s+2)"),
        SystemSpec(system="y'' + 3y' + 2y = 2x' + x"),
        SystemSpec(numerator="2, 1", denominator="1, 3, 2"),
        SystemSpec(ode_a="1, 3, 2", ode_b="2, 1"),
        SystemSpec(zeros="-0.5", poles="-1, -2", gain="2"),
    ],
)
def test_every_option_form_gives_the_same_system(spec):
    same_tf(resolve_system(spec))


def test_dead_time_option_adds():
    sys = resolve_system(SystemSpec(system="exp(-1m*s)/(s+1)", dead_time="2m"))
    assert sys.delay_s == pytest.approx(3e-3)


def test_not_required_and_empty_gives_none():
    assert SystemSpec().is_empty
    assert resolve_system(SystemSpec(), required=False) is None


@pytest.mark.parametrize(
    "spec, fragment",
    [
        (SystemSpec(), "no system given"),
        (SystemSpec(system="1/(s+1)", numerator="1", denominator="1,1"), "one form only"),
        (SystemSpec(numerator="1"), "go together"),
        (SystemSpec(ode_b="1"), "go together"),
        (SystemSpec(gain="2"), "need --poles"),
        (SystemSpec(system="1/(s+1)", dead_time="-1m"), ">= 0 seconds"),
        (SystemSpec(system="missing.toml"), "missing.toml not found"),
        (SystemSpec(zeros="-1+2j", poles="-1,-2,-3"), "conjugate"),
    ],
)
def test_bad_option_combinations(spec, fragment):
    with pytest.raises(SimwaveError) as info:
        resolve_system(spec)
    assert fragment in str(info.value)


# ----------------------------------------------------------------------------- tables and files
@pytest.mark.parametrize(
    "table",
    [
        {"expression": "(2s+1)/(s^2+3s+2)"},
        {"ode": "y'' + 3y' + 2y = 2x' + x"},
        {"ode": {"a": [1, 3, 2], "b": [2, 1]}},
        {"coefficients": {"numerator": [2, "1"], "denominator": "1, 3, 2"}},
        {"zpk": {"zeros": ["-0.5"], "poles": [-1, [-2, 0]], "gain": 2}},
    ],
)
def test_every_table_form_gives_the_same_system(table):
    same_tf(system_from_mapping({"name": "t", "notes": "n", **table}, where="t.toml"))


def test_design_table():
    sys = system_from_mapping({"design": {"family": "chebyshev1", "kind": "highpass", "order": 3,
                                          "cutoff_hz": "2k", "ripple_db": 0.5}})
    ref = System.design("chebyshev1", 3, 2e3, "highpass", ripple_db=0.5)
    np.testing.assert_array_equal(sys.poles, ref.poles)
    band = system_from_mapping({"design": {"family": "butterworth", "kind": "bandpass",
                                           "order": 2, "cutoff_hz": [300, "3k"]}})
    assert band.order == 4


def test_example_files_load(tmp_path):
    front = load_system_file(EXAMPLES / "strain_gauge_front_end.toml")
    assert front.name == "strain-gauge front end"
    assert front.delay_s == pytest.approx(0.5e-3)
    assert front.dc_gain == pytest.approx(100.0, rel=1e-12)
    notch = load_system_file(EXAMPLES / "mains_hum_notch.toml")
    assert notch.order == 4
    # the name defaults to the file name
    p = tmp_path / "plain_rc.toml"
    p.write_text('expression = "1/(1m*s + 1)"\n')
    assert load_system_file(p).name == "plain_rc"


@pytest.mark.parametrize(
    "content, fragments",
    [
        ('expresion = "1/(s+1)"\n', ["bad.toml", "unknown key 'expresion'", "known: expression"]),
        ('name = "x"\n', ["bad.toml", "exactly one of", "got none"]),
        ('expression = "1/(s+1)"\node = "y = x"\n', ["exactly one", "expression and ode"]),
        ('[zpk]\npoles = [-1]\ngian = 2\n', ["bad.toml, zpk", "unknown key 'gian'"]),
        ('[zpk]\nzeros = [-1]\n', ["bad.toml, zpk", "needs poles"]),
        ('[coefficients]\nnumerator = [nan]\ndenominator = [1, 1]\n',
         ["bad.toml, coefficients", "NaN or infinite"]),
        ('[coefficients]\nnumerator = [1]\ndenominator = [inf, 1]\n', ["NaN or infinite"]),
        ('expression = "1/(s+))"\n', ["bad.toml, expression", "column 6: unexpected ')'"]),
        ('expression = "y\' + y = x"\n', ["bad.toml, expression", "'=' in an H(s) expression"]),
        ('ode = "y\' + y"\n', ["bad.toml, ode", "needs '='"]),
        ('expression = 3\n', ["bad.toml, expression", "must be text"]),
        ('expression = "1/(s+1)"\ndead_time_s = -1\n', ["bad.toml, dead_time_s", ">= 0"]),
        ('expression = "1/(s+1)"\ndead_time_s = "1 s"\n', ["bad.toml, dead_time_s"]),
        ('[design]\nfamily = "butterworth"\norder = 4\ncutoff_hz = 0\n',
         ["bad.toml, design", "above 0 Hz"]),
        ('[design]\nfamily = "butterworth"\norder = 99\ncutoff_hz = 1e3\n',
         ["bad.toml, design", "order must be 1..60"]),
        ('expression = "1/(s+1)\n', ["bad.toml", "not valid TOML"]),
        ('name = 3\nexpression = "1/(s+1)"\n', ["bad.toml", "name must be text"]),
    ],
)
def test_bad_system_files_name_file_and_key(tmp_path, content, fragments):
    p = tmp_path / "bad.toml"
    p.write_text(content)
    with pytest.raises(SimwaveError) as info:
        load_system_file(p)
    msg = str(info.value)
    for fragment in fragments:
        assert fragment in msg
    assert "\n" not in msg


def test_missing_and_directory_paths(tmp_path):
    with pytest.raises(SimwaveError, match="not found"):
        load_system_file(tmp_path / "nope.toml")
    d = tmp_path / "dir.toml"
    d.mkdir()
    with pytest.raises(SimwaveError, match="directory"):
        load_system_file(d)


def test_mapping_where_is_used_for_embedded_tables():
    with pytest.raises(SimwaveError, match=r"^batch.toml \[\[systems\]\] #2: unknown key 'x'"):
        system_from_mapping({"x": 1}, where="batch.toml [[systems]] #2")
