"""The exact ranges behind the specialised firmware steps (hosttool.design.ranges).

Each range must hold every value the bit-exact model meets at that node, with the per-unit
constants at the edges of what the calibration loader accepts and the inputs that drive the
node to its bound (a left-out saturation could otherwise trigger); the offset range must
also be reached, end for end. The values themselves come from the integer arithmetic of the contract
(DEVELOPERS.md), run by the model; the C firmware is held to the model by test_firmware.py.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from hosttool.design.model import run_integer
from hosttool.design.ranges import FirRanges, firmware_ranges
from hosttool.design.resolve import Design, UnitConstants, make_design
from hosttool.spec.schema import load_spec

EXAMPLES = sorted((Path(__file__).resolve().parent.parent / "examples").glob("*.toml"))
DESIGNS = {p.stem: make_design(load_spec(p)) for p in EXAMPLES}
TOP = (1 << 31) - 1


def _edge(d: Design, sign: int) -> UnitConstants:
    lin: tuple[int, ...] = ()
    if d.linearisation is not None:
        n = len(d.nominal.lin)
        lin = tuple(([0] + [1] * (n - 3) if n >= 3 else []) + [-sign * TOP, sign * TOP])[-n:]
    temp = d.temperature is not None
    unit = UnitConstants(offset=-sign * (1 << (d.spec.adc.bits - 1 + d.guard_bits)),
                         scale_mul=sign * d.scale.multiplier_limit, lin=lin,
                         tc_zero=sign * TOP if temp else 0, tc_span=sign * TOP if temp else 0)
    d.check_unit(unit, "test")
    return unit


def _codes(d: Design) -> np.ndarray:
    lo, hi = d.code_min, d.code_max
    worst = d.cascade.worst_case_codes(len(d.cascade.nodes) - 1, hi)
    return np.concatenate([np.full(400, hi), np.full(400, lo), worst, -worst - 1,
                           np.tile([hi, lo], 200)])


@pytest.mark.parametrize("name", sorted(DESIGNS))
@pytest.mark.parametrize("sign", [1, -1])
def test_every_node_stays_in_its_range(name: str, sign: int) -> None:
    d = DESIGNS[name]
    r = firmware_ranges(d)
    codes = _codes(d)
    temps = None
    if d.temperature is not None:
        temps = np.resize(np.array([d.temperature.min_centi - 500,
                                    d.temperature.max_centi + 500]), codes.size)
    run = run_integer(d.with_constants(_edge(d, sign)), codes, temps)
    assert not any(run.saturations.values())
    assert run.peaks["offset"] <= r.offset.mag
    for stage in r.stages:
        assert run.peaks[stage.name] <= stage.y.mag, stage.name
    assert run.peaks["scale"] <= r.scale.mag
    if r.lin is not None:
        assert run.peaks["linearisation"] <= r.lin.mag
    if r.temperature is not None:
        assert run.peaks["temperature"] <= r.temperature.mag


@pytest.mark.parametrize("name", sorted(DESIGNS))
def test_exact_ranges_are_reached(name: str) -> None:
    # A full-scale code held long enough, with the offset at the far end of the range,
    # gives the ends of the offset range exactly, and (every FIR's taps sum to exactly
    # 2^frac) settles on the same value at the FIR output, inside that stage's range.
    d = DESIGNS[name]
    r = firmware_ranges(d)
    for sign, code, end in ((-1, d.code_min, r.offset.lo), (1, d.code_max, r.offset.hi)):
        run = run_integer(d.with_constants(_edge(d, sign)), np.full(2000, code))
        assert run.peaks["offset"] == abs(end)
        for stage in r.stages:
            if isinstance(stage, FirRanges) and stage.x == r.offset:
                # settles on the same value (overshoot of a low-pass may go beyond it)
                assert abs(end) <= run.peaks[stage.name] <= stage.y.mag
