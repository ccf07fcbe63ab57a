"""Names a package exports, imported on first use.

``import simwave`` and the command line's ``--help`` then load only what they
touch: numpy and scipy.signal cost most of a second on a loaded 2-core machine.

Two public names share their name with a submodule (``simwave.measure``, the
function and the package; ``simwave.signals.generate``, the function and the
module). Python's import system sets ``package.<submodule>`` to the module
when the submodule is first imported, which would replace the function; the
package's module class below keeps the function in that case, as the eager
``from ... import`` of the old package files did.
"""

from __future__ import annotations

import importlib
import sys
import types
from typing import Any


class _LazyPackage(types.ModuleType):
    """Module class of a package with lazily imported public names."""

    _lazy_table: dict[str, str]

    def __getattr__(self, name: str) -> Any:  # called only when the name is not set yet
        module = self.__dict__.get("_lazy_table", {}).get(name)
        if module is None:
            raise AttributeError(f"module {self.__name__!r} has no attribute {name!r}")
        value = getattr(importlib.import_module(module), name)
        types.ModuleType.__setattr__(self, name, value)
        return value

    def __setattr__(self, name: str, value: Any) -> None:
        table = self.__dict__.get("_lazy_table", {})
        if (isinstance(value, types.ModuleType) and name in table
                and value.__name__ == f"{self.__name__}.{name}"):
            # The import system naming a submodule that shares a public name: keep the
            # public object (now if the submodule holds it, else on first access).
            if name not in value.__dict__:
                return
            value = value.__dict__[name]
        types.ModuleType.__setattr__(self, name, value)

    def __dir__(self) -> list[str]:
        return sorted(set(self.__dict__) | set(self.__dict__.get("_lazy_table", {})))


def lazy_exports(package: str, table: dict[str, str]) -> None:
    """Make ``package`` (a module being imported) export ``name`` from module ``table[name]``,
    imported on first access and then stored as a plain attribute."""
    module = sys.modules[package]
    module.__dict__["_lazy_table"] = dict(table)
    module.__class__ = _LazyPackage
