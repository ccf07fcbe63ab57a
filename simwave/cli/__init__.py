"""Command-line interface: thin click commands over the public API.

Each command lives in its own ``cmd_*.py`` module, registered on :data:`main`
when the group first needs it (see ``COMMANDS`` in :mod:`simwave.cli.app`).

Importing this package means running the command line: it asks for one BLAS
thread (unless the user set a count) before anything loads numpy, because
simwave's linear algebra is small (see :mod:`simwave.threads`).
"""

from simwave.threads import single_thread_blas

single_thread_blas()

from simwave.cli.app import main  # noqa: E402

__all__ = ["main"]
