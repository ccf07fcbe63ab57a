"""Batch runs: many inputs x candidate systems, on a local process pool or a Dask cluster.

Every (input, system) pair goes through :func:`simwave.run.execute`, the same
pipeline as ``simwave run``; the batch adds planning (a TOML description or
the command-line quick form), engines, failure isolation, resume and a
summary table with a per-system comparison.

Typical use::

    from simwave.batch import load_description, run_batch
    plan = load_description("campaign.toml")
    result = run_batch(plan, jobs=4)
    print(result.counts, result.summary_csv)
"""

from simwave.lazy import lazy_exports

__all__ = [
    "BatchPlan", "BatchResult", "InputEntry", "Pair", "PairTask", "SystemEntry",
    "columns", "format_comparison", "load_description", "quick_plan", "run_batch", "run_pair",
]

lazy_exports(__name__, {
    **dict.fromkeys(("BatchPlan", "InputEntry", "Pair", "SystemEntry", "load_description",
                     "quick_plan"), "simwave.batch.plan"),
    "BatchResult": "simwave.batch.runner",
    "run_batch": "simwave.batch.runner",
    "columns": "simwave.batch.summary",
    "format_comparison": "simwave.batch.summary",
    "PairTask": "simwave.batch.tasks",
    "run_pair": "simwave.batch.tasks",
})
