"""Numbers with engineering suffixes: ``1k``, ``10m``, ``4.7u``, ``2.5MHz``, ``25%``.

The suffix letters are the SI prefixes (BIPM, *The International System of
Units*, 9th ed., 2019, table 7) restricted to the ones an instrument user
types: ``f p n u µ m k M G T``. ``m`` is milli and ``M`` is mega, as in SI.
An optional unit symbol may follow (``s``, ``Hz``, ``V``, ``A``); it is only
checked for spelling, never converted. A trailing ``%`` divides by 100.
"""

from __future__ import annotations

import math
import re
from typing import Any

from simwave.errors import WaveformError
from simwave.units import SI_PREFIXES as _SI

#: SI prefix letter -> factor ("" for none).
SI_PREFIXES: dict[str, float] = {"": 1.0, **_SI}

_NUMBER = r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?"
_QUANTITY = re.compile(
    rf"^\s*({_NUMBER})\s*([fpnuµμmkMGT]?)\s*(Hz|hz|s|V|A)?\s*$"
)
_PERCENT = re.compile(rf"^\s*({_NUMBER})\s*%\s*$")


def parse_quantity(value: Any, name: str = "value") -> float:
    """Read a number given as a float or as text with an engineering suffix.

    Parameters
    ----------
    value : float, int or str
        ``0.001``, ``"1m"``, ``"1 ms"``, ``"10k"``, ``"4.7u"``, ``"2.5MHz"``,
        ``"25%"`` (= 0.25).
    name : str
        Parameter name used in the error message.

    Returns
    -------
    float
        The value in SI base units (finite).

    Raises
    ------
    WaveformError
        If the text is not a number with an optional SI prefix and unit,
        or the number is not finite.

    References
    ----------
    BIPM, *The International System of Units (SI)*, 9th ed., 2019, table 7
    (SI prefixes).

    Examples
    --------
    >>> parse_quantity("4.7u")
    4.7e-06
    >>> parse_quantity("10 kHz")
    10000.0
    """
    if isinstance(value, bool):
        raise WaveformError(f"{name}: expected a number, got {value!r}")
    if isinstance(value, (int, float)):
        x = float(value)
    else:
        text = str(value)
        m = _PERCENT.match(text)
        if m:
            x = float(m.group(1)) / 100.0
        else:
            m = _QUANTITY.match(text)
            if not m:
                raise WaveformError(
                    f"{name}: {text!r} is not a number (write e.g. 0.001, 1m, 4.7u, 10k, 2.5MHz)"
                )
            number, prefix = m.group(1), m.group(2)
            if prefix and "e" not in number.lower():
                # decimal exponent keeps "10u" exactly 1e-05 (10 * 1e-6 is 9.999999999999999e-06)
                exp = {"µ": -6, "μ": -6}.get(prefix, round(math.log10(SI_PREFIXES[prefix])))
                x = float(f"{number}e{exp}")
            else:
                x = float(number) * SI_PREFIXES[prefix]
    if not math.isfinite(x):
        raise WaveformError(f"{name}: {value!r} is not a finite number")
    return x


def format_quantity(x: float, unit: str = "") -> str:
    """Short engineering notation, e.g. ``format_quantity(0.0047, "s") == "4.7 ms"``."""
    if x == 0 or not math.isfinite(x):
        return f"{x:g} {unit}".strip()
    exp3 = int(math.floor(math.log10(abs(x)) / 3))
    exp3 = max(-5, min(4, exp3))
    letter = {-5: "f", -4: "p", -3: "n", -2: "µ", -1: "m", 0: "", 1: "k", 2: "M", 3: "G", 4: "T"}
    return f"{x / 10 ** (3 * exp3):.6g} {letter[exp3]}{unit}".strip()
