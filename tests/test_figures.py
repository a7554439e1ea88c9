"""Figures that used to mislead: each now says what it measures.

Outside references: an ideal N-bit converter's RMS rounding noise is q / sqrt(12) (Widrow's
quantisation model), so its effective number of bits is N (ENOB as IEEE Std 1241 defines it,
from memory); SQNR needs a signal (its definition: signal power over noise power); the sign of
a temperature coefficient is the direction of the drift (common practice, no published
source).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest
from click.testing import CliRunner

from hosttool.cli import main
from hosttool.design.budget import compute_budget
from hosttool.design.resolve import make_design
from hosttool.production.synthetic_lot import UnitTruth, lot_csv
from hosttool.spec.schema import parse_spec

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
HIVE = (EXAMPLES / "hive_scale.toml").read_text(encoding="utf-8")
#: The issue's converter: 16 bits, an output step of 5 g.
SIXTEEN = HIVE.replace("bits = 24", "bits = 16").replace("resolution = 0.01", "resolution = 0.005")


def _cli(*args: str) -> tuple[int, str, str]:
    result = CliRunner().invoke(main, list(args))
    return result.exit_code, result.stdout, result.stderr


def test_a_16_bit_converter_shows_at_most_16_effective_bits() -> None:
    b = compute_budget(parse_spec(SIXTEEN, "sixteen.toml"))
    assert b.noise_counts_rms < 0.1                  # the input noise is far below one code
    assert b.effective_bits <= 16.0
    expected = 16 - math.log2(math.sqrt(12) * math.hypot(b.noise_counts_rms, 1 / math.sqrt(12)))
    assert b.effective_bits == pytest.approx(expected, rel=1e-12)
    # noise-free: 6.6 x the RMS (common practice, no published source), rounding included
    assert b.noise_free_bits == pytest.approx(
        16 - math.log2(6.6 * math.hypot(b.noise_counts_rms, 1 / math.sqrt(12))), rel=1e-12)
    assert b.noise_free_bits < 16.0


def test_an_output_step_finer_than_one_code_is_warned() -> None:
    b = compute_budget(parse_spec(SIXTEEN, "sixteen.toml"))
    code_kg = 1 / b.counts_per_unit
    # one code: 25.78 mV / 2^15 at gain 128 over 10 uV/V per kg x 3.3 V (adc.py's convention)
    assert code_kg == pytest.approx(3.3 / 128 / 2 ** 15 / (10e-6 * 3.3), rel=1e-9)
    assert any(w.startswith(f"output.resolution 0.005 kg is finer than one ADC code "
                            f"({code_kg:.4g} kg)") for w in b.warnings)
    assert not any("finer than one ADC code" in w
                   for w in compute_budget(parse_spec(HIVE, "hive.toml")).warnings)


def test_the_sensor_datasheet_nonlinearity_is_shown() -> None:
    text = HIVE.replace("nonlinearity_pct_fs = 0.02", "nonlinearity_pct_fs = 0.05")
    b = compute_budget(parse_spec(text, "hive.toml"))
    assert b.sensor_nonlinearity_pct_fs == 0.05 and b.nonlinearity_pct_fs == 0.0


def test_check_prints_the_datasheet_nonlinearity(tmp_path: Path) -> None:
    spec = tmp_path / "hive.toml"
    spec.write_text(HIVE.replace("nonlinearity_pct_fs = 0.02", "nonlinearity_pct_fs = 0.05"))
    code, out, _ = _cli("check", str(spec))
    assert code == 0
    assert any(line.split()[:4] == ["sensor", "nonlinearity", "0.05", "%"]
               for line in out.splitlines())


def test_sqnr_only_where_a_signal_is_defined(tmp_path: Path) -> None:
    code, out, _ = _cli("verify", str(EXAMPLES / "hive_scale.toml"), "--samples", "20000",
                        "--json")
    assert code == 0
    tests = {t["name"]: t for t in json.loads(out)["tests"]}
    for name in ("adc_noise", "mains_50hz", "mains_60hz", "temperature_ramp"):
        assert tests[name]["sqnr_db"] is None and tests[name]["enob_bits"] is None, name
    for name in ("sine_sweep", "slow_ramp", "long_run"):
        assert tests[name]["sqnr_db"] is not None and tests[name]["sqnr_db"] > 20, name


def test_the_calibrate_table_keeps_the_sign_of_the_temperature_coefficients(
        tmp_path: Path) -> None:
    d = make_design(parse_spec(HIVE, "hive.toml"))
    (tmp_path / "r.csv").write_text(lot_csv(d, [UnitTruth(
        "T-1", zero_mv_per_v=0.02, span_error_pct=0.4, zero_tc_ppm_fs_per_c=-3.0,
        span_tc_ppm_per_c=-9.0)], seed=6, start_utc=1_741_075_200))
    code, out, err = _cli("calibrate", str(EXAMPLES / "hive_scale.toml"),
                          str(tmp_path / "r.csv"), "--serial", "T-1", "-o",
                          str(tmp_path / "cal.json"))
    assert code == 0, out + err
    data = json.loads((tmp_path / "cal.json").read_text())
    criteria = {c["key"]: c for c in data["criteria"]}
    assert criteria["span_tc"]["value"] == pytest.approx(-9.0, abs=1.5)
    assert criteria["zero_tc"]["value"] == pytest.approx(-3.0, abs=1.5)
    assert criteria["span_tc"]["pass"] and criteria["zero_tc"]["pass"]
    assert data["figures"]["span_tc_ppm_per_c"] == criteria["span_tc"]["value"]
