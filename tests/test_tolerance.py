"""Tolerance studies: corners, Monte Carlo, sweeps, sensitivities, against outside sources."""

from __future__ import annotations

import json
import math
import os
import subprocess
import sys
import time

import numpy as np
import pytest
from click.testing import CliRunner

from simwave.batch.engines import InlineEngine, PoolEngine
from simwave.cli import main
from simwave.errors import SimwaveError
from simwave.model.params import parse_parameter
from simwave.tolerance import (
    StudyError, SystemTemplate, load_study, model_figures, run_study, transfer_sensitivity,
    wilson_interval,
)
from simwave.tolerance import builds as B

RC_STUDY = """
[study]
analysis = "{analysis}"
seed = 11
draws = {draws}

[system]
expression = "1/(R*C*s + 1)"
name = "rc"

[system.parameters]
R = "10k ±1%"
C = "100n ±5%"

[output]
plots = {plots}

[limits]
rise_time_s_mean = {{ max = "2.3m" }}

[[inputs]]
signal = "step:rate=100k,duration=20m,time=1m"
name = "step"
"""


def _write(tmp_path, text, name="study.toml"):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return str(p)


def _rc_study(tmp_path, analysis="corners", draws=20, plots="false", sub="rc"):
    d = tmp_path / sub
    d.mkdir(exist_ok=True)
    return _write(d, RC_STUDY.format(analysis=analysis, draws=draws, plots=plots))


def _model(result, role):
    return [(b, result.results[b.index]["model"]) for b in result.builds if b.role == role]


# ----------------------------------------------------------------------------- RC corners
def test_rc_corners_time_constants_and_corner_frequencies_are_exact(tmp_path):
    # First-order RC low-pass 1/(RCs + 1): time constant tau = RC, -3 dB frequency
    # 1/(2 pi RC), 10-90 % rise time tau ln 9 (Ogata, Modern Control Engineering, 5th ed.,
    # sec. 5-2; section number from memory).
    result = run_study(load_study(_rc_study(tmp_path)), engine=InlineEngine())
    corners = _model(result, "corner")
    assert len(corners) == 4
    seen = set()
    for b, fig in corners:
        r, c = b.values["R"], b.values["C"]
        seen.add((round(r / 10e3, 12), round(c / 100e-9, 12)))
        assert fig["time_constant_s_slowest"] == pytest.approx(r * c, rel=4e-16)
        assert fig["bandwidth_3db_hz"] == pytest.approx(1 / (2 * math.pi * r * c), rel=1e-12)
        rise = result.results[b.index]["inputs"]["step"]["metrics"]["step"]["rise_time_s_mean"]
        # 100 kHz sampling of an exact ramp-invariant model: crossings interpolated linearly
        assert rise == pytest.approx(r * c * math.log(9), rel=2e-4)
    assert seen == {(0.99, 0.95), (0.99, 1.05), (1.01, 0.95), (1.01, 1.05)}
    tau = next(r for r in result.summary["model"] if r["metric"] == "time_constant_s_slowest")
    assert tau["min"] == pytest.approx(0.99 * 0.95 * 1e-3, rel=4e-16)
    assert tau["max"] == pytest.approx(1.01 * 1.05 * 1e-3, rel=4e-16)
    # The limit 2.3 ms on rise time = tau ln 9: only the R+ C+ corner (2.330 ms) fails.
    rise = next(r for r in result.summary["metrics"] if r["metric"] == "rise_time_s_mean")
    assert rise["inside"] == 3 and rise["share_interval_95"] is None
    assert result.summary["worst_build"]["detail"] == "R+ C+"
    assert result.summary["all_limits"]["meeting"] == 3


# ----------------------------------------------------------------------------- Monte Carlo
def _product_of_uniforms_cdf(t, a1, b1, a2, b2):
    """P(XY <= t) for independent X ~ U(a1, b1), Y ~ U(a2, b2), all limits > 0.

    Derivation (conditioning on X; e.g. Papoulis & Pillai, Probability, Random Variables
    and Stochastic Processes, 4th ed., sec. 6-2, function of two random variables;
    section from memory):
        F(t) = 1/(b1-a1) * integral_{a1}^{b1} P(Y <= t/x) dx,
        P(Y <= t/x) = 1 for x <= t/b2, 0 for x >= t/a2, (t/x - a2)/(b2 - a2) between.
    With L = clip(t/b2, a1, b1) and U = clip(t/a2, a1, b1):
        F(t) = [ (L - a1) + (t ln(U/L) - a2 (U - L)) / (b2 - a2) ] / (b1 - a1).
    """
    lo = min(max(t / b2, a1), b1)
    hi = min(max(t / a2, a1), b1)
    return ((lo - a1) + (t * math.log(hi / lo) - a2 * (hi - lo)) / (b2 - a2)) / (b1 - a1)


def test_product_cdf_formula_against_numerical_integration():
    from scipy.integrate import quad

    a1, b1, a2, b2 = 9.9e3, 10.1e3, 95e-9, 105e-9
    for t in np.linspace(a1 * a2, b1 * b2, 9)[1:-1]:
        num = quad(lambda x, t=t: min(max((t / x - a2) / (b2 - a2), 0.0), 1.0), a1, b1,
                   points=[t / b2, t / a2], epsabs=0, epsrel=1e-12)[0] / (b1 - a1)
        assert _product_of_uniforms_cdf(t, a1, b1, a2, b2) == pytest.approx(num, abs=1e-10)


def test_monte_carlo_tau_percentiles_follow_the_product_of_two_uniforms():
    params = {"R": parse_parameter("R", "10k ±1%"), "C": parse_parameter("C", "100n ±5%")}
    template = SystemTemplate("1/(R*C*s + 1)", "expression", "rc")
    n = 2000
    draws = B.random_values(params, n, seed=5)
    tau = np.array([model_figures(template.build(v))["time_constant_s_slowest"]
                    for v in draws])
    assert np.all(tau == pytest.approx(np.array([v["R"] * v["C"] for v in draws]), rel=4e-16))
    for p in (0.01, 0.05, 0.25, 0.5, 0.75, 0.95, 0.99):
        q = float(np.percentile(tau, p * 100))
        f = _product_of_uniforms_cdf(q, 9.9e3, 10.1e3, 95e-9, 105e-9)
        # The empirical CDF at a fixed point has standard error sqrt(p(1-p)/n) (binomial);
        # 4 standard errors plus one sample's step (interpolated percentile).
        se = math.sqrt(p * (1 - p) / n)
        assert abs(f - p) <= 4 * se + 1 / n, (p, f)


def test_same_seed_same_draws_and_prefix_property():
    params = {"R": parse_parameter("R", "10k ±1%"),
              "C": parse_parameter("C", "100n ±5% normal 2sigma")}
    a = B.random_values(params, 50, seed=3)
    assert a == B.random_values(params, 50, seed=3)
    assert a[:20] == B.random_values(params, 20, seed=3)
    assert a != B.random_values(params, 50, seed=4)
    assert all(9.9e3 <= v["R"] <= 10.1e3 for v in a)
    # normal with limits at 2 sigma: sigma = 2.5 nF; the sample sd agrees within sampling error
    cs = np.array([v["C"] for v in B.random_values(params, 4000, seed=9)])
    assert cs.std(ddof=1) == pytest.approx(2.5e-9, rel=4 / math.sqrt(2 * 4000))


# ----------------------------------------------------------------------------- second order
RLC_STUDY = """
[study]
analysis = "corners"
[system]
expression = "1/(L*C*s^2 + R*C*s + 1)"
name = "series-rlc"
[system.parameters]
R = "60 ±5%"
L = "10m ±10%"
C = "1u ±5%"
[output]
plots = false
[[inputs]]
signal = "step:rate=400k,duration=6m,time=0.5m"
name = "step"
"""


def test_second_order_corners_against_ogata(tmp_path):
    # Series RLC, output across C: wn = 1/sqrt(LC), zeta = (R/2) sqrt(C/L); peak overshoot
    # Mp = exp(-zeta pi / sqrt(1 - zeta^2)) (Ogata, Modern Control Engineering, 5th ed.,
    # sec. 5-3; section number from memory).
    result = run_study(load_study(_write(tmp_path, RLC_STUDY)), engine=InlineEngine())
    corners = _model(result, "corner")
    assert len(corners) == 8
    for b, fig in corners:
        r, l_, c = b.values["R"], b.values["L"], b.values["C"]
        wn = 1 / math.sqrt(l_ * c)
        zeta = r / 2 * math.sqrt(c / l_)
        assert fig["natural_frequency_hz_dominant"] == pytest.approx(wn / (2 * math.pi),
                                                                     rel=1e-12)
        assert fig["damping_ratio_dominant"] == pytest.approx(zeta, rel=1e-12)
        mp = 100 * math.exp(-zeta * math.pi / math.sqrt(1 - zeta ** 2))
        m = result.results[b.index]["inputs"]["step"]["metrics"]["step"]
        assert m["overshoot_pct_worst"] == pytest.approx(mp, abs=0.02), b.detail


# ----------------------------------------------------------------------------- sensitivities
def test_transfer_sensitivity_against_bode_analytic():
    # Bode's sensitivity S = (dH/H)/(dx/x) (H. W. Bode, Network Analysis and Feedback
    # Amplifier Design, 1945, ch. 4; from memory). For H = 1/(RCs + 1):
    # S_R = S_C = -RCs/(RCs + 1). For H = 1/(LCs^2 + RCs + 1) = 1/D:
    # S_L = -LCs^2/D, S_R = -RCs/D, S_C = -(LCs^2 + RCs)/D (differentiate D).
    f = np.array([0.0, 10.0, 159.15, 1e3, 1e5])
    vals = {"R": 10e3, "C": 100e-9}
    t = SystemTemplate("1/(R*C*s + 1)", "expression", "rc")
    s = 2j * np.pi * f
    rc = vals["R"] * vals["C"]
    for name in ("R", "C"):
        np.testing.assert_allclose(transfer_sensitivity(t, vals, name, f),
                                   -rc * s / (rc * s + 1), rtol=1e-8, atol=1e-12)
    vals = {"R": 60.0, "L": 10e-3, "C": 1e-6}
    t = SystemTemplate("1/(L*C*s^2 + R*C*s + 1)", "expression", "rlc")
    f = np.array([10.0, 1591.5, 3e3, 1e5])
    s = 2j * np.pi * f
    lc, rc = vals["L"] * vals["C"], vals["R"] * vals["C"]
    d = lc * s ** 2 + rc * s + 1
    expect = {"L": -lc * s ** 2 / d, "R": -rc * s / d, "C": -(lc * s ** 2 + rc * s) / d}
    for name, e in expect.items():
        np.testing.assert_allclose(transfer_sensitivity(t, vals, name, f), e, rtol=1e-7)


def test_study_sensitivities_against_analytic(tmp_path):
    result = run_study(load_study(_rc_study(tmp_path)), engine=InlineEngine())
    rows = {r["metric"]: r for r in result.summary["model"] + result.summary["metrics"]}
    # f3dB = 1/(2 pi R C): the central secant over x(1 +- h) is exactly -1/(1 - h^2)
    for name, h in (("R", 0.01), ("C", 0.05)):
        assert rows["bandwidth_3db_hz"]["sensitivity"][name] == pytest.approx(
            -1 / (1 - h * h), rel=1e-12)
        assert rows["time_constant_s_slowest"]["sensitivity"][name] == pytest.approx(1.0,
                                                                                     rel=1e-12)
        # measured rise time = tau ln 9: sensitivity 1 to R and to C (measured: 1e-3)
        assert rows["rise_time_s_mean"]["sensitivity"][name] == pytest.approx(1.0, abs=1e-3)
    # C's band is five times R's: C moves the time constant most
    assert rows["time_constant_s_slowest"]["moves_most"]["parameter"] == "C"
    at_f3 = [r for r in result.summary["transfer_sensitivity"] if r["f_hz"] > 0]
    assert {r["parameter"] for r in at_f3} == {"R", "C"}
    for r in at_f3:  # |S| = |-j/(1+j)| = 1/sqrt(2), phase -135 deg at the corner
        assert r["magnitude"] == pytest.approx(1 / math.sqrt(2), rel=1e-7)
        assert r["phase_deg"] == pytest.approx(-135.0, abs=1e-5)
        assert r["f_hz"] == pytest.approx(1 / (2 * math.pi * 1e-3), rel=1e-12)


# ----------------------------------------------------------------------------- unstable builds
def test_unstable_and_improper_builds_are_reported_and_counted(tmp_path):
    text = """
[study]
analysis = "corners"
[system]
expression = "(s^2 + 1)/(a*s^2 + b*s + 1)"
[system.parameters]
a = "0.5 ±0.5"
b = "0.2 ±0.3"
[output]
plots = false
[limits]
final_value = [0.9, 1.1]
[[inputs]]
signal = "step:rate=1k,duration=2,time=0.1"
name = "step"
"""
    result = run_study(load_study(_write(tmp_path, text)), engine=InlineEngine())
    c = result.summary["counts"]
    problems = {(p["detail"], p["status"]) for p in result.summary["problem_builds"]}
    # a = 0 makes H(s) improper (degree 2 over 1: not realizable); b = -0.1 an unstable pair
    assert ("a- b-", "not realizable") in problems and ("a- b+", "not realizable") in problems
    assert ("a+ b-", "unstable") in problems
    assert c["not_realizable"] >= 2 and c["unstable"] >= 1
    reasons = [p["reason"] for p in result.summary["problem_builds"]]
    assert any("improper" in r or "numerator degree" in r for r in reasons), reasons
    assert any("right half-plane" in r for r in reasons), reasons
    # They count against the limits, never dropped: 1 of 4 corners can meet them.
    assert result.summary["all_limits"]["builds"] == 4
    assert result.summary["all_limits"]["meeting"] <= 1
    rows = (tmp_path / "tolerance-output" / "builds.csv").read_text().splitlines()
    assert sum("unstable" in r for r in rows) == c["unstable"]


# ----------------------------------------------------------------------------- sweep
def test_sweep_design_search_matches_the_analytic_rise_time(tmp_path):
    text = RC_STUDY.format(analysis="sweep", draws=1, plots="true") + """
[sweep]
R = { from = "5k", to = "20k", points = 7, scale = "log" }
"""
    result = run_study(load_study(_write(tmp_path, text)), engine=InlineEngine())
    sweep = result.summary["sweep"]
    rvals = np.geomspace(5e3, 20e3, 7)
    # At every point the corners of C's tolerance (C = 95n, 105n) run too: a point meets the
    # limit only when rise time = R C ln 9 (Ogata sec. 5-2) does at C = 105n.
    expect = [i for i, r in enumerate(rvals) if r * 105e-9 * math.log(9) <= 2.3e-3]
    nominal_only = [i for i, r in enumerate(rvals) if r * 100e-9 * math.log(9) <= 2.3e-3]
    assert sweep["meeting"] == expect and expect != nominal_only
    assert all(p["corners"] == 2 for p in sweep["points"])
    assert sweep["best"]["values"]["R"] == pytest.approx(5e3)
    assert "meet every limit on every input at every corner" in sweep["statement"]
    assert os.path.exists(result.files["sweep plot"])
    # An impossible limit: the statement says so.
    none = text.replace('max = "2.3m"', 'max = "0.1m"').replace("plots = true", "plots = false")
    result = run_study(load_study(_write(tmp_path, none, "none.toml"),
                                  output_dir=str(tmp_path / "none")), engine=InlineEngine())
    assert result.summary["sweep"]["meeting"] == []
    assert result.summary["sweep"]["statement"].startswith("none of the 7 points")


# ----------------------------------------------------------------------------- statistics
def test_wilson_interval_against_scipy():
    from scipy.stats import binomtest

    for k, n in ((0, 20), (3, 4), (17, 20), (200, 200), (481, 500)):
        ci = binomtest(k, n).proportion_ci(confidence_level=0.95, method="wilson")
        lo, hi = wilson_interval(k, n)
        assert (lo, hi) == (pytest.approx(ci.low, abs=1e-12), pytest.approx(ci.high, abs=1e-12))
    assert wilson_interval(0, 0) is None


def test_monte_carlo_summary_is_consistent_with_its_build_records(tmp_path):
    result = run_study(load_study(_rc_study(tmp_path, "monte-carlo", draws=30)),
                       engine=InlineEngine())
    rise = next(r for r in result.summary["metrics"] if r["metric"] == "rise_time_s_mean")
    vals = [result.results[b.index]["inputs"]["step"]["metrics"]["step"]["rise_time_s_mean"]
            for b in result.builds if b.role == "draw"]
    assert rise["p50"] == float(np.percentile(vals, 50)) and rise["max"] == max(vals)
    k = sum(v <= 2.3e-3 for v in vals)
    assert rise["inside"] == k
    assert rise["share_interval_95"] == pytest.approx(list(wilson_interval(k, 30)))
    rows = (tmp_path / "rc" / "tolerance-output" / "builds.csv").read_text().splitlines()
    assert len(rows) == 1 + 1 + 4 + 30  # header, nominal, 4 steps, 30 draws: all recorded


def test_rerun_reuses_finished_builds(tmp_path):
    path = _rc_study(tmp_path)
    first = run_study(load_study(path), engine=InlineEngine())
    again = run_study(load_study(path), engine=InlineEngine())
    assert again.run.ran == 0 and again.run.reused == len(first.builds)
    a = (tmp_path / "rc" / "tolerance-output" / "tolerance-summary.json").read_bytes()
    forced = run_study(load_study(path), engine=InlineEngine(), force=True)
    assert forced.run.ran == len(first.builds)
    assert (tmp_path / "rc" / "tolerance-output" / "tolerance-summary.json").read_bytes() == a


# ----------------------------------------------------------------------------- reproducibility
def _summary_bytes(path):
    d = os.path.join(os.path.dirname(path), "tolerance-output")
    return (open(os.path.join(d, "tolerance-summary.json"), "rb").read(),
            open(os.path.join(d, "tolerance-summary.csv"), "rb").read(),
            open(os.path.join(d, "builds.csv"), "rb").read())


def _start_dask(tmp_path):
    """A scheduler and two one-thread workers from dask's own command line."""
    import simwave

    env = dict(os.environ)
    root = os.path.dirname(os.path.dirname(os.path.abspath(simwave.__file__)))
    env["PYTHONPATH"] = root + os.pathsep + env.get("PYTHONPATH", "")
    sched_file = str(tmp_path / "scheduler.json")
    log = open(tmp_path / "dask.log", "w")
    procs = [subprocess.Popen(
        [sys.executable, "-m", "dask", "scheduler", "--host", "127.0.0.1", "--port", "0",
         "--no-dashboard", "--scheduler-file", sched_file, "--idle-timeout", "300s"],
        env=env, stdout=log, stderr=subprocess.STDOUT)]
    deadline = time.monotonic() + 60
    while not os.path.exists(sched_file) and time.monotonic() < deadline:
        time.sleep(0.2)
    procs.append(subprocess.Popen(
        [sys.executable, "-m", "dask", "worker", "--scheduler-file", sched_file,
         "--nthreads", "1", "--nworkers", "2", "--no-dashboard", "--memory-limit", "0"],
        env=env, stdout=log, stderr=subprocess.STDOUT))
    return procs, sched_file


def test_same_seed_byte_identical_on_pool_and_on_a_dask_cluster(tmp_path):
    distributed = pytest.importorskip("dask.distributed")
    local = _rc_study(tmp_path, "monte-carlo", draws=24, sub="local")
    run_study(load_study(local), engine=PoolEngine(2))
    procs, sched_file = _start_dask(tmp_path)
    try:
        with distributed.Client(scheduler_file=sched_file, timeout="60s") as client:
            client.wait_for_workers(2, timeout=120)
            address = client.scheduler.address
        remote = _rc_study(tmp_path, "monte-carlo", draws=24, sub="remote")
        result = run_study(load_study(remote), scheduler=address)
        assert result.run.engine.startswith("Dask cluster at tcp://127.0.0.1")
    finally:
        for p in reversed(procs):
            p.terminate()
        for p in reversed(procs):
            try:
                p.wait(timeout=30)
            except subprocess.TimeoutExpired:
                p.kill()
                p.wait()
    assert _summary_bytes(local) == _summary_bytes(remote)
    inline = _rc_study(tmp_path, "monte-carlo", draws=24, sub="inline")
    run_study(load_study(inline), engine=InlineEngine())
    assert _summary_bytes(inline) == _summary_bytes(local)


# ----------------------------------------------------------------------------- bad input, CLI
@pytest.mark.parametrize("edit, fragment", [
    (('seed = 11\n', ''), "needs seed"),
    (('analysis = "monte-carlo"', 'analysis = "montecarlo"'), "unknown analysis"),
    (('name = "rc"', 'name = "rc"\nfoo = 1'), "unknown key 'foo' in [system]"),
    (('R = "10k ±1%"', 'R = "10k"'), None),
    (('C = "100n ±5%"', 'C = "100n ±5%"\nQ = 1'), "parameter Q not used"),
    (('rise_time_s_mean', 'rise_tim'), "unknown metric"),
])
def test_bad_study_files_are_one_line_errors(tmp_path, edit, fragment):
    text = RC_STUDY.format(analysis="monte-carlo", draws=5, plots="false").replace(*edit)
    path = _write(tmp_path, text)
    if fragment is None:  # one toleranced parameter is still enough
        assert load_study(path).parameters["R"].tolerance is None
        return
    with pytest.raises(SimwaveError) as info:
        load_study(path)
    assert fragment in str(info.value) and "\n" not in str(info.value)
    assert "study.toml" in str(info.value)


def test_sweep_of_an_unknown_parameter_names_the_line(tmp_path):
    text = RC_STUDY.format(analysis="sweep", draws=1, plots="false") + "[sweep]\nQ = [1, 2]\n"
    with pytest.raises(StudyError, match=r"line \d+: Q is not a parameter"):
        load_study(_write(tmp_path, text))


def test_cli_prints_the_summary_and_writes_the_files(tmp_path):
    path = _rc_study(tmp_path, plots="true")
    r = CliRunner().invoke(main, ["tolerance", path, "-j", "1", "--set", "R=10k"])
    assert r.exit_code == 0, r.output
    assert "all limits on all inputs: 3 of 4 builds" in r.output
    assert "Caution:" in r.output
    out = tmp_path / "rc" / "tolerance-output"
    for name in ("tolerance-summary.json", "tolerance-summary.csv", "builds.csv",
                 "build-metrics.csv", "distributions.png", "worst-build.png"):
        assert (out / name).stat().st_size > 0
    doc = json.loads((out / "tolerance-summary.json").read_text())
    assert doc["schema"] == 1 and doc["analysis"] == "corners"
    r = CliRunner().invoke(main, ["tolerance", str(tmp_path / "missing.toml")])
    assert r.exit_code == 2 and r.output.startswith("Error: ") and "not found" in r.output


# ----------------------------------------------------------------------------- the example
def test_example_study_runs_as_written(tmp_path):
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    study = os.path.join(root, "examples", "strain_front_end_study.toml")
    r = CliRunner().invoke(main, ["tolerance", study, "-o", str(tmp_path / "mc"),
                                  "--draws", "12", "-j", "1"])
    assert r.exit_code == 0, r.output
    doc = json.loads((tmp_path / "mc" / "tolerance-summary.json").read_text())
    assert doc["counts"]["analysis_builds"] == 12 and doc["seed"] == 2026
    rows = {r["metric"]: r for r in doc["model"]}
    # Unity-gain Sallen-Key: wn = 1/sqrt(R1 R2 C1 C2), zeta = C2 (R1 + R2) / (2 sqrt(R1 R2
    # C1 C2)) (coefficients of the denominator; Ogata sec. 5-3 for wn and zeta).
    wn = 1 / math.sqrt(10e3 * 10e3 * 22e-9 * 10e-9)
    assert rows["natural_frequency_hz_dominant"]["nominal"] == pytest.approx(
        wn / (2 * math.pi), rel=1e-12)
    assert rows["damping_ratio_dominant"]["nominal"] == pytest.approx(
        10e-9 * 20e3 / 2 * wn, rel=1e-12)
    assert rows["dc_gain"]["nominal"] == pytest.approx(100.0, rel=1e-14)
    # C2 (the wider band) decides the damping, hence the overshoot
    over = next(m for m in doc["metrics"] if m["metric"] == "overshoot_pct_worst")
    assert over["moves_most"]["parameter"] == "C2"
    r = CliRunner().invoke(main, ["tolerance", study, "-o", str(tmp_path / "sweep"),
                                  "--analysis", "sweep", "-j", "1"])
    assert r.exit_code == 0, r.output
    assert "design search:" in r.output
    doc = json.loads((tmp_path / "sweep" / "tolerance-summary.json").read_text())
    assert [p["values"]["C2"] for p in doc["sweep"]["points"]] == [6.8e-9, 8.2e-9, 10e-9,
                                                                   12e-9, 15e-9]


# ----------------------------------------------------------------------------- many parts
def test_beyond_ten_parts_the_corners_the_sensitivities_point_to(tmp_path):
    # tau = (R1 + ... + R11) C: increasing in every part, so the pointed corners are all
    # parts high and all parts low, and they give the exact extremes of tau (the sum of
    # the upper limits times C's upper limit, and the same for the lower ones).
    names = [f"R{i}" for i in range(1, 12)]
    params = "\n".join(f'{n} = "{i + 1}k ±1%"' for i, n in enumerate(names))
    text = f"""
[study]
analysis = "corners"
[system]
expression = "1/(({' + '.join(names)})*C*s + 1)"
[system.parameters]
{params}
C = "10n ±2%"
[output]
plots = false
[[inputs]]
signal = "step:rate=20k,duration=30m,time=1m"
name = "step"
"""
    result = run_study(load_study(_write(tmp_path, text)), engine=InlineEngine())
    corners = [b for b in result.builds if b.role == "corner"]
    assert {b.detail for b in corners} >= {" ".join(f"{n}+" for n in names + ["C"]),
                                           " ".join(f"{n}-" for n in names + ["C"])}
    assert any("sensitivity steps point to" in n for n in result.summary["notes"])
    tau = next(r for r in result.summary["model"] if r["metric"] == "time_constant_s_slowest")
    total = sum(range(1, 12)) * 1e3
    assert tau["max"] == pytest.approx(total * 1.01 * 10e-9 * 1.02, rel=1e-14)
    assert tau["min"] == pytest.approx(total * 0.99 * 10e-9 * 0.98, rel=1e-14)


def test_two_parameter_sweep_grid(tmp_path):
    text = RC_STUDY.format(analysis="sweep", draws=1, plots="true") + """
[sweep]
R = ["5k", "10k"]
C = { from = "50n", to = "150n", points = 3 }
"""
    result = run_study(load_study(_write(tmp_path, text)), engine=InlineEngine())
    pts = [p["values"] for p in result.summary["sweep"]["points"]]
    assert pts == [{"R": r, "C": c} for r in (5e3, 10e3) for c in (50e-9, 100e-9, 150e-9)]
    for p, b in zip(result.summary["sweep"]["points"],
                    [b for b in result.builds if b.role == "sweep"], strict=True):
        fig = result.results[b.index]["model"]
        assert fig["time_constant_s_slowest"] == pytest.approx(
            p["values"]["R"] * p["values"]["C"], rel=4e-16)
    assert os.path.getsize(result.files["sweep plot"]) > 0


class _StopsAfterOneTask(InlineEngine):
    """Runs the first task, then behaves as if Ctrl-C were pressed."""

    def results(self, tasks):
        for task in tasks:
            yield task, task.run()
            raise KeyboardInterrupt


def test_an_interrupted_study_resumes_where_it_stopped(tmp_path):
    path = _rc_study(tmp_path, "monte-carlo", draws=12)
    study = load_study(path)
    study.builds_per_task = 5
    with pytest.raises(KeyboardInterrupt):
        run_study(study, engine=_StopsAfterOneTask())
    out = tmp_path / "rc" / "tolerance-output"
    assert not (out / "tolerance-summary.json").exists()  # no summary from half a study
    study = load_study(path)
    result = run_study(study, engine=InlineEngine())
    assert result.run.reused == 5 and result.run.ran == len(result.builds) - 5
    fresh = _rc_study(tmp_path, "monte-carlo", draws=12, sub="fresh")
    run_study(load_study(fresh), engine=InlineEngine())
    assert _summary_bytes(path) == _summary_bytes(fresh)


# ----------------------------------------------------------------------------- not measurable
def test_a_limited_metric_no_build_can_measure_is_a_row_with_its_reason(tmp_path):
    # A noisy step (Gaussian, sigma 5 % of the step) through RC = 1 ms: the output's noise
    # (RMS about 0.0035) reaches beyond a ±0.5 % settling band, so `measure` reports settling
    # as not measurable. The study must show that row as n/a with the reason and must not
    # call the unmeasured limit a "margin".
    import simwave

    fs = 100e3
    t = np.arange(int(0.04 * fs)) / fs
    x = (t >= 2e-3).astype(float) + np.random.default_rng(1).normal(0, 0.05, t.size)
    simwave.write(str(tmp_path / "noisy.csv"), simwave.Waveform(x[:, None], fs, channels=["v"]))
    study = RC_STUDY.format(analysis="corners", draws=4, plots="false").replace(
        'rise_time_s_mean = { max = "2.3m" }', 'settling_time_s_longest = { max = "10m" }'
    ).replace('signal = "step:rate=100k,duration=20m,time=1m"\nname = "step"',
              'files = ["noisy.csv"]')
    study = study.replace("[limits]", "[measure]\nsettling_band_pct = 0.5\n\n[limits]")
    result = run_study(load_study(_write(tmp_path, study)), engine=InlineEngine())
    row = next(r for r in result.summary["metrics"] if r["metric"] == "settling_time_s_longest")
    assert row["nominal"] is None and row["measured"] == 0 and row["not_measured"] == 4
    assert "band" in row["not_measured_reason"] and "cannot be measured" in row[
        "not_measured_reason"]
    assert row["inside"] == 0
    assert "not measured on" in result.summary["worst_build"]["why"]
    from simwave.tolerance.text import format_summary

    text = format_summary(result.summary)
    line = next(s for s in text.splitlines() if s.startswith("settling_time_s_longest"))
    assert line.split()[1:5] == ["n/a"] * 4
    assert "settling_time_s_longest: not measured in 4 of 4 builds: " in text
