"""scipy's compiled loops that running a model needs, loaded without their packages.

Running a model needs two of scipy.signal's compiled loops: sosfilt's (second-order
sections, ``scipy/signal/_sosfilt.pyx``) and lfilter's (the increment form's first-order
recursions, ``_sigtools._linear_filter``), and designing one needs one LAPACK routine
(ggev, the generalized eigenvalues behind the hold methods' zeros) from scipy.linalg's
Fortran module. Importing the packages to reach them costs about 1 s for scipy.signal
on this machine class (its ``__init__`` loads scipy.stats, scipy.interpolate, the
window and peak-finding modules) and 0.15-0.2 s for scipy.linalg, which every batch
worker paid before its first pair: more than a whole batch of 60 ten-second pairs'
work on two workers. A submodule cannot be imported without its package, so the
extension modules are loaded here from their files under their own names and
registered in ``sys.modules``: a later ``import scipy.signal`` (a filter design,
``to_scipy``) finds them there and uses the same module objects (a Cython module can be
initialized only once per process). One difference remains: the package then lacks the
attribute (``scipy.signal._sosfilt``), since Python sets it only on a module it loads
itself; ``import scipy.signal._sosfilt`` and scipy's own ``from . import _sigtools``
still find it (scipy's signal and linalg test suites, 13,261 tests, pass with this module
loaded first). If a file is not where this scipy keeps it, the public calls are used
instead (the name below is then None; same numbers, slower), as when a routine fails a
trial on a case with a known answer when this module loads (another scipy may have changed
a private routine's arguments or results).

The calls are the same ones the public functions make for the arguments simwave gives
them, so the numbers are the same bits (tests/test_kernels.py compares them with
``scipy.signal.sosfilt`` and ``lfilter`` and checks, in a fresh process, that running
and measuring a file does not import scipy.signal).
"""

from __future__ import annotations

import importlib.machinery
import importlib.util
import os
import sys
from types import ModuleType
from typing import Any

import numpy as np

__all__ = ["sosfilt_loop", "linear_filter", "dggev", "lfilter", "signal_package"]


def _load(package: str, name: str) -> ModuleType | None:
    """The extension module ``scipy.<package>.<name>`` from its file, or None."""
    full = f"scipy.{package}.{name}"
    if full in sys.modules:
        return sys.modules[full]
    try:
        import scipy

        folder = os.path.join(os.path.dirname(scipy.__file__), package)
        for suffix in importlib.machinery.EXTENSION_SUFFIXES:
            path = os.path.join(folder, name + suffix)
            if os.path.isfile(path):
                break
        else:
            return None
        spec = importlib.util.spec_from_file_location(full, path)
        if spec is None or spec.loader is None:
            return None
        module = importlib.util.module_from_spec(spec)
        sys.modules[full] = module
        try:
            spec.loader.exec_module(module)
        except BaseException:
            sys.modules.pop(full, None)
            raise
        return module
    except Exception:  # another layout or build: the public calls serve
        return None


def _attribute(module: ModuleType | None, name: str) -> Any:
    return getattr(module, name, None) if module is not None else None


def _works(routine: Any, trial) -> Any:
    """``routine`` if ``trial(routine)`` runs and answers True, else None.

    These are private routines: another scipy may have changed what they take or return.
    Each is tried once, on a case whose answer is known exactly, when this module is
    loaded; one that fails leaves its callers on scipy's public functions.
    """
    if routine is None:
        return None
    try:
        return routine if trial(routine) else None
    except Exception:
        return None


def _sosfilt_trial(loop: Any) -> bool:
    # one section y[n] = x[n] + 0.5 y[n-1]: a unit impulse gives 1, 0.5, 0.25 (exact)
    x = np.array([[1.0, 0.0, 0.0]])
    loop(np.array([[1.0, 0.0, 0.0, 1.0, -0.5, 0.0]]), x, np.zeros((1, 1, 2)))
    return bool(np.array_equal(x, [[1.0, 0.5, 0.25]]))


def _lfilter_trial(loop: Any) -> bool:
    y = loop(np.ones(1), np.array([1.0, -0.5]), np.array([1.0, 0.0, 0.0]), 0)
    return bool(np.array_equal(y, [1.0, 0.5, 0.25]))


def _ggev_trial(routine: Any) -> bool:
    # the pencil (diag(2, 3), I): eigenvalues 2 and 3, as alpha / beta
    m, n = np.diag([2.0, 3.0]), np.eye(2)
    lwork = int(routine(m, n, lwork=-1)[-2][0].real)
    alphar, alphai, beta, _, _, _, info = routine(m, n, 0, 0, lwork, 0, 0)
    return info == 0 and not np.any(alphai) and sorted(alphar / beta) == [2.0, 3.0]


#: sosfilt's own loop: ``_sosfilt(sos, x, zi)`` filters the C-contiguous float64 rows of
#: x in place through the C-contiguous sections (n_sections, 6) with states zi
#: (rows, n_sections, 2), updated in place. None where it could not be loaded or fails
#: its trial.
sosfilt_loop = _works(_attribute(_load("signal", "_sosfilt"), "_sosfilt"), _sosfilt_trial)

#: lfilter's loop: ``_linear_filter(b, a, x, axis)``. None where it could not be loaded or
#: fails its trial.
linear_filter = _works(_attribute(_load("signal", "_sigtools"), "_linear_filter"),
                       _lfilter_trial)

#: LAPACK's dggev as scipy.linalg wraps it (``get_lapack_funcs(("ggev",), (M, N))[0]``
#: for float64 M and N is this function). None where it could not be loaded or fails its
#: trial.
dggev = _works(_attribute(_load("linalg", "_flapack"), "dggev"), _ggev_trial)


def signal_package() -> ModuleType:
    """``scipy.signal`` itself, imported on first use (about a second)."""
    import scipy.signal

    return scipy.signal


def lfilter(b: np.ndarray, a: np.ndarray, x: np.ndarray, axis: int = -1) -> np.ndarray:
    """``scipy.signal.lfilter(b, a, x, axis)`` for 1-D float64 b and a, len(a) > 1, no zi.

    For those arguments lfilter itself calls ``_linear_filter(b, a, x, axis)`` on
    ``np.atleast_1d`` of b and a and ``np.asarray`` of x (scipy 1.17,
    scipy/signal/_signaltools.py), which is what this does.
    """
    b = np.atleast_1d(b)
    a = np.atleast_1d(a)
    if linear_filter is None or a.size < 2 or b.ndim != 1 or a.ndim != 1:
        return signal_package().lfilter(b, a, x, axis=axis)
    return linear_filter(b, a, np.asarray(x), axis)

