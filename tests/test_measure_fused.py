"""Fused measuring passes give the same values as the plain numpy steps they replace.

The long-record work (issue 13's long batch pairs, issue 11's measuring cost) rewrote some
per-segment steps with fewer passes and temporaries; each must return exactly what the
plain numpy expression returned (the golden JSON comparisons depend on it). The plain
expressions here are the ones the code used before, kept as the reference.
"""

from __future__ import annotations

import numpy as np
import pytest

from simwave.measure import segments as seg


def _runs_plain(d: np.ndarray, h: float):
    state = np.where(d > h, 1, np.where(d < -h, -1, 0))
    nz = np.flatnonzero(state)
    if nz.size == 0:
        return nz, nz
    sv = state[nz]
    first = np.concatenate(([0], np.flatnonzero(sv[1:] != sv[:-1]) + 1))
    return nz[first], sv[first]


def _records(rng, count):
    for t in range(count):
        n = int(rng.integers(1, 400))
        kind = t % 4
        if kind == 0:  # whole numbers: samples exactly at 0 and exactly at +-h
            d = np.round(rng.standard_normal(n) * rng.choice([0.5, 2.0, 5.0]))
        elif kind == 1:  # a random walk: long runs
            d = np.cumsum(rng.standard_normal(n))
        elif kind == 2:  # damped ringing with noise, as a segment's end holds it
            k = np.arange(n)
            d = np.exp(-k / 80.0) * np.cos(k / 7.0) + 0.01 * rng.standard_normal(n)
        else:  # signed zeros and subnormals
            d = rng.choice([0.0, -0.0, 5e-324, -5e-324, 1.0, -1.0], size=n)
        yield d


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_sign_runs_match_the_plain_steps(seed):
    rng = np.random.default_rng(seed)
    for d in _records(rng, 1500):
        for h in (0.0, 0.5, 1.0, 2.0, 5e-324):
            a, b = _runs_plain(d, h)
            c, e = seg._sign_runs(d, h)
            assert np.array_equal(a, c) and np.array_equal(b, e)


@pytest.mark.parametrize("piece", [1, 3, seg.ARRIVAL_PIECE])
def test_first_arrival_matches_the_plain_search(piece, monkeypatch):
    monkeypatch.setattr(seg, "ARRIVAL_PIECE", piece)
    rng = np.random.default_rng(7)
    for d in _records(rng, 1500):
        if d[0] == 0:
            continue
        hits = np.flatnonzero(np.sign(d[0]) * d <= 0)
        assert seg._first_arrival(d) == (int(hits[0]) if hits.size else -1)
