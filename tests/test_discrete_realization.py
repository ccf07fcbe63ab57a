"""Numerical building blocks of the discretization layer against scipy."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg as sla
import scipy.signal as sig

from simwave.discrete.realization import (
    analog_state_space,
    expm,
    hold_integrals,
    pencil_zeros,
)


@pytest.mark.parametrize("n", [1, 2, 3, 6, 12])
@pytest.mark.parametrize("scale", [1e-5, 1e-2, 0.5, 2.0, 30.0, 1e4])
def test_expm_equals_scipy(n, scale):
    # Reference: scipy.linalg.expm (Al-Mohy & Higham 2009); stable matrices of many norms.
    rng = np.random.default_rng(n)
    A = rng.standard_normal((n, n)) * scale - 3 * scale * np.eye(n)
    ref = sla.expm(A)
    np.testing.assert_allclose(expm(A), ref, rtol=1e-11, atol=1e-13 * np.max(np.abs(ref)))


@pytest.mark.parametrize(
    "zpk",
    [
        ([], [-3.0], 2.0),
        ([-1 + 2j, -1 - 2j], [-3.0, -4.0], 2.0),
        ([0.0, 0.0, 5.0], [-1 + 1j, -1 - 1j, -2.0, -7.0], -3.0),
        sig.butter(12, 2 * np.pi * 1000, analog=True, output="zpk"),
        sig.ellip(6, 0.5, 60, 2 * np.pi * 300, analog=True, output="zpk"),
    ],
)
def test_analog_state_space_realizes_zpk(zpk):
    # Reference: the transfer function k prod(s - z)/prod(s - p) evaluated directly.
    z, p, k = zpk
    A, B, C, D = analog_state_space(np.array(z, complex), np.array(p, complex), k)
    scale = max(np.max(np.abs(p)), 1.0)
    for s in scale * np.array([0.01j, 0.3j, 1j, 3j, 1 + 1j]):
        h = D[0, 0] + (C @ np.linalg.solve(s * np.eye(A.shape[0]) - A, B))[0, 0]
        h_ref = k * np.prod(s - np.asarray(z)) / np.prod(s - np.asarray(p))
        assert abs(h - h_ref) <= 1e-11 * abs(h_ref)


def test_hold_integrals_equal_lsim_blocks():
    # Reference: the first-order-hold matrices scipy.signal.lsim builds (Ad, Bd0, Bd1).
    A = np.array([[-1.0, 2.0], [-2.0, -1.0]])
    B = np.array([[0.0], [1.0]])
    h = 0.1
    n = 2
    M = np.zeros((4, 4))
    M[:n, :n] = A * h
    M[:n, n:n + 1] = B * h
    M[n, n + 1] = 1.0
    E = sla.expm(M)
    Phi, P0, P1 = hold_integrals(A, B, h)
    np.testing.assert_allclose(Phi, E[:n, :n], rtol=1e-13)
    np.testing.assert_allclose(P1, E[:n, n + 1:], rtol=1e-12)
    np.testing.assert_allclose(P0, E[:n, n:n + 1] - E[:n, n + 1:], rtol=1e-12)


def test_pencil_zeros_equal_scipy_ss2zpk_for_low_order():
    # Reference: scipy.signal.ss2zpk (polynomial route, fine at low order).
    Phi = np.array([[0.9, 0.1], [-0.2, 0.8]])
    Gam = np.array([[1.0], [0.5]])
    C = np.array([[1.0, -2.0]])
    D = np.array([[0.3]])
    z_ref, _, _ = sig.ss2zpk(Phi, Gam, C, D)
    np.testing.assert_allclose(np.sort_complex(pencil_zeros(Phi, Gam, C, D)),
                               np.sort_complex(z_ref), rtol=1e-12)


# --------------------------------------------------------------------------- fast paths, same bits
# The new-system cost work (issue 13) replaced general numpy/scipy calls by the same
# operations written out; each must give the library call's bits (signs of zero included).

def _same_bits(a, b):
    a, b = np.asarray(a), np.asarray(b)
    return (a.shape == b.shape and np.array_equal(a, b, equal_nan=True)
            and np.array_equal(np.signbit(a.real), np.signbit(b.real))
            and np.array_equal(np.signbit(np.imag(a)), np.signbit(np.imag(b))))


def test_poly_real_gives_numpys_poly_bits():
    from simwave.discrete.realization import poly_real

    rng = np.random.default_rng(7)
    special = [0.0, -0.0, 1.0, -1.0, 1e-300, -1e-300, 1e-170, 1e160, 1e308, np.inf, np.nan]
    cases = []
    for a in special:
        cases.append([complex(a, 0.0)])
        for b in special:
            cases += [[complex(a), complex(b)], [complex(a, b), complex(a, -b)]]
    for _ in range(30000):
        x = rng.standard_normal(3) * 10 ** rng.uniform(-12, 6, 3)
        cases += [[complex(x[0], x[1]), complex(x[0], -x[1])], [complex(x[0]), complex(x[2])],
                  [complex(x[1])]]
    with np.errstate(all="ignore"):
        bad = [c for c in cases if not _same_bits(poly_real(c), np.real(np.poly(c)))]
    assert bad == []


def test_series_state_space_equals_the_block_matrix_products():
    from simwave.discrete.realization import series_state_space

    def reference(parts):  # the matrix-product form it replaced
        A, B, C, D = np.zeros((0, 0)), np.zeros((0, 1)), np.zeros((1, 0)), np.ones((1, 1))
        for Ai, Bi, Ci, Di in parts:
            n, k = A.shape[0], Ai.shape[0]
            A = np.block([[A, np.zeros((n, k))], [Bi @ C, Ai]])
            B = np.vstack([B, Bi @ D])
            C = np.hstack([Di @ C, Ci])
            D = Di @ D
        return A, B, C, D

    rng = np.random.default_rng(3)
    for t in range(2000):
        parts = []
        for _ in range(int(rng.integers(1, 9))):
            k = int(rng.integers(1, 3))
            B = rng.standard_normal((k, 1)) * 10 ** rng.uniform(-5, 5)
            B[0] = (0.0, -0.0, B[0, 0])[t % 3]
            C = rng.standard_normal((1, k)) * (t % 4 != 0)
            parts.append((rng.standard_normal((k, k)), B, C,
                          rng.standard_normal((1, 1)) * (t % 5 != 0)))
        for got, want in zip(series_state_space(parts), reference(parts), strict=True):
            assert _same_bits(got, want)


def test_generalized_eigenvalues_equal_scipys():
    import scipy.linalg as sla

    from simwave.discrete.realization import _generalized_eigvals

    rng = np.random.default_rng(4)
    for t in range(500):
        n = int(rng.integers(1, 22))
        M = rng.standard_normal((n + 1, n + 1)) * 10 ** rng.uniform(-8, 3)
        if t % 5 == 0:
            M[-1, :] = 0.0
        N = np.zeros_like(M)
        N[:n, :n] = np.eye(n)
        ab = sla.eigvals(M, N, homogeneous_eigvals=True)
        alpha, beta = _generalized_eigvals(M, N)
        assert _same_bits(alpha, ab[0]) and _same_bits(beta, ab[1])
    M[0, 0] = np.nan
    with pytest.raises(ValueError, match="infs or NaNs"):
        _generalized_eigvals(M, N)


def test_section_round_off_uses_numpys_roots():
    import math

    from simwave.discrete.incremental import section_round_off

    def reference(sos):  # the per-section np.roots form it replaced
        worst = 0.0
        for row in sos:
            a = row[3:]
            if a[1] == 0.0 and a[2] == 0.0:
                continue
            for r in np.roots(a):
                th = math.atan2(abs(r.imag), r.real)
                z = complex(math.cos(th), math.sin(th))
                den = abs(a[0] * z * z + a[1] * z + a[2])
                if den == 0.0:
                    return math.inf
                worst = max(worst, float(np.sum(np.abs(a))) / den)
        return np.finfo(np.float64).eps * worst

    rng = np.random.default_rng(3)
    for t in range(1000):
        z, p, k = sig.butter(int(rng.integers(1, 12)), rng.uniform(0.001, 0.99), output="zpk")
        if t % 3 == 0:
            p = np.concatenate([p, rng.uniform(-0.999, 0.9999, 1)])
            z = np.concatenate([z, [0.3]])
        sos = sig.zpk2sos(z, p, k)
        if t % 5 == 0:
            sos[0, 5] = 0.0
        if t % 7 == 0:
            sos[-1, 4:] = 0.0
        assert section_round_off(sos) == reference(sos)


def test_tidy_roots_pairs_as_before_with_ties_and_nan():
    from simwave.discrete.realization import tidy_roots

    def reference(roots, rtol=1e-9):  # the np.argmin form it replaced
        rest, out = list(np.asarray(roots, dtype=np.complex128).ravel()), []
        while rest:
            r = rest.pop(0)
            if abs(r.imag) <= rtol * max(abs(r), 1e-300) or not rest:
                out.append(complex(r.real, 0.0))
                continue
            partner = rest.pop(int(np.argmin([abs(c - np.conj(r)) for c in rest])))
            mean = 0.5 * (r + np.conj(partner))
            out.extend([mean, np.conj(mean)])
        return np.array(out, dtype=np.complex128)

    rng = np.random.default_rng(9)
    for t in range(3000):
        n = int(rng.integers(1, 10))
        q = (rng.standard_normal(n) + 1j * rng.standard_normal(n) * (rng.random(n) > 0.3)) \
            * 10 ** rng.uniform(-5, 5)
        r = np.concatenate([q, q.conj() * (1 + 1e-12 * rng.standard_normal(n))])
        rng.shuffle(r)
        if t % 50 == 0:
            r[0] = complex(np.nan, 1.0)
        if t % 37 == 0:
            r = np.concatenate([r, r])
        assert _same_bits(tidy_roots(r), reference(r))


def test_small_linear_algebra_helpers_equal_numpys():
    """solve / eigvals_stack call numpy's own kernels without the wrappers: same bits,
    same LinAlgError for a singular matrix."""
    from simwave.discrete.realization import eigvals_stack, solve

    rng = np.random.default_rng(11)
    for t in range(400):
        n = int(rng.integers(1, 12))
        a = rng.standard_normal((n, n)) * 10 ** rng.uniform(-6, 6)
        b = rng.standard_normal(n)
        assert _same_bits(solve(a, b), np.linalg.solve(a, b))
        assert _same_bits(solve(a.T, b), np.linalg.solve(a.T, b))
        ac = a + 1j * rng.standard_normal((n, n))
        pts = rng.standard_normal(9) + 1j * rng.standard_normal(9)
        mats = pts[:, None, None] * np.eye(n)[None] - a[None]
        rhs = np.broadcast_to(b[:, None].astype(np.complex128), (9, n, 1))
        assert _same_bits(solve(mats, rhs), np.linalg.solve(mats, rhs))
        assert _same_bits(solve(ac, b), np.linalg.solve(ac, b))
        stack = rng.standard_normal((int(rng.integers(1, 6)), 2, 2)) * 10 ** rng.uniform(-5, 5)
        if t % 4 == 0:
            stack[:, 1, 1] = 0.0
            stack[:, 1, 0] = 1.0
        want = np.asarray(np.linalg.eigvals(stack), dtype=np.complex128)
        assert _same_bits(eigvals_stack(stack), want)
    with pytest.raises(np.linalg.LinAlgError):
        solve(np.zeros((3, 3)), np.ones(3))
    with pytest.raises(np.linalg.LinAlgError):
        eigvals_stack(np.full((1, 2, 2), np.nan))


def test_python_complex_products_and_roots_keep_numpys_bits():
    """_prod (np.prod of a list of complex), tidy_roots at extreme sizes, and the pairing of
    sections (Python complex magnitudes) against numpy's scalars."""
    from simwave.discrete.filter import _pair_zpk
    from simwave.discrete.realization import _prod, magnitude, tidy_roots

    rng = np.random.default_rng(12)
    with np.errstate(all="ignore"):
        for _ in range(20000):
            v = [complex(*(rng.standard_normal(2) * 10 ** rng.uniform(-160, 160, 2)))
                 for _ in range(int(rng.integers(1, 4)))]
            assert _same_bits(_prod(v), np.prod(v))
    big = [1e300, 1e301, 1e308, np.inf, -np.inf]
    for x in big:
        r = np.array([complex(x, 1.0), complex(x, -1.0), complex(1.0, x), complex(1.0, -x)])
        with np.errstate(all="ignore"):
            got = tidy_roots(r)
            rest, want = list(r), []
            while rest:  # the numpy-scalar form, inline
                q = rest.pop(0)
                if abs(q.imag) <= 1e-9 * max(abs(q), 1e-300) or not rest:
                    want.append(complex(q.real, 0.0))
                    continue
                d = [abs(c - np.conj(q)) for c in rest]
                partner = rest.pop(int(np.argmin(d)))
                mean = 0.5 * (q + np.conj(partner))
                want.extend([mean, np.conj(mean)])
        assert _same_bits(got, np.array(want, dtype=np.complex128))
    # the pairing's magnitudes (Python complex) against numpy's complex128 scalars
    vals = [complex(*(rng.standard_normal(2) * 10 ** rng.uniform(-300, 300, 2)))
            for _ in range(20000)]
    vals += [complex(a, b) for a in big + [0.0, -0.0, np.nan] for b in big + [0.0, np.nan]]
    with np.errstate(all="ignore"):
        assert all(_same_bits(magnitude(v), abs(np.complex128(v))) for v in vals)
    for _t in range(200):  # and the sections still pair as zpk2sos for these low-passes
        z, p, k = sig.butter(int(rng.integers(2, 10)) // 2 * 2, rng.uniform(0.01, 0.9),
                             output="zpk")
        assert _same_bits(_pair_zpk(z, p, k), sig.zpk2sos(z, p, k, pairing="nearest"))


def test_public_linalg_fallback_gives_the_same_bits(monkeypatch):
    """Without numpy's private kernels (another numpy layout) solve and eigvals_stack take
    numpy's public calls: the same values, bit for bit (reference: np.linalg itself)."""
    from simwave.discrete import realization as rz

    rng = np.random.default_rng(5)
    a = rng.standard_normal((6, 4, 4))
    b = rng.standard_normal((6, 4))
    fast_solve, fast_eig = rz.solve(a, b[..., None]), rz.eigvals_stack(a)
    monkeypatch.setattr(rz, "_LINALG", None)
    assert _same_bits(rz.solve(a, b[..., None]), np.linalg.solve(a, b[..., None]))
    assert _same_bits(fast_solve, rz.solve(a, b[..., None]))
    assert _same_bits(fast_eig, rz.eigvals_stack(a))
