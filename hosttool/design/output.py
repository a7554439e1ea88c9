"""What one output integer of the pipeline means, in exact numbers.

The spec's decimal inputs (``output.resolution``, ``adc.data_rate_sps``, the measuring
range) are read back as the exact decimals written in the spec (the shortest decimal that
gives the same float64, Python's ``repr``), so the fractions below are the same on every
machine and carry no float noise: one output LSB in output units, the output rate in
samples per second, and the measuring range in output LSB.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction

from hosttool.spec.schema import Spec


def exact_decimal(value: float) -> Fraction:
    """The decimal a spec value was written as (shortest round-trip form), exactly."""
    return Fraction(repr(float(value)))


@dataclass(frozen=True)
class OutputMeaning:
    """One output LSB, the output rate and the measuring range, as exact fractions."""

    lsb: Fraction           # output units per LSB
    rate_sps: Fraction      # output samples per second
    range_min: Fraction     # lower end of the measuring range, output LSB
    range_max: Fraction     # upper end, output LSB


def output_meaning(spec: Spec, decimation: int) -> OutputMeaning:
    """The exact meaning of the output of ``spec``'s pipeline with total ``decimation``."""
    lsb = exact_decimal(spec.output.resolution)
    full = exact_decimal(spec.sensor.full_scale)
    low = -full if spec.sensor.bipolar else Fraction(0)
    return OutputMeaning(lsb=lsb, rate_sps=exact_decimal(spec.adc.data_rate_sps) / decimation,
                         range_min=low / lsb, range_max=full / lsb)
