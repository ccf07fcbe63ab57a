"""Analog prototypes against handbook tables, closed-form definitions and their normalizations.

Chapter numbers of Williams & Taylor, Electronic Filter Design Handbook (4th ed.), are quoted
from memory.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from simwave import System
from simwave.errors import InvalidSystemError
from simwave.model.designs import FAMILIES, KINDS, design

# Cutoff 1/(2 pi) Hz is 1 rad/s: the normalized prototypes that handbooks tabulate.
UNIT = 1 / (2 * math.pi)
MINUS_3_01_DB = 20 * math.log10(1 / math.sqrt(2))  # -3.0103 dB, the half-power point


def gain_db(sys: System, f_hz) -> np.ndarray:
    return 20 * np.log10(np.abs(sys.frequency_response(np.asarray(f_hz, dtype=float))))


# ----------------------------------------------------------------------------- Butterworth
@pytest.mark.parametrize(
    "order, table",
    [
        # Normalized Butterworth denominators, 4 decimals, as in the standard tables of
        # e.g. Williams & Taylor, Electronic Filter Design Handbook, ch. 2 / Table of
        # Butterworth polynomials. The 4-digit values are quoted from memory.
        (2, [1, 1.4142, 1]),
        (3, [1, 2.0000, 2.0000, 1]),
        (4, [1, 2.6131, 3.4142, 2.6131, 1]),
    ],
)
def test_butterworth_denominator_matches_handbook_table(order, table):
    sys = design("butterworth", order, UNIT)
    np.testing.assert_allclose(sys.den, table, atol=5e-5)  # table rounded to 4 decimals
    assert sys.dc_gain == pytest.approx(1.0, rel=1e-12)


def test_butterworth_third_order_is_exactly_known():
    # (s + 1)(s^2 + s + 1) = s^3 + 2 s^2 + 2 s + 1 (Williams & Taylor, ch. 2)
    np.testing.assert_allclose(design("butterworth", 3, UNIT).den, [1, 2, 2, 1], rtol=1e-13)


@pytest.mark.parametrize("order", range(1, 11))
def test_butterworth_poles_on_the_circle(order):
    # Butterworth poles: s_k = wc exp(j pi (2k + n - 1)/(2n)), k = 1..n
    # (Williams & Taylor, Electronic Filter Design Handbook, ch. 2).
    wc = 2 * math.pi * 1e3
    k = np.arange(1, order + 1)
    ref = wc * np.exp(1j * np.pi * (2 * k + order - 1) / (2 * order))
    got = list(design("butterworth", order, 1e3).poles.astype(complex))
    for r in ref:  # match each reference pole to its own computed pole
        i = int(np.argmin([abs(g - r) for g in got]))
        assert abs(got.pop(i) - r) <= 1e-12 * wc
    assert not got


@pytest.mark.parametrize("order", [1, 2, 3, 4, 5, 8, 12, 20])
@pytest.mark.parametrize("kind, cutoff, probe",
                         [("lowpass", 1e3, [1e3]), ("highpass", 1e3, [1e3]),
                          ("bandpass", (300.0, 3e3), [300.0, 3e3])])
def test_butterworth_is_3_01_db_down_at_the_cutoff(order, kind, cutoff, probe):
    # Butterworth: |H|^2 = 1/(1 + (w/wc)^(2n)), half power (-3.01 dB) at the cutoff;
    # the band transforms keep this at both band edges (Williams & Taylor, ch. 2 and 5).
    sys = design("butterworth", order, cutoff, kind)
    np.testing.assert_allclose(gain_db(sys, probe), MINUS_3_01_DB, atol=1e-9)


def test_butterworth_lowpass_bandwidth_is_the_cutoff():
    assert design("butterworth", 6, 2.5e3).bandwidth_hz == pytest.approx(2.5e3, rel=1e-10)


# ----------------------------------------------------------------------------- Chebyshev, elliptic
@pytest.mark.parametrize("order", [2, 3, 4, 5])
@pytest.mark.parametrize("ripple", [0.1, 0.5, 1.0, 3.0])
def test_chebyshev1_ripple_band_and_edge(order, ripple):
    # Chebyshev I: |H|^2 = 1/(1 + eps^2 T_n^2(w/wc)) with 10 log10(1 + eps^2) = ripple;
    # at the cutoff T_n(1) = 1, so the gain is -ripple dB; in the passband it stays in
    # [-ripple, 0] dB; the DC gain is 0 dB for odd n and -ripple dB for even n
    # (Williams & Taylor, ch. 2).
    sys = design("chebyshev1", order, 1e3, ripple_db=ripple)
    assert gain_db(sys, [1e3])[0] == pytest.approx(-ripple, abs=1e-9)
    band = gain_db(sys, np.linspace(0, 1e3, 2001))
    assert band.max() <= 1e-9 and band.min() >= -ripple - 1e-9
    assert gain_db(sys, [0.0])[0] == pytest.approx(0.0 if order % 2 else -ripple, abs=1e-9)


@pytest.mark.parametrize("order", [2, 3, 5])
@pytest.mark.parametrize("atten", [20.0, 40.0, 80.0])
def test_chebyshev2_stopband_edge(order, atten):
    # Chebyshev II (inverse Chebyshev): the gain first reaches -attenuation at the cutoff
    # and stays at or below it beyond (Williams & Taylor, ch. 2).
    sys = design("chebyshev2", order, 1e3, attenuation_db=atten)
    assert gain_db(sys, [1e3])[0] == pytest.approx(-atten, abs=1e-8)
    stop = gain_db(sys, np.linspace(1e3, 1e5, 5001))
    assert np.nanmax(stop) <= -atten + 1e-8


@pytest.mark.parametrize("order", [2, 3, 4])
def test_elliptic_passband_edge_and_ripple(order):
    # Elliptic (Cauer): equiripple in the passband between 0 and -ripple dB, -ripple at the
    # passband edge (Williams & Taylor, ch. 2).
    sys = design("elliptic", order, 1e3, ripple_db=0.5, attenuation_db=60)
    assert gain_db(sys, [1e3])[0] == pytest.approx(-0.5, abs=1e-9)
    band = gain_db(sys, np.linspace(0, 1e3, 2001))
    assert band.max() <= 1e-9 and band.min() >= -0.5 - 1e-9


# ----------------------------------------------------------------------------- Bessel
def reverse_bessel(n: int) -> np.ndarray:
    # theta_n(s) = sum_k (2n - k)! / (2^(n-k) k! (n-k)!) s^k: the reverse Bessel polynomial
    # of the Bessel-Thomson filter H(s) = theta_n(0)/theta_n(s) (W. E. Thomson, Proc. IEE
    # 96, 1949; also Williams & Taylor, ch. 2). Returned in descending powers.
    c = [math.factorial(2 * n - k) / (2 ** (n - k) * math.factorial(k) * math.factorial(n - k))
         for k in range(n + 1)]
    return np.array(c[::-1])


@pytest.mark.parametrize("order", range(1, 9))
def test_bessel_delay_normalized_is_the_thomson_polynomial(order):
    sys = design("bessel-delay", order, UNIT)
    np.testing.assert_allclose(sys.den, reverse_bessel(order), rtol=1e-10)
    assert sys.dc_gain == pytest.approx(1.0, rel=1e-12)


@pytest.mark.parametrize("order", [2, 4, 6])
def test_bessel_delay_group_delay_at_dc(order):
    # Delay normalization: the low-frequency group delay is 1/wc = 1/(2 pi fc) seconds.
    fc = 1e3
    sys = design("bessel-delay", order, fc)
    df = 1e-3
    phase = np.unwrap(np.angle(sys.frequency_response([0.0, df])))
    group_delay = -(phase[1] - phase[0]) / (2 * math.pi * df)
    assert group_delay == pytest.approx(1 / (2 * math.pi * fc), rel=1e-6)


@pytest.mark.parametrize("order", [1, 2, 3, 4, 6])
def test_bessel_magnitude_and_phase_normalizations(order):
    fc = 1e3
    wc = 2 * math.pi * fc
    # Magnitude normalization: -3.01 dB at the cutoff, like Butterworth.
    assert gain_db(design("bessel-magnitude", order, fc), [fc])[0] == pytest.approx(
        MINUS_3_01_DB, abs=1e-9)
    # Phase normalization (scipy.signal.bessel, norm='phase'): the high-frequency asymptote
    # wc^n / s^n is Butterworth's, i.e. the monic denominator ends in wc^n (Butterworth:
    # Williams & Taylor, ch. 2).
    sys = design("bessel-phase", order, fc)
    assert sys.den[-1] == pytest.approx(wc**order, rel=1e-12)
    far = 1e4 * fc
    assert abs(sys.frequency_response([far])[0]) == pytest.approx((fc / far) ** order, rel=1e-3)


# ----------------------------------------------------------------------------- shapes and limits
@pytest.mark.parametrize("family", list(FAMILIES))
@pytest.mark.parametrize("kind", KINDS)
def test_every_family_and_kind_builds_a_stable_system(family, kind):
    extra = {"ripple_db": 1.0} if "ripple_db" in FAMILIES[family] else {}
    if "attenuation_db" in FAMILIES[family]:
        extra["attenuation_db"] = 50.0
    cutoff = (200.0, 2e3) if kind in ("bandpass", "bandstop") else 1e3
    sys = design(family, 4, cutoff, kind, **extra)
    assert sys.order == (8 if kind in ("bandpass", "bandstop") else 4)
    assert sys.stability == "stable"
    assert family in sys.text and kind in sys.text


def test_highest_orders_are_accepted():
    assert design("butterworth", 60, 1e3).order == 60
    assert design("elliptic", 30, (1e3, 2e3), "bandpass", ripple_db=0.5,
                  attenuation_db=80).order == 60


def test_system_design_is_the_same_call():
    a = System.design("chebyshev1", 3, 500.0, "highpass", ripple_db=1.0)
    b = design("chebyshev1", 3, 500.0, "highpass", ripple_db=1.0)
    np.testing.assert_array_equal(a.poles, b.poles)


@pytest.mark.parametrize(
    "args, kwargs, fragment",
    [
        (("butterworth", 4, 0.0), {}, "above 0 Hz"),
        (("butterworth", 4, -1e3), {}, "above 0 Hz"),
        (("butterworth", 4, float("nan")), {}, "above 0 Hz"),
        (("butterworth", 0, 1e3), {}, "order must be 1..60"),
        (("butterworth", 61, 1e3), {}, "order must be 1..60"),
        (("butterworth", 31, (1e3, 2e3), "bandpass"), {}, "order must be 1..30"),
        (("butterworth", 2.5, 1e3), {}, "whole number"),
        (("butterwort", 4, 1e3), {}, "known: butterworth, chebyshev1"),
        (("bessel", 4, 1e3), {}, "bessel-phase, bessel-delay"),
        (("butterworth", 4, 1e3, "lopass"), {}, "known: lowpass, highpass"),
        (("chebyshev1", 4, 1e3), {}, "needs ripple_db"),
        (("elliptic", 4, 1e3), {"ripple_db": 1}, "needs attenuation_db"),
        (("chebyshev2", 4, 1e3), {"attenuation_db": -3}, "above 0"),
        (("butterworth", 4, 1e3), {"ripple_db": 1}, "takes no ripple_db"),
        (("butterworth", 4, (2e3, 1e3), "bandpass"), {}, "increasing"),
        (("butterworth", 4, 1e3, "bandstop"), {}, "two band edges"),
        (("butterworth", 4, (1e3, 2e3)), {}, "one cutoff"),
    ],
)
def test_bad_designs_are_errors(args, kwargs, fragment):
    with pytest.raises(InvalidSystemError) as info:
        design(*args, **kwargs)
    assert fragment in str(info.value)
