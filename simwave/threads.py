"""BLAS thread pools: keep them asleep for simwave's small linear algebra, and measure it;
and the threads the filter loop may use for a block of many channels.

simwave's matrices are the size of a system's order and its fits have a few
columns. A BLAS thread pool (OpenBLAS, MKL, BLIS) costs far more to wake than
such a product takes (10-20 ms against 0.02 ms, measured under load on a
2-core machine), and its workers keep spinning afterwards, stealing a core from
the read-ahead and write-behind threads. So the command line and batch workers
start with one BLAS thread, and the library's run path avoids BLAS calls whose
size could make the pool start (see DEVELOPERS.md, "BLAS threads").

:func:`thread_cpu_seconds` is the measurement: per-thread CPU time from
``/proc/self/task/*/stat`` (Linux, proc(5)), so that a test or benchmark can
tell whether threads that existed before a run (the BLAS pool starts when numpy
loads) did any work during it.
"""

from __future__ import annotations

import os
import sys

#: Environment variables that set the thread count of the BLAS/OpenMP libraries; read
#: once, when the library loads (numpy's first import).
THREAD_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
                    "BLIS_NUM_THREADS", "VECLIB_MAXIMUM_THREADS", "NUMEXPR_NUM_THREADS")


def limit_blas_threads(count: int = 1, environ: dict | None = None) -> None:
    """Set the BLAS thread variables to ``count`` where the user has not set them.

    Works only before numpy is loaded in the process the variables are meant for
    (this one when ``environ`` is None; otherwise a child's environment).
    """
    env = os.environ if environ is None else environ
    for name in THREAD_VARIABLES:
        env.setdefault(name, str(int(count)))


def single_thread_blas() -> bool:
    """One BLAS thread for this process unless the user chose a count; False when too late
    (numpy already loaded)."""
    if "numpy" in sys.modules:
        return False
    limit_blas_threads(1)
    return True


def thread_cpu_seconds() -> dict[int, float]:
    """CPU time (user + system, seconds) of each thread of this process, by thread id.

    Empty where ``/proc`` is not available. Fields 14 and 15 of
    ``/proc/self/task/TID/stat`` in clock ticks (proc(5)).
    """
    base = "/proc/self/task"
    try:
        tids = os.listdir(base)
    except OSError:
        return {}
    tick = os.sysconf("SC_CLK_TCK")
    out: dict[int, float] = {}
    for tid in tids:
        try:
            with open(f"{base}/{tid}/stat", encoding="ascii") as fh:
                text = fh.read()
        except OSError:
            continue  # the thread ended meanwhile
        fields = text[text.rindex(")") + 2 :].split()  # after "pid (comm) "
        out[int(tid)] = (int(fields[11]) + int(fields[12])) / tick
    return out


def helper_thread_cpu(before: dict[int, float], after: dict[int, float]) -> float:
    """CPU seconds spent between two snapshots by threads present in both, other than the
    main thread: in a process where simwave starts its own threads only during a run,
    that is the BLAS (and OpenMP) pool's work."""
    main = os.getpid()
    return sum(after[t] - before[t] for t in before if t in after and t != main)


# ------------------------------------------------------------------ filter threads
#: Environment variable: the most threads :func:`simwave.discrete.filter.run_sections` runs
#: a block's channel groups on (default: the CPUs this process may run on, at most 8).
FILTER_THREADS_VARIABLE = "SIMWAVE_FILTER_THREADS"
_filter_threads: list[int | None] = [None]


def filter_threads() -> int:
    """Threads the filter loop may use for one block's channels (1: the calling thread)."""
    count = _filter_threads[0]
    if count is None:
        text = os.environ.get(FILTER_THREADS_VARIABLE, "").strip()
        try:
            count = int(text) if text else _cpus()
        except ValueError:
            count = _cpus()
        count = _filter_threads[0] = max(1, min(count, 64))
    return count


def set_filter_threads(count: int | None) -> None:
    """Set the filter loop's thread count for this process (None: back to the default).
    Batch workers set 1: a batch runs its pairs in parallel processes, one per core."""
    _filter_threads[0] = None if count is None else max(1, int(count))


def _cpus() -> int:
    try:
        n = len(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        n = os.cpu_count() or 1
    return max(1, min(n, 8))
