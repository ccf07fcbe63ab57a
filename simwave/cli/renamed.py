"""Old option spellings kept for one release: hidden, warned about, mapped onto the new one."""

from __future__ import annotations

import functools
from typing import Any, Callable

import click
from click.core import ParameterSource

from simwave.errors import SimwaveError
from simwave.vocabulary import warn_renamed


def renamed_option(*old_decls: str, new: str, param: str, **attrs: Any) -> Callable:
    """Accept ``old_decls`` (hidden from ``--help``) as the old spelling of option ``new``,
    whose click parameter name is ``param``: the value goes to ``param`` with a
    deprecation warning; giving both spellings is an error."""
    dest = f"old_spelling__{param}"
    old = "/".join(old_decls)

    def decorate(func: Callable) -> Callable:
        @functools.wraps(func)
        def wrapper(*args: Any, **kwargs: Any) -> Any:
            value = kwargs.pop(dest, None)
            if value is not None and value is not False:
                ctx = click.get_current_context()
                if ctx.get_parameter_source(param) not in (ParameterSource.DEFAULT, None):
                    raise SimwaveError(f"{old} and {new} are the same option; give {new} only")
                warn_renamed(old, new)
                kwargs[param] = value
            return func(*args, **kwargs)

        return click.option(*old_decls, dest, hidden=True, default=None, **attrs)(wrapper)

    return decorate
