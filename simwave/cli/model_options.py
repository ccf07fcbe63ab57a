"""The discretization options shared by every command that builds a discrete model."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import click

from simwave.cli.renamed import renamed_option
from simwave.discrete import METHODS


def method_options(default: str | None = "ramp-invariant", when: str = "") -> Callable:
    """Click decorator adding ``-m/--method``, ``--prewarp`` and ``--match-hz``.

    ``default`` is the method when none is given (None: only with another option,
    as ``inspect --rate``); ``when`` is a phrase appended to the method's help.
    """
    method_help = (
        "Discretization method" + (f" {when}" if when else "") + ". ramp-invariant "
        "(the default) is exact for inputs linear between samples, the commonest reading "
        "of sampled data."
    )
    decorators = [
        click.option("-m", "--method", type=click.Choice(METHODS), default=default,
                     show_default=default is not None, help=method_help),
        click.option("--prewarp", metavar="HZ", default=None,
                     help="bilinear only: frequency where the discrete response equals "
                          "H(j2*pi*f) exactly."),
        click.option("--match-hz", "match_frequency", metavar="HZ", default=None,
                     help="matched-z only: frequency where the gain is matched when H(0) is "
                          "0 or infinite."),
        renamed_option("--match-frequency", new="--match-hz", param="match_frequency",
                       metavar="HZ"),
    ]

    def apply(func: Callable) -> Callable:
        for deco in reversed(decorators):
            func = deco(func)
        return func

    return apply


def model_kwargs(prewarp: str | None, match_frequency: str | None) -> dict[str, Any]:
    """``prewarp_hz`` / ``match_hz`` keyword arguments for discretize() (the given ones only)."""
    from simwave.model.parse import parse_number

    kwargs: dict[str, Any] = {}
    if prewarp is not None:
        kwargs["prewarp_hz"] = parse_number(prewarp, "--prewarp")
    if match_frequency is not None:
        kwargs["match_hz"] = parse_number(match_frequency, "--match-hz")
    return kwargs
