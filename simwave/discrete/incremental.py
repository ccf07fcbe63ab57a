"""Incremental (delta-operator) state-space realization that keeps its digits near z = 1.

The model runs as

    x[k+1] = x[k] + E x[k] + G u[k],    y[k] = C x[k] + D u[k],

with E = Phi - I block lower triangular: 1 x 1 blocks (real poles) and 2 x 2
modal blocks [[a, b], [-b, a]] (complex pairs). The state is updated by its
*increment*, and E carries every pole's distance from z = 1 to full relative
precision, where second-order-section coefficients (sums and products of
poles near 1) lose up to 1/(w T)^2 of it (Middleton & Goodwin, *Digital
Control and Estimation: A Unified Approach*, Prentice Hall, 1990, ch. 2 and
the finite-word-length discussion there, from memory: the delta operator
delta = (z - 1)/T).

Running it with vectorised scipy calls
--------------------------------------
Block lower triangularity makes the state a cascade: block i is driven only
by u and by the blocks before it, all already computed for the whole block of
samples. Each diagonal block is one first-order recursion, real, or complex
for a modal pair (xi = x_a + j x_b turns [[a, b], [-b, a]] into e = a - j b):

    xi[k+1] = p xi[k] + d[k],  p = 1 + e,

run with ``scipy.signal.lfilter`` (first order, complex where needed). Its
float64 coefficient fl(1 + e) and the rounding of the state at every step
would cost the same 1e-16/|e| as any recursive form; so each recursion is
refined once: the residual r[k] = (xi[k+1] - xi[k]) - e xi[k] - d[k] is formed
from *differences* of the computed states (exact for neighbouring values,
Sterbenz's lemma), which carry the coefficient and state round-off with
relative accuracy, and a second lfilter pass with the same pole gives the
correction (iterative refinement with a residual computed in the increment
variables; Higham, *Accuracy and Stability of Numerical Algorithms*, 2nd ed.,
2002, ch. 12, for the principle). What remains is second order in round-off.

The cost is two first-order lfilter passes per block plus the couplings
(one matrix product per block), several times a bare sosfilt; blocks whose
pole is far from z = 1 (|e| >= 1e-2) skip the refinement: this form is
chosen only where the sections would lose accuracy (see
:func:`section_round_off`).
"""

from __future__ import annotations

import math

import numpy as np

from simwave.discrete.kernels import lfilter
from simwave.discrete.realization import eigvals_stack, state_blocks

__all__ = [
    "IncrementalModel",
    "section_round_off",
    "section_response_difference",
    "increment_round_off",
]

_EPS = np.finfo(np.float64).eps

#: Values (samples x states x channels) per piece inside :meth:`IncrementalModel.run`,
#: so that the temporaries stay in cache; pieces are 2048 to 65536 samples long.
CHUNK_VALUES = 1 << 17

#: Blocks whose pole increment |e| = |p - 1| is at least this are run in one pass:
#: their recursion loses only about eps/|e| <= 2e-14 (no refinement needed).
REFINE_BELOW = 1e-2


class IncrementalModel:
    """x[k+1] = x[k] + E x[k] + G u[k], y = C x + D u, run block by block (internal).

    ``E`` (n, n) block lower triangular with 1 x 1 / 2 x 2 modal diagonal blocks,
    ``G`` (n, 1), ``C`` (1, n), ``D`` (1, 1). States are carried as an array of
    shape (n, n_channels).
    """

    def __init__(self, E, G, C, D) -> None:
        self.E = np.asarray(E, dtype=np.float64)
        self.G = np.asarray(G, dtype=np.float64).reshape(-1)
        self.C = np.asarray(C, dtype=np.float64).reshape(-1)
        self.D = float(np.asarray(D, dtype=np.float64).reshape(-1)[0])
        self.n = self.E.shape[0]
        self.blocks = state_blocks(self.E)
        # Each block's pole increment e (complex for a modal pair).
        self.incs = []
        for i, size in self.blocks:
            if size == 1:
                self.incs.append(float(self.E[i, i]))
            else:
                a = 0.5 * (self.E[i, i] + self.E[i + 1, i + 1])
                b = 0.5 * (self.E[i, i + 1] - self.E[i + 1, i])
                self.incs.append(complex(a, -b))

    def poles_increment(self) -> np.ndarray:
        """e = p - 1 per block (one per complex pair), complex128."""
        return np.array(self.incs, dtype=np.complex128)

    def run(self, u: np.ndarray, x0: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Outputs for inputs u (n_samples, n_ch) from state x0; returns (y, x_end).

        The state has shape (2, n, n_ch): the first-pass state and its
        refinement, carried separately so that splitting a signal into blocks
        (or channels) anywhere gives bit-for-bit the same output: every sample
        sees the same operations in the same order. The state proper is their
        sum (:meth:`total`). Works through the samples in pieces so that the
        temporaries stay in cache.
        """
        ns = u.shape[0]
        y = np.empty(u.shape)
        x = np.array(x0, dtype=np.float64)
        step = CHUNK_VALUES // max(1, self.n * u.shape[1])
        step = int(min(65536, max(2048, step)))
        for s0 in range(0, ns, step):
            y[s0 : s0 + step], x = self._run_piece(u[s0 : s0 + step], x)
        return y, x

    @staticmethod
    def total(x: np.ndarray) -> np.ndarray:
        """The state proper, (n, n_ch), from a carried state (2, n, n_ch)."""
        return x[0] + x[1]

    @staticmethod
    def carried(x: np.ndarray) -> np.ndarray:
        """A carried state (2, n, n_ch) for the state proper x (n, n_ch)."""
        return np.stack([np.asarray(x, dtype=np.float64), np.zeros(np.shape(x))])

    def _run_piece(self, u: np.ndarray, x0: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        ns, nch = u.shape
        y = self.D * u
        if self.n == 0:
            return y, x0.copy()
        X = np.empty((self.n, ns, nch))  # states proper at samples 0..ns-1
        x_end = np.empty_like(x0)
        for (i, size), e in zip(self.blocks, self.incs, strict=True):
            # Drives as elementwise multiply-adds in a fixed order (no BLAS: its
            # kernels may sum in another order for another array shape).
            drive = []
            for r in range(i, i + size):
                d = self.G[r] * u
                for j in range(i):
                    if self.E[r, j] != 0.0:
                        d = d + self.E[r, j] * X[j]
                drive.append(d)
            if size == 1:
                first, corr = _recursion(e, drive[0], x0[0, i], x0[1, i])
                X[i] = first[:-1] + corr[:-1]
                x_end[0, i], x_end[1, i] = first[-1], corr[-1]
                continue
            d = np.empty((ns, nch), dtype=np.complex128)
            d.real, d.imag = drive
            first, corr = _recursion(e, d, x0[0, i] + 1j * x0[0, i + 1],
                                     x0[1, i] + 1j * x0[1, i + 1])
            both = first[:-1] + corr[:-1]
            X[i], X[i + 1] = both.real, both.imag
            x_end[0, i], x_end[0, i + 1] = first[-1].real, first[-1].imag
            x_end[1, i], x_end[1, i + 1] = corr[-1].real, corr[-1].imag
        for j in range(self.n):
            if self.C[j] != 0.0:
                y = y + self.C[j] * X[j]
        return y, x_end

    def settled_state(self) -> np.ndarray:
        """State per unit constant input in steady state: E x + G = 0."""
        return np.linalg.solve(self.E, -self.G)

    def dc_gain(self) -> float:
        return float(self.D - self.C @ np.linalg.solve(self.E, self.G))


def _recursion(e, d: np.ndarray, x0: np.ndarray, c0: np.ndarray):
    """xi[k+1] = xi[k] + e xi[k] + d[k] for k < n; returns (first pass, refinement), n + 1 each.

    The first pass runs lfilter with p = fl(1 + e) from x0; the refinement, from
    c0, runs the same recursion on minus the residual taken in increment
    variables (see the module notes). xi = first + refinement.
    """
    p = 1.0 + e
    a = np.array([1.0, -p])
    one = np.ones(1)
    kind = np.result_type(d, x0, a)
    # The carried value goes in as a leading input sample, so lfilter itself forms
    # p * x0 for the next step exactly as it would inside one long call (numpy's
    # complex product may round differently from scipy's C loop): any split of the
    # signal then gives the same bits.
    buf = np.empty((d.shape[0] + 1,) + d.shape[1:], dtype=kind)
    buf[0] = x0
    buf[1:] = d
    x = lfilter(one, a, buf, axis=0)
    if abs(e) >= REFINE_BELOW:  # far from z = 1: one pass loses only eps/|e|
        return x, np.zeros_like(x)
    buf[1:] = d
    buf[1:] -= x[1:] - x[:-1] - e * x[:-1]  # minus the residual
    buf[0] = c0
    c = lfilter(one, a, buf, axis=0)
    return x, c


def section_round_off(sos: np.ndarray) -> float:
    """Expected relative round-off level of running ``sos`` as second-order sections.

    For each section, the sensitivity of its denominator to rounding its
    coefficients to float64, sum|a_i| / |A(e^{j theta})|, taken at the unit-circle
    point nearest each pole (and at z = 1 when a real pole is there): the
    coefficient error eps sum|a_i| relative to |A| where the response is made.
    Poles near z = 1 at w T give |A| ~ (w T)^2, the 1e-16/(w T)^2 behaviour of
    direct-form sections (Oppenheim & Schafer, *Discrete-Time Signal
    Processing*, 3rd ed., sec. 6.8-6.9, coefficient quantization and pole
    sensitivity of second-order sections; section numbers from memory).
    Returns eps times the largest sensitivity (inf for a pole on the unit circle).

    The roots are np.roots' (the eigenvalues of each section's companion matrix),
    found for all sections in one stacked eigenvalue call: the same LAPACK routine on
    the same matrices, so the same values.
    """
    sos = np.asarray(sos, dtype=np.float64)
    fast = _section_round_off_floats(sos)
    if fast is not None:
        return fast
    rows = [row[3:] for row in sos if not (row[4] == 0.0 and row[5] == 0.0)]
    if not rows:
        return _EPS * 0.0
    second = [a for a in rows if a[2] != 0.0]
    roots_of: dict[int, list] = {}
    if second:
        comp = np.zeros((len(second), 2, 2))
        for j, a in enumerate(second):
            comp[j, 0, 0] = -a[1] / a[0]
            comp[j, 0, 1] = -a[2] / a[0]
            comp[j, 1, 0] = 1.0
        eig = np.linalg.eigvals(comp)
        for j in range(len(second)):
            roots_of[id(second[j])] = list(eig[j])
    worst = 0.0
    for a in rows:
        # np.roots strips a trailing zero coefficient: a root at 0 plus the rest
        roots = roots_of[id(a)] if a[2] != 0.0 else [-a[1] / a[0], 0.0]
        total = float(np.abs(a).sum())
        for r in roots:
            r = complex(r)
            th = math.atan2(abs(r.imag), r.real)
            z = complex(math.cos(th), math.sin(th))
            den = abs(a[0] * z * z + a[1] * z + a[2])
            if den == 0.0:
                return math.inf
            worst = max(worst, total / den)
    return _EPS * worst


def _section_round_off_floats(sos: np.ndarray) -> float | None:
    """:func:`section_round_off` on Python floats, or None where it must be left to numpy.

    The same IEEE operations on the same values as on numpy's float64 scalars (numpy's
    sum of three values adds left to right, as written here), without their overhead;
    the roots from one stacked eigenvalue call (:func:`eigvals_stack`, np.linalg.eigvals'
    kernel). Non-finite coefficients, a zero leading coefficient or any non-finite
    intermediate (where numpy's scalars would also warn) return None: the numpy form
    then runs, with its values and warnings (tests/test_discrete_realization.py compares).
    """
    rows = [a for a in sos[:, 3:].tolist() if not (a[1] == 0.0 and a[2] == 0.0)]
    if not rows:
        return None
    for a in rows:
        if a[0] == 0.0 or not (math.isfinite(a[0]) and math.isfinite(a[1])
                               and math.isfinite(a[2])):
            return None
    second = [j for j, a in enumerate(rows) if a[2] != 0.0]
    roots_of: dict[int, list] = {}
    if second:
        comp = np.zeros((len(second), 2, 2))
        for k, j in enumerate(second):
            a = rows[j]
            comp[k, 0, 0] = -a[1] / a[0]
            comp[k, 0, 1] = -a[2] / a[0]
            comp[k, 1, 0] = 1.0
        if not np.isfinite(comp).all():
            return None
        eig = eigvals_stack(comp).tolist()
        for k, j in enumerate(second):
            roots_of[j] = eig[k]
    worst = 0.0
    for j, a in enumerate(rows):
        roots = roots_of[j] if a[2] != 0.0 else [-a[1] / a[0], 0.0]
        total = (abs(a[0]) + abs(a[1])) + abs(a[2])
        for r in roots:
            r = complex(r)
            if not (math.isfinite(r.real) and math.isfinite(r.imag)):
                return None
            th = math.atan2(abs(r.imag), r.real)
            z = complex(math.cos(th), math.sin(th))
            w = a[0] * z * z + a[1] * z + a[2]
            if not (math.isfinite(w.real) and math.isfinite(w.imag)):
                return None
            try:
                den = abs(w)
            except OverflowError:  # numpy: inf, with a warning
                return None
            if den == 0.0:
                return math.inf
            q = total / den
            if not math.isfinite(q):
                return None
            worst = max(worst, q)
    return _EPS * worst


def section_response_difference(sos: np.ndarray, theta: np.ndarray, h: np.ndarray) -> float:
    """Largest |H_sections - H| over the angles theta, as a fraction of the largest |H|.

    ``h`` is the increment form's response at ``theta`` (radians per sample), from the
    design (:func:`simwave.discrete.realization.delta_gain_response`). This is what
    :func:`section_round_off` cannot see: the sections' numerators come from zeros
    computed on the delta-domain pencil, and a hold equivalent of high relative
    degree has sampling zeros (real, from about -1e2 to -1e-4 at order 12; their
    limits as T -> 0 are the roots of the Euler-Frobenius polynomials: Astrom,
    Hagander & Sternby, "Zeros of sampled systems", Automatica 20(1), 1984, from
    memory) that the pencil gives only to a few digits, so the sections' numerator
    is not the model's. Measured on Butterworth low-passes of orders 2-20 at fs/fc 4.8
    to 4800 (both hold methods, 40-digit mpmath step responses): the sections' step
    response error was 0.2-1.7x this difference. Points where either response is not
    finite (a pole there) are left out; 0.0 when no point is left.
    """
    theta = np.asarray(theta, dtype=np.float64)
    h = np.asarray(h, dtype=np.complex128)
    zi = np.exp(-1j * theta)[None, :]
    zi2 = zi * zi
    with np.errstate(all="ignore"):
        num = sos[:, 0:1] + sos[:, 1:2] * zi + sos[:, 2:3] * zi2
        den = sos[:, 3:4] + sos[:, 4:5] * zi + sos[:, 5:6] * zi2
        hs = num / den
        # one section: its row is the product (the reduction copies it: the same bits)
        hs = hs[0] if hs.shape[0] == 1 else hs.prod(axis=0)
        ok = np.isfinite(h) & np.isfinite(hs)
        if not ok.any():
            return 0.0
        peak = float(np.abs(h[ok]).max())
        if not peak > 0:
            return 0.0
        return float(np.abs(hs[ok] - h[ok]).max() / peak)


def increment_round_off(incs: np.ndarray, horizon: int | None = None) -> float:
    """Expected relative round-off level of the refined incremental form.

    After the refinement, what remains is the rounding of the increments
    themselves, a random walk over the slowest mode's memory 1/(1 - |p|)
    samples: eps sqrt(1/(1 - |p|)) (common practice for random round-off; the
    estimate is simwave's). A pole on the unit circle (an integrator)
    remembers the whole record: ``horizon`` samples, or 1e6 when not known.
    """
    e = np.asarray(incs, dtype=np.complex128)
    if e.size == 0:
        return _EPS
    # 1 - |1 + e| without cancellation: (1 - |p|^2)/(1 + |p|), 1 - |p|^2 = -(2 Re e + |e|^2)
    decay = -(2 * e.real + np.abs(e) ** 2) / (1 + np.abs(1 + e))
    slowest = float(np.min(decay))
    memory = 1.0 / slowest if slowest > 0 else float(horizon or 1e6)
    return _EPS * max(1.0, math.sqrt(memory))
