"""The measuring code's own window and FFT-convolution helpers, checked bit for bit against
scipy.signal (the reference implementation they follow; scipy.signal is not imported by
measuring itself because its import costs about a second on a loaded machine)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

from simwave.measure.levels import fft_convolve_same, narrow_gaussian, next_fast_len
from simwave.measure.steady import BLACKMAN_HARRIS_4, HANN, cosine_window


@pytest.mark.parametrize("n", [0, 1, 2, 3, 8, 1001, 65536])
def test_cosine_windows_equal_scipy_bit_for_bit(n):
    # scipy.signal.windows.hann / blackmanharris, sym=False (periodic, DFT-even); the
    # coefficients are Harris (1978), Proc. IEEE 66(1), table of 4-term Blackman-Harris
    assert np.array_equal(cosine_window(n, HANN), signal.windows.hann(n, sym=False))
    assert np.array_equal(
        cosine_window(n, BLACKMAN_HARRIS_4), signal.windows.blackmanharris(n, sym=False)
    )


@pytest.mark.parametrize("n, m", [(16384, 129), (16384, 8001), (1000, 999), (7, 3)])
def test_fft_convolution_equals_scipy_fftconvolve_bit_for_bit(n, m):
    rng = np.random.default_rng(n + m)
    a = rng.integers(0, 50, n).astype(np.float64)
    k = np.exp(-0.5 * (np.arange(m) - m // 2) ** 2 / (m / 8.0) ** 2)
    k /= k.sum()
    assert np.array_equal(fft_convolve_same(a, k), signal.fftconvolve(a, k, mode="same"))


def test_narrow_gaussian_equals_scipy_ndimage_bit_for_bit():
    # the histogram's narrow-kernel smoothing (radius < 64 bins) against its reference,
    # scipy.ndimage.gaussian_filter1d(mode="constant", truncate 4); histograms of one to
    # four noisy levels on 50 to 2^15 bins, some reaching the ends; signed zeros compared
    from scipy.ndimage import gaussian_filter1d

    rng = np.random.default_rng(1)
    tried = 0
    for _ in range(3000):
        n = int(rng.choice([50, 300, 4096, 32768]))
        w = np.zeros(n)
        for _ in range(int(rng.integers(1, 5))):
            centre, spread = int(rng.integers(0, n)), float(rng.uniform(0.5, 200))
            idx = np.round(centre + spread * rng.standard_normal(int(rng.integers(1, 20000))))
            w += np.bincount(np.clip(idx.astype(int), 0, n - 1), minlength=n)
        h = float(rng.uniform(0.5, 15.8))
        got, want = narrow_gaussian(w, h), gaussian_filter1d(w, h, mode="constant")
        assert np.array_equal(got.view(np.uint64), want.view(np.uint64)), (n, h)
        tried += 1
    assert tried == 3000
    assert not narrow_gaussian(np.zeros(100), 3.0).any()


def test_measuring_does_not_import_scipy_signal(tmp_path):
    # a fresh process: measuring a step record, in memory and from a file, must not pull in
    # scipy.signal (reading a file passes through the signal-text parser too)
    import subprocess
    import sys

    path = str(tmp_path / "step.wav")
    code = (
        "import sys, numpy as np, soundfile as sf, simwave\n"
        "x = np.r_[np.zeros(100), np.ones(400)]\n"
        "simwave.measure(simwave.Waveform(x, 1000.0))\n"
        f"sf.write({path!r}, x, 1000, subtype='DOUBLE')\n"
        f"simwave.measure({path!r})\n"
        "print('scipy.signal' in sys.modules)\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


def test_next_fast_len_equals_scipy():
    # the FFT length of the histogram's convolution: scipy.fft.next_fast_len(n, real=True)
    from scipy import fft

    ns = list(range(1, 5000)) + [16384 + 8001 - 1, 16384 + 129 - 1, 2**20 + 1, 3**11 + 2]
    assert [next_fast_len(n) for n in ns] == [fft.next_fast_len(n, True) for n in ns]


@pytest.mark.parametrize("noise, wide", [(0.05, True), (0.002, False)])
def test_measuring_a_histogram_imports_no_scipy(noise, wide):
    # a noisy step: its histogram is smoothed by the FFT convolution (kernel radius >= 64
    # bins), which uses numpy's FFT, or for low noise by a narrow kernel computed directly;
    # scipy.fft and scipy.ndimage cost 0.2-0.3 s of import
    import subprocess
    import sys

    code = (
        "import sys, numpy as np, simwave\n"
        "rng = np.random.default_rng(1)\n"
        f"x = np.r_[np.zeros(3000), np.ones(3000)] + {noise} * rng.standard_normal(6000)\n"
        "import importlib\n"
        "lv = importlib.import_module('simwave.measure.levels')\n"
        "radii = []\n"
        "orig = lv._smoothed\n"
        "lv._smoothed = lambda w, h: (radii.append(int(4 * h + 0.5)), orig(w, h))[1]\n"
        "simwave.measure(simwave.Waveform(x, 1000.0))\n"
        "print(min(radii) >= 64, sorted(m for m in sys.modules if m.startswith('scipy')))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == f"{wide} []"


def test_lean_median_and_first_quartile_equal_numpy_bit_for_bit():
    # segments.median and plateaus.first_quartile repeat np.median's and np.percentile's
    # (method "linear") steps without their wrapping; same values, signed zeros included
    from simwave.measure.plateaus import first_quartile
    from simwave.measure.segments import median

    rng = np.random.default_rng(5)
    for t in range(3000):
        n = int(rng.integers(1, 50)) if t % 10 else int(rng.integers(1, 20000))
        a = rng.standard_normal(n) * 10.0 ** float(rng.integers(-200, 200))
        if t % 3 == 0:
            a = np.round(a * 3)  # ties and signed zeros
        if t % 7 == 0:
            a[: n // 2] = -0.0
        for got, want in ((median(a), np.median(a)), (first_quartile(a), np.percentile(a, 25))):
            assert got == float(want) and np.signbit(got) == np.signbit(want), (n, got, want)
