"""Which builds a study runs: the nominal, sensitivity steps, corners, random draws, sweeps.

A *build* is one set of parameter values: one board as it might come off the line.
Everything here is a pure function of the parameters, the seed and the counts, and
runs in the process that plans the study, so the same seed gives the same draws on
any engine.

References
----------
.. [1] A. Papoulis, S. U. Pillai, *Probability, Random Variables and Stochastic
       Processes*, 4th ed., McGraw-Hill, 2002, sec. 5-2 (a function of a random
       variable: X = F^-1(U) has distribution F when U is uniform on (0, 1)).
       Section number quoted from memory.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np
from scipy.special import ndtri

from simwave.errors import SimwaveError
from simwave.model.params import Parameter

#: Every combination of extremes is run up to this many toleranced parameters
#: (2^10 = 1024 corners); beyond it, the corners the sensitivities point to.
MAX_FULL_CORNERS = 10


@dataclass(frozen=True)
class Build:
    """One set of parameter values and why it is run.

    ``role``: ``nominal``, ``step`` (a sensitivity step: ``detail`` names the parameter
    and the direction), ``corner``, ``draw`` (Monte Carlo) or ``sweep`` (``point``
    numbers the sweep point).
    """

    index: int
    role: str
    values: dict[str, float]
    detail: str = ""
    point: int | None = None
    extra: dict[str, Any] = field(default_factory=dict)


def toleranced(params: dict[str, Parameter]) -> list[Parameter]:
    """The parameters that carry a tolerance, in table order."""
    return [p for p in params.values() if p.tolerance is not None]


def nominal_values(params: dict[str, Parameter]) -> dict[str, float]:
    return {name: p.nominal for name, p in params.items()}


def step_size(p: Parameter) -> float:
    """Relative step for the finite-difference sensitivity: the tolerance's half-width
    over the nominal (the secant across the tolerance band)."""
    assert p.tolerance is not None
    if p.nominal == 0:
        raise SimwaveError(f"parameter {p.name}: nominal 0 has no relative sensitivity; "
                           "give it a non-zero nominal")
    return p.tolerance.half_width(p.nominal) / abs(p.nominal)


def step_values(params: dict[str, Parameter]) -> list[tuple[str, str, dict[str, float]]]:
    """(parameter, "+"/"-", values) for a central difference of every toleranced parameter."""
    base = nominal_values(params)
    out = []
    for p in toleranced(params):
        h = step_size(p)
        for sign in ("-", "+"):
            v = dict(base)
            v[p.name] = p.nominal * (1 + h) if sign == "+" else p.nominal * (1 - h)
            out.append((p.name, sign, v))
    return out


def all_corners(params: dict[str, Parameter]) -> list[tuple[str, dict[str, float]]]:
    """Every combination of tolerance limits: 2^n value sets, labelled like ``R+ C-``.

    For a normal distribution the limits are the stated ones (at the stated number
    of sigma), not the tails of the distribution.
    """
    tol = toleranced(params)
    base = nominal_values(params)
    out = []
    for signs in itertools.product("-+", repeat=len(tol)):
        v = dict(base)
        for p, sign in zip(tol, signs, strict=True):
            lo, hi = p.tolerance.limits(p.nominal)
            v[p.name] = hi if sign == "+" else lo
        out.append((" ".join(f"{p.name}{s}" for p, s in zip(tol, signs, strict=True)), v))
    return out


def pointed_corners(params: dict[str, Parameter],
                    signs_per_metric: Sequence[dict[str, float]]) -> list[tuple[str, dict]]:
    """Corners the sensitivities point to: for each metric, every parameter at the limit
    that raises it, and every parameter at the limit that lowers it (two corners per
    metric, duplicates removed). Exact for metrics monotonic in each parameter over the
    band; an approximation otherwise."""
    tol = toleranced(params)
    base = nominal_values(params)
    seen: dict[str, dict] = {}
    for sens in signs_per_metric:
        for direction in (1.0, -1.0):
            v = dict(base)
            label = []
            for p in tol:
                lo, hi = p.tolerance.limits(p.nominal)
                s = sens.get(p.name) or 0.0
                up = (s * direction) >= 0
                v[p.name] = hi if up else lo
                label.append(f"{p.name}{'+' if up else '-'}")
            seen.setdefault(" ".join(label), v)
    return list(seen.items())


def random_values(params: dict[str, Parameter], draws: int, seed: int) -> list[dict[str, float]]:
    """``draws`` random builds from numpy's PCG64 generator seeded with ``seed``.

    One uniform number per toleranced parameter per draw (row by row, parameters in
    table order), mapped through the inverse distribution function [1]_: uniform
    parameters spread evenly between their limits, normal ones around the nominal with
    sigma = half-width / sigmas. The first N draws of a larger study are the N draws of
    a smaller one with the same seed.
    """
    if draws < 1:
        raise SimwaveError(f"draws must be at least 1, got {draws}")
    tol = toleranced(params)
    base = nominal_values(params)
    rng = np.random.Generator(np.random.PCG64(int(seed)))
    u = rng.random((draws, len(tol)))
    u[u == 0.0] = 2.0 ** -54  # random() may return exactly 0: keep ndtri finite
    cols = {}
    for j, p in enumerate(tol):
        t = p.tolerance
        if t.distribution == "normal":
            cols[p.name] = p.nominal + t.sigma(p.nominal) * ndtri(u[:, j])
        else:
            lo, hi = t.limits(p.nominal)
            cols[p.name] = lo + (hi - lo) * u[:, j]
    out = []
    for i in range(draws):
        v = dict(base)
        for name, col in cols.items():
            v[name] = float(col[i])
        out.append(v)
    return out


def sweep_axis(name: str, spec: Any, where: str) -> list[float]:
    """Values of one swept parameter: a list, or ``{from, to, points, scale}`` with
    scale ``linear`` (default) or ``log``; the ends are exact."""
    from simwave.model.parse import parse_number

    def num(v: Any, what: str) -> float:
        if isinstance(v, bool) or not isinstance(v, (int, float, str)):
            raise SimwaveError(f"{where}: {what} must be a number, got {v!r}")
        x = parse_number(v, what) if isinstance(v, str) else float(v)
        if not math.isfinite(x):
            raise SimwaveError(f"{where}: {what} is NaN or infinite")
        return x

    if isinstance(spec, list):
        if not spec:
            raise SimwaveError(f"{where}: sweep of {name} has no values")
        return [num(v, f"sweep {name}, item {i + 1}") for i, v in enumerate(spec)]
    if not isinstance(spec, dict):
        raise SimwaveError(f"{where}: sweep of {name} must be a list of values or "
                           "{ from = ..., to = ..., points = N, scale = \"log\" }")
    unknown = [k for k in spec if k not in ("from", "to", "points", "scale")]
    if unknown:
        raise SimwaveError(f"{where}: unknown key {unknown[0]!r} in the sweep of {name} "
                           "(known: from, to, points, scale)")
    for k in ("from", "to", "points"):
        if k not in spec:
            raise SimwaveError(f"{where}: sweep of {name} needs {k}")
    a, b = num(spec["from"], f"sweep {name} from"), num(spec["to"], f"sweep {name} to")
    n = spec["points"]
    if isinstance(n, bool) or not isinstance(n, int) or n < 2:
        raise SimwaveError(f"{where}: sweep of {name}: points must be a whole number >= 2")
    scale = str(spec.get("scale", "linear")).lower()
    if scale in ("lin", "linear"):
        vals = np.linspace(a, b, n)
    elif scale in ("log", "logarithmic"):
        if not (a > 0 and b > 0):
            raise SimwaveError(f"{where}: a log sweep of {name} needs from and to > 0")
        vals = np.geomspace(a, b, n)
    else:
        raise SimwaveError(f"{where}: sweep scale must be linear or log, got {scale!r}")
    out = [float(v) for v in vals]
    out[0], out[-1] = a, b
    return out


def sweep_points(axes: dict[str, list[float]]) -> list[dict[str, float]]:
    """The grid of a one- or two-parameter sweep (first parameter varies slowest)."""
    names = list(axes)
    return [dict(zip(names, combo, strict=True)) for combo in itertools.product(*axes.values())]


def finite(values: dict[str, float]) -> bool:
    return all(math.isfinite(v) for v in values.values())
