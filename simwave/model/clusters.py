"""Multiple roots seen through float64: a cluster of computed roots is one m-fold root.

The roots of a polynomial with an m-fold root r are ill-conditioned: a relative
perturbation eps of the coefficients moves them by about |r| * eps**(1/m), onto a
ring around r (J. H. Wilkinson, *Rounding Errors in Algebraic Processes*, 1963,
ch. 2; the classic example is (s+1)^20, whose computed roots spread over about
+-0.3). Their mean stays accurate (the sum of the roots is a coefficient). This
module finds such clusters so a report can say "20-fold pole at -1" instead of
listing twenty different poles.
"""

from __future__ import annotations

import numpy as np

#: Coefficient error assumed for the ring radius: a few thousand units of float64
#: round-off (a polynomial expanded from factors and rooted by an eigenvalue solver).
#: simwave's own choice; the bound used is 2 * |r| * (EPS_COEFF)**(1/m).
EPS_COEFF = 1e-13


def ring_radius(center: complex, m: int) -> float:
    """Largest spread of m computed roots around an m-fold root ``center`` that is
    still explained by float64 round-off of the coefficients (see module notes)."""
    return 2.0 * max(abs(center), 1e-300) * EPS_COEFF ** (1.0 / m)


#: Relative size below which the derivatives p, p', ..., p^(m-1) at a cluster's mean count
#: as zero (the mean of a true m-fold cluster is accurate to far better; simwave's choice).
DERIVATIVE_TOL = 1e-6


def _is_multiple(coeffs: np.ndarray, c: complex, m: int) -> bool:
    """True when p and its first m-1 derivatives vanish at ``c`` (relative to their terms)."""
    poly = np.asarray(coeffs, dtype=complex)
    for _ in range(m):
        powers = np.abs(c) ** np.arange(poly.size - 1, -1, -1)
        scale = float(np.sum(np.abs(poly) * powers))
        if scale > 0 and abs(np.polyval(poly, c)) > DERIVATIVE_TOL * scale:
            return False
        poly = np.polyder(poly) if poly.size > 1 else poly
    return True


def multiple_roots(roots, coeffs=None) -> list[dict]:
    """Clusters of computed roots that are one multiple root within float64 spread.

    Parameters
    ----------
    roots : array_like of complex
    coeffs : array_like, optional
        The polynomial's coefficients (descending powers); by default ``numpy.poly(roots)``.
        A cluster counts as one m-fold root only when the polynomial and its first m-1
        derivatives vanish at the cluster's mean.

    Returns
    -------
    list of dict
        ``{"root": complex (the cluster's mean), "multiplicity": m, "spread": largest
        distance of a member from the mean, "members": indices}`` for each cluster of
        m >= 3 roots (a double root's spread, ~3e-7 relative, is too small to mislead).
    """
    r = np.atleast_1d(np.asarray(roots, dtype=complex))
    n = r.size
    if n < 3:
        return []
    poly = np.poly(r) if coeffs is None else np.asarray(coeffs, dtype=complex)
    # link roots closer than the widest ring any cluster of this size could have
    scale = max(float(np.max(np.abs(r))), 1e-300)
    link = 2 * ring_radius(scale, n)
    parent = list(range(n))

    def find(i: int) -> int:
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    for i in range(n):
        for j in range(i + 1, n):
            if abs(r[i] - r[j]) <= link:
                parent[find(i)] = find(j)
    groups: dict[int, list[int]] = {}
    for i in range(n):
        groups.setdefault(find(i), []).append(i)
    found = []
    for members in groups.values():
        members = list(members)
        while len(members) >= 3:
            c = complex(np.mean(r[members]))
            dist = np.abs(r[members] - c)
            if (float(dist.max()) <= ring_radius(c, len(members))
                    and _is_multiple(poly, c, len(members))):
                if abs(c.imag) <= 1e-9 * max(abs(c), 1e-300):
                    c = complex(c.real, 0.0)
                found.append({"root": c, "multiplicity": len(members),
                              "spread": float(dist.max()), "members": sorted(members)})
                break
            members.pop(int(np.argmax(dist)))  # peel the farthest: maybe a separate root
    return found
