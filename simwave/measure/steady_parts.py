"""The part of the steady-state window a sine or tone fit may use: the window without a
level change in it.

A sine or tone fit (IEEE Std 1057) assumes the window holds the tones and an offset and
nothing else. A step of the input inside the window (a set-point change, a DC level
switched on), or the output's answer to it, is neither: the least-squares fit spreads it
over the tones (a step leaks into every frequency, a falsely "found" low tone takes part
of it) and the gains and phases come out wrong while looking measured. So before fitting,
the window is searched for one level change:

* where: the least-squares single change point of the window's mean, the k that
  maximises S_k^2 / (k (n - k)) with S_k the cumulative sum of the deviations from the
  mean (the likelihood-ratio statistic for one shift of the mean in normal noise; see
  e.g. M. Basseville and I. V. Nikiforov, *Detection of Abrupt Changes*, 1993, ch. 2;
  from memory). Tones move S_k by at most their amplitude over 2 pi f per sample and a
  step by its height times k (n - k) / n, so the step wins unless it is small, which is
  then checked:
* whether: the tones are fitted (found, then a four-parameter fit) on the longer side of
  that point, and the fit, carried over to the shorter side, leaves there a mean
  residual ``change``; the change is real when it exceeds ``SIGMAS`` standard errors of
  such a mean (:func:`mean_error`: batch means of the longer side's residual, which
  count correlated residue such as filtered noise or hum) and ``RANGE_FRACTION`` of the
  window's range (our choices).

Then the longest clean part is used: before the change (minus a guard of ``GUARD_FRACTION``
of the window), or after it when the time the system needs to answer the change is known
(``settle_samples``: the slowest mode of H(s) decayed to ``SETTLE_DECAY`` of its start).
It must hold at least ``need`` samples (two periods of the lowest tone and the inverse of
the closest tone spacing: our choice). The search is repeated inside the part (a second
change) up to ``MAX_CHANGES`` times.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from simwave.measure import steady as st

#: Standard errors the change must exceed, and the fraction of the window's range; a
#: first screening on the whole window's residual asks for fewer.
SIGMAS = 6.0
SCREEN_SIGMAS = 3.0
RANGE_FRACTION = 1e-3
#: Samples left out on either side of the change point, as a fraction of the window.
GUARD_FRACTION = 0.01
#: Each side of a change point holds at least this fraction of the window.
MIN_SIDE_FRACTION = 0.02
#: The slowest mode must have decayed to this fraction (80 dB) before the part after a
#: change is used.
SETTLE_DECAY = 1e-4
#: Level changes searched for, one after the other.
MAX_CHANGES = 3


@dataclass
class Change:
    """One level change: at sample ``at`` of the window, of height ``height``; ``freqs``:
    the tones found beside it (on its longer side)."""

    at: int
    height: float
    freqs: list


@dataclass
class SteadyPart:
    """Samples ``lo``..``hi`` - 1 of the window to fit (none when ``lo == hi``), and the
    changes found in the window."""

    lo: int
    hi: int
    changes: list
    need: int = 0  # when no part will do (lo == hi): the samples one would have needed

    @property
    def whole(self) -> bool:
        return not self.changes


def _tone_model(y: np.ndarray, t: np.ndarray, rate: float, refine: bool = True):
    """The tones and offset fitted to ``y``: (function of t, residual RMS, frequencies)."""
    freqs = st.find_tones(y, rate) if np.ptp(y) > 0 else []
    if not freqs:
        c = float(np.mean(y))
        return (lambda tt: np.full(tt.shape, c)), float(np.std(y)), []
    fit = st.fit_tones(y, t, freqs, refine=refine)

    def model(tt: np.ndarray) -> np.ndarray:
        out = np.full(tt.shape, fit.offset)
        for tn in fit.tones:
            out += tn.amplitude * np.cos(2.0 * math.pi * tn.frequency_hz * tt + tn.phase_rad)
        return out

    return model, fit.residual_rms, [tn.frequency_hz for tn in fit.tones]


def _change_point(d: np.ndarray, m: int) -> int:
    """The least-squares single change point of the mean of ``d`` (each side >= m)."""
    n = d.size
    s = np.cumsum(d - np.mean(d))[:-1]
    k = np.arange(1, n, dtype=np.float64)
    stat = s * s / (k * (n - k))
    stat[: m - 1] = 0.0
    stat[n - m - 1 :] = 0.0
    return int(np.argmax(stat)) + 1


def mean_error(residual: np.ndarray, n: int) -> float:
    """Standard error of a mean of ``n`` consecutive samples of what the tones leave,
    by batch means over ``residual`` (counts correlated residue, e.g. filtered noise):
    the spread of its block means for blocks of ``n`` samples, or of a quarter of it
    scaled by sqrt(block / n) when it holds fewer than four such blocks; at least the
    white-noise value RMS / sqrt(n) (the method of batch means, e.g. A. M. Law,
    *Simulation Modeling and Analysis*, chapter on output analysis; from memory)."""
    white = float(np.sqrt(np.mean(residual * residual))) / math.sqrt(max(n, 1))
    b = min(n, residual.size // 4)
    if b < 1:
        return white
    k = residual.size // b
    means = residual[: k * b].reshape(k, b).mean(axis=1)
    batch = float(np.std(means, ddof=1)) * math.sqrt(b / n)
    return max(white, batch)


def find_change(y: np.ndarray, t: np.ndarray, rate: float) -> Change | None:
    """The one level change in ``y`` (times ``t``, s), or None (see the module notes).

    Located twice: on the window itself, then on what the tones fitted beside that first
    guess leave (tones of a size with the step can pull the first guess off)."""
    n = y.size
    m = max(8, int(MIN_SIDE_FRACTION * n))
    if n < 2 * m + 2 or not np.ptp(y) > 0:
        return None
    # screening, at the cost of one FFT and one linear fit: the tones fitted on the whole
    # window (frequencies not refined) leave a residual; a level change leaves a shift of
    # its mean there, less what the tones took of it. No shift beyond SCREEN_SIGMAS
    # standard errors: no change (the common case costs no more)
    model, _, _ = _tone_model(y, t, rate, refine=False)
    residual = y - model(t)
    at = _change_point(residual, m)
    shift = float(np.mean(residual[at:]) - np.mean(residual[:at]))
    # each side's own spread (the shift itself would inflate a spread over both)
    se = math.hypot(mean_error(residual[:at], at), mean_error(residual[at:], n - at))
    if abs(shift) <= SCREEN_SIGMAS * se or abs(shift) <= RANGE_FRACTION * float(np.ptp(y)):
        return None
    for _ in range(2):
        long_first = at >= n - at
        lng = slice(0, at) if long_first else slice(at, n)
        model, rms, freqs = _tone_model(y[lng], t[lng], rate)
        residual = y - model(t)
        moved = _change_point(residual, m)
        if moved == at:
            break
        at = moved
    long_first = at >= n - at
    lng = slice(0, at) if long_first else slice(at, n)
    sht = slice(at, n) if long_first else slice(0, at)
    model, rms, freqs = _tone_model(y[lng], t[lng], rate)
    res_long = y[lng] - model(t[lng])
    res_short = y[sht] - model(t[sht])
    change = float(np.mean(res_short) - np.mean(res_long))
    se = mean_error(res_long, res_short.size)
    if abs(change) <= SIGMAS * se or abs(change) <= RANGE_FRACTION * float(np.ptp(y)):
        return None
    return Change(at, change if long_first else -change, freqs)


def steady_part(basis: np.ndarray, t: np.ndarray, rate: float, floor: int,
                settle_samples: int | None, freqs: list | None = None) -> SteadyPart:
    """The part of the window ``basis`` (times ``t``) to fit: see the module notes.

    ``floor``: fewest samples a part may hold; more for the tones (given ``freqs``, else
    those found beside the change, see :func:`need_samples`); ``settle_samples``: samples
    the output needs to answer a change (None: unknown, so only the part before a change
    is used).
    """
    lo, hi = 0, basis.size
    changes: list[Change] = []
    for _ in range(MAX_CHANGES):
        ch = find_change(basis[lo:hi], t[lo:hi], rate)
        if ch is None:
            break
        at = lo + ch.at
        changes.append(Change(at, ch.height, ch.freqs))
        guard = max(2, int(math.ceil(GUARD_FRACTION * basis.size)))
        before = (lo, at - guard)
        after = (at + guard + settle_samples, hi) if settle_samples is not None else (hi, hi)
        best = max((before, after), key=lambda p: p[1] - p[0])
        # the tones found beside the change (in an output, the answer to the change may
        # add a false low tone there, which asks for a longer part: the safe side)
        need = need_samples(freqs if freqs is not None else ch.freqs, rate, floor)
        if best[1] - best[0] < need:
            return SteadyPart(0, 0, changes, need=need)
        lo, hi = best
    return SteadyPart(lo, hi, changes)


def settle_samples(system, rate: float) -> int | None:
    """Samples the system's slowest mode needs to decay to ``SETTLE_DECAY`` of its start,
    plus its dead time; None without a stable system."""
    if system is None:
        return None
    poles = np.atleast_1d(np.asarray(system.poles, dtype=np.complex128))
    if poles.size == 0:
        return int(math.ceil(float(getattr(system, "delay_s", 0.0) or 0.0) * rate))
    sigma = float(np.min(-poles.real))
    if not sigma > 0:
        return None
    secs = math.log(1.0 / SETTLE_DECAY) / sigma + float(getattr(system, "delay_s", 0.0) or 0.0)
    return int(math.ceil(secs * rate))


def need_samples(freqs: list[float], rate: float, floor: int) -> int:
    """Fewest samples that fit these tones: two periods of the lowest and the inverse of
    the closest spacing (our choice), and at least ``floor``."""
    if not freqs:
        return floor
    f = sorted(freqs)
    need = 2.0 / f[0]
    gaps = [b - a for a, b in zip(f, f[1:], strict=False) if b > a]
    if gaps:
        need = max(need, 1.0 / min(gaps))
    return max(floor, int(math.ceil(need * rate)))
