"""Python interop: numpy arrays in simulate/measure, scipy.signal LTI objects, notebook display."""

import warnings
from html.parser import HTMLParser

import numpy as np
import pytest
from scipy import signal

import simwave
from simwave.errors import SimwaveError


def _second_order():
    # 1 kHz, damping 0.3, with a real zero: H(s) = w^2 (s/(2w) + 1) / (s^2 + 2 z w s + w^2)
    w = 2 * np.pi * 1e3
    return simwave.System.from_coeffs([w / 2, w * w], [1, 2 * 0.3 * w, w * w])


# ---------------------------------------------------------------- numpy arrays
def test_simulate_plain_array_with_rate_matches_scipy_lsim():
    rate = 20e3
    x = np.zeros(400)
    x[100:] = 1.0
    tau = 1e-3
    with warnings.catch_warnings(record=True) as caught:  # the rate safeguard may advise
        warnings.simplefilter("always")
        y = simwave.simulate("1/(1m*s + 1)", x, rate=rate, method="ramp-invariant")
        two = simwave.simulate("1/(1m*s + 1)", np.column_stack([x, 2 * x]), rate=rate)
    assert all("model is off by" in str(w.message) for w in caught)
    # scipy.signal.lsim with linear interpolation (first-order hold) is the independent
    # reference for inputs linear between samples (scipy docs, lsim: interp=True)
    t = np.arange(400) / rate
    _, ref, _ = signal.lsim(([1.0], [tau, 1.0]), x, t, interp=True)
    assert y.rate == rate and y.n_channels == 1
    np.testing.assert_allclose(y.data[:, 0], ref, rtol=0, atol=1e-9)
    np.testing.assert_allclose(two.data[:, 1], 2 * y.data[:, 0], rtol=0, atol=1e-12)


def test_arrays_need_a_rate():
    with pytest.raises(SimwaveError, match="numpy array carries no sample rate; give rate="):
        simwave.simulate("1/(s+1)", np.ones(10))
    with pytest.raises(SimwaveError, match="numpy array carries no sample rate"):
        simwave.measure(np.ones(10))


def test_measure_plain_arrays_with_rate():
    rate = 100e3
    n = 5000
    x = np.zeros(n)
    x[500:] = 1.0
    sys_ = simwave.System.parse("1/(1m*s + 1)")
    y = simwave.simulate(sys_, x, rate=rate).data[:, 0]
    m = simwave.measure(y, reference=x, rate=rate, system=sys_)
    rise = m.key_metrics()["ch0"]["rise_time_s_mean"]
    # first-order lag: 10-90 % rise time = tau ln 9 (Ogata, Modern Control Engineering,
    # 5th ed., sec. 5-2; from memory); sampled record, so within a sample
    assert rise == pytest.approx(1e-3 * np.log(9), abs=1 / rate)


# ---------------------------------------------------------------- scipy.signal LTI
@pytest.mark.parametrize("form", ["zpk", "tf", "ss"])
def test_round_trip_through_scipy_lti(form):
    sys_ = _second_order()
    obj = sys_.to_scipy(form)
    kind = {"zpk": signal.ZerosPolesGain, "tf": signal.TransferFunction,
            "ss": signal.StateSpace}[form]
    assert isinstance(obj, kind)
    back = simwave.System.from_scipy(obj)
    f = np.logspace(0, 5, 60)
    if form == "ss":
        # H(jw) = C (jwI - A)^-1 B + D, evaluated directly (scipy.signal.freqresp would
        # go through ss2tf); Ogata, Modern Control Engineering, 5th ed., sec. 9-2 (from memory)
        eye = np.eye(obj.A.shape[0])
        h_scipy = np.array([(obj.C @ np.linalg.solve(2j * np.pi * fk * eye - obj.A, obj.B)
                             + obj.D)[0, 0] for fk in f])
    else:
        # independent reference: scipy.signal's own frequency response of the exported object
        _, h_scipy = signal.freqresp(obj, 2 * np.pi * f)
    np.testing.assert_allclose(sys_.frequency_response(f), h_scipy, rtol=1e-10)
    np.testing.assert_allclose(back.frequency_response(f), h_scipy, rtol=1e-10)
    np.testing.assert_allclose(np.sort_complex(back.poles), np.sort_complex(sys_.poles),
                               rtol=1e-10)
    assert back.gain == pytest.approx(sys_.gain, rel=1e-10)


def test_from_scipy_objects_made_by_scipy():
    # a scipy analog Butterworth design, as scipy gives it, against its own response
    z, p, k = signal.butter(5, 2 * np.pi * 300, analog=True, output="zpk")
    lti = signal.lti(z, p, k)
    sys_ = simwave.System.from_scipy(lti, name="bw5")
    f = np.array([10.0, 300.0, 3000.0])
    _, h = signal.freqresp(lti, 2 * np.pi * f)
    np.testing.assert_allclose(sys_.frequency_response(f), h, rtol=1e-10)
    assert sys_.name == "bw5" and sys_.order == 5
    # -3.01 dB at the cutoff (Butterworth definition; Williams & Taylor, Electronic Filter
    # Design Handbook, ch. 2)
    assert 20 * np.log10(abs(sys_.frequency_response(300.0))) == pytest.approx(-3.0103, abs=1e-3)


def test_state_space_from_scipy_keeps_zeros_at_the_origin():
    # 6th-order analog band-pass (three zeros at s = 0) given to simwave as a scipy
    # StateSpace; the reference is scipy's response of the same design in zpk form
    z, p, k = signal.butter(3, [2 * np.pi * 50, 2 * np.pi * 500], btype="bandpass",
                            analog=True, output="zpk")
    ss = signal.StateSpace(*signal.zpk2ss(z, p, k))
    sys_ = simwave.System.from_scipy(ss)
    assert sys_.order == 6 and np.sum(np.abs(sys_.zeros) < 1e-6) == 3
    f = np.logspace(0, 4, 40)
    _, h = signal.freqresp(signal.ZerosPolesGain(z, p, k), 2 * np.pi * f)
    np.testing.assert_allclose(sys_.frequency_response(f), h, rtol=1e-8)


def test_scipy_interop_refusals():
    with pytest.raises(SimwaveError, match="discrete-time"):
        simwave.System.from_scipy(signal.dlti([1], [1, -0.5], dt=0.1))
    with pytest.raises(SimwaveError, match="2 input"):
        simwave.System.from_scipy(signal.StateSpace(-np.eye(2), np.eye(2), np.eye(2),
                                                    np.zeros((2, 2))))
    with pytest.raises(SimwaveError, match="expected a scipy.signal"):
        simwave.System.from_scipy(([1], [1, 1]))
    with pytest.raises(SimwaveError, match="dead time"):
        simwave.System.parse("exp(-1m*s) * 1/(s+1)").to_scipy()
    with pytest.raises(SimwaveError, match="form must be"):
        _second_order().to_scipy("polar")


# ---------------------------------------------------------------- notebook display
class _Checker(HTMLParser):
    """Collects text and checks that every opened tag is closed (img is a void element)."""

    def __init__(self):
        super().__init__()
        self.stack, self.text, self.images = [], [], 0

    def handle_starttag(self, tag, attrs):
        if tag == "img":
            self.images += 1
            assert dict(attrs)["src"].startswith("data:image/png;base64,")
        else:
            self.stack.append(tag)

    def handle_startendtag(self, tag, attrs):
        self.handle_starttag(tag, attrs)

    def handle_endtag(self, tag):
        assert self.stack and self.stack.pop() == tag

    def handle_data(self, data):
        self.text.append(data)


def _parse(html_text):
    c = _Checker()
    c.feed(html_text)
    assert c.stack == []
    return c, " ".join(c.text)


def test_rich_display_and_plain_repr(tmp_path):
    sys_ = _second_order()
    c, text = _parse(sys_._repr_html_())
    assert c.images == 1 and "stability" in text and "stable" in text
    wave = simwave.generate("step", 100e3, 0.02, time=0.005)
    wave.channels = ["bridge"]
    c, text = _parse(wave._repr_html_())
    assert c.images == 1 and "bridge" in text and "100000" in text
    out = simwave.simulate(sys_, wave)
    report = simwave.simulate(sys_, wave, output=tmp_path / "o.csv")
    c, text = _parse(report._repr_html_())
    assert "ramp-invariant" in text and "bridge" in text
    assert repr(report).startswith("RunReport(") and "\n" not in repr(report)
    m = simwave.measure(out, reference=wave, system=sys_)
    c, text = _parse(m._repr_html_())
    km = m.key_metrics()["bridge"]
    assert "overshoot_pct_worst" in text and f"{km['overshoot_pct_worst']:.6g}" in text
    for obj in (sys_, wave, m):
        assert "\n" not in repr(obj) and len(repr(obj)) < 300
