"""Safe reader for system text: H(s) expressions and linear ODEs in prime notation.

A hand-written tokenizer and recursive-descent parser over a fixed grammar; user
text is never passed to ``eval``, ``exec`` or the ``ast`` module.

Grammar (``=`` only in ODE text; juxtaposition is implicit multiplication)::

    text      := sum [ '=' sum ] END
    sum       := [sign] product { ('+' | '-') product }    (sign: '+' or '-')
    product   := factor { ('*' | '/') factor }
    factor    := ('+' | '-') factor | juxtapose
    juxtapose := power { power }          (only when the next token is a name or '(')
    power     := primed [ ('^' | '**') exponent ]
    exponent  := ('+' | '-') exponent | power       (right-associative)
    primed    := atom { "'" }
    atom      := NUMBER | NAME | FUNC '(' sum ')' | '(' sum ')'

A NAME other than ``s``, ``pi``, the functions and (in ODE text) ``y`` and ``x`` is a
parameter: its value comes from the ``values`` mapping given to the evaluator
(a system file's ``[parameters]`` table, ``--set R=12k``); a name without a value
is an error naming it.

Juxtaposition binds tighter than ``*`` and ``/``, the way products are written
on paper: ``1/2s`` is 1/(2s) and ``1/(s+1)(s+2)`` is 1/((s+1)(s+2)).

An H(s) expression evaluates to a ratio of two polynomials in s (float64,
descending powers), with nothing cancelled, times an optional dead-time factor
``exp(-s*T)``. ODE text ``lhs = rhs`` is linear in the output ``y``, the input
``x`` and their derivatives (``y'``, ``y''``, ... or ``y^(3)``); it becomes
A(s) Y(s) = B(s) X(s) with zero initial conditions, so H(s) = B(s)/A(s).

References
----------
.. [1] N. Wirth, *Compiler Construction*, Addison-Wesley, 1996, ch. 3-4
       (recursive-descent parsing of an expression grammar).
.. [2] K. Ogata, *Modern Control Engineering*, 5th ed., sec. 2-2: transfer
       function of a linear differential equation with zero initial conditions.

Chapter and section numbers in these references are quoted from memory.
"""

from __future__ import annotations

import math
from decimal import Decimal
from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np

from simwave.errors import ParseError
from simwave.units import SI_PREFIXES

#: Engineering (SI prefix) suffixes on numbers. ``m`` is milli, ``M`` is mega.
SUFFIXES: dict[str, float] = SI_PREFIXES

#: Names the H(s) grammar knows.
EXPRESSION_NAMES = ("s", "pi", "exp", "sqrt")
#: Extra names in ODE text: output y, input x.
ODE_NAMES = ("y", "x")
FUNCTIONS = ("exp", "sqrt")

#: Longest text accepted (characters).
MAX_TEXT = 10_000
#: Deepest nesting of parentheses, signs, exponents and calls.
MAX_DEPTH = 40
#: Highest polynomial degree allowed while evaluating (the final order limit is lower).
MAX_WORK_DEGREE = 240


# ----------------------------------------------------------------------------- tokens
@dataclass(frozen=True)
class Token:
    kind: str  # "num", "name", "op", "end"
    text: str
    pos: int  # 0-based offset into the text
    value: float = 0.0


_DIGITS = frozenset("0123456789")  # ASCII only: str.isdigit() also accepts '²' and the like
_OPS_1 = {"+", "-", "*", "/", "^", "(", ")", "=", "'"}
_UNICODE_OPS = {"\u2212": "-", "\u00d7": "*", "\u00b7": "*"}  # minus sign, times, middle dot


def _where(text: str, pos: int) -> str:
    """'column C' (or 'line L, column C' for multi-line text), 1-based."""
    line = text.count("\n", 0, pos) + 1
    col = pos - (text.rfind("\n", 0, pos) + 1) + 1
    return f"column {col}" if line == 1 else f"line {line}, column {col}"


def _quote(text: str) -> str:
    flat = " ".join(text.split())
    return flat if len(flat) <= 60 else flat[:57] + "..."


def _fail(text: str, pos: int, problem: str) -> ParseError:
    return ParseError(f'{_where(text, pos)}: {problem} (in "{_quote(text)}")')


def tokenize(text: str) -> list[Token]:
    """Split system text into tokens; numbers carry their value (suffix applied)."""
    tokens: list[Token] = []
    i, n = 0, len(text)
    while i < n:
        c = text[i]
        if c.isspace():
            i += 1
            continue
        if c in _DIGITS or (c == "." and i + 1 < n and text[i + 1] in _DIGITS):
            j = i
            while j < n and text[j] in _DIGITS:
                j += 1
            if j < n and text[j] == ".":
                j += 1
                while j < n and text[j] in _DIGITS:
                    j += 1
            if j < n and text[j] in "eE":
                k = j + 1
                if k < n and text[k] in "+-":
                    k += 1
                if k < n and text[k] in _DIGITS:
                    while k < n and text[k] in _DIGITS:
                        k += 1
                    j = k
            mantissa = text[i:j]
            scale = 1.0
            # A suffix letter counts only when no further letter follows: 2p is 2e-12,
            # but 2pi is 2*pi.
            if j < n and text[j] in SUFFIXES and not (j + 1 < n and _is_name_char(text[j + 1])):
                scale = SUFFIXES[text[j]]
                j += 1
            # The decimal value, rounded once: 6.8n is the double nearest 6.8e-9
            # (float("6.8") * 1e-9 would round twice and miss it by an ulp).
            value = float(mantissa) if scale == 1.0 else float(
                Decimal(mantissa).scaleb(round(math.log10(scale))))
            if not math.isfinite(value):
                raise _fail(text, i, f"number {text[i:j]} is out of range")
            tokens.append(Token("num", text[i:j], i, value))
            i = j
            continue
        if _is_name_start(c):
            j = i + 1
            while j < n and _is_name_char(text[j]):
                j += 1
            tokens.append(Token("name", text[i:j], i))
            i = j
            continue
        if text.startswith("**", i):
            tokens.append(Token("op", "^", i))
            i += 2
            continue
        if c in _OPS_1 or c in _UNICODE_OPS:
            tokens.append(Token("op", _UNICODE_OPS.get(c, c), i))
            i += 1
            continue
        raise _fail(text, i, f"unexpected character {c!r}")
    tokens.append(Token("end", "", n))
    return tokens


def _is_name_start(c: str) -> bool:
    return c.isascii() and (c.isalpha() or c == "_")


def _is_name_char(c: str) -> bool:
    return c.isascii() and (c.isalnum() or c == "_")


# ----------------------------------------------------------------------------- syntax tree
@dataclass(frozen=True)
class Num:
    value: float
    pos: int


@dataclass(frozen=True)
class Name:
    name: str
    pos: int


@dataclass(frozen=True)
class Call:
    func: str
    arg: Node
    pos: int


@dataclass(frozen=True)
class Neg:
    operand: Node
    pos: int


@dataclass(frozen=True)
class Chain:
    """Left-to-right chain: ``kind`` 'sum' (ops '+'/'-') or 'product' (ops '*'/'/').

    Chains instead of nested binary nodes keep long sums and products flat, so the
    evaluator's recursion depth is the nesting depth, not the number of terms.
    """

    kind: str
    items: tuple[tuple[str, Node, int], ...]  # (op, node, position of op)


@dataclass(frozen=True)
class Pow:
    base: Node
    exponent: Node
    pos: int
    parenthesized: bool  # exponent written in parentheses: y^(3) is a derivative


@dataclass(frozen=True)
class Primed:
    operand: Node
    count: int
    pos: int


@dataclass(frozen=True)
class Equation:
    lhs: Node
    rhs: Node
    pos: int


Node = Num | Name | Call | Neg | Chain | Pow | Primed


class _Parser:
    def __init__(self, text: str):
        self.text = text
        self.tokens = tokenize(text)
        self.i = 0
        self.depth = 0

    # helpers
    @property
    def tok(self) -> Token:
        return self.tokens[self.i]

    def at(self, *ops: str) -> bool:
        return self.tok.kind == "op" and self.tok.text in ops

    def advance(self) -> Token:
        t = self.tok
        self.i += 1
        return t

    def unexpected(self, expected: str = "") -> ParseError:
        t = self.tok
        what = "end of text" if t.kind == "end" else f"{t.text!r}"
        hint = f"; expected {expected}" if expected else ""
        return _fail(self.text, t.pos, f"unexpected {what}{hint}")

    def enter(self) -> None:
        self.depth += 1
        if self.depth > MAX_DEPTH:
            raise _fail(self.text, self.tok.pos, f"nested more than {MAX_DEPTH} levels deep")

    def leave(self) -> None:
        self.depth -= 1

    # grammar
    def parse(self) -> Node | Equation:
        lhs = self.sum()
        if self.at("="):
            eq = self.advance()
            rhs = self.sum()
            if self.tok.kind != "end":
                raise self.unexpected("an operator or end of text")
            return Equation(lhs, rhs, eq.pos)
        if self.tok.kind != "end":
            raise self.unexpected("an operator or end of text")
        return lhs

    def sum(self) -> Node:
        items: list[tuple[str, Node, int]] = []
        first = self.product()
        items.append(("+", first, -1))
        while self.at("+", "-"):
            op = self.advance()
            items.append((op.text, self.product(), op.pos))
        return first if len(items) == 1 else Chain("sum", tuple(items))

    def product(self) -> Node:
        first = self.factor()
        items: list[tuple[str, Node, int]] = [("*", first, -1)]
        while self.at("*", "/"):
            op = self.advance()
            items.append((op.text, self.factor(), op.pos))
        return first if len(items) == 1 else Chain("product", tuple(items))

    def factor(self) -> Node:
        if self.at("+", "-"):
            op = self.advance()
            self.enter()
            operand = self.factor()
            self.leave()
            return Neg(operand, op.pos) if op.text == "-" else operand
        return self.juxtapose()

    def juxtapose(self) -> Node:
        first = self.power()
        items: list[tuple[str, Node, int]] = [("*", first, -1)]
        while self.tok.kind == "name" or self.at("("):
            pos = self.tok.pos
            items.append(("*", self.power(), pos))
        return first if len(items) == 1 else Chain("product", tuple(items))

    def power(self) -> Node:
        base = self.primed()
        if self.at("^"):
            op = self.advance()
            parenthesized = self.at("(")
            self.enter()
            exponent = self.exponent()
            self.leave()
            return Pow(base, exponent, op.pos, parenthesized)
        return base

    def exponent(self) -> Node:
        if self.at("+", "-"):
            op = self.advance()
            self.enter()
            operand = self.exponent()
            self.leave()
            return Neg(operand, op.pos) if op.text == "-" else operand
        return self.power()

    def primed(self) -> Node:
        node = self.atom()
        if self.at("'"):
            pos = self.tok.pos
            count = 0
            while self.at("'"):
                self.advance()
                count += 1
            return Primed(node, count, pos)
        return node

    def atom(self) -> Node:
        t = self.tok
        if t.kind == "num":
            self.advance()
            return Num(t.value, t.pos)
        if t.kind == "name":
            self.advance()
            if t.text in FUNCTIONS:
                if not self.at("("):
                    raise self.unexpected(f"'(' after {t.text}")
                self.advance()
                self.enter()
                arg = self.sum()
                self.leave()
                if not self.at(")"):
                    raise self.unexpected("')'")
                self.advance()
                return Call(t.text, arg, t.pos)
            # Any other name is a parameter: its value is looked up when evaluating.
            return Name(t.text, t.pos)
        if self.at("("):
            self.advance()
            self.enter()
            inner = self.sum()
            self.leave()
            if not self.at(")"):
                raise self.unexpected("')'")
            self.advance()
            return inner
        raise self.unexpected("a number, a name or '('")


def _unknown_name_message(text: str, name: str, pos: int) -> str:
    msg = (
        f"unknown name {name!r}: no parameter of that name has a value (give it under "
        f"[parameters] in a system file or with --set {name}=VALUE; "
        f"known: {', '.join(EXPRESSION_NAMES)}; in ODE text also y (output) and x (input))"
    )
    # A name glued to a number that starts with a suffix letter: 1ms, 2ks.
    if pos > 0 and text[pos - 1] in _DIGITS and name[0] in SUFFIXES:
        msg += f"; to scale by {name[0]!r} and multiply, write e.g. 1{name[0]}*{name[1:]}"
    return msg


def parameter_names(tree: Node | Equation) -> list[str]:
    """Names in a syntax tree that are parameters (not s, pi, x, y or a function), in order
    of first appearance."""
    found: list[str] = []

    def walk(node: Any) -> None:
        if isinstance(node, Name):
            if node.name not in EXPRESSION_NAMES + ODE_NAMES and node.name not in found:
                found.append(node.name)
        elif isinstance(node, Equation):
            walk(node.lhs)
            walk(node.rhs)
        elif isinstance(node, (Neg, Primed)):
            walk(node.operand)
        elif isinstance(node, Chain):
            for _, item, _ in node.items:
                walk(item)
        elif isinstance(node, Pow):
            walk(node.base)
            walk(node.exponent)
        elif isinstance(node, Call):
            walk(node.arg)

    walk(tree)
    return found


def parse_tree(text: str) -> Node | Equation:
    """Parse system text into a syntax tree (no evaluation)."""
    if not isinstance(text, str):
        raise ParseError(f"system text must be a string, got {type(text).__name__}")
    if len(text) > MAX_TEXT:
        raise ParseError(f"system text is longer than {MAX_TEXT} characters")
    if not text.strip():
        raise ParseError("system text is empty")
    return _Parser(text).parse()


# ----------------------------------------------------------------------------- polynomials
def _trim(p: np.ndarray) -> np.ndarray:
    nz = np.flatnonzero(p)
    return p[nz[0]:] if nz.size else np.zeros(1)


def _is_zero(p: np.ndarray) -> bool:
    return not np.any(p)


def _padd(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    n = max(a.size, b.size)
    out = np.zeros(n)
    out[n - a.size:] += a
    out[n - b.size:] += b
    return _trim(out)


# ----------------------------------------------------------------------------- H(s) values
@dataclass(frozen=True)
class _Rat:
    """num(s)/den(s) * exp(-s*delay); coefficients in descending powers of s."""

    num: np.ndarray
    den: np.ndarray
    delay: float = 0.0

    @property
    def is_const(self) -> bool:
        return self.num.size == 1 and self.den.size == 1 and self.delay == 0.0

    @property
    def value(self) -> float:
        return float(self.num[0] / self.den[0])


def _const(v: float) -> _Rat:
    return _Rat(np.array([float(v)]), np.ones(1))


class _RationalEvaluator:
    """Evaluate a syntax tree as a rational function of s (no cancellation)."""

    def __init__(self, text: str, values: Mapping[str, float] | None = None):
        self.text = text
        self.values = values or {}

    def fail(self, pos: int, problem: str) -> ParseError:
        return _fail(self.text, max(pos, 0), problem)

    def check(self, r: _Rat, pos: int) -> _Rat:
        if not (np.all(np.isfinite(r.num)) and np.all(np.isfinite(r.den))):
            raise self.fail(pos, "a coefficient overflows to infinity or NaN here")
        if r.den[0] == 0.0:  # the leading coefficient underflowed to zero
            raise self.fail(pos, "a coefficient underflows to zero here")
        if max(r.num.size, r.den.size) - 1 > MAX_WORK_DEGREE:
            raise self.fail(pos, f"polynomial degree above {MAX_WORK_DEGREE} here")
        return r

    def eval(self, node: Node) -> _Rat:
        if isinstance(node, Num):
            return _const(node.value)
        if isinstance(node, Name):
            if node.name == "s":
                return _Rat(np.array([1.0, 0.0]), np.ones(1))
            if node.name == "pi":
                return _const(math.pi)
            if node.name in ODE_NAMES:
                raise self.fail(
                    node.pos,
                    f"{node.name!r} belongs in ODE text, which needs '=' "
                    "(e.g. y'' + 3y' + 2y = 2x' + x)",
                )
            return _const(self.parameter(node))
        if isinstance(node, Neg):
            r = self.eval(node.operand)
            return _Rat(-r.num, r.den, r.delay)
        if isinstance(node, Chain):
            acc = self.eval(node.items[0][1])
            for op, item, pos in node.items[1:]:
                rhs = self.eval(item)
                if op == "+":
                    acc = self.add(acc, rhs, pos)
                elif op == "-":
                    acc = self.add(acc, _Rat(-rhs.num, rhs.den, rhs.delay), pos)
                elif op == "*":
                    acc = self.mul(acc, rhs, pos)
                else:
                    acc = self.div(acc, rhs, pos, item)
            return acc
        if isinstance(node, Pow):
            return self.power(node)
        if isinstance(node, Call):
            return self.call(node)
        if isinstance(node, Primed):
            raise self.fail(node.pos, "a prime (') marks a derivative, which only ODE text uses")
        raise self.fail(0, "unsupported construct")  # pragma: no cover - grammar is closed

    def parameter(self, node: Name) -> float:
        """The value of a parameter name (a one-line error naming it when it has none)."""
        if node.name not in self.values:
            raise self.fail(node.pos, _unknown_name_message(self.text, node.name, node.pos))
        v = float(self.values[node.name])
        if not math.isfinite(v):
            raise self.fail(node.pos, f"parameter {node.name} is NaN or infinite")
        return v

    def add(self, a: _Rat, b: _Rat, pos: int) -> _Rat:
        if a.delay or b.delay:
            raise self.fail(
                pos,
                "a dead time exp(-s*T) must multiply the whole H(s); a sum with it is not "
                "a rational function",
            )
        with np.errstate(all="ignore"):
            if np.array_equal(a.den, b.den):
                r = _Rat(_padd(a.num, b.num), a.den)
            else:
                r = _Rat(
                    _padd(np.convolve(a.num, b.den), np.convolve(b.num, a.den)),
                    np.convolve(a.den, b.den),
                )
        return self.check(r, pos)

    def mul(self, a: _Rat, b: _Rat, pos: int) -> _Rat:
        if (a.num.size - 1) + (b.num.size - 1) > MAX_WORK_DEGREE or (
            a.den.size + b.den.size - 2 > MAX_WORK_DEGREE
        ):
            raise self.fail(pos, f"polynomial degree above {MAX_WORK_DEGREE} here")
        with np.errstate(all="ignore"):
            if a.is_const and b.is_const:
                return self.check(_const(a.value * b.value), pos)
            r = _Rat(_trim(np.convolve(a.num, b.num)), np.convolve(a.den, b.den), a.delay + b.delay)
        return self.check(r, pos)

    def div(self, a: _Rat, b: _Rat, pos: int, divisor: Node | None = None) -> _Rat:
        if _is_zero(b.num):
            poly = divisor is not None and _mentions(divisor, ("s",))
            raise self.fail(pos, "division by the zero polynomial" if poly else "division by zero")
        if b.delay:
            raise self.fail(pos, "a dead time exp(-s*T) cannot divide: that is a time advance")
        if b.is_const:
            # Divide the coefficients directly, as a calculator would.
            with np.errstate(all="ignore"):
                return self.check(_Rat(_trim(a.num / b.value), a.den, a.delay), pos)
        return self.mul(a, _Rat(b.den, b.num), pos)

    def power(self, node: Pow) -> _Rat:
        base = self.eval(node.base)
        expo = self.eval(node.exponent)
        if not expo.is_const:
            raise self.fail(
                node.pos, "the exponent contains s; s in an exponent is not a rational function"
            )
        k = expo.value
        if base.is_const:
            b = base.value
            if b == 0.0 and k < 0:
                raise self.fail(node.pos, "division by zero (0 to a negative power)")
            try:
                v = math.pow(b, k)
            except (OverflowError, ValueError):
                raise self.fail(node.pos, f"{b:g}^{k:g} is not a finite real number") from None
            return self.check(_const(v), node.pos)
        if k != math.floor(k):
            raise self.fail(
                node.pos,
                f"exponent {k:g} of a polynomial in s must be a whole number",
            )
        n = int(abs(k)) if abs(k) <= MAX_WORK_DEGREE else MAX_WORK_DEGREE + 1
        if n * max(base.num.size - 1, base.den.size - 1) > MAX_WORK_DEGREE:
            raise self.fail(node.pos, f"polynomial degree above {MAX_WORK_DEGREE} here")
        if k < 0:
            if base.delay:
                raise self.fail(node.pos, "a dead time to a negative power is a time advance")
            if _is_zero(base.num):
                raise self.fail(node.pos, "division by the zero polynomial")
            base = _Rat(base.den, base.num)
        num, den = np.ones(1), np.ones(1)
        with np.errstate(all="ignore"):
            for _ in range(n):
                num = np.convolve(num, base.num)
                den = np.convolve(den, base.den)
        return self.check(_Rat(_trim(num), den, base.delay * n), node.pos)

    def call(self, node: Call) -> _Rat:
        arg = self.eval(node.arg)
        if arg.delay:
            raise self.fail(node.pos, f"{node.func}() of a dead time is not supported")
        if node.func == "sqrt":
            if not arg.is_const:
                raise self.fail(node.pos, "sqrt() takes a constant, not an expression in s")
            if arg.value < 0:
                raise self.fail(node.pos, f"sqrt() of a negative number ({arg.value:g})")
            return _const(math.sqrt(arg.value))
        # exp: a constant, or a dead time exp(-T*s) with constant T >= 0.
        if arg.is_const:
            try:
                return self.check(_const(math.exp(arg.value)), node.pos)
            except OverflowError:
                raise self.fail(node.pos, f"exp({arg.value:g}) is out of range") from None
        if arg.den.size == 1 and arg.num.size == 2 and arg.num[1] == 0.0:
            tau = -float(arg.num[0] / arg.den[0])
            if tau < 0:
                raise self.fail(
                    node.pos, f"exp(+{-tau:g}*s) is a time advance, not realizable (use exp(-T*s))"
                )
            return _Rat(np.ones(1), np.ones(1), tau)
        raise self.fail(
            node.pos,
            "exp() takes a constant or a dead time -T*s with a constant T >= 0 seconds",
        )


# ----------------------------------------------------------------------------- ODE values
@dataclass(frozen=True)
class _Lin:
    """c + Y(s)*y + X(s)*x: a linear form in the output y, the input x and their derivatives."""

    c: float
    y: np.ndarray
    x: np.ndarray
    has_var: bool


def _lconst(v: float) -> _Lin:
    return _Lin(float(v), np.zeros(1), np.zeros(1), False)


def _lscale(a: _Lin, k: float) -> _Lin:
    return _Lin(a.c * k, _trim(a.y * k), _trim(a.x * k), a.has_var)


class _ODEEvaluator:
    """Evaluate each side of ODE text as a linear form in y, x and their derivatives."""

    def __init__(self, text: str, values: Mapping[str, float] | None = None):
        self.text = text
        self.numbers = _RationalEvaluator(text, values)

    def fail(self, pos: int, problem: str) -> ParseError:
        return _fail(self.text, max(pos, 0), problem)

    def eval(self, node: Node) -> _Lin:
        if isinstance(node, Num):
            return _lconst(node.value)
        if isinstance(node, Name):
            if node.name in ODE_NAMES:
                return self.derivative(node.name, 0)
            if node.name == "pi":
                return _lconst(math.pi)
            if node.name == "s":
                raise self.fail(
                    node.pos,
                    "s does not belong in ODE text: write derivatives as y', y'' or y^(3)",
                )
            return _lconst(self.numbers.parameter(node))
        if isinstance(node, Neg):
            return _lscale(self.eval(node.operand), -1.0)
        if isinstance(node, Primed):
            if not (isinstance(node.operand, Name) and node.operand.name in ODE_NAMES):
                raise self.fail(node.pos, "a prime (') applies only to y or x")
            return self.derivative(node.operand.name, node.count)
        if isinstance(node, Chain):
            acc = self.eval(node.items[0][1])
            for op, item, pos in node.items[1:]:
                rhs = self.eval(item)
                if op in "+-":
                    sign = 1.0 if op == "+" else -1.0
                    acc = _Lin(
                        acc.c + sign * rhs.c,
                        _padd(acc.y, sign * rhs.y),
                        _padd(acc.x, sign * rhs.x),
                        acc.has_var or rhs.has_var,
                    )
                elif op == "*":
                    if acc.has_var and rhs.has_var:
                        raise self.fail(pos, "product of terms in y or x: the ODE must be linear")
                    acc = _lscale(rhs, acc.c) if rhs.has_var else _lscale(acc, rhs.c)
                else:
                    if rhs.has_var:
                        raise self.fail(pos, "division by a term in y or x: the ODE must be linear")
                    if rhs.c == 0.0:
                        raise self.fail(pos, "division by zero")
                    acc = _lscale(acc, 1.0 / rhs.c)
                self.check(acc, pos)
            return acc
        if isinstance(node, Pow):
            return self.power(node)
        if isinstance(node, Call):
            if self.has_var(node.arg):
                raise self.fail(node.pos, f"{node.func}() of y or x: the ODE must be linear")
            return self.constant(node)
        raise self.fail(0, "unsupported construct")  # pragma: no cover

    def has_var(self, node: Node) -> bool:
        if isinstance(node, Name):
            return node.name in ODE_NAMES
        if isinstance(node, (Neg, Primed)):
            return self.has_var(node.operand)
        if isinstance(node, Chain):
            return any(self.has_var(item) for _, item, _ in node.items)
        if isinstance(node, Pow):
            return self.has_var(node.base) or self.has_var(node.exponent)
        if isinstance(node, Call):
            return self.has_var(node.arg)
        return False

    def derivative(self, name: str, order: int) -> _Lin:
        if order > MAX_WORK_DEGREE:
            raise ParseError(f"derivative order {order} is above the limit")
        poly = np.zeros(order + 1)
        poly[0] = 1.0
        zero = np.zeros(1)
        return _Lin(0.0, poly, zero, True) if name == "y" else _Lin(0.0, zero, poly, True)

    def power(self, node: Pow) -> _Lin:
        if self.has_var(node.exponent):
            raise self.fail(node.pos, "y or x in an exponent: the ODE must be linear")
        if not self.has_var(node.base):
            return self.constant(node)
        base = node.base
        if isinstance(base, Name) and base.name in ODE_NAMES and node.parenthesized:
            k = self.numbers.eval(node.exponent)
            if not k.is_const or k.value < 0 or k.value != math.floor(k.value):
                raise self.fail(node.pos, "a derivative order in y^(n) must be a whole number >= 0")
            if k.value > MAX_WORK_DEGREE:
                raise self.fail(node.pos, f"derivative order above {MAX_WORK_DEGREE}")
            return self.derivative(base.name, int(k.value))
        raise self.fail(
            node.pos,
            "a power of y or x is not linear; write y^(2) or y'' for the second derivative",
        )

    def constant(self, node: Node) -> _Lin:
        r = self.numbers.eval(node)
        if not r.is_const:
            raise self.fail(
                _first_pos(node),
                "s and dead times do not belong in ODE text: write derivatives as y', y'' "
                "or y^(3)",
            )
        return _lconst(r.value)

    def check(self, v: _Lin, pos: int) -> None:
        if not (math.isfinite(v.c) and np.all(np.isfinite(v.y)) and np.all(np.isfinite(v.x))):
            raise self.fail(pos, "a coefficient overflows to infinity or NaN here")


# ----------------------------------------------------------------------------- results
@dataclass(frozen=True)
class ParsedSystem:
    """What system text evaluates to, before any check of realizability.

    Attributes
    ----------
    num, den : ndarray
        float64 coefficients of H(s) = num(s)/den(s), descending powers of s,
        leading zeros removed; nothing cancelled.
    delay_s : float
        Dead time from an ``exp(-T*s)`` factor, seconds (0 when absent).
    ode : tuple of ndarray or None
        For ODE text, (a, b): output-side and input-side coefficients
        [a_n..a_0], [b_m..b_0] with all y terms moved to one side and all x
        terms to the other, signs chosen so that a_n > 0 (not scaled to a_n = 1).
    kind : str
        ``"expression"`` or ``"ode"``.
    """

    num: np.ndarray
    den: np.ndarray
    delay_s: float
    ode: tuple[np.ndarray, np.ndarray] | None
    kind: str


def parse_system_text(text: str, expect: str | None = None,
                      values: Mapping[str, float] | None = None) -> ParsedSystem:
    """Read an H(s) expression or ODE text into polynomial coefficients.

    Parameters
    ----------
    text : str
        E.g. ``"2*pi*1k/(s + 2*pi*1k)"``, ``"exp(-1m*s)/(s+1)"`` or
        ``"y'' + 3y' + 2y = 2x' + x"``.
    expect : {"expression", "ode", None}
        Require one kind of text; None accepts both (ODE text has ``=``).
    values : mapping of str to float, optional
        Values of the parameter names the text uses, e.g. ``{"R": 10e3, "C": 100e-9}``
        for ``"1/(R*C*s + 1)"``. ``s``, ``pi``, ``exp``, ``sqrt`` (and ``x``, ``y`` in
        ODE text) keep their meaning and cannot be parameters.

    Returns
    -------
    ParsedSystem

    Raises
    ------
    ParseError
        For syntax errors (with the column), unknown names, s in an exponent,
        division by zero, non-linear ODE text and the like.

    References
    ----------
    .. [1] K. Ogata, *Modern Control Engineering*, 5th ed., sec. 2-2 (ODE to
           transfer function, zero initial conditions).
    """
    tree = parse_tree(text)
    if isinstance(tree, Equation):
        if expect == "expression":
            raise _fail(text, tree.pos, "'=' in an H(s) expression (ODE text goes under 'ode')")
        return _ode_result(text, tree, values)
    if expect == "ode":
        raise ParseError(
            f"ODE text needs '=' between the output side and the input side, "
            f"e.g. y'' + 3y' + 2y = 2x' + x (in \"{_quote(text)}\")"
        )
    if _mentions(tree, ODE_NAMES):
        name = "y" if _mentions(tree, ("y",)) else "x"
        raise ParseError(
            f"{name!r} appears but there is no '=': ODE text needs the form "
            f"a_n y^(n) + ... + a_0 y = b_m x^(m) + ... + b_0 x (in \"{_quote(text)}\")"
        )
    r = _RationalEvaluator(text, values).eval(tree)
    if _is_zero(r.num):
        raise ParseError(f'H(s) is identically zero; it passes nothing (in "{_quote(text)}")')
    return ParsedSystem(r.num.astype(np.float64), r.den.astype(np.float64), r.delay, None,
                        "expression")


def _first_pos(node: Node) -> int:
    if isinstance(node, Chain):
        return _first_pos(node.items[0][1])
    if isinstance(node, Pow):
        return _first_pos(node.base)
    return node.pos


def _mentions(node: Node, names: tuple[str, ...]) -> bool:
    if isinstance(node, Name):
        return node.name in names
    if isinstance(node, (Neg, Primed)):
        return _mentions(node.operand, names)
    if isinstance(node, Chain):
        return any(_mentions(item, names) for _, item, _ in node.items)
    if isinstance(node, Pow):
        return _mentions(node.base, names) or _mentions(node.exponent, names)
    if isinstance(node, Call):
        return _mentions(node.arg, names)
    return False


def _ode_result(text: str, eq: Equation, values: Mapping[str, float] | None) -> ParsedSystem:
    ev = _ODEEvaluator(text, values)
    lhs, rhs = ev.eval(eq.lhs), ev.eval(eq.rhs)
    if not (_mentions(eq.lhs, ("y",)) or _mentions(eq.rhs, ("y",))):
        raise ParseError(
            f'ODE text has no output variable y (write the output as y, y\', y\'\', ...) '
            f'(in "{_quote(text)}")'
        )
    if not (_mentions(eq.lhs, ("x",)) or _mentions(eq.rhs, ("x",))):
        raise ParseError(
            f'ODE text has no input variable x (write the input as x, x\', ...) '
            f'(in "{_quote(text)}")'
        )
    with np.errstate(all="ignore"):
        a = _padd(lhs.y, -rhs.y)  # A(s) Y(s) = B(s) X(s)
        b = _padd(rhs.x, -lhs.x)
        c = lhs.c - rhs.c
    if not (np.all(np.isfinite(a)) and np.all(np.isfinite(b)) and math.isfinite(c)):
        raise ParseError(f'ODE coefficients overflow to infinity or NaN (in "{_quote(text)}")')
    if c != 0.0:
        raise ParseError(
            f"ODE text has a constant term ({c:g}): only y, x and their derivatives may "
            f'appear, each times a constant (in "{_quote(text)}")'
        )
    if _is_zero(a):
        raise ParseError(f'the y terms of the ODE cancel to zero (in "{_quote(text)}")')
    if _is_zero(b):
        raise ParseError(f'the x terms of the ODE cancel to zero (in "{_quote(text)}")')
    if a[0] < 0:  # y terms written on the right-hand side: same equation, sides swapped
        a, b = -a, -b
    return ParsedSystem(b.copy(), a.copy(), 0.0, (a.copy(), b.copy()), "ode")


def parse_number(text: str, what: str = "number",
                 values: Mapping[str, float] | None = None) -> float:
    """A real constant: a number with optional engineering suffix, or a constant expression.

    ``parse_number("4.7k")`` is 4700.0; ``parse_number("2*pi*50")`` is 314.159...

    Raises
    ------
    ParseError
        When the text is not a finite real constant (the message names ``what``).
    """
    try:
        tree = parse_tree(text)
        if isinstance(tree, Equation) or _mentions(tree, ODE_NAMES):
            raise ParseError(f"'{_quote(text)}' is not a constant")
        r = _RationalEvaluator(text, values).eval(tree)
    except ParseError as exc:
        raise ParseError(f"{what}: {exc}") from None
    if not r.is_const:
        raise ParseError(f"{what}: '{_quote(text)}' contains s; a constant is needed here")
    return r.value


def parse_complex(text: str, what: str = "value") -> complex:
    """A complex number ``re+imj`` (parts may carry engineering suffixes) or a real constant.

    Accepts ``-1+2j``, ``-1-2j``, ``3j``, ``-j``, ``-1k+2kj``; anything without a
    trailing ``j`` is read by :func:`parse_number`.
    """
    t = "".join(text.split())
    if not t.endswith(("j", "J")):
        return complex(parse_number(t, what))
    body = t[:-1]
    # Split at the last sign that is not the leading one and not an exponent's sign.
    cut = -1
    for idx in range(len(body) - 1, 0, -1):
        if body[idx] in "+-" and body[idx - 1] not in "eE":
            cut = idx
            break
    re_text, im_text = (body[:cut], body[cut:]) if cut > 0 else ("", body)
    if im_text in ("", "+", "-"):
        im_text += "1"
    re_v = parse_number(re_text, what) if re_text else 0.0
    im_v = parse_number(im_text, what)
    return complex(re_v, im_v)
