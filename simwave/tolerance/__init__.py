"""Tolerance studies: will a design still meet its specification when it is built?

A system written with named parameters (``1/(R*C*s + 1)``) whose values carry
tolerances (``R = "10k ±1%"``) is run on the user's own recordings as many builds:
every combination of tolerance limits (corners), random builds from the stated
distributions (Monte Carlo, seeded), or a sweep of one or two parameters with a
design search. Each build runs through the same simulate/measure pipeline as
``simwave run``, on the batch engines (in-process, local pool, Dask), resumably;
the summary gives, per input and per key metric, the nominal value, the spread,
the share of builds inside the limits with its confidence interval and the
parameter that moves the metric most.

Typical use::

    from simwave.tolerance import load_study, run_study
    result = run_study(load_study("study.toml"), jobs=2)
    print(result.summary["all_limits"], result.files["summary CSV"])
"""

from simwave.tolerance.builds import MAX_FULL_CORNERS, Build
from simwave.tolerance.stats import transfer_sensitivity, wilson_interval
from simwave.tolerance.study import Study, StudyError, StudyResult, load_study, run_study
from simwave.tolerance.worker import SystemTemplate, model_figures

__all__ = [
    "Build", "MAX_FULL_CORNERS", "Study", "StudyError", "StudyResult", "SystemTemplate",
    "load_study", "model_figures", "run_study", "transfer_sensitivity", "wilson_interval",
]
