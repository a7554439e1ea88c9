"""Wheatstone bridge model: output ratio Vo/Vex from the measurand, and its exact inverse.

For every supported arrangement the exact output ratio, lead resistances included, is a
linear-fractional (Moebius) function of the measurand m (microstrain for a strain bridge,
output units for a rated transducer):

    r(m) = (alpha * m + beta) / (gamma * m + delta) + zero_balance

so the inverse is exact and closed-form. The arm formulas follow the standard bridge equation
Vo/Vex = R1/(R1+R2) - R4/(R3+R4) with the active arm(s) changed by dR/R = GF * strain
(standard strain-measurement texts, from memory):

- quarter, one active arm:      r = x / (4 + 2x)
- half, two opposing gauges:    r = x / 2            (exactly linear)
- half, axial + Poisson gauge:  r = x (1+nu) / (4 + 2x (1-nu))
- full, four active (bending):  r = x                (exactly linear)
- full Poisson:                 r = x (1+nu) / (2 + x (1-nu))

with x = GF * strain. Leads: a two-wire quarter bridge has both leads (2 RL) in the gauge
arm (offset RL / (2 (Rg + RL)) and sensitivity (Rg / (Rg + RL))^2, to first order the
textbook Rg / (Rg + 2 RL)); three-wire puts one lead in
the gauge arm and one in the adjacent arm (no offset, sensitivity Rg / (Rg + RL)); a half
bridge is wired with three wires the same way; a four-wire full bridge loses 2 RL in the
excitation leads; a six-wire (remote sense) full bridge loses nothing.

The methods take a number or an array: a Python number is worked in plain floats (``check``
imports no numpy), anything else as a float64 array, with the same operations in the same
order, so a value has the same bits either way.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any

from hosttool.physics.grid import even_points
from hosttool.spec.schema import Sensor, StrainBridge, Transducer

if TYPE_CHECKING:
    import numpy as np
    from numpy.typing import ArrayLike, NDArray

MICRO = 1e-6


def _elementwise(formula: Callable[[Any], Any], x: ArrayLike) -> NDArray[np.float64] | float:
    """``formula`` (arithmetic only) of a number as a float, of anything else as a float64
    array (a float for a 0-d result)."""
    if isinstance(x, int | float):
        return float(formula(float(x)))
    import numpy as np  # deferred on purpose: check works on numbers and needs no numpy

    out = formula(np.asarray(x, dtype=np.float64))
    return float(out) if out.ndim == 0 else out


@dataclass(frozen=True)
class Bridge:
    """r(m) = (alpha m + beta) / (gamma m + delta) + offset, r as a ratio (V/V).

    ``m_min`` and ``m_max`` bound the measuring range in output units.
    """

    alpha: float
    beta: float
    gamma: float
    delta: float
    offset: float
    m_min: float
    m_max: float
    unit: str

    def _ratio(self, m: Any) -> Any:
        return (self.alpha * m + self.beta) / (self.gamma * m + self.delta) + self.offset

    def ratio(self, m: ArrayLike) -> NDArray[np.float64] | float:
        """Exact output ratio Vo/Vex (V/V) at measurand m (output units)."""
        return _elementwise(self._ratio, m)

    def measurand(self, r: ArrayLike) -> NDArray[np.float64] | float:
        """Exact inverse: measurand (output units) from the output ratio r (V/V)."""
        def inverse(r: Any) -> Any:
            r = r - self.offset
            return (self.beta - self.delta * r) / (self.gamma * r - self.alpha)
        return _elementwise(inverse, r)

    @property
    def zero_ratio(self) -> float:
        """Output ratio at zero measurand (V/V): lead offset plus zero balance."""
        return self.beta / self.delta + self.offset

    @property
    def sensitivity(self) -> float:
        """Slope dr/dm at zero measurand (V/V per output unit)."""
        return (self.alpha * self.delta - self.beta * self.gamma) / self.delta ** 2

    def tangent_reading(self, m: ArrayLike) -> NDArray[np.float64] | float:
        """What a linear reading of the exact bridge shows for measurand ``m``: the output
        ratio's change from zero divided by the tangent sensitivity at zero (output units).
        Equal to ``m`` for a linear bridge; the linearisation maps it back to ``m``."""
        return _elementwise(lambda m: (self._ratio(m) - self.zero_ratio) / self.sensitivity, m)

    def _ratio_linear(self, m: Any) -> Any:
        return self.zero_ratio + self.sensitivity * m

    def ratio_linear(self, m: ArrayLike) -> NDArray[np.float64] | float:
        """Linearised output ratio: the tangent at zero, r(0) + r'(0) m (V/V)."""
        return _elementwise(self._ratio_linear, m)

    def nonlinearity_pct_fs(self, points: int = 2001) -> float:
        """Largest |exact - linearised| over the range, in % of the full-scale output change."""
        deviation = max(abs(self._ratio(m) - self._ratio_linear(m))
                        for m in even_points(self.m_min, self.m_max, points))
        full_scale = max(abs(self.m_min), abs(self.m_max)) * abs(self.sensitivity)
        return float(100.0 * deviation / full_scale)

    def peak_ratio(self) -> float:
        """Largest |r| over the range (V/V), with the zero balance at its worst sign."""
        ends = [float(self.ratio(m)) - self.offset for m in (self.m_min, self.m_max)]
        return max(abs(e) for e in ends) + abs(self.offset)


def _strain_coefficients(s: StrainBridge) -> tuple[float, float, float, float]:
    """(alpha, beta, gamma, delta) in terms of x = GF * strain, leads included."""
    rg, rl, nu = s.gauge_resistance_ohm, s.lead_resistance_ohm, s.poisson_ratio
    if s.topology == "quarter":
        if s.wiring == "two_wire":
            return rg, 2 * rl, 2 * rg, 4 * (rg + rl)
        return rg, 0.0, 2 * rg, 4 * (rg + rl)
    if s.topology == "half_opposing":
        return rg, 0.0, 0.0, 2 * (rg + rl)
    if s.topology == "half_poisson":
        return rg * (1 + nu), 0.0, 2 * rg * (1 - nu), 4 * (rg + rl)
    sensed = 0.0 if s.wiring == "six_wire" else rl
    if s.topology == "full_bending":
        return rg, 0.0, 0.0, rg + 2 * sensed
    return rg * (1 + nu), 0.0, rg * (1 - nu), 2 * rg + 4 * sensed


def bridge_of(sensor: Sensor) -> Bridge:
    """The exact bridge model of a validated sensor."""
    offset = sensor.zero_balance_mv_per_v * 1e-3
    if isinstance(sensor, StrainBridge):
        alpha, beta, gamma, delta = _strain_coefficients(sensor)
        k = sensor.gauge_factor * MICRO  # x per microstrain
        return Bridge(alpha * k, beta, gamma * k, delta, offset,
                      -sensor.strain_range_ue, sensor.strain_range_ue, "ue")
    assert isinstance(sensor, Transducer)
    slope = sensor.rated_output_mv_per_v * 1e-3 / sensor.capacity
    low = -sensor.capacity if sensor.bipolar else 0.0
    return Bridge(slope, 0.0, 0.0, 1.0, offset, low, sensor.capacity, sensor.unit)


def lead_desensitisation(sensor: Sensor) -> float:
    """Sensitivity with leads over sensitivity without (1.0 when leads cost nothing)."""
    if not isinstance(sensor, StrainBridge) or sensor.lead_resistance_ohm == 0:
        return 1.0
    ideal = bridge_of(replace(sensor, lead_resistance_ohm=0.0))
    return bridge_of(sensor).sensitivity / ideal.sensitivity


@dataclass(frozen=True)
class ShuntCalibration:
    """What a shunt resistor across one arm simulates."""

    shunt_ohm: float
    arm_change: float          # dR/R of the shunted arm, -Rg / (Rg + Rs)
    ratio_mv_per_v: float      # bridge output change, mV/V
    simulated: float           # the reading it should produce, output units


def shunt_calibration(sensor: Sensor, shunt_ohm: float) -> ShuntCalibration:
    """Shunt ``shunt_ohm`` across one (gauge) arm at the sensor: the simulated reading.

    For a gauge the single-arm change dR/R = -Rg / (Rg + Rs) simulates the strain
    -Rg / (GF (Rg + Rs)) in that arm (standard shunt-calibration formula, from memory); the
    reading follows from the bridge's exact inverse. For a rated transducer the shunt is
    across one arm of one cell; cells in parallel average their outputs.
    """
    if shunt_ohm <= 0:
        raise ValueError("shunt resistance must be positive")
    if isinstance(sensor, StrainBridge):
        rg, rl = sensor.gauge_resistance_ohm, sensor.lead_resistance_ohm
        x = -rg / (rg + shunt_ohm)
        if sensor.topology == "quarter":
            alpha, beta, gamma, delta = _strain_coefficients(sensor)
            r = (alpha * x + beta) / (gamma * x + delta) - beta / delta
        elif sensor.topology.startswith("half"):
            r = rg * x / (2 * rg * x + 4 * (rg + rl))
        else:  # one arm of a full bridge; the bridge resistance change is second order
            sensed = 0.0 if sensor.wiring == "six_wire" else rl
            r = x / (4 + 2 * x) * rg / (rg + 2 * sensed)
        model = bridge_of(sensor)
        reading = float(model.measurand(r + model.zero_ratio))
        return ShuntCalibration(shunt_ohm, x, r * 1e3, reading)
    assert isinstance(sensor, Transducer)
    arm_r = sensor.cell_resistance_ohm
    x = -arm_r / (arm_r + shunt_ohm)
    r = x / (4 + 2 * x) / sensor.cells_in_parallel
    model = bridge_of(sensor)
    reading = float(model.measurand(r + model.zero_ratio))
    return ShuntCalibration(shunt_ohm, x, r * 1e3, reading)
