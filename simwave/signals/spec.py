"""Generated signals written as text, usable wherever an input file is expected.

Syntax::

    KIND:name=value,name=value,...

``KIND`` is a generator kind (``sine``, ``pulse``, ``pulse-train``, ...),
values are numbers with optional engineering suffixes (``10k``, ``1m``,
``4.7u``, ``25%``). ``rate`` and ``duration`` go in the same list. A list
value continues over the following comma-separated items that have no ``=``::

    sine:rate=48k,duration=1,frequency=1k,amplitude=0.5
    pulse:rate=10k,duration=0.5,width=1m,delay=10m
    pulse-train:rate=100k,duration=10m,period=1m,duty=25%,count=5,edge=10u
    multitone:rate=48k,duration=2,frequencies=100,1k,3k,amplitude=0.2
    pwl:rate=1k,duration=1,points=0:0,0.1:1,0.5:1,0.6:0
"""

from __future__ import annotations

import os
from typing import Any

from simwave.errors import WaveformError
from simwave.signals.generate import KINDS, generate, generate_blocks, kind_name
from simwave.signals.quantity import parse_quantity


def is_signal_spec(text: Any) -> bool:
    """True if ``text`` is not an existing file and starts with a known kind and ``:``."""
    if not isinstance(text, str) or ":" not in text:
        return False
    if os.path.exists(text):
        return False
    head = text.split(":", 1)[0].strip()
    try:
        kind_name(head)
    except WaveformError:
        return False
    return True


def parse_signal_spec(text: str) -> tuple[str, float | None, float | None, dict[str, str]]:
    """Split a signal text into ``(kind, rate, duration, params)``.

    Parameters
    ----------
    text : str
        ``"KIND:name=value,..."`` (see module docs).

    Returns
    -------
    kind : str
        Canonical kind name.
    rate, duration : float or None
        Hz and seconds, None when not in the text.
    params : dict
        Remaining parameters as text (converted by :func:`simwave.generate`).

    Examples
    --------
    >>> parse_signal_spec("pulse:rate=10k,duration=0.5,width=1m,delay=10m")
    ('pulse', 10000.0, 0.5, {'width': '1m', 'delay': '10m'})
    """
    if ":" not in text:
        raise WaveformError(
            f"signal {text!r}: write KIND:name=value,... (kinds: {', '.join(KINDS)})")
    head, body = text.split(":", 1)
    kind = kind_name(head)
    params: dict[str, str] = {}
    last: str | None = None
    for item in body.split(","):
        item = item.strip()
        if not item:
            continue
        if "=" in item:
            key, value = item.split("=", 1)
            key = key.strip().lower()
            if not key:
                raise WaveformError(f"signal {text!r}: {item!r} has no parameter name")
            if key in params:
                raise WaveformError(f"signal {text!r}: {key} given twice")
            params[key] = value.strip()
            last = key
        elif last is not None:
            params[last] += "," + item  # a list value continues
        else:
            raise WaveformError(f"signal {text!r}: {item!r} is not name=value")
    rate = params.pop("rate", None)
    duration = params.pop("duration", None)
    rate_v = parse_quantity(rate, "rate") if rate is not None else None
    dur_v = parse_quantity(duration, "duration") if duration is not None else None
    if rate_v is not None and not rate_v > 0:
        raise WaveformError(f"signal {text!r}: rate must be > 0 Hz")
    if dur_v is not None and not dur_v > 0:
        raise WaveformError(f"signal {text!r}: duration must be > 0 s")
    return kind, rate_v, dur_v, params


__all__ = ["is_signal_spec", "parse_signal_spec", "generate", "generate_blocks"]
