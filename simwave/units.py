"""SI prefixes shared by every place that reads numbers with engineering suffixes.

``m`` is milli and ``M`` is mega, as in SI (BIPM, *The International System of
Units*, 9th ed., 2019, table 7), restricted to the prefixes an instrument user
types.
"""

#: SI prefix letter -> factor. Both the micro sign (U+00B5) and the Greek mu (U+03BC).
SI_PREFIXES: dict[str, float] = {
    "f": 1e-15,
    "p": 1e-12,
    "n": 1e-9,
    "u": 1e-6,
    "\u00b5": 1e-6,
    "\u03bc": 1e-6,
    "m": 1e-3,
    "k": 1e3,
    "M": 1e6,
    "G": 1e9,
    "T": 1e12,
}
