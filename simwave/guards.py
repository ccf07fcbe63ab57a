"""Guards at the entry points: numbers simwave cannot work with are refused in one line.

The numerical core (discretization, measuring) is written for the values users
reach; a few inputs make the float64 arithmetic fail inside it (a singular matrix,
an overflow, a delay line of terabytes). Rather than a check in every routine, the
entry points validate what they can before the call and turn a numerical failure
of the call into a :class:`~simwave.errors.SimwaveError` naming the system, the
rate and the method.
"""

from __future__ import annotations

import contextlib
import math
from typing import Any, Iterator

import numpy as np

from simwave.errors import DiscretizationError, MeasurementError, SimwaveError

#: Sample rates simwave works with (hertz). Outside them the time and frequency
#: arithmetic (rate x time, 1/rate, exp(p/rate)) over- or underflows float64 for
#: ordinary systems: simwave's own limits, from one sample in ~32 years to 1 THz.
RATE_RANGE_HZ = (1e-9, 1e12)
#: Longest dead-time delay line simwave builds (samples per channel): 2**27, 1 GiB of
#: float64 per channel. A choice of simwave's, to fail at once instead of when memory
#: runs out.
MAX_DELAY_SAMPLES = 1 << 27


def check_rate(rate_hz: Any, where: str = "the sample rate") -> float:
    """Return ``rate_hz`` as float when it is finite and within :data:`RATE_RANGE_HZ`."""
    try:
        rate = float(rate_hz)
    except (TypeError, ValueError):
        raise DiscretizationError(f"{where}: the sample rate must be a number of hertz, "
                                  f"got {rate_hz!r}") from None
    lo, hi = RATE_RANGE_HZ
    if not math.isfinite(rate) or rate <= 0:
        raise DiscretizationError(f"{where}: the sample rate must be finite and > 0 Hz, "
                                  f"got {rate_hz!r}")
    if not lo <= rate <= hi:
        raise DiscretizationError(
            f"{where}: a sample rate of {rate:.4g} Hz (a sample every {1.0 / rate:.4g} s) is "
            f"outside the range simwave works with ({lo:g} Hz to {hi:g} Hz)")
    return rate


def check_delay_line(delay_s: float, rate_hz: float, where: str) -> None:
    """Refuse a dead time whose delay line at ``rate_hz`` would not fit in memory."""
    samples = float(delay_s) * float(rate_hz)
    if samples > MAX_DELAY_SAMPLES:
        gib = samples * 8 / 2**30
        size = f"{gib / 1024:.3g} TiB" if gib >= 1024 else f"{gib:.3g} GiB"
        raise DiscretizationError(
            f"{where}: a dead time of {delay_s:.6g} s at {rate_hz:.6g} Hz is a delay line of "
            f"{samples:.4g} samples ({size} per channel); simwave builds at most "
            f"{MAX_DELAY_SAMPLES:,} samples (1 GiB per channel): lower the rate or the "
            f"dead time")


def _numerical(exc: BaseException) -> bool:
    """A failure of float64 arithmetic (not a bug of another kind)."""
    if isinstance(exc, (np.linalg.LinAlgError, ZeroDivisionError, OverflowError,
                        FloatingPointError)):
        return True
    if isinstance(exc, ValueError):
        text = str(exc).lower()
        return any(t in text for t in ("infs or nans", "nan", "inf", "finite", "overflow"))
    return False


def _reason(exc: BaseException) -> str:
    text = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
    return f"{type(exc).__name__}: {text}"


def _pole_hint(system: Any, rate_hz: float) -> str:
    """What about the system makes the model hard at this rate (for the message)."""
    try:
        poles = np.atleast_1d(np.asarray(system.poles, dtype=complex))
    except (AttributeError, TypeError, ValueError):
        return ""
    if poles.size == 0:
        return ""
    w_rate = 2 * math.pi * rate_hz
    fastest = float(np.max(np.abs(poles)))
    at_zero = int(np.count_nonzero(np.abs(poles) == 0))
    right = poles[poles.real > 0]
    if right.size and float(np.max(right.real)) / rate_hz > 5:
        worst = float(np.max(right.real))
        # ln(largest float64) = ln(1.7977e308) = 709.78 (IEEE Std 754-2019, binary64)
        return (f"; the unstable pole at s = {worst:.6g} grows by a factor "
                f"exp({worst / rate_hz:.3g}) per sample and overflows float64 after "
                f"{709.78 / worst:.3g} s")
    if at_zero > 4:
        return f"; {at_zero} poles at s = 0 (a {at_zero}-fold integrator)"
    if fastest > 100 * w_rate:
        return (f"; the fastest pole (|s| = {fastest:.4g} rad/s) is {fastest / w_rate:.3g} "
                f"times the sample rate in rad/s: raise the rate")
    return ""


@contextlib.contextmanager
def model_failures(system: Any, rate_hz: float, method: str) -> Iterator[None]:
    """Turn a numerical failure while building or starting a discrete model into one line."""
    try:
        yield
    except SimwaveError:
        raise
    except MemoryError as exc:
        raise DiscretizationError(
            f"{_label(system)}: the {method} model at {rate_hz:.6g} Hz needs more memory than "
            f"this machine has ({_reason(exc)})") from None
    except Exception as exc:
        if not _numerical(exc):
            raise
        raise DiscretizationError(
            f"{_label(system)}: the {method} model at {rate_hz:.6g} Hz cannot be computed in "
            f"float64 ({_reason(exc)}){_pole_hint(system, rate_hz)}") from None


@contextlib.contextmanager
def measuring_failures(where: str) -> Iterator[None]:
    """Turn a numerical failure of the measuring code into one :class:`MeasurementError` line."""
    try:
        yield
    except SimwaveError:
        raise
    except Exception as exc:
        if not _numerical(exc):
            raise
        raise MeasurementError(
            f"{where}: cannot be measured in float64 ({_reason(exc)}); values this large or "
            f"this small are beyond what the measurement handles") from None


def _label(system: Any) -> str:
    text = getattr(system, "text", None)
    return f"H(s) = {text}" if text else repr(system)


# ------------------------------------------------------------------------- JSON
def json_ready(value: Any, path: str = "", reasons: dict[str, str] | None = None) -> Any:
    """``value`` with every non-finite float replaced by None, the reason kept in ``reasons``.

    JSON has no infinity or NaN (RFC 8259, sec. 6); a value that is not finite becomes
    ``null`` and ``reasons[path]`` says why ("infinite", "not a number"), so the
    reason can travel beside it (key ``null_reasons``) and to the terminal.
    """
    if reasons is None:
        reasons = {}
    if isinstance(value, (float, np.floating)):
        v = float(value)
        if math.isfinite(v):
            return v
        reasons[path or "."] = ("not a number (undefined)" if v != v
                                else f"{'+' if v > 0 else '-'}infinite (beyond float64)")
        return None
    if isinstance(value, dict):
        return {k: json_ready(v, f"{path}.{k}" if path else str(k), reasons)
                for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_ready(v, f"{path}[{i}]", reasons) for i, v in enumerate(value)]
    if isinstance(value, np.ndarray):
        return json_ready(value.tolist(), path, reasons)
    if isinstance(value, np.integer):
        return int(value)
    return value


def with_null_reasons(doc: dict[str, Any]) -> tuple[dict[str, Any], dict[str, str]]:
    """``json_ready(doc)`` plus, when any value became null, a ``null_reasons`` entry."""
    reasons: dict[str, str] = {}
    clean = json_ready(doc, "", reasons)
    if reasons:
        clean["null_reasons"] = reasons
    return clean, reasons


def null_reasons_note(reasons: dict[str, str], limit: int = 3) -> str | None:
    """One terminal line naming the values shown as null and why (or None)."""
    if not reasons:
        return None
    items = list(reasons.items())
    shown = "; ".join(f"{k}: {v}" for k, v in items[:limit])
    more = f"; and {len(items) - limit} more (see null_reasons)" if len(items) > limit else ""
    return f"{len(items)} value(s) written as null: {shown}{more}"
