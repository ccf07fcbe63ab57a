"""A tolerance study: its description file, planning, running on the batch engines.

Study file (TOML; paths relative to the file)::

    [study]
    analysis = "monte-carlo"      # corners | monte-carlo | sweep
    draws = 500                   # monte-carlo: number of random builds
    seed = 7                      # monte-carlo: same seed, same draws
    jobs = 2                      # local worker processes (default: all cores)
    # scheduler = "tcp://10.1.2.3:8786"   # a Dask scheduler instead
    # builds_per_task = 8         # builds per engine task (default: chosen from the count)
    # sweep_tolerances = "corners"  # at each sweep point: corners of the other toleranced
    #                               # parameters (default when at most 6) or "nominal"

    [system]                      # one system: H(s) or ODE text with parameter names
    expression = "1/(R*C*s + 1)"  # (or file = "rc.toml": a system file with [parameters])
    method = "ramp-invariant"     # run options: method initial prewarp_hz match_hz oversample

    [system.parameters]
    R = "10k ±1%"
    C = "100n ±5% normal 3sigma"

    [sweep]                       # analysis = "sweep": one or two parameters
    R = { from = "1k", to = "100k", points = 21, scale = "log" }
    # C = ["10n", "22n", "47n"]

    [output]
    dir = "tolerance-output"      # default
    plots = true                  # default

    [measure]                     # measurement options, as in a batch description
    settling_band_pct = 2

    [limits]                      # the specification, on the key metrics of measure
    rise_time_s_mean = { max = "2.5m" }

    [[inputs]]                    # as in a batch description: files or generated signals
    files = ["recordings/*.csv"]

Every analysis also runs the nominal build and, for every toleranced parameter, two
sensitivity steps (the parameter at the ends of its band, the others nominal). The
analyses are:

* ``corners``: every combination of tolerance limits up to
  :data:`~simwave.tolerance.builds.MAX_FULL_CORNERS` toleranced parameters; beyond
  that, for each metric, the two corners the sensitivity steps point to (said so in
  the summary's notes).
* ``monte-carlo``: ``draws`` random builds from the stated distributions.
* ``sweep``: the swept parameters over their values; at each point the other
  parameters nominal and, with ``sweep_tolerances = "corners"`` (the default for up
  to :data:`MAX_SWEEP_CORNERS` other toleranced parameters), every corner of their
  tolerances. With ``[limits]`` a design search reports the values that meet every
  limit on every input at every corner, with the margin, or says that none do.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import time
from dataclasses import dataclass, field
from typing import Any, Callable, Mapping

from simwave.errors import BatchError, SimwaveError
from simwave.model.params import Parameter
from simwave.tolerance import builds as B
from simwave.tolerance.worker import BuildChunk, InputRef, SystemTemplate

SECTIONS = ("study", "system", "sweep", "output", "measure", "limits", "inputs")
STUDY_KEYS = ("analysis", "draws", "seed", "jobs", "scheduler", "connect_timeout_s",
              "builds_per_task", "sweep_tolerances")
#: At each sweep point, every corner of the other toleranced parameters is run when they
#: are at most this many (2^6 = 64 builds per point); beyond, only the nominal.
MAX_SWEEP_CORNERS = 6
ANALYSES = ("corners", "monte-carlo", "sweep")
RUN_KEYS = ("method", "initial", "prewarp_hz", "match_hz", "oversample")
SYSTEM_KEYS = ("file", "expression", "ode", "name", "notes", "dead_time_s", "parameters") \
    + RUN_KEYS
OUTPUT_KEYS = ("dir", "plots")
DEFAULT_OUTPUT_DIR = "tolerance-output"
DEFAULT_DRAWS = 200
JOURNAL_NAME = ".simwave-tolerance-journal.jsonl"
#: Files a study writes in its output folder.
SUMMARY_JSON, SUMMARY_CSV = "tolerance-summary.json", "tolerance-summary.csv"
BUILDS_CSV, BUILD_METRICS_CSV, RUN_INFO = "builds.csv", "build-metrics.csv", "run-info.json"


class StudyError(BatchError):
    """A study description that cannot be run (one line naming the key and its line)."""


@dataclass
class Study:
    """Everything a study will do, checked before anything runs."""

    path: str | None
    analysis: str
    template: SystemTemplate
    parameters: dict[str, Parameter]
    inputs: list[InputRef]
    measure_options: dict[str, Any]
    limits: dict[str, tuple]
    output_dir: str
    draws: int = DEFAULT_DRAWS
    seed: int | None = None
    sweep: dict[str, list[float]] = field(default_factory=dict)
    jobs: int | None = None
    scheduler: str | None = None
    connect_timeout_s: float = 10.0
    builds_per_task: int | None = None
    sweep_tolerances: str = "nominal"
    plots: bool = True
    input_files: list[str] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)

    @property
    def journal_path(self) -> str:
        return os.path.join(self.output_dir, JOURNAL_NAME)

    def path_of(self, name: str) -> str:
        return os.path.join(self.output_dir, name)


# ----------------------------------------------------------------------------- loading
def load_study(path: str | os.PathLike[str], *, output_dir: str | None = None,
               analysis: str | None = None, draws: int | None = None, seed: int | None = None,
               settings: Mapping[str, Any] | None = None) -> Study:
    """Read and check a study file (see the module docs); keyword arguments override it.

    Raises
    ------
    StudyError
        One line naming the file, the line and the key at fault.
    """
    from simwave.batch.lines import KeyLines
    from simwave.batch.plan import _input_entries, _limits, _measure_options
    from simwave.tomlfile import read_toml

    source = os.fspath(path)
    data, text = read_toml(source, "study file", StudyError)
    lines = KeyLines(text)
    base = os.path.dirname(os.path.abspath(source))

    def where(key: str, sec: str | None = None) -> str:
        return lines.where(source, key, [sec] if sec else [])

    for key in data:
        if key not in SECTIONS:
            raise StudyError(f"{where(key)}: unknown section {key!r} (known: "
                             f"{', '.join(SECTIONS)})")
    st = data.get("study", {})
    _keys(st, STUDY_KEYS, "study", where)
    kind = analysis or st.get("analysis")
    if kind is None:
        raise StudyError(f"{source}: [study] needs analysis = one of {', '.join(ANALYSES)}")
    if kind not in ANALYSES:
        raise StudyError(f"{where('analysis', 'study')}: unknown analysis {kind!r} "
                         f"(known: {', '.join(ANALYSES)})")
    template, params, system_file = _system(data.get("system"), base, source, where, settings)
    n_draws = draws if draws is not None else st.get("draws", DEFAULT_DRAWS)
    _whole(n_draws, "draws", where("draws", "study"), low=1)
    the_seed = seed if seed is not None else st.get("seed")
    if kind == "monte-carlo":
        if the_seed is None:
            raise StudyError(f"{source}: a monte-carlo study needs seed = N in [study] (or "
                             "--seed): the same seed gives the same draws")
        _whole(the_seed, "seed", where("seed", "study"), low=0)
    jobs = st.get("jobs")
    if jobs is not None:
        _whole(jobs, "jobs", where("jobs", "study"), low=1)
    per_task = st.get("builds_per_task")
    if per_task is not None:
        _whole(per_task, "builds_per_task", where("builds_per_task", "study"), low=1)
    sweep: dict[str, list[float]] = {}
    if kind == "sweep" or "sweep" in data:  # checked always; used by analysis = "sweep"
        table = data.get("sweep")
        if not isinstance(table, dict) or not table:
            raise StudyError(f"{source}: a sweep study needs a [sweep] table naming one or two "
                             "parameters")
        if len(table) > 2:
            raise StudyError(f"{where(list(table)[2], 'sweep')}: sweep one or two parameters, "
                             f"not {len(table)}")
        for name, spec in table.items():
            w = where(name, "sweep")
            if name not in params:
                raise StudyError(f"{w}: {name} is not a parameter of the system (parameters: "
                                 f"{', '.join(params) or 'none'})")
            try:
                sweep[name] = B.sweep_axis(name, spec, w)
            except SimwaveError as exc:
                raise StudyError(str(exc)) from None
        if kind != "sweep":
            sweep = {}
    if kind != "sweep" and not B.toleranced(params):
        raise StudyError(f"{source}: no parameter has a tolerance; write e.g. R = \"10k ±1%\" "
                         "under [system.parameters]")
    for p in B.toleranced(params):
        if p.nominal == 0:
            raise StudyError(f"{source}: parameter {p.name} has nominal 0: its relative "
                             "sensitivity is undefined")
    others = [p for p in B.toleranced(params) if p.name not in sweep]
    sweep_tol = st.get("sweep_tolerances",
                       "corners" if others and len(others) <= MAX_SWEEP_CORNERS else "nominal")
    if sweep_tol not in ("corners", "nominal"):
        raise StudyError(f"{where('sweep_tolerances', 'study')}: sweep_tolerances must be "
                         f"\"corners\" or \"nominal\", got {sweep_tol!r}")
    if sweep_tol == "corners" and len(others) > MAX_SWEEP_CORNERS:
        raise StudyError(f"{where('sweep_tolerances', 'study')}: {len(others)} other toleranced "
                         f"parameters give {2 ** len(others)} corners per sweep point (at most "
                         f"{2 ** MAX_SWEEP_CORNERS}); use \"nominal\"")
    out = data.get("output", {})
    _keys(out, OUTPUT_KEYS, "output", where)
    out_dir = output_dir or os.path.join(base, str(out.get("dir", DEFAULT_OUTPUT_DIR)))
    notes: list[str] = []
    inputs, _ = _input_entries(data.get("inputs"), base, source, lines, notes)
    refs = []
    for e in inputs:
        opts = dict(e.read_options)
        if e.rate is not None:
            opts["rate"] = e.rate
        if e.channels:
            opts["channels"] = list(e.channels)
        refs.append(InputRef(e.label if e.is_file else e.stem, e.source, opts))
    measure = _measure_options(data.get("measure"), lines, source) if "measure" in data else {}
    limits = _limits(data["limits"], lambda k, p: lines.where(source, k, p), ["limits"]) \
        if "limits" in data else {}
    files = [e.source for e in inputs if e.is_file] + ([system_file] if system_file else [])
    return Study(
        path=source, analysis=kind, template=template, parameters=params, inputs=refs,
        measure_options=measure, limits=limits, output_dir=os.path.abspath(out_dir),
        draws=int(n_draws), seed=None if the_seed is None else int(the_seed), sweep=sweep,
        jobs=jobs, scheduler=st.get("scheduler"),
        connect_timeout_s=float(st.get("connect_timeout_s", 10.0)),
        builds_per_task=per_task, sweep_tolerances=sweep_tol,
        plots=bool(out.get("plots", True)),
        input_files=files, warnings=notes,
    )


def _keys(table: Any, known: tuple, section: str, where: Callable) -> None:
    if not isinstance(table, dict):
        raise StudyError(f"{where(section)}: [{section}] must be a table")
    for k in table:
        if k not in known:
            raise StudyError(f"{where(k, section)}: unknown key {k!r} in [{section}] (known: "
                             f"{', '.join(known)})")


def _whole(v: Any, what: str, where: str, low: int) -> None:
    if isinstance(v, bool) or not isinstance(v, int) or v < low:
        raise StudyError(f"{where}: {what} must be a whole number >= {low}, got {v!r}")


def _system(table: Any, base: str, source: str, where: Callable,
            settings: Mapping[str, Any] | None
            ) -> tuple[SystemTemplate, dict[str, Parameter], str | None]:
    from simwave.batch.plan import run_options
    from simwave.cli.system_input import merged_parameters, system_from_mapping
    from simwave.tomlfile import read_toml

    if not isinstance(table, dict):
        raise StudyError(f"{source}: a study needs a [system] table with expression = \"...\" "
                         "(or ode = \"...\", or file = \"system.toml\") and its parameters")
    _keys(table, SYSTEM_KEYS, "system", where)
    runs = {k: table[k] for k in RUN_KEYS if k in table}
    opts = run_options(runs, lambda k: where(k, "system")) if runs else {}
    system_file = None
    if "file" in table:
        system_file = os.path.join(base, str(table["file"]))
        sys_table, _ = read_toml(system_file, "system file", StudyError)
        sys_table = dict(sys_table)
        sys_table.setdefault("name", os.path.splitext(os.path.basename(system_file))[0])
        extra = {k: table[k] for k in table if k not in ("file",) + RUN_KEYS}
        if "parameters" in extra:  # the study's values override the file's
            sys_table["parameters"] = {**(sys_table.get("parameters") or {}),
                                       **extra.pop("parameters")}
        if extra:
            raise StudyError(f"{where(next(iter(extra)), 'system')}: with file = give only "
                             "run options and parameters here")
        w = system_file
    else:
        sys_table = {k: table[k] for k in table if k not in RUN_KEYS}
        w = where("system")
    forms = [f for f in ("expression", "ode") if f in sys_table]
    if len(forms) != 1 or not isinstance(sys_table[forms[0]], str):
        raise StudyError(f"{w}: a study's system is one expression = \"...\" or ode = \"...\" "
                         "text with parameter names")
    try:
        params = merged_parameters(sys_table.get("parameters"), settings)
        table_now = dict(sys_table)
        table_now["parameters"] = {n: p for n, p in params.items()}
        nominal = system_from_mapping(table_now, where=w)
    except SimwaveError as exc:
        raise StudyError(str(exc)) from None
    template = SystemTemplate(text=sys_table[forms[0]], kind=forms[0],
                              name=nominal.name or "system",
                              dead_time_s=nominal.delay_s if "dead_time_s" in sys_table else 0.0,
                              run_options=opts)
    return template, params, system_file


# ----------------------------------------------------------------------------- planning
def plan_builds(study: Study) -> tuple[list[B.Build], list[str]]:
    """The builds of the first phase (all of them except pointed corners) and notes."""
    params = study.parameters
    out: list[B.Build] = [B.Build(0, "nominal", B.nominal_values(params))]
    notes: list[str] = []
    swept = set(study.sweep)
    stepped = {n: p for n, p in params.items() if n not in swept}
    for name, sign, values in B.step_values(stepped) if B.toleranced(stepped) else []:
        full = dict(B.nominal_values(params), **{name: values[name]})
        out.append(B.Build(len(out), "step", full, f"{name}{sign}"))
    if study.analysis == "corners":
        tol = B.toleranced(params)
        if len(tol) <= B.MAX_FULL_CORNERS:
            for label, values in B.all_corners(params):
                out.append(B.Build(len(out), "corner", values, label))
            notes.append(f"corners: all {2 ** len(tol)} combinations of the limits of "
                         f"{len(tol)} toleranced parameters")
        else:
            notes.append(f"corners: {len(tol)} toleranced parameters give {2 ** len(tol)} "
                         f"combinations (more than 2^{B.MAX_FULL_CORNERS}); only the corners "
                         "the sensitivity steps point to are run (two per metric: each "
                         "parameter at the limit that raises, then lowers it), which is exact "
                         "only for metrics monotonic in each parameter across its band")
    elif study.analysis == "monte-carlo":
        for values in B.random_values(params, study.draws, study.seed or 0):
            out.append(B.Build(len(out), "draw", values))
    else:
        corners = study.sweep_tolerances == "corners" and B.toleranced(stepped)
        for k, point in enumerate(B.sweep_points(study.sweep)):
            values = dict(B.nominal_values(params), **point)
            label = " ".join(f"{n}={v:.6g}" for n, v in point.items())
            out.append(B.Build(len(out), "sweep", values, label, point=k))
            if corners:
                for corner, cv in B.all_corners(stepped):
                    out.append(B.Build(len(out), "sweep-corner", dict(cv, **point),
                                       f"{label} {corner}", point=k))
        if corners:
            n = len(B.toleranced(stepped))
            notes.append(f"sweep: at every point the {2 ** n} corners of the other {n} "
                         "toleranced parameters run too; a point meets the limits only when "
                         "its nominal and every corner do")
        elif B.toleranced(stepped):
            notes.append("sweep: the other parameters are at their nominal values at every "
                         "point (their tolerances enter the sensitivities only)")
    return out, notes


def build_fingerprint(study: Study, values: dict[str, float]) -> str:
    """A digest of everything that decides a build's result (resume key)."""
    ins = []
    for ref in study.inputs:
        try:
            st = os.stat(ref.source)
            stamp = [st.st_mtime_ns, st.st_size]
        except OSError:
            stamp = None
        ins.append([ref.label, ref.source, ref.read_options, stamp])
    t = study.template
    doc = {"text": t.text, "kind": t.kind, "dead_time_s": t.dead_time_s,
           "run": t.run_options, "values": {k: repr(v) for k, v in sorted(values.items())},
           "inputs": ins, "measure": study.measure_options}
    from simwave import __version__

    doc["version"] = __version__
    text = json.dumps(doc, sort_keys=True, default=str)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:32]


# ----------------------------------------------------------------------------- running
@dataclass
class RunStats:
    engine: str = ""
    ran: int = 0
    reused: int = 0
    elapsed_s: float = 0.0


def execute_builds(study: Study, builds: list[B.Build], *, jobs: int | None = None,
                   scheduler: Any = None, connect_timeout_s: float | None = None,
                   force: bool = False, engine: Any = None,
                   progress: Callable[[int, int], None] | None = None,
                   stats: RunStats | None = None) -> dict[int, dict]:
    """Run the builds on an engine (reusing finished ones from the journal); results by index."""
    from simwave.batch.runner import make_engine, open_journal, read_journal

    stats = stats if stats is not None else RunStats()
    results: dict[int, dict] = {}
    fps = {b.index: build_fingerprint(study, b.values) for b in builds}
    journal = {} if force else read_journal(study.journal_path)
    todo = []
    for b in builds:
        entry = journal.get(fps[b.index])
        if entry and (entry.get("result") or {}).get("status") in (
                "ok", "unstable", "not realizable"):
            results[b.index] = entry["result"]
            stats.reused += 1
        else:
            todo.append(b)
    if not todo:
        return results
    started = time.perf_counter()
    eng = engine if engine is not None else make_engine(study, jobs, scheduler,
                                                        connect_timeout_s)
    stats.engine = eng.describe()
    workers = getattr(eng, "jobs", None) or _dask_threads(eng) or 1
    per = study.builds_per_task or max(1, min(16, math.ceil(len(todo) / (4 * workers))))
    chunks = [BuildChunk(k, study.template,
                         tuple((b.index, b.values) for b in todo[i:i + per]),
                         tuple(study.inputs), dict(study.measure_options))
              for k, i in enumerate(range(0, len(todo), per))]
    by_chunk = {c.index: c for c in chunks}
    os.makedirs(study.output_dir, exist_ok=True)
    done = 0
    try:
        with open_journal(study.journal_path) as jf:  # never through a link
            for task, res in eng.results(iter(chunks)):
                chunk = by_chunk[task.index]
                got = res.get("builds") or {}
                for bi, _ in chunk.builds:
                    r = got.get(bi) or got.get(str(bi))
                    if r is None:  # the whole task failed (worker lost, Dask error)
                        r = {"status": "failed", "reason": res.get("error") or "task failed",
                             "model": {}, "inputs": {}, "warnings": []}
                    results[bi] = r
                    jf.write(json.dumps({"output": fps[bi], "result": r}, allow_nan=False)
                             + "\n")
                    done += 1
                jf.flush()
                if progress is not None:
                    progress(done, len(todo))
    except KeyboardInterrupt:
        eng.stop()
        raise
    finally:
        try:
            eng.close()
        except Exception:  # noqa: BLE001 - closing after an error must not hide it
            pass
    stats.ran += len(todo)
    stats.elapsed_s += time.perf_counter() - started
    return results


def _dask_threads(eng: Any) -> int | None:
    client = getattr(eng, "client", None)
    if client is None:
        return None
    try:
        return max(1, sum(client.nthreads().values()))
    except Exception:  # noqa: BLE001 - a guess for the chunk size only
        return None


# ----------------------------------------------------------------------------- the whole study
@dataclass
class StudyResult:
    """What a study did: its builds and their results, the summary and the files written."""

    study: Study
    builds: list[B.Build]
    results: dict[int, dict]
    summary: dict[str, Any]
    files: dict[str, str]
    run: RunStats

    @property
    def exit_code(self) -> int:
        """0 when every build ran (unstable and non-realizable builds are results, not
        failures), 1 when some failed."""
        return 0 if self.summary["counts"]["failed"] == 0 else 1


def output_files(study: Study) -> dict[str, str]:
    """Label -> path of every file a study writes (checked together before running)."""
    files = {"summary JSON": study.path_of(SUMMARY_JSON), "summary CSV": study.path_of(SUMMARY_CSV),
             "builds CSV": study.path_of(BUILDS_CSV),
             "build metrics CSV": study.path_of(BUILD_METRICS_CSV),
             "run information": study.path_of(RUN_INFO)}
    if study.plots:
        from simwave.tolerance.plots import plot_files

        files.update(plot_files(study))
    return files


def run_study(study: Study, *, jobs: int | None = None, scheduler: Any = None,
              connect_timeout_s: float | None = None, force: bool = False,
              engine: Any = None, progress: Callable[[int, int], None] | None = None
              ) -> StudyResult:
    """Run a study on an engine and write its summary, records and plots.

    Parameters
    ----------
    study : Study
        From :func:`load_study` (or built in Python).
    jobs, scheduler, connect_timeout_s
        As for :func:`simwave.batch.run_batch`: local worker processes, or a Dask
        scheduler address.
    force : bool
        Rerun builds that an earlier run of the same study finished (by default they
        are taken from the journal in the output folder: the study resumes).
    engine : optional
        An engine object (tests); overrides ``jobs`` and ``scheduler``.

    Returns
    -------
    StudyResult
    """
    from simwave.batch.summary import write_text_atomic
    from simwave.signals.atomic import guard_outputs

    os.makedirs(study.output_dir, exist_ok=True)
    files = output_files(study)
    guard_outputs(files, {"the study file": study.path,
                          **{f"input {i + 1}": p for i, p in enumerate(study.input_files)}})
    stats = RunStats()
    kw = dict(jobs=jobs, scheduler=scheduler, connect_timeout_s=connect_timeout_s, force=force,
              engine=engine, progress=progress, stats=stats)
    builds, notes = plan_builds(study)
    results = execute_builds(study, builds, **kw)
    if study.analysis == "corners" and len(B.toleranced(study.parameters)) > B.MAX_FULL_CORNERS:
        from simwave.tolerance.summary import summarize

        first = summarize(study, builds, results, [])
        signs = [r["sensitivity"] for r in first["metrics"] + first["model"]]
        first_count = len(builds)
        for label, values in B.pointed_corners(study.parameters, signs):
            builds.append(B.Build(len(builds), "corner", values, label))
        results.update(execute_builds(study, builds[first_count:], **kw))
    from simwave.tolerance.summary import (
        build_metrics_csv, builds_csv, summarize, summary_csv,
    )

    doc = summarize(study, builds, results, notes + list(study.warnings))
    write_text_atomic(files["summary JSON"],
                      json.dumps(_json_safe(doc), indent=1, allow_nan=False) + "\n")
    write_text_atomic(files["summary CSV"], summary_csv(doc))
    write_text_atomic(files["builds CSV"], builds_csv(study, builds, results))
    write_text_atomic(files["build metrics CSV"], build_metrics_csv(study, builds, results))
    warn_texts = sorted({w for r in results.values() for w in r.get("warnings") or []})
    info = {"engine": stats.engine or "none (every build reused)", "builds_run": stats.ran,
            "builds_reused": stats.reused, "elapsed_s": stats.elapsed_s,
            "builds_per_second": stats.ran / stats.elapsed_s if stats.elapsed_s else None,
            "input_runs_per_second": stats.ran * len(study.inputs) / stats.elapsed_s
            if stats.elapsed_s else None,
            "warnings": warn_texts}
    write_text_atomic(files["run information"],
                      json.dumps(_json_safe(info), indent=1, allow_nan=False) + "\n")
    if study.plots:
        from simwave.tolerance.plots import draw_all

        draw_all(study, builds, results, doc, files)
    return StudyResult(study, builds, results, doc, files, stats)


def _json_safe(value: Any) -> Any:
    """Non-finite floats become None, tuples lists, keys text (JSON has no NaN)."""
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {str(k): _json_safe(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_json_safe(v) for v in value]
    return value
