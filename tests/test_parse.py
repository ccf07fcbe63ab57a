"""The system-text parser: numbers, grammar, ODE text, errors, and cross-checks against sympy."""

from __future__ import annotations

import math
import random
import warnings

import numpy as np
import pytest
import sympy as sp
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from simwave import System
from simwave.errors import ParseError, SimwaveError
from simwave.model.parse import parse_complex, parse_number, parse_system_text


def coeffs(text: str) -> tuple[np.ndarray, np.ndarray]:
    r = parse_system_text(text)
    return r.num, r.den


# ----------------------------------------------------------------------------- numbers
@pytest.mark.parametrize(
    "text, value",
    [
        # SI prefixes as defined by the BIPM, The International System of Units, 9th ed.
        # (2019), table 7: f 1e-15, p 1e-12, n 1e-9, micro 1e-6, m 1e-3, k 1e3, M 1e6,
        # G 1e9, T 1e12.
        ("1f", 1e-15), ("3p", 3e-12), ("2.2n", 2.2e-9), ("4.7u", 4.7e-6),
        ("4.7\u00b5", 4.7e-6), ("4.7\u03bc", 4.7e-6), ("1m", 1e-3), ("1k", 1e3),
        ("10M", 10e6), ("2G", 2e9), ("1T", 1e12), ("1e-3", 1e-3), ("1.5E3", 1500.0),
        (".5", 0.5), ("2.", 2.0), ("1e3k", 1e6),
    ],
)
def test_engineering_suffixes(text, value):
    assert parse_number(text) == pytest.approx(value, rel=1e-15)


def test_milli_and_mega_are_different():
    assert parse_number("1m") == 1e-3
    assert parse_number("1M") == 1e6


def test_constants_and_functions():
    assert parse_number("pi") == math.pi
    assert parse_number("2pi") == 2 * math.pi  # 2p would be 2 pico; 2pi is 2*pi
    assert parse_number("2p") == 2e-12
    assert parse_number("sqrt(2)") == math.sqrt(2)
    assert parse_number("exp(1)") == math.e
    assert parse_number("2*pi*50") == 2 * math.pi * 50
    assert parse_number("10^-3") == pytest.approx(1e-3, rel=1e-15)


@pytest.mark.parametrize(
    "text, value",
    [("-1+2j", -1 + 2j), ("-1-2j", -1 - 2j), ("3j", 3j), ("-j", -1j), ("1k+2kj", 1e3 + 2e3j),
     ("1e-3-1e-3j", 1e-3 - 1e-3j), ("-4.7", -4.7), (" -1 + 2j ", -1 + 2j)],
)
def test_complex_numbers(text, value):
    assert parse_complex(text) == value


# ----------------------------------------------------------------------------- grammar
@pytest.mark.parametrize(
    "text, num, den",
    [
        ("1/(s+1)", [1], [1, 1]),
        ("2^3^2", [512], [1]),            # ^ is right-associative: 2^(3^2)
        ("2**3", [8], [1]),
        ("-s^2", [-1, 0, 0], [1]),        # unary minus applies after the power
        ("s^-1", [1], [1, 0]),            # a negative exponent divides
        ("1/2s", [1], [2, 0]),            # juxtaposition binds tighter than /
        ("1/(s+1)(s+2)", [1], [1, 3, 2]),
        ("1/2*s", [0.5, 0], [1]),         # explicit * and / go left to right
        ("2s + 3", [2, 3], [1]),
        ("(s+1)(s-1)", [1, 0, -1], [1]),
        ("s^2(s+1)", [1, 1, 0, 0], [1]),  # the exponent takes no juxtaposition
        ("s/2 + s/3", [5 / 6, 0], [1]),
        ("2 \u2212 s", [-1, 2], [1]),     # the Unicode minus sign is a minus
    ],
)
def test_grammar(text, num, den):
    n, d = coeffs(text)
    np.testing.assert_allclose(n, num, rtol=1e-15)
    np.testing.assert_allclose(d, den, rtol=1e-15)


def test_examples_from_the_issue():
    w = 2 * math.pi * 1e3
    n, d = coeffs("2*pi*1k/(s + 2*pi*1k)")
    np.testing.assert_allclose(n, [w], rtol=1e-15)
    np.testing.assert_allclose(d, [1, w], rtol=1e-15)
    n, d = coeffs("(s^2 + 4e6)/((s+100)*(s^2 + 300*s + 4e6))")
    np.testing.assert_allclose(n, [1, 0, 4e6], rtol=1e-15)
    # (s + 100)(s^2 + 300 s + 4e6) = s^3 + 400 s^2 + 4.03e6 s + 4e8, expanded by hand.
    np.testing.assert_allclose(d, [1, 400, 4.03e6, 4e8], rtol=1e-15)


def test_nothing_is_cancelled():
    n, d = coeffs("(s+1)/(s+1)")
    np.testing.assert_array_equal(n, [1, 1])
    np.testing.assert_array_equal(d, [1, 1])


def test_dead_time_factor():
    r = parse_system_text("exp(-2m*s)/(s+1)")
    assert r.delay_s == pytest.approx(2e-3, rel=1e-15)
    assert parse_system_text("exp(-s*1.5)*exp(-0.5*s)*2/(s+1)").delay_s == 2.0
    assert parse_system_text("10/(s+10)*exp(-s*10u)").delay_s == pytest.approx(1e-5)


# ----------------------------------------------------------------------------- ODE text
def test_ode_prime_notation():
    r = parse_system_text("y'' + 3y' + 2y = 2x' + x")
    assert r.kind == "ode"
    np.testing.assert_array_equal(r.den, [1, 3, 2])
    np.testing.assert_array_equal(r.num, [2, 1])
    np.testing.assert_array_equal(r.ode[0], [1, 3, 2])
    np.testing.assert_array_equal(r.ode[1], [2, 1])


@pytest.mark.parametrize(
    "text, a, b",
    [
        ("y''' + 6y'' + 11y' + 6y = 6x", [1, 6, 11, 6], [6]),
        ("y^(3) + 6y^(2) + 11y^(1) + 6y^(0) = 6x", [1, 6, 11, 6], [6]),
        ("(1/(1k*1u)) * x = y' + (1/(1k*1u)) * y", [1, 1e3], [1e3]),  # RC low-pass, RC = 1 ms
        ("2y' = x - 3y", [2, 3], [1]),                               # terms on either side
        ("y' + y - x' = x", [1, 1], [1, 1]),
        ("-(y' + y) = -x", [1, 1], [1]),
        ("y'/2 + y = x", [0.5, 1], [1]),
    ],
)
def test_ode_forms(text, a, b):
    r = parse_system_text(text)
    np.testing.assert_allclose(r.ode[0], a, rtol=1e-15)
    np.testing.assert_allclose(r.ode[1], b, rtol=1e-15)


# ----------------------------------------------------------------------------- errors
@pytest.mark.parametrize(
    "text, fragment",
    [
        ("1/(s+1))", "column 8: unexpected ')'"),
        ("1/(s+))", "column 6: unexpected ')'"),
        ("1/(s+", "column 6: unexpected end of text"),
        ("2 3", "column 3: unexpected '3'"),
        ("1 $ 2", "column 3: unexpected character '$'"),
        ("1/(z+1)", "unknown name 'z'"),
        ("1ms", "unknown name 'ms'"),
        ("2^s", "s in an exponent"),
        ("1/(s-s)", "division by the zero polynomial"),
        ("1/0", "division by zero"),
        ("s^0.5", "whole number"),
        ("(s+1)^1000", "degree above"),
        ("1e999", "out of range"),
        ("exp(s)", "time advance"),
        ("exp(-s^2)", "exp() takes"),
        ("(s+1)/exp(-s)", "time advance"),
        ("1/(s+1) + exp(-s)", "must multiply the whole H(s)"),
        ("sqrt(s)", "sqrt() takes a constant"),
        ("0", "identically zero"),
        ("", "empty"),
        ("   ", "empty"),
        ("y'' + y", "no '='"),
        ("x' = x", "no output variable y"),
        ("y' + y = 0", "no input variable x"),
        ("y' + y = x + 1", "constant term"),
        ("y*y = x", "linear"),
        ("y^2 = x", "not linear"),
        ("y/y' = x", "linear"),
        ("y' + y = s*x", "s does not belong"),
        ("(y+1)' = x", "applies only to y or x"),
        ("y = x = y", "unexpected '='"),
        ("s'", "derivative"),
        ("(" * 60 + "1" + ")" * 60, "nested more than"),
        ("-" * 100 + "1", "nested more than"),
    ],
)
def test_errors_name_the_problem(text, fragment):
    with pytest.raises(ParseError) as info:
        parse_system_text(text)
    msg = str(info.value)
    assert fragment in msg
    assert "\n" not in msg


def test_unknown_name_lists_known_names():
    with pytest.raises(ParseError, match="known: s, pi, exp, sqrt"):
        parse_system_text("1/(RC*s+1)")


def test_never_evaluates_python():
    # Text that Python would run is just an unknown name here.
    with pytest.raises(ParseError):
        parse_system_text("__import__('os').getcwd()")


# ----------------------------------------------------------------------------- sympy cross-check
S = sp.Symbol("s")


class _Gen:
    """Random expression trees printed in our syntax, with the same tree built in sympy.

    Precedences: sum 1, product 2, juxtaposition 2.5, unary minus 3, power 4, atom 5.
    """

    def __init__(self, rng: random.Random, polynomial_only: bool):
        self.rng = rng
        self.poly = polynomial_only

    def number(self):
        r = self.rng.random()
        if r < 0.5:
            k = self.rng.randint(1, 9)
            return str(k), sp.Integer(k), 5
        if r < 0.7:
            k = self.rng.randint(1, 99)
            return f"{k / 10:g}", sp.Rational(k, 10), 5
        if r < 0.85:
            k = self.rng.randint(1, 99)
            suffix, scale = self.rng.choice(
                [("k", sp.Integer(1000)), ("m", sp.Rational(1, 1000)), ("u", sp.Rational(1, 10**6))]
            )
            return f"{k / 10:g}{suffix}", sp.Rational(k, 10) * scale, 5
        return "pi", sp.pi, 5

    def wrap(self, item, need):
        text, expr, prec = item
        if prec < need or self.rng.random() < 0.1:
            return f"({text})", expr, 5
        return text, expr, prec

    def expr(self, depth):
        if depth == 0 or self.rng.random() < 0.25:
            return ("s", S, 5) if self.rng.random() < 0.5 else self.number()
        kind = self.rng.choice(["+", "-", "*", "/", "^", "neg", "juxt"])
        if kind == "/" and self.poly:
            kind = "*"
        if kind in "+-":
            a = self.wrap(self.expr(depth - 1), 1)
            b = self.wrap(self.expr(depth - 1), 2)
            return f"{a[0]} {kind} {b[0]}", (a[1] + b[1] if kind == "+" else a[1] - b[1]), 1
        if kind in "*/":
            a = self.wrap(self.expr(depth - 1), 2)
            b = self.wrap(self.expr(depth - 1), 2.5)
            return f"{a[0]}{kind}{b[0]}", (a[1] * b[1] if kind == "*" else a[1] / b[1]), 2
        if kind == "^":
            k = self.rng.randint(0, 3) if self.poly else self.rng.randint(-2, 3)
            a = self.wrap(self.expr(depth - 1), 5)
            return f"{a[0]}^{k}" if k >= 0 else f"{a[0]}^({k})", a[1] ** k, 4
        if kind == "neg":
            a = self.wrap(self.expr(depth - 1), 3)
            return f"-{a[0]}", -a[1], 3
        # juxtaposition: a number directly followed by s or a parenthesized expression
        n = self.number()
        if self.rng.random() < 0.5:
            # 'pis' or '4.7ks' would read as one (unknown) name: a space separates them.
            gap = " " if n[0][-1].isalpha() else ""
            return f"{n[0]}{gap}s", n[1] * S, 2.5
        a = self.expr(depth - 1)
        return f"{n[0]}({a[0]})", n[1] * a[1], 2.5


def _close(x: np.ndarray, y: np.ndarray) -> bool:
    n = max(x.size, y.size)
    x = np.concatenate([np.zeros(n - x.size), x])
    y = np.concatenate([np.zeros(n - y.size), y])
    scale = max(np.max(np.abs(x)), np.max(np.abs(y)), 1e-300)
    return bool(np.all(np.abs(x - y) <= 1e-10 * scale))


def _sympy_coeffs(poly_expr) -> np.ndarray:
    return np.array([float(c) for c in sp.Poly(poly_expr, S).all_coeffs()], dtype=float)


def test_polynomials_match_sympy_poly():
    # Reference: sympy.Poly(expr, s).all_coeffs() of the same expression tree, exact arithmetic.
    rng = random.Random(20240611)
    gen = _Gen(rng, polynomial_only=True)
    compared = 0
    for _ in range(150):
        text, expr, _ = gen.expr(4)
        expanded = sp.expand(expr)
        if expanded == 0:
            with pytest.raises(ParseError, match="identically zero"):
                parse_system_text(text)
            continue
        num, den = coeffs(text)
        np.testing.assert_allclose(den, [1.0], err_msg=text)
        ref = _sympy_coeffs(expanded)
        assert _close(num, ref), f"{text}: {num} vs sympy {ref}"
        compared += 1
    assert compared > 100


def test_rational_expressions_match_sympy():
    # Reference: sympy's cancel() of the same expression gives P/Q; our uncancelled N/D must
    # satisfy N*Q == D*P coefficient by coefficient.
    rng = random.Random(77)
    gen = _Gen(rng, polynomial_only=False)
    compared = 0
    for _ in range(150):
        text, expr, _ = gen.expr(4)
        if expr.has(sp.zoo, sp.nan, sp.oo):
            continue
        p, q = sp.fraction(sp.cancel(sp.together(expr)))
        try:
            num, den = coeffs(text)
        except ParseError as exc:
            # Only division by zero or an identically zero result may stop the parser here.
            assert ("division by" in str(exc)) or ("identically zero" in str(exc)), text
            continue
        pc, qc = _sympy_coeffs(p), _sympy_coeffs(q)
        assert _close(np.convolve(num, qc), np.convolve(den, pc)), f"{text}"
        compared += 1
    assert compared > 100


# ------------------------------------------------------------------ never another exception
ALPHABET = "0123456789.+-*/^()=' spiexyjkmuMGnTf_\u00b5\u2212,\t"


def _parse_or_error(text: str) -> None:
    # Random texts may describe systems simwave warns about (e.g. a pole and zero that
    # cancel); those are simwave's own warnings. Anything else (a raw numpy warning) fails.
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            result = System.parse(text)
        except SimwaveError as exc:
            assert str(exc)
            result = None
    assert result is None or isinstance(result, System)
    for w in caught:
        assert w.category.__module__.startswith("simwave."), (text, w.category, w.message)


@settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.text(alphabet=ALPHABET, max_size=40))
def test_any_text_over_the_grammar_alphabet_gives_system_or_error(text):
    _parse_or_error(text)


@settings(max_examples=200, deadline=None)
@given(st.text(max_size=40))
def test_any_text_at_all_gives_system_or_error(text):
    _parse_or_error(text)


_atoms = st.sampled_from(["s", "1", "2.5k", "pi", "y", "x", "y'", "x''", "1e300", "0", "1n"])
_exprs = st.recursive(
    _atoms,
    lambda inner: st.one_of(
        st.tuples(inner, st.sampled_from(["+", "-", "*", "/", "^", "", "="]), inner).map(
            lambda t: f"{t[0]}{t[1]}{t[2]}"),
        inner.map(lambda e: f"({e})"),
        inner.map(lambda e: f"exp(-{e})"),
        inner.map(lambda e: f"-{e}"),
    ),
    max_leaves=12,
)


@settings(max_examples=300, deadline=None)
@given(_exprs)
def test_any_grammar_shaped_text_gives_system_or_error(text):
    _parse_or_error(text)
