"""Streaming interpolation and decimation used by ``simulate(..., oversample=N)``."""

import numpy as np
import pytest
import scipy.signal

from simwave.oversample import Decimator, Upsampler
from simwave.pipeline import WriteBehind, read_ahead


def _stream(stage, data, sizes):
    out, start = [], 0
    for n in sizes:
        out.append(stage.push(data[start : start + n]))
        start += n
    return out


@pytest.mark.parametrize("factor", [2, 3, 8])
def test_linear_upsampling_matches_numpy_interp(factor):
    # Reference: numpy.interp (linear interpolation between samples), holding the last value.
    rng = np.random.default_rng(1)
    x = rng.standard_normal((101, 2))
    up = Upsampler(factor, hold=False)
    got = np.concatenate(_stream(up, x, [1, 7, 50, 0, 43]) + [up.finish()])
    t_hi = np.arange(x.shape[0] * factor) / factor
    for c in range(2):
        expected = np.interp(t_hi, np.arange(x.shape[0]), x[:, c])
        np.testing.assert_allclose(got[:, c], expected, rtol=0, atol=1e-13)


def test_hold_upsampling_repeats_each_sample():
    x = np.arange(5.0)[:, None]
    up = Upsampler(3, hold=True)
    got = np.concatenate([up.push(x), up.finish()])
    np.testing.assert_array_equal(got[:, 0], np.repeat(x[:, 0], 3))


@pytest.mark.parametrize("factor", [2, 4])
def test_decimator_equals_scipy_upfirdn(factor):
    # Reference: scipy.signal.upfirdn (polyphase FIR filtering with down-sampling); the
    # simwave decimator removes the FIR's group delay of K input samples.
    rng = np.random.default_rng(2)
    n_out = 300
    y = rng.standard_normal((n_out * factor, 3))
    dec = Decimator(factor, 3, pre_value=np.zeros(3))
    pieces = _stream(dec, y, [5, 200, 1, y.shape[0] - 206])
    got = np.concatenate(pieces + [dec.finish(n_out, sum(p.shape[0] for p in pieces))])
    assert got.shape == (n_out, 3)
    ref = scipy.signal.upfirdn(dec.taps, y, down=factor, axis=0)[dec.k : dec.k + n_out]
    # the last K outputs use the held last value instead of zeros past the record
    np.testing.assert_allclose(got[: n_out - dec.k], ref[: n_out - dec.k], rtol=0, atol=1e-12)


def test_decimator_passes_band_and_rejects_images():
    factor, rate = 4, 1000.0
    hi_rate = rate * factor
    t = np.arange(int(hi_rate)) / hi_rate
    dec = Decimator(factor, 1, pre_value=np.zeros(1))
    # pass band: 0.4*rate -> gain 1 within 0.01 dB (Kaiser design, 80 dB stop band)
    passing = np.sin(2 * np.pi * 0.35 * rate * t)[:, None]
    out = np.concatenate([dec.push(passing), dec.finish(int(rate), 0)])
    steady = out[100:-100, 0]
    assert 20 * np.log10(np.sqrt(2) * steady.std()) == pytest.approx(0.0, abs=0.01)
    dec = Decimator(factor, 1, pre_value=np.zeros(1))
    blocked = np.sin(2 * np.pi * 0.6 * rate * t)[:, None]  # would alias to 0.4*rate
    out = dec.push(blocked)
    assert 20 * np.log10(np.sqrt(2) * out[100:, 0].std()) < -75


def test_read_ahead_keeps_order_and_reraises():
    assert list(read_ahead(iter(range(100)), depth=3)) == list(range(100))

    def failing():
        yield 1
        raise ValueError("broken block")

    got = []
    with pytest.raises(ValueError, match="broken block"):
        for item in read_ahead(failing()):
            got.append(item)
    assert got == [1]


def test_write_behind_keeps_order_and_reports_errors():
    seen = []
    wb = WriteBehind(seen.append, depth=2)
    for i in range(50):
        wb.submit(i)
    wb.close()
    assert seen == list(range(50))

    def bad(_):
        raise OSError("disk full")

    wb = WriteBehind(bad)
    wb.submit(1)
    with pytest.raises(OSError, match="disk full"):
        wb.close()


def test_write_behind_abort_drops_the_queue_and_ends_its_thread():
    import threading

    seen, gate = [], threading.Event()

    def slow(item):
        gate.wait(5)
        seen.append(item)

    wb = WriteBehind(slow, depth=2)
    for i in range(3):  # one being written, two queued
        wb.submit(i)
    gate.set()
    wb.abort()
    assert not wb._thread.is_alive()
    assert seen == [0]  # the queued blocks were dropped, not written


def test_a_failed_run_leaves_no_pipeline_thread(tmp_path):
    # A run stopped by an error (or a stop signal) must not leave the read-ahead thread
    # reading while the interpreter goes on to shut down: a thread still inside an
    # extension at shutdown can crash the process.
    import threading

    import soundfile as sf

    import simwave
    from simwave.errors import SimwaveError
    from simwave.run import DEFAULT_BLOCK

    path = tmp_path / "in.wav"
    sf.write(path, np.ones(6 * DEFAULT_BLOCK), 48000, subtype="DOUBLE")
    with pytest.raises(SimwaveError), pytest.warns(UserWarning, match="unstable"):
        # 1/(s - 1000) grows past float64 within the record
        simwave.simulate("1/(s - 1000)", str(path), output=str(tmp_path / "out.wav"))
    names = {t.name for t in threading.enumerate()}
    assert not names & {"simwave-read-ahead", "simwave-write-behind"}
    assert not (tmp_path / "out.wav").exists()
