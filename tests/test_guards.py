"""Entry-point guards: values simwave cannot compute with are refused in one line.

Checks of item-by-item tracebacks found by a fault campaign, now one-line errors
(exit 2), and of the reports that replaced misleading ones.
"""

from __future__ import annotations

import json
import math

import h5py
import numpy as np
import pytest
import scipy.signal
from click.testing import CliRunner

import simwave
from simwave.cli import main
from simwave.errors import SimwaveError
from simwave.guards import MAX_DELAY_SAMPLES, check_rate, json_ready, with_null_reasons
from simwave.model.clusters import multiple_roots

STEP = "step:rate=1k,duration=0.2,time=10m"


def _cli(tmp_path, monkeypatch, *args):
    monkeypatch.chdir(tmp_path)
    return CliRunner().invoke(main, list(args))


@pytest.mark.parametrize("args, words", [
    # The model runs (as the incremental form: its sections' response is not the
    # model's) and the output's overflow at 0.072 s is reported, where float64 runs out
    # (709.78 / 1e4 = 0.071 s); before, the sections' least-squares start failed first.
    (["run", "pulse:rate=1k,duration=0.5,width=10m", "-s", "1/(s-1e4)", "-o", "o.csv"],
     "diverged to inf at t = 0.072 s"),
    # A method's transformed model overflowed (a pole at inf): that method is out of the
    # comparison, not a traceback.
    (["run", STEP, "-s", "1/(s^5*(s-128710))", "-m", "step-invariant", "-o", "o.csv"],
     "unstable"),
    (["inspect", "-s", "1/(s^5*(s-128710))", "--rate", "1k", "-m", "step-invariant"],
     "overflows float64"),
    (["run", STEP, "-s", "exp(-s*1e9)/(s+1)", "-o", "o.csv"], "delay line of 1e+12 samples"),
    (["inspect", "-s", "1/(s+1)", "--rate", "1e-200"], "outside the range"),
])
def test_numerical_failures_are_one_line(tmp_path, monkeypatch, args, words):
    res = _cli(tmp_path, monkeypatch, *args)
    assert res.exit_code == 2, res.output
    assert not isinstance(res.exception, Exception) or isinstance(res.exception, SystemExit)
    assert words in res.stderr
    assert list(tmp_path.iterdir()) == []


def test_high_order_integrator_has_no_traceback(tmp_path, monkeypatch):
    # once a LinAlgError (singular matrix); now either a model or one line
    res = _cli(tmp_path, monkeypatch, "inspect", "-s", "1/s^15", "--rate", "1k", "--json")
    assert res.exit_code in (0, 2) and isinstance(res.exception, (SystemExit, type(None)))
    if res.exit_code == 0:
        json.loads(res.stdout)


@pytest.mark.parametrize("system", ["s/(s+5e-324)", "(s)^0/(s+5e-324)"])
def test_a_root_at_a_subnormal_frequency_has_no_traceback(tmp_path, monkeypatch, system):
    # found by tests/test_fuzz.py: the check grid's low edge (a tenth of the smallest root's
    # frequency) underflowed to 0 Hz and numpy's geomspace raised a ValueError
    res = _cli(tmp_path, monkeypatch, "inspect", "-s", system, "--rate", "1k", "--json")
    assert res.exit_code in (0, 2) and isinstance(res.exception, (SystemExit, type(None)))
    if res.exit_code == 0:
        json.loads(res.stdout)
    else:
        errors = [ln for ln in res.stderr.splitlines() if ln.startswith("Error:")]
        assert len(errors) == 1 and "Traceback" not in res.stderr


@pytest.mark.parametrize("gain", [1e100, 1e150, 1e-100])
def test_large_gains_measure_like_unit_gain(gain):
    # IEEE Std 181-2011 measures a transition against the waveform's own state levels:
    # scaling the output by g leaves its times and percentages as they are and scales its
    # levels by g; up to the limits where the measurement's squares stay in float64.
    x = simwave.read(STEP)

    def metrics(g):
        text = f"{g:g}/(10m*s + 1)"
        return simwave.key_metrics(simwave.measure(
            simwave.simulate(text, x), reference=x, system=text, rest_before_record=True))["step"]

    unit, big = metrics(1.0), metrics(gain)
    for name in ("rise_time_s_mean", "settling_time_s_longest", "delay_s_mean"):
        assert big[name] == pytest.approx(unit[name], rel=1e-9), name
    # a tiny overshoot (a few parts per million of a percent): absolute agreement
    assert big["overshoot_pct_worst"] == pytest.approx(unit["overshoot_pct_worst"], abs=1e-12)
    for name in ("final_value", "steady_state_gain", "predicted_dc_gain", "mean"):
        assert big[name] == pytest.approx(gain * unit[name], rel=1e-12), name
    assert big["rms"] == pytest.approx(gain * unit["rms"], rel=1e-12)


def test_rate_and_delay_bounds():
    assert check_rate("48000") == 48000.0
    for bad in (0, -1, math.inf, math.nan, 1e-200, 1e300, "fast"):
        with pytest.raises(SimwaveError):
            check_rate(bad)
    # a delay line one sample over the limit is refused, with its length stated
    rate = 1000.0
    with pytest.raises(SimwaveError, match="samples"):
        simwave.System.parse(f"exp(-s*{(MAX_DELAY_SAMPLES + 1) / rate})/(s+1)").discretize(rate)


@pytest.mark.parametrize("gain", ["1e160", "1e300", "5e-324", "1e-160"])
def test_metrics_of_extreme_gains_keep_the_run(tmp_path, monkeypatch, gain):
    # the measuring step refuses values whose squares leave float64's range (beyond 1e150,
    # or a range under 1e-150); by the rule of `run` it is a warning (exit 0)
    res = _cli(tmp_path, monkeypatch, "run", STEP, "-s", gain, "-o", "o.csv",
               "--metrics", "m.json", "--json")
    assert res.exit_code == 0, res.output
    report = json.loads(res.stdout)  # valid JSON (RFC 8259 has no NaN or Infinity)
    assert report["metrics"] is None and "float64" in report["metrics_error"]
    assert "'step'" in report["metrics_error"]  # the channel named
    assert sorted(p.name for p in tmp_path.iterdir()) == ["o.csv"]


def test_non_finite_values_become_null_with_a_reason():
    # RFC 8259, sec. 6: "Numeric values that cannot be represented ... (such as Infinity
    # and NaN) are not permitted."
    doc, reasons = with_null_reasons({"a": [1.0, math.inf], "b": {"c": math.nan}, "d": 2})
    assert doc["a"] == [1.0, None] and doc["b"]["c"] is None and doc["d"] == 2
    assert reasons == {"a[1]": "+infinite (beyond float64)", "b.c": "not a number (undefined)"}
    assert doc["null_reasons"] == reasons
    json.dumps(doc, allow_nan=False)
    assert json_ready(np.float64(-math.inf), "x", {}) is None


def test_twenty_fold_pole_is_named_as_such():
    # Wilkinson, Rounding Errors in Algebraic Processes (1963), ch. 2: the computed roots of
    # (s+1)^20 spread far from -1; their mean stays at -1.
    computed = np.roots(np.poly([-1.0] * 20))
    assert np.ptp(computed.real) > 0.3  # the spread the report used to list as 20 poles
    found = multiple_roots(computed)
    assert len(found) == 1 and found[0]["multiplicity"] == 20
    assert abs(found[0]["root"] + 1) < 1e-9
    d = simwave.System.parse("1/(s+1)^20").to_dict()
    assert d["multiple_poles"][0]["multiplicity"] == 20
    assert any("20-fold pole at -1" in n for n in d["notes"])


@pytest.mark.parametrize("roots", [
    scipy.signal.buttap(20)[1],          # distinct poles on a circle (scipy.signal.buttap)
    np.array([-1.0, -1.5, -2.0, -2.5]),  # distinct real poles
    np.roots(np.poly([-1.0] * 20 + [-1.5])),  # a 20-fold pole beside a separate one
])
def test_distinct_roots_are_not_merged(roots):
    found = multiple_roots(roots)
    assert all(abs(c["root"] + 1.5) > 0.1 for c in found)
    assert sum(c["multiplicity"] for c in found) <= 20


def test_sparse_hdf5_statistics_are_exact_and_quick(tmp_path):
    path = tmp_path / "sparse.h5"
    n, rows = 1 << 30, 1 << 16
    with h5py.File(path, "w") as f:
        d = f.create_dataset("x", shape=(n, 2), chunks=(rows, 2), dtype="f8", fillvalue=0.25)
        d[3 * rows:3 * rows + 4] = [[4.0, -2.0]] * 4
        d.attrs["rate"] = 1e6
    info = simwave.info(str(path), stats=True)
    assert any(note.startswith("sparse dataset") for note in info.notes)
    # exact values from the definition: n - 4 samples of 0.25 and 4 of (4, -2)
    for c, v in enumerate((4.0, -2.0)):
        s = info.stats[c]
        assert s["min"] == min(0.25, v) and s["max"] == max(0.25, v)
        assert s["mean"] == pytest.approx(((n - 4) * 0.25 + 4 * v) / n, rel=1e-15)
        assert s["rms"] == pytest.approx(math.sqrt(((n - 4) * 0.0625 + 4 * v * v) / n),
                                         rel=1e-15)


def test_info_without_stats_does_not_make_the_samples(tmp_path, monkeypatch):
    import importlib

    gen = importlib.import_module("simwave.signals.generate")

    made = []
    real = gen.generate_blocks

    def counting(*args, **kwargs):
        for b in real(*args, **kwargs):
            made.append(b.n_samples)
            yield b

    monkeypatch.setattr(gen, "generate_blocks", counting)
    res = _cli(tmp_path, monkeypatch, "info", "step:rate=1M,duration=1e4", "--no-stats")
    assert res.exit_code == 0, res.output
    assert "10000000000" in res.stdout
    assert sum(made) <= 1


def test_external_raw_storage_is_found_beside_the_file(tmp_path, monkeypatch):
    folder = tmp_path / "data"
    folder.mkdir()
    x = np.sin(np.arange(100) / 10.0)
    x.astype("<f8").tofile(folder / "raw.bin")
    with h5py.File(folder / "e.h5", "w") as f:
        d = f.create_dataset("x", shape=(100, 1), dtype="<f8",
                             external=[("raw.bin", 0, h5py.h5f.UNLIMITED)])
        d.attrs["rate"] = 1e3
    # The CLI sets HDF5_EXTFILE_PREFIX before h5py starts (this test process imported h5py
    # already, so the check runs the command in its own process); the working folder is
    # not the file's.
    from faultkit import run_cli

    proc = run_cli("info", "data/e.h5", "--json", cwd=str(tmp_path))
    assert proc.returncode == 0, proc.stderr
    stats = json.loads(proc.stdout)["stats"][0]
    assert stats["max"] == x.max() and stats["min"] == x.min()


def test_unseekable_codec_is_read(tmp_path):
    import soundfile as sf

    x = 0.5 * np.sin(np.arange(4000) / 10.0)
    sf.write(tmp_path / "g.wav", x, 8000, subtype="GSM610")
    w = simwave.read(str(tmp_path / "g.wav"))
    # GSM 6.10 in WAV codes whole 320-sample blocks; libsndfile wrote one more (observed)
    assert 4000 <= w.n_samples <= 4000 + 2 * 320
    info = simwave.info(str(tmp_path / "g.wav"), stats=True)  # a second pass over the file
    assert info.stats[0]["max"] > 0.3


def test_cr_only_line_endings_are_read(tmp_path):
    # classic Mac OS text files end lines in CR alone; they were "no numeric rows"
    rows = "".join(f"{k / 1000!r},{float(k >= 50)!r}\r" for k in range(100))
    (tmp_path / "cr.csv").write_bytes(("time,x\r" + rows).encode())
    with pytest.warns(UserWarning, match="lines end in CR only"):
        w = simwave.read(str(tmp_path / "cr.csv"))
    assert w.n_samples == 100 and w.rate == pytest.approx(1000.0)
    assert w.data[:, 0].sum() == 50.0


def test_time_steps_without_a_usable_rate_are_one_line(tmp_path):
    # found by tests/fuzz_counts.py (seed 17): steps of 1e300 s beside NaN times
    text = "time,x\r1e300,2.5\r1e300,1e308\r0.001,0\r0,0.001\r0.001,nan\r0,2.5\r0.004,1\r"
    (tmp_path / "t.csv").write_bytes((text + "0.001,1\rnan,1\r").encode())
    with pytest.raises(SimwaveError):
        simwave.info(str(tmp_path / "t.csv"))
