"""Filter designs, their quantisation and their realised responses.

Outside references, named at each check: scipy.signal (kaiserord, firwin, butter, iirnotch,
freqz, sosfreqz, group_delay, dstep, tf2zpk, lfilter, sosfilt), fxpmath (coefficient
rounding), and textbook facts marked "(from memory)".
"""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pytest
import scipy.signal
from fxpmath import Fxp
from hypothesis import given, settings
from hypothesis import strategies as st

from hosttool.design.filters import Biquad, BiquadStage, FirStage, design_chain, design_stage
from hosttool.design.response import (
    POLE_TOLERANCE,
    analyse_chain,
    group_delay_dc_s,
    impulse_response,
    magnitude_response,
    pole_reports,
    settling_times,
)
from hosttool.errors import DesignError
from hosttool.spec.schema import FilterStage, load_spec

WIDTHS = (16, 32)


def moving_average(length: int, rate: float = 10.0) -> FilterStage:
    return FilterStage("moving_average", rate, length=length)


def kaiser(rate: float, cutoff: float, transition: float, attenuation: float,
           decimation: int = 1) -> FilterStage:
    return FilterStage("fir_lowpass", rate, cutoff_hz=cutoff, transition_hz=transition,
                       attenuation_db=attenuation, decimation=decimation)


def butterworth(order: int, cutoff: float, rate: float) -> FilterStage:
    return FilterStage("butterworth_lowpass", rate, order=order, cutoff_hz=cutoff)


def notch(frequency: float, quality: float, rate: float) -> FilterStage:
    return FilterStage("notch", rate, frequency_hz=frequency, quality=quality)


SAMPLE_STAGES = (moving_average(5), moving_average(8), kaiser(1000.0, 60.0, 40.0, 60.0, 4),
                 butterworth(2, 0.5, 10.0), butterworth(6, 20.0, 1000.0), notch(50.0, 5.0, 250.0))


def fxp_int(values: object, word: int, frac: int) -> np.ndarray:
    """fxpmath's signed round-half-to-even quantisation, as raw integers."""
    x = Fxp(np.asarray(values, dtype=np.float64), signed=True, n_word=word, n_frac=frac,
            rounding="around")
    return np.asarray(x.val, dtype=np.int64)


EXAMPLES = Path(__file__).resolve().parent.parent / "examples"


def example_chain(name: str, bits: int) -> tuple:
    spec = load_spec(EXAMPLES / f"{name}.toml")
    chain = spec.filter.__class__(stages=spec.filter.stages, coefficient_bits=bits)
    return spec, design_chain(chain)


# --------------------------------------------------------------------------- float designs


def test_kaiser_taps_equal_scipy_kaiserord_and_firwin() -> None:
    # scipy.signal.kaiserord picks 92 taps here; type I needs an odd length, so 93.
    numtaps, beta = scipy.signal.kaiserord(60.0, 40.0 / 500.0)
    assert numtaps == 92
    expected = scipy.signal.firwin(93, 60.0, window=("kaiser", beta), fs=1000.0)
    stage = design_stage(kaiser(1000.0, 60.0, 40.0, 60.0, 4), 32, field="filter.stages[0]")
    assert isinstance(stage, FirStage)
    assert (stage.kind, stage.rate_hz, stage.decimation) == ("fir_lowpass", 1000.0, 4)
    np.testing.assert_allclose(stage.taps, expected, rtol=0, atol=1e-17)
    assert stage.taps == stage.taps[::-1]


def test_moving_average_taps_are_one_over_length() -> None:
    stage = design_stage(moving_average(7), 32, field="f")
    assert isinstance(stage, FirStage)
    assert stage.taps == (1 / 7,) * 7


@pytest.mark.parametrize("order,cutoff,rate", [(2, 0.5, 10.0), (4, 1.0, 1000.0),
                                               (6, 1.0, 1000.0), (6, 100.0, 1000.0)])
def test_butterworth_cascade_equals_scipy_butter(order: int, cutoff: float, rate: float) -> None:
    stage = design_stage(butterworth(order, cutoff, rate), 32, field="f")
    assert isinstance(stage, BiquadStage) and len(stage.sections) == order // 2
    # scipy.signal.butter in sos form, its response by sosfreqz and its poles from zpk form
    sos = scipy.signal.butter(order, cutoff, fs=rate, output="sos")
    freqs = np.linspace(0, rate / 2, 501)
    _, expected = scipy.signal.sosfreqz(sos, worN=freqs, fs=rate)
    ours = np.array([s.b + s.a for s in stage.sections])
    _, got = scipy.signal.sosfreqz(ours, worN=freqs, fs=rate)
    np.testing.assert_allclose(got, expected, rtol=1e-9, atol=1e-12)
    _, poles, _ = scipy.signal.butter(order, cutoff, fs=rate, output="zpk")
    radii = [abs(r.design_radius) for r in pole_reports(stage)]
    assert radii == sorted(radii)  # lowest Q (smallest radius) first
    np.testing.assert_allclose(sorted(radii), sorted(set(np.round(np.abs(poles), 12))),
                               rtol=1e-9)
    for s in stage.sections:  # each section at unit DC gain: B(1) == A(1)
        assert sum(s.b) == pytest.approx(sum(s.a), rel=1e-12)


def test_notch_equals_scipy_iirnotch_with_zeros_on_the_unit_circle() -> None:
    b, a = scipy.signal.iirnotch(50.0, 5.0, fs=250.0)
    for bits in WIDTHS:
        stage = design_stage(notch(50.0, 5.0, 250.0), bits, field="f")
        assert isinstance(stage, BiquadStage) and len(stage.sections) == 1
        section = stage.sections[0]
        np.testing.assert_allclose(section.b, b, rtol=1e-13)  # iirnotch: DC gain already 1
        np.testing.assert_allclose(section.a, a, rtol=1e-13)
        assert section.b_int[0] == section.b_int[2]
        zeros, _, _ = scipy.signal.tf2zpk(section.b_realised, section.a_realised)
        np.testing.assert_allclose(np.abs(zeros), 1.0, atol=1e-12)


# --------------------------------------------------------------------------- quantisation


@pytest.mark.parametrize("bits", WIDTHS)
@pytest.mark.parametrize("spec_stage", SAMPLE_STAGES, ids=lambda s: s.kind)
def test_quantisation_equals_fxpmath_but_for_the_dc_adjustment(spec_stage: FilterStage,
                                                               bits: int) -> None:
    stage = design_stage(spec_stage, bits, field="f")
    if isinstance(stage, FirStage):
        reference = fxp_int(stage.taps, bits, stage.fmt.frac)
        diff = np.array(stage.taps_int) - reference
        n = len(diff)
        centre = {n // 2} if n % 2 else {n // 2 - 1, n // 2}
        assert set(np.flatnonzero(diff)) <= centre
        # n rounding errors of at most half an LSB each
        assert np.sum(np.abs(diff)) <= n / 2
        assert stage.taps_int == stage.taps_int[::-1]
    else:
        for section in stage.sections:
            q = section.fmt.frac
            b_ref = fxp_int(section.b, bits, q)
            a_ref = fxp_int(section.a[1:], bits, q)
            assert list(section.a_int) == list(a_ref)
            assert (section.b_int[0], section.b_int[2]) == (b_ref[0], b_ref[2])
            # five rounding errors of at most half an LSB each
            assert abs(section.b_int[1] - b_ref[1]) <= 2


@pytest.mark.parametrize("bits", WIDTHS)
@pytest.mark.parametrize("spec_stage", SAMPLE_STAGES, ids=lambda s: s.kind)
def test_integer_dc_gain_is_exactly_one(spec_stage: FilterStage, bits: int) -> None:
    stage = design_stage(spec_stage, bits, field="f")
    assert_exact_dc(stage, bits)


def assert_exact_dc(stage: FirStage | BiquadStage, bits: int) -> None:
    if isinstance(stage, FirStage):
        assert sum(stage.taps_int) == 1 << stage.fmt.frac
        assert stage.fmt.word == bits
        assert all(stage.fmt.min_int <= h <= stage.fmt.max_int for h in stage.taps_int)
        _, h0 = scipy.signal.freqz(stage.taps_realised, [1.0], worN=[0.0], fs=stage.rate_hz)
    else:
        for s in stage.sections:
            assert sum(s.b_int) == (1 << s.fmt.frac) + sum(s.a_int)
            assert s.fmt.word == bits
            assert all(s.fmt.min_int <= c <= s.fmt.max_int for c in s.b_int + s.a_int)
        sos = np.array([np.concatenate((s.b_realised, s.a_realised)) for s in stage.sections])
        _, h0 = scipy.signal.sosfreqz(sos, worN=[0.0], fs=stage.rate_hz)
    assert abs(h0[0] - 1.0) < 1e-12  # scipy.signal.freqz / sosfreqz at DC


@settings(max_examples=60, deadline=None)
@given(kind=st.sampled_from(("butterworth_lowpass", "notch")),
       order=st.sampled_from((2, 4, 6)), rate=st.floats(5.0, 4000.0),
       fraction=st.floats(1e-3, 0.45), quality=st.floats(0.5, 50.0),
       bits=st.sampled_from(WIDTHS))
def test_dc_exact_for_random_biquads(kind: str, order: int, rate: float, fraction: float,
                                     quality: float, bits: int) -> None:
    spec_stage = (butterworth(order, fraction * rate, rate) if kind == "butterworth_lowpass"
                  else notch(fraction * rate, quality, rate))
    try:
        stage = design_stage(spec_stage, bits, field="filter.stages[0]")
    except DesignError as exc:  # a refusal must name the field and the remedy
        assert str(exc).startswith("filter.stages[0].")
        assert bits == 16 or "coefficient_bits" not in str(exc)
        return
    assert_exact_dc(stage, bits)
    assert isinstance(stage, BiquadStage)
    for section in stage.sections:
        # stable: second-order stability triangle |a2| < 1, |a1| < 1 + a2 (from memory),
        # exact in integers; numpy.roots agrees to its accuracy next to a double root
        a1, a2, one = section.a_int[0], section.a_int[1], 1 << section.fmt.frac
        assert abs(a2) < one and abs(a1) < one + a2
        assert np.all(np.abs(np.roots(section.a_realised)) < 1.0 + 1e-7)


@settings(max_examples=40, deadline=None)
@given(length=st.integers(1, 1024), bits=st.sampled_from(WIDTHS))
def test_dc_exact_for_random_moving_averages(length: int, bits: int) -> None:
    assert_exact_dc(design_stage(moving_average(length), bits, field="f"), bits)


def int64_worst_case(coefficients: list[int], constant: int) -> tuple[int, int]:
    """Extremes of sum c_k x_k + constant over int32 x_k, by choosing each x_k's sign."""
    high = sum(c * ((1 << 31) - 1 if c > 0 else -(1 << 31)) for c in coefficients)
    low = sum(c * (-(1 << 31) if c > 0 else (1 << 31) - 1) for c in coefficients)
    return low, high + constant


@pytest.mark.parametrize("bits", WIDTHS)
@pytest.mark.parametrize("spec_stage", SAMPLE_STAGES, ids=lambda s: s.kind)
def test_accumulator_fits_int64_for_any_int32_input(spec_stage: FilterStage, bits: int) -> None:
    # C99 int64_t: [-2^63, 2^63 - 1]; rounding constant 2^(f-1), error feedback |e| <= 2^(q-1)
    stage = design_stage(spec_stage, bits, field="f")
    if isinstance(stage, FirStage):
        groups = [(list(stage.taps_int), 1 << (stage.fmt.frac - 1))]
    else:
        groups = [(list(s.b_int + s.a_int), 1 << s.fmt.frac) for s in stage.sections]
    for coefficients, constant in groups:
        low, high = int64_worst_case(coefficients, constant)
        assert -(1 << 63) <= low and high <= (1 << 63) - 1


def test_moving_average_fraction_bits_are_capped_by_the_accumulator() -> None:
    # 0.2 would take 33 fraction bits in 32; 2^33 * (2^31 - 1) exceeds int64, so 32.
    stage = design_stage(moving_average(5), 32, field="f")
    assert isinstance(stage, FirStage)
    assert stage.fmt.frac == 32 and stage.fmt.name == "Q-1.32"


@pytest.mark.parametrize("bits", WIDTHS)
@pytest.mark.parametrize("length", [2, 4, 8, 16, 64, 3, 5, 6, 10, 100])
def test_moving_average_zeros_at_multiples_of_rate_over_length(length: int, bits: int) -> None:
    # A length-L boxcar has zeros at k * rate / L, k = 1 .. L/2 (from memory; Dirichlet kernel).
    stage = design_stage(moving_average(length, 100.0), bits, field="f")
    assert isinstance(stage, FirStage)
    zeros = 100.0 * np.arange(1, length // 2 + 1) / length
    _, h = scipy.signal.freqz(stage.taps_realised, [1.0], worN=zeros, fs=100.0)
    if length & (length - 1) == 0:
        assert np.all(np.abs(h) < 1e-9)  # 1/L is exact in binary: the taps are all equal
    else:
        # Equal taps c cancel; only the centre adjustment r is left: |H| <= |r| / 2^frac.
        residual = sum(abs(t - stage.taps_int[0]) for t in stage.taps_int)
        bound = residual / 2.0 ** stage.fmt.frac
        assert np.all(np.abs(h) <= bound + 1e-15)
        assert bound <= (2.0 ** -28 if bits == 32 else 2.0 ** -11)


def test_too_many_taps_is_refused_with_a_wider_transition_suggested() -> None:
    with pytest.raises(DesignError) as caught:
        design_stage(kaiser(1000.0, 100.0, 1.0, 80.0), 32, field="filter.stages[2]")
    message = str(caught.value)
    assert message.startswith("filter.stages[2].transition_hz: ")
    assert "5021 taps" in message and "\n" not in message
    # scipy.signal.kaiserord: the suggested width is enough for at most 1023 taps
    match = re.search(r"widen the transition to ([0-9.]+) Hz", message)
    assert match is not None
    numtaps, _ = scipy.signal.kaiserord(80.0, float(match.group(1)) / 500.0)
    assert numtaps | 1 <= 1023


# --------------------------------------------------------------------------- poles


@pytest.mark.parametrize("order", [2, 4, 6])
@pytest.mark.parametrize("cutoff,rate", [(0.5, 10.0), (1.0, 1000.0)])
def test_low_cutoff_poles_within_tolerance_at_32_bits(order: int, cutoff: float,
                                                      rate: float) -> None:
    stage = design_stage(butterworth(order, cutoff, rate), 32, field="f")
    assert isinstance(stage, BiquadStage)
    for report, section in zip(pole_reports(stage), stage.sections, strict=True):
        _, poles, _ = scipy.signal.tf2zpk(section.b_realised, section.a_realised)
        assert report.realised_radius == pytest.approx(np.max(np.abs(poles)), rel=1e-9)
        assert abs(report.radius_error_of_margin) < POLE_TOLERANCE
        assert abs(report.angle_error_fraction) < POLE_TOLERANCE


def test_16_bits_at_1hz_1000sps_order_2_warns_of_the_pole_angle() -> None:
    # measured: the radius stays within 0.05 % of (1 - r) but the angle moves about 45 %
    stage = design_stage(butterworth(2, 1.0, 1000.0), 16, field="filter.stages[0]")
    report = analyse_chain((stage,), passband_edge_hz=1.0, stopband_edge_hz=10.0,
                           adc_rate_hz=1000.0, sinc_order=3, full_scale_lsb=1e4)
    (pole,) = report.stages[0].poles
    assert abs(pole.radius_error_of_margin) < POLE_TOLERANCE
    assert pole.angle_error_fraction > 0.3
    assert any(w.startswith("filter.stages[0]: section 1: ") and "in angle" in w
               for w in report.warnings)


@pytest.mark.parametrize("order", [4, 6])
def test_16_bits_at_1hz_1000sps_order_4_and_6_are_refused(order: int) -> None:
    # measured: a quantised section gets a pole at z = 1 (1 + a1 + a2 rounds to 0)
    with pytest.raises(DesignError, match=r"^filter\.stages\[1\]\.cutoff_hz: section \d of "
                                          rf"{order // 2} quantised to 16-bit Q1\.14 .*"
                                          r"use filter\.coefficient_bits = 32 or a higher "
                                          r"cutoff$"):
        design_stage(butterworth(order, 1.0, 1000.0), 16, field="filter.stages[1]")


def test_pole_at_z_equal_one_is_refused_at_32_bits() -> None:
    # 1 mHz at 1000 sps: 1 + a1 + a2 ~ (2 pi fc / fs)^2 = 4e-11 is below one LSB of Q1.30.
    # Second-order stability triangle |a2| < 1, |a1| < 1 + a2 (from memory).
    with pytest.raises(DesignError, match=r"use a higher cutoff$") as caught:
        design_stage(butterworth(2, 1e-3, 1000.0), 32, field="filter.stages[0]")
    assert "coefficient_bits" not in str(caught.value)


# --------------------------------------------------------------------------- responses


def test_magnitude_response_is_the_product_of_scipy_stage_responses() -> None:
    _, stages = example_chain("fatigue_coupon", 32)
    fir, *iirs = stages
    freqs = np.linspace(0.0, 500.0, 777)
    _, h_fir = scipy.signal.freqz(fir.taps_realised, [1.0], worN=freqs, fs=1000.0)
    sos = np.array([np.concatenate((s.b_realised, s.a_realised))
                    for iir in iirs for s in iir.sections])
    _, h_iir = scipy.signal.sosfreqz(sos, worN=freqs, fs=250.0)
    np.testing.assert_allclose(magnitude_response(stages, freqs, realised=True),
                               np.abs(h_fir * h_iir), rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("tone_hz", [30.0, 47.0, 130.0])
def test_multirate_tone_gain_matches_a_time_domain_run(tone_hz: float) -> None:
    # scipy.signal.lfilter, decimation by slicing (outputs D-1, 2D-1, ...), sosfilt; the
    # steady-state amplitude is a least-squares fit of a sine and cosine at the tone.
    _, stages = example_chain("fatigue_coupon", 32)
    fir, *iirs = stages
    t = np.arange(16000) / 1000.0
    y = scipy.signal.lfilter(fir.taps_realised, [1.0], np.sin(2 * np.pi * tone_hz * t))[3::4]
    sos = np.array([np.concatenate((s.b_realised, s.a_realised))
                    for iir in iirs for s in iir.sections])
    y = scipy.signal.sosfilt(sos, y)
    t_out = t[3::4]
    keep = slice(len(y) // 2, None)
    basis = np.column_stack((np.sin(2 * np.pi * tone_hz * t_out[keep]),
                             np.cos(2 * np.pi * tone_hz * t_out[keep])))
    coef, *_ = np.linalg.lstsq(basis, y[keep], rcond=None)
    expected = magnitude_response(stages, [tone_hz], realised=True)[0]
    assert math.hypot(*coef) == pytest.approx(expected, rel=1e-6, abs=1e-9)


def test_impulse_response_equals_scipy_lfilter() -> None:
    stage = design_stage(butterworth(4, 1.0, 100.0), 32, field="f")
    assert isinstance(stage, BiquadStage)
    b, a = np.array([1.0]), np.array([1.0])
    for s in stage.sections:
        b, a = np.convolve(b, s.b_realised), np.convolve(a, s.a_realised)
    delta = np.zeros(300)
    delta[0] = 1.0
    np.testing.assert_allclose(impulse_response(stage, 300), scipy.signal.lfilter(b, a, delta),
                               rtol=1e-9, atol=1e-13)
    ideal = impulse_response(stage, 300, realised=False)
    assert np.max(np.abs(ideal - impulse_response(stage, 300))) < 1e-6


@pytest.mark.parametrize("spec_stage", SAMPLE_STAGES[1:], ids=lambda s: s.kind)
def test_group_delay_at_dc_equals_scipy_group_delay(spec_stage: FilterStage) -> None:
    stage = design_stage(spec_stage, 32, field="f")
    w = [1e-6 * stage.rate_hz]
    if isinstance(stage, FirStage):
        _, gd = scipy.signal.group_delay((stage.taps_realised, [1.0]), w=w, fs=stage.rate_hz)
        samples = float(gd[0])
    else:
        samples = sum(float(scipy.signal.group_delay((s.b_realised, s.a_realised), w=w,
                                                     fs=stage.rate_hz)[1][0])
                      for s in stage.sections)
    assert group_delay_dc_s(stage, realised=True) == pytest.approx(samples / stage.rate_hz,
                                                                   rel=1e-6)


def test_settling_time_equals_scipy_dstep() -> None:
    stage = design_stage(butterworth(2, 0.5, 10.0), 32, field="f")
    assert isinstance(stage, BiquadStage)
    (section,) = stage.sections
    _, (y,) = scipy.signal.dstep((section.b_realised, section.a_realised, 0.1), n=400)
    y = y[:, 0]
    for band, got in zip((1e-3, 1e-5),
                         settling_times((stage,), 10.0, (1e-3, 1e-5), realised=True),
                         strict=True):
        last = np.flatnonzero(np.abs(y - 1.0) > band)[-1]
        assert got == pytest.approx((last + 1) * 0.1)


def test_moving_average_settles_after_its_length() -> None:
    # a length-5 boxcar reaches the step exactly at its fifth input (from the definition)
    stage = design_stage(moving_average(5), 32, field="f")
    assert settling_times((stage,), 10.0, (1e-3,), realised=True) == (pytest.approx(0.4),)


def test_hive_scale_chain_figures() -> None:
    spec, stages = example_chain("hive_scale", 32)
    report = analyse_chain(stages, passband_edge_hz=0.5, stopband_edge_hz=1.0,
                           adc_rate_hz=10.0, sinc_order=3, full_scale_lsb=2e4)
    assert report.warnings == ()
    assert [s.coefficient_formats for s in report.stages] == [("Q-1.32",), ("Q1.30",)]
    # 50 and 60 Hz alias to DC at 10 sps, so the digital filters pass them (H periodic in
    # the rate); the ADC's sinc^3 has its notches at multiples of 10 Hz (adc.py, capped)
    assert report.realised.rejection_50hz_db == pytest.approx(0.0, abs=1e-9)
    assert report.realised.rejection_60hz_with_sinc_db == 300.0
    # moving average (5 - 1) / 2 samples plus the biquad's group delay, scipy.signal
    w = [1e-6]
    biquad = stages[1].sections[0]
    _, gd = scipy.signal.group_delay((biquad.b_realised, biquad.a_realised), w=w, fs=10.0)
    assert report.realised.group_delay_dc_s == pytest.approx(0.2 + gd[0] / 10.0, rel=1e-6)
    assert abs(report.max_passband_deviation_db) < 1e-6
    assert report.realised.settling_1lsb_s >= report.realised.settling_0p1pct_s


def test_fatigue_coupon_chain_figures_at_16_bits() -> None:
    _, stages = example_chain("fatigue_coupon", 16)
    report = analyse_chain(stages, passband_edge_hz=40.0, stopband_edge_hz=80.0,
                           adc_rate_hz=1000.0, sinc_order=3, full_scale_lsb=5e4)
    assert report.warnings == ()
    assert [s.coefficient_count for s in report.stages] == [93, 5, 5]
    # the Kaiser design promises 60 dB (scipy.signal.kaiserord); quantised to 16 bits it
    # must still hold within the 1 dB stopband tolerance
    assert report.realised.stopband_attenuation_db > 59.0
    assert report.realised.rejection_50hz_db > 60.0  # the notch, off by its b1 adjustment


def test_bad_band_edges_are_a_programming_error() -> None:
    _, stages = example_chain("hive_scale", 32)
    with pytest.raises(ValueError):
        analyse_chain(stages, passband_edge_hz=1.0, stopband_edge_hz=0.5, adc_rate_hz=10.0,
                      sinc_order=3, full_scale_lsb=2e4)


def test_dataclass_fields_are_as_documented() -> None:
    # the range analysis and the renderer read these names directly
    assert list(FirStage.__dataclass_fields__) == ["kind", "rate_hz", "decimation", "taps",
                                                   "taps_int", "fmt"]
    assert list(Biquad.__dataclass_fields__) == ["b", "a", "b_int", "a_int", "fmt"]
    assert list(BiquadStage.__dataclass_fields__) == ["kind", "rate_hz", "sections",
                                                      "decimation"]
