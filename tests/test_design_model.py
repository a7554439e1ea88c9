"""The design's proofs hold on the bit-exact model: headroom, error bounds, DC exactness.

Outside references: scipy.signal.lfilter is the float64 reference's filter engine (the
model's own float path is checked against an independent lfilter/sosfilt call here);
Widrow's quantisation model (rounding to a step q adds error uniform on [-q/2, q/2],
variance q^2/12) for the noise prediction; the bridge's exact inverse (hosttool.physics.bridge,
itself tested against the bridge equation in test_bridge.py) for the linearisation.
"""

from __future__ import annotations

import json
import math
import re
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from scipy import signal

from hosttool.cli import main
from hosttool.design.filters import FirStage
from hosttool.design.model import run_integer, run_reference, static_integer, static_reference
from hosttool.design.resolve import Design, UnitConstants, make_design
from hosttool.errors import DesignError
from hosttool.physics.adc import Converter
from hosttool.physics.bridge import bridge_of
from hosttool.spec.schema import load_spec, parse_spec

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"

LOW_CUTOFF = """
schema = 1
name = "slow_press"
[sensor]
kind = "transducer"
capacity = 50.0
unit = "bar"
rated_output_mv_per_v = 3.0
bipolar = true
[excitation]
voltage_v = 5.0
ratiometric = true
[adc]
pga_gain = "auto"
data_rate_sps = 1000.0
noise_uv_rms = 0.1
[output]
resolution = 0.001
[filter]
stages = [ { kind = "moving_average", length = 16 },
           { kind = "butterworth_lowpass", order = 6, cutoff_hz = 1.0 },
           { kind = "notch", frequency_hz = 60.0, quality = 2.0 } ]
coefficient_bits = COEFF
[temperature]
min_c = -10.0
max_c = 60.0
zero_tc_ppm_fs_per_c = 15.0
span_tc_ppm_per_c = -25.0
[linearisation]
mode = "polynomial"
order = 3
"""


def _designs() -> list[Design]:
    specs = [load_spec(EXAMPLES / "hive_scale.toml"), load_spec(EXAMPLES / "fatigue_coupon.toml"),
             parse_spec(LOW_CUTOFF.replace("COEFF", "32"), "slow_press.toml")]
    return [make_design(s) for s in specs]


DESIGNS = _designs()
IDS = [d.spec.name for d in DESIGNS]


def _limit(d: Design) -> int:
    return 1 << (d.spec.adc.bits - 1)


def _temps(d: Design, n: int, rng: np.random.Generator) -> np.ndarray | None:
    if d.temperature is None:
        return None
    t = d.temperature
    # beyond the range on purpose: the firmware clamps
    return rng.integers(t.min_centi - 500, t.max_centi + 500, n)


def _vectors(d: Design, rng: np.random.Generator) -> dict[str, np.ndarray]:
    lim = _limit(d)
    n = 40000
    fs = d.spec.adc.data_rate_sps
    t = np.arange(n) / fs
    step = np.where(np.arange(n) < n // 2, -lim, lim - 1)
    sweep = signal.chirp(t, f0=0.01, t1=t[-1], f1=fs / 2 * 0.9)
    worst = d.cascade.total.signs()
    worst_codes = np.where(np.tile(worst, n // worst.size + 1)[:n] >= 0, lim - 1, -lim)
    return {
        "random": rng.integers(-lim, lim, n),
        "step": step,
        "sine_sweep": np.round(sweep * (lim - 1)).astype(np.int64),
        "worst_case": worst_codes,
    }


@pytest.mark.parametrize("design", DESIGNS, ids=IDS)
def test_integer_model_within_proven_bound(design: Design) -> None:
    rng = np.random.default_rng(7)
    for label, codes in _vectors(design, rng).items():
        temps = _temps(design, codes.size, rng)
        run = run_integer(design, codes, temps)
        ref = run_reference(design, codes, temps)
        err = np.abs(run.output - ref)
        assert err.max() <= design.error_bound_lsb, (label, err.max(), design.error_bound_lsb)
        assert sum(run.saturations.values()) == 0, (label, run.saturations)
        ideal = run_reference(design, codes, temps, ideal=True)
        assert np.abs(run.output - ideal).max() <= design.ideal_error_bound_lsb, label


@pytest.mark.parametrize("design", DESIGNS, ids=IDS)
def test_node_peaks_stay_within_bounds_and_worst_case_reaches_them(design: Design) -> None:
    lim = _limit(design)
    bounds = {n.name: n.bound for n in design.all_nodes if n.word == 32}
    # the sign pattern of the chain's impulse response drives the last filter node to
    # (nearly) L1 * X: the bound is tight, not just safe
    worst = design.cascade.total.signs()
    codes = np.concatenate([np.where(worst >= 0, lim - 1, -lim)] * 2)
    run = run_integer(design, codes)
    for name, peak in run.peaks.items():
        if name in bounds:
            assert peak <= bounds[name], name
    last = [n for n in design.nodes if n.word == 32][-1]
    # the offset node only reaches |x * 2^G| <= 2^(bits-1+G) with a zero offset, half the
    # bound that allows any offset within the ADC range
    assert run.peaks[last.name] >= 0.45 * last.bound


def test_reference_filters_match_scipy() -> None:
    design = DESIGNS[2]
    rng = np.random.default_rng(3)
    codes = rng.integers(-2 ** 20, 2 ** 20, 5000)
    v = codes * 2.0 ** design.guard_bits - design.constants.offset
    for stage in design.stages:
        if isinstance(stage, FirStage):
            d = stage.decimation
            v = signal.lfilter(stage.taps_realised, [1.0], v)[d - 1::d]
        else:
            sos = np.array([np.concatenate([s.b_realised, s.a_realised]) for s in stage.sections])
            v = signal.sosfilt(sos, v)
    expected = run_reference(design, codes)  # includes scale/lin/temperature at Tref
    chain_only = expected  # rebuild the static part independently:
    s = v * design.scale.realised(design.constants.scale_mul)
    lin = design.linearisation
    assert lin is not None
    w = s / 2.0 ** lin.norm_shift
    c = [x / 2.0 ** 30 for x in design.constants.lin]
    s = sum(ck * w ** k for k, ck in enumerate(c)) * 2.0 ** lin.norm_shift
    np.testing.assert_allclose(chain_only, s, rtol=1e-12, atol=1e-6)


@pytest.mark.parametrize("design", DESIGNS, ids=IDS)
def test_settled_dc_equals_static_path_exactly(design: Design) -> None:
    # every filter's integer DC gain is exactly 1, so a held input settles to the static path
    for code in (-(1 << 22) + 17, 0, 123457, (1 << 23) - 1):
        n = 20000 * design.decimation
        run = run_integer(design, np.full(n, code))
        static = static_integer(design, np.array([code]))
        assert run.output[-1] == static.output[0]


def test_rounding_noise_matches_widrow_variance() -> None:
    # no filters, no linearisation, no temperature: the only rounding is the scale's, a step of
    # one output LSB, so the error must have variance 1/12 LSB^2 (Widrow's model)
    text = (EXAMPLES / "hive_scale.toml").read_text()
    text = re.sub(r"\[filter\].*?coefficient_bits = 32\n", "", text, flags=re.S)
    text = re.sub(r"\[temperature\].*?max_span_tc_ppm_per_c = 50.0\n", "", text, flags=re.S)
    design = make_design(parse_spec(text, "plain.toml"))
    assert not design.stages and design.temperature is None
    rng = np.random.default_rng(11)
    codes = rng.integers(-2 ** 23, 2 ** 23, 400000)
    err = static_integer(design, codes).output - static_reference(design, codes)
    assert abs(np.var(err) - 1 / 12) < 0.02 / 12
    assert abs(np.mean(err)) < 0.005
    assert design.error_rms_lsb == pytest.approx(math.sqrt(1 / 12), rel=1e-6)


@pytest.mark.parametrize("design", DESIGNS, ids=IDS)
def test_predicted_rms_matches_measured(design: Design) -> None:
    rng = np.random.default_rng(5)
    codes = rng.integers(-_limit(design), _limit(design), 200000)
    temps = _temps(design, codes.size, rng)
    err = run_integer(design, codes, temps).output - run_reference(design, codes, temps)
    measured = float(np.sqrt(np.mean(err ** 2)))
    # the prediction assumes independent uniform roundings; allow 25 % either way
    assert 0.75 * design.error_rms_lsb <= measured <= 1.25 * design.error_rms_lsb


def test_quarter_bridge_linearisation_against_exact_inverse() -> None:
    design = DESIGNS[1]
    spec = design.spec
    bridge = bridge_of(spec.sensor)
    conv = Converter(spec.adc.bits, design.budget.pga_gain, spec.excitation.reference_v)
    strain = np.linspace(-5000.0, 5000.0, 20001)  # microstrain
    # ideal bridge without zero balance, as the nominal constants assume
    ratio = np.asarray(bridge.ratio(strain)) - bridge.offset
    codes = conv.code(ratio * spec.excitation.voltage_v)
    out = static_integer(design, codes).output * spec.output.resolution
    # truth: the exact inverse at the code's own ratio (removes the ADC's quantisation)
    truth = np.asarray(bridge.measurand(conv.volts(codes) / spec.excitation.voltage_v
                                        + bridge.offset))
    allowed = (design.ideal_error_bound_lsb + 1e-9) * spec.output.resolution
    assert np.max(np.abs(out - truth)) <= allowed
    # and the linear scaling alone would be off by about the bridge nonlinearity
    linear = (ratio / bridge.sensitivity)
    assert np.max(np.abs(linear - strain)) > 20.0


def test_scale_multiplier_precision() -> None:
    for d in DESIGNS:
        rel = abs(d.scale.realised(d.constants.scale_mul) / d.scale.ideal - 1)
        assert rel <= 2.0 ** -30


def test_unit_constants_change_the_output_and_keep_bounds() -> None:
    d = DESIGNS[0]
    unit = UnitConstants(offset=d.nominal.offset + 5000 * 64, scale_mul=int(
        d.nominal.scale_mul * 1.03), lin=d.nominal.lin, tc_zero=1000, tc_span=-2000)
    du = d.with_constants(unit)
    rng = np.random.default_rng(2)
    codes = rng.integers(-2 ** 23, 2 ** 23, 20000)
    temps = _temps(du, codes.size, rng)
    out = run_integer(du, codes, temps).output
    assert np.abs(out - run_reference(du, codes, temps)).max() <= du.error_bound_lsb
    assert not np.array_equal(out, run_integer(d, codes, temps).output)


def test_constants_beyond_the_formats_are_refused() -> None:
    d = DESIGNS[0]
    with pytest.raises(DesignError, match="span multiplier"):
        d.with_constants(UnitConstants(0, d.nominal.scale_mul * 2, (), 0, 0))
    with pytest.raises(DesignError, match="zero offset"):
        d.with_constants(UnitConstants(1 << 31, d.nominal.scale_mul, (), 0, 0))


def test_sixteen_bit_coefficients_at_low_cutoff_are_caught() -> None:
    spec = parse_spec(LOW_CUTOFF.replace("COEFF", "16"), "slow16.toml")
    try:
        design = make_design(spec)
    except DesignError as exc:
        assert "filter.stages[1]" in str(exc)
    else:
        assert any("pole" in w for w in design.warnings)


def test_design_cli_json_and_text(tmp_path: Path) -> None:
    runner = CliRunner()
    for name in ("hive_scale", "fatigue_coupon"):
        result = runner.invoke(main, ["design", str(EXAMPLES / f"{name}.toml"), "--json"])
        assert result.exit_code == 0, result.output
        data = json.loads(result.stdout)
        for key in ("guard_bits", "constants", "nodes", "errors", "error_bound_lsb",
                    "error_rms_lsb", "ideal_error_bound_lsb", "scale", "stages", "response"):
            assert key in data
        assert all(n["headroom_bits"] > 0 for n in data["nodes"])
        text = runner.invoke(main, ["design", str(EXAMPLES / f"{name}.toml")])
        assert text.exit_code == 0
        assert "Headroom" in text.stdout and "total, proven" in text.stdout


def test_design_bad_input_is_one_line_exit_2(tmp_path: Path) -> None:
    spec = tmp_path / "wide.toml"
    text = (EXAMPLES / "fatigue_coupon.toml").read_text()
    spec.write_text(text.replace("transition_hz = 40.0", "transition_hz = 0.5"))
    result = CliRunner().invoke(main, ["design", str(spec)])
    assert result.exit_code == 2
    assert result.stderr.count("\n") == 1
    assert "filter.stages[0]" in result.stderr
    assert "Traceback" not in result.stderr


@pytest.mark.parametrize("design", DESIGNS, ids=IDS)
def test_output_noise_prediction_matches_white_noise_through_the_chain(design: Design) -> None:
    # white noise of variance s^2 through a linear filter h leaves variance s^2 sum h^2
    # (standard linear-systems result); the design's figure uses the cascade's L2 norm
    sigma = 2000.0  # counts, large against the rounding so rounding does not matter
    rng = np.random.default_rng(21)
    codes = np.rint(rng.normal(0.0, sigma, 400000)).astype(np.int64)
    out = run_reference(design, codes)[2000:]
    predicted = design.output_noise_rms_lsb * sigma / design.budget.noise_counts_rms
    # the linearisation slope near zero is 1 to well within the tolerance
    assert float(np.std(out)) == pytest.approx(predicted, rel=0.03)
