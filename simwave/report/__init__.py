"""One self-contained HTML page per run or batch: the comparison at a glance, then each pair.

Typical use::

    from simwave.report import write_report
    write_report("results")                 # a batch output folder -> results/report.html

The page holds its styles, its script and its figures (inline SVG); it fetches
nothing, so it opens from a file or an e-mail attachment. Content: the job in
one line; the cautions; every failure and warning with its message; the
per-system comparison with tolerance verdicts (word, shape and colour); a
sortable, filterable table of every (input, system, channel) row exactly as
the summary holds it, bounds shown as bounds and gaps with their reasons; each
system's discrete model against the analog H(s); each pair's input and output
with the measured transition annotated. Above :data:`MAX_DETAILED` pairs, the
worst cases are drawn and the rest link to their files.
"""

from __future__ import annotations

import os
from typing import Any, Callable

from simwave.report.page import MAX_DETAILED, render
from simwave.report.study import ReportError, Study, from_batch, from_run, load_folder

#: File name of the report inside a batch output folder.
REPORT_NAME = "report.html"


def write_report(
    source: Any,
    path: str | os.PathLike[str] | None = None,
    *,
    max_detailed: int = MAX_DETAILED,
    log: Callable[[str], None] | None = None,
) -> str:
    """Write the report page of a batch folder, a batch result or a study.

    Parameters
    ----------
    source : path, BatchResult or Study
        A batch output folder (or a folder holding one, such as the demo's), a
        :class:`simwave.batch.BatchResult`, or a :class:`Study`.
    path : path, optional
        The HTML file to write (default ``report.html`` in the batch output folder).
    max_detailed : int
        Most pairs drawn in full (default 60); beyond it the worst cases are
        drawn and the rest link to their files.
    log : callable, optional
        Called with a short line as each figure is drawn.

    Returns
    -------
    str
        The path written (atomically: an error leaves no file behind).

    Raises
    ------
    ReportError
        Nothing to report on, or the file cannot be written.
    """
    if isinstance(source, Study):
        study = source
    elif hasattr(source, "plan") and hasattr(source, "summary_json"):
        study = from_batch(source)
    else:
        study = load_folder(os.fspath(source))
    target = os.path.abspath(os.fspath(path)) if path is not None else os.path.join(
        study.folder, REPORT_NAME)
    check_report_path(target)
    study.folder = os.path.dirname(target)
    text = render(study, max_detailed=max_detailed, log=log)
    from simwave.batch.summary import write_text_atomic

    try:
        write_text_atomic(target, text)
    except OSError as exc:
        raise ReportError(f"{target}: cannot write the report ({exc.strerror or exc})") from None
    return target


def run_report_path(output: str | os.PathLike[str]) -> str:
    """Where ``simwave run --report`` writes the page: the output's name with ``.report.html``."""
    stem, _ = os.path.splitext(os.fspath(output))
    return stem + ".report.html"


def write_run_report(result: dict, job: Any, path: str | os.PathLike[str]) -> str:
    """Write the report page of one ``simwave run`` (the dict of :func:`simwave.run.execute`).

    When the run was not measured (no metrics file asked for), its output is
    measured here against its input, as ``--metrics`` would have done.
    """
    target = os.path.abspath(check_report_path(path))
    if not result.get("metrics"):
        from simwave.run import measure_run

        n = len(result["run"].get("channels") or [])
        result = {**result, "metrics": measure_run(job, job.system, n).to_dict()}
    study = from_run(result, job, os.path.dirname(target))
    return write_report(study, target)


def check_report_path(path: str | os.PathLike[str]) -> str:
    """Check a report target before any work: an ``.html`` name in a writable folder.

    Raises
    ------
    ReportError
        Another extension, a folder, or a folder that does not exist or is not writable.
    """
    p = os.fspath(path)
    if os.path.isdir(p):
        raise ReportError(f"{p}: is a folder, not a report file name (give NAME.html)")
    if os.path.splitext(p)[1].lower() not in (".html", ".htm"):
        raise ReportError(f"{p}: a report is an HTML page; use a file name ending in .html")
    from simwave.signals.atomic import check_target_folder

    check_target_folder(p, ReportError)
    return p


__all__ = ["write_report", "write_run_report", "run_report_path", "check_report_path",
           "load_folder", "from_batch", "from_run", "Study", "ReportError", "REPORT_NAME",
           "MAX_DETAILED"]
