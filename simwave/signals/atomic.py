"""Atomic output files: write beside the target, ``os.replace`` at the end.

A writer never leaves a half-written file under the target name: the bytes go
to a hidden temporary file in the target's directory (same file system, so the
final rename is atomic on POSIX and Windows, see the Python docs of
``os.replace``), and only a clean finish renames it over the target. An error
deletes the temporary file and leaves any existing target untouched.
"""

from __future__ import annotations

import os
import tempfile
from typing import Iterable

from simwave.errors import WaveformError


def _same_path(a: str, b: str) -> bool:
    if os.path.exists(a) and os.path.exists(b):
        try:
            return os.path.samefile(a, b)
        except OSError:
            return False
    return os.path.realpath(a) == os.path.realpath(b)


def check_output_path(path: str, protect: Iterable[str] | None = None) -> str:
    """Refuse an output path that is an input (``protect``), a directory, or in no directory.

    Parameters
    ----------
    path : str
        Target path.
    protect : iterable of str, optional
        Paths that must never be written (the inputs). A target that is the
        same file (``os.path.samefile``) or the same resolved path is refused.

    Returns
    -------
    str
        The target path as given (``os.fspath``).
    """
    path = os.fspath(path)
    for p in protect or ():
        if p is None:
            continue
        p = os.fspath(p)
        if _same_path(path, p):
            raise WaveformError(f"{path}: refusing to write over the input file {p}")
    if os.path.isdir(path):
        raise WaveformError(f"{path}: is a directory, not a file name")
    directory = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(directory):
        raise WaveformError(f"{path}: directory {directory} does not exist")
    return path


class AtomicTarget:
    """A temporary file beside ``path`` that becomes ``path`` on :meth:`commit`.

    Parameters
    ----------
    path : str
        Final file name.
    protect : iterable of str, optional
        Input paths that must not be overwritten (see :func:`check_output_path`).
    """

    def __init__(self, path: str, protect: Iterable[str] | None = None) -> None:
        self.path = check_output_path(path, protect)
        directory = os.path.dirname(os.path.abspath(self.path))
        base = os.path.basename(self.path)
        _, ext = os.path.splitext(base)
        try:
            fd, self.tmp = tempfile.mkstemp(prefix=f".{base}.", suffix=f".part{ext}", dir=directory)
        except OSError as exc:
            raise WaveformError(
                f"{self.path}: cannot create a file there ({exc.strerror})") from None
        os.close(fd)
        self.done = False

    def commit(self) -> None:
        """Give the temporary file the target's permissions and rename it over the target."""
        if self.done:
            return
        try:
            if os.path.exists(self.path):
                mode = os.stat(self.path).st_mode & 0o7777
            else:
                umask = os.umask(0)
                os.umask(umask)
                mode = 0o666 & ~umask
            os.chmod(self.tmp, mode)
            os.replace(self.tmp, self.path)
        except OSError as exc:
            self.abort()
            raise WaveformError(f"{self.path}: cannot finish writing ({exc.strerror})") from None
        self.done = True

    def abort(self) -> None:
        """Delete the temporary file; the target is left as it was."""
        if self.done:
            return
        self.done = True
        try:
            os.unlink(self.tmp)
        except FileNotFoundError:
            pass
