"""Where batch tasks run: in this process, on a local process pool, or on a Dask cluster.

Every engine takes the same :class:`~simwave.batch.tasks.PairTask` objects and
yields ``(task, result)`` as pairs finish, in completion order. The batch
process only ever holds small result dictionaries; inputs are read and outputs
written by the workers.
"""

from __future__ import annotations

import contextlib
import gc
import itertools
import multiprocessing
import os
import sys
import time
import uuid
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from typing import Any, Iterable, Iterator

from simwave.batch.tasks import PairTask, WorkerStop, run_task, run_tasks, worker_init
from simwave.errors import BatchError
from simwave.threads import THREAD_VARIABLES, limit_blas_threads

#: A pair whose worker died this many times is recorded as failed (not retried again).
MAX_CRASHES = 2
#: The pool sends pairs to its workers in groups that take about this long (seconds, from
#: the pairs finished so far; our choice): a short pair (~10-20 ms) sent alone cost a
#: message each way, pickling and two thread hand-overs in the batch process.
GROUP_SECONDS = 0.05
#: At most this many pairs in one group (so the last groups still share the workers).
MAX_GROUP = 16


def default_jobs() -> int:
    """Cores this process may use (the affinity mask where the platform has one)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - macOS, Windows
        return max(1, os.cpu_count() or 1)


def failed_result(task: PairTask, message: str) -> dict[str, Any]:
    """A result for a pair that did not produce one itself (worker lost, cancelled)."""
    return {"index": task.index, "status": "failed", "error": message, "elapsed_s": None,
            "samples": None, "duration_s": None, "rate_hz": None, "channels": [],
            "warnings": [], "metrics": {}, "worker": None}


class InlineEngine:
    """Run the pairs one after another in this process (``--jobs 1``): no start-up cost."""

    name = "in-process"
    removes_temporaries = True

    def __init__(self) -> None:
        self._current: PairTask | None = None

    def describe(self) -> str:
        return "in-process, 1 job"

    def results(self, tasks: Iterable[PairTask]) -> Iterator[tuple[PairTask, dict]]:
        for task in tasks:
            self._current = task
            result = run_task(task)
            self._current = None
            yield task, result

    def in_flight(self) -> list[PairTask]:
        return [self._current] if self._current is not None else []

    def stop(self) -> None:
        """Nothing to stop: the interrupted pair's execute() has cleaned up on the way out."""

    def close(self) -> None:
        pass


@contextlib.contextmanager
def worker_thread_limits(jobs: int) -> Iterator[None]:
    """Environment for starting pool workers: one BLAS thread each.

    simwave's linear algebra is small (see :mod:`simwave.threads`): a BLAS pool
    only costs time to wake, and N workers each starting one BLAS thread per core
    oversubscribe the machine (OpenBLAS threads also spin after each call; on two
    cores that halved the speed of a two-worker pool). Dask's nanny sets the same
    variables to 1 for its workers. Variables the user has set are left alone. The
    values are read when a worker (or the forkserver they fork from) loads numpy,
    so this wraps their start. ``jobs`` is kept for callers; the count no longer
    depends on it.
    """
    saved = {k: os.environ.get(k) for k in THREAD_VARIABLES}
    limit_blas_threads(1)
    try:
        yield
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)


#: Modules the forkserver imports once, before it forks the workers: what running and
#: measuring a WAV pair loads (without them a worker's first pair imported ~50 modules, 0.3
#: s; tests/test_kernels.py checks that a pair imports nothing beyond them). Not
#: scipy.signal: it takes 1-3 s to import on the 2-core test machine, as long as a whole
#: batch of 60 ten-second pairs' work on two workers, and running a model needs only its
#: compiled filter loops, which :mod:`simwave.discrete.kernels` loads without the package
#: (nor scipy.linalg, 0.15-0.2 s, for its one LAPACK routine). The batch process itself
#: imports none of them; the server starts while it reads the journal (see PoolEngine). A
#: batch with a named filter design among its systems (given with --design, in a
#: description or in a system file) adds :data:`DESIGN_PRELOAD` (``runner._uses_designs``).
WORKER_PRELOAD = ["simwave.batch.tasks", "simwave.discrete.filter",
                  "simwave.discrete.methods", "simwave.discrete.accuracy", "simwave.model.parse",
                  "simwave.cli.system_input", "simwave.signals.io", "simwave.signals.audio",
                  "simwave.signals.spec", "simwave.measure.core", "soundfile", "orjson",
                  # numpy's lazily loaded parts a pair uses (spectra, the turning-point
                  # polynomial, np.unique's masked-array path): ~40 ms once, not per worker
                  "numpy.fft", "numpy.polynomial", "numpy.ma",
                  "resource"]  # the writers' room check (signals.atomic)

#: What building a named filter design imports (scipy.signal's design functions): preloaded
#: once in the server when a batch has such a system, rather than in every worker.
DESIGN_PRELOAD = ["simwave.model.designs"]


def _context(preload: list[str] | None = None) -> multiprocessing.context.BaseContext:
    # fork is unsafe with the reader/writer threads of the pipeline (and with Dask or BLAS
    # threads in the parent); forkserver forks from a clean single-threaded server with
    # simwave already imported, spawn is the portable fallback.
    if sys.platform != "win32" and "forkserver" in multiprocessing.get_all_start_methods():
        ctx = multiprocessing.get_context("forkserver")
        ctx.set_forkserver_preload(WORKER_PRELOAD if preload is None else preload)
        return ctx
    return multiprocessing.get_context("spawn")


def _start_forkserver(ctx: multiprocessing.context.BaseContext) -> None:
    """Start the forkserver now (inside :func:`worker_thread_limits`), if it is one."""
    if ctx.get_start_method() == "forkserver":
        from multiprocessing import forkserver

        forkserver.ensure_running()


def _start_server(jobs: int, preload: list[str]) -> multiprocessing.context.BaseContext:
    """The pool's context, its forkserver started now (importing ``preload`` in the
    background) inside :func:`worker_thread_limits`. One server per process: the first
    start decides its preload, later pools find it running."""
    ctx = _context(preload)
    with worker_thread_limits(jobs):
        _start_forkserver(ctx)
    return ctx


class PoolEngine:
    """A local process pool of ``jobs`` workers (concurrent.futures, forkserver or spawn).

    A pair whose worker process dies (a crash in a native library, the
    out-of-memory killer) breaks the pool: the pool is rebuilt and the pairs
    that were in flight are tried again; a pair present at :data:`MAX_CRASHES`
    breakages is recorded as failed.
    """

    name = "local pool"
    removes_temporaries = True

    def __init__(self, jobs: int, preload: list[str] | None = None) -> None:
        """``preload``: modules the forkserver imports before forking the workers
        (default :data:`WORKER_PRELOAD`); it takes effect when the server starts (one
        server per batch process, started by the first pool)."""
        self.jobs = int(jobs)
        self._preload = list(WORKER_PRELOAD if preload is None else preload)
        self._executor: ProcessPoolExecutor | None = None
        self._pending: dict[Future, list[PairTask]] = {}
        # Start the forkserver now: it imports the preload while this process reads the
        # journal and makes the tasks.
        _start_server(self.jobs, self._preload)

    def describe(self) -> str:
        return f"local process pool, {self.jobs} worker{'s' if self.jobs != 1 else ''}"

    def _new_executor(self) -> ProcessPoolExecutor:
        ctx = _start_server(self.jobs, self._preload)
        return ProcessPoolExecutor(max_workers=self.jobs, mp_context=ctx,
                                   initializer=worker_init)

    def _group_size(self, pace: list[float]) -> int:
        """Pairs per group: about :data:`GROUP_SECONDS` of work at the pace seen so far."""
        if not pace[1]:
            return 1
        return max(1, min(MAX_GROUP, int(GROUP_SECONDS * pace[1] / max(pace[0], 1e-6))))

    def results(self, tasks: Iterable[PairTask]) -> Iterator[tuple[PairTask, dict]]:
        todo = iter(tasks)
        retry: list[PairTask] = []
        crashes: dict[int, int] = {}
        window = max(4, self.jobs * 4)  # pairs sent and not yet back
        self._executor = self._new_executor()
        state = {"broken": False, "finished": 0, "dead_starts": 0}
        pace = [0.0, 0]  # seconds and count of the pairs finished (elapsed_s as they report)

        def in_pool() -> int:
            return sum(len(group) for group in self._pending.values())

        def refill() -> None:
            while in_pool() < window and not state["broken"]:
                if retry:
                    # Pairs that were in a pool when it broke run one at a time, alone, so
                    # that a second death is counted against the pair that caused it.
                    if self._pending:
                        return
                    group = [retry.pop()]
                else:
                    group = list(itertools.islice(todo, self._group_size(pace)))
                    if not group:
                        return
                try:
                    self._pending[self._executor.submit(run_tasks, group)] = group
                except BrokenProcessPool:
                    state["broken"] = True
                    retry.extend(group)

        def finished(group: list[PairTask], results: list[dict]) -> Iterator[tuple]:
            for task, result in zip(group, results, strict=False):  # a stop: fewer results
                elapsed = result.get("elapsed_s") if isinstance(result, dict) else None
                if isinstance(elapsed, (int, float)):
                    pace[0] += elapsed
                    pace[1] += 1
                state["finished"] += 1
                yield task, result

        with worker_thread_limits(self.jobs):  # spawn starts the workers at the first submits
            refill()
        while self._pending or state["broken"]:
            done, _ = wait(list(self._pending), return_when=FIRST_COMPLETED)
            for fut in done:
                group = self._pending.pop(fut)
                try:
                    results = fut.result()
                except BrokenProcessPool:
                    state["broken"] = True
                    retry.extend(group)
                    continue
                except WorkerStop as stop:
                    partial = stop.args[0] if stop.args else []
                    yield from finished(group, partial)
                    raise KeyboardInterrupt from None
                except Exception as exc:  # noqa: BLE001 - e.g. a result that does not pickle
                    results = [failed_result(task, f"{type(exc).__name__}: {exc}")
                               for task in group]
                yield from finished(group, results)
            if state["broken"]:
                # Every pair still in the pool fails the same way; collect them, rebuild.
                wait(list(self._pending))
                for fut, group in list(self._pending.items()):
                    if fut.exception() is None:
                        yield from finished(group, fut.result())
                    else:
                        retry.extend(group)
                self._pending.clear()
                self._executor.shutdown(wait=True, cancel_futures=True)
                # A pool that breaks twice in a row before finishing any pair cannot start
                # its workers at all: stop instead of failing every pair the same way.
                state["dead_starts"] = state["dead_starts"] + 1 if state["finished"] == 0 else 0
                if state["dead_starts"] >= 2:
                    self._executor = None
                    raise BatchError(
                        "the worker processes stop before running any pair (see the messages "
                        "above); a script that starts a pool must be importable by them "
                        "(not read from stdin), or use --jobs 1"
                    )
                state.update(broken=False, finished=0)
                self._executor = self._new_executor()
                for task in list(retry):
                    crashes[task.index] = crashes.get(task.index, 0) + 1
                    if crashes[task.index] >= MAX_CRASHES:
                        retry.remove(task)
                        yield task, failed_result(
                            task, "the worker process died while running this pair "
                                  f"({MAX_CRASHES} times): a crash or the out-of-memory killer")
                with worker_thread_limits(self.jobs):  # the new workers start here (spawn)
                    refill()
            else:
                refill()
        self.close()

    def in_flight(self) -> list[PairTask]:
        return [task for group in self._pending.values() for task in group]

    def stop(self) -> None:
        """Stop now: cancel queued pairs, SIGTERM the workers (they clean up), reap them."""
        ex = self._executor
        if ex is None:
            return
        # concurrent.futures has no public handle on its processes before Python 3.14
        # (terminate_workers); _processes is the documented-in-source mapping pid -> Process.
        procs = list((getattr(ex, "_processes", None) or {}).values())
        ex.shutdown(wait=False, cancel_futures=True)
        for p in procs:
            if p.is_alive():
                p.terminate()
        deadline = time.monotonic() + 10.0
        for p in procs:
            p.join(max(0.0, deadline - time.monotonic()))
        for p in procs:
            if p.is_alive():
                p.kill()
                p.join(1.0)
        self._executor = None

    def close(self) -> None:
        if self._executor is not None:
            self._executor.shutdown(wait=True)
            self._executor = None


def _collect_quietly() -> None:
    """Collect a half-built Dask client without its destructor's traceback on stderr."""
    hook = sys.unraisablehook
    sys.unraisablehook = lambda _info: None
    try:
        gc.collect()
    finally:
        sys.unraisablehook = hook


class DaskEngine:
    """The same tasks on a Dask distributed cluster (``dask.distributed.Client``).

    Workers read the inputs and write the outputs themselves (shared storage);
    the client gathers only the small result dictionaries. Each pair is
    submitted once with ``retries=1`` (the task is a pure function of its
    arguments, so a retry on another worker is safe).
    """

    name = "dask"
    #: Pairs already running on the cluster finish (atomically) or clean up on their own.
    removes_temporaries = False

    def __init__(self, address: Any, timeout_s: float = 10.0) -> None:
        try:
            from dask.distributed import Client
        except ImportError:
            raise BatchError(
                "the Dask engine (--scheduler) needs the optional dependency dask[distributed]: "
                "pip install 'simwave[distributed]'"
            ) from None
        self.address = address
        self.client = None
        problem = None
        try:
            self.client = Client(address, timeout=f"{float(timeout_s)}s", set_as_default=False)
        except Exception as exc:  # noqa: BLE001 - OSError, TimeoutError, ValueError (bad address)
            text = str(exc).strip()
            problem = text.splitlines()[0] if text else type(exc).__name__
        if problem is not None:
            _collect_quietly()
            raise BatchError(
                f"cannot reach the Dask scheduler at {address} within {timeout_s:g} s: {problem}"
            )
        self._pending: dict[str, tuple[Any, PairTask]] = {}
        self._token = uuid.uuid4().hex[:8]

    def describe(self) -> str:
        try:
            threads = sum(self.client.nthreads().values())
            workers = len(self.client.nthreads())
        except Exception:  # noqa: BLE001 - description only
            return f"Dask cluster at {self.address}"
        return f"Dask cluster at {self.address}, {workers} workers, {threads} threads"

    def results(self, tasks: Iterable[PairTask]) -> Iterator[tuple[PairTask, dict]]:
        from dask.distributed import as_completed

        todo = iter(tasks)
        threads = max(1, sum(self.client.nthreads().values()))
        window = max(64, threads * 8)
        ac = as_completed(loop=self.client.loop)

        def submit(task: PairTask) -> None:
            fut = self.client.submit(run_task, task, False, pure=False, retries=1,
                                     key=f"simwave-pair-{self._token}-{task.index}")
            self._pending[fut.key] = (fut, task)
            ac.add(fut)

        for task in itertools.islice(todo, window):
            submit(task)
        for fut in ac:
            _, task = self._pending.pop(fut.key)
            try:
                result = fut.result()
            except WorkerStop:
                raise KeyboardInterrupt from None
            except Exception as exc:  # noqa: BLE001 - worker lost twice, cancelled, ...
                result = failed_result(task, f"Dask: {type(exc).__name__}: {exc}")
            fut.release()
            yield task, result
            nxt = next(todo, None)
            if nxt is not None:
                submit(nxt)

    def in_flight(self) -> list[PairTask]:
        return [task for _, task in self._pending.values()]

    def stop(self) -> None:
        """Cancel the pairs not started; those running finish atomically on their workers."""
        futures = [fut for fut, _ in self._pending.values()]
        try:
            if futures:
                self.client.cancel(futures)
        finally:
            self.close()

    def close(self) -> None:
        client, self.client = getattr(self, "client", None), None
        if client is not None:
            client.close()
