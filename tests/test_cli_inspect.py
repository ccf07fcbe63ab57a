"""``simwave inspect``: the table, the JSON, and one-line errors with exit code 2."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from simwave import System
from simwave.cli import main

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"
BUTTER2 = "1/(s^2+1.4142135623730951*s+1)"


def run(*args: str):
    return CliRunner().invoke(main, ["inspect", *args])


def test_second_order_butterworth_table():
    # The normalized 2nd-order Butterworth s^2 + sqrt(2) s + 1 (Williams & Taylor, Electronic
    # Filter Design Handbook, ch. 2): poles -0.7071 +- 0.7071j, zeta = 1/sqrt(2),
    # wn = 1 rad/s = 0.1592 Hz (Ogata, Modern Control Engineering, 5th ed., sec. 5-3).
    result = run("-s", BUTTER2)
    assert result.exit_code == 0, result.output
    out = result.stdout
    assert "-0.7071\u00b10.7071j" in out
    row = next(line for line in out.splitlines() if line.startswith("-0.7071"))
    assert "0.1592 Hz" in row and row.split()[-1] == "0.7071"
    assert "stable" in out
    assert "-3 dB bandwidth       0.1592 Hz" in out
    assert "DC gain               1 (0 dB)" in out


def test_json_has_exact_numbers():
    result = run("-s", BUTTER2, "--json")
    assert result.exit_code == 0
    report = json.loads(result.stdout)
    sys = System.parse(BUTTER2)
    d = report["system"]
    assert [complex(p["re"], p["im"]) for p in d["poles_rad_s"]] == list(sys.poles)
    (mode,) = d["pole_modes"]
    assert mode["damping_ratio"] == pytest.approx(1 / math.sqrt(2), rel=1e-15)
    assert mode["natural_frequency_hz"] == pytest.approx(1 / (2 * math.pi), rel=1e-15)
    assert d["bandwidth_3db_hz"] == pytest.approx(1 / (2 * math.pi), rel=1e-12)
    assert d["stability"] == "stable"


@pytest.mark.parametrize(
    "args",
    [
        ["-s", "(2s+1)/(s^2+3s+2)"],
        ["-s", "y'' + 3y' + 2y = 2x' + x"],
        ["--numerator", "2, 1", "--denominator", "1, 3, 2"],
        ["--ode-a", "1, 3, 2", "--ode-b", "2, 1"],
        ["--zeros", "-0.5", "--poles", "-1, -2", "--gain", "2"],
    ],
)
def test_every_form_reaches_the_same_report(args):
    result = run(*args, "--json")
    assert result.exit_code == 0, result.output
    d = json.loads(result.stdout)["system"]
    np.testing.assert_allclose(d["denominator"], [1, 3, 2], rtol=1e-12)
    np.testing.assert_allclose(d["numerator"], [2, 1], rtol=1e-12)
    assert d["dc_gain"] == pytest.approx(0.5, rel=1e-12)


def test_ode_is_shown_as_understood():
    out = run("-s", "2y'' + 6y' + 4y = 4x' + 2x").stdout
    assert "y'' + 3 y' + 2 y = 2 x' + x" in out


def test_design_option_and_frequency_points():
    result = run("--design", "butterworth lowpass order=4 cutoff_hz=1k", "--at-hz", "0, 1k")
    assert result.exit_code == 0, result.output
    assert "4 (relative degree 4)" in result.stdout
    lines = result.stdout.splitlines()
    # Butterworth: -3.01 dB at the cutoff (Williams & Taylor, ch. 2)
    assert any(line.startswith("1 kHz") and "-3.01 dB" in line for line in lines)
    assert any(line.startswith("0 Hz") and " 0 dB" in line for line in lines)


def test_integrator_says_infinite_dc_gain():
    out = run("-s", "10/(s*(s+10))").stdout
    assert "DC gain               infinite (pole at s = 0)" in out
    assert "marginally stable" in out
    assert "integrator" in out
    d = json.loads(run("-s", "10/(s*(s+10))", "--json").stdout)["system"]
    assert d["dc_gain"] == "inf" and d["bandwidth_3db_hz"] is None


def test_dead_time_and_system_file():
    out = run("-s", str(EXAMPLES / "strain_gauge_front_end.toml"), "--dead-time", "1.5m").stdout
    assert "strain-gauge front end" in out
    assert "dead time             2 ms" in out
    assert "DC gain               100 (40 dB)" in out


def test_example_band_stop_file():
    result = run("-s", str(EXAMPLES / "mains_hum_notch.toml"), "--json")
    assert result.exit_code == 0
    d = json.loads(result.stdout)["system"]
    assert d["name"] == "mains hum notch" and d["order"] == 4


BAD_INPUTS = [
    (["-s", "1/(s+1))"], "column 8: unexpected ')'"),
    (["-s", "1/(s+"], "column 6: unexpected end of text"),
    (["-s", "1/(z+1)"], "unknown name 'z'"),
    (["-s", "2^s/(s+1)"], "s in an exponent"),
    (["-s", "1/(s-s)"], "division by the zero polynomial"),
    (["-s", "1/()"], "column 4: unexpected ')'"),
    (["--numerator", "1", "--denominator", ""], "denominator is empty"),
    (["--numerator", "1", "--denominator", "0, 0, 0"], "denominator is empty or all zero"),
    (["--numerator", "0, 0", "--denominator", "1, 1"], "numerator is empty or all zero"),
    (["--numerator", "1e999", "--denominator", "1, 1"], "out of range"),
    (["--numerator", "nan", "--denominator", "1, 1"], "unknown name 'nan'"),
    (["--ode-a", "0, 0", "--ode-b", "1"], "output-side coefficients a are empty"),
    (["-s", "y'' + 3y' + 2y"], "no '='"),
    (["-s", "x'' = 2x"], "no output variable y"),
    (["-s", "s^2/(s+1)"], "not realizable as a causal filter"),
    (["-s", "y' + y = x''"], "not realizable as a causal filter"),
    (["-s", "1/(s+1)^61"], "above the limit of 60"),
    (["--design", "butterworth lowpass order=61 cutoff_hz=1k"], "order must be 1..60"),
    (["--design", "butterworth lowpass order=4 cutoff_hz=0"], "above 0 Hz"),
    (["--design", "butterworth lowpass order=4 cutoff_hz=-1k"], "above 0 Hz"),
    (["--design", "chebby lowpass order=4 cutoff_hz=1k"], "unknown filter family"),
    (["--zeros", "-1+2j", "--poles", "-1,-2,-3"], "conjugate"),
    ([], "no system given"),
    (["-s", "1/(s+1)", "--design", "butterworth order=2 cutoff_hz=1"], "one form only"),
    (["-s", "nowhere.toml"], "nowhere.toml not found"),
    (["-s", "1/(s+1)", "--dead-time", "-1"], ">= 0 seconds"),
    (["-s", "1/(s+1)", "--at-hz", "-5"], "--at-hz"),
]


@pytest.mark.parametrize("args, fragment", BAD_INPUTS, ids=[" ".join(a) for a, _ in BAD_INPUTS])
def test_bad_input_is_one_line_error_exit_2(args, fragment):
    result = run(*args)
    assert result.exit_code == 2
    assert isinstance(result.exception, SystemExit)
    assert result.stdout == ""
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1, result.stderr
    assert lines[0].startswith("Error: ")
    assert fragment in lines[0]
    assert "Traceback" not in result.output


def test_bad_system_file_names_the_file_and_key(tmp_path):
    p = tmp_path / "front.toml"
    p.write_text('name = "x"\n[zpk]\npoles = [-1]\ngian = 2\n')
    result = run("-s", str(p))
    assert result.exit_code == 2
    assert result.stderr.startswith(f"Error: {p}, zpk: unknown key 'gian'")


def test_cancellation_is_a_plain_warning_line_and_a_note():
    result = run("-s", "(s+1)/((s+1)(s+2))")
    assert result.exit_code == 0
    assert result.stderr.strip().splitlines() == [
        "Warning: zero -1 and pole -1 (nearly) cancel; simwave keeps both (nothing is cancelled)"]
    assert "note: zero -1 and pole -1 (nearly) cancel; both are kept" in result.stdout
    assert "order                 2" in result.stdout  # nothing cancelled


@pytest.mark.parametrize("text, want_hz", [
    # a first-order lag's -3 dB point is its corner, 1/(2 pi tau) (Ogata, Modern Control
    # Engineering, 5th ed., ch. 7), at the ends of float64's range too
    ("1/(1e-300*s + 1)", 1e300 / (2 * math.pi)),
    # (s + a)/(s + 1), a near float64's largest: |H| = sqrt(w^2 + a^2)/sqrt(w^2 + 1) falls to
    # a/sqrt(2) at w = 1 to within 1/a (the grid's span a*1e4/1e-4 overflowed as a ratio)
    ("(s+1.797693134862316e+300)/(s+1)", 1 / (2 * math.pi)),
])
def test_bandwidth_of_extreme_corners(text, want_hz):
    d = System.parse(text).to_dict()
    assert d["bandwidth_3db_hz"] == pytest.approx(want_hz, rel=1e-9)
