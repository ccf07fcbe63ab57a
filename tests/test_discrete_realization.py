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
