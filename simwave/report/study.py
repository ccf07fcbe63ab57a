"""What a report shows, gathered from what a run or a batch wrote.

A :class:`Study` is the rows of the summary (exactly as ``summary.json`` holds
them), the per-system comparison, the systems with their tolerance bands, and
one :class:`PairView` per (input, system) pair: where its output, metrics file
and input are, and how to read them back. It is made from a batch output
folder (:func:`load_folder`), from a batch just run (:func:`from_batch`), or
from one ``simwave run`` (:func:`from_run`).
"""

from __future__ import annotations

import json
import os
import re
from dataclasses import dataclass, field
from typing import Any, Mapping

from simwave.errors import SimwaveError

#: The summary file a batch writes (``[output] summary`` may rename its stem).
SUMMARY_JSON = "summary.json"


class ReportError(SimwaveError):
    """A report cannot be made: nothing to report on, or a file that cannot be read or written."""


@dataclass
class PairView:
    """One (input, system) pair as the report needs it.

    Paths are absolute; ``output`` and ``metrics_path`` are None when the pair
    wrote nothing (failed or not run).
    """

    index: int
    input: str
    system: str
    rows: list[dict[str, Any]]
    output: str | None = None
    metrics_path: str | None = None
    source: str | None = None
    input_read: dict[str, Any] = field(default_factory=dict)
    output_read: dict[str, Any] = field(default_factory=dict)
    doc: dict[str, Any] | None = None
    doc_error: str | None = None

    @property
    def status(self) -> str:
        return str(self.rows[0].get("status") or "") if self.rows else ""

    @property
    def error(self) -> str | None:
        return self.rows[0].get("error") if self.rows else None

    @property
    def warnings(self) -> list[str]:
        """The pair's warnings: from its metrics file when read, else from the summary row."""
        run = (self.doc or {}).get("run") or {}
        if run.get("warnings"):
            return [str(w) for w in run["warnings"]]
        text = self.rows[0].get("warnings") if self.rows else None
        return [w for w in str(text).split(" | ") if w] if text else []

    @property
    def anchor(self) -> str:
        return "pair-" + str(self.index)

    @property
    def label(self) -> str:
        return f"{self.input} \u00d7 {self.system}"

    def load(self) -> dict[str, Any] | None:
        """The pair's metrics file (``{"run", "metrics"}``), read once; None when absent."""
        if self.doc is not None or self.doc_error is not None or not self.metrics_path:
            return self.doc
        try:
            with open(self.metrics_path, encoding="utf-8") as fh:
                self.doc = json.load(fh)
        except FileNotFoundError:
            self.doc_error = f"metrics file {self.metrics_path} is missing"
        except (OSError, ValueError) as exc:
            self.doc_error = f"metrics file {self.metrics_path} cannot be read ({exc})"
        return self.doc

    def channel(self, name: Any) -> dict[str, Any]:
        """The measured channel ``name`` of the metrics file ({} when absent)."""
        for ch in ((self.load() or {}).get("metrics") or {}).get("channels") or []:
            if ch.get("name") == name:
                return ch
        return {}


@dataclass
class Study:
    """Everything one report page shows.

    Attributes
    ----------
    kind : str
        ``"batch"`` or ``"run"``.
    folder : str
        The folder the page's links are relative to (where the report is written).
    rows, columns : list
        The summary rows and their column order, exactly as the summary holds them.
    comparison : dict
        Per-system worst cases (:func:`simwave.batch.summary.compare_systems`).
    systems : dict
        System name -> ``{"definition", "run_options", "limits"}``.
    summary_files : list of str
        The summary files (CSV, JSON) the page links to.
    """

    kind: str
    folder: str
    rows: list[dict[str, Any]]
    columns: list[str]
    comparison: dict[str, Any]
    systems: dict[str, Any]
    pairs: list[PairView]
    counts: dict[str, Any] = field(default_factory=dict)
    measure_options: dict[str, Any] = field(default_factory=dict)
    engine: str | None = None
    elapsed_s: float | None = None
    interrupted: bool = False
    description: str | None = None
    summary_files: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    #: The folder the rows' ``output`` and ``metrics_file`` names are relative to.
    data_dir: str = ""
    #: What a study of another kind brings (a tolerance study: its summary document).
    extra: dict[str, Any] = field(default_factory=dict)

    def pair_of(self, row: Mapping[str, Any]) -> PairView | None:
        """The pair a row belongs to (by input and system), or None."""
        index = getattr(self, "_index", None)
        if index is None or len(index) != len(self.pairs):
            index = self._index = {(p.input, p.system): p for p in self.pairs}
        return index.get((row.get("input"), row.get("system")))


# ----------------------------------------------------------------------------- folders
def find_summary(folder: str) -> str:
    """The batch summary JSON in ``folder`` or one level below it (a demo folder).

    Raises
    ------
    ReportError
        ``folder`` is not a folder, or holds no batch summary.
    """
    if not os.path.isdir(folder):
        raise ReportError(f"{folder}: not a folder; give the output folder of a batch "
                          "(where summary.json is)")
    here = os.path.join(folder, SUMMARY_JSON)
    if os.path.isfile(here):
        return here
    below = sorted(os.path.join(folder, d, SUMMARY_JSON) for d in os.listdir(folder)
                   if os.path.isfile(os.path.join(folder, d, SUMMARY_JSON)))
    if len(below) == 1:
        return below[0]
    if len(below) > 1:
        names = ", ".join(os.path.relpath(p, folder) for p in below)
        raise ReportError(f"{folder}: holds several batch summaries ({names}); give the one "
                          "folder to report on")
    raise ReportError(f"{folder}: no {SUMMARY_JSON} (batch) or tolerance-summary.json here or "
                      "one folder down; give the output folder of a batch or tolerance study")


def read_json(path: str) -> Any:
    """A JSON file's content, or a one-line ReportError saying why it cannot be read."""
    try:
        with open(path, encoding="utf-8") as fh:
            return json.load(fh)
    except OSError as exc:
        raise ReportError(f"{path}: cannot be read ({exc.strerror or exc})") from None
    except ValueError as exc:
        raise ReportError(f"{path}: not valid JSON ({exc})") from None


def _read_summary(path: str) -> dict[str, Any]:
    doc = read_json(path)
    if not isinstance(doc, dict) or not isinstance(doc.get("rows"), list):
        raise ReportError(f"{path}: not a simwave batch summary (no 'rows' list)")
    for i, row in enumerate(doc["rows"]):
        if not isinstance(row, dict) or "input" not in row or "system" not in row:
            raise ReportError(f"{path}: row {i + 1} has no input and system")
    return doc


def load_folder(folder: str) -> Study:
    """The study of a batch or tolerance-study output folder (or a folder holding one).

    Reader options for each input come from the summary's ``inputs`` list when
    it has one, else from the batch description it names (when it still loads),
    else the input is read with the summary row's rate as a fallback.
    """
    folder = os.fspath(folder)
    if os.path.isdir(folder) and not os.path.isfile(os.path.join(folder, SUMMARY_JSON)):
        from simwave.report.tolerance import is_tolerance_folder, load_tolerance

        found = is_tolerance_folder(folder)
        if found:
            return load_tolerance(found)
    summary = find_summary(folder)
    doc = _read_summary(summary)
    out_dir = os.path.dirname(os.path.abspath(summary))
    plan = _plan_of(doc, out_dir)
    study = _from_summary_doc(doc, out_dir, plan)
    stem = os.path.splitext(summary)[0]
    study.summary_files = [p for p in (stem + ".csv", summary) if os.path.isfile(p)]
    return study


def _plan_of(doc: Mapping[str, Any], out_dir: str):
    """The batch plan behind a summary, when its description still loads (else None)."""
    desc = doc.get("description")
    if not desc or not os.path.isfile(desc):
        return None
    import warnings

    from simwave.batch import load_description

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return load_description(desc, output_dir=out_dir)
    except SimwaveError:
        return None


def _group_rows(rows: list[dict[str, Any]]) -> list[tuple[str, str, list[dict[str, Any]]]]:
    groups: dict[tuple[str, str], list[dict[str, Any]]] = {}
    for row in rows:
        groups.setdefault((str(row["input"]), str(row["system"])), []).append(row)
    return [(i, s, rs) for (i, s), rs in groups.items()]


def _from_summary_doc(doc: Mapping[str, Any], out_dir: str, plan: Any = None) -> Study:
    rows = list(doc["rows"])
    by_label = {}
    if plan is not None:  # rows name a file input by its label, a generated one by its name
        for p in plan.pairs:
            by_label[(p.input.label, p.system.name)] = p
            by_label.setdefault((p.input.stem, p.system.name), p)
    recorded = {}
    for e in doc.get("inputs") or []:
        if isinstance(e, dict):
            recorded[str(e.get("label"))] = e
            if e.get("name"):
                recorded.setdefault(str(e["name"]), e)
    pairs = []
    for k, (inp, sysname, prs) in enumerate(_group_rows(rows)):
        first = prs[0]
        view = PairView(k, inp, sysname, prs)
        if first.get("output"):
            view.output = os.path.join(out_dir, str(first["output"]))
        if first.get("metrics_file"):
            view.metrics_path = os.path.join(out_dir, str(first["metrics_file"]))
        job = _job_of(plan, by_label.get((inp, sysname)), recorded.get(inp), doc, view)
        if job is not None:
            from simwave.run import input_read_options, output_read_options

            view.source = job.source
            view.input_read = input_read_options(job)
            view.output_read = output_read_options(job, len(prs))
        pairs.append(view)
    return Study(
        kind="batch", folder=out_dir, rows=rows,
        columns=list(doc.get("columns") or (list(rows[0]) if rows else [])),
        comparison=dict(doc.get("comparison") or {}), systems=dict(doc.get("systems") or {}),
        pairs=pairs, counts=dict(doc.get("counts") or {}),
        measure_options=dict(doc.get("measure_options") or {}), engine=doc.get("engine"),
        elapsed_s=doc.get("elapsed_s"), interrupted=bool(doc.get("interrupted")),
        description=doc.get("description"), data_dir=out_dir,
    )


def _job_of(plan: Any, pair: Any, recorded: Mapping[str, Any] | None,
            doc: Mapping[str, Any], view: PairView):
    """The run job of a pair, as far as the report needs it (input and output reading)."""
    from simwave.run import RunJob

    if pair is not None:
        return RunJob(system=None, **plan.job_fields(pair))
    if recorded is not None and recorded.get("source") and view.output:
        channels = recorded.get("channels")
        return RunJob(system=None, source=str(recorded["source"]), output=view.output,
                      rate=recorded.get("rate"),
                      channels=tuple(channels) if channels else None,
                      read_options=dict(recorded.get("read_options") or {}),
                      include_input=bool(doc.get("include_input")),
                      write_options=dict(doc.get("write_options") or {}))
    return None


def from_batch(result: Any, folder: str | None = None) -> Study:
    """The study of a batch just run (a :class:`simwave.batch.BatchResult`)."""
    plan = result.plan
    out_dir = os.path.abspath(folder or plan.output_dir)
    with open(result.summary_json, encoding="utf-8") as fh:
        doc = json.load(fh)
    study = _from_summary_doc(doc, os.path.abspath(plan.output_dir), plan)
    study.folder = out_dir
    study.summary_files = [result.summary_csv, result.summary_json]
    return study


def from_run(result: Mapping[str, Any], job: Any, folder: str) -> Study:
    """The study of one ``simwave run`` (the dict of :func:`simwave.run.execute` and its job).

    Its one pair's rows are made as a batch makes them, so the page reads the
    same whichever command wrote it.
    """
    from simwave.batch.summary import check_limits, columns
    from simwave.measure import key_metrics
    from simwave.run import input_read_options, output_read_options

    run = result["run"]
    metrics = result.get("metrics") or {}
    name = (run.get("provenance") or {}).get("system_name") or "system"
    label = _source_label(job.source)
    cols = columns()
    per_channel = key_metrics(metrics) if metrics else {}
    rows = []
    for ch in run.get("channels") or []:
        row = {c: None for c in cols}
        row.update(input=label, system=name, channel=ch.get("name"), status="ok",
                   reused=False, elapsed_s=run.get("elapsed_s"), samples=run.get("samples"),
                   duration_s=run.get("duration_s"), rate_hz=run.get("rate_hz"),
                   output=os.path.relpath(os.path.abspath(job.output), folder),
                   metrics_file=(os.path.relpath(os.path.abspath(job.metrics), folder)
                                 if job.metrics else None),
                   record_peak=ch.get("peak"), record_rms=ch.get("rms"),
                   warnings=" | ".join(run.get("warnings") or []) or None)
        for key, value in (per_channel.get(ch.get("name")) or {}).items():
            if key in row:
                row[key] = value
        row["limits"] = check_limits(row, {})
        rows.append(row)
    view = PairView(0, label, name, rows, output=os.path.abspath(job.output),
                    metrics_path=os.path.abspath(job.metrics) if job.metrics else None,
                    source=job.source, input_read=input_read_options(job),
                    output_read=output_read_options(job, len(run.get("channels") or [])),
                    doc={"run": run, "metrics": metrics or None})
    prov = run.get("provenance") or {}
    systems = {name: {"definition": prov.get("system"),
                      "run_options": {"method": run.get("method"), "initial": run.get("initial")},
                      "limits": {}}}
    return Study(kind="run", folder=folder, rows=rows, columns=cols, comparison={},
                 systems=systems, pairs=[view],
                 counts={"pairs": 1, "ok": 1, "failed": 0, "not_run": 0},
                 measure_options=dict(job.measure_options), elapsed_s=run.get("elapsed_s"),
                 summary_files=[os.path.abspath(job.metrics)] if job.metrics else [],
                 data_dir=folder)


def _source_label(source: str) -> str:
    """A short name for an input: its file name, or the generated signal's text."""
    if os.path.exists(source):
        return os.path.basename(source)
    return re.sub(r"\s+", " ", str(source))
