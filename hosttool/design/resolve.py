"""The resolved design: every constant of the firmware, float and integer, with its proof.

``make_design(spec)`` is the one place numbers are chosen; render, model, verify and the
production line only read a ``Design``. Per-unit constants (zero offset, span multiplier,
linearisation and temperature coefficients) come as ``UnitConstants``; without them the
design uses the nominal ones from the datasheet figures. See DEVELOPERS.md for the
arithmetic; headroom.py for the range proof of the filter cascade.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from hosttool.design.budget import Budget, compute_budget, signal_band
from hosttool.design.filters import Stage, design_chain
from hosttool.design.fixedpoint import INT32_MAX, frac_bits_for, quantise
from hosttool.design.headroom import (
    INT64_LIMIT,
    CascadeAnalysis,
    NodeBound,
    analyse_cascade,
    node_bounds,
)
from hosttool.design.output import OutputMeaning, output_meaning
from hosttool.design.response import ChainReport, analyse_chain
from hosttool.errors import DesignError
from hosttool.physics.adc import Converter, sinc_decimation
from hosttool.physics.bridge import Bridge, bridge_of
from hosttool.spec.schema import Spec

#: Q format of the normalised linearisation variable and coefficients, and of the span gain.
LIN_FRAC = 30
#: sum |C_k| of a unit's linearisation coefficients stays below this (Q1.30 words of a
#: polynomial whose value over |w| <= 1 stays below 4).
LIN_SUM_LIMIT = 4 << LIN_FRAC
#: Default widths of the per-unit temperature-coefficient formats when the spec gives no
#: limit: this many ppm (of full scale per C for zero, per C for span).
DEFAULT_TC_RANGE_PPM = 500.0


@dataclass(frozen=True)
class UnitConstants:
    """The per-unit constants a calibration block carries (integers of the design's formats)."""

    offset: int                 # zero, counts * 2^G
    scale_mul: int              # span multiplier M (chain LSB -> output LSB with shift S)
    lin: tuple[int, ...]        # C_0 .. C_n in Q30 (empty without linearisation)
    tc_zero: int                # Kz (output LSB per 0.01 C, shift Sz)
    tc_span: int                # Ks (Q30 gain per 0.01 C, shift Ss)


I64 = NDArray[np.int64]
F64 = NDArray[np.float64]
Bools = NDArray[np.bool_]

#: Bound of a constant's magnitude in a ``ConstantsStack``: above every limit the checks
#: compare with (each at most 2^31 - 1), so clipping to it changes no check's outcome.
STACK_CLIP = 1 << 31


@dataclass(frozen=True)
class ConstantsStack:
    """The constants of U units as int64 arrays over the unit axis (the checks and the
    static path of a chunk of units at once). A value beyond +-2^31 is clipped to it: its
    unit is refused all the same, and refused units' values are never run."""

    offset: I64                 # (U,) counts * 2^G
    scale_mul: I64              # (U,) M
    lin: I64                    # (U, k) C_0 .. C_n, Q30; zeros where a unit has not k
    lin_given: I64              # (U,) how many coefficients each unit gives
    tc_zero: I64                # (U,) Kz
    tc_span: I64                # (U,) Ks

    @classmethod
    def of(cls, constants: Sequence[UnitConstants], k: int) -> ConstantsStack:
        """The stack of ``constants``, with ``k`` linearisation coefficients per row."""
        units = len(constants)
        fields = _clipped([[c.offset for c in constants], [c.scale_mul for c in constants],
                           [c.tc_zero for c in constants], [c.tc_span for c in constants],
                           [len(c.lin) for c in constants]], (5, units))
        lin = _clipped([c.lin if len(c.lin) == k else (0,) * k for c in constants],
                       (units, k))
        return cls(offset=fields[0], scale_mul=fields[1], tc_zero=fields[2],
                   tc_span=fields[3], lin_given=fields[4], lin=lin)


def _clipped(rows: Sequence[Sequence[int]], shape: tuple[int, int]) -> I64:
    """``rows`` as an int64 array of ``shape``, each value clipped to +-STACK_CLIP."""
    try:
        a = np.array(rows, dtype=np.int64).reshape(shape)
    except OverflowError:           # a value beyond int64: clipped in Python integers first
        a = np.array([[min(max(v, -STACK_CLIP), STACK_CLIP) for v in row] for row in rows],
                     dtype=np.int64).reshape(shape)
    np.minimum(a, STACK_CLIP, out=a)            # (np.clip: several times slower here)
    return np.maximum(a, -STACK_CLIP, out=a)


@dataclass(frozen=True)
class Scale:
    """Chain words to output LSB: s = round_shift(v * M, S)."""

    shift: int
    ideal: float                # nominal output LSB per chain LSB
    multiplier_range: float     # largest |M / 2^S| the format must hold (span tolerance)
    multiplier_limit: int       # largest |M| accepted: multiplier_range on the M grid

    def realised(self, multiplier: int) -> float:
        """M / 2^S."""
        return math.ldexp(multiplier, -self.shift)


@dataclass(frozen=True)
class LinPolynomial:
    """y = 2^K p(s / 2^K), p(w) = sum c_k w^k evaluated by Horner in Q30."""

    mode: str                   # "bridge_inverse" or "polynomial"
    norm_shift: int             # K: |s| <= 2^K over the whole ADC range
    coeffs: tuple[float, ...]   # nominal c_0 .. c_n before quantisation
    fit_residual_lsb: float     # max |p - exact inverse| over the range (0 for polynomial)


@dataclass(frozen=True)
class TempComp:
    """s = (s - round(Kz dT / 2^Sz)) * (1 + round(Ks dT / 2^Ss) / 2^30), dT in 0.01 C."""

    reference_centi: int
    min_centi: int
    max_centi: int
    zero_shift: int             # Sz
    span_shift: int             # Ss
    zero_range: float           # largest |Kz / 2^Sz| the format holds, LSB per 0.01 C
    span_range: float           # largest |Ks / 2^Ss| / 2^30 the format holds, per 0.01 C

    def realised_zero(self, tc_zero: int) -> float:
        """Kz / 2^Sz: output LSB per 0.01 C."""
        return math.ldexp(tc_zero, -self.zero_shift)

    def realised_span(self, tc_span: int) -> float:
        """Ks / 2^Ss / 2^30: relative gain change per 0.01 C."""
        return math.ldexp(tc_span, -self.span_shift - LIN_FRAC)

    @property
    def dt_max(self) -> int:
        """Largest |T - Tref| after clamping, 0.01 C."""
        return max(abs(self.min_centi - self.reference_centi),
                   abs(self.max_centi - self.reference_centi))


@dataclass(frozen=True)
class ErrorTerm:
    """One contribution to the output error, output LSB."""

    name: str
    worst_lsb: float
    rms_lsb: float


@dataclass(frozen=True)
class Design:
    """Everything the firmware needs, with its headroom and error bounds."""

    spec: Spec
    budget: Budget
    bridge: Bridge              # the exact bridge model, leads included
    converter: Converter        # the ADC at the chosen gain: code range, LSB in volts
    guard_bits: int             # G
    input_bound: int            # |d| <= this, chain words (2^(bits + G))
    chain_bound: float          # worst |word| out of the cascade: L1 x input_bound + rounding
    stages: tuple[Stage, ...]
    cascade: CascadeAnalysis
    nodes: tuple[NodeBound, ...]          # the filter cascade's nodes and accumulators
    scale: Scale
    linearisation: LinPolynomial | None
    temperature: TempComp | None
    nominal: UnitConstants
    constants: UnitConstants    # in force: nominal, or one unit's
    static_nodes: tuple[NodeBound, ...]   # scale, linearisation, temperature (per unit)
    output_bound_lsb: float     # worst |output| before the final saturation
    errors: tuple[ErrorTerm, ...]
    design_errors: tuple[ErrorTerm, ...]   # realised constants against the ideal design
    filter_report: ChainReport
    warnings: tuple[str, ...]

    @property
    def code_min(self) -> int:
        """Lowest raw ADC code."""
        return self.converter.code_min

    @property
    def code_max(self) -> int:
        """Highest raw ADC code."""
        return self.converter.code_max

    @property
    def output_step(self) -> float:
        """One output LSB in output units (``output.resolution``)."""
        return self.spec.output.resolution

    def to_units(self, lsb: float) -> float:
        """A figure in output LSB expressed in output units."""
        return lsb * self.spec.output.resolution

    @property
    def ratio_per_count(self) -> float:
        """Bridge output ratio (V/V) of one ADC code at the spec's excitation."""
        return self.converter.lsb_v / self.spec.excitation.voltage_v

    @property
    def error_bound_lsb(self) -> float:
        """Proven worst-case |integer - float64 reference (realised constants)|, output LSB."""
        return sum(e.worst_lsb for e in self.errors)

    @property
    def output_noise_rms_lsb(self) -> float:
        """The ADC's input-referred noise after the filters and scale, RMS output LSB
        (white noise through the cascade's L2 norm; linearisation slope taken as 1)."""
        gain = abs(self.scale.realised(self.constants.scale_mul)) * 2.0 ** self.guard_bits
        return self.budget.noise_counts_rms * self.cascade.total.l2 * gain

    @property
    def all_nodes(self) -> tuple[NodeBound, ...]:
        """Every node of the pipeline, in order: filters, then the static path."""
        return self.nodes + self.static_nodes

    @property
    def static_error_bound_lsb(self) -> float:
        """Proven worst case of the static path alone (filters settled: no filter rounding)."""
        return sum(e.worst_lsb for e in self.errors if e.name != "filter rounding")

    @property
    def error_rms_lsb(self) -> float:
        """Predicted RMS of the same difference (independent uniform roundings)."""
        return math.sqrt(sum(e.rms_lsb ** 2 for e in self.errors))

    @property
    def ideal_error_bound_lsb(self) -> float:
        """Worst case against the ideal (unquantised) design: rounding plus coefficients."""
        return self.error_bound_lsb + sum(e.worst_lsb for e in self.design_errors)

    @property
    def decimation(self) -> int:
        """Total decimation of the cascade."""
        return self.cascade.decimation

    @property
    def output_rate_hz(self) -> float:
        """Output samples per second."""
        return self.spec.adc.data_rate_sps / self.decimation

    def check_unit(self, constants: UnitConstants, source: str) -> None:
        """Refuse (DesignError naming ``source``) constants outside this design's formats."""
        check_constants(constants, bits=self.spec.adc.bits, g=self.guard_bits, scale=self.scale,
                        lin=self.linearisation, temp=self.temperature, source=source)

    @property
    def output(self) -> OutputMeaning:
        """One output LSB, the output rate and the range in LSB, as exact fractions."""
        return output_meaning(self.spec, self.decimation)

    def check_in_force(self, constants: UnitConstants) -> None:
        """Refuse (DesignError) the constants ``with_constants`` refuses, building nothing
        (``check_in_force_many`` of one unit)."""
        reason = self.check_in_force_many([constants])[0]
        if reason is not None:
            raise DesignError(reason)

    def check_in_force_many(self, constants: Sequence[UnitConstants]) -> list[str | None]:
        """``check_in_force`` of each unit of a stack at once: per unit None (in force) or
        the text of the DesignError that ``check_in_force`` raises for it."""
        stack = ConstantsStack.of(constants, self.lin_count)
        return _in_force(self.spec, self.chain_bound, self.guard_bits, self.scale,
                         self.linearisation, self.temperature, constants, stack)[0]

    @property
    def lin_count(self) -> int:
        """How many linearisation coefficients a unit's constants carry."""
        return _count(self.linearisation)

    def with_constants(self, constants: UnitConstants) -> Design:
        """The same design carrying one unit's constants (bounds recomputed for them).

        Only what depends on the constants is redone (their check, the error terms, the
        output bound); the filter design and its analysis are reused, so this is cheap
        enough to call once per unit on a production line.
        """
        return dataclasses.replace(self, **_unit_fields(
            self.spec, self.cascade, self.chain_bound, self.guard_bits, self.scale,
            self.linearisation, self.temperature, constants, self.filter_report.warnings))


def _guard_bits(bits: int, analysis: CascadeAnalysis, field: str) -> int:
    """Most guard bits G with every node's worst case inside int32."""
    worst_rounding = max([0.0] + [n.rounding for n in analysis.nodes])
    g = 0
    while (analysis.max_gain_l1 * math.ldexp(1.0, bits + g + 1) + worst_rounding
           <= INT32_MAX and g < 16):
        g += 1
    if analysis.max_gain_l1 * math.ldexp(1.0, bits + g) + worst_rounding > INT32_MAX:
        raise DesignError(f"{field}: the cascade's worst-case gain {analysis.max_gain_l1:.4g} "
                          f"leaves no room in 32-bit words for {bits}-bit codes")
    return g


def _scale(spec: Spec, budget: Budget, guard_bits: int) -> Scale:
    ideal = 1.0 / (math.ldexp(budget.counts_per_lsb, guard_bits))
    tolerance = (spec.calibration.span_tolerance_pct if spec.calibration else 20.0) / 100.0
    widest = ideal * (1.0 + tolerance)
    shift = frac_bits_for(widest, 32)
    if shift < 1:
        raise DesignError(f"{spec.source}: output.resolution: {spec.output.resolution:g} is "
                          "finer than one chain LSB can reach; the scale multiplier needs a "
                          "negative shift")
    # Rounded to the nearest M (not floored): the span tolerance of a round-numbered design
    # lands on an integer, and float noise must not move the limit by one.
    limit = min(INT32_MAX, quantise(widest, shift))
    return Scale(shift=shift, ideal=ideal, multiplier_range=widest, multiplier_limit=limit)


def _linearisation(spec: Spec, bridge: Bridge, output_bound: float) -> LinPolynomial | None:
    lin = spec.linearisation
    if lin.mode == "none":
        return None
    k = max(1, math.frexp(output_bound)[1])
    if k > LIN_FRAC - 2:
        raise DesignError(f"{spec.source}: output.resolution: {output_bound:.4g} output LSB "
                          f"over the ADC range needs 2^{k}, more than the linearisation's "
                          f"Q{LIN_FRAC} variable can normalise (at most 2^{LIN_FRAC - 2})")
    if lin.mode == "polynomial":
        coeffs = (0.0, 1.0) + (0.0,) * (lin.order - 1)
        return LinPolynomial("polynomial", k, coeffs, 0.0)
    res = spec.output.resolution
    # s: the linearly scaled reading (tangent sensitivity) of measurand m, in output LSB
    m = np.linspace(bridge.m_min, bridge.m_max, 4001)
    s = np.asarray(bridge.tangent_reading(m)) / res
    target = m / res
    w = s / math.ldexp(1.0, k)
    poly = np.polynomial.Polynomial.fit(w, target / math.ldexp(1.0, k), lin.order,
                                        domain=[-1, 1], window=[-1, 1])
    coeffs = tuple(float(c) for c in poly.coef)
    residual = float(np.max(np.abs(poly(w) * math.ldexp(1.0, k) - target)))
    if max(abs(c) for c in coeffs) >= 2.0 or sum(abs(c) for c in coeffs) >= 4.0:
        raise DesignError(f"{spec.source}: linearisation.order: the fitted polynomial's "
                          "coefficients are too large for Q1.30 words")
    return LinPolynomial("bridge_inverse", k, coeffs, residual)


def _temperature(spec: Spec, full_scale_lsb: float) -> TempComp | None:
    t = spec.temperature
    if t is None:
        return None
    zero_ppm = t.max_zero_tc_ppm_fs_per_c or max(DEFAULT_TC_RANGE_PPM,
                                                 2 * abs(t.zero_tc_ppm_fs_per_c))
    span_ppm = t.max_span_tc_ppm_per_c or max(DEFAULT_TC_RANGE_PPM,
                                              2 * abs(t.span_tc_ppm_per_c))
    zero_range = zero_ppm * 1e-6 * full_scale_lsb / 100.0
    span_range = span_ppm * 1e-6 / 100.0
    return TempComp(
        reference_centi=round(t.reference_c * 100), min_centi=round(t.min_c * 100),
        max_centi=round(t.max_c * 100),
        zero_shift=frac_bits_for(zero_range * 2, 32),
        span_shift=frac_bits_for(span_range * 2 * math.ldexp(1.0, LIN_FRAC), 32),
        zero_range=zero_range, span_range=span_range)


def _nominal(spec: Spec, bridge: Bridge, converter: Converter, g: int, scale: Scale,
             lin: LinPolynomial | None, temp: TempComp | None,
             full_scale_lsb: float) -> UnitConstants:
    lead_offset_counts = (bridge.zero_ratio - bridge.offset) * spec.excitation.voltage_v \
        / converter.lsb_v
    tc_zero = tc_span = 0
    if temp is not None and spec.temperature is not None:
        alpha = spec.temperature.zero_tc_ppm_fs_per_c * 1e-6 * full_scale_lsb / 100.0
        gamma = -spec.temperature.span_tc_ppm_per_c * 1e-6 / 100.0
        tc_zero = quantise(alpha, temp.zero_shift)
        tc_span = quantise(gamma * math.ldexp(1.0, LIN_FRAC), temp.span_shift)
    return UnitConstants(
        offset=quantise(lead_offset_counts, g),
        scale_mul=quantise(scale.ideal, scale.shift),
        lin=tuple(quantise(c, LIN_FRAC) for c in lin.coeffs) if lin else (),
        tc_zero=tc_zero, tc_span=tc_span)


def _count(lin: LinPolynomial | None) -> int:
    """How many linearisation coefficients the constants of a design with ``lin`` carry."""
    return 0 if lin is None else len(lin.coeffs)


def offset_limit(bits: int, g: int) -> int:
    """Largest |offset| accepted, counts * 2^G: the ADC's range."""
    return 1 << (bits - 1 + g)


def check_constants(c: UnitConstants, *, bits: int, g: int, scale: Scale,
                    lin: LinPolynomial | None, temp: TempComp | None, source: str) -> None:
    """Refuse per-unit constants outside the formats the range proof assumed."""
    stack = ConstantsStack.of([c], _count(lin))
    rules = _format_rules([c], stack, bits=bits, g=g, scale=scale, lin=lin, temp=temp)
    reason = _refusals(rules, 1, source)[0]
    if reason is not None:
        raise DesignError(reason)


#: A check of a stack: which units it refuses, and the text of its refusal of unit i.
Rule = tuple[Bools, Callable[[int], str]]


def _format_rules(constants: Sequence[UnitConstants], stack: ConstantsStack, *, bits: int,
                  g: int, scale: Scale, lin: LinPolynomial | None,
                  temp: TempComp | None) -> list[Rule]:
    """The formats' checks of ``constants`` (as ``stack``), in order; a refusal's text
    names the unit's own values (unclipped)."""
    count = _count(lin)
    rules: list[Rule] = [
        (np.abs(stack.offset) > offset_limit(bits, g),
         lambda i: f"zero offset {constants[i].offset / 2 ** g:.1f} counts lies outside "
                   "the ADC range"),
        (np.abs(stack.scale_mul) > scale.multiplier_limit,
         lambda i: f"span multiplier {constants[i].scale_mul} is beyond the span tolerance "
                   "the design's format holds (calibration.span_tolerance_pct)"),
        (stack.lin_given != count,
         lambda i: f"{len(constants[i].lin)} linearisation coefficients given, the design "
                   f"has {count if lin is not None else 'none'}")]
    if lin is not None:
        size = np.abs(stack.lin)
        rules.append(((size.sum(axis=1) >= LIN_SUM_LIMIT) | (size.max(axis=1) > INT32_MAX),
                      lambda _: f"linearisation coefficients too large for Q1.{LIN_FRAC}"))
    if temp is None:
        rules.append(((stack.tc_zero != 0) | (stack.tc_span != 0),
                      lambda _: "temperature coefficients given, the design has no "
                                "temperature compensation"))
    else:
        rules.append(((np.abs(stack.tc_zero) > INT32_MAX) | (np.abs(stack.tc_span) > INT32_MAX),
                      lambda _: "a temperature coefficient exceeds its format"))
    return rules

def _errors(spec: Spec, cascade: CascadeAnalysis, scale: Scale, c: UnitConstants,
            lin: LinPolynomial | None, temp: TempComp | None, scaled_bound: float
            ) -> tuple[ErrorTerm, ...]:
    gain = abs(scale.realised(c.scale_mul))
    lin_slope = 1.0
    lin_coeffs = [x / 2 ** LIN_FRAC for x in c.lin]
    if lin is not None:
        lin_slope = max(1.0, sum(k * abs(x) for k, x in enumerate(lin_coeffs)))
    temp_gain = 1.0
    if temp is not None:
        temp_gain = 1.0 + abs(temp.realised_span(c.tc_span)) * temp.dt_max + 2.0 ** -LIN_FRAC
    amplify = lin_slope * temp_gain
    terms = [ErrorTerm("filter rounding", cascade.output_rounding * gain * amplify,
                       cascade.output_rounding_rms * gain * amplify),
             ErrorTerm("scale rounding", 0.5 * amplify, amplify / math.sqrt(12))]
    if lin is not None:
        n = len(c.lin) - 1
        horner = n * 0.5 * 2.0 ** (lin.norm_shift - LIN_FRAC)
        terms.append(ErrorTerm("linearisation rounding", (horner + 0.5) * temp_gain,
                               math.sqrt(horner ** 2 / 3 + 1 / 12) * temp_gain))
    if temp is not None:
        lin_bound = scaled_bound
        if lin is not None:
            lin_bound = sum(abs(x) for x in lin_coeffs) * 2.0 ** lin.norm_shift
        s1 = lin_bound + abs(temp.realised_zero(c.tc_zero)) * temp.dt_max + 1
        # an exact zero coefficient rounds nothing: z = 0, or g = 0 and s1 * g = 0
        zero_part = 0.5 * temp_gain if c.tc_zero else 0.0
        span_part = s1 * 0.5 * 2.0 ** -LIN_FRAC + 0.5 if c.tc_span else 0.0
        terms.append(ErrorTerm("temperature rounding", zero_part + span_part,
                               math.sqrt((bool(c.tc_zero) + bool(c.tc_span)) / 12)))
    return tuple(terms)


def _design_errors(cascade: CascadeAnalysis, input_bound: int, scale: Scale, c: UnitConstants,
                   lin: LinPolynomial | None) -> tuple[ErrorTerm, ...]:
    gain = abs(scale.realised(c.scale_mul))
    coeff = cascade.total.minus(cascade.ideal_total).l1 * input_bound * gain
    terms = [ErrorTerm("filter coefficients", coeff, coeff / math.sqrt(3))]
    if lin is not None:
        nominal = tuple(quantise(y, LIN_FRAC) for y in lin.coeffs)
        if c.lin == nominal:
            q = sum(abs(x / 2 ** LIN_FRAC - y) for x, y in zip(c.lin, lin.coeffs, strict=True))
        else:
            # a unit's own coefficients (a fit to its readings) are not a quantisation of the
            # nominal ones: each is its fit rounded to nearest, at most half a Q30 step off
            q = len(c.lin) * 0.5 * 2.0 ** -LIN_FRAC
        terms.append(ErrorTerm("linearisation coefficients", q * 2.0 ** lin.norm_shift, 0.0))
        if lin.fit_residual_lsb:
            terms.append(ErrorTerm("linearisation fit", lin.fit_residual_lsb, 0.0))
    return tuple(terms)


def _stopband_edge(spec: Spec, band_hz: float) -> float | None:
    """Where the reported stopband starts, Hz: the FIR stop edge, else a decade above the
    lowest lowpass corner, at most 0.8 x Nyquist. None when the spec defines no stopband (no
    lowpass stage: a moving average or notches alone) or the signal band reaches it."""
    edges = [s.cutoff_hz + s.transition_hz / 2 for s in spec.filter.stages
             if s.kind == "fir_lowpass" and s.cutoff_hz and s.transition_hz]
    corners = [s.cutoff_hz for s in spec.filter.stages if s.cutoff_hz]
    nyquist = spec.adc.data_rate_sps / 2
    if edges:
        edge = min(min(edges), 0.8 * nyquist)
    elif corners:
        edge = min(10 * min(corners), 0.8 * nyquist)
    else:
        return None
    return edge if band_hz < edge else None


def _chain_bound(cascade: CascadeAnalysis, input_bound: int) -> float:
    """Worst |word| out of the cascade over the whole ADC range, chain LSB."""
    return cascade.total.l1 * input_bound + cascade.output_rounding


def _scaled_bound(chain_bound: float, scale: Scale) -> float:
    """Worst |s| after the scale over the whole ADC range, output LSB."""
    return chain_bound * scale.multiplier_range + 0.5


def _unit_fields(spec: Spec, cascade: CascadeAnalysis, chain_bound: float, g: int,
                 scale: Scale, lin: LinPolynomial | None, temp: TempComp | None,
                 c: UnitConstants, filter_warnings: tuple[str, ...]) -> dict[str, Any]:
    """The Design fields that depend on the constants in force, after checking them."""
    static = _checked_static_nodes(spec, chain_bound, cascade.decimation, g, scale, lin,
                                   temp, c)
    input_bound = 1 << (spec.adc.bits + g)
    scaled_bound = _scaled_bound(chain_bound, scale)
    errors = _errors(spec, cascade, scale, c, lin, temp, scaled_bound)
    design_errors = _design_errors(cascade, input_bound, scale, c, lin)
    out_bound = static[-1].bound
    warnings = list(filter_warnings)
    if out_bound > INT32_MAX:
        warnings.append(f"inputs far beyond the sensor range can reach {out_bound:.4g} output "
                        "LSB and saturate at the int32 limits")
    return {"constants": c, "errors": errors, "design_errors": design_errors,
            "static_nodes": static, "output_bound_lsb": out_bound, "warnings": tuple(warnings)}


def _checked_static_nodes(spec: Spec, chain_bound: float, decimation: int, g: int,
                          scale: Scale, lin: LinPolynomial | None, temp: TempComp | None,
                          c: UnitConstants) -> tuple[NodeBound, ...]:
    """The static path's nodes for constants ``c``, after checking them: inside their
    formats, and no 64-bit product that could overflow (DesignError otherwise)."""
    stack = ConstantsStack.of([c], _count(lin))
    reasons, bounds = _in_force(spec, chain_bound, g, scale, lin, temp, [c], stack)
    if reasons[0] is not None:
        raise DesignError(reasons[0])
    rate_hz = spec.adc.data_rate_sps / decimation
    return tuple(NodeBound(name, 0.0, 0.0, float(bound[0]), word, rate_hz)
                 for name, word, bound in bounds)


def _in_force(spec: Spec, chain_bound: float, g: int, scale: Scale,
              lin: LinPolynomial | None, temp: TempComp | None,
              constants: Sequence[UnitConstants], stack: ConstantsStack
              ) -> tuple[list[str | None], list[tuple[str, int, F64]]]:
    """Per unit of ``constants`` (as ``stack``) None when in force, else the text of its
    refusal: the first of the formats' checks it fails, else the first 64-bit product of
    the static path that could overflow. Also the static path's node bounds per unit."""
    rules = _format_rules(constants, stack, bits=spec.adc.bits, g=g, scale=scale, lin=lin,
                          temp=temp)
    bounds = _static_bounds(chain_bound, scale, lin, temp, stack)
    for name, word, bound in bounds:
        if word == 64:      # beyond int64: NodeBound.headroom_bits < 0
            rules.append((bound > float(INT64_LIMIT), _overflow_text(name, bound)))
    return _refusals(rules, len(constants), spec.source), bounds


def _overflow_text(name: str, bound: F64) -> Callable[[int], str]:
    """The refusal of unit i whose node ``name`` can reach ``bound[i]`` beyond int64."""
    return lambda i: (f"{name} can reach {float(bound[i]):.4g}, beyond int64: narrow the "
                      "temperature range or the coefficient limits")


def _refusals(rules: list[Rule], units: int, source: str) -> list[str | None]:
    """Per unit the text of the first rule that refuses it (``source: text``), else None."""
    reasons: list[str | None] = [None] * units
    refused = np.array([r for r, _ in rules], dtype=bool).reshape(len(rules), units)
    if refused.any():
        first = refused.argmax(axis=0)          # the first rule that refuses each unit
        for i in np.flatnonzero(refused.any(axis=0)).tolist():
            reasons[i] = f"{source}: {rules[first[i]][1](i)}"
    return reasons


def _static_bounds(chain_bound: float, scale: Scale, lin: LinPolynomial | None,
                   temp: TempComp | None, stack: ConstantsStack
                   ) -> list[tuple[str, int, F64]]:
    """(name, word, worst case per unit) of the scale, linearisation and temperature steps
    (output LSB, or the int64 products before their shifts), for chain words bounded by
    ``chain_bound``.

    The span multiplier and the temperature coefficients are taken at the widest value
    their formats accept (or the unit's, if wider), so the proof holds for every unit that
    calibration can produce, not only for the constants in force.
    """
    m = np.maximum(np.abs(stack.scale_mul), scale.multiplier_limit).astype(np.float64)
    nodes = [("scale.product", 64, chain_bound * m + 2.0 ** (scale.shift - 1))]
    bound = chain_bound * m / 2.0 ** scale.shift + 0.5
    nodes.append(("scale", 32, bound))
    if lin is not None:
        acc = np.abs(stack.lin).sum(axis=1).astype(np.float64)
        nodes.append(("linearisation.product", 64,
                      acc * 2.0 ** LIN_FRAC + 2.0 ** (LIN_FRAC - 1)))
        bound = acc / 2.0 ** LIN_FRAC * 2.0 ** lin.norm_shift + 0.5
        nodes.append(("linearisation", 32, bound))
    if temp is not None:
        # Kz / 2^Sz and Ks / 2^Ss exactly: a power of two times an integer below 2^32
        kz = np.maximum(np.abs(stack.tc_zero) * temp.realised_zero(1), temp.zero_range)
        ks = np.maximum(np.abs(stack.tc_span) * temp.realised_span(1),
                        temp.span_range) * 2.0 ** LIN_FRAC
        s1 = np.minimum(bound, INT32_MAX + 1.0) + kz * temp.dt_max + 0.5
        g = ks * temp.dt_max + 0.5
        nodes.append(("temperature.product", 64, s1 * g + 2.0 ** (LIN_FRAC - 1)))
        nodes.append(("temperature", 32, s1 * (1 + g / 2.0 ** LIN_FRAC) + 0.5))
    return nodes


def make_design(spec: Spec, constants: UnitConstants | None = None) -> Design:
    """Resolve every constant of ``spec``; ``constants`` are one unit's (nominal if None)."""
    budget = compute_budget(spec)
    try:
        stages = design_chain(spec.filter)
    except DesignError as exc:
        raise DesignError(f"{spec.source}: {exc}") from None
    cascade = analyse_cascade(stages, spec.adc.data_rate_sps)
    bits = spec.adc.bits
    g = _guard_bits(bits, cascade, f"{spec.source}: filter")
    input_bound = 1 << (bits + g)
    nodes = node_bounds(stages, cascade, input_bound, spec.adc.data_rate_sps)
    for node in nodes:
        if node.headroom_bits < 0:
            raise DesignError(f"{spec.source}: filter: node {node.name} can reach "
                              f"{node.bound:.4g}, beyond its {node.word}-bit word")
    scale = _scale(spec, budget, g)
    chain_bound = _chain_bound(cascade, input_bound)
    scaled_bound = _scaled_bound(chain_bound, scale)
    bridge = bridge_of(spec.sensor)
    converter = budget.converter(spec.adc.bits)
    lin = _linearisation(spec, bridge, min(scaled_bound, INT32_MAX))
    full_scale_lsb = spec.sensor.full_scale / spec.output.resolution
    temp = _temperature(spec, full_scale_lsb)
    nominal = _nominal(spec, bridge, converter, g, scale, lin, temp, full_scale_lsb)
    band = min(signal_band(spec), spec.adc.data_rate_sps / 2)
    stop = _stopband_edge(spec, band)
    report = analyse_chain(stages, passband_edge_hz=band, stopband_edge_hz=stop,
                           adc_rate_hz=spec.adc.data_rate_sps, sinc_order=spec.adc.sinc_order,
                           full_scale_lsb=full_scale_lsb,
                           sinc_decimation=sinc_decimation(spec.adc))
    unit = _unit_fields(spec, cascade, chain_bound, g, scale, lin, temp,
                        nominal if constants is None else constants, tuple(report.warnings))
    return Design(spec=spec, budget=budget, bridge=bridge, converter=converter, guard_bits=g,
                  input_bound=input_bound, chain_bound=chain_bound,
                  stages=stages, cascade=cascade, nodes=nodes, scale=scale,
                  linearisation=lin, temperature=temp, nominal=nominal,
                  filter_report=report, **unit)
