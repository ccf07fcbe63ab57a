"""``simwave inspect --rate``: the discrete model's accuracy on the command line."""

from __future__ import annotations

import json
import math

from click.testing import CliRunner

from simwave.cli import main
from simwave.discrete import METHODS

BUTTER4 = "butterworth lowpass order=4 cutoff_hz=1k"


def run(*args: str):
    return CliRunner().invoke(main, ["inspect", *args])


def test_inspect_rate_prints_accuracy_table():
    result = run("--design", BUTTER4, "--rate", "48k", "-m", "step-invariant")
    assert result.exit_code == 0, result.output
    out = result.stdout
    assert "Discrete model: step-invariant at 48 kHz" in out
    assert "largest magnitude error" in out and "largest phase error" in out
    for name in METHODS:
        assert name in out


def test_inspect_rate_json_matches_api():
    result = run("--design", BUTTER4, "--rate", "48000", "--json")
    assert result.exit_code == 0, result.output
    d = json.loads(result.stdout)["discrete"]
    assert d["method"] == "ramp-invariant"  # the default
    assert d["rate_hz"] == 48000.0 and d["sections"] == 2
    # Half-sample-free: the ramp-invariant phase error is tiny, its magnitude error is not.
    assert abs(d["max_phase_error_deg"]) < 0.01
    assert -1.0 < d["max_mag_error_db"] < -0.1
    assert all(math.isfinite(v) for v in d["suggested_rate_hz"].values())


def test_inspect_dead_time_and_prewarp():
    result = run("-s", "100/(s+100)", "--dead-time", "2.5m", "--rate", "1k", "-m", "bilinear",
                 "--prewarp", "50")
    assert result.exit_code == 0, result.output
    assert "Thiran" in result.stdout and "prewarped at 50 Hz" in result.stdout


def test_inspect_rate_bad_input_exit_2():
    for args in (["--rate", "0"], ["--rate", "1k", "--prewarp", "600", "-m", "bilinear"],
                 ["--method", "bilinear"], ["--rate", "1k", "--band-hz", "900"],
                 ["--rate", "1k", "-m", "tustin"]):
        result = run("-s", "1/(s+1)", *args)
        assert result.exit_code == 2, (args, result.output)
        assert "Traceback" not in result.output


def test_inspect_unstable_system_warns_and_reports():
    result = run("-s", "1/(s-2)", "--rate", "100")
    assert result.exit_code == 0, result.output
    assert "unstable" in result.stderr


def test_inspect_rate_shows_realization_and_round_off():
    # 1 Hz at 1 MHz: sections would round to ~3e-5 of the signal (their coefficients
    # lose 1/(w T)^2 of their digits near z = 1: Oppenheim & Schafer, Discrete-Time Signal
    # Processing, 3rd ed., coefficient quantization of direct-form sections); the
    # incremental form is chosen and said, with its expected round-off (an estimate).
    result = run("--design", "butterworth lowpass order=4 cutoff_hz=1", "--rate", "1M")
    assert result.exit_code == 0, result.output
    assert "realization             incremental, expected round-off about" in result.stdout
    assert "second-order sections would round to about 3.1e-05" in result.stdout
    result = run("--design", BUTTER4, "--rate", "48k", "--json")
    d = json.loads(result.stdout)["discrete"]
    assert d["realization"] == "sections" and 0 < d["round_off_level"] < 1e-11
    assert d["method_check"]["poor"] is False and d["max_sine_error"] < 0.01
