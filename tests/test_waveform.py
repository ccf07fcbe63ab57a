import numpy as np
import pytest

from simwave import Waveform
from simwave.errors import WaveformError


def test_one_dimensional_data_is_one_channel():
    w = Waveform(np.arange(5.0), rate=10.0)
    assert w.data.shape == (5, 1)
    assert w.data.dtype == np.float64
    assert w.channels == ["ch0"]
    assert w.duration == pytest.approx(0.5)
    np.testing.assert_allclose(w.time, [0.0, 0.1, 0.2, 0.3, 0.4])


def test_bad_rate_is_rejected():
    with pytest.raises(WaveformError, match="sample rate"):
        Waveform(np.zeros(3), rate=0)


def test_channel_selection_by_name_and_index():
    w = Waveform(np.arange(6.0).reshape(3, 2), rate=1.0, channels=["a", "b"], units=["V", "A"])
    b = w.select(["b"])
    assert b.channels == ["b"] and b.units == ["A"]
    np.testing.assert_array_equal(b.data[:, 0], [1.0, 3.0, 5.0])
    assert w.channel_index(-1) == 1
    with pytest.raises(WaveformError, match="no channel named 'c'"):
        w.select(["c"])
