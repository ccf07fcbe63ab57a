"""Run a planned batch: choose the engine, skip finished pairs, gather results, write the summary.

Resume. When a pair finishes, the batch process appends one line to a journal
in the output directory (:data:`~simwave.batch.plan.JOURNAL_NAME`): the pair's
output name, the fingerprint of its definition and its small result. A later
run skips a pair (unless ``force``) when

* the journal holds an ``ok`` result for it with the same fingerprint
  (same system definition, method and options),
* its output and its metrics JSON both exist, the metrics no older than the output
  (``execute`` writes the metrics last), and
* the output is no older than the input file and the system file (if any).

Interruption. On Ctrl-C (KeyboardInterrupt) the engine is stopped: queued pairs
are cancelled, pool workers get SIGTERM and abandon the pair in hand through
``execute``'s clean-up (temporary files deleted), and any temporary file left
beside an in-flight pair's targets is removed. Finished outputs stay; the
summary lists the rest as ``not run``.
"""

from __future__ import annotations

import json
import os
import stat
import time
from dataclasses import dataclass, field
from typing import Any, Callable, Sequence

from simwave.batch.engines import (
    DESIGN_PRELOAD,
    WORKER_PRELOAD,
    DaskEngine,
    InlineEngine,
    PoolEngine,
    default_jobs,
)
from simwave.batch.plan import BatchPlan, Pair
from simwave.batch.summary import (
    columns, compare_systems, pair_rows, rows_csv, write_text_atomic,
)
from simwave.batch.tasks import PairTask
from simwave.errors import BatchError
from simwave.signals.atomic import sweep_stale_parts

#: Exit codes of ``simwave batch``.
EXIT_OK, EXIT_FAILED, EXIT_INTERRUPTED = 0, 1, 130
#: Every pair ran, and some result is outside its tolerance bands ([limits]).
EXIT_LIMITS = 3
#: Journal lines are handed to the operating system at most this often (seconds) and when
#: the batch ends or stops; a batch process killed outright loses at most the lines of
#: that long (their pairs run again on resume; a torn last line is skipped when read).
JOURNAL_FLUSH_S = 0.5


@dataclass
class BatchResult:
    """What a batch did.

    Attributes
    ----------
    rows : list of dict
        Summary rows, in pair order (see :func:`simwave.batch.summary.columns`).
    results : dict
        Pair index -> small result dict (:func:`simwave.batch.tasks.run_pair`).
    counts : dict
        ``pairs``, ``ok``, ``failed``, ``not_run``, ``reused``, ``ran``.
    """

    plan: BatchPlan
    engine: str
    rows: list[dict[str, Any]]
    results: dict[int, dict[str, Any]]
    counts: dict[str, int]
    comparison: dict[str, Any]
    elapsed_s: float
    interrupted: bool
    summary_csv: str
    summary_json: str
    reused: set[int] = field(default_factory=set)

    @property
    def exit_code(self) -> int:
        """0 all pairs ok and within their limits, 1 some failed, 3 every pair ran but some
        result is outside its tolerance bands, 130 interrupted."""
        if self.interrupted:
            return EXIT_INTERRUPTED
        if self.counts["failed"]:
            return EXIT_FAILED
        return EXIT_LIMITS if self.outside_limits else EXIT_OK

    @property
    def outside_limits(self) -> int:
        """Pairs with a result outside its tolerance bands."""
        return len({(r["input"], r["system"]) for r in self.rows
                    if str(r.get("limits") or "").startswith("fail")})

    @property
    def warning_counts(self) -> tuple[int, int]:
        """(warnings recorded, pairs that recorded any): model and reader warnings."""
        lists = [r.get("warnings") or [] for r in self.results.values()]
        return sum(len(w) for w in lists), sum(1 for w in lists if w)


# ----------------------------------------------------------------------------- journal
def read_journal(path: str) -> dict[str, dict]:
    """Output name -> latest journal entry.

    The journal only saves work: a line that is torn, not UTF-8, not JSON, or not
    shaped like an entry (``output`` text, ``result`` table with a table of
    ``metrics``) is skipped, and its pair simply runs again. A journal that cannot
    be read at all (a folder in its place, no permission) is a one-line error.
    """
    entries: dict[str, dict] = {}
    try:
        with open(path, encoding="utf-8", errors="replace") as fh:
            for line in fh:
                try:
                    entry = json.loads(line)
                except ValueError:
                    continue
                if _is_entry(entry):
                    entries[entry["output"]] = entry
    except FileNotFoundError:
        pass
    except OSError as exc:
        raise BatchError(f"{path}: cannot read the batch journal ({exc.strerror}); remove "
                         "it or choose another output directory") from None
    return entries


def _is_entry(entry: Any) -> bool:
    if not isinstance(entry, dict) or not isinstance(entry.get("output"), str):
        return False
    result = entry.get("result")
    return (isinstance(result, dict) and isinstance(result.get("status"), str)
            and isinstance(result.get("metrics") or {}, dict))


def _mtime(path: str) -> int | None:
    try:
        return os.stat(path).st_mtime_ns
    except OSError:
        return None


def is_finished(plan: BatchPlan, pair: Pair, entry: dict | None) -> bool:
    """True when the pair's earlier result can be reused (see the module docs)."""
    if not entry or entry.get("fingerprint") != plan.fingerprint(pair):
        return False
    if (entry.get("result") or {}).get("status") != "ok":
        return False
    out_t, met_t = _mtime(pair.output), _mtime(pair.metrics)
    if out_t is None or met_t is None or met_t < out_t:
        return False
    for dep in (pair.input.source if pair.input.is_file else None, pair.system.definition_file):
        if dep is not None:
            dep_t = _mtime(dep)
            if dep_t is None or dep_t > out_t:
                return False
    return True


def _remove_temporaries(pairs: Sequence[Pair]) -> None:
    """Delete temporary files abandoned pairs may have left beside their targets.

    The name pattern is that of :class:`simwave.signals.atomic.AtomicTarget`
    (``.NAME.XXXX.partEXT`` in the target's directory); a file some live process
    still holds open is left alone (see :func:`simwave.signals.atomic.sweep_stale_parts`).
    All pairs at once: each folder is listed once (per pair, 2,000 pairs listed their
    folder of 4,000 files 2,000 times).
    """
    targets = [t for pair in pairs for t in (pair.output, pair.metrics) if t]
    if targets:
        sweep_stale_parts({os.path.dirname(os.path.abspath(t)) for t in targets},
                          targets=targets, min_age_s=0.0)


def sweep_plan_folders(plan: BatchPlan) -> list[str]:
    """Remove stale temporaries of killed runs from every folder the batch writes to.

    Before a batch starts: files of this tool's temporary pattern that no process
    holds open and that have not changed for a minute
    (:func:`simwave.signals.atomic.sweep_stale_parts`).
    """
    folders = {plan.output_dir}
    for pair in plan.pairs:
        folders.update(os.path.dirname(os.path.abspath(t))
                       for t in (pair.output, pair.metrics) if t)
    return sweep_stale_parts(folders)


# ----------------------------------------------------------------------------- run
def make_engine(plan: BatchPlan, jobs: int | None = None, scheduler: Any = None,
                connect_timeout_s: float | None = None):
    """The engine: Dask when a scheduler is given, else a process pool (in-process for 1 job)."""
    scheduler = scheduler if scheduler is not None else plan.scheduler
    if scheduler is not None:
        timeout = connect_timeout_s if connect_timeout_s is not None else plan.connect_timeout_s
        return DaskEngine(scheduler, timeout)
    n = jobs if jobs is not None else (plan.jobs if plan.jobs is not None else default_jobs())
    if n == 1:
        return InlineEngine()
    return PoolEngine(n, WORKER_PRELOAD + DESIGN_PRELOAD if _uses_designs(plan) else None)


def _uses_designs(plan: Any) -> bool:
    """Whether a system of the plan is a named filter design (its workers need scipy.signal)."""
    for entry in getattr(plan, "systems", None) or ():
        definition = getattr(entry, "definition", None) or ()
        if definition[:1] == ("design",) or (
                definition[:1] == ("table",) and isinstance(definition[1], dict)
                and "design" in definition[1]):
            return True
    return False


def run_batch(
    plan: BatchPlan,
    *,
    jobs: int | None = None,
    scheduler: Any = None,
    connect_timeout_s: float | None = None,
    force: bool = False,
    progress: Callable[[int, int, int], None] | None = None,
    on_failure: Callable[[Pair, str], None] | None = None,
    engine: Any = None,
) -> BatchResult:
    """Run every pair of a plan and write the summary table.

    Parameters
    ----------
    plan : BatchPlan
        From :func:`simwave.batch.load_description` or :func:`simwave.batch.quick_plan`.
    jobs : int, optional
        Local worker processes (default: the plan's, else all cores); 1 runs the
        pairs in this process.
    scheduler : str, optional
        Dask scheduler address (e.g. ``tcp://host:8786``): run on that cluster.
    connect_timeout_s : float, optional
        How long to try to reach the scheduler (default: the plan's, 10 s).
    force : bool
        Redo pairs that an earlier run finished.
    progress : callable, optional
        ``progress(done, to_run, failed)`` after each pair.
    on_failure : callable, optional
        ``on_failure(pair, message)`` for each failed pair, as it happens.
    engine : optional
        An engine object (tests); overrides ``jobs`` and ``scheduler``.

    Returns
    -------
    BatchResult
        ``exit_code`` 0 when all pairs are ok, 1 when some failed, 130 when interrupted.

    Raises
    ------
    BatchError
        The scheduler cannot be reached (nothing is written).
    """
    started = time.perf_counter()
    eng = engine if engine is not None else make_engine(plan, jobs, scheduler, connect_timeout_s)
    engine_text = eng.describe()
    results: dict[int, dict] = {}
    reused: set[int] = set()
    interrupted = False
    try:
        journal_entries = {} if force else read_journal(plan.journal_path)
        todo: list[Pair] = []
        for pair in plan.pairs:
            rel = os.path.relpath(pair.output, plan.output_dir)
            entry = journal_entries.get(rel)
            if not force and is_finished(plan, pair, entry):
                results[pair.index] = entry["result"]
                reused.add(pair.index)
            else:
                todo.append(pair)
        os.makedirs(plan.output_dir, exist_ok=True)
        by_index = {p.index: p for p in plan.pairs}
        tasks = (PairTask(p.index, p.system.definition, plan.job_fields(p)) for p in todo)
        done = failed = 0
        flushed = time.monotonic()
        with open_journal(plan.journal_path) as journal:
            try:
                for task, result in eng.results(tasks):
                    pair = by_index[task.index]
                    results[task.index] = result
                    done += 1
                    if result["status"] != "ok":
                        failed += 1
                        if on_failure is not None:
                            on_failure(pair, result.get("error") or "failed")
                    journal.write(json.dumps({
                        "output": os.path.relpath(pair.output, plan.output_dir),
                        "fingerprint": plan.fingerprint(pair),
                        "result": result,
                    }, default=str, allow_nan=True) + "\n")
                    now = time.monotonic()
                    if now - flushed >= JOURNAL_FLUSH_S:
                        journal.flush()
                        flushed = now
                    if progress is not None:
                        progress(done, len(todo), failed)
            except KeyboardInterrupt:
                interrupted = True
                in_flight = [by_index[t.index] for t in eng.in_flight()]
                eng.stop()
                if getattr(eng, "removes_temporaries", True):
                    _remove_temporaries([p for p in in_flight if p.index not in results])
        if not interrupted and getattr(eng, "removes_temporaries", True):
            # Every pair has ended: a temporary file still beside a target was left by a
            # worker that died (killed, crashed) and is not held open by anyone.
            _remove_temporaries(todo)
    finally:
        try:
            eng.close()
        except Exception:  # noqa: BLE001 - closing after an error must not hide it
            pass
    return _finish(plan, engine_text, results, reused, interrupted,
                   time.perf_counter() - started)


def _finish(plan: BatchPlan, engine_text: str, results: dict[int, dict], reused: set[int],
            interrupted: bool, elapsed: float) -> BatchResult:
    rows: list[dict[str, Any]] = []
    for pair in plan.pairs:
        rows.extend(pair_rows(plan, pair, results.get(pair.index), pair.index in reused))
    statuses = [results[p.index]["status"] if p.index in results else "not run"
                for p in plan.pairs]
    counts = {
        "pairs": len(plan.pairs),
        "ok": statuses.count("ok"),
        "failed": statuses.count("failed"),
        "not_run": statuses.count("not run"),
        "reused": len(reused),
        "ran": sum(1 for p in plan.pairs if p.index in results and p.index not in reused),
    }
    comparison = compare_systems(plan, rows)
    csv_path, json_path = plan.summary_paths
    cols = columns()
    write_text_atomic(csv_path, rows_csv(rows, cols))
    doc = {
        "summary": "simwave batch",
        "description": plan.description,
        "output_dir": plan.output_dir,
        "engine": engine_text,
        "elapsed_s": elapsed,
        "interrupted": interrupted,
        "counts": counts,
        "systems": {s.name: {"definition": s.definition[1], "run_options": dict(s.run_options),
                             "limits": {k: list(v) for k, v in
                                        {**plan.limits, **dict(s.limits)}.items()}}
                    for s in plan.systems},
        "measure_options": plan.measure_options,
        # how each input and output is read back (the report draws them)
        "inputs": [{"label": e.label, "name": e.stem, "source": e.source, "rate": e.rate,
                    "channels": list(e.channels) if e.channels else None,
                    "read_options": dict(e.read_options)} for e in plan.inputs],
        "include_input": plan.include_input,
        "write_options": dict(plan.write_options),
        "columns": cols,
        "rows": rows,
        "comparison": comparison,
    }
    write_text_atomic(json_path, json.dumps(_json_safe(doc), indent=1, allow_nan=False) + "\n")
    _compact_journal(plan)
    return BatchResult(plan, engine_text, rows, results, counts, comparison, elapsed,
                       interrupted, csv_path, json_path, reused)


def _json_safe(value: Any) -> Any:
    """NaN and infinities become None (JSON has no such numbers); tuples become lists."""
    if isinstance(value, float):
        return value if value == value and abs(value) != float("inf") else None
    if isinstance(value, dict):
        return {str(k): _json_safe(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_json_safe(v) for v in value]
    if isinstance(value, (str, int, bool)) or value is None:
        return value
    return str(value)


def open_journal(path: str):
    """Open the resume journal for appending, never through a symbolic link.

    A journal that is a link would send every appended line to the link's target
    (some other file); it is refused, as is anything but a regular file.
    """
    flags = os.O_WRONLY | os.O_APPEND | os.O_CREAT | getattr(os, "O_NOFOLLOW", 0)
    if os.path.islink(path):
        raise BatchError(f"{path}: the batch journal is a symbolic link; refusing to write "
                         "through it (remove the link, or choose another output directory)")
    try:
        fd = os.open(path, flags, 0o666)
    except OSError as exc:
        raise BatchError(f"{path}: cannot open the batch journal ({exc.strerror})") from None
    if not stat.S_ISREG(os.fstat(fd).st_mode):
        os.close(fd)
        raise BatchError(f"{path}: the batch journal is not a regular file")
    return os.fdopen(fd, "a", encoding="utf-8")


def _compact_journal(plan: BatchPlan) -> None:
    """Rewrite the journal with one line per output (the latest), atomically."""
    entries = read_journal(plan.journal_path)
    if not entries:
        return
    text = "".join(json.dumps(e, default=str) + "\n" for e in entries.values())
    write_text_atomic(plan.journal_path, text)
