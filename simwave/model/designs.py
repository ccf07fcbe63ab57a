"""Analog filter prototypes (Butterworth, Chebyshev I/II, elliptic, Bessel) as Systems.

Built on scipy.signal's analog designs (``analog=True``, zeros/poles/gain output,
which stays accurate at high orders). Cutoffs are in hertz; what "cutoff" means
depends on the family:

==================  ==========================================================
family              the cutoff frequency is where ...
==================  ==========================================================
butterworth         the gain is 3.01 dB below the passband gain
chebyshev1          the gain leaves the passband ripple band (-ripple_db)
chebyshev2          the gain first reaches the stopband level (-attenuation_db)
elliptic            the gain leaves the passband ripple band (-ripple_db)
bessel-phase        the high-frequency asymptote matches a Butterworth filter
                    of the same cutoff (phase-normalized, scipy's
                    norm='phase'; the phase there is roughly half its final
                    value of -order*90 degrees)
bessel-delay        1/(2 pi cutoff) is the low-frequency group delay
                    (delay-normalized, the classical Thomson form)
bessel-magnitude    the gain is 3.01 dB below the passband gain
==================  ==========================================================

For band-pass and band-stop, ``cutoff_hz`` is a pair (low, high) of band edges
and the resulting system has twice the prototype order.

References
----------
.. [1] A. B. Williams and F. J. Taylor, *Electronic Filter Design Handbook*,
       4th ed., McGraw-Hill, 2006, ch. 2 (Butterworth, Chebyshev, elliptic and
       Bessel low-pass prototypes) and ch. 5-7 (frequency transformations);
       chapter numbers quoted from memory.
.. [2] W. E. Thomson, "Delay networks having maximally flat frequency
       characteristics", Proc. IEE 96(44), 1949 (the Bessel-Thomson filter).
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from scipy import signal

from simwave.errors import InvalidSystemError
from simwave.model.system import MAX_ORDER, System

#: Known families and which extra parameters each one needs.
FAMILIES: dict[str, tuple[str, ...]] = {
    "butterworth": (),
    "chebyshev1": ("ripple_db",),
    "chebyshev2": ("attenuation_db",),
    "elliptic": ("ripple_db", "attenuation_db"),
    "bessel-phase": (),
    "bessel-delay": (),
    "bessel-magnitude": (),
}

#: Known kinds of response.
KINDS = ("lowpass", "highpass", "bandpass", "bandstop")

_SCIPY_BESSEL_NORM = {"bessel-phase": "phase", "bessel-delay": "delay", "bessel-magnitude": "mag"}


def _plain(word: str) -> str:
    return word.strip().lower().replace("_", "-").replace(" ", "-")


#: Ripple and attenuation in dB: 10**(dB/10) - 1 must neither round to 0 (below ~1e-15
#: dB) nor overflow (above ~3000 dB) in float64; simwave's own bounds, well inside both.
DB_RANGE = (1e-9, 1000.0)
#: Cutoff frequencies: the sample-rate range of :data:`simwave.guards.RATE_RANGE_HZ`.
CUTOFF_RANGE_HZ = (1e-9, 1e12)


def _edges(cutoff_hz: float | Sequence[float], kind: str) -> list[float]:
    band = kind in ("bandpass", "bandstop")
    values = list(np.atleast_1d(np.asarray(cutoff_hz, dtype=object)))
    try:
        edges = [float(v) for v in values]
    except (TypeError, ValueError):
        raise InvalidSystemError(f"cutoff must be a number of hertz, got {cutoff_hz!r}") from None
    if band and len(edges) != 2:
        raise InvalidSystemError(
            f"a {kind} design needs two band edges (low, high) in Hz, got {len(edges)} value(s)"
        )
    if not band and len(edges) != 1:
        raise InvalidSystemError(f"a {kind} design needs one cutoff in Hz, got {len(edges)} values")
    lo, hi = CUTOFF_RANGE_HZ
    for e in edges:
        if not math.isfinite(e) or e <= 0:
            raise InvalidSystemError(f"cutoff must be a finite frequency above 0 Hz, got {e:g}")
        if not lo <= e <= hi:
            raise InvalidSystemError(
                f"a cutoff of {e:g} Hz is outside the range simwave works with ({lo:g} Hz to "
                f"{hi:g} Hz, the same as its sample rates)")
    if band and not edges[0] < edges[1]:
        raise InvalidSystemError(
            f"band edges must be increasing (low < high), got {edges[0]:g} and {edges[1]:g} Hz"
        )
    return edges


def _positive_db(value: float | None, what: str, family: str) -> float:
    if value is None:
        raise InvalidSystemError(f"{family} needs {what} (in dB, above 0)")
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InvalidSystemError(f"{what} must be a number of dB, got {value!r}") from None
    if not math.isfinite(v) or v <= 0:
        raise InvalidSystemError(f"{what} must be a finite number of dB above 0, got {value!r}")
    lo, hi = DB_RANGE
    if not lo <= v <= hi:
        raise InvalidSystemError(
            f"{what} of {v:g} dB is outside the range the design computes reliably in float64 "
            f"({lo:g} dB to {hi:g} dB)")
    return v


def design(
    family: str,
    order: int,
    cutoff_hz: float | Sequence[float],
    kind: str = "lowpass",
    *,
    ripple_db: float | None = None,
    attenuation_db: float | None = None,
    name: str | None = None,
) -> System:
    """Analog filter prototype as a :class:`System`.

    Parameters
    ----------
    family : str
        One of ``butterworth``, ``chebyshev1``, ``chebyshev2``, ``elliptic``,
        ``bessel-phase``, ``bessel-delay``, ``bessel-magnitude`` (see the module
        docstring for what the cutoff means in each).
    order : int
        Prototype order, 1..60 (1..30 for band-pass/band-stop, whose order doubles).
    cutoff_hz : float or (float, float)
        Cutoff in Hz, or the band edges (low, high) in Hz for band kinds.
    kind : str
        ``lowpass``, ``highpass``, ``bandpass`` or ``bandstop``.
    ripple_db : float, optional
        Passband ripple in dB (chebyshev1, elliptic).
    attenuation_db : float, optional
        Minimum stopband attenuation in dB (chebyshev2, elliptic).
    name : str, optional
        Name for the system.

    Returns
    -------
    System
        Passband gain 1 (0 dB); for chebyshev1/elliptic of even order the DC gain
        is at the bottom of the ripple band, -ripple_db.

    Raises
    ------
    InvalidSystemError
        Unknown family or kind, order outside 1..60, cutoff <= 0, missing or
        unneeded ripple/attenuation.

    References
    ----------
    .. [1] A. B. Williams and F. J. Taylor, *Electronic Filter Design Handbook*,
           4th ed., ch. 2 and 5-7.
    .. [2] scipy.signal.butter, cheby1, cheby2, ellip, bessel (``analog=True``).

    Examples
    --------
    >>> from simwave.model.designs import design
    >>> design("butterworth", 2, 1000.0).order
    2
    """
    fam = _plain(str(family))
    if fam not in FAMILIES:
        raise InvalidSystemError(
            f"unknown filter family {family!r} (known: {', '.join(FAMILIES)})"
        )
    knd = _plain(str(kind)).replace("-", "")
    if knd not in KINDS:
        raise InvalidSystemError(f"unknown filter kind {kind!r} (known: {', '.join(KINDS)})")
    if isinstance(order, bool) or not isinstance(order, (int, np.integer)):
        if isinstance(order, float) and order.is_integer():
            order = int(order)
        else:
            raise InvalidSystemError(f"filter order must be a whole number, got {order!r}")
    order = int(order)
    factor = 2 if knd in ("bandpass", "bandstop") else 1
    if order < 1 or order * factor > MAX_ORDER:
        raise InvalidSystemError(
            f"filter order must be 1..{MAX_ORDER // factor} for {knd}, got {order}"
        )
    edges = _edges(cutoff_hz, knd)
    needs = FAMILIES[fam]
    for what, value in (("ripple_db", ripple_db), ("attenuation_db", attenuation_db)):
        if value is not None and what not in needs:
            raise InvalidSystemError(f"{fam} takes no {what}")
    w = [2 * math.pi * e for e in edges]  # rad/s for scipy's analog designs
    wn = w[0] if len(w) == 1 else w
    kw = {"btype": knd, "analog": True, "output": "zpk"}
    if fam == "butterworth":
        z, p, k = signal.butter(order, wn, **kw)
    elif fam == "chebyshev1":
        z, p, k = signal.cheby1(order, _positive_db(ripple_db, "ripple_db", fam), wn, **kw)
    elif fam == "chebyshev2":
        rs = _positive_db(attenuation_db, "attenuation_db", fam)
        z, p, k = signal.cheby2(order, rs, wn, **kw)
    elif fam == "elliptic":
        rp = _positive_db(ripple_db, "ripple_db", fam)
        rs = _positive_db(attenuation_db, "attenuation_db", fam)
        z, p, k = signal.ellip(order, rp, rs, wn, **kw)
    else:
        z, p, k = signal.bessel(order, wn, norm=_SCIPY_BESSEL_NORM[fam], **kw)
    text = f"{fam} {knd} order={order} cutoff_hz={','.join(f'{e:g}' for e in edges)}"
    if ripple_db is not None:
        text += f" ripple_db={float(ripple_db):g}"
    if attenuation_db is not None:
        text += f" attenuation_db={float(attenuation_db):g}"
    return System.from_zpk(z, p, float(np.real(k)), text=text, name=name)
