"""simwave.measure as a whole: result layout, channels, streaming, files, bad input."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

import simwave
from simwave import System, Waveform
from simwave.discrete import discretize
from simwave.errors import MeasurementError
from simwave.measure import key_metrics, measure


def second_order_step(t, zeta, wn):
    # Ogata, Modern Control Engineering, 5th ed., sec. 5-3, eq. (5-10)
    wd = wn * math.sqrt(1 - zeta * zeta)
    tp = np.maximum(t, 0.0)
    c = 1 - np.exp(-zeta * wn * tp) * (
        np.cos(wd * tp) + zeta / math.sqrt(1 - zeta**2) * np.sin(wd * tp)
    )
    return np.where(t > 0, c, 0.0)


def two_channel_steps(fs=2000.0, dur=2.0):
    t = np.arange(int(dur * fs)) / fs
    ts = (200 - 0.5) / fs
    wn = 2 * math.pi * 5
    y = np.column_stack(
        [second_order_step(t - ts, 0.2, wn), 2.0 * second_order_step(t - ts, 0.6, wn)]
    )
    x = (t > ts).astype(float)
    return Waveform(y, fs, channels=["fast", "slow"], units=["V", "V"]), Waveform(x, fs), wn


def test_multichannel_each_channel_measured():
    out, inp, wn = two_channel_steps()
    d = measure(out, inp).to_dict()
    assert [c["name"] for c in d["channels"]] == ["fast", "slow"]
    for ch, zeta, k in zip(d["channels"], (0.2, 0.6), (1.0, 2.0), strict=True):
        # Ogata sec. 5-3 overshoot formula, per channel
        mp = 100 * math.exp(-math.pi * zeta / math.sqrt(1 - zeta**2))
        assert ch["transitions"][0]["overshoot_pct"] == pytest.approx(mp, rel=5e-3)
        # ringing left in the window: e^(-zeta wn t) ~ 1.5e-4 at its start for zeta = 0.2
        assert ch["steady_state"]["steady_state_gain"] == pytest.approx(k, rel=1e-4)
        assert ch["input_channel"] == "ch0"
        assert ch["unit"] == "V"


def _same(a, b, path="") -> None:
    if isinstance(a, dict):
        assert set(a) == set(b), path
        for k in a:
            _same(a[k], b[k], f"{path}.{k}")
    elif isinstance(a, list):
        assert len(a) == len(b), path
        for i, (u, v) in enumerate(zip(a, b, strict=True)):
            _same(u, v, f"{path}[{i}]")
    elif isinstance(a, float):
        # sums accumulated in another order differ in the last digits only
        assert b == pytest.approx(a, rel=1e-9, abs=1e-12), path
    else:
        assert a == b, path


def test_blocks_give_the_same_result_as_one_block():
    # Streaming: carried state across block boundaries gives the same numbers.
    out, inp, _ = two_channel_steps()
    whole = measure(out, inp).to_dict()
    small = measure(out, inp, block_size=97).to_dict()
    small["options"] = whole["options"]
    _same(whole, small)


def test_json_and_table():
    out, inp, wn = two_channel_steps()
    system = System.from_coeffs([wn**2], [1, 2 * 0.2 * wn, wn**2])
    res = measure(out.select(["fast"]), inp, system)
    text = res.to_json()
    back = json.loads(text)
    assert back == res.to_dict()
    assert "NaN" not in text and "Infinity" not in text
    table = str(res)
    assert "overshoot" in table.lower() or "over %" in table
    assert "measured vs predicted" in table
    assert res.format() == table


def test_key_metrics_are_flat_scalars():
    out, inp, _ = two_channel_steps()
    km = key_metrics(measure(out, inp).to_dict())
    assert set(km) == {"fast", "slow"}
    for m in km.values():
        for v in m.values():
            assert v is None or isinstance(v, (int, float, str))
    assert km["fast"]["overshoot_pct_worst"] > km["slow"]["overshoot_pct_worst"]
    assert km["fast"]["settling_time_s_longest"] > 0
    assert km["fast"]["transitions"] == 1
    assert simwave.key_metrics is key_metrics


def test_reference_channel_of_the_same_waveform():
    out, inp, _ = two_channel_steps()
    both = Waveform(
        np.column_stack([inp.data[:, 0], out.data[:, 0]]), out.rate, channels=["in", "out"]
    )
    d = measure(both, reference_channel="in").to_dict()
    assert [c["name"] for c in d["channels"]] == ["out"]
    assert d["channels"][0]["input_channel"] == "in"
    assert d["channels"][0]["transitions"][0]["delay_s"] > 0


def test_second_order_prediction_and_flag():
    # Predicted overshoot/peak time (Ogata sec. 5-3) from the model beside the measured;
    # a wrong model is flagged.
    out, inp, wn = two_channel_steps()
    right = System.from_coeffs([wn**2], [1, 2 * 0.2 * wn, wn**2])
    wrong = System.from_coeffs([wn**2], [1, 2 * 0.3 * wn, wn**2])
    one = out.select(["fast"])
    good = measure(one, inp, right).to_dict()
    assert good["predicted"]["second_order"]["basis"].startswith("exact")
    rows = {r["quantity"]: r for r in good["channels"][0]["comparison"]}
    assert rows["overshoot_pct (first transition)"]["flag"] is False
    assert rows["peak_time_s (first transition)"]["flag"] is False
    bad = measure(one, inp, wrong).to_dict()
    assert any(r["flag"] for r in bad["channels"][0]["comparison"])


def test_dominant_pair_is_compared_not_flagged():
    wn = 2 * math.pi * 5
    third = System.from_zpk(
        [],
        [
            complex(-0.2 * wn, wn * math.sqrt(0.96)),
            complex(-0.2 * wn, -wn * math.sqrt(0.96)),
            -20 * wn,
        ],
        20 * wn**3,
    )
    out, inp, _ = two_channel_steps()
    d = measure(out.select(["fast"]), inp, third).to_dict()
    assert d["predicted"]["second_order"]["basis"].startswith("dominant")
    rows = [r for r in d["channels"][0]["comparison"] if r["quantity"].startswith("overshoot")]
    assert rows and rows[0]["flag"] is None


def test_discretized_sine_within_the_accuracy_report():
    # Sine through the discrete model of a second-order system: measured gain and phase
    # differ from H(j2 pi f) by no more than the model's accuracy report states.
    zeta, wn, fs, f = 0.3, 2 * math.pi * 100, 2000.0, 80.0
    system = System.from_coeffs([wn**2], [1, 2 * zeta * wn, wn**2])
    t = np.arange(int(2.0 * fs)) / fs
    x = np.sin(2 * math.pi * f * t)
    for method in ("bilinear", "ramp-invariant"):
        disc = discretize(system, fs, method)
        y = disc.filter(x[:, None])
        d = measure(Waveform(y, fs), Waveform(x, fs), system, discrete=disc).to_dict()
        rows = d["channels"][0]["comparison"]
        assert d["predicted"]["tolerance_source"].startswith("discretization error report")
        assert rows and not any(r["flag"] for r in rows), (method, rows)
        if method == "bilinear":  # the check is not empty: bilinear warping shows
            assert abs(rows[0]["difference"]) > 0.01


def test_file_input_read_in_blocks(tmp_path):
    out, inp, _ = two_channel_steps()
    path = tmp_path / "rec.csv"
    both = Waveform(
        np.column_stack([inp.data[:, 0], out.data]),
        out.rate,
        channels=["vin", "fast", "slow"],
        units=["V", "V", "V"],
    )
    simwave.write(path, both)
    from_file = measure(path, reference_channel="vin", block_size=300).to_dict()
    in_memory = measure(both, reference_channel="vin").to_dict()
    assert from_file["source"]["output"] == str(path)
    for a, b in zip(from_file["channels"], in_memory["channels"], strict=True):
        assert a["transitions"][0]["overshoot_pct"] == pytest.approx(
            b["transitions"][0]["overshoot_pct"], rel=1e-9
        )
        assert a["transitions"][0]["settling_time_s"] == pytest.approx(
            b["transitions"][0]["settling_time_s"], rel=1e-9
        )


# ------------------------------------------------------------------------- bad input
def test_empty_waveform():
    with pytest.raises(MeasurementError, match="no samples"):
        measure(Waveform(np.zeros((0, 1)), 100.0))


def test_nan_named_with_place():
    y = np.ones(100)
    y[:50] = 0
    y[42] = np.nan
    with pytest.raises(MeasurementError, match=r"sample 42 .*NaN|sample 42 .*nan"):
        measure(Waveform(y, 100.0))


def test_constant_waveform():
    with pytest.raises(MeasurementError, match="constant waveform"):
        measure(Waveform(np.full(100, 3.0), 100.0))


def test_constant_channel_among_others_is_null_with_reason():
    out, inp, _ = two_channel_steps()
    data = np.column_stack([out.data[:, 0], np.full(out.n_samples, 0.5)])
    ch = measure(Waveform(data, out.rate), inp).to_dict()["channels"][1]
    assert ch["state_levels"] is None
    assert "constant channel" in ch["null_reasons"]["state_levels"]


def test_reference_of_other_length_or_rate():
    out, inp, _ = two_channel_steps()
    with pytest.raises(MeasurementError, match="same length"):
        measure(out, Waveform(inp.data[:-1], inp.rate))
    with pytest.raises(MeasurementError, match="sample rate"):
        measure(out, Waveform(inp.data, inp.rate * 2))


@pytest.mark.parametrize(
    "opts",
    [
        {"reference_levels_pct": (0, 50, 90)},
        {"reference_levels_pct": (10, 50, 100)},
        {"reference_levels_pct": (50, 10, 90)},
        {"settling_band_pct": 0},
        {"settling_band_pct": 100},
        {"settling_band_pct": -2},
        {"steady_fraction": 0},
        {"state_level_method": "median"},
        {"no_such_option": 1},
    ],
)
def test_bad_options_one_line_errors(opts):
    out, inp, _ = two_channel_steps()
    with pytest.raises(MeasurementError) as exc:
        measure(out, inp, **opts)
    assert "\n" not in str(exc.value)


def test_record_too_short_for_steady_state():
    out, inp, _ = two_channel_steps()
    ss = measure(out, inp, steady_fraction=1e-4).to_dict()["channels"][0]["steady_state"]
    assert ss["final_value"] is None
    assert "record too short for steady state" in ss["null_reasons"]["final_value"]


def test_unsettled_window_gives_reasons_not_numbers():
    out, inp, _ = two_channel_steps(dur=0.3)
    ch = measure(out, inp).to_dict()["channels"][0]
    assert ch["steady_state"]["steady_state_gain"] is None
    assert "not settled" in ch["steady_state"]["null_reasons"]["steady_state_gain"]


def test_step_gain_uses_output_before_the_input_step():
    # A first-order high-pass s / (s + a) answers a step with a decaying spike and
    # returns to 0: steady-state gain 0 = H(0) (final value theorem, Ogata sec. 2-3),
    # while an inverting gain stage -2 gives -2.
    fs, a = 1000.0, 50.0
    t = np.arange(2000) / fs
    step = (t > 0.2).astype(float)
    spike = np.where(t > 0.2, np.exp(-(t - 0.2) * a), 0.0)
    hp = System.from_zpk([0], [-a], 1.0)
    ss = measure(Waveform(spike, fs), Waveform(step, fs), hp).to_dict()["channels"][0][
        "steady_state"
    ]
    assert ss["steady_state_gain"] == pytest.approx(0.0, abs=1e-12)
    assert ss["initial_output_level"] == 0.0
    inv = measure(Waveform(-2 * step, fs), Waveform(step, fs)).to_dict()["channels"][0]
    assert inv["transitions"][0]["direction"] == "falling"
    assert inv["steady_state"]["steady_state_gain"] == pytest.approx(-2.0, rel=1e-12)


def test_constant_input_gain_and_ramp_kind():
    fs = 1000.0
    t = np.arange(2000) / fs
    out = 0.5 + 0.01 * np.sin(300 * t)
    # a record that does not start from rest (the output is at 0.5 from its first sample):
    # the at-rest convention (a step at the first sample) is turned off
    ch = measure(
        Waveform(out, fs), Waveform(np.ones_like(t), fs), rest_before_record=False
    ).to_dict()["channels"][0]
    assert ch["kind"] == "constant"
    assert ch["steady_state"]["steady_state_gain"] == pytest.approx(np.mean(out[-500:]), rel=1e-12)
    assert measure(Waveform(t, fs)).to_dict()["channels"][0]["kind"] == "ramp"


def test_prediction_rows_survive_a_transition_without_overshoot():
    # Regression: a pulse shorter than the ringing leaves its level (and so its overshoot)
    # unestablished, while the peak time exists; the second-order comparison must skip the
    # overshoot row instead of failing. Prediction: Ogata, Modern Control Engineering,
    # 5th ed., sec. 5-3 (peak time pi/omega_d).
    import simwave

    sys_ = "(2*pi*200)^2/(s^2 + 0.5*2*pi*200*s + (2*pi*200)^2)"
    pulse = simwave.generate("pulse", 20_000, 0.04, width=3e-3, delay=5e-3)
    out = simwave.simulate(sys_, pulse)
    result = simwave.measure(out, reference=pulse, system=sys_).to_dict()
    rows = result["channels"][0]["comparison"]
    names = [r["quantity"] for r in rows]
    first = result["channels"][0]["transitions"][0]
    assert first["overshoot_pct"] is None and first["peak_time_s"] is not None
    assert "overshoot_pct (first transition)" not in names
    assert "peak_time_s (first transition)" in names


def test_wide_histogram_smoothing_equals_scipy_gaussian_filter():
    # Reference: scipy.ndimage.gaussian_filter1d (mode "constant", truncate 4); simwave
    # switches to an FFT convolution for wide kernels and must give the same counts.
    import numpy as np
    from scipy.ndimage import gaussian_filter1d

    from simwave.measure.levels import _smoothed

    rng = np.random.default_rng(5)
    w = np.zeros(2**15)
    np.add.at(w, rng.integers(0, w.size, 300), 1.0)
    for h in (2.0, 15.9, 16.1, 700.0, 5000.0):
        ref = gaussian_filter1d(w, h, mode="constant")
        np.testing.assert_allclose(_smoothed(w, h), ref, rtol=0, atol=1e-12 * ref.max())
