"""The time written into outputs, and the reproducible-builds convention that fixes it.

``SOURCE_DATE_EPOCH`` (reproducible-builds.org, "SOURCE_DATE_EPOCH" specification): a
whole number of seconds since 1970-01-01 UTC that replaces "now" wherever a tool writes a
time, so that repeated runs give byte-identical files.
"""

from __future__ import annotations

import datetime as _dt
import os


def fixed_epoch() -> int | None:
    """``SOURCE_DATE_EPOCH`` when it is set to a whole number of seconds, else None."""
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    if epoch and epoch.strip().isdigit():
        return int(epoch)
    return None


def utc_now() -> _dt.datetime:
    """Now in UTC, whole seconds; ``SOURCE_DATE_EPOCH`` fixes it."""
    epoch = fixed_epoch()
    if epoch is not None:
        return _dt.datetime.fromtimestamp(epoch, _dt.timezone.utc)
    return _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0)
