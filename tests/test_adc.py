"""ADC model: code mapping, gain choice, noise in counts and the sinc^k response.

Expected values are written from the formulas: a bipolar input range of +-Vref/G over
2^bits codes (two's complement), and the sinc^k filter as k cascaded length-N moving
averages at the modulator rate, evaluated with scipy.signal.freqz.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.signal
from hypothesis import given, settings
from hypothesis import strategies as st

from hosttool.physics.adc import (
    PEAK_TO_PEAK_OVER_RMS,
    Converter,
    alias_hz,
    best_gain,
    rejection_db,
    sinc_magnitude,
)
from hosttool.spec.schema import Adc


def adc(gains=(1, 2, 4, 8, 16, 32, 64, 128), margin_pct=10.0, bits=24) -> Adc:
    return Adc(bits=bits, pga_gain=None, pga_gains=tuple(gains), reference_max_v=5.0,
               data_rate_sps=10.0, noise_uv_rms=0.05, sinc_order=3, modulator_rate_hz=None,
               overload_margin_pct=margin_pct)


# --------------------------------------------------------------------------- code mapping


@pytest.mark.parametrize("bits, gain, vref", [(24, 128, 3.3), (24, 1, 2.5), (20, 64, 5.0),
                                              (16, 8, 1.25)])
def test_codes_at_full_scale_and_one_lsb(bits, gain, vref):
    conv = Converter(bits=bits, gain=gain, reference_v=vref)
    lsb = vref / gain / 2 ** (bits - 1)        # one code step at the input
    assert conv.lsb_v == pytest.approx(lsb, rel=1e-15)
    assert conv.input_range_v == pytest.approx(vref / gain, rel=1e-15)
    assert (conv.code_min, conv.code_max) == (-(2 ** (bits - 1)), 2 ** (bits - 1) - 1)
    # +FS is one step beyond the largest code (two's complement): it saturates there
    assert int(conv.code(vref / gain)) == 2 ** (bits - 1) - 1
    assert int(conv.code(vref / gain - lsb)) == 2 ** (bits - 1) - 1
    assert int(conv.code(2 * vref / gain)) == 2 ** (bits - 1) - 1
    # -FS is exactly the smallest code
    assert int(conv.code(-vref / gain)) == -(2 ** (bits - 1))
    assert int(conv.code(-2 * vref / gain)) == -(2 ** (bits - 1))
    # one LSB each side of zero, and the rounding boundaries at half an LSB
    assert int(conv.code(lsb)) == 1
    assert int(conv.code(-lsb)) == -1
    assert int(conv.code(0.49 * lsb)) == 0
    assert int(conv.code(0.51 * lsb)) == 1
    assert int(conv.code(-0.51 * lsb)) == -1
    assert float(conv.volts(1)) == pytest.approx(lsb, rel=1e-15)


def test_known_24_bit_lsb():
    # 3.3 V reference at gain 128, 24 bits: 3.3 / 128 / 2^23 = 3.0734 nV
    conv = Converter(bits=24, gain=128, reference_v=3.3)
    assert conv.lsb_v * 1e9 == pytest.approx(3.0734, abs=5e-5)


@settings(max_examples=200, deadline=None)
@given(volts=st.lists(st.floats(-0.05, 0.05), min_size=2, max_size=50),
       gain=st.sampled_from([1, 2, 4, 8, 16, 32, 64, 128]), bits=st.integers(16, 24))
def test_code_mapping_is_monotonic_and_within_half_an_lsb(volts, gain, bits):
    conv = Converter(bits=bits, gain=gain, reference_v=2.5)
    v = np.sort(np.asarray(volts))
    codes = conv.code(v)
    assert np.all(np.diff(codes) >= 0)
    inside = np.abs(v) < conv.input_range_v - conv.lsb_v
    assert np.all(np.abs(conv.volts(codes[inside]) - v[inside]) <= conv.lsb_v / 2 * (1 + 1e-9))


def test_noise_in_counts():
    conv = Converter(bits=24, gain=128, reference_v=3.3)
    lsb = 3.3 / 128 / 2 ** 23
    assert conv.noise_counts_rms(0.03) == pytest.approx(0.03e-6 / lsb, rel=1e-12)


def test_noise_free_convention():
    # noise-free resolution log2(FSR / (6.6 RMS)) takes 6.6 x RMS as peak-to-peak
    # (common practice, no published source)
    assert PEAK_TO_PEAK_OVER_RMS == 6.6


# --------------------------------------------------------------------------- gain choice


def test_best_gain_is_the_largest_that_holds_peak_plus_margin():
    # 2.5 V reference: gain 128 gives +-19.53 mV, gain 64 +-39.06 mV
    a = adc(margin_pct=10.0)
    assert best_gain(a, 17.0e-3, 2.5) == 128      # 18.7 mV needed
    assert best_gain(a, 18.0e-3, 2.5) == 64       # 19.8 mV needed
    assert best_gain(adc(margin_pct=0.0), 18.0e-3, 2.5) == 128
    assert best_gain(a, 2.4, 2.5) is None         # 2.64 V needed, more than gain 1 holds
    assert best_gain(adc(gains=(1, 4, 16)), 0.1, 2.5) == 16


# --------------------------------------------------------------------------- sinc^k


def cascaded_average(n: int, order: int) -> np.ndarray:
    """Impulse response of `order` length-n moving averages in cascade."""
    h = np.ones(1)
    for _ in range(order):
        h = np.convolve(h, np.ones(n) / n)
    return h


@pytest.mark.parametrize("order", [1, 2, 3, 4, 5])
@pytest.mark.parametrize("n", [16, 64, 256])
def test_sinc_matches_cascaded_moving_averages_via_scipy(order, n):
    fd = 10.0
    freqs = np.concatenate([np.linspace(0.0, 3.5 * fd, 701), [50.0, 60.0, 49.5, 60.6]])
    _, h = scipy.signal.freqz(cascaded_average(n, order), worN=2 * np.pi * freqs / (n * fd))
    ours = sinc_magnitude(freqs, fd, order, n)
    assert np.allclose(ours, np.abs(h), rtol=1e-9, atol=1e-13)


@pytest.mark.parametrize("order", [1, 2, 3, 4, 5])
@pytest.mark.parametrize("decimation", [None, 64])
def test_sinc_notches_at_multiples_of_the_data_rate(order, decimation):
    fd = 16.7
    multiples = fd * np.arange(1, 20)
    assert np.all(sinc_magnitude(multiples, fd, order, decimation) < 1e-12)
    assert float(sinc_magnitude(0.0, fd, order, decimation)) == 1.0
    # between notches the response is not zero: the notches are where the data rate puts them
    between = fd * (np.arange(1, 20) + 0.5)
    assert np.all(sinc_magnitude(between, fd, order, decimation) > 1e-10)


def test_sinc_without_decimation_is_the_normalised_sinc_power():
    # numpy.sinc(x) = sin(pi x) / (pi x): the N -> infinity limit
    f = np.linspace(0.0, 100.0, 1001)
    assert np.allclose(sinc_magnitude(f, 10.0, 3), np.abs(np.sinc(f / 10.0)) ** 3,
                       rtol=1e-12, atol=1e-300)


def test_rejection_db_and_floor():
    assert rejection_db(0.1) == pytest.approx(20.0)
    assert rejection_db(1e-3) == pytest.approx(60.0)
    assert rejection_db(0.0) == 300.0
    assert rejection_db(1e-20, floor_db=120.0) == 120.0


@pytest.mark.parametrize("f, fs, expected", [(50.0, 10.0, 0.0), (50.0, 40.0, 10.0),
                                             (60.0, 45.0, 15.0), (50.0, 1000.0, 50.0),
                                             (50.5, 10.0, 0.5), (49.5, 10.0, 0.5)])
def test_alias_is_the_distance_to_the_nearest_multiple_of_the_sample_rate(f, fs, expected):
    assert alias_hz(f, fs) == pytest.approx(expected, abs=1e-12)
