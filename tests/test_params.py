"""Named parameters in system text, their values, tolerances and the --set option."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from click.testing import CliRunner

from simwave.cli import main
from simwave.errors import ParseError, SimwaveError
from simwave.model.params import parse_assignment, parse_parameter
from simwave.model.parse import parameter_names, parse_number, parse_system_text, parse_tree
from simwave.model.system import System


# ----------------------------------------------------------------------------- text with names
def test_rc_section_from_its_components():
    # First-order RC low-pass: H(s) = 1/(RCs + 1) (Ogata, Modern Control Engineering,
    # 5th ed., sec. 2-5, electrical circuits; section number from memory).
    R, C = 10e3, 100e-9
    p = parse_system_text("1/(R*C*s + 1)", values={"R": R, "C": C})
    assert np.array_equal(p.den, np.array([R * C, 1.0]))
    assert np.array_equal(p.num, np.array([1.0]))


def test_series_rlc_from_components_matches_sympy():
    # Series RLC, output across C: H(s) = 1/(LCs^2 + RCs + 1); checked against sympy's
    # own expansion of the same rational function.
    sympy = pytest.importorskip("sympy")
    s, R, L, C = sympy.symbols("s R L C")
    vals = {"R": 47.0, "L": 10e-3, "C": 1e-6}
    expr = sympy.together(1 / (s * L / (1 / (s * C)) + s * R * C + 1))
    num, den = sympy.fraction(expr)
    sub = {R: vals["R"], L: vals["L"], C: vals["C"]}
    den_c = [float(c) for c in sympy.Poly(den.subs(sub), s).all_coeffs()]
    num_c = [float(c) for c in sympy.Poly(num.subs(sub), s).all_coeffs()]
    p = parse_system_text("1/(s*L/(1/(s*C)) + s*R*C + 1)", values=vals)
    np.testing.assert_allclose(p.den / p.den[0], np.array(den_c) / den_c[0], rtol=1e-14)
    np.testing.assert_allclose(p.num / p.den[0], np.array(num_c) / den_c[0], rtol=1e-14)


def test_ode_text_with_parameters():
    sys = System.parse("L*C*y'' + R*C*y' + y = x", parameters={"R": 47, "L": "10m", "C": "1u"})
    np.testing.assert_allclose(sys.den / sys.den[0], [1.0, 47 / 10e-3, 1 / (10e-3 * 1e-6)],
                               rtol=1e-14)
    assert sys.ode is not None


def test_pi_s_and_functions_keep_their_meaning():
    p = parse_system_text("w0/(s + w0) * exp(-T*s)", values={"w0": 2 * math.pi * 50, "T": 1e-3})
    assert p.delay_s == 1e-3
    np.testing.assert_allclose(p.den, [1.0, 2 * math.pi * 50])
    assert parse_number("sqrt(k)*pi", values={"k": 4.0}) == 2 * math.pi


def test_parameter_names_in_order_of_appearance():
    assert parameter_names(parse_tree("1/(R2*C*s + R1/R2)")) == ["R2", "C", "R1"]
    assert parameter_names(parse_tree("y' + a*y = b*x")) == ["a", "b"]


def test_a_name_without_value_is_an_error_naming_it():
    with pytest.raises(ParseError) as info:
        parse_system_text("1/(R*C*s + 1)", values={"R": 1.0})
    msg = str(info.value)
    assert "'C'" in msg and "--set C=VALUE" in msg and "column 6" in msg
    assert "\n" not in msg


def test_unused_parameter_is_refused():
    with pytest.raises(SimwaveError, match="parameter Rx not used"):
        System.parse("1/(R*s+1)", parameters={"R": 1, "Rx": 2})


@pytest.mark.parametrize("name", ["s", "pi", "exp", "sqrt", "x", "y", "2R", "R-1", ""])
def test_reserved_or_malformed_names_are_refused(name):
    with pytest.raises(ParseError):
        parse_parameter(name, 1.0)


# ----------------------------------------------------------------------------- tolerances
@pytest.mark.parametrize("text, nominal, kind, amount, dist, sigmas", [
    ("10k", 1e4, None, None, None, None),
    ("10k ±1%", 1e4, "relative", 0.01, "uniform", None),
    ("10k +-1%", 1e4, "relative", 0.01, "uniform", None),
    ("10k +/- 1 %", 1e4, "relative", 0.01, "uniform", None),
    ("100n ±5% normal", 1e-7, "relative", 0.05, "normal", 3.0),
    ("100n ±5% normal 2sigma", 1e-7, "relative", 0.05, "normal", 2.0),
    ("100n ±5% normal 2.5 σ", 1e-7, "relative", 0.05, "normal", 2.5),
    ("2.5 ±0.1", 2.5, "absolute", 0.1, "uniform", None),
    ("4.7u ±100n uniform", 4.7e-6, "absolute", 1e-7, "uniform", None),
    ("10M ±50ppm", 1e7, "relative", 50e-6, "uniform", None),
])
def test_tolerance_texts(text, nominal, kind, amount, dist, sigmas):
    p = parse_parameter("X", text)
    assert p.nominal == pytest.approx(nominal, rel=1e-15)
    if kind is None:
        assert p.tolerance is None
        return
    t = p.tolerance
    assert (t.kind, t.distribution, t.sigmas) == (kind, dist, sigmas)
    assert t.amount == pytest.approx(amount, rel=1e-15)
    lo, hi = t.limits(p.nominal)
    half = amount * nominal if kind == "relative" else amount
    assert (lo, hi) == (pytest.approx(nominal - half, rel=1e-15),
                        pytest.approx(nominal + half, rel=1e-15))
    if dist == "normal":
        assert t.sigma(p.nominal) == pytest.approx(half / sigmas, rel=1e-15)


@pytest.mark.parametrize("text, fragment", [
    ("10k ±", "no tolerance"),
    ("±1%", "no nominal"),
    ("10k ±-1%", "must be > 0"),
    ("10k ±1% lognormal", "unknown distribution"),
    ("10k ±1% normal 3", "3sigma"),
    ("10k ±1% ±2%", "more than one"),
    ("0 ±1%", "zero nominal"),
    ("10q", "parameter R"),
])
def test_bad_tolerance_texts(text, fragment):
    with pytest.raises(ParseError) as info:
        parse_parameter("R", text)
    assert fragment in str(info.value)


def test_assignment():
    assert parse_assignment("R = 12k") == ("R", "12k")
    with pytest.raises(ParseError, match="NAME=VALUE"):
        parse_assignment("R12k")


# ----------------------------------------------------------------------------- files and CLI
RC_FILE = '''name = "rc"
expression = "1/(R*C*s + 1)"
[parameters]
R = "10k ±1%"
C = "100n ±5%"
'''


def test_system_file_parameters_and_set_override(tmp_path):
    path = tmp_path / "rc.toml"
    path.write_text(RC_FILE, encoding="utf-8")
    r = CliRunner().invoke(main, ["inspect", "-s", str(path), "--set", "R=12k", "--json"])
    assert r.exit_code == 0, r.output
    d = json.loads(r.output)["system"]
    params = {p["name"]: p for p in d["parameters"]}
    assert params["R"]["nominal"] == 12e3
    # An override without a tolerance keeps the file's tolerance class.
    assert params["R"]["tolerance"]["amount"] == 0.01
    assert params["R"]["tolerance"]["low"] == pytest.approx(12e3 * 0.99, rel=1e-15)
    tau = 12e3 * 100e-9
    assert d["poles_rad_s"][0]["re"] == pytest.approx(-1 / tau, rel=1e-14)
    r = CliRunner().invoke(main, ["inspect", "-s", str(path)])
    assert "parameter R" in r.output and "band 9900 to 1.01e+04, uniform" in r.output


def test_cli_set_errors_are_one_line(tmp_path):
    r = CliRunner().invoke(main, ["inspect", "-s", "1/(R*C*s+1)", "--set", "R=1k"])
    assert r.exit_code == 2 and r.output.startswith("Error: ") and "'C'" in r.output
    r = CliRunner().invoke(main, ["inspect", "--poles", "-1", "--set", "R=1k"])
    assert r.exit_code == 2 and "--set" in r.output
    r = CliRunner().invoke(main, ["inspect", "-s", "1/(R*s+1)", "--set", "R=1", "--set", "R=2"])
    assert r.exit_code == 2 and "twice" in r.output
    bad = tmp_path / "bad.toml"
    bad.write_text('design = { family = "butterworth", order = 2, cutoff_hz = 1 }\n'
                   '[parameters]\nR = 1\n', encoding="utf-8")
    r = CliRunner().invoke(main, ["inspect", "-s", str(bad)])
    assert r.exit_code == 2 and "not to the design form" in r.output


@pytest.mark.parametrize("text, decimal", [
    ("6.8n", "6.8e-9"), ("4.7u", "4.7e-6"), ("8.2n", "8.2e-9"), ("0.1m", "0.1e-3"),
    ("2.2M", "2.2e6"), ("3.3p", "3.3e-12"), ("1.1k", "1.1e3"), ("12e-3k", "12e-3e3"),
])
def test_suffixed_numbers_are_the_nearest_double(text, decimal):
    # Python's float() of the decimal text is correctly rounded (IEEE 754-2008, sec. 5.12):
    # a suffixed number must be that same double, not mantissa * 10^k rounded twice.
    from decimal import Decimal

    mant, _, exp = decimal.rpartition("e")
    expect = float(Decimal(mant) * Decimal(10) ** int(exp)) if "e" in mant else float(decimal)
    assert parse_number(text) == expect


def test_batch_systems_take_parameters(tmp_path):
    from simwave.batch import load_description
    from simwave.batch.plan import build_system

    desc = tmp_path / "b.toml"
    desc.write_text('[systems.rc]\nexpression = "1/(R*C*s + 1)"\n'
                    'parameters = { R = "10k ±1%", C = "100n" }\n'
                    '[[inputs]]\nsignal = "step:rate=10k,duration=10m,time=1m"\nname = "step"\n',
                    encoding="utf-8")
    plan = load_description(str(desc))
    system = build_system(plan.systems[0].definition)
    assert system.poles[0] == pytest.approx(-1 / (10e3 * 100e-9), rel=1e-14)
    assert system.parameters["R"].tolerance.amount == 0.01
