"""The batch task: one (input, system) pair through :func:`simwave.run.execute`.

A task is plain picklable data (:class:`PairTask`); :func:`run_pair` is a pure
function of it: it builds the System in the worker, runs the one pipeline
that ``simwave run`` uses, and returns a small result dictionary. Outputs and
metrics files are written atomically by ``execute``, so a task can be retried
or abandoned at any point without leaving a partial file under a final name.
"""

from __future__ import annotations

import os
import signal
import threading
import time
import warnings
from dataclasses import dataclass
from typing import Any

from simwave.batch.plan import build_system
from simwave.errors import SimwaveError
from simwave.run import RunJob, execute
from simwave.threads import set_filter_threads


@dataclass(frozen=True)
class PairTask:
    """What a worker needs for one pair: the system definition and the RunJob fields.

    ``system`` is ``("text", text)`` or ``("table", mapping, where)``; ``job`` holds
    every :class:`simwave.run.RunJob` field except ``system``.
    """

    index: int
    system: tuple
    job: dict

    def run_job(self) -> RunJob:
        """The :class:`RunJob` this task executes (the System built from its definition)."""
        return RunJob(system=cached_system(self.system), **self.job)


#: Systems built in this worker, by definition (a batch runs many pairs through few
#: systems; parsing or designing one costs milliseconds), with the warnings raised while
#: building them, so that every pair records them as the first one did.
_SYSTEMS: dict[str, tuple[Any, list[warnings.WarningMessage]]] = {}
_SYSTEMS_MAX = 64


def cached_system(definition: tuple) -> Any:
    """:func:`~simwave.batch.plan.build_system`, once per definition in this process.

    A definition that fails to build is not kept (its error comes again for every pair).
    The System is shared by the pairs that use it; nothing in a run changes it.
    """
    key = repr(definition)  # plain data (text, numbers, dicts, lists): equal repr, same system
    hit = _SYSTEMS.get(key)
    if hit is None:
        with warnings.catch_warnings(record=True) as wlist:
            warnings.simplefilter("always")
            system = build_system(definition)
        if len(_SYSTEMS) >= _SYSTEMS_MAX:
            _SYSTEMS.pop(next(iter(_SYSTEMS)))
        hit = _SYSTEMS[key] = (system, list(wlist))
    system, caught = hit
    for w in caught:
        warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    return system


class WorkerStop(BaseException):
    """Raised inside a worker when the batch is stopped (SIGTERM from the batch process)."""


_state = {"stopping": False, "busy": False}

#: One pair at a time per process. The pipeline records each run's warnings with
#: ``warnings.catch_warnings``, which swaps process-wide state and is not thread-safe
#: (Python docs, warnings module, "Temporarily Suppressing Warnings"): two runs on two
#: threads of one process (a Dask worker with several threads) could swap their warning
#: lists, and the warnings are part of each output's record. Processes run in parallel.
_EXECUTE_LOCK = threading.Lock()


def _on_terminate(signum: int, frame: Any) -> None:
    # Stop the pair in progress by an exception, so execute() deletes its temporary
    # files on the way out; an idle worker just remembers to run nothing more.
    _state["stopping"] = True
    if _state["busy"]:
        _state["busy"] = False  # a second signal must not interrupt the clean-up
        raise WorkerStop()


def worker_init() -> None:
    """Process-pool initializer: Ctrl-C is the batch process's business; SIGTERM stops cleanly."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, _on_terminate)


def _error_text(exc: BaseException) -> str:
    if isinstance(exc, SimwaveError):
        return str(exc)
    # Not a user error: a bug or an environment problem; keep the type for the report.
    return f"{type(exc).__name__}: {exc}"


def run_pair(task: PairTask, capture_warnings: bool = True) -> dict[str, Any]:
    """Run one pair and return a small JSON-friendly result.

    Parameters
    ----------
    task : PairTask
    capture_warnings : bool
        Also record warnings raised outside the model (reading, measuring) into the
        result. The Dask engine passes False (other threads of a Dask worker would
        be affected); those warnings then go to the worker's log.

    Notes
    -----
    Pairs run one at a time in a process (a lock), whatever the number of
    threads calling: use one thread per worker process for parallelism.

    Returns
    -------
    dict
        ``index``, ``status`` ("ok" or "failed"), ``error`` (message or None),
        ``elapsed_s``, ``samples``, ``duration_s``, ``rate_hz``, ``channels``
        (``[{name, unit, peak, rms}]``), ``warnings`` (list of text), ``metrics``
        (``{channel: {metric: value}}`` from :func:`simwave.measure.key_metrics`).
        Any ``Exception`` becomes a failed result; a stop request (KeyboardInterrupt,
        :class:`WorkerStop`) propagates after ``execute`` cleaned up.
    """
    set_filter_threads(1)  # a batch's parallelism is its processes (one per core)
    started = time.perf_counter()
    cpu_started = time.process_time()
    base: dict[str, Any] = {"index": task.index, "status": "failed", "error": None,
                            "elapsed_s": None, "samples": None, "duration_s": None,
                            "rate_hz": None, "channels": [], "warnings": [], "metrics": {},
                            "worker": os.getpid()}
    if _state["stopping"]:
        raise WorkerStop()
    caught: list[str] = []
    with _EXECUTE_LOCK:
        _state["busy"] = True
        try:
            if capture_warnings:
                with warnings.catch_warnings(record=True) as wlist:
                    warnings.simplefilter("always")
                    result = execute(task.run_job())
                caught = [str(w.message) for w in wlist]
            else:
                result = execute(task.run_job())
        except Exception as exc:  # noqa: BLE001 - failure isolation: any error fails this pair
            base["error"] = _error_text(exc)
            base["elapsed_s"] = time.perf_counter() - started
            return base
        finally:
            _state["busy"] = False
    out = summarize_result(result, task.index, time.perf_counter() - started, caught)
    out["cpu_s"] = time.process_time() - cpu_started  # this process's CPU time (all threads)
    return out


def run_task(task: Any, capture_warnings: bool = True) -> dict[str, Any]:
    """Run any engine task: a :class:`PairTask` through :func:`run_pair`, or another task.

    Other tasks (e.g. a chunk of tolerance-study builds) are picklable objects with an
    ``index`` and a ``run(capture_warnings)`` method that returns a small result
    dictionary with ``index`` and ``status`` and isolates its own failures. They run
    under the same one-at-a-time lock and stop handling as pairs.
    """
    if isinstance(task, PairTask):
        return run_pair(task, capture_warnings)
    set_filter_threads(1)
    if _state["stopping"]:
        raise WorkerStop()
    with _EXECUTE_LOCK:
        _state["busy"] = True
        try:
            return task.run(capture_warnings)
        finally:
            _state["busy"] = False


def run_tasks(tasks: list, capture_warnings: bool = True) -> list[dict[str, Any]]:
    """Run several engine tasks one after another in this worker (:func:`run_task` each).

    The pool sends short pairs in such groups: one message each way per group instead of
    per pair. A stop raises :class:`WorkerStop` holding the results of the tasks that
    finished before it, so the batch records them.
    """
    done: list[dict[str, Any]] = []
    for task in tasks:
        try:
            done.append(run_task(task, capture_warnings))
        except WorkerStop:
            raise WorkerStop(done) from None
    return done


def summarize_result(result: dict, index: int, elapsed_s: float,
                     extra_warnings: list[str] | None = None) -> dict[str, Any]:
    """The small result of a successful :func:`simwave.run.execute` call (see :func:`run_pair`)."""
    from simwave.measure import key_metrics

    run = result["run"]
    texts = list(run.get("warnings") or [])
    for text in extra_warnings or ():
        if text not in texts:
            texts.append(text)
    return {
        "index": index,
        "status": "ok",
        "error": None,
        "elapsed_s": elapsed_s,
        "samples": run["samples"],
        "duration_s": run["duration_s"],
        "rate_hz": run["rate_hz"],
        "channels": [{"name": c["name"], "unit": c["unit"], "peak": c["peak"], "rms": c["rms"]}
                     for c in run["channels"]],
        "warnings": texts,
        "metrics": key_metrics(result["metrics"]) if result.get("metrics") else {},
        "worker": os.getpid(),
    }
