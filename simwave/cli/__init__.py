"""Command-line interface: thin click commands over the public API.

Each command lives in its own ``cmd_*.py`` module and registers itself on
:data:`main` when imported below.
"""

from simwave.cli.app import main

# Command modules (each adds one command to ``main``): keep one import per line.
from simwave.cli import cmd_inspect  # noqa: F401,E402
from simwave.cli import cmd_run  # noqa: F401,E402
from simwave.cli import cmd_gen  # noqa: F401,E402
from simwave.cli import cmd_info  # noqa: F401,E402
from simwave.cli import cmd_measure  # noqa: F401,E402
from simwave.cli import cmd_demo  # noqa: F401,E402
from simwave.cli import cmd_batch  # noqa: F401,E402
from simwave.cli import cmd_tolerance  # noqa: F401,E402

__all__ = ["main"]
