"""Statistics of a study: spread, share inside limits, sensitivities, margins.

References
----------
.. [1] E. B. Wilson, "Probable inference, the law of succession, and statistical
       inference", Journal of the American Statistical Association 22(158), 1927,
       pp. 209-212 (the score interval for a binomial proportion).
.. [2] R. J. Hyndman, Y. Fan, "Sample quantiles in statistical packages", The
       American Statistician 50(4), 1996 (definition 7: linear interpolation between
       order statistics, numpy's default).
.. [3] H. W. Bode, *Network Analysis and Feedback Amplifier Design*, Van Nostrand,
       1945, ch. 4 (sensitivity S = (dH/H)/(dx/x)). Chapter quoted from memory.
"""

from __future__ import annotations

import math
from typing import Any, Sequence

import numpy as np

#: Two-sided 95 % normal quantile, scipy.stats.norm.ppf(0.975).
Z95 = 1.959963984540054
PERCENTILES = (5.0, 50.0, 95.0)


def wilson_interval(k: int, n: int, z: float = Z95) -> tuple[float, float] | None:
    """Wilson score interval [1]_ for a share k/n (95 % by default); None when n = 0.

    (p + z²/2n ± z sqrt(p(1-p)/n + z²/4n²)) / (1 + z²/n), with p = k/n. Unlike the
    normal-approximation interval it stays inside [0, 1] and is not empty at k = 0 or n.
    """
    if n <= 0:
        return None
    p = k / n
    z2 = z * z
    centre = p + z2 / (2 * n)
    half = z * math.sqrt(p * (1 - p) / n + z2 / (4 * n * n))
    den = 1 + z2 / n
    return (max(0.0, (centre - half) / den), min(1.0, (centre + half) / den))


def inside(value: float | None, band: tuple[float | None, float | None]) -> bool:
    """True when ``value`` is measured and within ``band`` = (min or None, max or None)."""
    if value is None:
        return False
    lo, hi = band
    return (lo is None or value >= lo) and (hi is None or value <= hi)


def margin(value: float | None, band: tuple[float | None, float | None]
           ) -> tuple[float | None, float | None]:
    """(margin in the metric's unit, relative margin) to the nearer limit; negative
    outside. The relative margin divides by the size of that limit (by 1 when it is 0)."""
    if value is None:
        return None, None
    lo, hi = band
    cands = []
    if lo is not None:
        cands.append((value - lo, lo))
    if hi is not None:
        cands.append((hi - value, hi))
    m, edge = min(cands, key=lambda c: c[0])
    return m, m / (abs(edge) if edge != 0 else 1.0)


def spread(values: Sequence[float | None]) -> dict[str, Any]:
    """min, max, mean, standard deviation (n-1) and percentiles [2]_ of the measured values."""
    xs = np.array([v for v in values if v is not None], dtype=np.float64)
    out: dict[str, Any] = {"measured": int(xs.size), "not_measured": len(values) - int(xs.size)}
    if xs.size == 0:
        out.update({"min": None, "max": None, "mean": None, "std": None,
                    **{_pkey(q): None for q in PERCENTILES}})
        return out
    out.update({
        "min": float(xs.min()),
        "max": float(xs.max()),
        "mean": float(xs.mean()),
        "std": float(xs.std(ddof=1)) if xs.size > 1 else None,
    })
    for q, v in zip(PERCENTILES, np.percentile(xs, PERCENTILES), strict=True):
        out[_pkey(q)] = float(v)
    return out


def _pkey(q: float) -> str:
    return f"p{q:g}"


def secant_sensitivity(m_minus: float | None, m_plus: float | None, m_nominal: float | None,
                       h: float) -> tuple[float | None, str | None]:
    """Normalised sensitivity (dM/M)/(dx/x) by a central difference over x(1 ± h).

    Returns (value, None) or (None, reason).
    """
    if m_minus is None or m_plus is None or m_nominal is None:
        return None, "not measured at the nominal or at a step"
    if m_nominal == 0:
        return None, "nominal value is 0 (no relative change)"
    return (m_plus - m_minus) / (2 * h * m_nominal), None


def transfer_sensitivity(template: Any, values: dict[str, float], name: str,
                         f_hz: Sequence[float], rel_step: float = 1e-3) -> np.ndarray:
    """Bode's sensitivity of H(j2πf) to one parameter [3]_, S = (dH/H)/(dx/x).

    Computed numerically, not symbolically: central differences of H in the parameter
    at relative steps h and h/2 combined by Richardson extrapolation,
    S = (4 D(h/2) - D(h)) / 3, whose truncation error is O(h^4) (about 1e-12 for the
    default h = 1e-3) and whose round-off stays near 1e-13 of |S| + 1. Complex, one
    value per frequency.

    References
    ----------
    .. [4] L. F. Richardson, "The deferred approach to the limit", Phil. Trans. R.
           Soc. A 226, 1927 (extrapolation of a difference quotient).
    """
    x = values[name]
    f = np.asarray(f_hz, dtype=np.float64)
    h0 = template.build(values).frequency_response(f)

    def quotient(h: float) -> np.ndarray:
        lo, hi = dict(values), dict(values)
        lo[name], hi[name] = x * (1 - h), x * (1 + h)
        hm = template.build(lo).frequency_response(f)
        hp = template.build(hi).frequency_response(f)
        return (hp - hm) / (2 * h * h0)

    return (4 * quotient(rel_step / 2) - quotient(rel_step)) / 3
