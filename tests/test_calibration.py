"""Per-unit calibration: recovery of invented units, checks against numpy.polyfit, OIML R 76-1,
refusals of bad readings with one clear line, CAL.json round trip.

Every synthetic reading comes from hosttool.production.synthetic_lot (the spec's own
bridge and ADC model with a known zero, span, bow, hysteresis, temperature coefficients
and noise); the numbers are invented.
"""

from __future__ import annotations

import json
import math
import re
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from hosttool.cli import main
from hosttool.design.model import run_integer, static_integer
from hosttool.design.resolve import LIN_FRAC, make_design
from hosttool.errors import InputError
from hosttool.formats.caljson import load_calibration
from hosttool.formats.readings import parse_readings
from hosttool.physics.oiml import mpe_intervals
from hosttool.production.fit import CalibrationContext, calibrate_unit
from hosttool.production.synthetic_lot import Plan, UnitTruth, lot_csv
from hosttool.spec.schema import parse_spec

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
HIVE_TEXT = (EXAMPLES / "hive_scale.toml").read_text()
START = 1_741_075_200          # 2025-03-04T08:00:00Z, the invented lot's first reading
TRUTH = UnitTruth("SN0001", zero_mv_per_v=0.05, span_error_pct=2.0, zero_tc_ppm_fs_per_c=10.0,
                  span_tc_ppm_per_c=-15.0)


def _without_temperature(text: str) -> str:
    return re.sub(r"\[temperature\].*?(?=\[calibration\])", "", text, flags=re.S)


def _design(text: str, name: str = "variant.toml"):
    return make_design(parse_spec(text, name))


HIVE = _design(HIVE_TEXT, "hive_scale.toml")


def _calibrate(design, truth: UnitTruth, *, seed: int = 1, plan: Plan | None = None):
    text = lot_csv(design, [truth], seed=seed, start_utc=START, plan=plan)
    unit = parse_readings(text, design.spec, "r.csv").units[truth.serial]
    return calibrate_unit(CalibrationContext.of(design), unit, cal_time_utc=START), unit


def _cli(*args: str) -> tuple[int, str, str]:
    result = CliRunner().invoke(main, list(args))
    return result.exit_code, result.stdout, result.stderr


def _write_lot(tmp_path: Path, design, truths: list[UnitTruth], name: str = "r.csv") -> Path:
    path = tmp_path / name
    path.write_text(lot_csv(design, truths, seed=7, start_utc=START))
    return path


# ----------------------------------------------------------------------------- recovery


def test_invented_unit_is_recovered_and_passes() -> None:
    """Source: the invented truth the readings were simulated from."""
    result, _ = _calibrate(HIVE, TRUTH)
    f = result.figures
    assert f["zero_mv_per_v"] == pytest.approx(0.05, abs=2e-4)
    assert f["span_deviation_pct"] == pytest.approx(2.0, abs=0.01)
    assert f["zero_tc_ppm_fs_per_c"] == pytest.approx(10.0, abs=0.5)
    assert f["span_tc_ppm_per_c"] == pytest.approx(-15.0, abs=0.5)
    assert result.passed, result.reasons
    assert f["max_error"] <= HIVE.spec.calibration.max_error


def test_nominal_constants_would_not_do() -> None:
    """Source: the invented unit (0.05 mV/V zero, +2 % span): with the design's nominal
    constants the firmware would read it tens of kg off, so the fit is doing the work."""
    _, unit = _calibrate(HIVE, TRUTH)
    out = static_integer(HIVE, np.rint(unit.raw_mean).astype(np.int64)).output * 0.01
    assert np.max(np.abs(out - unit.reference)) > 4.0


def test_straight_line_agrees_with_numpy_polyfit() -> None:
    """Source: numpy.polyfit (degree 1) on the same readings, no temperature terms."""
    design = _design(_without_temperature(HIVE_TEXT))
    result, unit = _calibrate(design, UnitTruth("SN7", zero_mv_per_v=-0.03, span_error_pct=-1.5,
                                                hysteresis_pct_fs=0.004))
    slope, intercept = np.polyfit(unit.reference, unit.raw_mean, 1)
    assert result.figures["span_counts_per_unit"] == pytest.approx(slope, rel=1e-10)
    assert result.figures["zero_counts"] == pytest.approx(intercept, rel=1e-9, abs=1e-6)
    assert result.constants.offset == round(intercept * 2 ** design.guard_bits)


def test_temperature_coefficients_agree_with_polyfit_per_temperature() -> None:
    """Source: numpy.polyfit, in two stages: a line per temperature, then each line's zero
    and span against temperature (noise-free readings, so both must agree closely)."""
    result, unit = _calibrate(HIVE, UnitTruth("SN9", zero_tc_ppm_fs_per_c=-20.0,
                                              span_tc_ppm_per_c=25.0, noise_factor=0.0))
    groups = np.round(unit.temperature_c / 10.0)     # 20, -10 and 42.5 C
    zeros, spans, temps = [], [], []
    for g in np.unique(groups):
        sel = groups == g
        slope, intercept = np.polyfit(unit.reference[sel], unit.raw_mean[sel], 1)
        zeros.append(intercept)
        spans.append(slope)
        temps.append(unit.temperature_c[sel].mean())
    z_slope, _ = np.polyfit(temps, zeros, 1)
    s_slope, s_at_ref = np.polyfit(np.array(temps) - 20.0, spans, 1)
    full_scale = HIVE.spec.sensor.full_scale
    assert result.figures["zero_tc_ppm_fs_per_c"] == pytest.approx(
        z_slope / s_at_ref / full_scale * 1e6, abs=0.2)
    assert result.figures["span_tc_ppm_per_c"] == pytest.approx(s_slope / s_at_ref * 1e6,
                                                                abs=0.2)
    assert result.figures["zero_tc_ppm_fs_per_c"] == pytest.approx(-20.0, abs=0.2)


def test_polynomial_mode_fits_the_unit_and_matches_polyfit() -> None:
    """Source: numpy.polyfit (degree 3) of the target output against the design's normalised
    variable w = s / 2^K (design.LinPolynomial), computed here from the constants."""
    text = _without_temperature(HIVE_TEXT) + '\n[linearisation]\nmode = "polynomial"\norder = 3\n'
    design = _design(text)
    truth = UnitTruth("SN3", span_error_pct=1.0, bow_pct_fs=0.05)
    result, unit = _calibrate(design, truth)
    c = result.constants
    assert len(c.lin) == 4
    lin = design.linearisation
    w = ((unit.raw_mean * 2.0 ** design.guard_bits - c.offset)
         * design.scale.realised(c.scale_mul) / 2.0 ** lin.norm_shift)
    target = unit.reference / design.spec.output.resolution / 2.0 ** lin.norm_shift
    expected = np.polyfit(w, target, 3)[::-1]
    assert np.allclose(np.array(c.lin) / 2.0 ** LIN_FRAC, expected, rtol=0, atol=2e-9)
    # the bow (0.1 kg at mid-range) would fail the 0.05 kg limit; corrected it passes
    assert result.figures["nonlinearity"] > 0.05
    assert result.figures["max_error"] <= 0.02
    assert result.passed, result.reasons


def test_bridge_inverse_keeps_the_nominal_polynomial() -> None:
    """Source: the design's own nominal coefficients (bridge_inverse is not refitted)."""
    design = _design((EXAMPLES / "fatigue_coupon.toml").read_text(), "fatigue_coupon.toml")
    result, _ = _calibrate(design, UnitTruth("Q1", zero_mv_per_v=0.02, span_error_pct=-2.0))
    assert result.constants.lin == design.nominal.lin
    assert result.passed, result.reasons
    assert result.figures["span_deviation_pct"] == pytest.approx(-2.0, abs=0.01)


def test_verdict_is_what_the_filtered_firmware_settles_to() -> None:
    """Source: the full per-sample integer pipeline (model.run_integer: offset, filters,
    scale, compensation) fed each reading as a constant record until settled; the
    calibration's outputs come from the static path and must equal it."""
    result, unit = _calibrate(HIVE, TRUTH)
    unit_design = HIVE.with_constants(result.constants)
    for point, code, temp in zip(result.points, np.rint(unit.raw_mean),
                                 np.rint(unit.temperature_c * 100), strict=True):
        codes = np.full(400, int(code), dtype=np.int64)
        settled = run_integer(unit_design, codes, np.full(400, int(temp))).output[-1]
        assert settled * HIVE.spec.output.resolution == pytest.approx(point.output, abs=1e-9)


def test_constants_are_rounded_to_nearest() -> None:
    """Source: the definition of rounding to nearest (|integer - exact| <= 1/2)."""
    result, _ = _calibrate(HIVE, TRUTH)
    assert {r.constant for r in result.rounding} == {"offset", "scale_mul", "tc_zero",
                                                     "tc_span"}
    for r in result.rounding:
        assert abs(r.integer - r.exact) <= 0.5
        assert r.adds < 0.01 * HIVE.spec.output.resolution


# ----------------------------------------------------------------------------- OIML


def test_oiml_class_iii_mpe_bands() -> None:
    """Source: OIML R 76-1, class III: 0.5 e up to 500 e, 1 e up to 2000 e, 1.5 e up to
    10000 e (from memory)."""
    assert [mpe_intervals("III", n) for n in (0, 500, 501, 2000, 2001, 10000)] == \
        [0.5, 0.5, 1.0, 1.0, 1.5, 1.5]
    with pytest.raises(ValueError):
        mpe_intervals("III", 10001)


def test_oiml_criterion_uses_the_mpe_of_each_load() -> None:
    """Source: OIML R 76-1 class III bands (from memory), transcribed here independently."""
    text = HIVE_TEXT.replace("resolution = 0.01 ", "resolution = 0.02 ").replace(
        "max_error = 0.05", 'oiml_class = "III"')
    design = _design(text)
    result, _ = _calibrate(design, UnitTruth("SN5", hysteresis_pct_fs=0.004))

    def mpe(load_e: float) -> float:
        return 0.5 if load_e <= 500 else 1.0 if load_e <= 2000 else 1.5

    e = 0.02
    ratio = max(abs(p.error) / (mpe(abs(p.reference) / e) * e) for p in result.points)
    row = next(c for c in result.criteria if c.key == "oiml_mpe_ratio")
    assert row.value == pytest.approx(ratio)
    assert row.passed == (ratio <= 1.0)


def test_oiml_class_beyond_its_intervals_is_refused() -> None:
    """Source: OIML R 76-1, class III allows at most 10000 e (from memory)."""
    design = _design(HIVE_TEXT.replace("max_error = 0.05", 'oiml_class = "III"'))
    with pytest.raises(InputError, match="class III covers at most 10000 e; the range is 20000"):
        CalibrationContext.of(design)


# ----------------------------------------------------------------------------- CLI


def test_calibrate_cli_pass_writes_cal_json_with_cautions(tmp_path: Path) -> None:
    """Source: the issue's CAL.json contents and the cautions the tool must show."""
    readings = _write_lot(tmp_path, HIVE, [TRUTH])
    code, out, err = _cli("calibrate", str(EXAMPLES / "hive_scale.toml"), str(readings),
                          "--serial", "SN0001", "-o", str(tmp_path / "cal.json"))
    assert code == 0, err
    assert "verdict: PASS" in out and "legal-metrology authority" in out
    assert "local codes" in out
    data = json.loads((tmp_path / "cal.json").read_text())
    assert data["format_version"] == 1 and data["serial"] == "SN0001"
    assert data["spec"]["sha256"] == HIVE.spec.sha256
    assert data["cal_time_utc"] == "2025-03-04T08:04:00Z"      # the latest reading's time
    assert data["verdict"] == "pass" and len(data["cautions"]) == 2
    constants = load_calibration(tmp_path / "cal.json", HIVE)
    assert constants.offset == data["constants"]["offset"]
    first = (tmp_path / "cal.json").read_bytes()
    _cli("calibrate", str(EXAMPLES / "hive_scale.toml"), str(readings), "--serial", "SN0001",
         "-o", str(tmp_path / "cal.json"))
    assert (tmp_path / "cal.json").read_bytes() == first   # same readings, same bytes


def test_failing_unit_exits_1_and_gets_no_image(tmp_path: Path) -> None:
    """Source: the issue (a unit failing its limits: exit 1 with the table; no image)."""
    readings = _write_lot(tmp_path, HIVE, [UnitTruth("BAD1", hysteresis_pct_fs=0.05)])
    spec = str(EXAMPLES / "hive_scale.toml")
    code, out, _ = _cli("calibrate", spec, str(readings), "--serial", "BAD1", "-o",
                        str(tmp_path / "bad.json"))
    assert code == 1
    assert "FAIL  calibration.max_hysteresis" in out and "verdict: FAIL" in out
    code, out, err = _cli("image", spec, str(tmp_path / "bad.json"), "-o",
                          str(tmp_path / "bad.hex"))
    assert code == 2 and not (tmp_path / "bad.hex").exists()
    assert err.strip().endswith("failed its limits; its constants must not go into a unit")
    assert len(err.strip().splitlines()) == 1


def test_calibration_for_another_spec_is_refused(tmp_path: Path) -> None:
    """Source: the format identity stored in CAL.json (SHA-256 of its items, hashlib)."""
    readings = _write_lot(tmp_path, HIVE, [TRUTH])
    _cli("calibrate", str(EXAMPLES / "hive_scale.toml"), str(readings), "--serial", "SN0001",
         "-o", str(tmp_path / "cal.json"))
    other = _design((EXAMPLES / "fatigue_coupon.toml").read_text(), "fatigue_coupon.toml")
    with pytest.raises(InputError, match=r"identity: made for spec 'hive_scale', another design "
                       r"\(chain\.guard_bits 6 -> 5; "):
        load_calibration(tmp_path / "cal.json", other)
    code, _, err = _cli("image", str(EXAMPLES / "fatigue_coupon.toml"),
                        str(tmp_path / "cal.json"), "-o", str(tmp_path / "x.hex"))
    assert code == 2 and "made for spec 'hive_scale'" in err and "Traceback" not in err


def _lines(path: Path) -> list[str]:
    return path.read_text().splitlines()


def _edit(path: Path, line: int, column: str, value: str) -> None:
    """Set one cell (1-based file line, column by header name)."""
    lines = _lines(path)
    header = lines[1].split(",")
    cells = lines[line - 1].split(",")
    cells[header.index(column)] = value
    lines[line - 1] = ",".join(cells)
    path.write_text("\n".join(lines) + "\n")


REFUSALS = [
    # (edit, expected message, description)
    (lambda p: _edit(p, 5, "raw_mean_counts", "8388607"),
     "r.csv:5: raw_mean_counts: 8388607.0 counts", "saturated at the 24-bit limit"),
    (lambda p: _edit(p, 6, "raw_std_counts", "abc"),
     "r.csv:6: raw_std_counts: 'abc' is not a number", "not a number"),
    (lambda p: _edit(p, 4, "raw_std_counts", "400"),
     "r.csv:4: raw_std_counts: 400 counts is", "far above the ADC noise"),
    (lambda p: _edit(p, 7, "raw_mean_counts", "1000000"),
     "r.csv:7: raw_mean_counts: the response at 200 is not beyond the one at 150",
     "non-monotonic"),
    (lambda p: _edit(p, 10, "raw_mean_counts", str(float(_lines(p)[9].split(",")[3]) + 1e5)),
     "r.csv:10: raw_mean_counts:", "duplicate points that disagree"),
    (lambda p: p.write_text("\n".join(ln for ln in _lines(p) if ",150," not in ln) + "\n"),
     "no reading at the reference 150 kg that calibration.points asks for", "too few points"),
    (lambda p: p.write_text("\n".join(ln for ln in _lines(p) if ",42." not in ln and ",-9."
                                      not in ln and ",-10." not in ln) + "\n"),
     "temperature compensation needs readings at two or more temperatures", "one temperature"),
    (lambda p: _edit(p, 8, "direction", "sideways"), "r.csv:8: direction: 'sideways'",
     "bad direction"),
    (lambda p: _edit(p, 3, "temperature_c", "70"),
     "r.csv:3: temperature_c: 70 C lies outside the compensated range", "temperature range"),
    (lambda p: p.write_text(p.read_text().replace("reference_kg", "reference_lb")),
     "reference_lb: the spec's output unit is 'kg'; expected the column reference_kg",
     "wrong unit"),
]


@pytest.mark.parametrize("edit,message,what", REFUSALS, ids=[r[2] for r in REFUSALS])
def test_bad_readings_are_refused_with_one_line(tmp_path: Path, edit, message: str,
                                                what: str) -> None:
    """Source: the issue's list of refusals (exit status 2, one line naming file, line and
    field, no traceback, nothing written)."""
    readings = _write_lot(tmp_path, HIVE, [TRUTH])
    edit(readings)
    code, _, err = _cli("calibrate", str(EXAMPLES / "hive_scale.toml"), str(readings),
                        "--serial", "SN0001", "-o", str(tmp_path / "cal.json"))
    assert code == 2, what
    assert message in err
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert not (tmp_path / "cal.json").exists()


def test_missing_serial_and_missing_time_are_refused(tmp_path: Path) -> None:
    """Source: the issue (a missing serial is refused); our rule that the calibration time
    comes from the readings or --cal-time, never the clock."""
    readings = _write_lot(tmp_path, HIVE, [TRUTH])
    spec = str(EXAMPLES / "hive_scale.toml")
    code, _, err = _cli("calibrate", spec, str(readings), "--serial", "SN0404", "-o",
                        str(tmp_path / "c.json"))
    assert code == 2 and "serial: no readings for 'SN0404'" in err
    no_time = tmp_path / "nt.csv"
    no_time.write_text("\n".join(ln.rsplit(",", 1)[0] for ln in _lines(readings)) + "\n")
    code, _, err = _cli("calibrate", spec, str(no_time), "--serial", "SN0001", "-o",
                        str(tmp_path / "c.json"))
    assert code == 2 and "time_utc: no such column and no --cal-time" in err
    code, _, err = _cli("calibrate", spec, str(no_time), "--serial", "SN0001", "-o",
                        str(tmp_path / "c.json"), "--cal-time", "2025-05-01T10:00:00Z")
    assert code == 0, err
    assert json.loads((tmp_path / "c.json").read_text())["cal_time_utc"] == \
        "2025-05-01T10:00:00Z"


def test_noisy_unit_fails_its_noise_limit_without_refusal() -> None:
    """Source: calibration.max_noise_ratio against the budget's ADC noise (4 by default)."""
    result, _ = _calibrate(HIVE, UnitTruth("N1", noise_factor=6.0))
    row = next(c for c in result.criteria if c.key == "noise_ratio")
    assert row.value == pytest.approx(6.0, rel=0.1) and not row.passed
    assert not result.passed


def test_a_cell_per_column_is_checked_at_its_line() -> None:
    """Source: the readings format (README): every bad cell is reported at its own line,
    whichever check (bulk or row by row) finds it."""
    text = lot_csv(HIVE, [TRUTH], seed=1, start_utc=START)
    bad = {"serial": "S N", "reference_kg": "nan", "samples": "3.5",
           "time_utc": "2025-03-04 08:00:00", "raw_mean_counts": "-9000000"}
    for column, value in bad.items():
        lines = text.splitlines()
        header = lines[1].split(",")
        cells = lines[8].split(",")
        cells[header.index(column)] = value
        lines[8] = ",".join(cells)
        with pytest.raises(InputError, match=rf"^r\.csv:9: {column}: "):
            parse_readings("\n".join(lines), HIVE.spec, "r.csv")
    assert math.isfinite(parse_readings(text, HIVE.spec, "r.csv").units["SN0001"]
                         .raw_mean.sum())
