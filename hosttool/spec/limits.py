"""The limits of every number of a spec, in one table: what a value must lie within so that
every later command (design, render, verify, calibrate, batch, image) can work with it.

Each limit is set by the physics the value feeds, or by what the integer formats hold, and
says so in ``why``. The spec reader (``tomlfields.Table``) applies the limit of a field's
path to every number it reads, after refusing anything that is not a finite number; the
readers in schema.py add only relations between fields (a reference within min_c ..
max_c, a cutoff below its stage's Nyquist frequency). docs/spec.md shows the same ranges.

Bounds are inclusive unless ``low_open`` / ``high_open``. Ranges of real instruments are
"common practice, no published source" unless a source is named.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass


@dataclass(frozen=True)
class Limit:
    """An allowed range of one spec number and the reason for its ends."""

    low: float
    high: float
    why: str
    low_open: bool = False
    high_open: bool = False

    def problem(self, value: float) -> str | None:
        """None if ``value`` is allowed, else the message (``must be ... , got ...``)."""
        shown = str(value) if isinstance(value, int) else f"{value:g}"
        if self.low_open and value <= self.low:
            return f"must be greater than {self.low:g}, got {shown} ({self.why})"
        if not self.low_open and value < self.low:
            return f"must be at least {self.low:g}, got {shown} ({self.why})"
        if self.high_open and value >= self.high:
            return f"must be less than {self.high:g}, got {shown} ({self.why})"
        if not self.high_open and value > self.high:
            return f"must be at most {self.high:g}, got {shown} ({self.why})"
        return None


#: Field path (``[]`` for any array index) -> its limit.
LIMITS: dict[str, Limit] = {
    # [sensor]
    "sensor.zero_balance_mv_per_v": Limit(-100.0, 100.0, "a bridge's unloaded output"),
    "sensor.gauge_factor": Limit(0.5, 10.0, "metal foil and wire gauges lie near 2"),
    "sensor.gauge_resistance_ohm": Limit(10.0, 100_000.0, "gauges are made from 60 ohm to "
                                         "10 kohm"),
    "sensor.poisson_ratio": Limit(0.0, 0.5, "an isotropic solid", low_open=True,
                                  high_open=True),
    "sensor.lead_resistance_ohm": Limit(0.0, 1000.0, "each lead"),
    "sensor.strain_range_ue": Limit(1.0, 100_000.0, "foil gauges break beyond 10 % strain"),
    "sensor.capacity": Limit(1e-6, 1e9, "in the output unit; total of all cells"),
    "sensor.rated_output_mv_per_v": Limit(0.01, 1000.0, "at capacity"),
    "sensor.cells_in_parallel": Limit(1, 64, "outputs averaged by a summing box"),
    "sensor.cell_resistance_ohm": Limit(10.0, 100_000.0, "one cell's bridge"),
    "sensor.nonlinearity_pct_fs": Limit(0.0, 100.0, "percent of full scale"),
    # [excitation]
    "excitation.voltage_v": Limit(0.1, 30.0, "bridge excitation supplies"),
    "excitation.reference_v": Limit(0.001, 30.0, "ADC references"),
    # [adc]
    "adc.bits": Limit(16, 24, "delta-sigma converters the firmware's int32 words hold"),
    "adc.reference_max_v": Limit(0.001, 30.0, "ADC references"),
    "adc.data_rate_sps": Limit(0.01, 1e6, "delta-sigma output data rates"),
    "adc.noise_uv_rms": Limit(1e-4, 1e5, "input-referred noise"),
    "adc.sinc_order": Limit(1, 5, "the k of the sinc^k decimation filter"),
    "adc.modulator_rate_hz": Limit(0.01, 1e9, "modulator clocks"),
    "adc.overload_margin_pct": Limit(0.0, 100.0, "headroom over the peak input"),
    # [output]
    "output.resolution": Limit(1e-12, 1e9, "one output step, in the output unit"),
    "output.bandwidth_hz": Limit(0.0, 5e5, "at most half the data rate", low_open=True),
    # [filter]
    "filter.coefficient_bits": Limit(16, 32, "16 or 32"),
    "filter.stages[].length": Limit(1, 1024, "taps of a moving average"),
    "filter.stages[].cutoff_hz": Limit(0.0, 5e5, "below the stage's Nyquist frequency",
                                       low_open=True),
    "filter.stages[].transition_hz": Limit(0.0, 1e6, "below the stage's rate",
                                           low_open=True),
    "filter.stages[].decimation": Limit(1, 256, "integer decimation of a FIR stage"),
    "filter.stages[].attenuation_db": Limit(10.0, 150.0, "stopband attenuation a 32-bit "
                                            "FIR holds"),
    "filter.stages[].frequency_hz": Limit(0.0, 5e5, "below the stage's Nyquist frequency",
                                          low_open=True),
    "filter.stages[].quality": Limit(0.1, 1000.0, "of a notch"),
    "filter.stages[].order": Limit(2, 6, "2, 4 or 6"),
    # [linearisation]
    "linearisation.order": Limit(1, 5, "polynomial degree the block's 6 slots hold"),
    # [temperature]
    "temperature.min_c": Limit(-273.15, 1000.0, "absolute zero .. the plausible range"),
    "temperature.max_c": Limit(-273.15, 1000.0, "absolute zero .. the plausible range"),
    "temperature.reference_c": Limit(-273.15, 1000.0, "inside min_c .. max_c"),
    "temperature.zero_tc_ppm_fs_per_c": Limit(-10_000.0, 10_000.0, "ppm of full scale per C"),
    "temperature.span_tc_ppm_per_c": Limit(-10_000.0, 10_000.0, "ppm per C"),
    "temperature.max_zero_tc_ppm_fs_per_c": Limit(0.1, 10_000.0, "sets the format of the "
                                                  "zero coefficient; finer than 0.1 ppm/C is "
                                                  "below any bridge's drift"),
    "temperature.max_span_tc_ppm_per_c": Limit(0.1, 10_000.0, "sets the format of the span "
                                               "coefficient; finer than 0.1 ppm/C is below "
                                               "any bridge's drift"),
    # [calibration]
    "calibration.max_error": Limit(0.0, 1e9, "in the output unit", low_open=True),
    "calibration.max_error_pct_span": Limit(0.0, 100.0, "percent of the span",
                                            low_open=True),
    "calibration.max_zero_offset_mv_per_v": Limit(0.0, 100.0, "a bridge's unloaded output"),
    "calibration.span_tolerance_pct": Limit(0.01, 100.0, "sets the span multiplier's "
                                            "format"),
    "calibration.max_noise_ratio": Limit(1.0, 1000.0, "over the ADC's own noise"),
    "calibration.max_hysteresis": Limit(0.0, 1e9, "in the output unit"),
    "calibration.max_repeatability": Limit(0.0, 1e9, "in the output unit"),
    # [target]
    "target.calblock_address": Limit(0, 0xFFFF_FFFF, "a 32-bit address"),
    "target.calblock_size": Limit(64, 4096, "a flash page holding the block"),
}

_INDEX = re.compile(r"\[\d+\]")


def limit_of(field_path: str) -> Limit | None:
    """The limit of a field (``filter.stages[2].cutoff_hz`` finds ``filter.stages[].cutoff_hz``)."""
    return LIMITS.get(_INDEX.sub("[]", field_path))


def check_limit(field_path: str, value: float) -> str | None:
    """None if ``value`` is finite and inside the field's limit, else the problem."""
    if not math.isfinite(value):
        return f"must be finite, got {value}"
    limit = limit_of(field_path)
    return None if limit is None else limit.problem(value)
