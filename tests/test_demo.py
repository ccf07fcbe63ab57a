"""simwave demo: the whole job end to end in a temporary folder, its numbers checked
against the filter families' published behaviour; a non-empty folder is refused."""

from __future__ import annotations

import json
import math
import os

import numpy as np
import pytest
from click.testing import CliRunner
from scipy import signal

from simwave.cli import main
from simwave.demo import CANDIDATES, CUTOFF_HZ, HUM_HZ, INPUTS, ORDER, check_folder

pytest.importorskip("simwave.batch", reason="the demo runs its comparison through simwave.batch")


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    folder = tmp_path_factory.mktemp("demo") / "weigh-station"
    result = CliRunner().invoke(main, ["demo", str(folder)])
    assert result.exit_code == 0, result.output
    return folder, result.output


def _rows(folder):
    with open(folder / "results" / "summary.json", encoding="utf-8") as fh:
        return json.load(fh)["rows"]


def test_demo_writes_everything_it_announces(demo):
    folder, out = demo
    assert sorted(os.listdir(folder / "inputs")) == sorted(INPUTS)
    assert sorted(os.listdir(folder / "systems")) == sorted(f"{n}.toml" for n in CANDIDATES)
    assert (folder / "batch.toml").is_file() and (folder / "README.txt").is_file()
    results = sorted(os.listdir(folder / "results"))
    for name in INPUTS:
        stem, ext = os.path.splitext(name)
        for cand in CANDIDATES:
            assert f"{stem}__{cand}{ext}" in results
            assert f"{stem}__{cand}.metrics.json" in results
    assert "summary.csv" in results and "summary.json" in results
    assert "report.html" in results and "results/report.html" in out
    plots = sorted(os.listdir(folder / "plots"))
    assert plots == sorted(["comparison.png"] + [f"{kind}-{c}.png" for c in CANDIDATES
                                                 for kind in ("step", "frequency")])
    for p in plots:
        assert (folder / "plots" / p).read_bytes()[:4] == b"\x89PNG"
    # what it prints: where things are, the comparison, the caution
    assert "summary" in out and "comparison.png" in out
    assert "Key comparison" in out and "bessel4" in out and "butterworth4" in out
    assert "not verification of built hardware" in out
    assert "applicable standards and licensed engineering practice" in out


def test_bessel_overshoots_less_than_butterworth(demo):
    # Bessel filters trade selectivity for a step response with almost no overshoot;
    # 4th-order step overshoot is about 0.8 % for Bessel and 10.8 % for Butterworth
    # (A. B. Williams and F. J. Taylor, Electronic Filter Design Handbook, 4th ed.,
    # ch. 2, step-response curves; values quoted from memory). The demo's parcels slide
    # on in 12 ms, a ramp rather than an ideal step, which lowers both a little.
    folder, out = demo
    rows = [r for r in _rows(folder) if r["kind"] == "transitions"]
    assert len(rows) == 4  # two parcel records x two candidates
    for name in INPUTS:
        mine = {r["system"]: r for r in rows if os.path.basename(r["input"]) == name}
        if not mine:
            continue
        bessel, butter = mine["bessel4"]["overshoot_pct_worst"], \
            mine["butterworth4"]["overshoot_pct_worst"]
        assert bessel < butter
        assert bessel < 1.0
        assert 8.0 < butter < 11.5
    table = [ln for ln in out.splitlines() if ln.strip().startswith(("bessel4", "butterworth4"))]
    assert len(table) == 2
    assert "bessel4 overshoots less" in out


def test_hum_gain_matches_the_analog_filters(demo):
    # The empty-belt record is the hum alone: its measured gain at 50 Hz must be the
    # filters' |H(j 2 pi 50)|, computed independently with scipy.signal's analog designs.
    folder, _ = demo
    hum = {r["system"]: r for r in _rows(folder) if r["kind"] == "sine"}
    wc = 2 * math.pi * CUTOFF_HZ
    designs = {
        "bessel4": signal.bessel(ORDER, wc, analog=True, norm="mag"),
        "butterworth4": signal.butter(ORDER, wc, analog=True),
    }
    for name, (b, a) in designs.items():
        _, h = signal.freqs(b, a, worN=[2 * math.pi * HUM_HZ])
        expected = 20 * np.log10(abs(h[0]))
        assert hum[name]["frequency_hz"] == pytest.approx(HUM_HZ, rel=1e-3)
        assert hum[name]["gain_db"] == pytest.approx(expected, abs=0.2)
    assert hum["butterworth4"]["gain_db"] < hum["bessel4"]["gain_db"]  # the other side of it


def test_demo_files_are_usable_on_their_own(demo):
    folder, _ = demo
    runner = CliRunner()
    ok = runner.invoke(main, ["inspect", "-s", str(folder / "systems" / "bessel4.toml")])
    assert ok.exit_code == 0, ok.output
    assert "stable" in ok.output


def test_demo_refuses_a_non_empty_folder(tmp_path):
    (tmp_path / "notes.txt").write_text("mine", encoding="utf-8")
    result = CliRunner().invoke(main, ["demo", str(tmp_path)])
    assert result.exit_code == 2
    lines = result.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("Error: ") and "not empty" in lines[0]
    assert "--force" in lines[0]
    assert os.listdir(tmp_path) == ["notes.txt"]
    assert (tmp_path / "notes.txt").read_text(encoding="utf-8") == "mine"
    assert check_folder(str(tmp_path), force=True) == str(tmp_path)
    with pytest.raises(Exception, match="is a file"):
        check_folder(str(tmp_path / "notes.txt"), force=True)
