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
from typing import Iterable, Mapping

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


def guard_outputs(outputs: Mapping[str, str | os.PathLike[str] | None],
                  inputs: Mapping[str, str | os.PathLike[str] | None] | None = None) -> None:
    """Check every path a command will write, together, before any work is done.

    One guard for all of a command's targets (waveform output, metrics JSON,
    plots, reports, summaries, journals): none may be one of the command's
    inputs (waveform, reference, system file, batch description), no two may be
    the same file, and each must name a file in an existing folder.

    Parameters
    ----------
    outputs : mapping of str to path or None
        Label (the option that names it, e.g. ``"--metrics"``) -> target path.
        ``None`` entries (options not given) are skipped.
    inputs : mapping of str to path or None, optional
        Label (e.g. ``"the system file"``) -> a path the command reads.

    Raises
    ------
    WaveformError
        One line naming the path, the options involved and the problem.
    """
    given = [(label, os.fspath(p)) for label, p in outputs.items() if p is not None]
    read = [(label, os.fspath(p)) for label, p in (inputs or {}).items() if p is not None]
    for i, (label, path) in enumerate(given):
        for in_label, in_path in read:
            if _same_path(path, in_path):
                raise WaveformError(
                    f"{path} ({label}): is {in_label}; refusing to write over an input, "
                    f"choose another name")
        for other_label, other in given[:i]:
            if _same_path(path, other):
                raise WaveformError(
                    f"{path}: named by both {other_label} and {label}; one would replace the "
                    f"other, give each its own file name")
        check_output_path(path)


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
