"""scipy's compiled loops loaded without their packages (simwave.discrete.kernels).

The reference for every number here is scipy itself: ``scipy.signal.lfilter``,
``scipy.signal.sosfilt`` and ``scipy.linalg.get_lapack_funcs`` (the public calls the
loops stand in for), compared bit for bit. The fresh-process checks run simwave's own
paths (a file run with metrics, each method and realization; a batch) and then look at
``sys.modules``: the point of the module is that none of them imports scipy.signal or
scipy.linalg.
"""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest

from simwave.discrete import kernels


def test_the_loops_were_loaded_from_this_scipy():
    # if one of these is None, the public fallbacks run: correct but slower, and the
    # batch workers would import scipy.signal again. This scipy keeps all three files.
    assert kernels.sosfilt_loop is not None
    assert kernels.linear_filter is not None
    assert kernels.dggev is not None


@pytest.mark.parametrize("kind", ["real", "complex"])
def test_lfilter_is_scipy_lfilter_bit_for_bit(kind):
    # the increment form's first-order recursions (incremental._recursion's call)
    import scipy.signal as sig

    rng = np.random.default_rng(11)
    for trial in range(40):
        n = int(rng.integers(1, 3000))
        shape = (n,) if trial % 3 == 0 else (n, int(rng.integers(1, 5)))
        x = rng.standard_normal(shape) * 10.0 ** float(rng.integers(-30, 30))
        p = 1.0 - 10.0 ** float(rng.uniform(-12, -0.5))
        if kind == "complex":
            x = x + 1j * rng.standard_normal(shape)
            p = p * np.exp(1j * float(rng.uniform(-3, 3)))
        a = np.array([1.0, -p])
        one = np.ones(1)
        got = kernels.lfilter(one, a, x, axis=0)
        want = sig.lfilter(one, a, x, axis=0)
        assert got.dtype == want.dtype and got.shape == want.shape
        assert np.array_equal(got.view(np.uint8), np.ascontiguousarray(want).view(np.uint8))


def test_settled_state_is_scipy_sosfilt_zi_bit_for_bit():
    # the settled start's section states (filter.sections_settled_state)
    import scipy.signal as sig

    from simwave.discrete.filter import sections_settled_state

    rng = np.random.default_rng(4)
    cases = [sig.butter(n, wn, output="sos") for n in (1, 2, 5, 8) for wn in (1e-4, 0.03, 0.4)]
    cases += [sig.cheby1(4, 1, 0.2, btype="high", output="sos"),
              sig.ellip(6, 0.5, 60, [0.1, 0.2], btype="band", output="sos")]
    for _ in range(200):
        m = int(rng.integers(1, 6))
        sos = np.hstack([rng.standard_normal((m, 3)), np.ones((m, 1)),
                         rng.uniform(-0.9, 0.9, (m, 2))])
        sos[rng.random((m, 6)) < 0.1] = 0.0
        sos[:, 3] = 1.0
        cases.append(sos)
    for sos in cases:
        got = sections_settled_state(sos)
        want = sig.sosfilt_zi(sos)
        assert np.array_equal(got.view(np.uint64), want.view(np.uint64)), sos


def test_ggev_is_the_routine_scipy_linalg_picks():
    import scipy.linalg as sla

    m = np.random.default_rng(2).standard_normal((4, 4))
    assert sla.get_lapack_funcs(("ggev",), (m, np.eye(4)))[0] is kernels.dggev


_RUN_WITHOUT_SIGNAL = r"""
import sys
import numpy as np
import soundfile as sf
import simwave
from simwave.cli.app import main
from simwave.discrete import METHODS

x = np.r_[np.zeros(2000), np.ones(10000)] * 0.5
sf.write("in.wav", x, 48000, subtype="DOUBLE")
systems = ["(2*pi*100)^2/(s^2 + 2*0.5*2*pi*100*s + (2*pi*100)^2)", "1/(2m*s + 1)",
           "(2*pi*1k)^4/((s^2 + 0.7654*2*pi*1k*s + (2*pi*1k)^2)"
           "*(s^2 + 1.8478*2*pi*1k*s + (2*pi*1k)^2))"]
codes = []
for i, text in enumerate(systems):
    for method in METHODS:
        args = ["run", "in.wav", "-s", text, "--method", method,
                "-o", f"out{i}{method}.wav", "--metrics", f"m{i}{method}.json"]
        try:
            main(args, standalone_mode=False)
            codes.append(0)
        except SystemExit as exc:
            codes.append(exc.code)
    for method in ("bilinear", "step-invariant", "ramp-invariant"):
        for realization in ("sections", "incremental"):
            model = simwave.System.parse(text).discretize(48000.0, method,
                                                          realization=realization)
            for initial in ("rest", "settled"):
                assert np.isfinite(model.filter(x, initial=initial)).all()
print(sorted(set(codes)), "scipy.signal" in sys.modules, "scipy.linalg" in sys.modules)

# then the package itself: it must take the module objects already loaded
import scipy.signal as sig
from simwave.discrete import kernels
from simwave.discrete.filter import run_sections
import scipy.signal._sosfilt as loop_module
print(loop_module is sys.modules["scipy.signal._sosfilt"],
      loop_module._sosfilt is kernels.sosfilt_loop)
sos = sig.butter(6, 0.05, output="sos")
u = np.random.default_rng(1).standard_normal((5000, 3))
zi = np.zeros((3, 2, 3))
want, wzf = sig.sosfilt(sos, u, axis=0, zi=zi)
got, gzf = run_sections(sos, u, zi)
print(np.array_equal(want, got) and np.array_equal(wzf, gzf))
"""


def test_running_and_measuring_import_neither_scipy_signal_nor_linalg(tmp_path):
    # a batch worker does exactly this per pair; importing scipy.signal cost it ~1 s
    done = subprocess.run([sys.executable, "-c", _RUN_WITHOUT_SIGNAL], cwd=str(tmp_path),
                          capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr[-3000:]
    lines = done.stdout.strip().splitlines()[-3:]
    assert lines == ["[0] False False", "True True", "True"], done.stdout[-2000:]


_WORKER_IMPORTS = r"""
import importlib, sys
import numpy as np
import soundfile as sf
from simwave.batch.engines import WORKER_PRELOAD
for name in WORKER_PRELOAD:
    importlib.import_module(name)
from simwave.batch.plan import quick_plan
from simwave.batch.runner import run_batch
rng = np.random.default_rng(3)
for i in range(2):
    x = np.zeros(48000)
    x[9000 + 5000 * i:] = 0.3
    x += 1e-3 * rng.standard_normal(x.size)
    sf.write(f"rec{i}.wav", x, 48000, subtype="FLOAT")
plan = quick_plan(["(2*pi*100)^2/(s^2 + 2*0.5*2*pi*100*s + (2*pi*100)^2)", "1/(2m*s + 1)"],
                  ["rec0.wav", "rec1.wav"], "out")
before = set(sys.modules)
result = run_batch(plan, jobs=1)
print(result.counts["ok"], sorted(set(sys.modules) - before))
"""


def test_a_batch_pair_imports_nothing_beyond_the_worker_preload(tmp_path):
    # what a pool worker imports on its first pairs it pays once per worker (scipy.ndimage
    # alone was 0.25-0.3 s); the forkserver's preload (engines.WORKER_PRELOAD) should hold
    # all of it. Noisy steps whose level histograms take the narrow smoothing kernel.
    done = subprocess.run([sys.executable, "-c", _WORKER_IMPORTS], cwd=str(tmp_path),
                          capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr[-3000:]
    assert done.stdout.strip().splitlines()[-1] == "4 []", done.stdout[-3000:]


def test_without_the_loaded_loops_the_public_calls_give_the_same_bits(monkeypatch):
    # another scipy layout: kernels finds no file and every call goes through scipy's
    # public functions (same numbers, slower); forced here by clearing what was loaded
    import simwave
    from simwave.discrete import filter as flt
    from simwave.discrete import realization

    x = np.r_[np.zeros(50), np.ones(3000)] + 0.01 * np.random.default_rng(8).standard_normal(3050)
    runs = [("1/(2m*s + 1)", "ramp-invariant", "incremental"),
            ("(2*pi*100)^2/(s^2 + 2*0.5*2*pi*100*s + (2*pi*100)^2)", "step-invariant", "auto"),
            ("(2*pi*100)^2/(s^2 + 2*0.5*2*pi*100*s + (2*pi*100)^2)", "bilinear", "sections")]

    def outputs():
        out = []
        for text, method, realization_name in runs:
            model = simwave.System.parse(text).discretize(
                9000.0 + len(out), method, realization=realization_name)
            out += [model.filter(x), model.filter(x, initial="settled"), model.sos.copy()]
        return out

    loaded = outputs()
    monkeypatch.setattr(flt, "sosfilt_loop", None)
    monkeypatch.setattr(kernels, "linear_filter", None)
    monkeypatch.setattr(realization, "_GGEV", None)
    monkeypatch.setattr(realization, "dggev", None)
    public = outputs()
    assert len(public) == len(loaded) == 9
    for a, b in zip(loaded, public, strict=True):
        assert np.array_equal(np.asarray(a).view(np.uint64), np.asarray(b).view(np.uint64))


def test_a_batch_with_a_filter_design_preloads_scipy_signal_once(tmp_path):
    # the designs need scipy.signal's design functions: preloaded in the pool's server
    # (one import) rather than in every worker, whichever way the design is given
    from simwave.batch.plan import quick_plan
    from simwave.batch.runner import _uses_designs

    lp = tmp_path / "lp.toml"
    lp.write_text('[design]\nfamily = "butterworth"\nkind = "lowpass"\norder = 4\n'
                  'cutoff_hz = 1000\n')
    signal = ["step:rate=10k,duration=50m,time=5m"]
    assert _uses_designs(quick_plan([str(lp)], signal, str(tmp_path / "a")))
    assert _uses_designs(quick_plan([], signal, str(tmp_path / "b"),
                                    designs=["butterworth lowpass order=2 cutoff_hz=1k"]))
    assert not _uses_designs(quick_plan(["1/(1m*s + 1)"], signal, str(tmp_path / "c")))


def test_a_private_routine_that_changed_is_not_used():
    # another scipy may change a private routine's arguments or results: each is tried
    # on a case with a known answer (an impulse through y[n] = x[n] + 0.5 y[n-1] gives
    # 1, 0.5, 0.25; the pencil (diag(2, 3), I) has eigenvalues 2 and 3) and left unused
    # when the trial raises or answers otherwise
    def wrong_signature(*args):
        raise TypeError("takes 4 arguments")

    def off_by_one_ulp(sos, x, zi):
        x[:] = [[1.0, 0.5, np.nextafter(0.25, 1.0)]]

    assert kernels._works(wrong_signature, kernels._sosfilt_trial) is None
    assert kernels._works(off_by_one_ulp, kernels._sosfilt_trial) is None
    assert kernels._works(lambda b, a, x, axis: x, kernels._lfilter_trial) is None
    assert kernels._works(wrong_signature, kernels._ggev_trial) is None
    # the routines this scipy has pass their own trials
    assert kernels._works(kernels.sosfilt_loop, kernels._sosfilt_trial) is kernels.sosfilt_loop
    assert kernels._works(kernels.linear_filter, kernels._lfilter_trial) is kernels.linear_filter
    assert kernels._works(kernels.dggev, kernels._ggev_trial) is kernels.dggev
