"""Bridge model against the Wheatstone bridge equation written out arm by arm.

Every expected value here is computed from the four arm resistances with the bridge equation
Vo/Vex = R1/(R1+R2) - R4/(R3+R4) (standard strain-measurement texts, from memory), not from
hosttool's closed forms. Arm convention: R1 and R2 form one divider, R3 and R4 the other;
R1 and R3 see the same sign of strain.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from hosttool.physics.bridge import bridge_of, lead_desensitisation, shunt_calibration
from hosttool.spec.schema import WIRING_BY_TOPOLOGY, StrainBridge, Transducer

# --------------------------------------------------------------------------- independent model


def wheatstone(r1: float, r2: float, r3: float, r4: float) -> float:
    """Bridge equation, output over the voltage across the bridge (from memory)."""
    return r1 / (r1 + r2) - r4 / (r3 + r4)


def arms(topology: str, wiring: str, rg: float, rl: float, nu: float, x: float,
         shunt: float | None = None) -> tuple[float, float, float, float]:
    """The four arm resistances with dR/R = x on the active gauge(s), leads included.

    ``shunt`` puts that resistance across the R1 gauge (at the gauge, before its leads).
    """
    g1 = rg * (1 + x)
    if shunt is not None:
        g1 = g1 * shunt / (g1 + shunt)
    if topology == "quarter":
        if wiring == "two_wire":       # both leads in series with the gauge
            return g1 + 2 * rl, rg, rg, rg
        return g1 + rl, rg + rl, rg, rg  # three-wire: one lead each in R1 and R2
    if topology == "half_opposing":    # R2 in compression, adjacent to R1
        return g1 + rl, rg * (1 - x) + rl, rg, rg
    if topology == "half_poisson":     # R2 the transverse (Poisson) gauge
        return g1 + rl, rg * (1 - nu * x) + rl, rg, rg
    if topology == "full_bending":
        return g1, rg * (1 - x), rg * (1 + x), rg * (1 - x)
    if topology == "full_poisson":
        return g1, rg * (1 - nu * x), rg * (1 + x), rg * (1 - nu * x)
    raise AssertionError(topology)


def expected_ratio(topology: str, wiring: str, rg: float, rl: float, nu: float, x: float,
                   shunt: float | None = None) -> float:
    """Vo/Vex at the instrument, leads included."""
    r1, r2, r3, r4 = arms(topology, wiring, rg, rl, nu, x, shunt)
    ratio = wheatstone(r1, r2, r3, r4)
    if topology.startswith("full") and wiring == "four_wire":
        # the excitation current drops 2 RL in the two excitation leads
        bridge = (r1 + r2) * (r3 + r4) / (r1 + r2 + r3 + r4)
        ratio *= bridge / (bridge + 2 * rl)
    return ratio


def gauge(topology: str = "quarter", wiring: str | None = None, *, gf: float = 2.0,
          rg: float = 350.0, rl: float = 0.0, nu: float = 0.3, range_ue: float = 10000.0,
          zero_mv_per_v: float = 0.0) -> StrainBridge:
    return StrainBridge(topology=topology, gauge_factor=gf, gauge_resistance_ohm=rg,
                        poisson_ratio=nu, wiring=wiring or WIRING_BY_TOPOLOGY[topology][-1],
                        lead_resistance_ohm=rl, strain_range_ue=range_ue,
                        zero_balance_mv_per_v=zero_mv_per_v)


ALL_WIRINGS = [(t, w) for t, ws in WIRING_BY_TOPOLOGY.items() for w in ws]


# --------------------------------------------------------------------------- common practice


def test_half_bridge_two_opposing_gauges_4v_gf2_one_percent_gives_40mv():
    # 4 V, GF 2, 1 % strain, two active gauges in opposition: 40 mV
    # (common practice, no published source)
    model = bridge_of(gauge("half_opposing", gf=2.0, range_ue=20000.0))
    assert model.ratio(10000.0) * 4.0 == pytest.approx(40e-3, rel=1e-12)


def test_quarter_bridge_one_percent_gives_20mv_linear_and_19_80mv_exact():
    # the same strain in a quarter bridge: 20 mV linearised, about 19.80 mV exact
    # (common practice, no published source)
    model = bridge_of(gauge("quarter", gf=2.0, range_ue=20000.0))
    assert model.ratio_linear(10000.0) * 4.0 == pytest.approx(20e-3, rel=1e-12)
    exact_mv = model.ratio(10000.0) * 4.0 * 1e3
    assert round(exact_mv, 2) == 19.80
    # and it is the bridge equation's value, 4 V * x / (4 + 2x) with x = 0.02 (from memory)
    assert exact_mv == pytest.approx(4.0 * 0.02 / 4.04 * 1e3, rel=1e-12)


@pytest.mark.parametrize("strain_ue", [10.0, 100.0, 500.0, -500.0])
def test_quarter_bridge_nonlinearity_is_about_half_gf_times_strain(strain_ue):
    # Relative shortfall of the exact quarter-bridge output against the linear one:
    # 1 - (x/(4+2x)) / (x/4) = x/(2+x), about GF*strain/2 for small strain, with an error
    # of order x^2/4 (series of the bridge equation, from memory).
    gf = 2.0
    x = gf * strain_ue * 1e-6
    model = bridge_of(gauge("quarter", gf=gf))
    shortfall = 1 - model.ratio(strain_ue) / model.ratio_linear(strain_ue)
    assert shortfall == pytest.approx(x / 2, abs=x * x / 4 * 1.01)


def test_quarter_nonlinearity_pct_fs_is_the_bridge_equations_worst_end():
    # Over +-range the largest deviation from the tangent is at the compressive end:
    # |x/(4-2|x|) - |x|/4| / (|x|/4) = |x| / (2 - |x|) (bridge equation, from memory).
    gf, range_ue = 2.1, 5000.0
    x = gf * range_ue * 1e-6
    model = bridge_of(gauge("quarter", gf=gf, range_ue=range_ue))
    assert model.nonlinearity_pct_fs() == pytest.approx(100 * x / (2 - x), rel=1e-9)


@pytest.mark.parametrize("topology", ["half_opposing", "full_bending"])
def test_opposing_arrangements_are_exactly_linear(topology):
    model = bridge_of(gauge(topology, gf=2.0, rl=0.0))
    assert model.nonlinearity_pct_fs() < 1e-10


# --------------------------------------------------------------------------- leads


@pytest.mark.parametrize("rg, rl", [(120.0, 0.8), (350.0, 5.0), (1000.0, 20.0)])
def test_three_wire_desensitisation_is_rg_over_rg_plus_rl(rg, rl):
    # three-wire quarter bridge: sensitivity scaled by Rg/(Rg+RL), no zero offset
    # (standard lead-wire correction, from memory)
    s = gauge("quarter", "three_wire", rg=rg, rl=rl)
    assert lead_desensitisation(s) == pytest.approx(rg / (rg + rl), rel=1e-12)
    assert bridge_of(s).zero_ratio == pytest.approx(0.0, abs=1e-18)


@pytest.mark.parametrize("rg, rl", [(120.0, 0.8), (350.0, 5.0)])
def test_two_wire_offset_and_sensitivity(rg, rl):
    # two-wire: 2 RL in the gauge arm against a completion resistor Rg. At zero strain the
    # bridge equation gives (Rg + 2RL)/(2Rg + 2RL) - 1/2 = RL / (2 (Rg + RL)) (from memory).
    s = gauge("quarter", "two_wire", rg=rg, rl=rl)
    model = bridge_of(s)
    assert model.zero_ratio == pytest.approx(rl / (2 * (rg + rl)), rel=1e-12)
    assert model.zero_ratio == pytest.approx(wheatstone(rg + 2 * rl, rg, rg, rg), rel=1e-12)
    # slope at zero: d/dR1 of R1/(R1+R2) = R2/(R1+R2)^2, times dR1 = Rg x
    slope_per_x = rg * rg / (2 * rg + 2 * rl) ** 2
    assert lead_desensitisation(s) == pytest.approx(slope_per_x / 0.25, rel=1e-12)
    # the textbook desensitisation Rg/(Rg + 2RL) agrees to first order in RL/Rg (from memory)
    assert lead_desensitisation(s) == pytest.approx(rg / (rg + 2 * rl), abs=3 * (rl / rg) ** 2)


@pytest.mark.parametrize("topology, wiring", ALL_WIRINGS)
@pytest.mark.parametrize("strain_ue", [-8000.0, -1234.5, 0.0, 250.0, 8000.0])
def test_exact_ratio_matches_the_arm_by_arm_bridge_equation(topology, wiring, strain_ue):
    rg, rl, nu, gf = 350.0, 2.5, 0.29, 2.05
    model = bridge_of(gauge(topology, wiring, gf=gf, rg=rg, rl=rl, nu=nu))
    expected = expected_ratio(topology, wiring, rg, rl, nu, gf * strain_ue * 1e-6)
    assert model.ratio(strain_ue) == pytest.approx(expected, rel=1e-12, abs=1e-18)


def test_six_wire_loses_nothing_and_four_wire_loses_the_excitation_leads():
    rg, rl = 350.0, 3.0
    six = lead_desensitisation(gauge("full_bending", "six_wire", rg=rg, rl=rl))
    four = lead_desensitisation(gauge("full_bending", "four_wire", rg=rg, rl=rl))
    assert six == 1.0
    assert four == pytest.approx(rg / (rg + 2 * rl), rel=1e-12)  # divider Rg : 2 RL


def test_zero_balance_is_added_to_the_output_ratio():
    model = bridge_of(gauge("quarter", zero_mv_per_v=0.05))
    assert model.zero_ratio == pytest.approx(0.05e-3, rel=1e-12)
    assert model.ratio(1000.0) - model.zero_ratio == pytest.approx(
        wheatstone(350.0 * (1 + 2e-3), 350.0, 350.0, 350.0), rel=1e-12)


def test_transducer_is_rated_output_times_load_over_capacity():
    # a rated transducer: Vo/Vex = RO * load / capacity (the datasheet's definition)
    t = Transducer(capacity=200.0, unit="kg", rated_output_mv_per_v=2.0,
                   zero_balance_mv_per_v=0.1, cells_in_parallel=4, cell_resistance_ohm=350.0,
                   bipolar=False, nonlinearity_pct_fs=0.0)
    model = bridge_of(t)
    assert model.ratio(200.0) == pytest.approx(2.1e-3, rel=1e-12)
    assert model.ratio(50.0) == pytest.approx(0.5e-3 + 0.1e-3, rel=1e-12)
    assert (model.m_min, model.m_max) == (0.0, 200.0)
    assert t.bridge_resistance_ohm == pytest.approx(350.0 / 4)


# --------------------------------------------------------------------------- shunt calibration


@pytest.mark.parametrize("wiring", ["two_wire", "three_wire"])
@pytest.mark.parametrize("rg, gf, rs", [(350.0, 2.0, 100e3), (120.0, 2.1, 59880.0),
                                        (1000.0, 2.05, 499e3)])
def test_quarter_shunt_simulates_minus_rg_over_gf_rg_plus_rs(wiring, rg, gf, rs):
    # simulated strain of a shunt Rs across gauge Rg: -Rg / (GF (Rg + Rs))
    # (standard shunt-calibration formula, from memory)
    s = gauge("quarter", wiring, rg=rg, gf=gf, rl=1.5)
    cal = shunt_calibration(s, rs)
    assert cal.arm_change == pytest.approx(-rg / (rg + rs), rel=1e-12)
    assert cal.simulated == pytest.approx(-rg / (gf * (rg + rs)) * 1e6, rel=1e-9)
    # and the output change is what the bridge equation gives with Rs across the gauge
    change = (expected_ratio("quarter", wiring, rg, 1.5, 0.3, 0.0, shunt=rs)
              - expected_ratio("quarter", wiring, rg, 1.5, 0.3, 0.0))
    assert cal.ratio_mv_per_v == pytest.approx(change * 1e3, rel=1e-9)


def test_shunt_value_of_the_textbook_example():
    # 350 ohm, GF 2, 100 kohm shunt: -350 / (2 * 100350) = -1743.9 microstrain
    cal = shunt_calibration(gauge("quarter", rg=350.0, gf=2.0), 100e3)
    assert cal.simulated == pytest.approx(-1743.896, abs=1e-3)


@pytest.mark.parametrize("topology", ["half_opposing", "half_poisson", "full_bending",
                                      "full_poisson"])
def test_shunt_output_change_matches_the_bridge_equation(topology):
    rg, rl, nu, rs = 350.0, 1.0, 0.3, 87.15e3
    wiring = WIRING_BY_TOPOLOGY[topology][0]  # three-wire / four-wire: leads matter
    cal = shunt_calibration(gauge(topology, wiring, rg=rg, rl=rl, nu=nu), rs)
    change = (expected_ratio(topology, wiring, rg, rl, nu, 0.0, shunt=rs)
              - expected_ratio(topology, wiring, rg, rl, nu, 0.0))
    # full bridges: hosttool neglects the bridge-resistance change of one shunted arm in the
    # four-wire lead loss, a second-order effect (about 2 RL/Rb * x/8 relative)
    assert cal.ratio_mv_per_v == pytest.approx(change * 1e3, rel=1e-5)


def test_shunt_reading_of_a_half_bridge_is_the_strain_giving_that_output():
    # opposing half bridge: r = x Rg / (2 (Rg + RL)) exactly, so the reading is
    # 2 r (Rg + RL) / (Rg GF) -- about half the single-arm simulated strain
    rg, rl, gf, rs = 350.0, 1.0, 2.0, 100e3
    cal = shunt_calibration(gauge("half_opposing", rg=rg, rl=rl, gf=gf), rs)
    r = cal.ratio_mv_per_v * 1e-3
    assert cal.simulated == pytest.approx(2 * r * (rg + rl) / (rg * gf) * 1e6, rel=1e-9)
    assert cal.simulated == pytest.approx(-rg / (gf * (rg + rs)) * 1e6 / 2, rel=5e-3)


def test_transducer_shunt_across_one_arm_of_one_cell():
    r_cell, rs = 350.0, 60e3
    t = Transducer(capacity=100.0, unit="kg", rated_output_mv_per_v=2.0,
                   zero_balance_mv_per_v=0.0, cells_in_parallel=1, cell_resistance_ohm=r_cell,
                   bipolar=False, nonlinearity_pct_fs=0.0)
    cal = shunt_calibration(t, rs)
    shunted = r_cell * rs / (r_cell + rs)
    change = wheatstone(shunted, r_cell, r_cell, r_cell)
    assert cal.ratio_mv_per_v == pytest.approx(change * 1e3, rel=1e-12)
    assert cal.simulated == pytest.approx(change / 2e-3 * 100.0, rel=1e-12)
    # four cells through a summing box average their outputs
    # (common practice, no published source)
    four = shunt_calibration(Transducer(**{**t.__dict__, "cells_in_parallel": 4}), rs)
    assert four.ratio_mv_per_v == pytest.approx(change * 1e3 / 4, rel=1e-12)


def test_shunt_must_be_positive():
    with pytest.raises(ValueError):
        shunt_calibration(gauge(), 0.0)


# --------------------------------------------------------------------------- properties


@st.composite
def strain_bridges(draw):
    topology, wiring = draw(st.sampled_from(ALL_WIRINGS))
    return gauge(topology, wiring,
                 gf=draw(st.floats(1.5, 4.0)),
                 rg=draw(st.sampled_from([120.0, 350.0, 1000.0])),
                 rl=draw(st.floats(0.0, 10.0)),
                 nu=draw(st.floats(0.05, 0.49)),
                 range_ue=draw(st.floats(100.0, 50000.0)),
                 zero_mv_per_v=draw(st.floats(-2.0, 2.0)))


@st.composite
def transducers(draw):
    return Transducer(capacity=draw(st.floats(0.1, 1e5)), unit="N",
                      rated_output_mv_per_v=draw(st.floats(0.5, 10.0)),
                      zero_balance_mv_per_v=draw(st.floats(-2.0, 2.0)),
                      cells_in_parallel=draw(st.integers(1, 8)),
                      cell_resistance_ohm=350.0, bipolar=draw(st.booleans()),
                      nonlinearity_pct_fs=0.0)


@settings(max_examples=300, deadline=None)
@given(sensor=st.one_of(strain_bridges(), transducers()), where=st.floats(0.0, 1.0))
def test_inverse_of_forward_is_the_identity(sensor, where):
    # the exact inverse undoes the forward model to 1e-12 of max(|m|, full scale)
    model = bridge_of(sensor)
    m = model.m_min + where * (model.m_max - model.m_min)
    back = model.measurand(model.ratio(m))
    scale = max(abs(m), model.m_max)
    assert abs(back - m) <= 1e-12 * scale
    r = model.ratio(m)
    assert abs(model.ratio(back) - r) <= 1e-12 * max(abs(r), model.peak_ratio())


@settings(max_examples=200, deadline=None)
@given(sensor=strain_bridges(), where=st.floats(0.0, 1.0))
def test_forward_agrees_with_the_bridge_equation_everywhere(sensor, where):
    model = bridge_of(sensor)
    m = model.m_min + where * (model.m_max - model.m_min)
    expected = expected_ratio(sensor.topology, sensor.wiring, sensor.gauge_resistance_ohm,
                              sensor.lead_resistance_ohm, sensor.poisson_ratio,
                              sensor.gauge_factor * m * 1e-6)
    expected += sensor.zero_balance_mv_per_v * 1e-3
    assert model.ratio(m) == pytest.approx(expected, rel=1e-10, abs=1e-15)


@settings(max_examples=100, deadline=None)
@given(sensor=st.one_of(strain_bridges(), transducers()))
def test_forward_is_monotonic_over_the_range(sensor):
    model = bridge_of(sensor)
    r = np.asarray(model.ratio(np.linspace(model.m_min, model.m_max, 501)))
    assert np.all(np.diff(r) > 0)
    # the worst peak: the larger end without the zero balance, plus the zero balance at its
    # worst sign
    zero = sensor.zero_balance_mv_per_v * 1e-3
    worst = max(abs(r[0] - zero), abs(r[-1] - zero)) + abs(zero)
    assert model.peak_ratio() == pytest.approx(worst, rel=1e-12)
