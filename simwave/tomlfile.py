"""Reading TOML files (system files, batch descriptions) with one-line errors."""

from __future__ import annotations

import os
import sys

from simwave.errors import SimwaveError

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - Python 3.10
    import tomli as tomllib


def read_toml(
    path: str | os.PathLike[str], what: str, error: type[SimwaveError] = SimwaveError
) -> tuple[dict, str]:
    """The parsed table and the text of a TOML file.

    Raises ``error`` with a message naming ``what`` and the path when the file
    is missing, a directory, unreadable, not UTF-8, or not valid TOML (the
    decoder's message gives the line and column).
    """
    p = os.fspath(path)
    try:
        with open(p, "rb") as fh:
            raw = fh.read()
    except FileNotFoundError:
        raise error(f"{what} {p} not found") from None
    except IsADirectoryError:
        raise error(f"{what} {p} is a directory") from None
    except OSError as exc:
        raise error(f"{what} {p} cannot be read: {exc.strerror}") from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise error(f"{p}: not UTF-8 text") from None
    try:
        return tomllib.loads(text), text
    except tomllib.TOMLDecodeError as exc:
        raise error(f"{p}: not valid TOML: {exc}") from None
    except RecursionError:
        raise error(f"{p}: arrays or tables nested too deeply to read (beyond Python's "
                    f"recursion limit of {sys.getrecursionlimit()} calls)") from None
