"""The stacked forms of a unit's work give exactly what the per-unit calls give.

``Design.check_in_force_many`` (the constants of a stack of units checked at once) is held
to ``Design.check_in_force`` and to the straightforward route ``Design.with_constants``
unit by unit: the same units in force, each refusal the same text.
``static_stack.static_outputs_many`` (the static path of a stack in numpy) is held to
``model.static_integer`` of each unit with its constants and, for a few units, to
``static_integer`` of the unit's own Design. Both over random constants (inside, at and
beyond every limit, and beyond int64) for the example specs and for specs of every
linearisation mode with and without temperature compensation, with codes at the ADC's rails
and temperatures beyond the clamp range. The refusal texts are also checked letter for
letter (the messages as the per-unit check wrote them before it became the stack of one).
"""

from __future__ import annotations

import re
from collections.abc import Callable
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from hosttool.design.model import static_integer
from hosttool.design.resolve import Design, UnitConstants, make_design, offset_limit
from hosttool.design.static_stack import static_outputs_many
from hosttool.errors import DesignError
from hosttool.spec.schema import parse_spec

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
HIVE = (EXAMPLES / "hive_scale.toml").read_text()
COUPON = (EXAMPLES / "fatigue_coupon.toml").read_text()
POLYNOMIAL = '[linearisation]\nmode = "polynomial"\norder = 3\n\n'
TEMPERATURE = re.search(r"\[temperature\].*?(?=\[calibration\])", HIVE, flags=re.S)
assert TEMPERATURE is not None
INT32_MAX = (1 << 31) - 1

VARIANTS = {
    # none + temperature
    "hive_scale": HIVE,
    # bridge_inverse, no temperature
    "fatigue_coupon": COUPON,
    # polynomial + temperature
    "hive_polynomial": HIVE.replace("[calibration]", POLYNOMIAL + "[calibration]"),
    # none, no temperature
    "hive_no_temperature": HIVE.replace(TEMPERATURE.group(0), ""),
    # polynomial, no temperature
    "coupon_polynomial": COUPON.replace('mode = "bridge_inverse"', 'mode = "polynomial"'),
    # bridge_inverse + temperature
    "coupon_temperature": COUPON.replace("[calibration]", TEMPERATURE.group(0)
                                         + "[calibration]"),
    # none + a temperature range and TC formats so wide that a unit's coefficients at the
    # edge of their formats make the temperature product exceed int64
    "hive_wide_temperature": HIVE.replace("resolution = 0.01 ", "resolution = 0.00001 ")
    .replace("max_c = 45.0", "max_c = 1000.0")
    .replace("max_zero_tc_ppm_fs_per_c = 50.0", "max_zero_tc_ppm_fs_per_c = 10000.0")
    .replace("max_span_tc_ppm_per_c = 50.0", "max_span_tc_ppm_per_c = 10000.0"),
}

#: Units per variant; codes per unit (one calibration's readings, as in the batch).
UNITS, READINGS = 400, 13

_designs: dict[str, Design] = {}


def _design(name: str) -> Design:
    if name not in _designs:
        _designs[name] = make_design(parse_spec(VARIANTS[name], f"{name}.toml"))
    return _designs[name]


def _value(rng: np.random.Generator, limit: int) -> int:
    """Mostly inside [-limit, limit], else at or just beyond it, at +-2^31, or beyond int64."""
    r = rng.random()
    if r < 0.7:
        return int(rng.integers(-limit, limit + 1))
    if r < 0.85:
        return int(rng.choice([limit, -limit, limit + 1, -limit - 1, 0]))
    return int(rng.choice([INT32_MAX, 1 << 31, -(1 << 31), 1 << 63, -(1 << 70)]))


def _random_constants(design: Design, rng: np.random.Generator) -> UnitConstants:
    """One unit's constants, now and then refused by one rule or another."""
    count = design.lin_count if rng.random() < 0.95 else int(rng.integers(0, 6))
    lin = tuple(_value(rng, 1 << 30) if rng.random() < 0.8 else int(c)
                for c in (design.nominal.lin + (0,) * count)[:count])
    with_tc = design.temperature is not None or rng.random() < 0.05
    return UnitConstants(
        offset=_value(rng, offset_limit(design.spec.adc.bits, design.guard_bits)),
        scale_mul=_value(rng, design.scale.multiplier_limit), lin=lin,
        tc_zero=_value(rng, INT32_MAX) if with_tc else 0,
        tc_span=_value(rng, INT32_MAX) if with_tc else 0)


def _refusal(check: Callable[[UnitConstants], object], c: UnitConstants) -> str | None:
    """The text of the DesignError ``check(c)`` raises (``Design.check_in_force`` or
    ``Design.with_constants``), None when it accepts ``c``."""
    try:
        check(c)
    except DesignError as exc:
        return str(exc)
    return None


def _codes(design: Design, rng: np.random.Generator, units: int) -> np.ndarray:
    """Random codes with each row holding both rails."""
    codes = rng.integers(design.code_min, design.code_max + 1, size=(units, READINGS))
    codes[:, 0], codes[:, -1] = design.code_min, design.code_max
    codes[: units // 4, 1:4] = design.code_max    # some units at the upper rail throughout
    return codes


@pytest.mark.parametrize("name", list(VARIANTS))
def test_check_in_force_many_is_check_in_force_per_unit(name: str) -> None:
    design = _design(name)
    rng = np.random.default_rng(sum(map(ord, name)))
    constants = [_random_constants(design, rng) for _ in range(UNITS)]
    reasons = design.check_in_force_many(constants)
    assert len(reasons) == UNITS
    kinds = set()
    for c, reason in zip(constants, reasons, strict=True):
        assert reason == _refusal(design.check_in_force, c)
        kinds.add(reason and re.sub(r"[-\d.e+]+", "#", reason))
    # every unit checked the straightforward way too (a Design built per unit)
    for c, reason in zip(constants[:60], reasons[:60], strict=True):
        assert reason == _refusal(design.with_constants, c)
    assert None in kinds and len(kinds) >= 5, kinds
    assert design.check_in_force_many([]) == []


def test_every_refusal_is_reached_and_its_text_unchanged() -> None:
    """The outcomes and texts the per-unit check gave before it became the stack of one
    (written out here, letter for letter): each rule, the first of several, each edge."""
    hive, coupon = _design("hive_scale"), _design("fatigue_coupon")
    wide = _design("hive_wide_temperature")
    n = hive.nominal
    cases = [
        (hive, UnitConstants(1 << 40, n.scale_mul, (), 0, 0),
         "zero offset 17179869184.0 counts lies outside the ADC range"),
        (hive, UnitConstants(-(1 << 29) - 1, n.scale_mul, (), 0, 0),
         "zero offset -8388608.0 counts lies outside the ADC range"),
        (hive, UnitConstants(0, 1408000001, (), 0, 0),
         "span multiplier 1408000001 is beyond the span tolerance the design's format "
         "holds (calibration.span_tolerance_pct)"),
        (hive, UnitConstants(0, -(1 << 80), (), 0, 0),
         f"span multiplier {-(1 << 80)} is beyond the span tolerance the design's format "
         "holds (calibration.span_tolerance_pct)"),
        (hive, UnitConstants(0, n.scale_mul, (1, 2), 0, 0),
         "2 linearisation coefficients given, the design has none"),
        (coupon, UnitConstants(0, coupon.nominal.scale_mul, (1, 2), 0, 0),
         "2 linearisation coefficients given, the design has 4"),
        (coupon, UnitConstants(0, coupon.nominal.scale_mul, (1 << 30,) * 4, 0, 0),
         "linearisation coefficients too large for Q1.30"),
        (coupon, UnitConstants(0, coupon.nominal.scale_mul, (0, 0, 0, 1 << 31), 0, 0),
         "linearisation coefficients too large for Q1.30"),
        (coupon, UnitConstants(0, coupon.nominal.scale_mul, coupon.nominal.lin, 0, 1),
         "temperature coefficients given, the design has no temperature compensation"),
        (hive, UnitConstants(0, n.scale_mul, (), -(1 << 31), 0),
         "a temperature coefficient exceeds its format"),
        (hive, UnitConstants(0, n.scale_mul, (), 0, 1 << 64),
         "a temperature coefficient exceeds its format"),
        (wide, UnitConstants(0, wide.nominal.scale_mul, (), INT32_MAX, -INT32_MAX),
         "temperature.product can reach 1.51e+19, beyond int64: narrow the temperature "
         "range or the coefficient limits"),
        # several rules broken: the first in the order above is named
        (hive, UnitConstants(1 << 40, 1 << 40, (1,), 1 << 40, 0),
         "zero offset 17179869184.0 counts lies outside the ADC range"),
        (coupon, UnitConstants(0, 1 << 40, (1,), 0, 5),
         "span multiplier 1099511627776 is beyond the span tolerance the design's format "
         "holds (calibration.span_tolerance_pct)"),
        (hive, UnitConstants(0, n.scale_mul, (1, 2), 1 << 40, 0),
         "2 linearisation coefficients given, the design has none"),
        (coupon, UnitConstants(0, coupon.nominal.scale_mul, (1 << 32,) * 4, 0, 1),
         "linearisation coefficients too large for Q1.30"),
        (wide, UnitConstants(0, wide.nominal.scale_mul, (), INT32_MAX + 1, INT32_MAX),
         "a temperature coefficient exceeds its format"),
        # at the edges: each limit itself is accepted, one step beyond it refused
        (hive, UnitConstants(1 << 29, 1408000000, (), INT32_MAX, -INT32_MAX), None),
        (hive, UnitConstants(-(1 << 29), -1408000000, (), -INT32_MAX, INT32_MAX), None),
        (coupon, UnitConstants(-(1 << 28), 1288533333, (INT32_MAX, -INT32_MAX, 1, 0), 0, 0),
         None),
        (coupon, UnitConstants(1 << 28, -1288533333, (INT32_MAX, -INT32_MAX, 2, 0), 0, 0),
         "linearisation coefficients too large for Q1.30"),
        (wide, UnitConstants(0, wide.nominal.scale_mul, (), 0, -2015408544), None),
        (wide, UnitConstants(0, wide.nominal.scale_mul, (), 0, -2015408545),
         "temperature.product can reach 9.223e+18, beyond int64: narrow the temperature "
         "range or the coefficient limits"),
    ]
    for design, c, text in cases:
        expected = None if text is None else f"{design.spec.source}: {text}"
        assert _refusal(design.check_in_force, c) == expected
        assert _refusal(design.with_constants, c) == expected
        assert design.check_in_force_many([design.nominal, c, design.nominal]) \
            == [None, expected, None]


@pytest.mark.parametrize("name", list(VARIANTS))
def test_static_outputs_many_is_static_outputs_per_unit(name: str) -> None:
    design = _design(name)
    rng = np.random.default_rng(sum(map(ord, name)) + 1)
    constants = [_random_constants(design, rng) for _ in range(4 * UNITS)]
    reasons = design.check_in_force_many(constants)
    units = [c for c, r in zip(constants, reasons, strict=True) if r is None][:UNITS]
    assert len(units) >= 50
    codes = _codes(design, rng, len(units))
    # temperatures inside and beyond the clamp range (0.01 C)
    temps = rng.integers(-30_000, 30_000, size=codes.shape)
    outputs = static_outputs_many(design, codes, temps, units)
    assert outputs.shape == codes.shape and outputs.dtype == np.int64
    for i, c in enumerate(units):
        assert np.array_equal(outputs[i], static_integer(design, codes[i], temps[i],
                                                         constants=c).output)
    # the straightforward route: the unit's own Design, static_integer's outputs
    for i in range(0, len(units), len(units) // 8):
        own = design.with_constants(units[i])
        assert np.array_equal(outputs[i], static_integer(own, codes[i], temps[i]).output)
    # without temperatures: each unit at the reference temperature, as static_integer
    plain = static_outputs_many(design, codes, None, units)
    for i, c in enumerate(units):
        assert np.array_equal(plain[i],
                              static_integer(design, codes[i], None, constants=c).output)


def test_static_outputs_many_refuses_what_static_integer_refuses() -> None:
    design = _design("hive_scale")
    c = design.nominal
    good = np.full((2, READINGS), design.code_max, dtype=np.int64)
    for code in (design.code_max + 1, design.code_min - 1):
        bad = good.copy()
        bad[1, 5] = code
        with pytest.raises(ValueError, match="24-bit values"):
            static_integer(design, bad[1], None, constants=c)
        with pytest.raises(ValueError, match="24-bit values"):
            static_outputs_many(design, bad, None, [c, c])
    with pytest.raises(ValueError, match="2-D array"):
        static_outputs_many(design, good[0], None, [c])
    with pytest.raises(ValueError, match="pair one to one"):
        static_outputs_many(design, good, good[:, :3], [c, c])
    with pytest.raises(ValueError, match="1 units' constants for 2 rows"):
        static_outputs_many(design, good, None, [c])
    empty = static_outputs_many(design, np.zeros((0, READINGS), dtype=np.int64), None, [])
    assert empty.shape == (0, READINGS)


@pytest.mark.parametrize("name", ["hive_scale", "fatigue_coupon", "hive_polynomial"])
def test_static_outputs_many_saturates_where_static_integer_saturates(name: str) -> None:
    """Constants beyond what the check accepts (an offset past the chain word, a scale at
    the int32 ends; within +-2^31, where a stack keeps them as they are) drive the chain
    word into its clamp; the stack gives the same outputs as the compiled model (and so as
    the firmware) there too."""
    design = _design(name)
    rng = np.random.default_rng(7)
    n = design.nominal
    units = [replace(n, offset=offset, scale_mul=mul)
             for offset in (0, INT32_MAX, -INT32_MAX, 1 << 30)
             for mul in (n.scale_mul, INT32_MAX, -INT32_MAX)]
    codes = _codes(design, rng, len(units))
    temps = rng.integers(-30_000, 30_000, size=codes.shape)
    outputs = static_outputs_many(design, codes, temps, units)
    for i, c in enumerate(units):
        assert np.array_equal(outputs[i], static_integer(design, codes[i], temps[i],
                                                         constants=c).output)
    word = codes * (1 << design.guard_bits) - np.array([c.offset for c in units])[:, None]
    assert np.count_nonzero((word > INT32_MAX) | (word < -INT32_MAX - 1)) > codes.size // 4
