"""The sensor/ADC budget: full-scale output, PGA choice, range use, noise-free resolution, mains.

``compute_budget`` turns a validated spec into plain numbers (``Budget``); ``Budget.to_json``
gives the stable JSON object of ``hosttool check --json`` (keys documented in the README).
Plain float arithmetic throughout: ``check`` imports no numpy.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

from hosttool.errors import DesignError
from hosttool.physics.adc import (
    PEAK_TO_PEAK_OVER_RMS,
    Converter,
    adc_sinc_magnitude,
    adc_sinc_peak,
    alias_hz,
    best_gain,
    rejection_db,
)
from hosttool.physics.bridge import bridge_of, lead_desensitisation
from hosttool.physics.grid import even_points
from hosttool.spec.schema import Sensor, Spec, StrainBridge

MAINS_HZ = (50.0, 60.0)
#: Mains frequency may wander +-1 % (EN 50160 limit for 99.5 % of a year on
#: interconnected systems; from memory). The worst rejection is searched over that band.
MAINS_TOLERANCE = 0.01
#: Below this much sinc rejection, mains landing in the signal band is worth a warning.
MAINS_WARN_REJECTION_DB = 60.0
RANGE_USED_LOW_PCT = 25.0
RANGE_USED_HIGH_PCT = 95.0
#: RMS of the rounding to one code, in codes: q / sqrt(12) (Widrow's quantisation model).
QUANTISATION_RMS_COUNTS = 1.0 / math.sqrt(12.0)


@dataclass(frozen=True)
class MainsLine:
    """How one mains frequency fares through the ADC."""

    frequency_hz: float
    rejection_db: float           # sinc^k at the nominal frequency (300 = exact notch)
    worst_rejection_db: float     # least sinc^k rejection within +-1 % of nominal
    alias_hz: float               # where nominal mains lands after sampling at the data rate
    alias_band_hz: tuple[float, float]  # where the +-1 % band lands
    in_band: bool                 # some of that band lands inside the signal band


@dataclass(frozen=True)
class Budget:
    """Every figure of the sensor/ADC budget; units are in the field names."""

    spec_name: str
    spec_sha256: str
    unit: str
    range_min: float
    range_max: float
    resolution: float
    bridge_resistance_ohm: float
    excitation_v: float
    reference_v: float
    excitation_current_ma: float
    excitation_power_mw: float
    full_scale_mv_per_v: float
    full_scale_output_mv: float
    zero_offset_mv_per_v: float
    sensitivity_uv_per_v_per_unit: float
    nonlinearity_pct_fs: float          # the bridge equation's, % of the tangent's full scale
    sensor_nonlinearity_pct_fs: float | None   # the transducer's datasheet figure
    lead_desensitisation: float
    pga_gain: int
    pga_auto: bool
    input_range_mv: float
    lsb_nv: float
    peak_input_mv: float
    range_used_pct: float
    counts_per_unit: float
    counts_per_lsb: float
    full_scale_counts: float            # codes from zero to the farther end of the range
    span_counts: float                  # codes from one end of the range to the other
    noise_counts_rms: float             # the ADC's input noise alone, counts RMS
    total_noise_counts_rms: float       # with the rounding to a code (q / sqrt 12)
    effective_bits: float
    noise_free_bits: float
    noise_free_counts: float
    noise_free_resolution: float
    noise_free_divisions: float
    requested_divisions: float
    signal_band_hz: float
    mains: tuple[MainsLine, ...]
    warnings: tuple[str, ...]

    def converter(self, bits: int) -> Converter:
        """The ADC at the chosen gain."""
        return Converter(bits=bits, gain=self.pga_gain, reference_v=self.reference_v)


def signal_band(spec: Spec) -> float:
    """Signal band edge, Hz: output.bandwidth_hz, else the lowest filter corner, else Nyquist."""
    if spec.output.bandwidth_hz is not None:
        return spec.output.bandwidth_hz
    corners = [s.cutoff_hz for s in spec.filter.stages if s.cutoff_hz is not None]
    return min(corners) if corners else spec.adc.data_rate_sps / 2


def _mains(spec: Spec, band_hz: float) -> tuple[MainsLine, ...]:
    fd = spec.adc.data_rate_sps
    lines = []
    for f in MAINS_HZ:
        sweep = even_points(f * (1 - MAINS_TOLERANCE), f * (1 + MAINS_TOLERANCE), 2001)
        aliases = [alias_hz(x, fd) for x in sweep]
        lines.append(MainsLine(
            frequency_hz=f,
            rejection_db=rejection_db(adc_sinc_magnitude(spec.adc, f)),
            worst_rejection_db=rejection_db(adc_sinc_peak(spec.adc, sweep)),
            alias_hz=alias_hz(f, fd),
            alias_band_hz=(min(aliases), max(aliases)),
            in_band=any(a <= band_hz for a in aliases),
        ))
    return tuple(lines)


def compute_budget(spec: Spec) -> Budget:
    """The full budget of a validated spec; raises DesignError if no PGA gain can fit."""
    sensor, adc, exc = spec.sensor, spec.adc, spec.excitation
    bridge = bridge_of(sensor)
    low, high = bridge.m_min, bridge.m_max
    peak_v = bridge.peak_ratio() * exc.voltage_v
    if adc.pga_gain is None:
        gain = best_gain(adc, peak_v, exc.reference_v)
        if gain is None:
            raise DesignError(
                f"{spec.source}: adc.pga_gains: the peak input {peak_v * 1e3:.4g} mV plus "
                f"{adc.overload_margin_pct:g} % margin exceeds the range even at gain "
                f"{min(adc.pga_gains)} (+-{exc.reference_v / min(adc.pga_gains) * 1e3:.4g} mV)")
    else:
        gain = adc.pga_gain
    conv = Converter(bits=adc.bits, gain=gain, reference_v=exc.reference_v)
    counts_per_unit = abs(bridge.sensitivity) * exc.voltage_v / conv.lsb_v
    noise_counts = conv.noise_counts_rms(adc.noise_uv_rms)
    # the converter's own rounding is noise too: an ideal N-bit converter shows N bits
    total_noise = math.hypot(noise_counts, QUANTISATION_RMS_COUNTS)
    noise_free_counts = PEAK_TO_PEAK_OVER_RMS * total_noise
    full_range_counts = float(1 << adc.bits)
    # codes the ADC reads at the range's ends (exact bridge), not slope x range
    counts_per_ratio = exc.voltage_v / conv.lsb_v
    end_counts = [abs(float(bridge.ratio(m)) - bridge.zero_ratio) * counts_per_ratio
                  for m in (low, high)]
    span_counts = abs(float(bridge.ratio(high)) - float(bridge.ratio(low))) * counts_per_ratio
    resistance = sensor.bridge_resistance_ohm + _excitation_leads_ohm(sensor)
    band = signal_band(spec)
    mains = _mains(spec, band)
    full_scale_ratio = float(bridge.ratio(high)) - bridge.zero_ratio
    range_used = 100.0 * peak_v / conv.input_range_v
    budget = Budget(
        spec_name=spec.name,
        spec_sha256=spec.sha256,
        unit=sensor.unit,
        range_min=low,
        range_max=high,
        resolution=spec.output.resolution,
        bridge_resistance_ohm=resistance,
        excitation_v=exc.voltage_v,
        reference_v=exc.reference_v,
        excitation_current_ma=exc.voltage_v / resistance * 1e3,
        excitation_power_mw=exc.voltage_v ** 2 / resistance * 1e3,
        full_scale_mv_per_v=full_scale_ratio * 1e3,
        full_scale_output_mv=full_scale_ratio * exc.voltage_v * 1e3,
        zero_offset_mv_per_v=bridge.zero_ratio * 1e3,
        sensitivity_uv_per_v_per_unit=bridge.sensitivity * 1e6,
        nonlinearity_pct_fs=bridge.nonlinearity_pct_fs(),
        sensor_nonlinearity_pct_fs=getattr(sensor, "nonlinearity_pct_fs", None),
        lead_desensitisation=lead_desensitisation(sensor),
        pga_gain=gain,
        pga_auto=adc.pga_gain is None,
        input_range_mv=conv.input_range_v * 1e3,
        lsb_nv=conv.lsb_v * 1e9,
        peak_input_mv=peak_v * 1e3,
        range_used_pct=range_used,
        counts_per_unit=counts_per_unit,
        counts_per_lsb=counts_per_unit * spec.output.resolution,
        full_scale_counts=max(end_counts),
        span_counts=span_counts,
        noise_counts_rms=noise_counts,
        total_noise_counts_rms=total_noise,
        effective_bits=math.log2(full_range_counts / (math.sqrt(12.0) * total_noise)),
        noise_free_bits=math.log2(full_range_counts / noise_free_counts),
        noise_free_counts=noise_free_counts,
        noise_free_resolution=noise_free_counts / counts_per_unit,
        noise_free_divisions=span_counts / noise_free_counts,
        requested_divisions=(high - low) / spec.output.resolution,
        signal_band_hz=band,
        mains=mains,
        warnings=(),
    )
    return _with_warnings(budget, spec)


def _excitation_leads_ohm(sensor: Sensor) -> float:
    """Lead resistance in series with the bridge as the excitation source sees it: the two
    excitation leads of a strain bridge (a six-wire bridge senses, but still carries the
    current through them); none declared for a transducer."""
    return 2.0 * sensor.lead_resistance_ohm if isinstance(sensor, StrainBridge) else 0.0


def _range_advice(b: Budget, spec: Spec) -> str:
    """What would use more of the range, for this spec."""
    if b.pga_gain < max(spec.adc.pga_gains):
        return "a higher PGA gain would help"
    if b.excitation_v < spec.adc.reference_max_v and not spec.excitation.ratiometric:
        return "the gain is the largest; a higher excitation would help"
    return ("the gain is already the largest and the excitation cannot rise: a sensor with "
            "more output, or a converter with a smaller input range")


def _with_warnings(b: Budget, spec: Spec) -> Budget:
    warnings = []
    if b.range_used_pct > 100.0:
        warnings.append(f"peak input {b.peak_input_mv:.4g} mV overloads the ADC range "
                        f"+-{b.input_range_mv:.4g} mV at gain {b.pga_gain} "
                        f"({b.range_used_pct:.1f} % used): readings will saturate")
    elif b.range_used_pct > RANGE_USED_HIGH_PCT:
        warnings.append(f"range used {b.range_used_pct:.1f} % is above "
                        f"{RANGE_USED_HIGH_PCT:g} %: little overload margin")
    elif b.range_used_pct < RANGE_USED_LOW_PCT:
        warnings.append(f"range used {b.range_used_pct:.1f} % is below {RANGE_USED_LOW_PCT:g} %: "
                        f"resolution is thrown away ({_range_advice(b, spec)})")
    code_units = 1.0 / b.counts_per_unit
    if b.resolution < code_units:
        warnings.append(f"output.resolution {b.resolution:g} {b.unit} is finer than one ADC "
                        f"code ({code_units:.4g} {b.unit}): the last digit only follows the "
                        "filters' averaging of noise, not the converter")
    if b.noise_free_resolution > b.resolution:
        warnings.append(f"noise-free resolution {b.noise_free_resolution:.4g} {b.unit} at the "
                        f"ADC is coarser than the requested {b.resolution:g} {b.unit} "
                        "(before digital filtering)")
    for m in b.mains:
        if m.in_band and m.worst_rejection_db < MAINS_WARN_REJECTION_DB:
            lo, hi = m.alias_band_hz
            warnings.append(f"mains {m.frequency_hz:g} Hz (+-1 %) lands at {lo:.3g}..{hi:.3g} Hz, "
                            f"inside the {b.signal_band_hz:g} Hz signal band, with only "
                            f"{m.worst_rejection_db:.1f} dB of sinc rejection")
    return replace(b, warnings=tuple(warnings))
