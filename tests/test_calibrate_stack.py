"""Units calibrated side by side give what each gives alone.

``calibrate_units`` (what ``batch`` runs, a chunk of units at a time) works on stacks of
units with numpy over the unit axis; ``calibrate_unit`` is the stack of one. Held here,
field by field and bit for bit, on invented lots of every linearisation mode (with and
without temperature compensation, with an OIML class), with units that fail their limits
and with odd units among them: saturated, unsettled, disagreeing or non-monotonic readings,
a reading missing, a temperature moved. The stacked least squares is held to
``numpy.linalg.lstsq`` itself.
"""

from __future__ import annotations

import random

import numpy as np
import pytest
from test_prepare_exact import FAILING, START, VARIANTS

from hosttool.design.resolve import make_design
from hosttool.formats.readings import RefusedRows, split_readings, unit_cal_time
from hosttool.production import fit
from hosttool.production.batch import prepare_units
from hosttool.production.fit import CalibrationContext, UnitCalibration, calibrate_unit
from hosttool.production.synthetic_lot import lot_csv, random_truth
from hosttool.spec.schema import parse_spec


def _odd(text: str, seed: int) -> str:
    """The lot with some rows edited or dropped at random (the header and comments kept)."""
    rng = random.Random(seed)
    out = []
    for line in text.split("\n"):
        if not line or line.startswith(("#", "serial")):
            out.append(line)
            continue
        c = line.split(",")
        x = rng.random()
        if x < 0.01:
            c[3] = str(float(c[3]) * 1.7 + 20000)          # disagrees / not monotonic
        elif x < 0.02:
            c[4] = str(float(c[4]) * 40)                     # unsettled
        elif x < 0.025:
            c[3] = "-8388600"                                # saturated
        elif x < 0.03:
            c[2] = str(float(c[2]) + 12)                     # another temperature
        elif x < 0.035:
            continue                                         # a reading missing
        out.append(",".join(c))
    return "\n".join(out)


#: Words of each kind of refusal of a unit's readings.
REFUSALS = ("saturated", "not settled", "disagree", "not monotonic", "no reading at",
            "temperature compensation needs", "do not determine", "fitted")


def _fields(result: UnitCalibration | Exception) -> tuple[object, ...]:
    if isinstance(result, Exception):
        return (type(result).__name__, str(result))
    return (result.serial, result.cal_time_utc, result.constants, result.formats_ok,
            result.formats_reason, repr(result.figures), list(result.figures),
            repr(result.criteria), repr(result.rounding),
            None if result.output is None else result.output.tobytes(),
            result.linearity.tobytes())


def _lot(variant: str, units: int) -> tuple[CalibrationContext, list]:
    design = make_design(parse_spec(VARIANTS[variant], f"{variant}.toml"))
    rng = np.random.default_rng(3)
    truths = [random_truth(f"U{i:04d}", rng) for i in range(units)] + FAILING
    text = _odd(lot_csv(design, truths, seed=9, start_utc=START), seed=len(variant))
    split = split_readings(text, design.spec, "lot.csv")
    return CalibrationContext.of(design), split.layout.check(split.units)


@pytest.mark.parametrize("variant", list(VARIANTS))
def test_a_unit_gives_the_same_calibration_in_a_lot_as_alone(variant: str) -> None:
    ctx, checked = _lot(variant, 160)
    units = [u for u in checked if not isinstance(u, RefusedRows)]
    times = [unit_cal_time(u, None) for u in units]
    together = fit.calibrate_units(ctx, units, times)
    kinds = set()
    for unit, time, result in zip(units, times, together, strict=True):
        try:
            alone: UnitCalibration | Exception = calibrate_unit(ctx, unit, cal_time_utc=time)
        except Exception as exc:  # noqa: BLE001 - compared, whatever it is
            alone = exc
        assert _fields(result) == _fields(alone), unit.serial
        if isinstance(result, Exception):
            kinds |= {k for k in REFUSALS if k in str(result)}
        else:
            kinds.add(result.verdict)
    assert {"pass", "fail"} <= kinds and len(kinds) >= 4, kinds
    assert len({u.reference.size for u in units}) >= 2, "no unit with a reading missing"


def test_prepare_units_gives_what_prepare_gives_alone() -> None:
    ctx, checked = _lot("hive_scale", 100)
    together = prepare_units(ctx, checked, None)
    assert [p._asdict() for p in together] == [prepare_units(ctx, [u], None)[0]._asdict()
                                               for u in checked]
    assert any(p.refused for p in together) and any(p.image for p in together)


def test_the_stacked_least_squares_is_numpys_lstsq() -> None:
    """Source: numpy.linalg.lstsq, bit for bit, on well and badly conditioned stacks."""
    rng = np.random.default_rng(5)
    for rows, cols in ((13, 4), (9, 2), (20, 4), (4, 4)):
        x = rng.normal(size=(50, rows, cols)) * rng.uniform(1e-6, 1e6, size=(50, 1, cols))
        x[0, :, -1] = x[0, :, 0] * (1 + 1e-15)              # nearly rank-deficient
        y = rng.normal(size=(50, rows)) * 1e5
        got = fit._lstsq(x, y)
        for i in range(50):
            assert got[i].tobytes() == np.linalg.lstsq(x[i], y[i], rcond=None)[0].tobytes()


def test_one_units_arithmetic_failure_refuses_that_unit_alone(
        monkeypatch: pytest.MonkeyPatch) -> None:
    """A failure of the arithmetic on one unit (here the least squares made to fail on its
    readings) stops that unit, reported as a fault of the tool; its stack's other units
    are calibrated as alone."""
    ctx, checked = _lot("fatigue_coupon", 40)
    units = [u for u in checked if not isinstance(u, RefusedRows)]
    victim = units[7]
    lstsq = fit._lstsq

    def failing(x: np.ndarray, y: np.ndarray) -> np.ndarray:
        if any(np.array_equal(row, victim.raw_mean) for row in y):
            raise np.linalg.LinAlgError("SVD did not converge in Linear Least Squares")
        return lstsq(x, y)

    times = [unit_cal_time(u, None) for u in units]
    expected = [_fields(fit.calibrate_units(ctx, [u], [t])[0])
                for u, t in zip(units, times, strict=True)]
    monkeypatch.setattr(fit, "_lstsq", failing)
    got = fit.calibrate_units(ctx, units, times)
    assert isinstance(got[7], np.linalg.LinAlgError)
    assert [_fields(r) for i, r in enumerate(got) if i != 7] == expected[:7] + expected[8:]
    prepared = prepare_units(ctx, units, None)
    assert prepared[7].refused.endswith(
        f"serial {victim.serial}: the tool failed on this unit (LinAlgError: SVD did not "
        "converge in Linear Least Squares); please report it with the readings")
    assert sum(1 for p in prepared if p.refused) == 1 + sum(
        1 for r in expected if r[0] == "InputError")
