"""End-to-end accuracy (verify layer 4): the reading against the measurand, judged on the budget.

Outside references:
- the quarter bridge's output Vo/Vex = (dR/R) / (4 + 2 dR/R) with dR/R = GF * strain (standard
  strain-measurement texts, from memory): a reading scaled by the tangent sensitivity GF/4
  shows strain / (1 + GF * strain / 2), so an unlinearised +-50,000 ue gauge with GF 2.1 reads
  -52,770 ue at -50,000 ue;
- rounding to a step q errs by at most q/2 (Widrow's quantisation model);
- numpy.polynomial (a least-squares fit) for the order a linearisation needs, independently
  of hosttool's own fit.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from hosttool.cli import main
from hosttool.design.resolve import Design, make_design
from hosttool.production.synthetic_lot import UnitTruth, lot_csv
from hosttool.spec.schema import parse_spec
from hosttool.verify.endtoend import end_to_end

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
START = 1_741_075_200
GF = 2.1


def _spec_text(name: str, *edits: tuple[str, str]) -> str:
    text = (EXAMPLES / f"{name}.toml").read_text(encoding="utf-8")
    for old, new in edits:
        assert old in text, old
        text = text.replace(old, new, 1)
    return text


#: The issue's case: a quarter bridge over +-50,000 ue, no linearisation, a 10 ue budget.
WIDE = _spec_text("fatigue_coupon", ("strain_range_ue = 5000.0", "strain_range_ue = 50000.0"),
                  ('mode = "bridge_inverse"', 'mode = "none"'),
                  ("max_error = 5.0", "max_error = 10.0"),
                  ("resolution = 0.1 ", "resolution = 1.0 "),
                  ("lead_resistance_ohm = 0.8", "lead_resistance_ohm = 0.0"),
                  ("pga_gain = 128", 'pga_gain = "auto"'))


def _design(text: str) -> Design:
    return make_design(parse_spec(text, "spec.toml"))


def test_unlinearised_wide_quarter_bridge_fails_with_the_handbook_error() -> None:
    e = end_to_end(_design(WIDE))
    strain = -50_000e-6
    handbook = (strain / (1 + GF * strain / 2) - strain) * 1e6     # -2770.4 ue
    assert e.worst_at == -50_000.0
    assert abs(e.worst - abs(handbook)) <= 1.0                      # + one 1 ue output step
    assert abs(e.worst_model - abs(handbook)) <= 0.01
    assert e.worst_arithmetic <= 0.5 + 0.01                         # Widrow: q/2, q = 1 ue
    assert e.passed is False and e.budget == 10.0
    reason = e.reason("ue", "none")
    assert reason is not None
    assert "the bridge is nonlinear by 2770 ue and it is not linearised" in reason
    assert f'linearisation.mode = "bridge_inverse" with order = {e.suggested_order}' in reason


def test_the_suggested_order_is_the_smallest_that_fits() -> None:
    # numpy's least-squares fit of the exact inverse, independently of hosttool: the residual
    # of each order on the tangent reading of the handbook bridge.
    e = end_to_end(_design(WIDE))
    assert e.suggested_order is not None and e.suggested_worst is not None
    strain = np.linspace(-50_000e-6, 50_000e-6, 4001)
    x = GF * strain
    reading = (x / (4 + 2 * x)) * 4 / GF * 1e6
    residual = {n: float(np.max(np.abs(np.polynomial.Polynomial.fit(reading, strain * 1e6, n)(
        reading) - strain * 1e6))) for n in range(1, 6)}
    n = e.suggested_order
    assert residual[n] < 10.0 and (n == 1 or residual[n - 1] > 10.0 - 1.0)
    fixed = WIDE.replace('mode = "none"', 'mode = "bridge_inverse"').replace(
        "\norder = 3", f"\norder = {n}")
    better = end_to_end(_design(fixed))
    assert better.passed and better.worst == pytest.approx(e.suggested_worst)


@pytest.mark.parametrize("name", ["hive_scale", "fatigue_coupon"])
def test_examples_read_within_their_budget(name: str) -> None:
    d = _design((EXAMPLES / f"{name}.toml").read_text())
    e = end_to_end(d)
    assert e.passed
    np.testing.assert_array_equal(e.total, e.model + e.arithmetic)
    # Widrow: the output rounds to its step q, so somewhere the error reaches nearly q/2;
    # the proven arithmetic bound caps it from above
    q = d.output_step
    assert 0.4 * q <= e.worst <= e.worst_model + d.to_units(d.ideal_error_bound_lsb) + 0.5 * q


def test_temperature_sweep_covers_the_compensated_range() -> None:
    d = _design(_spec_text("hive_scale", ("zero_tc_ppm_fs_per_c = 0.0 ",
                                          "zero_tc_ppm_fs_per_c = 20.0 "),
                           ("span_tc_ppm_per_c = 0.0", "span_tc_ppm_per_c = 30.0")))
    e = end_to_end(d)
    assert e.temperatures_c[0] == -20.0 and e.temperatures_c[-1] == 45.0
    assert 20.0 in e.temperatures_c and e.total.shape == (len(e.temperatures_c), 1001)
    # the span compensation multiplies by (1 - b dT) what drifted by (1 + b dT): a residual of
    # b^2 dT^2 of the reading (first-order compensation, from memory): largest at full scale
    # (200 kg) and the coldest end, dT = -40 C
    b, dt = 30e-6, 40.0
    assert float(abs(e.model[0]).max()) == pytest.approx(200.0 * (b * dt) ** 2, rel=0.01)
    assert e.worst_model == pytest.approx(200.0 * (b * dt) ** 2, rel=0.01)


def _cli(*args: str) -> tuple[int, str, str]:
    result = CliRunner().invoke(main, list(args))
    return result.exit_code, result.stdout, result.stderr


def test_verify_judges_the_budget_end_to_end(tmp_path: Path) -> None:
    spec = tmp_path / "wide.toml"
    spec.write_text(WIDE)
    code, out, _ = _cli("verify", str(spec), "--samples", "20000", "--json")
    assert code == 1
    data = json.loads(out)
    e2e = data["end_to_end"]
    assert e2e["max_error"] == pytest.approx(2770.0, abs=1.0) and e2e["at"] == -50000.0
    assert e2e["passed"] is False and data["budget_used"] == pytest.approx(277.0, abs=0.1)
    assert any("not linearised" in r for r in data["reasons"])
    report = tmp_path / "wide.html"
    code, out, _ = _cli("verify", str(spec), "--samples", "20000", "--report", str(report))
    assert code == 1 and "used by the reading against the measurand" in out
    html = report.read_text()
    assert "End to end: reading against the measurand" in html
    assert 'alt="error against measurand"' in html


POLY = _spec_text("hive_scale", ("[calibration]",
                                 '[linearisation]\nmode = "polynomial"\norder = 2\n\n'
                                 "[calibration]"))


@pytest.mark.parametrize("label, text", [
    ("none", (EXAMPLES / "hive_scale.toml").read_text()),
    ("polynomial", POLY),
    ("bridge_inverse", (EXAMPLES / "fatigue_coupon.toml").read_text()),
])
def test_verify_a_passed_unit_of_every_linearisation_mode(label: str, text: str,
                                                          tmp_path: Path) -> None:
    # The issue: a unit that passed calibrate in polynomial mode failed verify --calibration
    # ("against the ideal design 7.2e4 LSB"): its own coefficients were taken as errors.
    spec = tmp_path / "spec.toml"
    spec.write_text(text)
    d = _design(text)
    (tmp_path / "r.csv").write_text(lot_csv(d, [UnitTruth("U-1", zero_mv_per_v=0.02,
                                                          span_error_pct=0.7)],
                                            seed=4, start_utc=START))
    code, out, err = _cli("calibrate", str(spec), str(tmp_path / "r.csv"), "--serial", "U-1",
                          "-o", str(tmp_path / "cal.json"))
    assert code == 0, out + err
    code, out, err = _cli("verify", str(spec), "--calibration", str(tmp_path / "cal.json"),
                          "--samples", "20000", "--json")
    data = json.loads(out)
    # the coupon's mains notches have limit cycles (test_limit_cycles.py): its only reasons
    assert code == (0 if data["limit_cycles"]["passed"] else 1), out + err
    assert all("limit cycle" in r for r in data["reasons"]), data["reasons"]
    assert data["end_to_end"]["passed"]
    assert data["ideal_error_bound_lsb"] < 10 * data["error_bound_lsb"]


def test_a_range_beyond_the_adc_names_the_rail() -> None:
    # the same wide gauge at the coupon's fixed gain 128: +-19.5 mV of input range against
    # about 62 mV at 50,000 ue (2.5 V x 0.105 / 4.2, the handbook bridge): the codes clip
    text = WIDE.replace('pga_gain = "auto"', "pga_gain = 128")
    e = end_to_end(_design(text))
    limit_ue = 2.5 / 128 / 2.5 * 4 / GF * 1e6      # tangent reading at the input range's edge
    assert e.rail_from is not None
    # the exact bridge (handbook form) reaches the range's edge near the tangent's limit; the
    # measurand grid places the first clipped point within one grid step of it
    # compression reaches it first: |r| = |x| / (4 - 2|x|) for x < 0
    x_edge = 4 * (2.5 / 128 / 2.5) / (1 + 2 * (2.5 / 128 / 2.5))
    assert e.rail_from == pytest.approx(x_edge / GF * 1e6, abs=101.0)
    assert e.rail_from < limit_ue
    assert e.worst > 10_000.0 and e.worst_arithmetic > e.worst_model
    reason = e.reason("ue", "none")
    assert reason is not None and "the ADC is at its rail from |measurand|" in reason
