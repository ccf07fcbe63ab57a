"""System: the continuous-time linear time-invariant model H(s).

Zeros, poles and gain are the core representation; the coefficient view
(descending powers of s), the second-order-section view and the state-space
view are derived from them. An optional transport delay (dead time)
multiplies H(s) by exp(-s*delay_s).

Nothing is cancelled: a zero and a pole at the same place both stay, and a
:class:`PoleZeroCancellationWarning` says so.
"""

from __future__ import annotations

import math
import os
import warnings
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from simwave.errors import InvalidSystemError

#: Largest order accepted: beyond this, polynomial roots are numerically meaningless.
MAX_ORDER = 60

#: A pole counts as on the imaginary axis when |Re p| <= this times |p|.
AXIS_TOL = 1e-9
#: A zero and a pole this close (relative to their size) nearly cancel.
CANCEL_TOL = 1e-6
#: -3 dB below DC: a factor 1/sqrt(2) in magnitude, 20*log10(1/sqrt(2)) = -3.0103 dB.
HALF_POWER = 1.0 / math.sqrt(2.0)


class PoleZeroCancellationWarning(UserWarning):
    """A zero and a pole (nearly) coincide; simwave keeps both and does not cancel them."""


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


def _coefficients(values: Any, what: str) -> np.ndarray:
    """Real float64 coefficients with leading zeros removed (may come back empty)."""
    arr = _finite_array(values, what)
    if np.any(arr.imag != 0):
        raise InvalidSystemError(f"{what} must be real numbers")
    return np.trim_zeros(arr.real.astype(np.float64), "f")


def _roots(coeffs: np.ndarray, what: str) -> np.ndarray:
    """Roots of a polynomial (descending powers), with checks that they are usable."""
    if coeffs.size <= 1:
        return np.array([], dtype=np.float64)
    with np.errstate(all="ignore"):
        monic = coeffs / coeffs[0]
    if not np.all(np.isfinite(monic)):
        raise InvalidSystemError(f"{what} span too wide a range of magnitudes to find roots")
    try:
        r = np.roots(monic)
    except np.linalg.LinAlgError:
        raise InvalidSystemError(f"could not find the roots of the {what}") from None
    if not np.all(np.isfinite(r)):
        raise InvalidSystemError(f"the roots of the {what} are not finite")
    return r


def _check_order(n_den: int, n_num: int, *, ode: bool = False) -> None:
    if n_den > MAX_ORDER:
        raise InvalidSystemError(
            f"order {n_den} is above the limit of {MAX_ORDER}; split the system into smaller stages"
        )
    if n_num > n_den:
        if ode:
            raise InvalidSystemError(
                f"improper system: the input side has derivative order {n_num}, above the "
                f"output side's order {n_den}; it is not realizable as a causal filter"
            )
        raise InvalidSystemError(
            f"improper system: numerator degree {n_num} is above denominator degree "
            f"{n_den}; it is not realizable as a causal filter"
        )


def _label(sys: System) -> str:
    return sys.name or sys.text or "zeros/poles/gain"


def _fmt_c(z: complex) -> str:
    """A root for messages: '-1' for a real one, '-1+2j' for a complex one."""
    z = complex(z)
    return f"{z.real:.6g}" if z.imag == 0 else f"{z:.6g}"


def _json_number(x: float) -> float | str:
    """Exact float for JSON; 'inf', '-inf' or 'nan' as strings (JSON has no such numbers)."""
    x = float(x)
    return x if math.isfinite(x) else ("nan" if math.isnan(x) else ("inf" if x > 0 else "-inf"))


def _json_complex(z: complex) -> dict[str, float]:
    return {"re": float(np.real(z)), "im": float(np.imag(z))}


class System:
    """Continuous-time LTI system H(s) = gain * prod(s - z) / prod(s - p) * exp(-s*delay_s).

    Build one with :meth:`parse`, :meth:`from_coeffs`, :meth:`from_ode`,
    :meth:`from_zpk` or :meth:`design`, and combine systems with
    :meth:`series` (``a * b``), :meth:`parallel` (``a + b``) and
    :meth:`feedback`. Do not rely on ``__init__``'s signature directly.

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
    ode : tuple of ndarray or None
        For a system entered as an ODE, (a, b): output-side coefficients
        [1, a_{n-1}/a_n, ..., a_0/a_n] and input-side [b_m/a_n, ..., b_0/a_n],
        so that initial conditions of y can be applied later. None otherwise.

    References
    ----------
    .. [1] K. Ogata, *Modern Control Engineering*, 5th ed., Prentice Hall, 2010,
           ch. 2 (transfer functions, zeros and poles) and sec. 5-3 (second-order
           systems: natural frequency and damping ratio). Chapter and section
           numbers cited in this module are quoted from memory.
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
        _check_order(p.size, z.size if k.real != 0.0 else 0)
        try:
            delay = float(delay_s)
        except (TypeError, ValueError):
            raise InvalidSystemError(
                f"dead time must be a number of seconds, got {delay_s!r}"
            ) from None
        if not math.isfinite(delay) or delay < 0:
            raise InvalidSystemError(f"dead time must be >= 0 seconds and finite, got {delay_s!r}")
        self.zeros = _real_if_close(z) if k.real != 0.0 else np.array([], dtype=np.float64)
        self.poles = _real_if_close(p)
        self.gain = float(k.real)
        self.delay_s = delay
        self.text = text
        self.name = name
        self.ode = ode
        #: Named parameters the system text was evaluated with (name -> Parameter).
        self.parameters: dict[str, Any] = {}
        for zero, pole in self.near_cancellations:
            warnings.warn(
                f"zero {_fmt_c(zero)} and pole {_fmt_c(pole)} (nearly) cancel; simwave keeps "
                "both (nothing is cancelled)",
                PoleZeroCancellationWarning,
                stacklevel=2,
            )

    # ----------------------------------------------------------------- constructors
    @classmethod
    def from_zpk(
        cls, zeros: Sequence[complex], poles: Sequence[complex], gain: float, **kw: Any
    ) -> System:
        """System from zeros and poles (rad/s) and the gain factor in front of them.

        Parameters
        ----------
        zeros, poles : sequence of complex
            In rad/s; complex values in conjugate pairs.
        gain : float
            The factor k in H(s) = k * prod(s - z) / prod(s - p); must not be 0.
        **kw
            ``delay_s``, ``text``, ``name``.
        """
        try:
            zero_gain = complex(gain) == 0
        except (TypeError, ValueError):
            zero_gain = False  # __init__ reports the bad value
        if zero_gain:
            raise InvalidSystemError("gain is 0: H(s) = 0 passes nothing")
        return cls(zeros, poles, gain, **kw)

    @classmethod
    def from_coeffs(cls, num: Sequence[float], den: Sequence[float], **kw: Any) -> System:
        """System from polynomial coefficients in descending powers of s.

        ``from_coeffs([1], [1, 2, 1])`` is H(s) = 1 / (s^2 + 2s + 1). Leading zeros
        are dropped; the gain is num's leading coefficient over den's.

        Raises
        ------
        InvalidSystemError
            Empty or all-zero lists, NaN/inf, improper H(s), order above 60.
        """
        b = _coefficients(num, "numerator coefficients")
        a = _coefficients(den, "denominator coefficients")
        if a.size == 0:
            raise InvalidSystemError(
                "denominator is empty or all zero: division by a zero polynomial"
            )
        if b.size == 0:
            raise InvalidSystemError("numerator is empty or all zero: H(s) = 0 passes nothing")
        _check_order(a.size - 1, b.size - 1, ode=kw.get("ode") is not None)
        z = _roots(b, "numerator coefficients")
        p = _roots(a, "denominator coefficients")
        return cls(z, p, b[0] / a[0], **kw)

    @classmethod
    def from_ode(cls, a: Sequence[float], b: Sequence[float], **kw: Any) -> System:
        """System from the linear ODE a_n y^(n) + ... + a_0 y = b_m x^(m) + ... + b_0 x.

        With zero initial conditions, H(s) = Y(s)/X(s) = (b_m s^m + ... + b_0) /
        (a_n s^n + ... + a_0) [1]_. Leading zeros are dropped and the ODE is
        stored on ``.ode`` normalized so that a_n = 1.

        Parameters
        ----------
        a : sequence of float
            Output-side coefficients [a_n, ..., a_0].
        b : sequence of float
            Input-side coefficients [b_m, ..., b_0], m <= n.

        References
        ----------
        .. [1] K. Ogata, *Modern Control Engineering*, 5th ed., sec. 2-2.
        """
        aa = _coefficients(a, "ODE output-side coefficients a")
        bb = _coefficients(b, "ODE input-side coefficients b")
        if aa.size == 0:
            raise InvalidSystemError("ODE output-side coefficients a are empty or all zero")
        if bb.size == 0:
            raise InvalidSystemError("ODE input-side coefficients b are empty or all zero")
        _check_order(aa.size - 1, bb.size - 1, ode=True)
        ode = (aa / aa[0], bb / aa[0])
        if not (np.all(np.isfinite(ode[0])) and np.all(np.isfinite(ode[1]))):
            raise InvalidSystemError("ODE coefficients span too wide a range of magnitudes")
        kw["ode"] = ode
        return cls.from_coeffs(bb, aa, **kw)

    @classmethod
    def parse(cls, text: str, *, name: str | None = None, expect: str | None = None,
              parameters: Mapping[str, Any] | None = None) -> System:
        """System from text: an H(s) expression or ODE text in prime notation.

        Examples: ``"2*pi*1k/(s + 2*pi*1k)"``, ``"exp(-2m*s) * 10/(s+10)"``,
        ``"y'' + 3y' + 2y = 2x' + x"``, ``"1/(R*C*s + 1)"`` with
        ``parameters={"R": "10k", "C": "100n ±5%"}``. See :mod:`simwave.model.parse`
        for the grammar. ``expect`` may be ``"expression"`` or ``"ode"`` to require one kind.

        Parameters
        ----------
        parameters : mapping, optional
            Values of the names the text uses: numbers, texts with engineering
            suffixes and optional tolerances (:mod:`simwave.model.params`), or
            :class:`~simwave.model.params.Parameter` objects. The nominal values
            are used; the table is kept on :attr:`parameters`. A parameter the
            text does not use is an error (a misspelt name would otherwise be
            silently ignored).

        Raises
        ------
        ParseError
            Unreadable text (the message gives the column), a name without a value.
        InvalidSystemError
            Improper H(s), order above 60, an unused parameter, and the like.
        """
        from simwave.model.params import parameter_table
        from simwave.model.parse import parameter_names, parse_system_text, parse_tree

        table = parameter_table(parameters)
        if table:
            used = parameter_names(parse_tree(text))
            unused = [n for n in table if n not in used]
            if unused:
                raise InvalidSystemError(
                    f"parameter{'s' if len(unused) > 1 else ''} {', '.join(unused)} "
                    f"not used in the system text (it uses: {', '.join(used) or 'none'})"
                )
        values = {n: p.nominal for n, p in table.items()}
        parsed = parse_system_text(text, expect=expect, values=values)
        if parsed.ode is not None:
            system = cls.from_ode(parsed.ode[0], parsed.ode[1], text=text, name=name)
        else:
            system = cls.from_coeffs(parsed.num, parsed.den, delay_s=parsed.delay_s, text=text,
                                     name=name)
        system.parameters = table
        return system

    @classmethod
    def from_file(cls, path: str | os.PathLike[str]) -> "System":
        """System from a TOML system file (a name, notes, and one form; see the README)."""
        from simwave.cli.system_input import load_system_file

        return load_system_file(path)

    @classmethod
    def design(
        cls,
        family: str,
        order: int,
        cutoff_hz: float | Sequence[float],
        kind: str = "lowpass",
        *,
        ripple_db: float | None = None,
        attenuation_db: float | None = None,
        name: str | None = None,
    ) -> System:
        """Analog filter prototype; see :func:`simwave.model.designs.design`."""
        from simwave.model.designs import design

        return design(
            family, order, cutoff_hz, kind,
            ripple_db=ripple_db, attenuation_db=attenuation_db, name=name,
        )

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

    @property
    def relative_degree(self) -> int:
        """Number of poles minus number of zeros (0 for a direct feedthrough)."""
        return int(self.poles.size - self.zeros.size)

    @property
    def sections(self) -> np.ndarray:
        """Second-order sections, shape (n_sections, 6), float64.

        Row ``[b0, b1, b2, a0, a1, a2]`` is (b0 s^2 + b1 s + b2)/(a0 s^2 + a1 s + a2);
        first-order sections have b0 = a0 = 0. The product of the sections is H(s)
        (dead time not included); the gain sits in the first section.

        Each complex pole pair, and each two real poles, make one section (a real
        pole left over makes a first-order one), ordered by increasing |p|. Complex
        zero pairs go to the free section with the nearest poles, then real zeros
        fill the remaining places nearest to them; pairing zeros with nearby poles
        keeps each section's gain moderate.

        References
        ----------
        .. [1] L. B. Jackson, *Digital Filters and Signal Processing*, 3rd ed.,
               Kluwer, 1996, ch. 11 (pairing poles and zeros into sections; chapter
               number from memory).
        """
        return _pair_sections(self.zeros, self.poles, self.gain)

    @property
    def state_space(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """State-space view (A, B, C, D): x' = A x + B u, y = C x + D u (dead time not included).

        Built as a series connection of the second-order :attr:`sections`, each in
        controller canonical form (``scipy.signal.tf2ss``); a cascade of small
        sections is far better conditioned than one companion matrix of the
        whole polynomial. Shapes (n, n), (n, 1), (1, n), (1, 1); float64.

        References
        ----------
        .. [1] K. Ogata, *Modern Control Engineering*, 5th ed., sec. 9-2
               (state-space representations in canonical forms).
        """
        from scipy.signal import tf2ss

        from simwave.discrete.realization import series_state_space

        parts = []
        for row in self.sections:
            b = np.trim_zeros(row[:3], "f")
            a = np.trim_zeros(row[3:], "f")
            if a.size == 1:  # a pure gain: a block without states
                g = b[0] / a[0] if b.size else 0.0
                parts.append((np.zeros((0, 0)), np.zeros((0, 1)), np.zeros((1, 0)),
                              np.array([[g]])))
                continue
            Ai, Bi, Ci, Di = (np.atleast_2d(m) for m in tf2ss(b if b.size else [0.0], a))
            parts.append((Ai.reshape(a.size - 1, a.size - 1), Bi.reshape(a.size - 1, 1),
                          Ci.reshape(1, a.size - 1), Di.reshape(1, 1)))
        return series_state_space(parts)

    # ----------------------------------------------------------------- response
    def frequency_response(self, f_hz: Any) -> np.ndarray:
        """Complex H(j*2*pi*f) at frequencies in Hz (array in, array out), dead time included.

        Evaluated from zeros and poles, each zero factor paired with a pole factor
        so that high orders do not overflow. At a pole the value is infinite.
        """
        f = np.asarray(f_hz, dtype=np.float64)
        s = 2j * np.pi * f
        h = np.full(s.shape, self.gain, dtype=np.complex128)
        with np.errstate(divide="ignore", invalid="ignore"):
            nz = self.zeros.size
            for z, p in zip(self.zeros, self.poles[:nz], strict=False):
                h *= (s - z) / (s - p)
            for p in self.poles[nz:]:
                h /= s - p
        if self.delay_s:
            h *= np.exp(-s * self.delay_s)
        return h

    @property
    def dc_gain(self) -> float:
        """H(0): a real number; +-inf with more poles than zeros at s = 0, 0 with more zeros."""
        n_int = int(np.sum(self.poles == 0))
        n_diff = int(np.sum(self.zeros == 0))
        if self.gain == 0:
            return 0.0
        z = self.zeros[self.zeros != 0]
        p = self.poles[self.poles != 0]
        # Near s = 0, H(s) ~ K * s^(n_diff - n_int) with K the gain of the rest.
        k = float(np.real(self.gain * np.prod(-z) / np.prod(-p)))
        if n_int > n_diff:
            return math.copysign(math.inf, k)
        if n_diff > n_int:
            return 0.0
        return k

    @property
    def high_frequency_gain(self) -> float:
        """lim H(s) as s -> infinity: the gain for relative degree 0, else 0."""
        return self.gain if self.relative_degree == 0 else 0.0

    def bandwidth_3db(self) -> tuple[float | None, str]:
        """-3 dB bandwidth in Hz relative to the DC gain, or None, with an explanation.

        The bandwidth is the lowest frequency at which |H(j 2 pi f)| falls to
        |H(0)|/sqrt(2), i.e. 3.01 dB below the DC gain. It is defined for
        systems with a finite, nonzero DC gain whose magnitude does fall that
        far and stays below it at high frequencies (low-pass-like systems: the
        high-frequency gain is below |H(0)|/sqrt(2)). Found on a dense logarithmic grid that
        includes every pole and zero frequency, then refined by Brent's method.

        Returns
        -------
        (bandwidth_hz, note) : (float or None, str)

        References
        ----------
        .. [1] K. Ogata, *Modern Control Engineering*, 5th ed., ch. 7 (bandwidth:
               the frequency where the magnitude drops 3 dB below its zero-frequency
               value).
        """
        from scipy.optimize import brentq

        h0 = self.dc_gain
        if not math.isfinite(h0):
            return None, "DC gain is infinite (pole at s = 0)"
        if h0 == 0.0:
            return None, "DC gain is 0 (zero at s = 0)"
        target = abs(h0) * HALF_POWER
        if not abs(self.high_frequency_gain) < target:
            return None, "not low-pass-like (high-frequency gain not 3.01 dB below DC gain)"
        roots = np.concatenate([self.zeros, self.poles]).astype(np.complex128)
        marks = np.abs(roots[roots != 0])
        marks = np.concatenate([marks, np.abs(roots.imag[roots.imag != 0])])
        if marks.size == 0:
            return None, "the magnitude is the same at all frequencies"
        # four decades beyond the outermost marks
        lo, hi = float(np.min(marks)) * 1e-4, float(np.max(marks)) * 1e4
        if lo > 0 and math.isfinite(hi / lo):
            log_lo, log_hi = math.log10(lo), math.log10(hi)
            decades = math.log10(hi / lo)
        else:
            # marks near float64's ends: the span overflows as a ratio (or the low end
            # underflows); take it in logarithms, within float64's normal range
            log_lo = max(math.log10(float(np.min(marks))) - 4.0, -307.0)
            log_hi = min(math.log10(float(np.max(marks))) + 4.0, 308.0)
            decades = log_hi - log_lo
        grid = np.logspace(log_lo, log_hi, int(200 * decades) + 1)
        near = np.concatenate([marks * (1 + d) for d in (-1e-2, -1e-3, -1e-5, 0, 1e-5, 1e-3, 1e-2)])
        w = np.unique(np.concatenate([grid, near]))
        mag = np.abs(self.frequency_response(w / (2 * np.pi)))
        below = np.flatnonzero(~(mag > target))  # NaN (exactly at a pole) does not count
        below = below[np.isfinite(mag[below])]
        if below.size == 0:
            return None, "the magnitude never falls 3.01 dB below the DC gain"
        i = int(below[0])
        w_lo = w[i - 1] if i > 0 else 0.0

        def excess(wr: float) -> float:
            return float(np.abs(self.frequency_response(wr / (2 * np.pi)))) - target

        w3 = brentq(excess, w_lo, w[i], xtol=1e-14 * w[i], rtol=1e-14)
        return w3 / (2 * np.pi), "lowest frequency where |H| is 3.01 dB below |H(0)|"

    @property
    def bandwidth_hz(self) -> float | None:
        """-3 dB bandwidth in Hz, or None where not defined (see :meth:`bandwidth_3db`)."""
        return self.bandwidth_3db()[0]

    # ----------------------------------------------------------------- stability and modes
    def _on_axis(self) -> np.ndarray:
        p = self.poles.astype(np.complex128)
        return np.abs(p.real) <= AXIS_TOL * np.abs(p)

    @property
    def stability(self) -> str:
        """'stable', 'marginally stable' or 'unstable'.

        Stable: every pole has a negative real part. Marginally stable: no pole in
        the right half plane and the poles on the imaginary axis (including s = 0)
        are simple. Unstable: a pole in the right half plane or a repeated pole on
        the axis. A pole counts as on the axis when |Re p| <= 1e-9 |p|.

        References
        ----------
        .. [1] K. Ogata, *Modern Control Engineering*, 5th ed., sec. 5-6
               (Routh's stability criterion and the meaning of poles on the jw axis).
        """
        p = self.poles.astype(np.complex128)
        axis = self._on_axis()
        if np.any((p.real > 0) & ~axis):
            return "unstable"
        on = p[axis]
        for i in range(on.size):
            for j in range(i + 1, on.size):
                if abs(on[i] - on[j]) <= CANCEL_TOL * max(abs(on[i]), abs(on[j])):
                    return "unstable"
        return "marginally stable" if on.size else "stable"

    @property
    def is_stable(self) -> bool:
        """True when every pole lies strictly in the left half plane."""
        return self.stability == "stable"

    def pole_modes(self) -> list[dict[str, Any]]:
        """One entry per real pole and per complex pole pair, by increasing |p|.

        A real pole p gives a mode exp(p t) with time constant 1/|p| (seconds).
        A pair -zeta*wn +- j wn sqrt(1 - zeta^2) gives natural frequency
        wn/(2 pi) (Hz), damping ratio zeta = -Re(p)/|p|, damped frequency
        |Im p|/(2 pi) and envelope time constant 1/|Re p|.

        Returns
        -------
        list of dict
            Keys: ``kind`` ("real" or "pair"), ``pole`` (complex; the upper one of
            a pair), ``mode`` ("decaying", "growing", "integrator",
            "oscillating"), and ``time_constant_s`` or
            ``natural_frequency_hz``, ``damping_ratio``, ``damped_frequency_hz``,
            ``time_constant_s`` (envelope; inf when undamped).

        References
        ----------
        .. [1] K. Ogata, *Modern Control Engineering*, 5th ed., sec. 5-2 (first-order
               time constant) and sec. 5-3 (second-order: wn, zeta, wd = wn sqrt(1-zeta^2)).
        """
        modes: list[dict[str, Any]] = []
        p = self.poles.astype(np.complex128)
        for pole in sorted(p[p.imag >= 0], key=lambda q: (abs(q), q.imag)):
            if pole.imag == 0:
                r = pole.real
                modes.append({
                    "kind": "real",
                    "pole": complex(r, 0.0),
                    "mode": "integrator" if r == 0 else ("decaying" if r < 0 else "growing"),
                    "time_constant_s": math.inf if r == 0 else float(1.0 / abs(r)),
                })
                continue
            wn = abs(pole)
            zeta = -pole.real / wn
            modes.append({
                "kind": "pair",
                "pole": complex(pole),
                "mode": ("oscillating" if pole.real == 0
                         else ("decaying" if pole.real < 0 else "growing")),
                "natural_frequency_hz": float(wn / (2 * math.pi)),
                "damping_ratio": float(zeta),
                "damped_frequency_hz": float(abs(pole.imag) / (2 * math.pi)),
                "time_constant_s": math.inf if pole.real == 0 else float(1.0 / abs(pole.real)),
            })
        return modes

    @property
    def near_cancellations(self) -> list[tuple[complex, complex]]:
        """(zero, pole) pairs closer than 1e-6 relative to their size: they (nearly) cancel."""
        if self.zeros.size == 0 or self.poles.size == 0:
            return []
        z = self.zeros.astype(np.complex128)
        p = self.poles.astype(np.complex128)
        floor = 1e-9 * float(np.max(np.abs(np.concatenate([z, p]))))
        pairs = []
        used: set[int] = set()
        for zero in z:
            d = np.abs(p - zero)
            j = int(np.argmin(d))
            if j not in used and d[j] <= CANCEL_TOL * max(abs(zero), abs(p[j]), floor):
                used.add(j)
                pairs.append((complex(zero), complex(p[j])))
        return pairs

    # ----------------------------------------------------------------- combination
    def series(self, other: System) -> System:
        """Series connection (product) H = self * other; dead times add. Nothing cancels."""
        other = _as_system(other)
        return System(
            np.concatenate([self.zeros, other.zeros]),
            np.concatenate([self.poles, other.poles]),
            self.gain * other.gain,
            delay_s=self.delay_s + other.delay_s,
            text=f"({_label(self)}) * ({_label(other)})",
        )

    def parallel(self, other: System) -> System:
        """Parallel connection (sum) H = self + other.

        Both branches must have the same dead time (then it factors out);
        different dead times make a sum that is not a rational function.
        """
        other = _as_system(other)
        if self.delay_s != other.delay_s:
            raise InvalidSystemError(
                f"parallel branches with different dead times ({self.delay_s:g} s and "
                f"{other.delay_s:g} s) do not form a rational H(s); simwave cannot model this"
            )
        # k1 N1/D1 + k2 N2/D2 = (k1 N1 D2 + k2 N2 D1) / (D1 D2)
        n1 = self.gain * np.poly(self.zeros) if self.zeros.size else np.array([self.gain])
        n2 = other.gain * np.poly(other.zeros) if other.zeros.size else np.array([other.gain])
        num = np.polyadd(
            np.convolve(np.atleast_1d(n1), np.atleast_1d(np.poly(other.poles))),
            np.convolve(np.atleast_1d(n2), np.atleast_1d(np.poly(self.poles))),
        )
        num = np.trim_zeros(np.real(num), "f")
        poles = np.concatenate([self.poles, other.poles])
        text = f"({_label(self)}) + ({_label(other)})"
        if num.size == 0:
            return System([], poles, 0.0, delay_s=self.delay_s, text=text)
        return System(_roots(num, "parallel numerator"), poles, float(num[0]),
                      delay_s=self.delay_s, text=text)

    def feedback(self, path: System | float | None = None) -> System:
        """Negative feedback: self / (1 + self * path); unity feedback when path is None.

        With forward path G = kg Ng/Dg and feedback path H = kh Nh/Dh the closed
        loop is kg Ng Dh / (Dg Dh + kg kh Ng Nh) [1]_. A dead time anywhere in the
        loop makes it non-rational, which is an error here.

        References
        ----------
        .. [1] K. Ogata, *Modern Control Engineering*, 5th ed., sec. 2-3
               (closed-loop transfer function C/R = G/(1 + GH)).
        """
        h = System([], [], 1.0, text="1") if path is None else _as_system(path)
        if self.delay_s or h.delay_s:
            raise InvalidSystemError(
                "feedback around a dead time is not a rational H(s); simwave cannot model "
                "a loop with dead time"
            )
        ng = np.atleast_1d(np.poly(self.zeros))
        nh = np.atleast_1d(np.poly(h.zeros))
        dg = np.atleast_1d(np.poly(self.poles))
        dh = np.atleast_1d(np.poly(h.poles))
        char = np.polyadd(np.convolve(dg, dh), self.gain * h.gain * np.convolve(ng, nh))
        char = np.trim_zeros(np.real(char), "f")
        zeros = np.concatenate([self.zeros, h.poles])
        text = f"feedback: forward ({_label(self)}), return ({_label(h)})"
        if char.size - 1 < zeros.size:
            raise InvalidSystemError(
                "algebraic loop: 1 + G(inf)*H(inf) = 0, so the closed loop is not realizable"
            )
        return System(zeros, _roots(char, "closed-loop characteristic polynomial"),
                      self.gain / char[0], text=text)

    def with_delay(self, extra_s: float) -> System:
        """The same system with ``extra_s`` seconds more dead time (in series)."""
        extra = float(extra_s)
        if not math.isfinite(extra) or extra < 0:
            raise InvalidSystemError(f"dead time must be >= 0 seconds and finite, got {extra_s!r}")
        text = self.text
        if text is not None and extra:
            text = f"({text}) * exp(-{extra!r}*s)"
        out = System(self.zeros, self.poles, self.gain, delay_s=self.delay_s + extra,
                     text=text, name=self.name, ode=self.ode)
        out.parameters = dict(self.parameters)
        return out

    def __mul__(self, other: Any) -> System:
        if isinstance(other, (System, int, float)):
            return self.series(other)
        return NotImplemented

    __rmul__ = __mul__

    def __add__(self, other: Any) -> System:
        if isinstance(other, (System, int, float)):
            return self.parallel(other)
        return NotImplemented

    __radd__ = __add__

    def __neg__(self) -> System:
        return System(self.zeros, self.poles, -self.gain, delay_s=self.delay_s,
                      text=f"-({_label(self)})")

    def __sub__(self, other: Any) -> System:
        if isinstance(other, (System, int, float)):
            return self.parallel(-_as_system(other))
        return NotImplemented

    # ----------------------------------------------------------------- summary
    def to_dict(self) -> dict[str, Any]:
        """Everything :meth:`inspect` shows, JSON-ready (exact floats; inf as the string 'inf').

        Complex numbers are ``{"re": ..., "im": ...}``; frequencies in Hz, times in
        seconds, zeros and poles in rad/s.
        """
        bw, bw_note = self.bandwidth_3db()
        h0 = self.dc_gain
        with np.errstate(divide="ignore"):
            h0_db = 20 * math.log10(abs(h0)) if h0 != 0 and math.isfinite(h0) else (
                math.inf if not math.isfinite(h0) else -math.inf)
        modes = []
        for m in self.pole_modes():
            m = dict(m)
            m["pole"] = _json_complex(m["pole"])
            for key in ("time_constant_s",):
                m[key] = _json_number(m[key])
            modes.append(m)
        notes = [
            f"zero {_fmt_c(z)} and pole {_fmt_c(p)} (nearly) cancel; both are kept"
            for z, p in self.near_cancellations
        ]
        from simwave.model.clusters import multiple_roots

        multiple = multiple_roots(self.poles, self.den)
        for c in multiple:
            notes.append(
                f"{c['multiplicity']}-fold pole at {_fmt_c(c['root'])}: the "
                f"{c['multiplicity']} poles listed near it are its computed roots, spread up "
                f"to {c['spread']:.3g} rad/s around it by float64 round-off (the roots of a "
                f"multiple factor are that sensitive)")
        return {
            "name": self.name,
            "text": self.text,
            "order": self.order,
            "relative_degree": self.relative_degree,
            "gain": self.gain,
            "zeros_rad_s": [_json_complex(z) for z in self.zeros],
            "poles_rad_s": [_json_complex(p) for p in self.poles],
            "multiple_poles": [{"pole": _json_complex(c["root"]),
                                "multiplicity": c["multiplicity"],
                                "computed_spread_rad_s": c["spread"]} for c in multiple],
            "numerator": [float(c) for c in self.num],
            "denominator": [float(c) for c in self.den],
            "ode": None if self.ode is None else {
                "a": [float(c) for c in self.ode[0]], "b": [float(c) for c in self.ode[1]]},
            "parameters": [p.to_dict() for p in self.parameters.values()],
            "dead_time_s": self.delay_s,
            "dc_gain": _json_number(h0),
            "dc_gain_db": _json_number(h0_db),
            "high_frequency_gain": self.high_frequency_gain,
            "stability": self.stability,
            "bandwidth_3db_hz": bw,
            "bandwidth_note": bw_note,
            "pole_modes": modes,
            "notes": notes,
        }

    def discretize(self, rate_hz: float, method: str = "ramp-invariant", **options: Any):
        """Discrete model at ``rate_hz`` by a published method.

        See :func:`simwave.discrete.discretize` for the methods and options
        (``prewarp_hz``, ``delay_s``, ``match_hz``); ``ramp-invariant`` by default.
        """
        from simwave.discrete import discretize
        from simwave.guards import check_delay_line, check_rate, model_failures

        where = f"H(s) = {self.text}" if self.text else "the system"
        rate = check_rate(rate_hz, where)
        check_delay_line(self.delay_s + float(options.get("delay_s") or 0.0), rate, where)
        with model_failures(self, rate, method):
            return discretize(self, rate, method, **options)

    def __repr__(self) -> str:
        label = self.text or (
            f"zeros={list(self.zeros)}, poles={list(self.poles)}, gain={self.gain:g}"
        )
        return f"System({label})"

    def _repr_html_(self) -> str:
        from simwave.notebook import system_html

        return system_html(self)

    # ----------------------------------------------------------------- scipy.signal
    @classmethod
    def from_scipy(cls, lti: Any, **kw: Any) -> System:
        """System from one of scipy.signal's continuous-time LTI objects.

        Parameters
        ----------
        lti : scipy.signal.ZerosPolesGain, TransferFunction, StateSpace or lti
            Single input, single output, continuous time (``dt`` None).
        **kw
            ``name``, ``text``, ``delay_s``.

        Raises
        ------
        InvalidSystemError
            A discrete-time object, several inputs or outputs, or another type.
        """
        from scipy import signal

        if not isinstance(lti, (signal.lti, signal.dlti)):
            raise InvalidSystemError(
                f"expected a scipy.signal ZerosPolesGain, TransferFunction or StateSpace, "
                f"got {type(lti).__name__}")
        if getattr(lti, "dt", None) is not None:
            raise InvalidSystemError(
                f"a discrete-time {type(lti).__name__} (dt={lti.dt}); simwave takes the "
                f"continuous-time H(s) and discretizes it itself")
        if lti.inputs != 1 or lti.outputs != 1:
            raise InvalidSystemError(
                f"{lti.inputs} input(s) and {lti.outputs} output(s); only single-input, "
                f"single-output systems are supported")
        kw.setdefault("text", f"scipy.signal.{type(lti).__name__}")
        if isinstance(lti, signal.TransferFunction):
            return cls.from_coeffs(np.ravel(lti.num), np.ravel(lti.den), **kw)
        if isinstance(lti, signal.ZerosPolesGain):
            return cls.from_zpk(np.ravel(lti.zeros), np.ravel(lti.poles), float(lti.gain), **kw)
        return cls.from_zpk(*_state_space_zpk(lti.A, lti.B, lti.C, lti.D), **kw)

    def to_scipy(self, form: str = "zpk") -> Any:
        """This H(s) as a scipy.signal LTI object: ``"zpk"`` (ZerosPolesGain, exact copy of
        the zeros, poles and gain), ``"tf"`` (TransferFunction, coefficients in descending
        powers of s) or ``"ss"`` (StateSpace, the section-wise realization of
        :attr:`state_space`).

        Raises
        ------
        InvalidSystemError
            An unknown form, or a system with dead time (scipy's LTI objects hold none).
        """
        from scipy import signal

        if self.delay_s:
            raise InvalidSystemError(
                f"dead time {self.delay_s:g} s cannot be carried by scipy.signal's LTI "
                f"objects; build the system without it for the export")
        if form == "zpk":
            return signal.ZerosPolesGain(self.zeros, self.poles, self.gain)
        if form == "tf":
            return signal.TransferFunction(self.num, self.den)
        if form == "ss":
            return signal.StateSpace(*self.state_space)
        raise InvalidSystemError(f"form must be 'zpk', 'tf' or 'ss', got {form!r}")


def _pair_sections(zeros: np.ndarray, poles: np.ndarray, gain: float) -> np.ndarray:
    """Zeros, poles and gain as second-order sections (see :attr:`System.sections`)."""
    p = np.asarray(poles, dtype=np.complex128)
    z = np.asarray(zeros, dtype=np.complex128)
    if p.size == 0:
        return np.array([[0.0, 0.0, gain, 0.0, 0.0, 1.0]])
    # Pole groups: each complex pair (upper member kept) and real poles two by two.
    pairs = sorted(p[p.imag > 0], key=abs)
    reals = sorted(p[p.imag == 0].real, key=abs)
    groups: list[list[complex]] = [[q, np.conj(q)] for q in pairs]
    groups += [[complex(r) for r in reals[i:i + 2]] for i in range(0, len(reals), 2)]
    groups.sort(key=lambda g: min(abs(x) for x in g))
    room = [len(g) for g in groups]
    assigned: list[list[complex]] = [[] for _ in groups]

    def nearest(target: complex, need: int) -> int:
        free = [i for i in range(len(groups)) if room[i] >= need]
        return min(free, key=lambda i: min(abs(target - x) for x in groups[i]))

    # Complex zero pairs first (they need a whole second-order section), then real zeros.
    # A proper system always has room: there are floor(n_poles/2) second-order sections.
    for q in sorted(z[z.imag > 0], key=abs):
        i = nearest(q, 2)
        assigned[i] += [q, np.conj(q)]
        room[i] -= 2
    for r in sorted(z[z.imag == 0].real, key=abs):
        i = nearest(complex(r), 1)
        assigned[i].append(complex(r))
        room[i] -= 1
    rows = []
    for g, zs in zip(groups, assigned, strict=True):
        a = np.real(np.poly(g))
        b = np.real(np.poly(zs)) if zs else np.ones(1)
        rows.append(np.concatenate([np.zeros(3 - b.size), b, np.zeros(3 - a.size), a]))
    out = np.array(rows, dtype=np.float64)
    out[0, :3] *= gain
    return out


def _state_space_zpk(A: Any, B: Any, C: Any, D: Any) -> tuple[np.ndarray, np.ndarray, float]:
    """Zeros, poles and gain of a single-input single-output state-space model.

    Poles are the eigenvalues of A; zeros the finite generalized eigenvalues of the
    system matrix pencil ([[A, B], [C, D]], [[I, 0], [0, 0]]) (A. Emami-Naeini and
    P. Van Dooren, "Computation of zeros of linear multivariable systems",
    Automatica 18(4), 1982), which avoids the badly conditioned polynomial
    coefficients of going through a transfer function; the gain follows from
    H(s0) = C (s0 I - A)^-1 B + D at one real point away from every root.
    """
    from scipy.linalg import eigvals

    A, B, C, D = (np.atleast_2d(np.asarray(m, dtype=np.float64)) for m in (A, B, C, D))
    n = A.shape[0]
    poles = np.linalg.eigvals(A) if n else np.array([])
    if n:
        pencil = np.block([[A, B], [C, D]])
        mass = np.zeros_like(pencil)
        mass[:n, :n] = np.eye(n)
        with np.errstate(divide="ignore", invalid="ignore"):
            cand = eigvals(pencil, mass)
        scale = 1.0 + float(np.max(np.abs(A)))
        zeros = cand[np.isfinite(cand) & (np.abs(cand) < 1e8 * scale)]
    else:
        zeros = np.array([])
    roots = np.abs(np.concatenate([poles, zeros, [1.0]]))
    s0 = 1.7 * (1.0 + float(np.max(roots)))
    h0 = float(np.real((C @ np.linalg.solve(s0 * np.eye(n) - A, B) + D)[0, 0])) if n \
        else float(D[0, 0])
    gain = h0 * float(np.real(np.prod(s0 - poles) / np.prod(s0 - zeros)))
    return zeros, poles, gain


def _as_system(x: Any) -> System:
    if isinstance(x, System):
        return x
    if isinstance(x, (int, float)) and not isinstance(x, bool):
        return System([], [], float(x), text=repr(float(x)))
    raise InvalidSystemError(f"cannot combine a System with {type(x).__name__}")
