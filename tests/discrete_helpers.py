"""Small helpers shared by the discretization exactness tests."""

from __future__ import annotations

import warnings

import numpy as np
import scipy.signal as sig

from simwave.discrete import ModelWarning, discretize


def quiet(*args, **kw):
    """``discretize`` with its model warnings (aliasing, warping...) silenced."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelWarning)
        return discretize(*args, **kw)


def butter(n: int, fc: float):
    """An analog Butterworth low-pass of order n at fc Hz as (zeros, poles, gain), scipy.signal."""
    return sig.butter(n, 2 * np.pi * fc, analog=True, output="zpk")
