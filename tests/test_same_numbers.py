"""The speed work changed no number: outputs equal, bit for bit, to the earlier code's.

``tests/data/speed_reference.json`` holds SHA-256 digests of outputs made by the
simwave before the speed work (commit f4457b3) with
``tests/data/make_speed_reference.py`` (regenerated when the exactness work
changed outputs on purpose: last digits of sections built from delta-domain
zeros and gain, and a Q = 50 impulse-invariant case that now runs in the
incremental form, 5e-11 -> 7e-15 of the peak against T h(nT) in 40-digit
mpmath; and when the ramp-invariant at-rest start became a closed form instead of
a least-squares fit: 4 digests, the eight-channel noise record of the first case,
whose 1,500 first samples per channel are as exact or more against the exact
response in 40-digit mpmath, 3.2e-15 to 6.8e-15 of the peak, where the fit gave
4.3e-15 to 6.8e-15): in-memory runs and file runs (WAV,
CSV, HDF5, read back) of five systems, all five methods, rest and settled
starts, one and eight channels. The same script run on this code must give the
same digests. Digests of float64 bytes depend on the numpy/scipy builds (LAPACK
and libm may differ in the last bit), so that comparison runs only with the
versions it was made with; the checks below it hold everywhere.
"""

import importlib.util
import json
import os
import warnings

import numpy as np
import pytest

import simwave

HERE = os.path.dirname(__file__)


def _script():
    spec = importlib.util.spec_from_file_location(
        "make_speed_reference", os.path.join(HERE, "data", "make_speed_reference.py"))
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_outputs_match_the_earlier_codes_digests():
    script = _script()
    with open(os.path.join(HERE, "data", "speed_reference.json"), encoding="utf-8") as fh:
        reference = json.load(fh)
    if reference["made_with"] != script.versions():
        pytest.skip(f"reference made with {reference['made_with']}, here {script.versions()}")
    got = script.digests()
    assert sorted(got) == sorted(reference["digests"])
    assert [k for k in got if got[k] != reference["digests"][k]] == []


@pytest.mark.parametrize("case", range(len(_script().CASES)))
def test_cached_models_blocks_and_channels_give_the_same_bits(case, tmp_path):
    text, method, initial = _script().CASES[case]
    x = _script().inputs()["noise8"][:2000]
    wave = simwave.Waveform(x, 48000.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        first = simwave.simulate(text, wave, method=method, initial=initial).data
        again = simwave.simulate(simwave.System.parse(text), wave, method=method,
                                 initial=initial).data  # model from the cache
        # the model made afresh, outside the pipeline
        fresh = simwave.System.parse(text).discretize(48000.0, method).filter(x, initial)
        per_channel = np.column_stack([
            simwave.simulate(text, simwave.Waveform(x[:, c], 48000.0), method=method,
                             initial=initial).data[:, 0] for c in range(x.shape[1])])
        src = tmp_path / "in.h5"
        simwave.write(src, wave)
        simwave.simulate(text, str(src), method=method, initial=initial,
                         output=str(tmp_path / "o.h5"), block_size=333)
        streamed = simwave.read(tmp_path / "o.h5").data
    for other in (again, fresh, per_channel, streamed):
        assert np.array_equal(other.view(np.uint64), first.view(np.uint64))


@pytest.mark.parametrize("threads", [2, 3, 5])
@pytest.mark.parametrize("n_channels", [2, 3, 8, 17])
def test_channel_groups_on_threads_give_sosfilts_bits(n_channels, threads):
    # Reference: scipy.signal.sosfilt along axis 0 in one call. A block of at least
    # THREADS_FROM_VALUES values is filtered in channel groups on several threads.
    import scipy.signal as sig

    from simwave.discrete.filter import THREADS_FROM_VALUES, run_sections
    from simwave.threads import set_filter_threads

    rng = np.random.default_rng(100 * threads + n_channels)
    sos = sig.butter(4, 0.02, output="sos")
    x = rng.standard_normal((THREADS_FROM_VALUES // n_channels + 1001, n_channels))
    x[10:20, -1] = -0.0
    x[30, 0] = np.inf  # stays in its own channel
    x[40, n_channels // 2] = np.nan
    zi = rng.standard_normal((sos.shape[0], 2, n_channels))
    zi_before = zi.copy()
    set_filter_threads(threads)
    try:
        with np.errstate(invalid="ignore"):
            y, zf = run_sections(sos, x, zi)
            y_ref, zf_ref = sig.sosfilt(sos, x, axis=0, zi=zi)
    finally:
        set_filter_threads(None)
    assert np.array_equal(y.view(np.uint64), y_ref.view(np.uint64))
    assert np.array_equal(zf.view(np.uint64), zf_ref.view(np.uint64))
    assert np.array_equal(zi, zi_before)


@pytest.mark.parametrize("n_channels", [1, 2, 3, 4, 8, 16, 17, 64])
def test_channel_major_pieces_give_sosfilts_bits(n_channels):
    # Reference: scipy.signal.sosfilt along axis 0 in one call (what process() did before
    # it transposed channel-major pieces and ran sosfilt's loop on them); the inputs are
    # long enough for several pieces.
    import scipy.signal as sig

    from simwave.discrete.filter import PIECE_VALUES, run_sections

    rng = np.random.default_rng(n_channels)
    sos = sig.butter(6, 0.05, output="sos")
    n = 3 * PIECE_VALUES // n_channels + 17
    x = rng.standard_normal((n, n_channels))
    x[100:200, min(1, n_channels - 1)] = 0.0
    x[150, min(1, n_channels - 1)] = -0.0  # signed zeros pass through unchanged
    x[300, 0] = np.inf  # and infinities and NaN stay in their own channel
    x[500, n_channels - 1] = np.nan
    zi = rng.standard_normal((sos.shape[0], 2, n_channels))
    zi_before = zi.copy()
    with np.errstate(invalid="ignore"):
        y_ref, zf_ref = sig.sosfilt(sos, x, axis=0, zi=zi)
        y, zf = run_sections(sos, x, zi)
    assert np.array_equal(y.view(np.uint64), y_ref.view(np.uint64))
    assert np.array_equal(zf.view(np.uint64), zf_ref.view(np.uint64))
    assert np.array_equal(zi, zi_before)  # the given state is not changed
    x = x[:, ::-1][2000:]  # finite again, and a strided view
    y_ref, zf_ref = sig.sosfilt(sos, x, axis=0, zi=zi)
    y, zf = run_sections(sos, x, zi)
    assert np.array_equal(y.view(np.uint64), y_ref.view(np.uint64))
    assert np.array_equal(zf.view(np.uint64), zf_ref.view(np.uint64))
    for short in (x[:1], x[:1000], x[:999:3]):  # short blocks: sosfilt's one-piece copy
        y_ref, zf_ref = sig.sosfilt(sos, short, axis=0, zi=zi)
        y, zf = run_sections(sos, short, zi)
        assert np.array_equal(y.view(np.uint64), y_ref.view(np.uint64))
        assert np.array_equal(zf.view(np.uint64), zf_ref.view(np.uint64))
    # the same through DiscreteSystem.process in odd-sized blocks, with a delay line
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        model = simwave.System.parse("1e3/(s + 1e3)*exp(-1e-3*s)").discretize(48000.0)
    whole = model.filter(x)
    state = model.initial_state(x[0])
    parts = []
    for start in range(0, n, 40_001):
        out, state = model.process(x[start:start + 40_001], state)
        parts.append(out)
    assert np.array_equal(np.concatenate(parts).view(np.uint64), whole.view(np.uint64))
    per_channel = np.column_stack([model.filter(x[:, c]) for c in range(n_channels)])
    assert np.array_equal(per_channel.view(np.uint64), whole.view(np.uint64))


def test_level_meter_flags_every_kind_of_bad_sample():
    # the run's finiteness check now rides on the meter's extremes (numpy's argmax and
    # argmin stop at NaN); the meter must see NaN and both infinities anywhere
    from simwave.run import _channel_peaks, _LevelMeter

    rng = np.random.default_rng(5)
    for bad in (np.nan, np.inf, -np.inf):
        for row, col in ((0, 0), (4999, 2), (2500, 1)):
            x = rng.standard_normal((5000, 3))
            x[row, col] = bad
            assert _LevelMeter(3).add(x) is False
            assert _LevelMeter(3).add(np.asfortranarray(x)) is False
    assert _LevelMeter(3).add(rng.standard_normal((5000, 3))) is True
    # input peaks by the wide view equal max |x| per channel (numpy, exact)
    for k in (1, 2, 3, 8):
        for n in (1, 1023, 1024, 1025, 5001):
            x = rng.standard_normal((n, k))
            assert np.array_equal(_channel_peaks(x), np.abs(x).max(axis=0))

