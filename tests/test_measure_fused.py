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


def _aligned_plain(a, b):
    """The re-chunking as it was: pieces joined by concatenation (a copy) every time."""
    buf_a, buf_b, na, nb = [], [], 0, 0
    it_a, it_b = iter(a), iter(b)
    done_a = done_b = False
    while True:
        while not done_a and na <= nb:
            nxt = next(it_a, None)
            if nxt is None:
                done_a = True
            else:
                buf_a.append(nxt)
                na += nxt.shape[0]
        while not done_b and nb <= na:
            nxt = next(it_b, None)
            if nxt is None:
                done_b = True
            else:
                buf_b.append(nxt)
                nb += nxt.shape[0]
        m = min(na, nb)
        if m == 0:
            return
        ca = np.concatenate(buf_a) if len(buf_a) > 1 else buf_a[0]
        cb = np.concatenate(buf_b) if len(buf_b) > 1 else buf_b[0]
        yield ca[:m], cb[:m]
        buf_a = [ca[m:]] if ca.shape[0] > m else []
        buf_b = [cb[m:]] if cb.shape[0] > m else []
        na, nb = na - m, nb - m


def _pieces(rng, data, kind):
    """Blocks of ``data`` as a pass gets them: row slices of it (in memory), separate
    copies (a file read in blocks), or column selections (a reference channel), with the
    at-rest sample's row of zeros first or not."""
    n = data.shape[0]
    cuts = np.unique(np.concatenate(([0, n], rng.integers(0, n, size=int(rng.integers(0, 6))))))
    out = [np.zeros((1, data.shape[1]))] if kind % 2 else []
    for a, b in zip(cuts[:-1], cuts[1:], strict=True):
        piece = data[a:b]
        if kind // 2 == 1:
            piece = piece.copy()
        elif kind // 2 == 2:
            w = data.shape[1]
            piece = np.concatenate([piece, piece], axis=1)[:, list(range(w))]  # fancy: a copy
        elif kind // 2 == 3:
            piece = np.concatenate([piece, piece], axis=1)[:, 0:data.shape[1]]  # strided view
        out.append(piece)
    return out


def test_aligned_blocks_match_the_concatenating_rechunk():
    from simwave.measure import source

    rng = np.random.default_rng(3)
    views = 0
    for t in range(3000):
        n, width = int(rng.integers(1, 60)), int(rng.integers(1, 4))
        x = rng.standard_normal((n, width))
        y = rng.standard_normal((n, width))
        if width == 1 and t % 2:  # a 1-D record given a column axis: stride 0 on it
            x, y = rng.standard_normal(n)[:, None], rng.standard_normal(n)[:, None]
        ka, kb = int(rng.integers(0, 8)), int(rng.integers(0, 8))
        if ka % 2 != kb % 2:
            kb ^= 1  # the at-rest row goes before both streams or neither
        pa, pb = _pieces(rng, x, ka), _pieces(rng, y, kb)
        want = list(_aligned_plain(pa, pb))
        got = list(source._aligned(iter(pa), iter(pb)))
        assert len(want) == len(got)
        views += sum(np.shares_memory(g, x) for g, _ in got if g.shape[0] > 1 and ka < 2)
        for (wa, wb), (ga, gb) in zip(want, got, strict=True):
            for w, g in ((wa, ga), (wb, gb)):
                assert w.shape == g.shape and np.array_equal(w, g)
                # the memory order decides how later sums round: the same one
                assert w.flags.c_contiguous == g.flags.c_contiguous
                assert [st for st, d in zip(w.strides, w.shape, strict=True) if d > 1] == \
                    [st for st, d in zip(g.strides, g.shape, strict=True) if d > 1]
    assert views > 500  # in-memory records are given as views of their rows, not copies


def _windows_plain(size, blocks):
    """Window means, minima and maxima as the summary made them: carry joined to each block."""
    means, mins, maxs, carry = [], [], [], np.empty(0)
    for y in blocks:
        if carry.size:
            y = np.concatenate([carry, y])
        m = (y.size // size) * size
        if m:
            w = y[:m].reshape(-1, size)
            means.append(w.mean(axis=1))
            mins.append(w.min(axis=1))
            maxs.append(w.max(axis=1))
        carry = np.array(y[m:], dtype=np.float64)
    return [np.concatenate(a) if a else np.empty(0) for a in (means, mins, maxs)]


def test_window_summary_matches_joining_the_carry():
    from simwave.measure import plateaus as pl

    rng = np.random.default_rng(5)
    for _ in range(400):
        size = int(rng.integers(1, 50))
        n = int(rng.integers(0, 2000))
        x = rng.standard_normal((n, 2)) * 10.0 ** rng.integers(-3, 4)
        cuts = np.unique(np.concatenate(([0, n], rng.integers(0, n + 1, size=5))))
        col = int(rng.integers(0, 2))
        blocks = [x[a:b, col] for a, b in zip(cuts[:-1], cuts[1:], strict=True)]
        stats = pl.WindowStats(size)
        for blk in blocks:
            stats.feed(blk)
        got = [np.concatenate(a) if a else np.empty(0) for a in (stats.means, stats.mins,
                                                                  stats.maxs)]
        for w, g in zip(_windows_plain(size, blocks), got, strict=True):
            assert w.tobytes() == g.tobytes()
        assert stats._carry.tobytes() == np.asarray(x[n - n % size if n else 0:, col]).tobytes()


def test_histogram_columns_match_the_block():
    from simwave.measure import levels as lv

    rng = np.random.default_rng(9)
    x = np.column_stack([rng.standard_normal(50000), 0.2 + 1e-3 * rng.standard_normal(50000)])
    lo, hi = x.min(axis=0), x.max(axis=0)
    a, b = lv.LevelHistogram(lo, hi), lv.LevelHistogram(lo, hi)
    for s in range(0, 50000, 7000):
        blk = x[s:s + 7000]
        for c in range(2):  # the plain expression, as add() computed it
            idx = ((blk[:, c] - a.lo[c]) * a._scale[c]).astype(np.int64)
            np.clip(idx, 0, a.n_bins - 1, out=idx)
            a.counts[c] += np.bincount(idx, minlength=a.n_bins)
            a.sums[c] += np.bincount(idx, weights=blk[:, c], minlength=a.n_bins)
        b.add_columns([np.ascontiguousarray(blk[:, 0]), blk[:, 1]])
    assert np.array_equal(a.counts, b.counts) and a.sums.tobytes() == b.sums.tobytes()


def test_median_in_place_matches_numpy():
    rng = np.random.default_rng(13)
    for t in range(3000):
        n = int(rng.integers(1, 300))
        if t % 3 == 0:  # ties, signed zeros
            a = rng.choice([0.0, -0.0, 1.0, -1.0, 2.5], size=n)
        else:
            a = rng.standard_normal(n)
        want = float(np.median(a))
        got = seg.median_in_place(a.copy())
        assert np.array_equal(np.float64(want), np.float64(got))
        assert np.signbit(want) == np.signbit(got)


def _long_arrays(rng):
    """Arrays long enough for the bracketed selection, of the kinds segment windows hold."""
    for t in range(400):
        n = int(rng.integers(seg.BRACKET_MIN, 120_000))
        kind = t % 9
        if kind == 0:  # ties, signed zeros
            yield rng.choice([0.0, -0.0, 1.0, -1.0, 2.5], size=n)
        elif kind == 1:  # a slow approach: sorted
            yield np.sort(rng.standard_normal(n))
        elif kind == 2:
            yield np.sort(rng.standard_normal(n))[::-1].copy()
        elif kind == 3:  # constant: no bracket narrows it
            yield np.full(n, rng.standard_normal())
        elif kind == 4:  # 50 Hz hum on a level, 48 kHz
            hum = np.sin(np.arange(n) * 2 * np.pi * 50 / 48000)
            yield 0.3 + hum + 1e-3 * rng.standard_normal(n)
        elif kind == 5:  # a square wave: two values, nearly
            yield np.where(np.arange(n) % 1024 < 512, 1.0, -1.0) + 1e-9 * rng.standard_normal(n)
        elif kind == 6:  # heavy tails
            yield rng.standard_cauchy(n)
        elif kind == 7:  # quantised (a 2-bit-ish ADC)
            yield np.round(rng.standard_normal(n) * 3) / 4
        else:  # the sample every n // 1024 values sees only outliers: the bracket misses
            a = 1e-3 * rng.standard_normal(n)
            a[:: max(1, n // seg.BRACKET_SAMPLE)] = 1e9
            yield a


def test_median_in_place_long_arrays_match_numpy():
    # the bracketed selection (arrays of BRACKET_MIN values or more) against np.median
    rng = np.random.default_rng(29)
    for a in _long_arrays(rng):
        want = float(np.median(a))
        got = seg.median_in_place(a.copy())
        assert np.float64(want).tobytes() == np.float64(got).tobytes()


def test_bracket_narrows_noise_and_keeps_the_ranks():
    rng = np.random.default_rng(31)
    a = 0.3 + 1e-3 * rng.standard_normal(80_640)
    n = a.size
    h = n >> 1
    inner, i, j = seg._bracketed(a.copy(), h - 1, h)
    assert inner.size < n // 5  # narrowed to a small part of the window
    s = np.sort(a)
    inner.partition((i, j))
    assert (inner[i], inner[j]) == (s[h - 1], s[h])
    # a bracket that misses the middle (the sample sees only outliers) leaves it whole
    b = a.copy()
    b[:: n // seg.BRACKET_SAMPLE] = 1e9
    left, i2, j2 = seg._bracketed(b.copy(), h - 1, h)
    assert left.size == n and (i2, j2) == (h - 1, h)
    assert seg.median_in_place(b.copy()) == float(np.median(b))


def test_segment_parts_joined_as_a_copy_would():
    rng = np.random.default_rng(17)
    for t in range(2000):
        n = int(rng.integers(1, 80))
        width = int(rng.integers(1, 3))
        data = rng.standard_normal((n, width))
        cuts = np.unique(np.concatenate(([0, n], rng.integers(0, n + 1, size=4))))
        parts = [data[a:b, width - 1] for a, b in zip(cuts[:-1], cuts[1:], strict=True)]
        if t % 3 == 0:
            parts = [p.copy() for p in parts]  # separate arrays (a file read in blocks)
        got = seg.joined_1d(parts)
        want = np.concatenate(parts)
        assert got.tobytes() == want.tobytes() and got.flags.c_contiguous


def _refined_extreme_plain(d, k, q, sign):
    # the fit as first written (each call builds its frame; numpy's polyval throughout)
    lo, hi = max(k - q, 0), min(k + q, d.size - 1)
    npts = hi - lo + 1
    if npts < 3:
        return float(d[k])
    deg = 4 if npts >= 7 else 2
    span = float(max(k - lo, hi - k, 1))
    x = (np.arange(lo, hi + 1, dtype=np.float64) - k) / span
    v = np.vander(x, deg + 1, increasing=True)
    try:
        c = np.linalg.solve(v.T @ v, v.T @ d[lo : hi + 1])
    except np.linalg.LinAlgError:
        return float(d[k])
    polyval = np.polynomial.polynomial.polyval
    grid = np.linspace(x[0], x[-1], 401)
    xv = float(grid[int(np.argmax(sign * polyval(grid, c)))])
    dc = c[1:] * np.arange(1, deg + 1)
    ddc = dc[1:] * np.arange(1, deg)
    for _ in range(8):
        curv = polyval(xv, ddc)
        if sign * curv >= 0:
            break
        step = polyval(xv, dc) / curv
        if not (x[0] <= xv - step <= x[-1]):
            break
        xv -= step
        if abs(step) < 1e-13:
            break
    return float(polyval(xv, c))


def test_turning_point_fit_matches_the_plain_steps():
    rng = np.random.default_rng(23)
    for trial in range(1500):
        m = int(rng.integers(5, 2000))
        t = np.arange(m)
        d = (np.exp(-t / rng.uniform(50, 2000)) * np.cos(2 * np.pi * t / rng.uniform(10, 400))
             * rng.uniform(1e-3, 1e3) + rng.normal(0, rng.choice([0, 1e-6, 1e-3, 0.1]), m))
        if trial % 7 == 0:
            d[:] = d[0]  # flat: a singular or trivial fit
        k, q = int(rng.integers(0, m)), int(rng.integers(1, max(2, m // 2)))
        sign = int(rng.choice([-1, 1]))
        got, want = seg._refined_extreme(d, k, q, sign), _refined_extreme_plain(d, k, q, sign)
        assert type(got) is float
        assert np.float64(got).tobytes() == np.float64(want).tobytes(), (trial, got, want)
