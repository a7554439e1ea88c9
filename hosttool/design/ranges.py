"""Exact ranges of every firmware node, for the specialised C code.

The firmware may leave out a saturation, keep a value in 32 bits or multiply 32 x 32 -> 64
only where it is proven safe for every input it can see: every code of the ADC range (the
firmware takes codes beyond it as the rail) and every per-unit constant the calibration
loader accepts (``resolve.check_constants``: |offset| <= the ADC range, |M| <= the span
multiplier limit, sum |C_k| < LIN_SUM_LIMIT with each |C_k| <= 2^31 - 1, |Kz|, |Ks| <=
2^31 - 1), not only for the constants in force.

Ranges are closed integer intervals computed with Python integers, so the comparisons with
the int32 and int64 limits are exact. Offset and FIR stages are followed exactly (interval
arithmetic of integer taps: the extremes are reached); a biquad section's output takes the
design's proven bound (``headroom.node_bounds``: L1 norm with the IIR tail bounded), rounded
up, and its accumulator fits int64 by the same proof. The static path follows the contract of
DEVELOPERS.md step by step.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from hosttool.design.filters import BiquadStage, FirStage
from hosttool.design.fixedpoint import INT32_MAX, INT32_MIN
from hosttool.design.resolve import LIN_FRAC, LIN_SUM_LIMIT, Design, offset_limit
from hosttool.errors import DesignError

INT64_MIN = -(1 << 63)
INT64_MAX = (1 << 63) - 1


@dataclass(frozen=True)
class Span:
    """The closed integer interval [lo, hi]."""

    lo: int
    hi: int

    @staticmethod
    def sym(bound: int) -> Span:
        """[-bound, bound]."""
        return Span(-bound, bound)

    @property
    def mag(self) -> int:
        """Largest magnitude in the interval."""
        return max(-self.lo, self.hi)

    @property
    def fits32(self) -> bool:
        """Every value fits int32_t."""
        return INT32_MIN <= self.lo and self.hi <= INT32_MAX

    @property
    def fits64(self) -> bool:
        """Every value fits int64_t."""
        return INT64_MIN <= self.lo and self.hi <= INT64_MAX

    def __add__(self, other: Span) -> Span:
        return Span(self.lo + other.lo, self.hi + other.hi)

    def __sub__(self, other: Span) -> Span:
        return Span(self.lo - other.hi, self.hi - other.lo)

    def times(self, k: int) -> Span:
        """Every value times the integer ``k``."""
        return Span(k * self.lo, k * self.hi) if k >= 0 else Span(k * self.hi, k * self.lo)

    def mul(self, other: Span) -> Span:
        """The products of two intervals."""
        ends = [a * b for a in (self.lo, self.hi) for b in (other.lo, other.hi)]
        return Span(min(ends), max(ends))

    def round_shift(self, k: int) -> Span:
        """round_shift of every value (monotone, so the ends map to the ends)."""
        if k == 0:
            return self
        return Span((self.lo + (1 << (k - 1))) >> k, (self.hi + (1 << (k - 1))) >> k)

    def clamp(self, lo: int, hi: int) -> Span:
        """The interval after clamping to [lo, hi]."""
        return Span(min(max(self.lo, lo), hi), max(min(self.hi, hi), lo))

    def text(self) -> str:
        """[lo, hi] for a C comment."""
        return f"[{self.lo}, {self.hi}]"


@dataclass(frozen=True)
class FirRanges:
    """One FIR stage: its input, accumulator (rounding constant included) and output."""

    name: str
    x: Span
    acc: Span
    y: Span
    running_sum: Span     # sum of the last N inputs (the running-sum form)
    pair_sum: Span        # x[n-k] + x[n-N+1+k] (the folded form of a symmetric FIR)


@dataclass(frozen=True)
class BiquadRanges:
    """One biquad section: its input and its output (the design's proven bound)."""

    name: str
    x: Span
    y: Span


@dataclass(frozen=True)
class FirmwareRanges:
    """Every node the firmware computes, over all inputs and accepted constants."""

    code: Span
    offset: Span
    offset_scaled_code: Span       # code * 2^G
    stages: tuple[FirRanges | BiquadRanges, ...]
    chain: Span                    # the cascade's output (the scale's input)
    scale_product: Span
    scale: Span                    # before its saturation
    lin_w: Span | None             # the normalised variable w = s * 2^(30 - K)
    lin_acc: tuple[Span, ...]      # Horner accumulators, C_n first
    lin: Span | None               # before its saturation
    temp_dt: Span | None
    temp_z: Span | None
    temp_s1: Span | None
    temp_g: Span | None
    temp_product: Span | None
    temperature: Span | None       # before its saturation

    @property
    def output_span(self) -> Span:
        """The last step's result before its saturation."""
        for last in (self.temperature, self.lin):
            if last is not None:
                return last
        return self.scale


def _fir(name: str, stage: FirStage, x: Span) -> FirRanges:
    frac = stage.fmt.frac
    half = (1 << (frac - 1)) if frac else 0
    acc = Span(half, half)
    for h in stage.taps_int:
        acc = acc + x.times(h)
    n = len(stage.taps_int)
    y = Span(acc.lo >> frac, acc.hi >> frac)
    return FirRanges(name, x, acc, y, x.times(n), x + x)


def _chain(d: Design, x: Span) -> tuple[tuple[FirRanges | BiquadRanges, ...], Span]:
    bounds = {n.name: n.bound for n in d.nodes}
    out: list[FirRanges | BiquadRanges] = []
    for i, stage in enumerate(d.stages, start=1):
        if isinstance(stage, FirStage):
            r = _fir(f"stage{i}", stage, x)
            out.append(r)
            x = r.y
            continue
        assert isinstance(stage, BiquadStage)
        for j in range(1, len(stage.sections) + 1):
            name = f"stage{i}.section{j}"
            y = Span.sym(math.ceil(bounds[name]))
            out.append(BiquadRanges(name, x, y))
            x = y
    return tuple(out), x


def firmware_ranges(d: Design) -> FirmwareRanges:
    """The ranges of ``d``'s firmware nodes (see the module docstring)."""
    g = d.guard_bits
    code = Span(d.code_min, d.code_max)
    scaled = code.times(1 << g)
    offset = scaled - Span.sym(offset_limit(d.spec.adc.bits, g))
    stages, chain = _chain(d, offset)
    scale_product = chain.mul(Span.sym(d.scale.multiplier_limit))
    scale = scale_product.round_shift(d.scale.shift)
    s = scale.clamp(INT32_MIN, INT32_MAX)
    lin_w = lin = None
    lin_acc: list[Span] = []
    lin_model = d.linearisation
    if lin_model is not None:
        k = lin_model.norm_shift
        lin_w = s.times(1 << (LIN_FRAC - k))
        if lin_w.mag > 1 << LIN_FRAC:
            raise DesignError(f"{d.spec.source}: linearisation: the scaled reading can reach "
                              f"{s.mag}, beyond the normalisation 2^{k} of the Q{LIN_FRAC} "
                              "variable")
        # |round_shift(a w, 30)| <= |a| while |w| <= 2^30, so |acc_k| <= sum_{j>=k} |C_j|:
        # at most (n - k + 1) coefficients of 2^31 - 1, and below LIN_SUM_LIMIT in all.
        for step in range(len(lin_model.coeffs)):
            lin_acc.append(Span.sym(min((step + 1) * INT32_MAX, LIN_SUM_LIMIT - 1)))
        lin = lin_acc[-1].round_shift(LIN_FRAC - k)
        s = lin.clamp(INT32_MIN, INT32_MAX)
    dt = z = s1 = gain = product = temperature = None
    t = d.temperature
    if t is not None:
        dt = Span(t.min_centi - t.reference_centi, t.max_centi - t.reference_centi)
        coefficient = Span.sym(INT32_MAX)
        z = coefficient.mul(dt).round_shift(t.zero_shift)
        s1 = s - z
        gain = coefficient.mul(dt).round_shift(t.span_shift)
        product = s1.mul(gain)
        temperature = s1 + product.round_shift(LIN_FRAC)
    return FirmwareRanges(code=code, offset=offset, offset_scaled_code=scaled, stages=stages,
                          chain=chain, scale_product=scale_product, scale=scale, lin_w=lin_w,
                          lin_acc=tuple(lin_acc), lin=lin, temp_dt=dt, temp_z=z, temp_s1=s1,
                          temp_g=gain, temp_product=product, temperature=temperature)
