"""Atomic output files: write beside the target, ``os.replace`` at the end.

A writer never leaves a half-written file under the target name: the bytes go
to a hidden temporary file in the target's directory (same file system, so the
final rename is atomic on POSIX and Windows, see the Python docs of
``os.replace``), and only a clean finish renames it over the target. An error
deletes the temporary file and leaves any existing target untouched.
"""

from __future__ import annotations

import contextlib
import errno
import io
import os
import re
import stat
import tempfile
import time
from typing import Iterable, Iterator, Mapping

from simwave.errors import WaveformError

#: Names of this tool's own temporary files: ``.NAME.XXXXXXXX.partEXT`` beside a target
#: (:class:`AtomicTarget`) and ``.spool.XXXXXXXX.f64`` (the audio normalizing spool). The
#: eight characters are those of :func:`tempfile.mkstemp` (letters, digits, underscore).
TEMP_NAME = re.compile(r"^\.(?:.+\.[a-z0-9_]{8}\.part(?:\.[^./]+)?|spool\.[a-z0-9_]{8}\.f64)$")
#: A temporary file no process holds open is stale once unchanged this long (seconds). The
#: tool holds its temporary files open from creation to rename, so the age only guards
#: against writers this process cannot see (another user's processes, no /proc).
STALE_AFTER_S = 60.0
#: Without a way to see which files other processes hold (no readable /proc), only
#: temporary files unchanged this long are removed.
STALE_BLIND_AFTER_S = 24 * 3600.0


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


def check_target_folder(p: str, error: type[Exception]) -> None:
    """Raise ``error`` when the folder that would hold the file ``p`` is missing or read-only."""
    folder = os.path.dirname(os.path.abspath(p))
    if not os.path.isdir(folder):
        raise error(f"{p}: folder {folder} does not exist")
    if not os.access(folder, os.W_OK):
        raise error(f"{p}: folder {folder} is not writable")


#: Temporary files of this process not yet renamed or removed (see remove_live_temporaries).
_LIVE: set[str] = set()


@contextlib.contextmanager
def stop_signals_held() -> Iterator[None]:
    """Hold SIGINT/SIGTERM/SIGHUP for a few statements (main thread, POSIX), so a stop
    cannot fall between creating a temporary file and registering it."""
    import signal
    import threading

    sigs = {getattr(signal, n) for n in ("SIGINT", "SIGTERM", "SIGHUP") if hasattr(signal, n)}
    if not hasattr(signal, "pthread_sigmask") or \
            threading.current_thread() is not threading.main_thread():
        yield
        return
    old = signal.pthread_sigmask(signal.SIG_BLOCK, sigs)
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, old)


def remove_live_temporaries() -> list[str]:
    """Delete every temporary file this process created and has not finished with.

    The last line of defence when a stop (Ctrl-C, SIGTERM, SIGHUP) arrives between a
    temporary file's creation and the ``try`` that would remove it: the command-line
    handler calls this before it exits.
    """
    removed = []
    for p in sorted(_LIVE):
        try:
            os.unlink(p)
            removed.append(p)
        except FileNotFoundError:
            pass
        except OSError:
            continue
        _LIVE.discard(p)
    return removed


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
            with stop_signals_held():  # created and registered, or neither
                self._fd, self.tmp = tempfile.mkstemp(prefix=f".{base}.", suffix=f".part{ext}",
                                                      dir=directory)
                _LIVE.add(self.tmp)
        except OSError as exc:
            raise WaveformError(
                f"{self.path}: cannot create a file there ({exc.strerror})") from None
        # The descriptor stays open until the rename or the removal: a temporary file held
        # open by a live process is never taken for a stale one (see sweep_stale_parts).
        self.done = False

    def write(self, data: bytes) -> None:
        """Write all of ``data`` to the temporary file, through its open descriptor."""
        view = memoryview(data)
        while view:
            view = view[os.write(self._fd, view):]

    def _release(self) -> None:
        _LIVE.discard(self.tmp)
        fd, self._fd = self._fd, None
        if fd is not None:
            os.close(fd)

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
            raise write_failure(self.path, exc) from None
        self.done = True
        self._release()

    def abort(self) -> None:
        """Delete the temporary file; the target is left as it was."""
        if self.done:
            return
        self.done = True
        try:
            os.unlink(self.tmp)
        except FileNotFoundError:
            pass
        finally:
            self._release()


# --------------------------------------------------------------------- write failures
#: errno values of a full disk, a quota, or the process's file size limit (RLIMIT_FSIZE).
_FULL = {errno.ENOSPC, errno.EFBIG, getattr(errno, "EDQUOT", errno.ENOSPC)}
_FULL_TEXT = ("no space left", "file too large", "quota exceeded", "errno = 27", "errno = 28")


def _room_exhausted(path: str) -> bool:
    """True when the folder of ``path`` is (nearly) full or the file reached RLIMIT_FSIZE."""
    try:
        import resource

        soft, _ = resource.getrlimit(resource.RLIMIT_FSIZE)
        if soft != resource.RLIM_INFINITY:
            return True  # a finite limit was set on this process: the likely cause
    except (ImportError, OSError, ValueError):
        pass
    try:
        st = os.statvfs(os.path.dirname(os.path.abspath(path)))
        return st.f_bavail * st.f_frsize < (1 << 20)
    except (OSError, AttributeError):
        return False


def is_disk_full(exc: BaseException, path: str | None = None) -> bool:
    """Whether a failed write means: disk full, quota, or the process's file size limit.

    libsndfile reports only "System error" for a failed write; for it the folder's
    free space and the process's file size limit decide.
    """
    if isinstance(exc, OSError) and exc.errno in _FULL:
        return True
    text = str(exc).lower()
    if any(t in text for t in _FULL_TEXT):
        return True
    return path is not None and "system error" in text and _room_exhausted(path)


def write_failure(path: str, exc: BaseException) -> WaveformError:
    """The one-line error for a write that failed at the operating-system level."""
    if is_disk_full(exc, path):
        return WaveformError(f"{path}: cannot write: disk full / file size limit reached "
                             f"(nothing was left under this name)")
    reason = getattr(exc, "strerror", None) or str(exc).splitlines()[0] or type(exc).__name__
    return WaveformError(f"{path}: cannot write ({reason}; nothing was left under this name)")


def is_write_error(exc: BaseException) -> bool:
    """An operating-system level failure of a write: OSError (Python, h5py) or
    libsndfile's error (soundfile.LibsndfileError, not imported here)."""
    return isinstance(exc, OSError) or any(
        c.__name__ == "LibsndfileError" for c in type(exc).__mro__)


@contextlib.contextmanager
def atomic_file(path: str, protect: Iterable[str] | None = None) -> Iterator[str]:
    """Yield a temporary path beside ``path``; rename it over ``path`` on a clean exit.

    On any error the temporary file is removed and the target left as it was; an
    operating-system write error (disk full, file size limit, ...) becomes one
    :class:`WaveformError` line naming the target.
    """
    with _atomic_target(path, protect) as target:
        yield target.tmp


@contextlib.contextmanager
def _atomic_target(path: str, protect: Iterable[str] | None = None) -> Iterator[AtomicTarget]:
    """:func:`atomic_file`, yielding the :class:`AtomicTarget` itself."""
    target = AtomicTarget(path, protect)
    try:
        yield target
        target.commit()
    except BaseException as exc:
        target.abort()
        if is_write_error(exc):
            raise write_failure(target.path, exc) from None
        raise


def write_text_atomic(path: str, text: str, protect: Iterable[str] | None = None) -> None:
    """Write ``text`` (UTF-8, newlines as they are) to ``path`` atomically (see
    :func:`atomic_file`), through the temporary file's own descriptor (not opened again
    by name: a path lookup and a text layer less, on every metrics JSON of a batch)."""
    data = text.encode("utf-8")
    with _atomic_target(path, protect) as target:
        target.write(data)


class GuardedFile(io.RawIOBase):
    """A binary file that remembers its first failed write and discards the rest.

    HDF5 cannot be closed cleanly after a write failed under it (closing retries the
    write, and the library crashes at exit when that fails too). Through this file
    object (h5py's ``fileobj`` driver) a failed write is recorded in :attr:`failure`,
    later writes succeed without effect so the library closes normally, and the
    caller raises the recorded error and deletes the file.
    """

    def __init__(self, path: str, mode: str = "w+b") -> None:
        super().__init__()
        self._fh = open(path, mode, buffering=0)  # noqa: SIM115 - closed by close()
        self.failure: OSError | None = None

    def readable(self) -> bool:
        return True

    def writable(self) -> bool:
        return True

    def seekable(self) -> bool:
        return True

    def seek(self, pos: int, whence: int = 0) -> int:
        return self._fh.seek(pos, whence)

    def tell(self) -> int:
        return self._fh.tell()

    def readinto(self, b) -> int:
        return self._fh.readinto(b)

    def write(self, b) -> int:
        view = memoryview(b).cast("B")
        n = len(view)
        start = self._fh.tell()
        if self.failure is None:
            try:
                done = 0
                while done < n:  # an unbuffered write may be short just below a limit
                    k = self._fh.write(view[done:])
                    if not k:
                        raise OSError(errno.EIO, "write made no progress")
                    done += k
                return n
            except OSError as exc:
                self.failure = exc
        self._fh.seek(start + n)  # as if written: the library's offsets stay right
        return n

    def truncate(self, size: int | None = None) -> int:
        if self.failure is None:
            try:
                return self._fh.truncate(size)
            except OSError as exc:
                self.failure = exc
        return self._fh.tell() if size is None else size

    def flush(self) -> None:
        pass  # unbuffered

    def close(self) -> None:
        if not self._fh.closed:
            self._fh.close()
        super().close()


#: Fewest bytes one sample value takes in a file, per format (a lower bound: CSV writes at
#: least a digit, a dot or exponent and a separator; uncompressed audio its sample size).
#: Compressed formats (FLAC, HDF5 with gzip) have no useful bound and are not checked.
MIN_BYTES_PER_VALUE = {"csv": 3, "FLOAT": 4, "DOUBLE": 8, "PCM_16": 2, "PCM_24": 3,
                       "PCM_32": 4, "PCM_S8": 1, "PCM_U8": 1}


def check_room(path: str, n_values: int | None, bytes_per_value: int | None) -> None:
    """Refuse at once an output that cannot fit the free disk space or the file size limit.

    ``n_values`` samples x channels, each at least ``bytes_per_value`` bytes: a lower
    bound on the file's size. A run whose output cannot fit (a file declaring 1e12
    samples) fails before any work instead of after hours.
    """
    if not n_values or not bytes_per_value:
        return
    need = int(n_values) * int(bytes_per_value)
    room = []
    try:
        st = os.statvfs(os.path.dirname(os.path.abspath(path)))
        room.append((st.f_bavail * st.f_frsize, "free on its disk"))
    except (OSError, AttributeError):
        pass
    try:
        import resource

        soft, _ = resource.getrlimit(resource.RLIMIT_FSIZE)
        if soft != resource.RLIM_INFINITY:
            room.append((soft, "allowed by the file size limit"))
    except (ImportError, OSError, ValueError):
        pass
    for space, what in room:
        if need > space:
            raise WaveformError(
                f"{path}: cannot write: disk full / file size limit: {n_values:,} values need "
                f"at least {_size(need)}, {_size(space)} {what}")


def _size(n: float) -> str:
    for unit in ("bytes", "KB", "MB", "GB", "TB", "PB"):
        if n < 1000 or unit == "PB":
            return f"{n:.4g} {unit}"
        n /= 1000
    return f"{n:.4g} PB"


# --------------------------------------------------------------------- stale temporaries
def _open_elsewhere(paths: set[str]) -> tuple[set[str], bool]:
    """Which of ``paths`` a live process holds open (Linux /proc); and whether all were seen."""
    held: set[str] = set()
    complete = os.path.isdir("/proc/self/fd")
    if not complete:
        return held, False
    for pid in os.listdir("/proc"):
        if not pid.isdigit():
            continue
        fd_dir = f"/proc/{pid}/fd"
        try:
            fds = os.listdir(fd_dir)
        except FileNotFoundError:
            continue  # the process ended meanwhile
        except PermissionError:
            complete = False  # another user's process: cannot see its files
            continue
        for fd in fds:
            try:
                link = os.readlink(f"{fd_dir}/{fd}")
            except OSError:
                continue
            if link in paths:
                held.add(link)
    return held, complete


def sweep_stale_parts(directories: Iterable[str], *, targets: Iterable[str] | None = None,
                      min_age_s: float | None = None, now: float | None = None) -> list[str]:
    """Remove this tool's temporary files left in ``directories`` by runs that were killed.

    Only names of the tool's own pattern (:data:`TEMP_NAME`) are considered, only
    regular files (never a link), and only when no live process holds the file open
    (``/proc/PID/fd``; the tool keeps its temporaries open from creation to rename)
    and it has not changed for ``min_age_s`` seconds (default :data:`STALE_AFTER_S`).
    When some processes' open files cannot be seen (another user's, no /proc),
    only files unchanged for :data:`STALE_BLIND_AFTER_S` are removed.

    Parameters
    ----------
    directories : iterable of str
        Folders to look in (not recursively).
    targets : iterable of str, optional
        Only the temporaries of these target file names (``.NAME.XXXXXXXX.partEXT``).
    min_age_s : float, optional
        Age below which a file not held open is still left alone.

    Returns
    -------
    list of str
        The files removed.
    """
    now = time.time() if now is None else now
    prefixes = None if targets is None else tuple(f".{os.path.basename(t)}." for t in targets)
    found: dict[str, float] = {}
    for d in {os.path.realpath(d or ".") for d in directories}:
        try:
            names = os.listdir(d)
        except OSError:
            continue
        for name in names:
            if not TEMP_NAME.match(name) or (prefixes is not None
                                             and not name.startswith(prefixes)):
                continue
            p = os.path.join(d, name)
            try:
                st = os.lstat(p)
            except OSError:
                continue
            if stat.S_ISREG(st.st_mode):
                found[p] = now - st.st_mtime
    if not found:
        return []
    held, complete = _open_elsewhere(set(found))
    limit = (STALE_AFTER_S if min_age_s is None else min_age_s) if complete \
        else STALE_BLIND_AFTER_S
    removed = []
    for p, age in sorted(found.items()):
        if p in held or age < limit:
            continue
        try:
            os.unlink(p)
            removed.append(p)
        except OSError:
            pass
    return removed


def sweep_note(removed: list[str]) -> str | None:
    """The line telling the user which stale temporary files were removed (or None)."""
    if not removed:
        return None
    names = ", ".join(os.path.basename(p) for p in removed[:3])
    more = f" and {len(removed) - 3} more" if len(removed) > 3 else ""
    return (f"Note: removed {len(removed)} temporary file(s) left by an interrupted simwave "
            f"run in {os.path.dirname(removed[0]) or '.'}: {names}{more}")
