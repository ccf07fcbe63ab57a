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
from simwave.demo import (
    BAND_MARGIN,
    CANDIDATES,
    CUTOFF_HZ,
    DWELL_S,
    EDGE_S,
    FIRST_S,
    HUM_HZ,
    INPUTS,
    ORDER,
    PARCELS,
    PERIOD_S,
    RATE_HZ,
    SETTLING_BAND_PCT,
    SETTLING_DEFINITION,
    TAIL_S,
    check_folder,
)

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


def _edge_truth(name, mass, band_pct):
    """Per edge of a parcel record without hum and noise: (50 % instant, settling time) of
    the analog filter's response, for a band of ``band_pct`` % of the step. The filters are
    scipy.signal's analog designs, the response scipy.signal.lsim's (exact for an input that
    is linear between its samples: the parcels' straight edges start and end on the grid)."""
    wc = 2 * math.pi * CUTOFF_HZ
    b, a = (signal.bessel(ORDER, wc, analog=True, norm="mag") if name == "bessel4"
            else signal.butter(ORDER, wc, analog=True))
    rate = 20_000.0
    t = np.arange(round((FIRST_S + PARCELS * PERIOD_S + TAIL_S) * rate)) / rate
    span = EDGE_S / 0.8  # 0-100 % of a straight edge whose 10-90 % duration is EDGE_S
    u = np.zeros_like(t)
    edges = []
    for k in range(PARCELS):
        on = FIRST_S + k * PERIOD_S
        edges += [(on, mass), (on + DWELL_S, 0.0)]
        u += mass * (np.clip((t - on) / span + 0.5, 0, 1) - np.clip((t - on - DWELL_S) / span
                                                                     + 0.5, 0, 1))
    _, y, _ = signal.lsim((b, a), u, t)
    out = []
    for i, (at, level) in enumerate(edges):
        nxt = edges[i + 1][0] if i + 1 < len(edges) else t[-1]
        inside = (t >= at) & (t < nxt)
        outside = np.abs(y[inside] - level) > band_pct / 100.0 * mass
        last = t[inside][np.nonzero(outside)[0][-1]] if outside.any() else at
        out.append((at, last + 1 / rate - at))
    return out


def test_settling_times_match_the_analog_filters(demo):
    # Every edge settles within the demo's band, and each measured settling time lies inside
    # the analog truth's bracket: the band narrowed and widened by the disturbance peak the
    # measurement reports for that edge (hum and noise shift the last entry into the band by
    # at most that much), plus one sample (2 kHz) for the sampled crossing. Truth: the noise-
    # free record through scipy.signal's analog Bessel/Butterworth designs (scipy.signal.lsim).
    folder, _ = demo
    for name in CANDIDATES:
        for rec, (mass, _seed) in INPUTS.items():
            if mass is None:
                continue
            stem = os.path.splitext(rec)[0]
            with open(folder / "results" / f"{stem}__{name}.metrics.json", encoding="utf-8") as fh:
                edges = json.load(fh)["metrics"]["channels"][0]["transitions"]
            assert len(edges) == 2 * PARCELS
            for edge in edges:
                assert edge["settling_time_s"] is not None, edge.get("null_reasons")
                d_pct = 100.0 * edge["disturbance_peak"] / abs(edge["state_levels"]["amplitude"])
                assert d_pct < SETTLING_BAND_PCT / BAND_MARGIN
                at = edge["time_origin_s"]
                narrow = dict(_edge_truth(name, mass, SETTLING_BAND_PCT - d_pct))
                wide = dict(_edge_truth(name, mass, SETTLING_BAND_PCT + d_pct))
                key = min(narrow, key=lambda e: abs(e - at))
                assert abs(key - at) < 1e-3  # the input's 50 % instant, found
                sample = 1.0 / RATE_HZ
                assert wide[key] - sample <= edge["settling_time_s"] <= narrow[key] + sample


def test_table_and_comparison_chart_show_one_settling_definition(demo):
    # The printed table and comparison.png both show the summary rows' longest settling time
    # (plot_batch draws the column settling_time_s_longest); the definition and its band are
    # printed with the table and put in the chart's title; no edge is left unsettled.
    folder, out = demo
    rows = [r for r in _rows(folder) if r["kind"] == "transitions"]
    band = f"\u00b1{SETTLING_BAND_PCT:g} % band"
    assert band in SETTLING_DEFINITION and SETTLING_DEFINITION in out.replace("\n", " ")
    for name in CANDIDATES:
        mine = [r for r in rows if r["system"] == name]
        assert all(r["not_settled"] == 0 for r in mine)
        longest = max(r["settling_time_s_longest"] for r in mine)
        line = next(ln for ln in out.splitlines() if ln.strip().startswith(name + " "))
        assert f"{longest * 1e3:.1f} ms" in line and "0 of 32" in line
        assert "never settled" not in line
    assert "no settling time" not in out
    # the band against the disturbance measured beside the edges, stated with its ratio
    fit = next(ln for ln in out.splitlines() if ln.startswith(f"Settling band {band[:-5]}"))
    ratio = float(fit.split("half-width is ")[1].split(" times")[0])
    assert ratio >= BAND_MARGIN and "Caution" not in fit
