"""Numerical building blocks shared by the discretization methods.

* a well-scaled continuous-time state-space realization of H(s) built from its
  zeros and poles (no high-order polynomials),
* the hold integrals of the matrix exponential (zero- and first-order hold),
* zeros of a discrete state-space model from its system pencil,
* the gain that makes a zeros/poles form match a state-space model.

All arrays are float64 (complex128 for roots); frequencies inside are rad/s.
"""

from __future__ import annotations

import functools
import math

import numpy as np

from simwave.discrete.kernels import dggev
from simwave.errors import DiscretizationError

try:  # numpy's own LAPACK kernels for solve/eigvals, without their Python wrappers
    from numpy.linalg import _umath_linalg as _LINALG
except ImportError:  # another numpy layout: the public calls (same kernels, slower)
    _LINALG = None
if _LINALG is not None and not all(hasattr(_LINALG, n) for n in ("solve", "solve1", "eigvals")):
    _LINALG = None  # a private module without the kernels used here: the public calls


def _singular(err, flag):
    raise np.linalg.LinAlgError("Singular matrix")


def solve(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``np.linalg.solve(a, b)`` for float64 or complex128 arrays, the same bits.

    The same gufunc np.linalg.solve calls (numpy's umath_linalg), with its signature and
    its error state (a singular matrix raises LinAlgError), without the wrapper's checks
    (~5 us a call, a fair share of a small design's time). Falls back to np.linalg.solve
    for anything but float64/complex128 arrays of matching stacked shapes.
    """
    if (_LINALG is None or type(a) is not np.ndarray or type(b) is not np.ndarray
            or a.dtype.char not in "dD" or b.dtype.char not in "dD" or a.ndim < 2
            or a.shape[-1] != a.shape[-2] or b.ndim < 1):
        return np.linalg.solve(a, b)
    gufunc = _LINALG.solve1 if b.ndim == 1 else _LINALG.solve
    signature = "DD->D" if (a.dtype.char == "D" or b.dtype.char == "D") else "dd->d"
    with np.errstate(call=_singular, invalid="call", over="ignore", divide="ignore",
                     under="ignore"):
        return gufunc(a, b, signature=signature)


def magnitude(x: complex) -> float:
    """|x| of a Python complex as numpy's complex128 scalar gives it: hypot(re, im); where
    that overflows (Python's abs raises OverflowError) numpy's own inf and warning."""
    try:
        return abs(x)
    except OverflowError:
        return float(abs(np.complex128(x)))


def eigvals_stack(a: np.ndarray) -> np.ndarray:
    """``np.linalg.eigvals(a)`` for a finite float64 stack (..., n, n), as complex128.

    The same gufunc and error state as np.linalg.eigvals; that function returns a real
    array when every eigenvalue is real, the same values (callers here take complex
    values of them). Non-finite input goes to np.linalg.eigvals, which raises.
    """
    if (_LINALG is None or type(a) is not np.ndarray or a.dtype.char != "d"
            or not np.isfinite(a).all()):
        return np.asarray(np.linalg.eigvals(a), dtype=np.complex128)
    with np.errstate(call=_nonconvergence, invalid="call", over="ignore", divide="ignore",
                     under="ignore"):
        return _LINALG.eigvals(a, signature="d->D")


def _nonconvergence(err, flag):
    raise np.linalg.LinAlgError("Eigenvalues did not converge")

__all__ = [
    "analog_state_space",
    "hold_integrals",
    "pencil_zeros",
    "matching_gain",
    "tidy_roots",
    "ss_response",
    "expm",
    "exp_increment",
    "hold_increments",
    "delta_gain",
    "delta_gain_response",
    "state_blocks",
]


def tidy_roots(roots: np.ndarray, rtol: float = 1e-9) -> np.ndarray:
    """Make computed roots of a real system exactly conjugate-symmetric.

    Values whose imaginary part is below ``rtol`` times their magnitude become
    real; the rest are paired with their nearest conjugate and both members are
    replaced by the pair's mean (and its conjugate).

    Returns a complex128 array.
    """
    roots = np.asarray(roots, dtype=np.complex128).ravel()
    vals = roots.tolist()
    # finite parts at most 1e300 in size: the sums, differences, halves and hypot below
    # neither overflow nor turn NaN, so numpy's scalars would warn about nothing either
    if all(-1e300 <= v.real <= 1e300 and -1e300 <= v.imag <= 1e300 for v in vals):
        return _tidy_root_list(vals, rtol)
    # otherwise the same steps on numpy's complex128 scalars, whose warnings (overflow,
    # invalid) and NaN handling are numpy's
    return _tidy_root_list(list(roots), rtol)


def _tidy_root_list(rest: list[complex], rtol: float) -> np.ndarray:
    """:func:`tidy_roots`' steps on a list of complex scalars: Python complex numbers
    where every part is finite and at most 1e300 (the same operations on the same values:
    |r| is hypot(re, im) for a Python complex and numpy's complex128 scalar alike; sums,
    products and conjugates are IEEE operations; no numpy scalar overhead;
    tests/test_discrete_realization.py compares the two bit for bit), numpy's complex128
    scalars otherwise."""
    out: list[complex] = []
    while rest:
        r = rest.pop(0)
        if abs(r.imag) <= rtol * max(abs(r), 1e-300):
            out.append(complex(r.real, 0.0))
            continue
        if not rest:
            out.append(complex(r.real, 0.0))  # lone complex value: keep its real part
            continue
        conj = r.conjugate()
        dist = [abs(c - conj) for c in rest]
        if any(d != d for d in dist):  # NaN: numpy's argmin rule (the first NaN)
            j = int(np.argmin(dist))
        else:  # the first smallest, as argmin, without building an array
            j = dist.index(min(dist))
        partner = rest.pop(j)
        mean = 0.5 * (r + partner.conjugate())
        out.extend([mean, mean.conjugate()])
    return np.array(out, dtype=np.complex128)


def poly_real(roots) -> np.ndarray:
    """``np.real(np.poly(roots))`` for at most two roots, the same bits, without its overhead.

    A conjugate pair q, conj(q) gives [1, -(qr + qr), qr qr + qi qi] and two real roots
    a, b give [1, -a - b, a b]: the operations np.poly's convolution performs on these
    values (checked equal bit for bit, signs of zero included, in tests/
    test_discrete_realization.py). Roots with a zero real or imaginary part, products
    that underflow to zero or overflow (where the complex products could give another
    sign of zero, or NaN for inf), and anything else go to np.poly itself.
    """
    if len(roots) == 1:
        r = complex(roots[0])
        if r.imag == 0.0 and r.real != 0.0:
            return np.array([1.0, -r.real])
    elif len(roots) == 2:
        a, b = complex(roots[0]), complex(roots[1])
        out = None
        if a.imag == 0.0 and b.imag == 0.0 and a.real != 0.0 and b.real != 0.0:
            out = (-a.real - b.real, a.real * b.real)
        elif a.imag != 0.0 and a.real != 0.0 and b.real == a.real and b.imag == -a.imag:
            out = (-(a.real + a.real), a.real * a.real + a.imag * a.imag)
        # a product that underflows to 0 or anything that overflows: np.poly's own signs
        if out is not None and out[1] != 0.0 and math.isfinite(out[0]) and math.isfinite(out[1]):
            return np.array([1.0, out[0], out[1]])
    return np.real(np.poly(roots))


# --------------------------------------------------------------------------- analog realization
def _split(roots: np.ndarray) -> tuple[list[complex], list[float]]:
    """Complex roots with positive imaginary part (one per pair) and real roots."""
    roots = tidy_roots(roots)
    cplx = [complex(r) for r in roots if r.imag > 0]
    real = sorted(float(r.real) for r in roots if r.imag == 0)
    return cplx, real


def _group_sections(
    zeros: np.ndarray, poles: np.ndarray
) -> list[tuple[list[complex], list[complex]]]:
    """Group poles and zeros into first- and second-order sections (zeros, poles).

    A complex pole pair is one second-order section; real poles are first-order
    sections unless a complex zero pair needs a second-order home, in which case
    two real poles are merged. Real zeros then fill free places, nearest pole first.
    """
    pc, pr = _split(poles)
    zc, zr = _split(zeros)
    sections: list[dict] = [{"p": [p, np.conj(p)], "z": []} for p in pc]
    sections += [{"p": [complex(p)], "z": []} for p in pr]
    for z in sorted(zc, key=lambda v: -abs(v)):
        free2 = [s for s in sections if len(s["p"]) == 2 and not s["z"]]
        if not free2:
            firsts = [s for s in sections if len(s["p"]) == 1 and not s["z"]]
            # Merge the two real poles nearest the zero pair into one section.
            firsts.sort(key=lambda s: abs(s["p"][0] - z))
            a, b = firsts[0], firsts[1]
            sections.remove(b)
            a["p"] = a["p"] + b["p"]
            free2 = [a]
        best = min(free2, key=lambda s: abs(s["p"][0] - z))
        best["z"] = [z, np.conj(z)]
    for z in sorted(zr, key=lambda v: -abs(v)):
        free = [s for s in sections if len(s["z"]) < len(s["p"])]
        best = min(free, key=lambda s: min(abs(p - z) for p in s["p"]))
        best["z"].append(complex(z))
    return [(s["z"], s["p"]) for s in sections]


def _section_ss(zeros: list[complex], poles: list[complex], g: float):
    """State space of g * prod(s - z) / prod(s - p) for one first/second-order section."""
    num = g * poly_real(zeros) if zeros else np.array([g])
    n = len(poles)
    num = np.concatenate([np.zeros(n + 1 - num.size), num])  # pad to degree n
    if n == 1:
        p = poles[0].real
        d = num[0]
        c = num[1] + d * p  # g(s - z)/(s - p) = d + (num1 + d p)/(s - p)
        beta = math.sqrt(abs(c)) if c != 0 else 1.0
        return (np.array([[p]]), np.array([[beta]]), np.array([[c / beta]]), np.array([[d]]))
    den = poly_real(poles)  # [1, a1, a0]
    d = num[0]
    b1 = num[1] - d * den[1]
    b0 = num[2] - d * den[2]
    p1, p2 = poles
    if abs(p1.imag) > 0:
        # Modal (normal) form [[sigma, w], [-w, sigma]]: well conditioned for expm.
        sig, w = p1.real, abs(p1.imag)
        A = np.array([[sig, w], [-w, sig]])
        c2 = b1
        c1 = (b0 + b1 * sig) / w
        beta = math.sqrt(math.hypot(c1, c2)) or 1.0
        return A, np.array([[0.0], [beta]]), np.array([[c1 / beta, c2 / beta]]), np.array([[d]])
    # Two real poles: two first-order stages in series, coupled by gamma.
    r1, r2 = p1.real, p2.real
    gamma = max(abs(r1), abs(r2)) or 1.0
    A = np.array([[r1, 0.0], [gamma, r2]])
    k1 = b1
    k2 = (b0 + b1 * r2) / gamma
    beta = math.sqrt(math.hypot(k1, k2)) or 1.0
    return A, np.array([[beta], [0.0]]), np.array([[k1 / beta, k2 / beta]]), np.array([[d]])


def _prod(values: list[complex]) -> np.complex128:
    """``np.prod(values)`` of Python complex numbers: numpy's product reduction multiplies
    left to right with the same complex product (checked bit for bit in tests/
    test_discrete_realization.py); a numpy scalar, as np.prod returns. A product that is
    not finite (where numpy would warn) is numpy's own."""
    out = values[0]
    for v in values[1:]:
        out = out * v
    if not (math.isfinite(out.real) and math.isfinite(out.imag)):
        return np.prod(values)  # overflow or NaN: numpy's own reduction, with its warnings
    return np.complex128(out)


def _unit_magnitude(zeros: list[complex], poles: list[complex]) -> float:
    """|prod(s - z)/prod(s - p)| at s = j*w_ref, w_ref a scale of the section (never 0 or inf)."""
    scale = max([abs(p) for p in poles] + [abs(z) for z in zeros] + [0.0]) or 1.0
    for factor in (1.0, 1.618, 0.618, 2.414, 0.3):
        s = 1j * scale * factor
        num = _prod([s - z for z in zeros]) if zeros else 1.0
        den = _prod([s - p for p in poles]) if poles else 1.0
        m = abs(num / den)
        if m > 0 and math.isfinite(m):
            return m
    return 1.0


def analog_state_space(zeros, poles, gain: float):
    """Continuous-time (A, B, C, D) for H(s) = gain * prod(s - z)/prod(s - p).

    Built as a series connection of first- and second-order sections, each in a
    well-conditioned form (modal form for complex pairs), with the overall gain
    spread evenly over the sections. A companion matrix of the whole
    denominator would have entries of the size of w^n and ruin the matrix
    exponential for high orders; this form keeps every entry of the order of
    the pole magnitudes.

    Returns
    -------
    A : ndarray, shape (n, n)
    B : ndarray, shape (n, 1)
    C : ndarray, shape (1, n)
    D : ndarray, shape (1, 1)

    References
    ----------
    .. [1] G. F. Franklin, J. D. Powell, M. L. Workman, *Digital Control of
           Dynamic Systems*, 3rd ed., Addison-Wesley, 1998, ch. 4 (state-space
           descriptions, series connection).
    """
    poles = np.asarray(poles, dtype=np.complex128).ravel()
    zeros = np.asarray(zeros, dtype=np.complex128).ravel()
    if not (np.all(np.isfinite(poles)) and np.all(np.isfinite(zeros))):
        # e.g. a transformed model whose pole overflowed: no finite realization exists;
        # callers that compare methods read this as "this method cannot make the model".
        raise DiscretizationError("a pole or zero of the model is not finite (it overflowed); "
                                  "no state space can be built for it")
    return _analog_state_space_cached(zeros.tobytes(), poles.tobytes(), float(gain))


@functools.lru_cache(maxsize=64)
def _analog_state_space_cached(zeros_bytes: bytes, poles_bytes: bytes, gain: float):
    # The analog model does not depend on the rate: a rate search, a batch of many
    # files through one system, and repeated simulate() calls build it once. The
    # arrays are shared, so they are made read-only.
    parts = _analog_state_space(np.frombuffer(zeros_bytes, dtype=np.complex128),
                                np.frombuffer(poles_bytes, dtype=np.complex128), gain)
    for arr in parts:
        arr.flags.writeable = False
    return parts


def _analog_state_space(zeros: np.ndarray, poles: np.ndarray, gain: float):
    if poles.size == 0:
        return np.zeros((0, 0)), np.zeros((0, 1)), np.zeros((1, 0)), np.array([[float(gain)]])
    groups = _group_sections(zeros, poles)
    mags = [_unit_magnitude(z, p) for z, p in groups]
    m = len(groups)
    total = abs(gain) * float(np.prod(mags))
    share = total ** (1.0 / m) if total > 0 else 0.0
    parts = []
    for i, ((z, p), mag) in enumerate(zip(groups, mags, strict=True)):
        g = share / mag
        if i == 0 and gain < 0:
            g = -g
        parts.append(_section_ss(z, p, g))
    return series_state_space(parts)


def series_state_space(parts):
    """Cascade of single-input single-output state-space blocks (A, B, C, D), in order.

    The previous block's output y = C x + D u feeds the next block's input, so
    the states stack block-lower-triangularly (Ogata, *Modern Control
    Engineering*, 5th ed., ch. 9, series connection; section number from memory).
    Filled in place: every entry is one product of two numbers (B_i C and D_i C are
    outer products of a column and a row), the same as the matrix products would give;
    + 0.0 makes a product's -0.0 the +0.0 a matrix product's sum (from 0) gives.
    """
    sizes = [np.shape(part[0])[0] for part in parts]
    n = int(sum(sizes))
    A = np.zeros((n, n))
    B = np.zeros((n, 1))
    C = np.zeros((1, n))
    D = np.ones((1, 1))
    at = 0
    for (Ai, Bi, Ci, Di), k in zip(parts, sizes, strict=True):
        Bi = np.asarray(Bi, dtype=np.float64)
        Di = np.asarray(Di, dtype=np.float64)
        if at:
            A[at : at + k, :at] = Bi * C[:, :at] + 0.0  # (k, 1) * (1, at): Bi @ C
        A[at : at + k, at : at + k] = Ai
        B[at : at + k] = Bi * D[0, 0] + 0.0  # Bi @ D
        C[:, :at] = Di[0, 0] * C[:, :at] + 0.0  # Di @ C
        C[:, at : at + k] = Ci
        D = Di @ D
        at += k
    return A, B, C, D


# --------------------------------------------------------------------------- matrix exponential
_PADE = {
    3: (120.0, 60.0, 12.0, 1.0),
    5: (30240.0, 15120.0, 3360.0, 420.0, 30.0, 1.0),
    7: (17297280.0, 8648640.0, 1995840.0, 277200.0, 25200.0, 1512.0, 56.0, 1.0),
    9: (17643225600.0, 8821612800.0, 2075673600.0, 302702400.0, 30270240.0, 2162160.0,
        110880.0, 3960.0, 90.0, 1.0),
    13: (64764752532480000.0, 32382376266240000.0, 7771770303897600.0, 1187353796428800.0,
         129060195264000.0, 10559470521600.0, 670442572800.0, 33522128640.0, 1323241920.0,
         40840800.0, 960960.0, 16380.0, 182.0, 1.0),
}
_THETA = {3: 1.495585217958292e-2, 5: 2.539398330063230e-1, 7: 9.504178996162932e-1,
          9: 2.097847961257068e0, 13: 5.371920351148152e0}


def expm(A: np.ndarray) -> np.ndarray:
    """Matrix exponential by scaling and squaring with a Pade approximant.

    Higham's algorithm (Pade degree 3, 5, 7, 9 or 13 chosen by the 1-norm,
    scaling by 2^-s, s squarings), written with numpy so that the small
    matrices used here do not pay a threaded-BLAS start-up for each call.

    References
    ----------
    .. [1] N. J. Higham, "The scaling and squaring method for the matrix
           exponential revisited", SIAM J. Matrix Anal. Appl. 26(4), 2005,
           Algorithm 2.3 (the theta_m and Pade coefficients used here).
    """
    A = np.asarray(A, dtype=np.float64)
    n = A.shape[0]
    if n == 0:
        return np.zeros((0, 0))
    eye = np.eye(n)
    norm = float(np.abs(A).sum(axis=0).max())
    for m in (3, 5, 7, 9):
        if norm <= _THETA[m]:
            b = _PADE[m]
            powers = [eye, A @ A]
            while len(powers) < (m + 1) // 2:
                powers.append(powers[-1] @ powers[1])
            U = A @ sum(b[2 * k + 1] * powers[k] for k in range((m + 1) // 2))
            V = sum(b[2 * k] * powers[k] for k in range((m + 1) // 2))
            return np.linalg.solve(V - U, V + U)
    s = max(0, int(math.ceil(math.log2(norm / _THETA[13]))))
    A = A / 2.0**s
    b = _PADE[13]
    A2 = A @ A
    A4 = A2 @ A2
    A6 = A2 @ A4
    U = A @ (A6 @ (b[13] * A6 + b[11] * A4 + b[9] * A2) + b[7] * A6 + b[5] * A4 + b[3] * A2
             + b[1] * eye)
    V = A6 @ (b[12] * A6 + b[10] * A4 + b[8] * A2) + b[6] * A6 + b[4] * A4 + b[2] * A2 + b[0] * eye
    R = np.linalg.solve(V - U, V + U)
    for _ in range(s):
        R = R @ R
    return R


def exp_increment(M: np.ndarray) -> np.ndarray:
    """e^M - I, computed without ever forming e^M (the increment form).

    When M is small (a sample period far shorter than the system's time
    constants) e^M is I plus tiny entries, and forming it rounds those entries
    to the absolute precision of 1: a pole at 1 - 1e-7 keeps only 9 digits.
    Here the increment F = e^M - I is computed directly: a Taylor series at
    M / 2^s with ||M / 2^s||_1 <= 1/8 (11 terms, truncation below 1e-17
    relative), then s doublings F(2h) = 2 F(h) + F(h)^2, which follow from
    e^{2hM} = (e^{hM})^2 and never add I back. Every entry keeps its own
    relative accuracy, which is what the incremental (delta-operator)
    realization needs (Middleton & Goodwin, *Digital Control and Estimation:
    A Unified Approach*, 1990, ch. 2, the delta-domain model of a sampled
    system; Higham, SIAM J. Matrix Anal. Appl. 26(4), 2005, for scaling and
    squaring).
    """
    M = np.asarray(M, dtype=np.float64)
    n = M.shape[0]
    if n == 0:
        return np.zeros((0, 0))
    norm = float(np.abs(M).sum(axis=0).max())
    s = max(0, int(math.ceil(math.log2(norm * 8.0)))) if norm > 0 else 0
    X = M / 2.0**s
    eye = np.eye(n)
    F = X / 12.0
    F += eye
    for k in range(11, 1, -1):  # Horner: X (I + X/2 (I + X/3 (... (I + X/12))))
        F = X @ F  # then I + (X F)/k, in place: the same operations (IEEE sums commute)
        F /= k
        F += eye
    F = X @ F
    for _ in range(s):
        G = F @ F  # 2 F + F F, in place
        F *= 2.0
        F += G
    return F


# --------------------------------------------------------------------------- hold integrals
def hold_integrals(A: np.ndarray, B: np.ndarray, h: float):
    """Matrix exponential and hold integrals over one interval of length h.

    For an input that is linear over [0, h], from w0 at the start to w1 at the
    end, x(h) = Phi x(0) + P0 w0 + P1 w1, with

        Phi = e^{A h},  P1 = int_0^h e^{A(h - s)} B s/h ds,  P0 = int_0^h e^{A s} ds B - P1.

    Computed with one exponential of the block matrix
    [[A h, B h, 0], [0, 0, I], [0, 0, 0]] (Van Loan 1978), the same construction
    scipy.signal.lsim uses for its first-order-hold interpolation, taken in
    increment form (:func:`hold_increments`).

    References
    ----------
    .. [1] C. F. Van Loan, "Computing integrals involving the matrix
           exponential", IEEE Trans. Automatic Control 23(3), 1978.
    .. [2] Franklin, Powell & Workman, *Digital Control of Dynamic Systems*,
           3rd ed., sec. 6.3 (zero- and triangle-hold equivalents).
    """
    E, P0, P1 = hold_increments(A, B, h)
    return np.eye(A.shape[0]) + E, P0, P1


def hold_increments(A: np.ndarray, B: np.ndarray, h: float):
    """(E, P0, P1) with E = e^{A h} - I and the hold integrals of :func:`hold_integrals`.

    The Van Loan block matrix exponentiated in increment form
    (:func:`exp_increment`), so that E and the input columns keep their
    relative accuracy however short h is against the time constants.
    """
    n = A.shape[0]
    if n == 0:
        return np.zeros((0, 0)), np.zeros((0, 1)), np.zeros((0, 1))
    M = np.zeros((n + 2, n + 2))
    M[:n, :n] = A * h
    M[:n, n : n + 1] = B * h
    M[n, n + 1] = 1.0
    F = exp_increment(M)
    E = F[:n, :n]
    Q = F[:n, n : n + 1]  # int_0^h e^{As} ds B (zero-order hold)
    P1 = F[:n, n + 1 : n + 2]
    return E, Q - P1, P1


# --------------------------------------------------------------------------- zeros and gain
def pencil_zeros(Phi, Gam, C, D) -> np.ndarray:
    """Finite zeros of the discrete model (Phi, Gam, C, D) from its system pencil.

    The zeros are the finite generalized eigenvalues of
    ([[Phi, Gam], [C, D]], [[I, 0], [0, 0]]), computed with the QZ algorithm:
    no characteristic polynomial is formed, so high orders stay accurate.

    References
    ----------
    .. [1] A. Emami-Naeini, P. Van Dooren, "Computation of zeros of linear
           multivariable systems", Automatica 18(4), 1982.
    """
    n = Phi.shape[0]
    if n == 0:
        return np.zeros(0, dtype=np.complex128)
    # Zeros do not change when the input column is scaled and the output row is
    # scaled; bring both to unit size so that QZ sees a well-scaled pencil (the
    # hold equivalents of high relative degree have input terms of order T^r).
    # np.linalg.norm of a matrix (ord None) is sqrt(x.dot(x)) over its raveled values
    x = np.concatenate((np.asarray(Gam, dtype=np.float64).ravel(),
                        np.asarray(D, dtype=np.float64).ravel()))
    col = float(np.sqrt(x.dot(x)))
    Gam, D = (Gam / col, D / col) if col > 0 else (Gam, D)
    x = np.concatenate((np.asarray(C, dtype=np.float64).ravel(),
                        np.asarray(D, dtype=np.float64).ravel()))
    row = float(np.sqrt(x.dot(x)))
    C, D = (C / row, D / row) if row > 0 else (C, D)
    M = np.empty((n + 1, n + 1))  # np.block([[Phi, Gam], [C, D]]), filled in place
    M[:n, :n] = Phi
    M[:n, n:] = Gam
    M[n:, :n] = C
    M[n:, n:] = D
    N = np.zeros_like(M)
    N[:n, :n] = np.eye(n)
    alpha, beta = _generalized_eigvals(M, N)
    scale = max(1.0, float(np.abs(M).max()))
    finite = np.abs(beta) * 1e9 * scale > np.abs(alpha)
    finite &= np.abs(beta) > 1e-13 * scale
    z = alpha[finite] / beta[finite]
    return tidy_roots(z)


_GGEV = None
_GGEV_LWORK: dict[tuple[int, int], np.ndarray] = {}


def _generalized_eigvals(M: np.ndarray, N: np.ndarray):
    """(alpha, beta) of ``scipy.linalg.eigvals(M, N, homogeneous_eigvals=True)``, same bits.

    The same LAPACK routine (ggev, workspace queried the same way) called directly:
    scipy's wrapper costs about as much again in argument checks for these small
    matrices. Non-finite input raises scipy's ValueError; failure, its LinAlgError.
    """
    global _GGEV
    M = np.asarray(M, dtype=np.float64)
    N = np.asarray(N, dtype=np.float64)
    if not (np.isfinite(M).all() and np.isfinite(N).all()):
        raise ValueError("array must not contain infs or NaNs")
    if _GGEV is None:
        _GGEV = dggev
        if _GGEV is None:  # scipy.linalg's module not loadable by itself: its public lookup
            import scipy.linalg

            _GGEV = scipy.linalg.get_lapack_funcs(("ggev",), (M, N))[0]
    # the workspace query's answer depends on the size only (LAPACK's block sizes): asked once
    lwork = _GGEV_LWORK.get(M.shape)
    if lwork is None:
        res = _GGEV(M, N, lwork=-1)
        lwork = _GGEV_LWORK[M.shape] = res[-2][0].real.astype(np.int_)
    alphar, alphai, beta, _, _, _, info = _GGEV(M, N, 0, 0, lwork, 0, 0)
    if info != 0:
        raise np.linalg.LinAlgError(
            f"generalized eig algorithm (ggev) did not converge (LAPACK info={info})")
    ab = np.vstack((alphar + 1j * alphai, beta))
    return ab[0], ab[1]


def ss_response(Phi, Gam, C, D, z: complex) -> complex:
    """D + C (z I - Phi)^{-1} Gam at one complex point z."""
    n = Phi.shape[0]
    if n == 0:
        return complex(D[0, 0])
    v = np.linalg.solve(z * np.eye(n) - Phi, Gam[:, 0].astype(np.complex128))
    return complex(D[0, 0] + C[0] @ v)


def matching_gain(Phi, Gam, C, D, zeros, poles) -> float:
    """Gain k so that k * prod(z - zeros)/prod(z - poles) equals the state-space model.

    Matched on the unit circle where the model's response is largest (away
    from poles and zeros): the zeros of hold equivalents with a high relative
    degree are known only to a limited relative accuracy, and matching where
    the signal is carried keeps the remaining error in the stopband.
    """
    zeros = np.asarray(zeros)
    poles = np.asarray(poles)
    roots = np.concatenate([zeros, poles]) if zeros.size + poles.size else np.array([0.0])
    thetas = np.linspace(0.0, 1.0, 65) * np.pi
    pts = np.exp(1j * thetas)
    dist = np.min(np.abs(pts[:, None] - roots[None, :]), axis=1)
    ok = dist > 1e-3 * max(1.0, float(np.max(dist)))
    if not np.any(ok):
        ok = dist >= np.max(dist)
    pts = pts[ok]
    h = ss_response_many(Phi, Gam, C, D, pts)
    i = int(np.argmax(np.abs(h)))
    unit = np.prod(pts[i] - zeros) / np.prod(pts[i] - poles)
    return float(np.real(h[i] / unit))


def ss_response_many(Phi, Gam, C, D, pts: np.ndarray) -> np.ndarray:
    """D + C (z I - Phi)^{-1} Gam at many complex points z (one batched solve)."""
    n = Phi.shape[0]
    pts = np.asarray(pts, dtype=np.complex128)
    if n == 0:
        return np.full(pts.shape, complex(D[0, 0]))
    mats = pts[:, None, None] * np.eye(n)[None] - Phi[None]
    rhs = np.broadcast_to(Gam.astype(np.complex128), (pts.size, n, 1))
    v = solve(mats, rhs)[:, :, 0]
    return D[0, 0] + v @ C[0]


# --------------------------------------------------------------------------- delta domain
def state_blocks(E: np.ndarray) -> list[tuple[int, int]]:
    """(start, size) of the diagonal blocks of a block-lower-triangular E.

    A 2 x 2 block is a complex pole pair in modal form (non-zero entry above
    the diagonal); everything else is 1 x 1.
    """
    n = E.shape[0]
    out, i = [], 0
    while i < n:
        size = 2 if i + 1 < n and E[i, i + 1] != 0.0 else 1
        out.append((i, size))
        i += size
    return out


def increment_response(E, G, C, D, w: np.ndarray) -> np.ndarray:
    """D + C (w I - E)^{-1} G at points w = z - 1 (one batched solve)."""
    return ss_response_many(E, G, C, D, np.asarray(w, dtype=np.complex128) + 0.0)


def delta_gain(E, G, C, D, w_zeros, w_poles, theta_candidates) -> float:
    """Gain k with k prod(w - w_z)/prod(w - w_p) = D + C (w I - E)^{-1} G, w = z - 1.

    Matched at the candidate unit-circle angle (radians per sample) where the
    model's |H| is largest, among those not on top of a root; ``w = e^{j theta}
    - 1`` is formed with expm1, so points near z = 1 lose nothing. Matching
    where |H| is largest keeps the match away from stopband round-off (where
    |H| can be 1e-19 of its peak, and the gain would be fitted to noise).
    """
    return delta_gain_response(E, G, C, D, w_zeros, w_poles, theta_candidates)[0]


def delta_gain_response(E, G, C, D, w_zeros, w_poles, theta_candidates):
    """(k, theta, h): :func:`delta_gain`'s k, and the angles (radians per sample) and
    responses D + C (w I - E)^{-1} G it was chosen among (as computed: a pole at a
    candidate point gives a non-finite value there, passed over by the match).
    """
    w_zeros = np.asarray(w_zeros, dtype=np.complex128)
    w_poles = np.asarray(w_poles, dtype=np.complex128)
    th = np.unique(np.clip(np.asarray(theta_candidates, dtype=np.float64), 0.0, math.pi))
    w = np.expm1(1j * th)
    roots = np.concatenate([w_zeros, w_poles])
    if roots.size:
        scale = np.maximum(np.abs(w), np.abs(roots).max() * 1e-300)
        near = np.abs(w[:, None] - roots[None, :]).min(axis=1)
        keep = near > 1e-6 * np.maximum(scale, 1e-300)
        if keep.any():
            w = w[keep]
            th = th[keep]
    # A direct evaluation of (w I - E) at w = 0 is exact for a nonsingular E.
    h = increment_response(E, G, C, D, w)
    i = int(np.argmax(np.abs(np.where(np.isfinite(h), h, 0.0))))
    unit = (w[i] - w_zeros).prod() / (w[i] - w_poles).prod()
    return float(np.real(h[i] / unit)), th, h
