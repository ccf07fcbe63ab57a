"""DiscreteSystem: a runnable discrete model with explicit, carried filter state.

The model runs as second-order sections through ``scipy.signal.sosfilt``'s loop
(on a channel-major copy of each block, made in cache-sized pieces from 4 channels,
and run in place, :func:`run_sections`), followed by an exact
delay line for the whole-sample part of the dead time. Everything else a
block costs is constant work, so processing is as fast as sosfilt itself.
Models whose sections would lose digits (poles near z = 1: rates far above
the system's frequencies, stiff systems, integrators) run instead as an
incremental (delta-operator) state space, :mod:`simwave.discrete.incremental`;
``realization`` in :func:`simwave.discrete.discretize` chooses.

Initial state
-------------
``rest``
    Zero initial conditions before the first sample: the transfer-function
    assumption and the convention of scipy.signal.lsim. For the
    ramp-invariant method the textbook model would assume an input that
    ramped up to the first sample; the state is corrected so that the first
    and every later sample are the exact analog samples.
``settled``
    The steady state for a constant input equal to the first sample (per
    channel): a recording that starts at an offset shows no false start-up
    transient. Needs a finite DC gain.
output initial conditions
    For a system entered as an ODE: y(0), y'(0), ..., y^(n-1)(0), the values
    just before the input starts (t = 0-); the zero-input response they
    produce is added to the zero-state response (superposition, e.g. Ogata,
    *Modern Control Engineering*, 5th ed., sec. 2-3 and 9-6).

The ramp-invariant ``rest`` start is a closed form (section by section, from
the last, see ``DiscreteSystem._rest_closed_form``); ``settled`` is
scipy.signal.sosfilt_zi's steady state. Output initial conditions, and the
rest start where its closed form declines (a fractional dead time, sections
forced far beyond their round-off limit), are section states found by a
least-squares fit of the sections' own zero-input responses to the exact
response the state must produce (the responses are exact sums of the
model's modes, so the fit is exact up to rounding; its residual is checked).
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from typing import Any

import numpy as np

from simwave.discrete.incremental import (
    IncrementalModel,
    increment_round_off,
    section_response_difference,
    section_round_off,
)
from simwave.discrete.kernels import signal_package, sosfilt_loop
from simwave.discrete.realization import (
    exp_increment,
    expm,
    increment_response,
    magnitude,
    poly_real,
    solve,
)
from simwave.errors import DiscretizationError
from simwave.threads import filter_threads

__all__ = ["DiscreteSystem", "FilterState", "INITIAL_MODES", "run_sections"]

#: Names accepted by ``initial``.
INITIAL_MODES: tuple[str, ...] = ("rest", "settled")

#: Longest zero-input response fitted when computing an initial state (samples).
_MAX_HORIZON = 1 << 16

#: Names accepted by ``realization``.
REALIZATIONS: tuple[str, ...] = ("auto", "sections", "incremental")

#: From this many channels, :func:`run_sections` transposes the frames into a channel-major
#: array in cache-sized pieces and filters it in place (see there) instead of one sosfilt
#: call along axis 0. Measured on 32 M values (process CPU time, one sosfilt call / this):
#: 4 channels 1.07x, 8 1.25x, 64 1.70x; 2 channels 0.93x, so fewer keep the one call.
CHANNEL_MAJOR_FROM = 4

#: Values (frames x channels) per transposed piece: 512 kB of float64, which stays in
#: this machine class's 1 MB per-core L2 cache with its transposed copy beside it.
PIECE_VALUES = 1 << 16

#: ``auto`` runs second-order sections while their expected round-off level
#: (:func:`simwave.discrete.incremental.section_round_off`) stays at or below
#: this fraction of the signal, and the incremental form above it. Chosen by
#: simwave from measurements: the estimate was 4-10x above the step-response
#: error measured against exact references (Butterworth 2-8 at 48 kHz, 20 Hz to
#: 1 kHz), so 1e-11 keeps the sections' real error near 3e-12, 30x under the
#: 1e-10 target.
SECTIONS_LIMIT = 1e-11

#: ``auto`` also runs the incremental form when the sections' frequency response differs
#: from the increment form's by more than this fraction of its peak
#: (:func:`simwave.discrete.incremental.section_response_difference`, hold methods: their
#: zeros come from the delta-domain pencil). The sections' step-response error was
#: measured at 0.2-1.7x this difference (Butterworth 2-20, fs/fc 4.8-4800), so below it
#: they stay under 1e-10 of the peak; ordinary models are far below it (Butterworth <= 11
#: at fs/fc >= 4.8: at most 7e-11, most under 1e-11), so they keep the faster sections.
RESPONSE_LIMIT = 5e-11


@dataclass(eq=False)
class FilterState:
    """The state carried between :meth:`DiscreteSystem.process` calls.

    Attributes
    ----------
    zi : ndarray, shape (n_sections, 2, n_channels)
        Second-order-section states in scipy.signal.sosfilt's layout for data
        of shape (n_samples, n_channels) filtered along axis 0.
    line : ndarray, shape (n_delay, n_channels), or None
        Ring buffer of the next ``n_delay`` output samples (the whole-sample
        dead time); ``pos`` is the index of the next one out.
    pos : int
    pending : str or None
        ``"rest"`` or ``"settled"`` while the first input sample is still
        unknown; resolved by the first non-empty block.
    n_channels : int
    x : ndarray, shape (2, n_states, n_channels), or None
        The state of the incremental realization (``zi`` is then empty): the
        first-pass state and its refinement, whose sum is the state proper
        (see :meth:`simwave.discrete.incremental.IncrementalModel.run`).
    spent : bool
        True once the state has been passed to ``process``: a state is used
        once, then the returned state takes its place (its buffers may be
        reused in place).
    """

    zi: np.ndarray
    line: np.ndarray | None
    pos: int
    pending: str | None
    n_channels: int
    spent: bool = False
    x: np.ndarray | None = None


def run_sections(sos: np.ndarray, x: np.ndarray, zi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``scipy.signal.sosfilt(sos, x, axis=0, zi=zi)`` for x of shape (n, n_channels), same bits.

    sosfilt filters each channel as one contiguous row, so along axis 0 it first copies
    the whole (n, n_channels) array into channel-major order, a strided transposition
    through main memory, then runs its loop (scipy/signal/_sosfilt.pyx) on that copy in
    place. From ``CHANNEL_MAJOR_FROM`` channels (and more than ``PIECE_VALUES`` values) the
    transposition is done here instead, in pieces of about ``PIECE_VALUES`` values that
    stay in cache, straight into the output array; fewer channels, or a short block, get
    sosfilt's own one-piece copy. The same loop then runs on it in place: one copy, and
    no argument handling per call (~20 us, a good part of a 1,000-sample run). The loop
    is sosfilt's own, per channel and per sample, on the same values in the same order,
    so the output is bit-identical (tests/test_same_numbers.py
    compares it with sosfilt, signed zeros, infinities and NaN included).

    Returns (y, zf) like sosfilt: y of shape (n, n_channels) (a transposed view of a
    channel-major array, the layout sosfilt itself returns along axis 0) and zf of shape
    (n_sections, 2, n_channels).
    """
    n, nch = x.shape
    if (sosfilt_loop is None or n == 0 or x.dtype != np.float64
            or np.asarray(zi).dtype != np.float64 or sos.ndim != 2 or sos.shape[1] != 6
            or not np.all(sos[:, 3] == 1.0)):
        return signal_package().sosfilt(sos, x, axis=0, zi=zi)
    zi = np.asarray(zi, dtype=np.float64)
    if zi.shape != (sos.shape[0], 2, nch):
        raise ValueError(f"zi must have shape {(sos.shape[0], 2, nch)}, got {zi.shape}")
    if nch < CHANNEL_MAJOR_FROM or n * nch <= PIECE_VALUES:
        # sosfilt's own copy (the moved axis made C-contiguous in one go), then its loop:
        # the same work without its argument handling (~20 us, much of a short run)
        out = np.array(x.T, dtype=np.float64, order="C")
    else:
        out = np.empty((nch, n))
        frames = max(256, PIECE_VALUES // nch)
        for start in range(0, n, frames):
            np.copyto(out[:, start : start + frames], x[start : start + frames].T)
    # the loop's state layout: (channels, sections, 2), C-contiguous (a copy: zi stays)
    zc = np.array(zi.transpose(2, 0, 1), order="C")
    sos = np.ascontiguousarray(sos, dtype=np.float64)
    threads = min(filter_threads(), nch) if n * nch >= THREADS_FROM_VALUES else 1
    if threads == 1:
        sosfilt_loop(sos, out, zc)
    else:
        # groups of channels (rows) on threads of their own: the loop releases the GIL
        # (scipy/signal/_sosfilt.pyx runs it under ``with nogil``), and the channels are
        # independent, so the same values in the same order as one call
        bounds = [nch * i // threads for i in range(threads + 1)]
        groups = list(zip(bounds[:-1], bounds[1:], strict=True))
        # each group's states in a buffer of its own, 64 bytes and more from the others':
        # the loop writes them at every sample, and states sharing a cache line made the
        # two cores pass it back and forth (5x the CPU time on 2 channels)
        per = zc[0].size * (-(-nch // threads))
        pads = np.empty((threads, per + 16))
        states = []
        for g, (a, b) in enumerate(groups):
            z = pads[g, : (b - a) * zc[0].size].reshape((b - a,) + zc.shape[1:])
            z[...] = zc[a:b]
            states.append(z)
        pool = _thread_pool(threads)
        waits = [pool.submit(sosfilt_loop, sos, out[a:b], states[g])
                 for g, (a, b) in enumerate(groups) if g]
        sosfilt_loop(sos, out[: bounds[1]], states[0])
        for fut in waits:
            fut.result()
        for (a, b), z in zip(groups, states, strict=True):
            zc[a:b] = z
    return out.T, zc.transpose(1, 2, 0)


#: From this many values (frames x channels) in a block of two channels or more,
#: :func:`run_sections` runs sosfilt's loop on groups of channels on up to
#: :func:`simwave.threads.filter_threads` threads (handing work to a thread costs ~0.1 ms;
#: 2^18 values are ~2 ms of the loop at order 4).
THREADS_FROM_VALUES = 1 << 18

_POOL: list = [None, 0, 0]  # the pool, its workers, the process it was made in


def _thread_pool(threads: int):
    """A thread pool with at least ``threads - 1`` workers, kept for the process.

    A child made by ``fork`` inherits the pool object but none of its threads (its work
    would wait for ever): a pool made in another process is replaced, not reused."""
    pool, size, pid = _POOL
    if pool is None or size < threads - 1 or pid != os.getpid():
        from concurrent.futures import ThreadPoolExecutor

        if pool is not None and pid == os.getpid():
            pool.shutdown(wait=False)
        pool = ThreadPoolExecutor(max_workers=threads - 1, thread_name_prefix="simwave-filter")
        _POOL[:] = [pool, threads - 1, os.getpid()]
    return pool


def sections_settled_state(sos: np.ndarray) -> np.ndarray:
    """``scipy.signal.sosfilt_zi(sos)``, same bits, without importing scipy.signal (~1 s).

    Each section's state for a unit step held forever (its ``lfilter_zi``: the solution of
    (I - A^T) zi = b[1:] - a[1:] b0 with A the companion matrix of a), scaled by the DC
    gain of the sections before it, in the steps scipy 1.17 takes
    (scipy/signal/_signaltools.py); tests/test_kernels.py compares the two bit for bit.
    Sections whose a0 is not 1 go to scipy's own function.
    """
    sos = np.asarray(sos)
    if sos.ndim != 2 or sos.shape[1] != 6 or sos.dtype != np.float64 or np.any(sos[:, 3] != 1.0):
        return signal_package().sosfilt_zi(sos)
    zi = np.empty((sos.shape[0], 2), dtype=sos.dtype)
    scale = 1.0
    for k in range(sos.shape[0]):
        b = sos[k, :3]
        a = sos[k, 3:]
        companion = np.zeros((2, 2))
        companion[0, :] = -a[1:] / (1.0 * a[0:1])
        companion[1, 0] = 1
        i_minus_a = np.eye(2) - companion.T
        zi[k, ...] = scale * np.linalg.solve(i_minus_a, b[1:] - a[1:] * b[0])
        scale *= np.sum(b) / np.sum(a)
    return zi


def _sequence(step, C: np.ndarray, v: np.ndarray, n: int) -> np.ndarray:
    """Outputs C M^k v for k = 0..n-1, where ``step(j)`` returns M^(2^j).

    Doubling: the states for k < 2^j times M^(2^j) give the states for
    2^j <= k < 2^(j+1), so only log2(n) matrix products are needed.

    Returns shape (n, n_columns_of_v).
    """
    states = v[None, :, :]
    j = 0
    while states.shape[0] < n:
        M = step(j)
        states = np.concatenate([states, np.einsum("ab,tbk->tak", M, states)])
        j += 1
    return np.einsum("b,tbk->tk", C[0], states[:n])


def _analog_sequence(A: np.ndarray, C: np.ndarray, T: float, v: np.ndarray, n: int) -> np.ndarray:
    """Samples C e^{A k T} v, k = 0..n-1.

    One matrix exponential, then repeated squaring for the powers e^{A 2^j T}
    (about log2(n) squarings; for a stable A each squaring adds only a few
    ulps of relative error, far below the 1e-9 the tests ask for).
    """
    if A.shape[0] == 0 or n <= 0:
        return np.zeros((max(n, 0), v.shape[1] if v.ndim == 2 else 1))
    powers = [expm(A * T)]

    def step(j: int) -> np.ndarray:
        while len(powers) <= j:
            powers.append(powers[-1] @ powers[-1])
        return powers[j]

    return _sequence(step, C, v, n)


def _companion(a: np.ndarray) -> tuple[np.ndarray, np.ndarray, float]:
    """Scaled companion form of the monic ODE a: states y^(k)/w0^k.

    a = [1, a_{n-1}, ..., a_0] (descending). With w_k = y^(k)/w0^k, w0 = |a_0|^(1/n)
    (or 1), every entry is of the order of the coefficients of the frequency-
    normalized ODE, which keeps the matrix exponential accurate.
    Returns (A, C, w0); y = C w.
    """
    n = a.size - 1
    a0 = abs(a[-1])
    if a0 > 0:
        w0 = a0 ** (1.0 / n)
    else:
        roots = np.abs(np.roots(a))
        w0 = float(np.max(roots)) if roots.size and np.max(roots) > 0 else 1.0
    A = np.zeros((n, n))
    for k in range(n - 1):
        A[k, k + 1] = w0
    # y^(n) = -sum_k c_k y^(k), where the coefficient c_k of y^(k) is a[n - k].
    for k in range(n):
        A[n - 1, k] = -a[n - k] * w0 ** (k - (n - 1))
    C = np.zeros((1, n))
    C[0, 0] = 1.0
    return A, C, w0


def _pair_zpk(z: np.ndarray, p: np.ndarray, k: float) -> np.ndarray:
    """Second-order sections of k prod(z - z_i)/prod(z - p_i) with as many zeros as poles.

    The pairing rule of scipy.signal.zpk2sos (pairing="nearest"): pole groups (a
    complex pair, or two real poles) take their zeros in order of closeness to the
    unit circle, each the nearest remaining zeros, and the sections are ordered with
    the poles closest to the unit circle last (Jackson, *Digital Filters and Signal
    Processing*, 3rd ed., sec. 11.4, from memory; scipy.signal.zpk2sos documentation).
    Written out here because scipy's general routine costs ~0.5 ms per call, a fifth of
    a short run; the tests compare the result with scipy's on the same poles and zeros.
    """
    z = np.asarray(z, dtype=np.complex128)
    p = np.asarray(p, dtype=np.complex128)
    if p.size == 0:
        return np.array([[float(k), 0.0, 0.0, 1.0, 0.0, 0.0]])
    tol = 1e-12

    def split(roots: np.ndarray) -> tuple[list[complex], list[float]]:
        # Python complex numbers: |x| is hypot(re, im) as for numpy's scalars (inf where
        # that overflows, see magnitude)
        vals = roots.tolist()
        upper = [x for x in vals if x.imag > tol * max(1.0, magnitude(x))]
        reals = [x.real for x in vals if abs(x.imag) <= tol * max(1.0, magnitude(x))]
        return upper, reals

    p_up, p_re = split(p)
    z_up, z_re = split(z)
    dist = lambda x: abs(1.0 - magnitude(x))  # noqa: E731 - closeness to the unit circle
    p_re.sort(key=dist)
    groups: list[list[complex]] = [[q, q.conjugate()] for q in p_up]
    singles: list[list[complex]] = []
    if len(p_re) % 2:  # the odd real pole makes a first-order section
        singles.append([complex(p_re.pop())])
    groups += [[complex(a), complex(b)] for a, b in zip(p_re[0::2], p_re[1::2], strict=True)]
    groups.sort(key=lambda g: min(dist(x) for x in g))
    assigned: dict[int, list[complex]] = {}

    def take_real(target: complex) -> complex:
        j = min(range(len(z_re)), key=lambda i: abs(z_re[i] - target))
        return complex(z_re.pop(j))

    # the single real pole first, so the real zeros left come in pairs
    order = [("single", g) for g in singles] + [("pair", g) for g in groups]
    for n, (kind, g) in enumerate(order):
        target = g[0]
        if kind == "single":
            assigned[n] = [take_real(target)]
            continue
        best_c = min(range(len(z_up)), key=lambda i: abs(z_up[i] - target), default=None)
        best_r = min((abs(x - target) for x in z_re), default=np.inf)
        if best_c is not None and (len(z_re) < 2 or abs(z_up[best_c] - target) <= best_r):
            q = z_up.pop(best_c)
            assigned[n] = [q, q.conjugate()]
        else:
            first = take_real(target)
            assigned[n] = [first, take_real(g[1])]
    # output order: poles farthest from the unit circle first, closest last
    idx = sorted(range(len(order)), key=lambda n: -min(dist(x) for x in order[n][1]))
    sos = np.zeros((len(idx), 6))
    for row, n in zip(sos, idx, strict=True):
        b = poly_real(assigned[n])
        a = poly_real(order[n][1])
        row[: b.size] = b  # shorter polynomials are padded with zeros at the end
        row[3 : 3 + a.size] = a
    sos[0, :3] *= k
    return sos


def _zpk_to_sos(zd: np.ndarray, pd: np.ndarray, kd: float) -> np.ndarray:
    """Second-order sections of k prod(z - zd)/prod(z - pd), including its pure delay.

    scipy.signal.zpk2sos treats missing zeros as zeros at the origin, which
    would advance the response by the relative degree r = len(pd) - len(zd).
    Here those r zeros are added at the origin explicitly and then removed again
    by shifting numerators one step (multiplying by z^-1) in sections whose
    trailing numerator coefficients are exactly zero, so the sections keep the
    model's true delay.
    """
    r = pd.size - zd.size
    if r < 0:
        raise DiscretizationError("the discrete model has more zeros than poles (not causal)")
    sos = _pair_zpk(np.concatenate([zd, np.zeros(r)]), pd, kd)
    for row in sos[::-1]:
        while r > 0 and row[2] == 0.0 and np.any(row[:2] != 0.0):
            row[1:3] = row[0:2].copy()
            row[0] = 0.0
            r -= 1
    if r:
        raise DiscretizationError(
            "internal error: could not place the model's pure delay in its sections"
        )
    return sos


class DiscreteSystem:
    """A discrete model of an analog system H(s), ready to process sampled data.

    Made by :func:`simwave.discrete.discretize` (or ``System.discretize``).

    Attributes
    ----------
    rate : float
        Sample rate in Hz.
    method : str
        Discretization method name.
    sos : ndarray, shape (n_sections, 6), float64
        Second-order sections in scipy.signal's layout [b0, b1, b2, 1, a1, a2];
        they include a fractional dead time, not the whole-sample delay line.
    zpk : tuple (zeros, poles, gain)
        Zeros and poles in z (complex128) and the gain, of the same model as ``sos``.
    delay_samples : float
        Total dead time in samples (whole part: exact delay line; fraction:
        in ``sos``, see ``options["fractional_delay_handling"]``).
    warnings : list of str
        Plain-text warnings about the model.
    system : simwave.System
        The analog model it came from.
    options : dict
        What was chosen, for provenance (method, rate, prewarp, dead time
        split, gain-match frequency, impulse-invariance correction, realization,
        why, expected round-off level).
    realization : str
        ``"sections"`` (sosfilt on ``sos``) or ``"incremental"`` (delta-operator
        state space; ``sos`` is then the same model for reference, not what runs).
    round_off_level : float
        Expected round-off of the realization as a fraction of the signal (an
        estimate, see :mod:`simwave.discrete.incremental`).

    Notes
    -----
    Processing is ``scipy.signal.sosfilt`` on each block (:func:`run_sections`),
    so the second-order sections carry the state; initial states are found as
    described in the module notes.

    References
    ----------
    .. [1] A. V. Oppenheim, R. W. Schafer, *Discrete-Time Signal Processing*,
           3rd ed., sec. 6.3.2 (cascade form: second-order sections) and 7.2.
           Section numbers here are quoted from memory.
    .. [2] G. F. Franklin, J. D. Powell, M. L. Workman, *Digital Control of
           Dynamic Systems*, 3rd ed., ch. 6 (hold equivalents, initial states).
    """

    def __init__(
        self,
        *,
        system,
        rate: float,
        method: str,
        zpk: tuple[np.ndarray, np.ndarray, float],
        delay_samples: float,
        delay_line: int,
        options: dict[str, Any],
        warnings: list[str],
        design,
        hold_frac: float = 0.0,
        thiran_d: float | None = None,
        realization: str = "auto",
    ) -> None:
        zd, pd, kd = zpk
        self.system = system
        self.rate = float(rate)
        self.method = method
        self.zpk = (
            np.asarray(zd, dtype=np.complex128),
            np.asarray(pd, dtype=np.complex128),
            float(kd),
        )
        self.delay_samples = float(delay_samples)
        self.delay_line = int(delay_line)
        self.options = options
        self.warnings = list(warnings)
        self._design = design
        self._hold_frac = hold_frac
        self._thiran_d = thiran_d
        self.sos = self._make_sos()
        self._cache: dict[str, Any] = {}
        self._inc_model: IncrementalModel | None = None  # made on first use (see _inc)
        self._choose_realization(realization)

    @property
    def _inc(self) -> IncrementalModel | None:
        """The incremental realization of the design's increment form (None without one),
        made when first needed: a model that runs as sections rarely needs it."""
        if self._inc_model is None and self._design.increment is not None:
            self._inc_model = IncrementalModel(*self._design.increment)
        return self._inc_model

    def _choose_realization(self, wanted: str) -> None:
        """Sections where they are exact enough, the incremental form where they are not.

        Two checks: the sections' coefficient round-off (``section_round_off``, poles
        near z = 1) and, for the hold methods, how far the sections' response is from
        the increment form's (``section_response_difference``: zeros from the pencil
        that the sections do not carry exactly). ``auto`` takes the sections only when
        both are within their limits.
        """
        if wanted not in REALIZATIONS:
            raise DiscretizationError(
                f"unknown realization {wanted!r}; known: {', '.join(REALIZATIONS)}"
            )
        sec_level = section_round_off(self.sos)
        response = getattr(self._design, "response", None)
        diff = None
        if (wanted != "incremental" and response is not None and self._thiran_d is None
                and sec_level <= SECTIONS_LIMIT):
            diff = section_response_difference(self.sos, *response)
        if wanted == "auto":
            use_inc = self._design.increment is not None and (
                sec_level > SECTIONS_LIMIT or (diff is not None and diff > RESPONSE_LIMIT))
        else:
            use_inc = wanted == "incremental"
            if use_inc and self._design.increment is None:
                raise DiscretizationError("this model has no incremental realization")
        self.realization = "incremental" if use_inc else "sections"
        sec_total = sec_level if diff is None else max(sec_level, diff)
        # the incremental form's level only where it runs (it is not reported otherwise)
        self.round_off_level = float(increment_round_off(self._inc.poles_increment())
                                     if use_inc else sec_total)
        if wanted != "auto":
            why = f"as asked ({wanted})"
        elif use_inc and sec_level > SECTIONS_LIMIT:
            why = (f"second-order sections would round to about {sec_level:.1e} of the signal "
                   f"(limit {SECTIONS_LIMIT:.0e}); incremental state space instead")
        elif use_inc:
            why = (f"second-order sections would differ from the model by {diff:.1e} of its "
                   f"peak response (their zeros are not exact; limit {RESPONSE_LIMIT:.0e}); "
                   "incremental state space instead")
        else:
            why = f"second-order sections round to about {sec_total:.1e} of the signal"
        self.options["realization"] = self.realization
        self.options["realization_reason"] = why
        self.options["round_off_level"] = self.round_off_level
        self.options["sections_round_off_level"] = sec_total

    # ----------------------------------------------------------------- construction
    def _make_sos(self) -> np.ndarray:
        zd, pd, kd = self.zpk
        if pd.size == 0 and zd.size == 0:
            sos = np.array([[kd, 0.0, 0.0, 1.0, 0.0, 0.0]])
        elif kd == 0.0:
            sos = signal_package().zpk2sos(np.zeros(0), pd, 1.0)
            sos[0, :3] = 0.0
        else:
            sos = _zpk_to_sos(zd, pd, kd)
        return np.ascontiguousarray(sos, dtype=np.float64)

    @property
    def n_sections(self) -> int:
        """Number of second-order sections."""
        return int(self.sos.shape[0])

    @property
    def dc_gain(self) -> float:
        """Gain of the discrete model at z = 1 (inf with a pole there)."""
        if self.realization == "incremental":
            with np.errstate(divide="ignore", invalid="ignore"):
                try:
                    g = self._inc.dc_gain()
                except np.linalg.LinAlgError:
                    return math.inf
            return g if math.isfinite(g) else math.inf
        b = self.sos[:, :3].sum(axis=1)
        a = self.sos[:, 3:].sum(axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            g = float(np.prod(b / a))
        return g if math.isfinite(g) else math.inf

    def frequency_response(self, f_hz: Any, *, dead_time: bool = True) -> np.ndarray:
        """Complex response of the discrete model at frequencies in Hz.

        Evaluated from the second-order sections (what actually runs); with
        ``dead_time`` the whole-sample delay line is included as e^{-j w n T}.
        """
        f = np.atleast_1d(np.asarray(f_hz, dtype=np.float64))
        if self.realization == "incremental":
            # D + C ((z - 1) I - E)^{-1} G with z - 1 = expm1(j w): exact near z = 1.
            inc = self._inc
            h = increment_response(
                inc.E, inc.G[:, None], inc.C[None, :], np.array([[inc.D]]),
                np.expm1(2j * np.pi * f / self.rate),
            )
            if dead_time and self.delay_line:
                h = h * np.exp(-2j * np.pi * f * self.delay_line / self.rate)
            return h.reshape(np.shape(f_hz)) if np.ndim(f_hz) else h[0]
        # Each section's (b0 + b1 z^-1 + b2 z^-2) / (a0 + a1 z^-1 + a2 z^-2) at z = e^{jw},
        # multiplied: what scipy.signal.sosfreqz computes, without its per-call overhead.
        # Written out rather than as a matrix product: a BLAS product of this size wakes the
        # BLAS thread pool, which cost 12-16 ms instead of 0.12 ms under load.
        zi = np.exp(-2j * np.pi * f / self.rate)[None, :]
        zi2 = zi * zi
        sos = self.sos
        num = sos[:, 0:1] + sos[:, 1:2] * zi + sos[:, 2:3] * zi2
        den = sos[:, 3:4] + sos[:, 4:5] * zi + sos[:, 5:6] * zi2
        h = (num / den).prod(axis=0)
        if dead_time and self.delay_line:
            h = h * np.exp(-2j * np.pi * f * self.delay_line / self.rate)
        return h.reshape(np.shape(f_hz)) if np.ndim(f_hz) else h[0]

    # ----------------------------------------------------------------- state fitting
    def _horizon(self) -> int:
        """Samples over which zero-input responses are fitted: until every mode has decayed."""
        n_min = 8 * self.n_sections + 64
        worst = n_min
        if self.realization == "incremental":
            radii = [np.abs(1.0 + self._inc.poles_increment())]
        else:
            radii = [np.abs(np.roots(row[3:])) if row[5] != 0 or row[4] != 0 else np.zeros(0)
                     for row in self.sos]
        for roots in radii:
            for r in roots:
                if r == 0:
                    continue
                if r < 1 - 1e-15:
                    worst = max(worst, int(math.ceil(math.log(1e-17) / math.log(r))))
                elif r > 1 + 1e-15:
                    # Growing mode: stop before it has grown by 1e8.
                    worst = max(worst, min(_MAX_HORIZON, int(math.log(1e8) / math.log(r))))
                else:
                    worst = _MAX_HORIZON
        return int(min(max(worst, n_min), _MAX_HORIZON))

    def _zir_basis(self, n: int) -> np.ndarray:
        """Zero-input responses of the sections for each unit state, shape (n, 2 m)."""
        if self.realization == "incremental":
            k = self._inc.n
            basis, _ = self._inc.run(np.zeros((n, k)), self._inc.carried(np.eye(k)))
            return basis
        m = self.n_sections
        zi = np.zeros((m, 2, 2 * m))
        for s in range(m):
            zi[s, 0, 2 * s] = 1.0
            zi[s, 1, 2 * s + 1] = 1.0
        basis, _ = run_sections(self.sos, np.zeros((n, 2 * m)), zi)
        return basis

    def _fit_state(self, target: np.ndarray) -> np.ndarray:
        """Section states whose zero-input response is ``target`` (shape (n, k)).

        Least squares over the horizon; returns zi of shape (n_sections, 2, k),
        or for the incremental realization the state, shape (n_states, k).
        Adds a warning when the fit is not exact to 1e-8 of the target's size.
        """
        n, k = target.shape
        basis = self._zir_basis(n)
        norms = np.linalg.norm(basis, axis=0)
        norms[norms == 0] = 1.0
        coef, *_ = np.linalg.lstsq(basis / norms, target, rcond=None)
        coef = coef / norms[:, None]
        resid = np.max(np.abs(basis @ coef - target)) if n else 0.0
        scale = np.max(np.abs(target)) if n else 0.0
        if scale > 0 and resid > 1e-8 * scale:
            note = (
                f"an initial state is reproduced only to {resid / scale:.1e} of its size "
                "(the model's modes cannot express it exactly)"
            )
            if note not in self.warnings:
                self.warnings.append(note)
        if self.realization == "incremental":
            return coef
        return coef.reshape(self.n_sections, 2, k)

    def _rest_correction(self) -> np.ndarray | None:
        """Section states (per unit first sample) that make the ramp-invariant start exact.

        The closed form (:meth:`_rest_closed_form`); where it does not apply or fails
        its own consistency check (a fractional dead time; sections forced far beyond
        ``SECTIONS_LIMIT``, whose poles are no longer the model's to 1e-12), the
        least-squares fit of the sections' zero-input responses over the modes' decay
        (:meth:`_fit_state`), which spreads the sections' own pole error best.
        """
        des = self._design
        if des.correction is None:
            return None
        if "rest" not in self._cache:
            zi = self._rest_closed_form()
            self._cache["rest"] = zi if zi is not None else self._rest_fit()
        return self._cache["rest"]

    def _rest_fit(self) -> np.ndarray:
        """The at-rest correction's section states by least squares over the modes' decay."""
        dy0, dxi1 = self._design.correction
        A, _, C, _ = self._design.analog
        n = self._horizon()
        target = np.empty((n, 1))
        target[0, 0] = dy0
        target[1:, :] = _analog_sequence(A, C, 1.0 / self.rate, dxi1[:, None], n - 1)
        return self._fit_state(target)[:, :, 0]

    def _rest_closed_form(self) -> np.ndarray | None:
        """The at-rest correction's section states in closed form, or None where it does not apply.

        The correction's output is t[0] = dy0, t[k] = C Phi^(k-1) dxi1 (k >= 1), Phi =
        e^{AT} of the analog model; with v = Phi^-1 dxi1 it is t[k] = h Phi^k v for all
        k >= 0 (h = C; exactly so for the ramp-invariant start without a fractional
        delay, where dy0 = C v: checked). The last section, b(z^-1)/a(z^-1) with state
        (s1, s2) in sosfilt's transposed direct form II, turns its input u into its output
        y with zero-input part (s1 + s2 z^-1)/a:

            a(z^-1) Y = b(z^-1) U + s1 + s2 z^-1

        (the one-sided z-transform of the section's difference equations; Oppenheim &
        Schafer, *Discrete-Time Signal Processing*, 3rd ed., sec. 6.5 (transposed forms)
        and sec. 3.3 on the one-sided transform with initial conditions, section numbers
        from memory). For y = t, the input u = g Phi^k v must satisfy a * t = b * u
        for k >= 2, i.e. g b(Phi) = h a(Phi), with a(Phi) = Phi^2 + a1 Phi + a2 I: the
        row g solves one n x n system, and the section's state follows from samples 0
        and 1 of the same identity:

            s1 = t[0] - b0 u[0],   s2 = t[1] + a1 t[0] - b0 u[1] - b1 u[0].

        u is the zero-input output the sections before it must make, so the same step
        runs from the last section to the first (a(Phi) removes that section's modes:
        what is left for the first section's zero input is h prod a_i(Phi) prod b_i(Phi)^-1
        v, zero by Cayley-Hamilton when the sections' poles are Phi's; checked). Phi
        enters only as E = Phi - I (``exp_increment``) and a(Phi), b(Phi) as polynomials
        in E, so nothing is formed as 1 + tiny. Cost: one n x n solve per section (~0.05
        ms at order 8) instead of a fit over thousands of samples (0.6-100 ms, most of
        it waking the BLAS threads under load).
        """
        des = self._design
        dy0, w = des.correction
        A, _, C, _ = des.analog
        n = A.shape[0]
        if n == 0 or w.shape[0] != n or self.sos.shape[0] == 0:
            return None
        eye = np.eye(n)
        E = exp_increment(A / self.rate)
        E2 = E @ E
        with np.errstate(all="ignore"):
            try:
                v = solve(eye + E, np.asarray(w, dtype=np.float64))
            except np.linalg.LinAlgError:
                return None
            h = np.asarray(C, dtype=np.float64).reshape(-1)
            # the size of the correction's response: |t[k]| <= |h| |Phi^k| |v|, and
            # |Phi^k| stays near 1 in the well-scaled analog realization (np.linalg.norm
            # of a vector is sqrt(x.dot(x)), written out)
            scale = float(np.sqrt(h.dot(h)) * np.sqrt(v.dot(v))) + abs(dy0)
            if not scale > 0 or abs(dy0 - h @ v) > 1e-13 * scale:
                return None  # not a pure sum of the modes (fractional delay): fit instead
            zi = np.zeros((self.n_sections, 2))
            v1 = v + E @ v  # Phi v
            for i in range(self.n_sections - 1, -1, -1):
                b0, b1, b2, _, a1, a2 = self.sos[i]
                a_phi = E2 + (2.0 + a1) * E + ((1.0 + a1) + a2) * eye
                b_phi = b0 * E2 + (2.0 * b0 + b1) * E + ((b0 + b1) + b2) * eye
                try:
                    g = solve(b_phi.T, a_phi.T @ h)
                except np.linalg.LinAlgError:
                    return None  # a section's zero on another section's pole
                t0, t1, u0, u1 = h @ v, h @ v1, g @ v, g @ v1
                zi[i, 0] = t0 - b0 * u0
                zi[i, 1] = t1 + a1 * t0 - b0 * u1 - b1 * u0
                h = g
            left = abs(h @ v)
        if not (np.all(np.isfinite(zi)) and left <= 1e-12 * scale):
            return None
        return zi

    def _settled_state(self) -> np.ndarray:
        """Section states (per unit input) of the steady state for a constant input."""
        if "settled" not in self._cache and self.realization == "incremental":
            if not math.isfinite(self.dc_gain):
                raise DiscretizationError(
                    "a settled start needs a finite DC gain, but this model has a pole at "
                    "z = 1 (an integrator, s = 0); use initial='rest'"
                )
            self._cache["settled"] = self._inc.settled_state()
        if "settled" not in self._cache:
            den = self.sos[:, 3:].sum(axis=1)
            if np.any(np.abs(den) <= 1e-14 * np.abs(self.sos[:, 3:]).sum(axis=1)):
                raise DiscretizationError(
                    "a settled start needs a finite DC gain, but this model has a pole at "
                    "z = 1 (an integrator, s = 0); use initial='rest'"
                )
            self._cache["settled"] = sections_settled_state(self.sos)
        return self._cache["settled"]

    def _zero_input_response(self, ics: np.ndarray, n: int) -> np.ndarray:
        """Zero-input response of the ODE from output initial conditions, n samples.

        ``ics`` has shape (order, k). Exact analog samples for every method but
        ``bilinear``, whose own zero-input response is the trapezoidal rule's
        (x[k+1] = (I - A/K)^-1 (I + A/K) x[k], the state-space form of the
        bilinear transform; Franklin, Powell & Workman, 3rd ed., sec. 6.3).
        """
        a = np.asarray(self.system.ode[0], dtype=np.float64)
        a = a / a[0]
        A, C, w0 = _companion(a)
        order = a.size - 1
        v = ics / (w0 ** np.arange(order))[:, None]
        T = 1.0 / self.rate
        if self.method == "bilinear":
            K = self._design.bilinear_k
            eye = np.eye(order)
            P = np.linalg.solve(eye - A / K, eye + A / K)
            powers = [P]

            def step(j: int) -> np.ndarray:
                while len(powers) <= j:
                    powers.append(powers[-1] @ powers[-1])
                return powers[j]

            return _sequence(step, C, v, n)
        return _analog_sequence(A, C, T, v, n)

    # ----------------------------------------------------------------- initial state
    def initial_state(
        self,
        first_sample: Any = None,
        initial: str = "rest",
        n_channels: int | None = None,
        output_ics: Any = None,
    ) -> FilterState:
        """The filter state before the first sample.

        Parameters
        ----------
        first_sample : array_like, shape (n_channels,), or scalar, optional
            The first input sample per channel. ``settled`` needs it and the
            ramp-invariant ``rest`` start uses it; when omitted it is taken from
            the first non-empty block given to :meth:`process`.
        initial : {"rest", "settled"}
            ``rest``: at rest before the first sample (zero initial conditions,
            the scipy.signal.lsim convention). ``settled``: in steady state for a
            constant input equal to the first sample.
        n_channels : int, optional
            Number of channels when ``first_sample`` is not given (default 1).
        output_ics : array_like, shape (order,) or (order, n_channels), optional
            For a system entered as an ODE: y(0), y'(0), ..., y^(order-1)(0)
            just before the input starts; their zero-input response is added.
            Only with ``initial="rest"``.

        Returns
        -------
        FilterState

        Raises
        ------
        DiscretizationError
            Unknown ``initial``, channel-count mismatch, ``settled`` with an
            infinite DC gain, output initial conditions of the wrong length or
            for a system not entered as an ODE.
        """
        if initial not in INITIAL_MODES:
            raise DiscretizationError(
                f"unknown initial state {initial!r}; known: {', '.join(INITIAL_MODES)} "
                "(or output initial conditions for an ODE)"
            )
        u0 = None
        if first_sample is not None:
            try:
                u0 = np.atleast_1d(np.asarray(first_sample, dtype=np.float64))
            except (TypeError, ValueError):
                raise DiscretizationError(
                    f"first sample must be numbers, got {first_sample!r}"
                ) from None
            if u0.ndim != 1:
                raise DiscretizationError(
                    f"first sample must have shape (n_channels,), got shape {u0.shape}"
                )
        ics = None
        if output_ics is not None:
            ics = self._check_ics(output_ics, initial)
        nch = self._channels(u0, n_channels, ics)
        incremental = self.realization == "incremental"
        m = self.n_sections
        zi = np.zeros((self._inc.n, nch)) if incremental else np.zeros((m, 2, nch))
        line = np.zeros((self.delay_line, nch)) if self.delay_line else None
        if ics is not None:
            if ics.shape[1] == 1 and nch > 1:
                ics = np.repeat(ics, nch, axis=1)
            n_fit = self._horizon()
            zir = self._zero_input_response(ics, self.delay_line + n_fit)
            if line is not None:
                line = np.array(zir[: self.delay_line])
            zi = self._fit_state(np.ascontiguousarray(zir[self.delay_line :]))
        if initial == "settled":
            self._settled_state()  # fail early on an integrator
        needs_first = initial == "settled" or self._design.correction is not None
        if incremental:
            # The exact at-rest start of the ramp-invariant model is applied while the
            # first sample is processed (it changes y[0] and the state after it).
            state = FilterState(np.zeros((0, 2, nch)), line, 0,
                                initial if needs_first else None, nch,
                                x=self._inc.carried(zi))
            if initial == "settled" and u0 is not None:
                x, state.line = self._resolve(initial, u0, zi, line)
                state.x = self._inc.carried(x)
                state.pending = None
            return state
        state = FilterState(zi, line, 0, initial if needs_first else None, nch)
        if needs_first and u0 is not None:
            state.zi, state.line = self._resolve(initial, u0, zi, line)
            state.pending = None
        return state

    def _check_ics(self, output_ics: Any, initial: str) -> np.ndarray:
        if initial != "rest":
            raise DiscretizationError(
                "output initial conditions go with initial='rest' (their zero-input "
                f"response is added to the zero-state response), not {initial!r}"
            )
        if self.system.ode is None:
            raise DiscretizationError(
                "output initial conditions need a system entered as an ODE "
                "(y'' + ... = ...); this one was entered as a transfer function"
            )
        order = np.asarray(self.system.ode[0]).size - 1
        try:
            ics = np.asarray(output_ics, dtype=np.float64)
        except (TypeError, ValueError):
            raise DiscretizationError(
                f"output initial conditions must be numbers, got {output_ics!r}"
            ) from None
        if ics.ndim == 0:
            ics = ics[None]
        if ics.ndim == 1:
            ics = ics[:, None]
        names = ["y(0)", "y'(0)", "y''(0)"][: min(order, 3)] + (["..."] if order > 3 else [])
        names = ", ".join(names)
        if ics.ndim != 2 or ics.shape[0] != order:
            raise DiscretizationError(
                f"output initial conditions: the ODE has order {order}, so it needs {order} "
                f"values ({names}), got {ics.shape[0] if ics.ndim else 0}"
            )
        if not np.all(np.isfinite(ics)):
            raise DiscretizationError("output initial conditions contain NaN or infinity")
        return ics

    @staticmethod
    def _channels(u0, n_channels, ics) -> int:
        counts = set()
        if u0 is not None:
            counts.add(int(u0.size))
        if n_channels is not None:
            if int(n_channels) < 1:
                raise DiscretizationError(f"n_channels must be >= 1, got {n_channels!r}")
            counts.add(int(n_channels))
        if ics is not None and ics.shape[1] > 1:
            counts.add(int(ics.shape[1]))
        if len(counts) > 1:
            raise DiscretizationError(f"channel counts disagree: {sorted(counts)}")
        return counts.pop() if counts else 1

    def _resolve(self, mode: str, u0: np.ndarray, zi: np.ndarray, line):
        """Apply the first-sample part of the initial state (new arrays)."""
        if u0.size != zi.shape[-1]:
            raise DiscretizationError(
                f"first sample has {u0.size} channels, the state has {zi.shape[2]}"
            )
        if mode == "settled" and self.realization == "incremental":
            x = self._settled_state()[:, None] * u0[None, :]
            if line is not None:
                line = np.repeat((self.dc_gain * u0)[None, :], self.delay_line, axis=0)
            return x, line
        if mode == "settled":
            zi = self._settled_state()[:, :, None] * u0[None, None, :]
            if line is not None:
                y_ss, _ = run_sections(self.sos, u0[None, :], zi)
                line = np.repeat(y_ss, self.delay_line, axis=0)
            return zi, line
        corr = self._rest_correction()
        if corr is not None:
            zi = zi + corr[:, :, None] * u0[None, None, :]
        return zi, line

    # ----------------------------------------------------------------- processing
    def process(
        self, block: Any, state: FilterState | None = None
    ) -> tuple[np.ndarray, FilterState]:
        """Filter one block of samples, carrying the state to the next call.

        Parameters
        ----------
        block : array_like, shape (n_samples, n_channels) or (n_samples,)
            Input samples (float64; a 1-D array is one channel). Any length,
            including 0 and 1.
        state : FilterState, optional
            The state returned by the previous call, or from
            :meth:`initial_state`; None starts at rest.

        Returns
        -------
        out : ndarray, float64, same shape as ``block``
        state : FilterState
            Pass it to the next call. The state given here is used up.

        Notes
        -----
        ``scipy.signal.sosfilt`` does the filtering (:func:`run_sections`: one
        call along axis 0, or its loop on a channel-major copy for 4 channels or more); the
        whole-sample dead time is a ring buffer. Splitting a signal into blocks
        of any sizes gives bit-for-bit the same output as one call. The
        incremental realization (models with poles near z = 1, see
        ``options["realization"]``) runs instead through
        :class:`simwave.discrete.incremental.IncrementalModel`, also bit for bit
        the same whatever the split.
        """
        x = np.asarray(block, dtype=np.float64)
        one_d = x.ndim == 1
        if one_d:
            x = x[:, None]
        elif x.ndim != 2:
            raise DiscretizationError(
                f"a block must have shape (n_samples, n_channels) or (n_samples,), got {x.shape}"
            )
        if state is None:
            state = self.initial_state(None, "rest", n_channels=x.shape[1])
        if state.spent:
            raise DiscretizationError(
                "this filter state was already used; pass the state returned by the "
                "last process() call"
            )
        nch = state.n_channels
        if x.shape[1] != nch:
            raise DiscretizationError(
                f"block has {x.shape[1]} channels, the filter state has {nch}"
            )
        state.spent = True
        n = x.shape[0]
        zi, line, pos, pending = state.zi, state.line, state.pos, state.pending
        if n == 0:
            out = np.zeros((0, nch))
            return (out[:, 0] if one_d else out), FilterState(zi, line, pos, pending, nch,
                                                              x=state.x)
        if self.realization == "incremental":
            y, xs, line = self._run_incremental(x, state.x, pending, line)
            out, line, pos = self._delay(y, line, pos)
            return (out[:, 0] if one_d else out), FilterState(zi, line, pos, None, nch, x=xs)
        if pending is not None:
            zi, line = self._resolve(pending, x[0], zi, line)
        y, zf = run_sections(self.sos, x, zi)
        out, line, pos = self._delay(y, line, pos)
        return (out[:, 0] if one_d else out), FilterState(zf, line, pos, None, nch)

    def _run_incremental(self, x: np.ndarray, xs: np.ndarray, pending, line):
        """The incremental realization on one block, with the first-sample starts."""
        if pending == "settled":
            x_ss, line = self._resolve(pending, x[0], xs[0], line)
            xs = self._inc.carried(x_ss)
            pending = None
        corr = self._design.correction if pending == "rest" else None
        if corr is None:
            y, xs = self._inc.run(x, xs)
            return y, xs, line
        dy0, dxi1 = corr
        full = np.zeros(self._inc.n)
        full[self._inc.n - dxi1.size :] = dxi1  # a delay state, if any, comes first
        y0, xs = self._inc.run(x[:1], xs)
        y0 = y0 + dy0 * x[:1]
        xs = xs.copy()
        xs[0] += full[:, None] * x[0][None, :]  # into the first-pass part
        y1, xs = self._inc.run(x[1:], xs)
        return np.concatenate([y0, y1]), xs, line

    def _delay(self, y: np.ndarray, line, pos: int):
        """The whole-sample dead time: ring buffer of the next outputs."""
        n, nch = y.shape
        d = self.delay_line
        if d:
            if n >= d:
                out = np.empty((n, nch))
                out[: d - pos] = line[pos:]
                out[d - pos : d] = line[:pos]
                out[d:] = y[: n - d]
                line = np.array(y[n - d :])
                pos = 0
            else:
                first = min(n, d - pos)
                out = np.empty((n, nch))
                out[:first] = line[pos : pos + first]
                line[pos : pos + first] = y[:first]
                rest = n - first
                if rest:
                    out[first:] = line[:rest]
                    line[:rest] = y[first:]
                pos = (pos + n) % d
        else:
            out = y
        return out, line, pos

    def filter(self, data: Any, initial: str = "rest", output_ics: Any = None) -> np.ndarray:
        """Filter a whole array at once; returns float64 of the same shape.

        ``data`` is (n_samples, n_channels) or (n_samples,). See
        :meth:`initial_state` for ``initial`` and ``output_ics``.
        """
        x = np.asarray(data, dtype=np.float64)
        if x.ndim not in (1, 2):
            raise DiscretizationError(
                f"data must have shape (n_samples, n_channels) or (n_samples,), got {x.shape}"
            )
        nch = 1 if x.ndim == 1 else x.shape[1]
        first = None
        if x.shape[0]:
            first = x[0] if x.ndim == 2 else x[:1]
        state = self.initial_state(first, initial, n_channels=nch, output_ics=output_ics)
        out, _ = self.process(x, state)
        return out

    # ----------------------------------------------------------------- accuracy
    def accuracy(self, band_hz: Any = None, limit_db: float = 0.1, suggest: bool = True):
        """Accuracy report of this model against H(j 2 pi f).

        Parameters
        ----------
        band_hz : float or (float, float), optional
            Upper band edge or (low, high) in Hz. Default: up to 0.45 times the
            rate, or up to where |H| has fallen 60 dB below its peak.
        limit_db : float
            Magnitude-error limit for the suggested sample rates (default 0.1 dB).
        suggest : bool
            Also search for the lowest rate per method that meets ``limit_db``
            (the costly part); when False ``suggested_rate_hz`` is empty.

        Returns
        -------
        AccuracyReport
            See :mod:`simwave.discrete.accuracy`.
        """
        from simwave.discrete.accuracy import accuracy_report

        return accuracy_report(self, band_hz=band_hz, limit_db=limit_db, suggest=suggest)

    def __repr__(self) -> str:
        return (
            f"DiscreteSystem(method={self.method!r}, rate={self.rate:g} Hz, "
            f"sections={self.n_sections}, delay_samples={self.delay_samples:g})"
        )
