"""System: the continuous-time linear time-invariant model H(s).

Zeros, poles and gain are the core representation; the coefficient view
(descending powers of s) and the state-space view are derived from them.
An optional transport delay (dead time) multiplies H(s) by exp(-s*delay_s).
"""

from __future__ import annotations

import math
from typing import Any, Sequence

import numpy as np

from simwave.errors import InvalidSystemError

#: Largest order accepted: beyond this, polynomial roots are numerically meaningless.
MAX_ORDER = 60


def _finite_array(values: Any, what: str, dtype=np.complex128) -> np.ndarray:
    try:
        arr = np.atleast_1d(np.asarray(values, dtype=dtype))
    except (TypeError, ValueError):
        raise InvalidSystemError(f"{what} must be numbers, got {values!r}") from None
    if arr.ndim != 1:
        raise InvalidSystemError(f"{what} must be a flat list of numbers")
    if not np.all(np.isfinite(arr)):
        raise InvalidSystemError(f"{what} contain NaN or infinity: {list(arr)}")
    return arr


def _real_if_close(arr: np.ndarray) -> np.ndarray:
    if arr.size and np.all(np.abs(arr.imag) <= 1e-14 * np.maximum(1.0, np.abs(arr.real))):
        return arr.real.astype(np.float64)
    return arr


def _conjugate_closed(roots: np.ndarray, what: str) -> np.ndarray:
    """Check that complex roots come in conjugate pairs (a real system) and tidy them."""
    roots = np.asarray(roots, dtype=np.complex128)
    if roots.size == 0:
        return roots
    scale = max(1.0, float(np.max(np.abs(roots))))
    tol = 1e-9 * scale
    rest = list(roots)
    out: list[complex] = []
    while rest:
        r = rest.pop(0)
        if abs(r.imag) <= tol:
            out.append(complex(r.real, 0.0))
            continue
        j = int(np.argmin([abs(c - np.conj(r)) for c in rest])) if rest else -1
        if j < 0 or abs(rest[j] - np.conj(r)) > 1e-6 * max(1.0, abs(r)):
            raise InvalidSystemError(
                f"{what}: complex value {r:.6g} has no conjugate partner; "
                "a real system needs complex values in conjugate pairs"
            )
        partner = rest.pop(j)
        mean = 0.5 * (r + np.conj(partner))
        out.extend([mean, np.conj(mean)])
    return np.array(out, dtype=np.complex128)


class System:
    """Continuous-time LTI system H(s) = gain * prod(s - z) / prod(s - p) * exp(-s*delay_s).

    Build one with :meth:`from_zpk`, :meth:`from_coeffs`, or the other
    constructors; do not rely on ``__init__``'s signature directly.

    Attributes
    ----------
    zeros, poles : ndarray
        Zeros and poles in rad/s (complex128, or float64 when all are real).
    gain : float
        The factor in front of the zero and pole products.
    delay_s : float
        Transport delay (dead time) in seconds, >= 0.
    text : str or None
        The system as the user entered it, for provenance.
    name : str or None
        Optional short name.
    """

    def __init__(
        self,
        zeros: Any,
        poles: Any,
        gain: float,
        *,
        delay_s: float = 0.0,
        text: str | None = None,
        name: str | None = None,
        ode: tuple[np.ndarray, np.ndarray] | None = None,
    ) -> None:
        z = _conjugate_closed(_finite_array(zeros, "zeros"), "zeros")
        p = _conjugate_closed(_finite_array(poles, "poles"), "poles")
        try:
            k = complex(gain)
        except (TypeError, ValueError):
            raise InvalidSystemError(f"gain must be a number, got {gain!r}") from None
        if not (math.isfinite(k.real) and math.isfinite(k.imag)):
            raise InvalidSystemError(f"gain must be finite, got {gain!r}")
        if abs(k.imag) > 1e-12 * max(1.0, abs(k.real)):
            raise InvalidSystemError(f"gain must be real, got {gain!r}")
        if p.size > MAX_ORDER:
            raise InvalidSystemError(
                f"order {p.size} is above the limit of {MAX_ORDER}; "
                "split the system into smaller stages"
            )
        if z.size > p.size and k.real != 0.0:
            raise InvalidSystemError(
                f"improper system: numerator degree {z.size} is above denominator degree "
                f"{p.size}; it is not realizable as a causal filter"
            )
        try:
            delay = float(delay_s)
        except (TypeError, ValueError):
            raise InvalidSystemError(f"dead time must be a number of seconds, got {delay_s!r}") from None
        if not math.isfinite(delay) or delay < 0:
            raise InvalidSystemError(f"dead time must be >= 0 seconds and finite, got {delay_s!r}")
        self.zeros = _real_if_close(z) if k.real != 0.0 else np.array([], dtype=np.float64)
        self.poles = _real_if_close(p)
        self.gain = float(k.real)
        self.delay_s = delay
        self.text = text
        self.name = name
        self.ode = ode

    # ----------------------------------------------------------------- constructors
    @classmethod
    def from_zpk(
        cls, zeros: Sequence[complex], poles: Sequence[complex], gain: float, **kw: Any
    ) -> "System":
        """System from zeros and poles (rad/s) and the gain factor in front of them."""
        return cls(zeros, poles, gain, **kw)

    @classmethod
    def from_coeffs(cls, num: Sequence[float], den: Sequence[float], **kw: Any) -> "System":
        """System from polynomial coefficients in descending powers of s.

        ``from_coeffs([1], [1, 2, 1])`` is H(s) = 1 / (s^2 + 2s + 1). Leading zeros
        are dropped; the gain is num's leading coefficient over den's.
        """
        b = np.trim_zeros(np.real(_finite_array(num, "numerator coefficients")).astype(float), "f")
        a = np.trim_zeros(np.real(_finite_array(den, "denominator coefficients")).astype(float), "f")
        if a.size == 0:
            raise InvalidSystemError("denominator is empty or all zero: division by a zero polynomial")
        if b.size == 0:
            return cls([], np.roots(a) if a.size > 1 else [], 0.0, **kw)
        if b.size > a.size:
            raise InvalidSystemError(
                f"improper system: numerator degree {b.size - 1} is above denominator degree "
                f"{a.size - 1}; it is not realizable as a causal filter"
            )
        if a.size - 1 > MAX_ORDER:
            raise InvalidSystemError(
                f"order {a.size - 1} is above the limit of {MAX_ORDER}; "
                "split the system into smaller stages"
            )
        z = np.roots(b) if b.size > 1 else np.array([])
        p = np.roots(a) if a.size > 1 else np.array([])
        return cls(z, p, b[0] / a[0], **kw)

    # ----------------------------------------------------------------- views
    @property
    def num(self) -> np.ndarray:
        """Numerator coefficients, descending powers of s (float64)."""
        return np.real(self.gain * np.atleast_1d(np.poly(self.zeros))).astype(np.float64)

    @property
    def den(self) -> np.ndarray:
        """Denominator coefficients, descending powers of s, monic (float64)."""
        return np.real(np.atleast_1d(np.poly(self.poles))).astype(np.float64)

    @property
    def order(self) -> int:
        """Number of poles."""
        return int(self.poles.size)

    def frequency_response(self, f_hz: Any) -> np.ndarray:
        """Complex H(j*2*pi*f) at frequencies in Hz (array in, array out), dead time included."""
        f = np.asarray(f_hz, dtype=np.float64)
        s = 2j * np.pi * f
        h = np.full(s.shape, self.gain, dtype=np.complex128)
        for z in self.zeros:
            h *= s - z
        for p in self.poles:
            h /= s - p
        if self.delay_s:
            h *= np.exp(-s * self.delay_s)
        return h

    @property
    def dc_gain(self) -> float:
        """H(0): a real number, ``inf`` with a pole at s = 0, 0 with a zero there."""
        n_int = int(np.sum(np.abs(self.poles) == 0))
        n_diff = int(np.sum(np.abs(self.zeros) == 0))
        if self.gain == 0:
            return 0.0
        if n_int > n_diff:
            return math.inf
        if n_diff > n_int:
            return 0.0
        z = self.zeros[np.abs(self.zeros) != 0]
        p = self.poles[np.abs(self.poles) != 0]
        return float(np.real(self.gain * np.prod(-z) / np.prod(-p)))

    @property
    def is_stable(self) -> bool:
        """True when every pole lies strictly in the left half plane."""
        return bool(np.all(np.real(self.poles) < 0))

    def discretize(self, rate_hz: float, method: str = "ramp-invariant", **options: Any):
        """Discrete model at ``rate_hz`` by a published method; see :mod:`simwave.discrete`."""
        from simwave.discrete import discretize

        return discretize(self, rate_hz, method, **options)

    def __repr__(self) -> str:
        label = self.text or f"zeros={list(self.zeros)}, poles={list(self.poles)}, gain={self.gain:g}"
        return f"System({label})"
