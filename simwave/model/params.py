"""Named parameters of a system and their tolerances.

A parameter is a name used in H(s) or ODE text (``R``, ``C``, ``w0``) and a value.
The value may carry a tolerance, written the way it is printed on a parts list::

    10k                       nominal only
    10k ±1%                   relative tolerance, uniform within the limits
    10k +-1%                  the same, typed without the ± sign
    100n ±5% normal           normal distribution, limits at 3 sigma (the default)
    100n ±5% normal 2sigma    normal, limits at 2 sigma (also 2σ or "2 sigma")
    2.5 ±0.1                  absolute tolerance (same unit as the value)
    10M ±50ppm                parts per million

The nominal and an absolute tolerance are constants as everywhere in simwave
(engineering suffixes, ``pi``, ``sqrt(2)``). A distribution word is ``uniform``
(default) or ``normal``. For ``normal`` the stated limits sit at a number of
standard deviations (default 3: common practice for component tolerances, not
a standard; give the number your supplier states).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Any, Mapping

from simwave.errors import ParseError

#: Names a parameter may not take: they already mean something in system text.
RESERVED_NAMES = ("s", "pi", "exp", "sqrt", "x", "y")
#: Standard deviations between the nominal and a limit when ``normal`` gives none.
DEFAULT_SIGMAS = 3.0
DISTRIBUTIONS = ("uniform", "normal")

_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*\Z")
_PLUS_MINUS = re.compile(r"\u00b1|\+/-|\+-")
_SIGMA = re.compile(r"(?P<n>[0-9]*\.?[0-9]+)\s*(?:sigma|\u03c3)\Z", re.IGNORECASE)


@dataclass(frozen=True)
class Tolerance:
    """How far a built part may be from its nominal value.

    Attributes
    ----------
    kind : {"relative", "absolute"}
    amount : float
        Half-width of the band: a fraction of the nominal (relative; 1 % is 0.01)
        or a value in the parameter's own unit (absolute).
    distribution : {"uniform", "normal"}
    sigmas : float or None
        For ``normal``: how many standard deviations the limits are from the nominal.
    text : str
        As written, for reports.
    """

    kind: str
    amount: float
    distribution: str = "uniform"
    sigmas: float | None = None
    text: str = ""

    def half_width(self, nominal: float) -> float:
        """Distance from the nominal to either limit, in the parameter's unit."""
        return abs(nominal) * self.amount if self.kind == "relative" else self.amount

    def limits(self, nominal: float) -> tuple[float, float]:
        """(low, high) limits of the band around ``nominal``."""
        h = self.half_width(nominal)
        return nominal - h, nominal + h

    def sigma(self, nominal: float) -> float | None:
        """Standard deviation (normal), None for uniform."""
        if self.distribution != "normal":
            return None
        return self.half_width(nominal) / float(self.sigmas or DEFAULT_SIGMAS)

    def describe(self) -> str:
        band = f"{self.amount * 100:g} %" if self.kind == "relative" else f"{self.amount:g}"
        if self.distribution == "normal":
            return f"±{band}, normal, limits at {self.sigmas:g} sigma"
        return f"±{band}, uniform"


@dataclass(frozen=True)
class Parameter:
    """A named value of a system, with an optional tolerance."""

    name: str
    nominal: float
    tolerance: Tolerance | None = None
    text: str = ""

    def describe(self) -> str:
        base = f"{self.nominal:.6g}"
        return base if self.tolerance is None else f"{base} ({self.tolerance.describe()})"

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready: name, nominal, as written, and the tolerance band when there is one."""
        d: dict[str, Any] = {"name": self.name, "nominal": self.nominal, "text": self.text}
        t = self.tolerance
        if t is None:
            d["tolerance"] = None
        else:
            lo, hi = t.limits(self.nominal)
            d["tolerance"] = {"kind": t.kind, "amount": t.amount,
                              "distribution": t.distribution, "sigmas": t.sigmas,
                              "low": lo, "high": hi, "text": t.text}
        return d


def check_name(name: Any, what: str = "parameter") -> str:
    """A valid parameter name, or a one-line error naming it."""
    if not isinstance(name, str) or not _NAME.match(name):
        raise ParseError(f"{what} name {name!r} must be letters, digits and _, not starting "
                         "with a digit")
    if name in RESERVED_NAMES:
        raise ParseError(f"{what} name {name!r} is taken: {', '.join(RESERVED_NAMES)} already "
                         "mean something in system text")
    return name


def parse_parameter(name: str, value: Any) -> Parameter:
    """A :class:`Parameter` from a number or text such as ``"10k ±1%"`` (see module docs).

    Raises
    ------
    ParseError
        The message names the parameter and what is wrong with its value.
    """
    from simwave.model.parse import parse_number

    check_name(name)
    if isinstance(value, Parameter):
        return value
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise ParseError(f"parameter {name}: value must be a number or text like '10k ±1%', "
                         f"got {value!r}")
    if not isinstance(value, str):
        v = float(value)
        if not math.isfinite(v):
            raise ParseError(f"parameter {name}: value is NaN or infinite")
        return Parameter(name, v, None, repr(value))
    text = " ".join(value.split())
    parts = _PLUS_MINUS.split(text)
    if len(parts) > 2:
        raise ParseError(f"parameter {name}: more than one ± in {text!r}")
    nominal = parse_number(parts[0].strip(), f"parameter {name}") if parts[0].strip() else None
    if nominal is None:
        raise ParseError(f"parameter {name}: no nominal value before ± in {text!r}")
    if len(parts) == 1:
        return Parameter(name, nominal, None, text)
    return Parameter(name, nominal, _tolerance(name, parts[1].strip(), nominal), text)


def _tolerance(name: str, text: str, nominal: float) -> Tolerance:
    from simwave.model.parse import parse_number

    what = f"parameter {name}"
    words = text.split(" ")
    if not words or not words[0]:
        raise ParseError(f"{what}: no tolerance after ±")
    amount_text = words[0]
    rest = words[1:]
    # "±5 %" with a space: the unit word follows the number.
    if rest and rest[0] in ("%", "ppm"):
        amount_text += rest.pop(0)
    if amount_text.endswith("%"):
        kind, amount = "relative", parse_number(amount_text[:-1], what) / 100.0
    elif amount_text.lower().endswith("ppm"):
        kind, amount = "relative", parse_number(amount_text[:-3], what) * 1e-6
    else:
        kind, amount = "absolute", parse_number(amount_text, what)
    if not amount > 0:
        raise ParseError(f"{what}: tolerance must be > 0, got {amount_text}")
    if kind == "relative" and nominal == 0:
        raise ParseError(f"{what}: a relative tolerance of a zero nominal is no band; "
                         "give an absolute one (e.g. 0 ±0.1)")
    distribution, sigmas = "uniform", None
    if rest:
        distribution = rest.pop(0).lower()
        if distribution not in DISTRIBUTIONS:
            raise ParseError(f"{what}: unknown distribution {distribution!r} "
                             f"(known: {', '.join(DISTRIBUTIONS)})")
    if distribution == "normal":
        sigmas = DEFAULT_SIGMAS
        if rest:
            m = _SIGMA.match(" ".join(rest))
            if not m:
                raise ParseError(f"{what}: after 'normal' write where the limits sit, e.g. "
                                 f"'3sigma', not {' '.join(rest)!r}")
            sigmas = float(m.group("n"))
            if not sigmas > 0:
                raise ParseError(f"{what}: the number of sigmas must be > 0")
            rest = []
    if rest:
        raise ParseError(f"{what}: unexpected {' '.join(rest)!r} after the tolerance "
                         "(write e.g. '10k ±1%', '100n ±5% normal 3sigma')")
    return Tolerance(kind, float(amount), distribution, sigmas, text)


def parameter_table(values: Mapping[str, Any] | None) -> dict[str, Parameter]:
    """``{name: Parameter}`` from a mapping of names to numbers, texts or Parameters."""
    if values is None:
        return {}
    if not isinstance(values, Mapping):
        raise ParseError(f"parameters must be a table of name = value, got {values!r}")
    return {name: parse_parameter(name, v) for name, v in values.items()}


def parse_assignment(text: str, what: str = "--set") -> tuple[str, str]:
    """``'R=12k'`` -> ``('R', '12k')`` (the value is read by :func:`parse_parameter`)."""
    name, eq, value = text.partition("=")
    name = name.strip()
    if not eq or not name or not value.strip():
        raise ParseError(f"{what}: write NAME=VALUE, e.g. R=12k or 'C=100n ±5%', got {text!r}")
    check_name(name)
    return name, value.strip()
