"""The shorter rate search behind a poor model's warning gives the full search's answers.

An in-memory run warns about a poor model with its own method's suggested rate and the
methods whose suggested rate is at or below the run's rate (``accuracy.rate_advice``);
it stops the other methods' searches once that is decided. These tests compare it with
the search as it was before (kept below as ``reference_suggest_rates``, a copy of
``suggest_rates`` at 5654903), on synthetic error curves (any shape, many thresholds),
on real systems x methods x rates (the rates, the advice and the warning text), and
check the bilinear method's suggested rate against the frequency-warping formula
Omega = (2/T) tan(omega/2) (Oppenheim & Schafer, *Discrete-Time Signal Processing*,
3rd ed., sec. 7.2.2).
"""

from __future__ import annotations

import hashlib
import math
import os
import warnings

import numpy as np
import pytest
import scipy.signal as sig

import simwave
from simwave import System, Waveform
import simwave.run as run_module
from simwave.discrete import accuracy as acc
from simwave.discrete.accuracy import (
    DEFAULT_LIMIT_DB, RateAdvice, _report_without_rates, _round_up, _rounding_range,
    _search_rate, method_check, method_warning, rate_advice, suggest_rates,
)

METHODS = ("ramp-invariant", "step-invariant", "impulse-invariant", "bilinear", "matched-z")


# --------------------------------------------------------------------------- reference
def reference_search(err, r0, x):
    """One method's search exactly as suggest_rates ran it at 5654903."""
    if err(r0) <= x:
        return _round_up(r0)
    lo, hi = r0, None
    r = r0
    for _ in range(20):
        r *= 2
        if err(r) <= x:
            hi = r
            break
        lo = r
    if hi is None:
        return None
    for _ in range(8):
        mid = math.sqrt(lo * hi)
        if err(mid) <= x:
            hi = mid
        else:
            lo = mid
    return _round_up(hi)


def reference_suggest_rates(system, band, mask_f, limit_db, prewarp_hz=None, match_hz=None):
    """suggest_rates at 5654903 (its grid, floor and limit, then reference_search)."""
    f = mask_f
    if f.size > 160:
        keep = np.linspace(0, f.size - 1, 160).astype(int)
        f = np.unique(np.concatenate([f[keep], acc.check_frequencies(
            system, 1.0, f[0], f[-1], None, n_log=2)]))
    ha = acc._analog_h(system, f)
    peak = float(np.max(np.abs(ha[np.isfinite(ha)]))) if np.any(np.isfinite(ha)) else 1.0
    floor = 0.1 * peak
    x = 10 ** (limit_db / 20) - 1
    r0 = band[1] / 0.45
    out = {}
    for method in acc.METHODS:
        def err(r, method=method):
            return acc._method_error(system, method, r, f, ha, floor, prewarp_hz, match_hz)

        out[method] = reference_search(err, r0, x)
    return out


# --------------------------------------------------------------------------- synthetic curves
def _curve(kind: int, seed: int, scale: float):
    """A deterministic error curve err(rate): falling power laws, one with a bump, and
    pseudo-random values (no order at all: the early stop must not assume one)."""
    rng = np.random.default_rng(seed)
    p = float(rng.uniform(0.5, 4.0))

    def err(r: float) -> float:
        if kind == 0:
            return (scale / r) ** p
        if kind == 1:
            return (scale / r) ** p * (1.0 + 0.8 * math.sin(7.0 * math.log(r)))
        # a value fixed by the rate's bits
        digest = hashlib.blake2b(f"{seed}/{float(r).hex()}".encode(), digest_size=4).digest()
        return 2.0 * int.from_bytes(digest, "little") / 0xFFFFFFFF

    return err


def _counting(err):
    calls = []

    def wrapped(r):
        calls.append(r)
        return err(r)

    return wrapped, calls


def test_decision_search_agrees_with_the_full_search_on_any_curve():
    rng = np.random.default_rng(13)
    decided_early = {True: 0, False: 0}
    cases = 0
    for trial in range(600):
        kind = trial % 3
        scale = float(10 ** rng.uniform(-0.5, 6.5))
        r0 = float(10 ** rng.uniform(-0.3, 5.5))
        x = 0.0116
        err = _curve(kind, trial, scale)
        full_calls_err, full_calls = _counting(err)
        full = reference_search(full_calls_err, r0, x)
        # thresholds: the answer itself and its neighbours, r0's, random ones, decade edges
        withins = [r0, _round_up(r0), 99.9, 100.0, 100.5, 1000.0]
        withins += [float(10 ** rng.uniform(-0.3, 7.5)) for _ in range(6)]
        if full is not None:
            withins += [full, math.nextafter(full, 0.0), math.nextafter(full, math.inf),
                        full * 0.999, full * 1.001]
        for within in withins:
            want = full is not None and full <= within
            counted, calls = _counting(err)
            got = _search_rate(counted, r0, x, within)
            assert got is want, (trial, r0, within, full)
            # the same rates in the same order as the full search, up to where it stopped
            assert calls == full_calls[:len(calls)]
            if len(calls) < len(full_calls):
                decided_early[want] += 1
            cases += 1
    assert cases > 5000
    assert decided_early[True] > 100 and decided_early[False] > 100, decided_early


def test_full_search_unchanged_on_any_curve():
    for trial in range(300):
        err = _curve(trial % 3, trial, float(10 ** (trial % 7)))
        r0 = float(10 ** ((trial * 0.37) % 5.0))
        a, b = reference_search(err, r0, 0.0116), _search_rate(err, r0, 0.0116)
        assert a == b and type(a) is type(b)


def test_rounding_up_is_monotone_where_the_search_relies_on_it():
    # _rounding_range claims: every rate in (lo, hi] rounds into [low, high].
    rng = np.random.default_rng(7)
    edges = [10.0 ** k for k in range(-2, 9)]
    samples = []
    for e in edges:  # both sides of every decade edge, a few ulps and a few per mille
        samples += [e * (1 + d) for d in (-3e-3, -1e-3, -1e-16, 0.0, 1e-16, 1e-3, 3e-3)]
        v = e
        for _ in range(4):
            v = math.nextafter(v, 0.0)
            samples.append(v)
        v = e
        for _ in range(4):
            v = math.nextafter(v, math.inf)
            samples.append(v)
    samples += list(10 ** rng.uniform(-2, 9, 20000))
    samples = sorted(set(samples))
    rounded = [_round_up(v) for v in samples]
    # from 100 Hz on: monotone across decades
    big = [(v, r) for v, r in zip(samples, rounded, strict=True) if v >= 100.0]
    assert all(a[1] <= b[1] for a, b in zip(big[:-1], big[1:], strict=True))
    assert all(r >= v for v, r in big)  # and it does round up
    # below 100 Hz: monotone within each decade
    for k in range(-2, 2):
        part = [r for v, r in zip(samples, rounded, strict=True) if math.floor(math.log10(v)) == k]
        assert all(a <= b for a, b in zip(part[:-1], part[1:], strict=True))
    # and the ranges it reports hold every value between the ends
    for _ in range(3000):
        lo = float(10 ** rng.uniform(-1.5, 8))
        hi = lo * float(rng.uniform(1.0001, 2.0))
        low, high = _rounding_range(lo, hi)
        ys = np.concatenate([[math.nextafter(lo, math.inf), hi],
                             lo + (hi - lo) * rng.uniform(0, 1, 20)])
        for y in ys:
            if y <= lo:
                continue
            r = _round_up(float(y))
            if low is not None:
                assert low <= r
            if high is not None:
                assert r <= high


# --------------------------------------------------------------------------- real systems
def _systems():
    out = []
    for n, fc in ((1, 1000.0), (2, 1000.0), (2, 50.0), (4, 5000.0), (8, 1000.0)):
        out.append((f"butter{n}@{fc:g}", sig.butter(n, 2 * np.pi * fc, analog=True,
                                                     output="zpk")))
    out.append(("cheby1_4", sig.cheby1(4, 1, 2 * np.pi * 800, analog=True, output="zpk")))
    out.append(("ellip_4", sig.ellip(4, 1, 40, 2 * np.pi * 2000, analog=True, output="zpk")))
    out.append(("hp_2", sig.butter(2, 2 * np.pi * 100, btype="high", analog=True,
                                   output="zpk")))
    out.append(("rhpz", ([2 * np.pi * 20], [-2 * np.pi * 5, -2 * np.pi * 50], -1.0)))
    out.append(("integ", ([], [0.0, -100.0], 100.0)))
    w0 = 2 * np.pi * 15000
    out.append(("resQ500@15k", ([], [-w0 / 1000 + 1j * w0, -w0 / 1000 - 1j * w0], w0 * w0)))
    out.append(("notch60", ([2j * np.pi * 60, -2j * np.pi * 60],
                            [-2 * np.pi * 6 + 2j * np.pi * 60, -2 * np.pi * 6 - 2j * np.pi * 60],
                            1.0)))
    return out


def _cases(every: int):
    slow = os.environ.get("SIMWAVE_SLOW") == "1"
    i = 0
    for name, (z, p, k) in _systems():
        system = System.from_zpk(z, p, k)
        for rate in (1000.0, 8000.0, 48000.0, 1e6):
            for method in METHODS:
                for prewarp in ((None, 100.0) if method == "bilinear" else (None,)):
                    i += 1
                    if slow or i % every == 0:
                        yield name, system, rate, method, prewarp


def _model(system, rate, method, prewarp):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return system.discretize(rate, method, prewarp_hz=prewarp)


@pytest.mark.parametrize("part", range(3))
def test_rates_advice_and_warning_text_equal_the_full_search(part):
    """The report's rates equal the reference search's (value and type); the advice and
    the warning text built from it equal those from the full rates."""
    n = poor = 0
    for i, (name, system, rate, method, prewarp) in enumerate(_cases(4)):
        if i % 3 != part:
            continue
        model = _model(system, rate, method, prewarp)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # compared below
            report, args = _report_without_rates(model, None, DEFAULT_LIMIT_DB)
        want = reference_suggest_rates(*args)
        got = suggest_rates(*args)
        assert got == want and [type(v) for v in got.values()] == \
            [type(v) for v in want.values()], (name, rate, method)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            advice = rate_advice(model)
        with warnings.catch_warnings(record=True) as caught_full:
            warnings.simplefilter("always")
            model.accuracy(suggest=True)
        # the same warnings as the full report (numpy's, from its response values: a
        # notch's zero on the grid), none from the searches (else advice is None)
        assert [str(w.message) for w in caught] == [str(w.message) for w in caught_full]
        assert advice == RateAdvice.from_rates(model.method, model.rate, want)
        check = method_check(model)
        check["poor"] = True  # format the text for every model, poor or not
        full = report.to_dict()
        full["suggested_rate_hz"] = want
        for factor in (1, 3):
            assert method_warning(check, None, model.method, model.rate, factor, system,
                                  model.options, advice=advice) == \
                method_warning(check, full, model.method, model.rate, factor, system,
                               model.options), (name, rate, method)
        n += 1
        poor += method_check(model)["poor"]
    assert n >= 15 and poor >= 3


def test_advice_skips_most_of_a_poor_models_search():
    z, p, k = sig.butter(2, 2 * np.pi * 1000, analog=True, output="zpk")
    model = _model(System.from_zpk(z, p, k), 48000.0, "step-invariant", None)
    assert method_check(model)["poor"]
    calls = []
    real = acc._method_error

    def counted(system, method, *a):
        calls.append(method)
        return real(system, method, *a)

    try:
        acc._method_error = counted
        advice = rate_advice(model)
        n_advice = len(calls)
        calls.clear()
        full = model.accuracy()
    finally:
        acc._method_error = real
    assert advice == RateAdvice.from_rates(model.method, model.rate, full.suggested_rate_hz)
    assert advice.own_hz is not None and advice.own_hz > model.rate
    assert len(calls) >= 2 * n_advice, (len(calls), n_advice)


def _run_warnings(system, rate, method, x, output=None):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        simwave.simulate(system, Waveform(x, rate), method=method, output=output)
    return [str(w.message) for w in caught]


@pytest.mark.parametrize("case", [
    ("butter2", 2, "step-invariant", 48000.0, 1),
    ("butter8", 8, "bilinear", 48000.0, 1),
    ("butter8", 8, "matched-z", 48000.0, 1),
    ("butter4", 4, "step-invariant", 8000.0, 2),  # oversampled: the remedy's factor
])
def test_in_memory_run_warns_as_a_file_run_does(tmp_path, case):
    """A file run makes the full report (its summary prints the rates); an in-memory
    run of a poor model now makes the advice only. Same warnings, word for word,
    whichever of the two comes first."""
    _, order, method, rate, factor = case
    z, p, k = sig.butter(order, 2 * np.pi * 1000, analog=True, output="zpk")
    system = System.from_zpk(z, p, k)
    x = 0.01 * np.random.default_rng(1).standard_normal(500)
    for first_in_memory in (True, False):
        run_module._PREPARED.clear()
        kw = {"oversample": factor} if factor > 1 else {}
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            if first_in_memory:
                simwave.simulate(system, Waveform(x, rate), method=method, **kw)
                report = simwave.simulate(system, Waveform(x, rate), method=method,
                                          output=tmp_path / "a.wav", **kw)
            else:
                report = simwave.simulate(system, Waveform(x, rate), method=method,
                                          output=tmp_path / "b.wav", **kw)
                simwave.simulate(system, Waveform(x, rate), method=method, **kw)
        texts = [str(w.message) for w in caught]
        half = len(texts) // 2
        assert len(texts) == 2 * half and half >= 1
        in_memory, file_run = ((texts[:half], texts[half:]) if first_in_memory
                               else (texts[half:], texts[:half]))
        assert in_memory == file_run == list(report.warnings)
        assert any("of the largest steady output" in t for t in in_memory)


# --------------------------------------------------------------------------- external check
def test_bilinear_suggested_rate_where_the_warping_formula_crosses_the_limit():
    """First-order low-pass a/(s + a), band (1 Hz, 2 kHz), corner 1 kHz. The bilinear
    model's response at f is the analog one at f_a = (rate/pi) tan(pi f / rate)
    (Oppenheim & Schafer, DTSP 3rd ed., sec. 7.2.2, eq. 7.26 in the form
    Omega = (2/T) tan(omega/2)). Its steady-sine error relative to max(|H|, 0.1 peak)
    grows with f here, so the lowest rate within the 0.1 dB limit is where the error at
    2 kHz equals 10^(0.1/20) - 1: found below by bisection on the formula alone. The
    suggested rate is that rate rounded up to 3 figures, after a search that ends within
    a factor 2^(1/256) above it."""
    a = 2 * np.pi * 1000.0
    band_top = 2000.0
    limit = 10 ** (0.1 / 20) - 1

    def h(f):
        return a / (1j * 2 * np.pi * f + a)

    def err_formula(rate, f):
        fa = rate / np.pi * np.tan(np.pi * f / rate)
        return np.abs(h(fa) - h(f)) / np.maximum(np.abs(h(f)), 0.1)

    f_dense = np.geomspace(1.0, band_top, 2000)
    lo, hi = 4500.0, 1e6
    assert err_formula(lo, band_top) > limit > err_formula(hi, band_top)
    for _ in range(200):
        mid = math.sqrt(lo * hi)
        lo, hi = (lo, mid) if err_formula(mid, band_top) <= limit else (mid, hi)
    crossing = hi
    # the largest error over the band is at its top for every rate near the crossing
    for r in (crossing * 0.9, crossing, crossing * 1.1):
        e = err_formula(r, f_dense)
        assert np.argmax(e) == e.size - 1

    system = System.from_zpk([], [-a], a)
    model = _model(system, 8000.0, "bilinear", None)
    report = model.accuracy(band_hz=(1.0, band_top))
    got = report.suggested_rate_hz["bilinear"]
    assert crossing * (1 - 1e-9) <= got <= _round_up(crossing * 2 ** (1 / 256) * (1 + 1e-9))
    # the model is poor at 8 kHz, and the advice an in-memory run's warning reads names
    # the rate the report gives (the default band for both)
    assert method_check(model)["poor"]
    advice = rate_advice(model)
    assert advice.own_hz == model.accuracy().suggested_rate_hz["bilinear"]


def test_in_memory_poor_run_makes_the_advice_not_the_report(tmp_path):
    """Which search a run pays for: an in-memory run of a poor model keeps the advice
    only; a file run of the same prepared model then makes the full report (its summary
    prints all five rates) and a later in-memory run reads the advice kept."""
    z, p, k = sig.butter(2, 2 * np.pi * 1000, analog=True, output="zpk")
    system = System.from_zpk(z, p, k)
    x = 0.01 * np.random.default_rng(3).standard_normal(400)
    run_module._PREPARED.clear()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        simwave.simulate(system, Waveform(x, 48000.0), method="step-invariant")
        (prep,) = run_module._PREPARED.values()
        assert prep.check["poor"]
        assert prep._advice is not None and prep._accuracy is None
        report = simwave.simulate(system, Waveform(x, 48000.0), method="step-invariant",
                                  output=tmp_path / "out.wav")
        assert prep._accuracy is not None
        assert set(report.accuracy["suggested_rate_hz"]) == set(METHODS)
        assert prep._advice == RateAdvice.from_rates(
            "step-invariant", 48000.0, report.accuracy["suggested_rate_hz"])
