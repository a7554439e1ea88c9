"""Limit cycles and dead bands of the biquad sections (hosttool.verify.limit_cycles).

Outside references:
- a section built by hand whose period-4 limit cycle is worked out below, sample by sample,
  from the arithmetic contract (DEVELOPERS.md);
- a brute-force walk of every single state (u1, u2, e) of small sections, with the section
  written out again here from the contract, finding every periodic orbit by following each
  state (the unrestricted exhaustive search of Premaratne et al., IEEE Trans. Signal
  Process. 44 (1996), from memory), against the interval search;
- the section written out from the contract, run on the step input reported for each
  cycle found in the example's notches (the model and the C firmware are proven equal to
  the contract in test_design_model.py and test_firmware.py).
"""

from __future__ import annotations

import itertools
from pathlib import Path

import numpy as np
import pytest

from hosttool.design.filters import Biquad
from hosttool.design.fixedpoint import QFormat
from hosttool.design.resolve import make_design
from hosttool.spec.schema import load_spec
from hosttool.verify import limit_cycles
from hosttool.verify.limit_cycles import analyse_design, analyse_section, search

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"


def section(a1: int, a2: int, q: int) -> Biquad:
    """A section with unit DC gain: all of b in b0 = 2^q + a1 + a2."""
    b0 = (1 << q) + a1 + a2
    one = float(1 << q)
    return Biquad(b=(b0 / one, 0.0, 0.0), a=(1.0, a1 / one, a2 / one), b_int=(b0, 0, 0),
                  a_int=(a1, a2), fmt=QFormat(32, q))


def run_contract(sec: Biquad, x: list[int], state: tuple[int, int, int, int, int]
                 ) -> list[int]:
    """The section of the arithmetic contract, written out again in plain integers.

    state = (x1, x2, y1, y2, e)."""
    b0, b1, b2 = sec.b_int
    a1, a2 = sec.a_int
    q = sec.fmt.frac
    x1, x2, y1, y2, e = state
    out = []
    for v in x:
        acc = b0 * v + b1 * x1 + b2 * x2 - a1 * y1 - a2 * y2 + e
        y = (acc + (1 << (q - 1))) >> q
        e = acc - y * (1 << q)
        x1, x2, y1, y2 = v, x1, y, y1
        out.append(y)
    return out


# --------------------------------------------------------------------------- by hand

# Poles at +-j sqrt(243/256) (radius 0.974), q = 8, a1 = 0, a2 = 243, b0 = 256 + 243 = 499.
# Zero input from the state y1 = 0, y2 = -1, e = 13:
#   n0: acc = -243 * (-1) + 13 = 256  -> y = (256 + 128) >> 8 = 1,   e = 256 - 256 = 0
#   n1: acc = -243 * 0 + 0 = 0        -> y = 0,                       e = 0
#   n2: acc = -243 * 1 + 0 = -243     -> y = (-243 + 128) >> 8 = -1,  e = -243 + 256 = 13
#   n3: acc = -243 * 0 + 13 = 13      -> y = (13 + 128) >> 8 = 0,     e = 13
#   n4: acc = -243 * (-1) + 13 = 256  -> the state of n0 again: period 4, amplitude 1.
HAND = section(0, 243, 8)


def test_hand_built_section_oscillates_as_worked_out() -> None:
    assert run_contract(HAND, [0] * 12, (0, 0, 0, -1, 13)) == [1, 0, -1, 0] * 3
    # with a constant input c the deviation is the same cycle (exact DC gain)
    c = 1000
    assert run_contract(HAND, [c] * 8, (c, c, c, c - 1, 13)) == [c + 1, c, c - 1, c] * 2


def test_search_finds_the_hand_built_cycle() -> None:
    result = analyse_section("hand", HAND)
    assert result.proven and result.limit_cycle and result.method == "exhaustive search"
    periods = {(c.period, c.amplitude) for c in result.cycles}
    assert (4, 1) in periods
    rotations = {c.outputs[i:] + c.outputs[:i] for c in result.cycles
                 for i in range(c.period)}
    assert (1, 0, -1, 0) in rotations
    # every cycle reported is reproduced by the contract's section from its start state
    for cycle in result.cycles:
        u1, u2, e = cycle.start
        got = run_contract(HAND, [0] * (2 * cycle.period), (0, 0, u1, u2, e))
        assert got == list(cycle.outputs) * 2
    assert "LIMIT CYCLE: period" in result.statement


def test_reported_step_from_reset_really_ends_in_a_cycle() -> None:
    result = analyse_section("hand", HAND)
    start = result.started_by
    assert start is not None
    y = run_contract(HAND, [start.level] * 4000, (0, 0, 0, 0, 0))
    tail = np.array(y[-4 * start.period:]) - start.level
    assert np.ptp(tail) > 0
    assert np.array_equal(tail[start.period:], tail[:-start.period])
    assert np.max(np.abs(tail)) == start.amplitude


# --------------------------------------------------------------------------- brute force


def brute_force_cycles(a1: int, a2: int, q: int, box: int) -> set[tuple[int, ...]]:
    """Every periodic orbit with some u != 0 among all (u1, u2, e) in the box, as the set
    of its output sequences in every rotation (state by state, no intervals)."""
    half = 1 << (q - 1)
    found: set[tuple[int, ...]] = set()
    for u1, u2, e in itertools.product(range(-box, box + 1), range(-box, box + 1),
                                       range(-half, half)):
        seen: dict[tuple[int, int, int], int] = {}
        state = (u1, u2, e)
        outputs: list[int] = []
        while state not in seen:
            seen[state] = len(outputs)
            p, r, err = state
            w = -a1 * p - a2 * r + err
            u = (w + half) >> q
            outputs.append(u)
            state = (u, p, w - u * (1 << q))
        cycle = tuple(outputs[seen[state]:])
        if any(cycle) and max(abs(v) for v in cycle) <= box:
            found.add(cycle)
    return found


@pytest.mark.parametrize("a1, a2", [
    (0, 58),       # +-j 0.95 radius at q = 6: cycles
    (-45, 40),     # complex pair, radius 0.79
    (-70, 44),     # low-pass-like pair near z = 1
    (20, 30),      # pair in the left half-plane
    (-100, 47),    # radius 0.86, near z = 1
    (-16, 0),      # one real pole at 0.25
])
def test_interval_search_equals_brute_force(a1: int, a2: int) -> None:
    q = 6
    sec = section(a1, a2, q)
    result = analyse_section("s", sec)
    assert result.proven
    expected = brute_force_cycles(a1, a2, q, result.box)
    got = {c.outputs[i:] + c.outputs[:i] for c in result.cycles for i in range(c.period)}
    expected_rotations = {c[i:] + c[:i] for c in expected for i in range(len(c))}
    assert got == expected_rotations
    # no state outside u1 = u2 = 0 survives without a cycle through it
    assert result.limit_cycle == bool(expected)
    # dead band: no constant output other than the exact one (u* A(1) = 0)
    assert result.dead_band_lsb == 0
    assert not any(len(c) == 1 for c in expected)


def test_a_small_pole_radius_is_proven_free() -> None:
    result = analyse_section("s", section(-16, 0, 6))
    assert result.statement == "no limit cycle, dead band <= 0 LSB"


def test_search_too_large_is_not_proven(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(limit_cycles, "MAX_INTERVALS", 3)
    result = analyse_section("s", HAND)
    assert not result.proven and not result.limit_cycle
    assert result.statement.startswith("not proven: the search of the ")
    assert "state region grew past 3 intervals" in result.statement


def test_search_returns_the_union_of_periodic_orbits() -> None:
    # every state left is on a periodic orbit: following it comes back to it
    states, rounds, reason = search(0, 243, 8, 2)
    assert states is not None and rounds > 0 and reason == ""
    for (u1, u2), intervals in states.items():
        for lo, hi in intervals:
            for e in {lo, hi, (lo + hi) // 2}:
                state = (u1, u2, e)
                for _ in range(64):
                    u, e2 = limit_cycles.step(0, 243, 8, *state)
                    state = (u, state[0], e2)
                    if state == (u1, u2, e):
                        break
                assert state == (u1, u2, e)


def test_section_l1_equals_the_scipy_response() -> None:
    # scipy.signal.lfilter through impulse.biquad: the same proven L1 bound
    from hosttool.design import impulse

    for b, a in [((1.0, -1.0, 0.0), (1.0, 0.0, 243 / 256)),
                 ((0.2, 0.1, 0.3), (1.0, -1.56, 0.64)),
                 ((1.0, -1.0, 0.0), (1.0, -1.9, 0.9025))]:
        assert limit_cycles.section_l1(b, a) == pytest.approx(impulse.biquad(b, a).l1,
                                                               rel=1e-12)


# --------------------------------------------------------------------------- examples


def test_hive_scale_is_proven_free_of_limit_cycles() -> None:
    report = analyse_design(make_design(load_spec(EXAMPLES / "hive_scale.toml")))
    assert report.passed and report.proven
    assert report.statement == "no limit cycle, dead band <= 0 LSB"
    (sec,) = report.sections
    assert sec.method == "exhaustive search" and sec.box >= 1
    assert sec.region == f"3^2 output pairs x 2^{sec.frac} error words"


def test_fatigue_coupon_notches_cycle_in_the_bit_exact_model() -> None:
    design = make_design(load_spec(EXAMPLES / "fatigue_coupon.toml"))
    report = analyse_design(design)
    assert not report.passed
    for sec in report.sections:
        assert sec.limit_cycle and sec.started_by is not None
        assert 0 < sec.amplitude_output_lsb < 0.01
    # each notch alone, written out from the contract: a step to the reported level at its
    # input (the FIR stage passes a constant exactly) keeps oscillating for good
    notches = [stage.sections[0] for stage in design.stages[1:]]
    for sec, notch in zip(report.sections, notches, strict=True):
        start = sec.started_by
        assert start is not None
        y = run_contract(notch, [start.level] * 20000, (0, 0, 0, 0, 0))
        tail = np.array(y[-200:]) - start.level
        assert np.max(np.abs(tail)) == start.amplitude > 0
        assert np.array_equal(tail[start.period:], tail[:-start.period])
