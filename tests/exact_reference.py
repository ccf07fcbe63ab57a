"""Exact analog responses at high precision, independent of simwave's own code.

Partial fractions in mpmath at 40 significant digits from a system's poles,
zeros and gain (taken as exact numbers): for distinct poles p_i,

    step response  y(t) = H(0) + sum_i k prod(p_i - z) / (p_i prod_{m != i}(p_i - p_m)) e^{p_i t}
    impulse        h(t) = sum_i k prod(p_i - z) / prod_{m != i}(p_i - p_m) e^{p_i t}

(the residue theorem for the inverse Laplace transform of a rational function:
Oppenheim & Willsky, *Signals and Systems*, 2nd ed., sec. 9.3 and appendix on
partial fractions, section numbers from memory; Kreyszig, *Advanced
Engineering Mathematics*, the inverse Laplace transform by partial fractions).
"""

from __future__ import annotations

import mpmath as mp
import numpy as np

DIGITS = 40


def as_mp(v):
    """An mpmath complex number from a float/complex (mpmath numbers pass through)."""
    if isinstance(v, (mp.mpf, mp.mpc)):
        return v
    v = complex(v)
    return mp.mpc(v.real, v.imag)


def residues(zeros, poles, gain):
    """Poles and the residues of k prod(x - z)/prod(x - p) at them (distinct poles), mpmath."""
    mp.mp.dps = DIGITS
    z = [as_mp(v) for v in zeros]
    p = [as_mp(v) for v in poles]
    k = as_mp(gain)
    out = []
    for i, pi in enumerate(p):
        num = k
        for zj in z:
            num *= pi - zj
        den = mp.mpf(1)
        for m, pm in enumerate(p):
            if m != i:
                if pm == pi:
                    raise ValueError("repeated pole: use a closed form instead")
                den *= pi - pm
        out.append(num / den)
    return p, out


def step_response(zeros, poles, gain, t) -> np.ndarray:
    """Exact unit-step response at times t (s), for distinct, non-zero poles."""
    p, r = residues(np.atleast_1d(zeros), np.atleast_1d(poles), float(gain))
    z = [as_mp(v) for v in np.atleast_1d(zeros)]
    h0 = mp.mpf(float(gain))
    for zj in z:
        h0 *= -zj
    for pi in p:
        h0 /= -pi
    out = np.empty(len(t))
    for n, tn in enumerate(t):
        tn = mp.mpf(float(tn))
        acc = h0
        for pi, ri in zip(p, r, strict=True):
            acc += ri / pi * mp.exp(pi * tn)
        out[n] = float(mp.re(acc))
    return out


def impulse_response(zeros, poles, gain, t) -> np.ndarray:
    """Exact impulse response h(t) at times t > 0 (s), for distinct poles."""
    p, r = residues(np.atleast_1d(zeros), np.atleast_1d(poles), float(gain))
    out = np.empty(len(t))
    for n, tn in enumerate(t):
        tn = mp.mpf(float(tn))
        out[n] = float(mp.re(mp.fsum(ri * mp.exp(pi * tn) for pi, ri in zip(p, r, strict=True))))
    return out


def sample_indices(n: int, count: int = 1500) -> np.ndarray:
    """Sample indices to compare at: the first 200 densely, then spread log- and linearly."""
    head = np.arange(min(n, 200))
    spread = np.unique(np.concatenate([
        np.geomspace(1, n - 1, count // 2).astype(np.int64),
        np.linspace(0, n - 1, count // 2).astype(np.int64),
    ]))
    return np.unique(np.concatenate([head, spread]))


def linear_between_samples_response(zeros, poles, gain, x, rate) -> np.ndarray:
    """y[k] of a strictly proper H(s) with distinct poles for the input that is linear
    between the samples x[k] and at rest before t = 0 (it steps to x[0] at t = 0).

    Each mode m_i of H(s) = sum r_i / (s - p_i) obeys m' = p_i m + r_i u; over one
    sample period with u going linearly from u_k to u_(k+1),

        m_(k+1) = e^(qi) m_k + r_i (a0 u_k + a1 u_(k+1)),  qi = p_i T,
        a1 = (e^qi - 1 - qi) / (p_i qi),  a0 = (e^qi - 1) / p_i - a1

    (the exact integral of e^(p (T - tau)) against the two hat functions; the
    variation-of-constants formula, e.g. Franklin, Powell & Workman, *Digital Control
    of Dynamic Systems*, 3rd ed., sec. 4.3, from memory), in 40-digit mpmath.
    """
    p, r = residues(np.atleast_1d(zeros), np.atleast_1d(poles), float(gain))
    T = mp.mpf(1) / mp.mpf(float(rate))
    coef = []
    for pi, ri in zip(p, r, strict=True):
        q = pi * T
        e = mp.exp(q)
        a1 = (e - 1 - q) / (pi * q)
        coef.append((e, ri * ((e - 1) / pi - a1), ri * a1))
    xs = [mp.mpf(float(v)) for v in x]
    m = [mp.mpc(0)] * len(p)
    out = np.empty(len(xs))
    for k in range(len(xs)):
        out[k] = float(mp.re(mp.fsum(m)))
        if k + 1 < len(xs):
            m = [e * mi + c0 * xs[k] + c1 * xs[k + 1]
                 for mi, (e, c0, c1) in zip(m, coef, strict=True)]
    return out
