"""The sensor/ADC budget against calculations written out by hand from the formulas.

The specs here are not in the repository. For each, the expected figures are worked out in
the test from first principles: the bridge equation arm by arm (standard strain-measurement
texts, from memory), the ADC's +-Vref/G range over 2^bits codes, the largest PGA gain that
holds the peak input plus the overload margin, noise-free bits log2(FSR / (6.6 RMS))
(common practice, no published source), and the sinc^k response as cascaded moving averages
(scipy.signal.freqz) or numpy.sinc.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.signal

from hosttool.commands.check import budget_json
from hosttool.design.budget import compute_budget
from hosttool.errors import DesignError
from hosttool.spec.schema import parse_spec
from hosttool.util.resources import example_names, example_text

PRESSURE = """
schema = 1
name = "line_pressure"
description = "3 mV/V pressure transducer, 5 V excitation, 2.5 V reference"

[sensor]
kind = "transducer"
capacity = 10.0
unit = "bar"
rated_output_mv_per_v = 3.0
zero_balance_mv_per_v = 0.2
cell_resistance_ohm = 350.0

[excitation]
voltage_v = 5.0
ratiometric = false
reference_v = 2.5

[adc]
bits = 24
pga_gain = "auto"
data_rate_sps = 20.0
noise_uv_rms = 0.05
sinc_order = 4
overload_margin_pct = 10.0

[output]
resolution = 0.001
bandwidth_hz = 2.0
"""

POISSON_FULL = """
schema = 1
name = "axial_link"

[sensor]
kind = "strain_bridge"
topology = "full_poisson"
gauge_factor = 2.0
gauge_resistance_ohm = 350.0
poisson_ratio = 0.3
wiring = "four_wire"
lead_resistance_ohm = 2.0
strain_range_ue = 2000.0
zero_balance_mv_per_v = 0.1

[excitation]
voltage_v = 5.0

[adc]
data_rate_sps = 50.0
modulator_rate_hz = 3200.0
noise_uv_rms = 0.04
sinc_order = 3

[output]
resolution = 0.5
bandwidth_hz = 5.0
"""

TENSION = """
schema = 1
name = "tension_link"

[sensor]
kind = "transducer"
capacity = 500.0
unit = "N"
rated_output_mv_per_v = 1.5
zero_balance_mv_per_v = -0.05
cells_in_parallel = 2
cell_resistance_ohm = 700.0
bipolar = true

[excitation]
voltage_v = 3.0
ratiometric = true

[adc]
bits = 20
pga_gains = [1, 2, 4, 8, 16, 32, 64]
reference_max_v = 3.3
data_rate_sps = 60.0
noise_uv_rms = 0.2
sinc_order = 1
overload_margin_pct = 20.0

[output]
resolution = 0.05
"""


def wheatstone(r1: float, r2: float, r3: float, r4: float) -> float:
    """Bridge equation Vo/V across the bridge (from memory)."""
    return r1 / (r1 + r2) - r4 / (r3 + r4)


def largest_gain(gains, peak_v, margin_pct, vref):
    """The largest gain whose +-Vref/G holds the peak plus the margin."""
    return max(g for g in gains if peak_v * (1 + margin_pct / 100) <= vref / g)


def total_noise(vref, gain, noise_v_rms, bits=24):
    """The input noise and the rounding to a code, q / sqrt(12) (Widrow), volts RMS."""
    q = 2 * vref / gain / 2 ** bits
    return math.hypot(noise_v_rms, q / math.sqrt(12))


def noise_free_bits(vref, gain, noise_v_rms, bits=24):
    """log2(FSR / (6.6 RMS)), FSR = 2 Vref / G (common practice, no published source), the
    RMS with the converter's own rounding."""
    return math.log2((2 * vref / gain) / (6.6 * total_noise(vref, gain, noise_v_rms, bits)))


def test_pressure_transducer_non_ratiometric():
    b = compute_budget(parse_spec(PRESSURE, "pressure.toml"))
    vex, vref, bits = 5.0, 2.5, 24
    ro, zb, cap = 3.0e-3, 0.2e-3, 10.0
    peak = (ro + zb) * vex                       # 16 mV at capacity with the zero balance
    gain = largest_gain([1, 2, 4, 8, 16, 32, 64, 128], peak, 10.0, vref)
    assert gain == 128                           # 17.6 mV needed, +-19.53 mV at 128
    lsb = vref / gain / 2 ** (bits - 1)
    counts_per_bar = ro / cap * vex / lsb
    noise_v = 0.05e-6

    assert b.pga_gain == gain and b.pga_auto
    assert b.reference_v == vref and b.excitation_v == vex
    assert b.peak_input_mv == pytest.approx(peak * 1e3, rel=1e-12)
    assert b.input_range_mv == pytest.approx(vref / gain * 1e3, rel=1e-12)
    assert b.lsb_nv == pytest.approx(lsb * 1e9, rel=1e-12)
    assert b.range_used_pct == pytest.approx(100 * peak / (vref / gain), rel=1e-12)
    assert b.range_used_pct == pytest.approx(81.92, abs=1e-9)
    assert b.counts_per_unit == pytest.approx(counts_per_bar, rel=1e-12)
    assert b.counts_per_lsb == pytest.approx(counts_per_bar * 0.001, rel=1e-12)
    assert b.span_counts == pytest.approx(counts_per_bar * cap, rel=1e-12)
    assert b.noise_counts_rms == pytest.approx(noise_v / lsb, rel=1e-12)
    assert b.noise_free_bits == pytest.approx(noise_free_bits(vref, gain, noise_v), rel=1e-12)
    # ENOB as IEEE Std 1241 defines it (from memory): the noise over an ideal converter's
    # q / sqrt(12); an ideal converter shows exactly its bits
    total = total_noise(vref, gain, noise_v)
    assert b.effective_bits == pytest.approx(
        math.log2((2 * vref / gain) / (math.sqrt(12) * total)), rel=1e-12)
    # 6.6 x 0.05 uV over 0.3 mV/V/bar x 5 V = 2.2e-4 bar (the rounding adds 0.03 %)
    assert b.noise_free_resolution == pytest.approx(6.6 * total / (ro / cap * vex), rel=1e-12)
    assert b.noise_free_resolution == pytest.approx(2.2e-4, rel=1e-3)
    assert b.noise_free_divisions == pytest.approx(cap / b.noise_free_resolution, rel=1e-12)
    assert b.requested_divisions == pytest.approx(10000.0)
    assert b.full_scale_mv_per_v == pytest.approx(3.0, rel=1e-12)
    assert b.full_scale_output_mv == pytest.approx(15.0, rel=1e-12)
    assert b.zero_offset_mv_per_v == pytest.approx(0.2, rel=1e-12)
    assert b.excitation_current_ma == pytest.approx(5.0 / 350.0 * 1e3, rel=1e-12)
    assert b.excitation_power_mw == pytest.approx(25.0 / 350.0 * 1e3, rel=1e-12)
    assert (b.range_min, b.range_max, b.unit) == (0.0, 10.0, "bar")
    assert b.lead_desensitisation == 1.0
    assert b.signal_band_hz == 2.0

    # mains through an ideal sinc^4 at 20 samples/s: numpy.sinc(f / fd)^4
    m50, m60 = b.mains
    assert m50.rejection_db == pytest.approx(-20 * math.log10(np.sinc(50 / 20) ** 4), rel=1e-9)
    sweep = np.linspace(49.5, 50.5, 20001)
    worst = -20 * math.log10(np.max(np.abs(np.sinc(sweep / 20)) ** 4))
    assert m50.worst_rejection_db == pytest.approx(worst, abs=0.01)
    assert m50.alias_hz == pytest.approx(10.0)   # 50 - 2 x 20
    # 50 Hz is 2.5 x 20 samples/s, a fold point: 49.5 Hz and 50.5 Hz both land at 9.5 Hz
    assert m50.alias_band_hz == pytest.approx((9.5, 10.0))
    assert not m50.in_band
    assert m60.rejection_db == 300.0             # 60 Hz is the third notch of 20 samples/s
    assert m60.in_band                           # lands at 0..0.6 Hz, but deep in the notch
    assert b.warnings == ()


def test_full_poisson_bridge_with_four_wire_leads():
    b = compute_budget(parse_spec(POISSON_FULL, "axial.toml"))
    rg, rl, nu, gf, vex, zb = 350.0, 2.0, 0.3, 2.0, 5.0, 0.1e-3

    def ratio(strain_ue: float, leads: float = rl) -> float:
        x = gf * strain_ue * 1e-6
        r1 = r3 = rg * (1 + x)
        r2 = r4 = rg * (1 - nu * x)
        bridge = (r1 + r2) * (r3 + r4) / (r1 + r2 + r3 + r4)
        return wheatstone(r1, r2, r3, r4) * bridge / (bridge + 2 * leads)

    # tangent sensitivity by central difference of the bridge equation (truncation ~1e-12)
    sens = (ratio(1.0) - ratio(-1.0)) / 2.0
    sens_no_leads = (ratio(1.0, 0.0) - ratio(-1.0, 0.0)) / 2.0
    ends = [ratio(-2000.0), ratio(2000.0)]
    peak = (max(abs(e) for e in ends) + zb) * vex
    gain = largest_gain([1, 2, 4, 8, 16, 32, 64, 128], peak, 10.0, vex)
    assert gain == 128
    lsb = vex / gain / 2 ** 23

    assert b.pga_gain == gain
    assert b.peak_input_mv == pytest.approx(peak * 1e3, rel=1e-9)
    assert b.range_used_pct == pytest.approx(100 * peak / (vex / gain), rel=1e-9)
    assert b.counts_per_unit == pytest.approx(sens * vex / lsb, rel=1e-8)
    assert b.sensitivity_uv_per_v_per_unit == pytest.approx(sens * 1e6, rel=1e-8)
    assert b.lead_desensitisation == pytest.approx(sens / sens_no_leads, rel=1e-8)
    assert b.lead_desensitisation == pytest.approx(2 * rg / (2 * rg + 4 * rl), rel=1e-8)
    assert b.full_scale_mv_per_v == pytest.approx(ends[1] * 1e3, rel=1e-9)
    assert b.zero_offset_mv_per_v == pytest.approx(0.1, rel=1e-12)
    # nonlinearity: worst distance to the tangent, at the ends, in % of the tangent's span
    worst = max(abs(ratio(m) - sens * m) for m in (-2000.0, 2000.0))
    assert b.nonlinearity_pct_fs == pytest.approx(100 * worst / (2000.0 * sens), rel=1e-6)
    assert b.noise_free_bits == pytest.approx(noise_free_bits(vex, gain, 0.04e-6), rel=1e-12)
    assert b.noise_free_resolution == pytest.approx(
        6.6 * total_noise(vex, gain, 0.04e-6) / (sens * vex), rel=1e-8)
    # the excitation source sees the bridge and its two excitation leads
    assert b.bridge_resistance_ohm == pytest.approx(rg + 2 * rl)
    assert b.excitation_current_ma == pytest.approx(vex / (rg + 2 * rl) * 1e3, rel=1e-12)
    # the codes the ADC reads at the ends, from the bridge equation (not slope x range)
    lsb_ratio = lsb / vex
    assert b.span_counts == pytest.approx((ends[1] - ends[0]) / lsb_ratio, rel=1e-9)
    assert b.full_scale_counts == pytest.approx(max(abs(e) for e in ends) / lsb_ratio,
                                                rel=1e-9)
    assert (b.range_min, b.range_max, b.unit) == (-2000.0, 2000.0, "ue")
    assert b.requested_divisions == pytest.approx(8000.0)

    # sinc^3 with decimation 3200 / 50 = 64: three cascaded 64-sample averages (scipy)
    h = np.ones(1)
    for _ in range(3):
        h = np.convolve(h, np.ones(64) / 64)
    _, resp = scipy.signal.freqz(h, worN=[2 * np.pi * 60.0 / 3200.0])
    m50, m60 = b.mains
    assert m50.rejection_db == 300.0
    assert m60.rejection_db == pytest.approx(-20 * math.log10(abs(resp[0])), rel=1e-9)
    assert m60.alias_hz == pytest.approx(10.0)
    assert not m60.in_band
    assert b.warnings == ()


def test_bipolar_tension_link_20_bits_with_all_its_warnings():
    b = compute_budget(parse_spec(TENSION, "tension.toml"))
    vex = vref = 3.0
    ro, zb, cap, bits = 1.5e-3, 0.05e-3, 500.0, 20
    peak = (ro + zb) * vex
    gain = largest_gain([1, 2, 4, 8, 16, 32, 64], peak, 20.0, vref)
    assert gain == 64                            # the top of this gain set
    lsb = vref / gain / 2 ** (bits - 1)
    counts_per_n = ro / cap * vex / lsb
    used = 100 * peak / (vref / gain)
    nf_resolution = 6.6 * 0.2e-6 / (ro / cap * vex)

    assert b.pga_gain == 64
    assert b.range_used_pct == pytest.approx(used, rel=1e-12)
    assert b.counts_per_unit == pytest.approx(counts_per_n, rel=1e-12)
    assert b.span_counts == pytest.approx(counts_per_n * 1000.0, rel=1e-12)
    assert b.full_scale_counts == pytest.approx(counts_per_n * 500.0, rel=1e-12)
    assert b.noise_free_bits == pytest.approx(noise_free_bits(vref, gain, 0.2e-6, bits),
                                              rel=1e-12)
    assert b.noise_free_resolution == pytest.approx(nf_resolution, rel=1e-2)
    assert b.noise_free_resolution == pytest.approx(
        6.6 * total_noise(vref, gain, 0.2e-6, bits) / (ro / cap * vex), rel=1e-12)
    assert b.bridge_resistance_ohm == pytest.approx(350.0)
    assert b.zero_offset_mv_per_v == pytest.approx(-0.05, rel=1e-12)
    assert (b.range_min, b.range_max) == (-500.0, 500.0)
    assert b.requested_divisions == pytest.approx(20000.0)
    assert b.signal_band_hz == 30.0              # no filter, no bandwidth: Nyquist

    # 50 Hz at 60 samples/s lands at 10 Hz, inside 0..30 Hz, with sinc^1 rejection
    # -20 log10 |sinc(50/60)| = 14.4 dB
    m50 = b.mains[0]
    assert m50.in_band
    assert m50.rejection_db == pytest.approx(-20 * math.log10(abs(np.sinc(50 / 60))), rel=1e-9)
    # 60 Hz sits in the sinc^1 notch, but +-1 % off it the rejection is only about 40 dB
    # and it lands at 0..0.6 Hz
    m60 = b.mains[1]
    off = -20 * math.log10(max(abs(np.sinc(59.4 / 60)), abs(np.sinc(60.6 / 60))))
    assert m60.rejection_db == 300.0
    assert m60.worst_rejection_db == pytest.approx(off, abs=0.01)
    assert used < 25 and nf_resolution > 0.05
    assert len(b.warnings) == 4
    assert b.warnings[0].startswith(f"range used {used:.1f} % is below 25 %")
    # gain 64 is the top of this spec's set and the reading is ratiometric: no advice to
    # raise either
    assert "the gain is already the largest and the excitation cannot rise" in b.warnings[0]
    assert b.warnings[1].startswith(f"noise-free resolution {b.noise_free_resolution:.4g} N "
                                    "at the ADC "
                                    "is coarser than the requested 0.05 N")
    assert b.warnings[2].startswith("mains 50 Hz (+-1 %) lands at 9.5..10.5 Hz, inside the "
                                    "30 Hz signal band")
    assert b.warnings[3] == ("mains 60 Hz (+-1 %) lands at 0..0.6 Hz, inside the 30 Hz signal "
                             f"band, with only {off:.1f} dB of sinc rejection")


def _fixed_gain(zero_balance_mv_per_v: float) -> str:
    # 3 mV/V at 5 V on a 2.048 V reference at gain 128 (+-16 mV)
    return PRESSURE.replace('pga_gain = "auto"', "pga_gain = 128").replace(
        "reference_v = 2.5", "reference_v = 2.048").replace(
        "zero_balance_mv_per_v = 0.2", f"zero_balance_mv_per_v = {zero_balance_mv_per_v}")


def test_range_used_above_95_percent_warns():
    b = compute_budget(parse_spec(_fixed_gain(0.1), "x.toml"))
    used = 100 * (3.1e-3 * 5.0) / (2.048 / 128)  # 96.9 %
    assert b.range_used_pct == pytest.approx(used, rel=1e-12)
    assert b.warnings == (f"range used {used:.1f} % is above 95 %: little overload margin",)


def test_range_above_100_percent_warns_of_saturation():
    b = compute_budget(parse_spec(_fixed_gain(0.3), "x.toml"))
    used = 100 * (3.3e-3 * 5.0) / (2.048 / 128)  # 103.1 %
    assert b.range_used_pct == pytest.approx(used, rel=1e-12)
    assert len(b.warnings) == 1 and "readings will saturate" in b.warnings[0]


def test_no_gain_fits_is_a_design_error():
    text = PRESSURE.replace("reference_v = 2.5", "reference_v = 0.015")  # 16 mV > 15 mV
    with pytest.raises(DesignError, match=r"^p\.toml: adc\.pga_gains: the peak input 16 mV"):
        compute_budget(parse_spec(text, "p.toml"))


@pytest.mark.parametrize("name", ["hive_scale", "fatigue_coupon"])
def test_bundled_examples_budget(name):
    b = compute_budget(parse_spec(example_text(name), f"{name}.toml"))
    assert b.spec_name == name
    if name == "hive_scale":
        # 4 x 50 kg at 2 mV/V, 3.3 V ratiometric, gain 128 chosen: 2 mV/V / 200 kg x 3.3 V
        lsb = 3.3 / 128 / 2 ** 23
        assert b.pga_gain == 128
        assert b.counts_per_unit == pytest.approx(2e-3 / 200 * 3.3 / lsb, rel=1e-12)
        assert b.bridge_resistance_ohm == pytest.approx(350 / 4)
        assert b.warnings == ()
    else:
        # 120 ohm, GF 2.1, three-wire 0.8 ohm leads: desensitisation 120 / 120.8
        assert b.lead_desensitisation == pytest.approx(120 / 120.8, rel=1e-12)
        assert b.pga_gain == 128 and not b.pga_auto
    assert set(example_names()) >= {"hive_scale", "fatigue_coupon"}


def test_json_keys_and_types():
    b = compute_budget(parse_spec(TENSION, "tension.toml"))
    data = budget_json(b)
    assert data["kind"] == "budget" and data["tool_version"]
    assert data["pga_gain"] == 64 and isinstance(data["pga_gain"], int)
    assert isinstance(data["mains"], list) and isinstance(data["mains"][0]["alias_band_hz"], list)
    assert data["warnings"] == list(b.warnings)
