"""Pieces of a record joined without a copy where they already lie one after the other.

Measuring reads a record in blocks; when the record is held in memory, consecutive blocks
are consecutive rows of one array, and joining them is a view of those rows, not a copy.
:func:`joined_rows` serves the two streams' re-chunking (``source``, 2-D blocks) and
:func:`joined_1d` a segment's samples (``segments``, 1-D columns). Either gives the values
and C order a concatenation would (tests/test_measure_fused.py).
"""

from __future__ import annotations

import numpy as np

__all__ = ["array_root", "c_rows", "joined_1d", "joined_rows"]


def array_root(a: np.ndarray) -> np.ndarray:
    """The array whose memory ``a`` is a view of (``a`` itself when it owns its data)."""
    while isinstance(a.base, np.ndarray):
        a = a.base
    return a


def c_rows(p: np.ndarray) -> bool:
    """A 2-D block in plain C order (rows one after the other, each contiguous; the
    stride of an axis of length 1, e.g. a column added as a new axis, does not matter)."""
    if p.ndim != 2 or not p.flags.c_contiguous:
        return False
    rows, width = p.shape
    return (width <= 1 or p.strides[1] == p.itemsize) and (
        rows <= 1 or p.strides[0] == p.itemsize * width)


def joined_rows(parts: list[np.ndarray]) -> np.ndarray:
    """The pieces as one array: the piece itself when there is one; else, when they lie one
    after the other in the memory of one C-ordered array (consecutive row slices of a
    record held in memory), a view of those rows, read-only (the values and C order a copy
    would hold); else their concatenation (a copy)."""
    if len(parts) == 1:
        return parts[0]
    p0 = parts[0]
    root = array_root(p0)
    if (p0.ndim == 2 and root.flags.c_contiguous and root.dtype == p0.dtype
            and all(c_rows(p) and p.dtype == p0.dtype and p.shape[1] == p0.shape[1]
                    for p in parts)):
        width = p0.shape[1]
        row = p0.itemsize * width
        at = p0.ctypes.data
        for p in parts:
            if p.ctypes.data != at or array_root(p) is not root:
                break
            at += p.shape[0] * row
        else:
            first = (p0.ctypes.data - root.ctypes.data) // p0.itemsize
            rows = sum(p.shape[0] for p in parts)
            if row and 0 <= first and first + rows * width <= root.size:
                view = root.reshape(-1)[first:first + rows * width].reshape(rows, width)
                view.flags.writeable = False
                return view
    return np.concatenate(parts)


def joined_1d(parts: list[np.ndarray]) -> np.ndarray:
    """1-D float64 pieces as one C-contiguous array: a view of the record they lie in, one
    after the other, when they do (slices of one record in memory), else a copy."""
    return np.ascontiguousarray(joined_rows([p.reshape(-1, 1) for p in parts]).reshape(-1))
