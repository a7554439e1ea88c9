"""hosttool verify: a verdict per example, failing and bad inputs, JSON and the HTML report.

The checks compare the bit-exact model against the float64 reference (scipy.signal.lfilter
inside run_reference, itself compared with an independent scipy call in
test_design_model.py); the bounds come from the design's range analysis.
"""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from hosttool.cli import main
from hosttool.design.resolve import make_design
from hosttool.spec.schema import load_spec, parse_spec
from hosttool.verify.proof import minimum_samples, verify_design

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
SAMPLES = 200_000


@pytest.mark.parametrize("name", ["hive_scale", "fatigue_coupon"])
def test_examples_pass_with_every_error_within_its_bound(name: str) -> None:
    design = make_design(load_spec(EXAMPLES / f"{name}.toml"))
    v = verify_design(design, samples=SAMPLES, seed=3)
    # the coupon's mains notches have constant-input limit cycles (test_limit_cycles.py):
    # they are its only reasons to fail
    cycles = [s.failure for s in v.limit_cycles.sections if s.limit_cycle]
    assert list(v.reasons) == cycles, v.reasons
    assert bool(cycles) == (name == "fatigue_coupon")
    assert v.static.codes == 1 << design.spec.adc.bits
    assert v.static.max_error_lsb <= v.static.bound_lsb
    assert v.static.monotonic
    names = {t.name for t in v.tests}
    for expected in ("step_full_scale", "lsb_steps", "slow_ramp", "sine_sweep", "adc_noise",
                     "mains_50hz", "mains_60hz", "long_run"):
        assert expected in names
    assert any(n.startswith("worst_case_") for n in names)
    for t in v.tests:
        assert t.max_error_lsb <= t.bound_lsb, t.name
        assert sum(t.saturations.values()) == 0
    long = next(t for t in v.tests if t.name == "long_run")
    assert long.samples >= 1_000_000  # the long run never goes below 10^6 samples
    step = next(t for t in v.tests if t.name == "step_full_scale")
    # the integer model settles within the designed time (to 1 LSB plus the proven bound)
    assert step.figures["settling_measured_s"] <= step.figures["settling_designed_s"] + 1e-9


def test_worst_case_patterns_drive_nodes_near_their_bounds() -> None:
    design = make_design(load_spec(EXAMPLES / "fatigue_coupon.toml"))
    v = verify_design(design, samples=SAMPLES)
    bounds = {n.name: n.bound for n in design.nodes}
    for t in v.tests:
        if t.name.startswith("worst_case_"):
            node = t.name.removeprefix("worst_case_")
            # zero offset: the codes reach half the offset-inclusive input bound
            assert 0.45 * bounds[node] <= t.peaks[node] <= bounds[node]


def test_budget_too_tight_fails_with_exit_1(tmp_path: Path) -> None:
    text = (EXAMPLES / "hive_scale.toml").read_text()
    spec = tmp_path / "tight.toml"
    spec.write_text(text.replace("max_error = 0.05", "max_error = 0.001"))
    result = CliRunner().invoke(main, ["verify", str(spec), "--samples", "20000"])
    assert result.exit_code == 1
    assert "FAIL" in result.stdout
    assert re.search(r"more than the budget 0\.001", result.stdout)


def test_json_output_has_documented_keys() -> None:
    result = CliRunner().invoke(main, ["verify", str(EXAMPLES / "fatigue_coupon.toml"),
                                       "--samples", "20000", "--json"])
    assert result.exit_code == 1, result.output  # limit cycles in its notches
    data = json.loads(result.stdout)
    for key in ("passed", "reasons", "engines", "static", "tests", "headroom",
                "error_bound_lsb", "ideal_error_bound_lsb", "budget", "budget_used",
                "limit_cycles"):
        assert key in data
    assert data["passed"] is False
    cycles = data["limit_cycles"]
    assert cycles["passed"] is False and cycles["proven"] is True
    assert [s["name"] for s in cycles["sections"]] == ["stage2.section1", "stage3.section1"]
    for section in cycles["sections"]:
        assert section["method"] == "exhaustive search" and section["limit_cycle"] is True
        assert section["cycles"][0]["period"] in (4, 5)
        assert set(section["started_by_step"]) == {"level_lsb", "period", "amplitude_lsb"}
    test = data["tests"][0]
    for key in ("name", "max_error_lsb", "rms_error_lsb", "max_error", "bound_lsb", "sqnr_db",
                "enob_bits", "saturations", "passed"):
        assert key in test


@pytest.mark.parametrize("args, message", [
    (["--engine", "fortran"], "--engine: 'fortran' is not one of python, c, both"),
    (["--samples", "10"], "--samples: 10 is fewer than"),
    (["--report", "/nonexistent-folder/r.html"], "--report: folder /nonexistent-folder does not "
                                                 "exist"),
])
def test_bad_input_one_line_exit_2(args: list[str], message: str) -> None:
    result = CliRunner().invoke(main, ["verify", str(EXAMPLES / "hive_scale.toml"), *args])
    assert result.exit_code == 2
    assert result.stderr.count("\n") == 1
    assert message in result.stderr
    assert "Traceback" not in result.stderr


def test_minimum_samples_and_seed_reproducibility() -> None:
    design = make_design(load_spec(EXAMPLES / "hive_scale.toml"))
    n = minimum_samples(design)
    a = verify_design(design, samples=n, seed=9)
    b = verify_design(design, samples=n, seed=9)
    assert [t.max_error_lsb for t in a.tests] == [t.max_error_lsb for t in b.tests]


def test_disagreeing_engine_fails_the_verdict() -> None:
    design = make_design(load_spec(EXAMPLES / "fatigue_coupon.toml"))
    from hosttool.design.model import run_integer

    def off_by_one(codes: np.ndarray, temps: np.ndarray | None) -> np.ndarray:
        out = run_integer(design, codes, temps).output.copy()
        out[len(out) // 2] += 1
        return out

    v = verify_design(design, samples=20000, engines={"broken": off_by_one})
    assert not v.passed
    assert any("engines disagree" in r for r in v.reasons)


def test_report_is_self_contained_html(tmp_path: Path) -> None:
    report = tmp_path / "r.html"
    result = CliRunner().invoke(main, ["verify", str(EXAMPLES / "hive_scale.toml"),
                                       "--samples", "20000", "--report", str(report)])
    assert result.exit_code == 0
    text = report.read_text()
    assert text.count("data:image/png;base64,") == 5      # with the end-to-end plot
    assert "no limit cycle, dead band &lt;= 0 LSB" in text
    assert "http://" not in text and "https://" not in text  # nothing fetched from outside
    assert "legal-metrology authority" in text


def test_failing_spec_without_budget_is_still_verified() -> None:
    text = (EXAMPLES / "fatigue_coupon.toml").read_text()
    text = re.sub(r"\[calibration\].*?span_tolerance_pct = 5.0\n", "", text, flags=re.S)
    design = make_design(parse_spec(text, "nobudget.toml"))
    v = verify_design(design, samples=20000)
    assert v.budget_units is None
    assert all("limit cycle" in r for r in v.reasons)  # the notches' cycles only


def _unit_calibration(tmp_path: Path) -> Path:
    """A CAL.json of one invented hive-scale unit, through the real calibrate command."""
    from hosttool.production.synthetic_lot import UnitTruth, lot_csv

    design = make_design(load_spec(EXAMPLES / "hive_scale.toml"))
    truth = UnitTruth("HV-7", zero_mv_per_v=0.04, span_error_pct=3.0,
                      zero_tc_ppm_fs_per_c=12.0, span_tc_ppm_per_c=-20.0)
    readings = tmp_path / "readings.csv"
    readings.write_text(lot_csv(design, [truth], seed=4, start_utc=1_741_075_200))
    cal = tmp_path / "cal.json"
    result = CliRunner().invoke(main, ["calibrate", str(EXAMPLES / "hive_scale.toml"),
                                       str(readings), "--serial", "HV-7", "-o", str(cal)])
    assert result.exit_code == 0, result.output
    return cal


def test_verify_one_units_constants(tmp_path: Path) -> None:
    cal = _unit_calibration(tmp_path)
    result = CliRunner().invoke(main, ["verify", str(EXAMPLES / "hive_scale.toml"),
                                       "--calibration", str(cal), "--samples", "20000",
                                       "--json"])
    assert result.exit_code == 0, result.output
    data = json.loads(result.stdout)
    nominal = make_design(load_spec(EXAMPLES / "hive_scale.toml"))
    # the unit's constants are in force: its bound differs from the nominal design's
    assert data["passed"] and data["error_bound_lsb"] != nominal.error_bound_lsb


def test_calibration_of_another_spec_is_refused(tmp_path: Path) -> None:
    cal = _unit_calibration(tmp_path)
    other = tmp_path / "other.toml"
    # another output step changes what the constants mean (format identity, DEVELOPERS.md)
    other.write_text((EXAMPLES / "hive_scale.toml").read_text().replace(
        "resolution = 0.01", "resolution = 0.005"))
    result = CliRunner().invoke(main, ["verify", str(other), "--calibration", str(cal)])
    assert result.exit_code == 2
    assert result.stderr.count("\n") == 1 and "Traceback" not in result.stderr
    assert str(cal) in result.stderr and "output.resolution 0.01 -> 0.005" in result.stderr



def test_verify_process_ends_at_once_with_its_output_and_status() -> None:
    # python -m hosttool verify ends without the interpreter's teardown (util/quick_exit.py):
    # the JSON on stdout is whole and the exit status is the verdict's (the coupon fails on
    # its limit cycles: exit 1)
    done = subprocess.run([sys.executable, "-m", "hosttool", "verify",
                           str(EXAMPLES / "fatigue_coupon.toml"), "--json", "--samples",
                           "20000"], capture_output=True, text=True, timeout=900)
    assert done.returncode == 1, done.stderr
    data = json.loads(done.stdout)
    assert data["passed"] is False and data["static"]["passed"] is True


def test_quick_exit_writes_buffered_output_and_runs_exit_handlers() -> None:
    code = ("import atexit, sys\n"
            "from hosttool.util.quick_exit import quick_exit\n"
            "atexit.register(lambda: sys.stderr.write('handler ran'))\n"
            "sys.stdout.write('buffered')\n"
            "quick_exit(3)\n")
    env = {k: v for k, v in os.environ.items() if k != "PYTHONUNBUFFERED"}  # buffered
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          env=env, timeout=60)
    assert (done.returncode, done.stdout, done.stderr) == (3, "buffered", "handler ran")
