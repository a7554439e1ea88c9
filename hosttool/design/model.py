"""One Design run two ways: a float64 reference and the bit-exact integer model.

The integer model follows DEVELOPERS.md "Arithmetic contract" operation by operation; the C
reference firmware must give the same integers. Recursions (biquads, decimating FIRs) run
compiled with numba, still in exact int64 arithmetic (the design proves nothing overflows);
the static path (offset, scale, linearisation, temperature) is vectorised numpy int64.

Both run a record from reset (all filter state zero). Inputs: raw codes (sign-extended ADC
codes) and optionally temperatures in 0.01 C, one per code; outputs: one value per output
sample (after decimation), in output LSB. The temperature paired with an output is the one
given with the code that completed it.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from numba import njit
from numpy.typing import ArrayLike, NDArray
from scipy import signal

from hosttool.design.filters import FirStage
from hosttool.design.fixedpoint import INT32_MAX, INT32_MIN, round_shift_array
from hosttool.design.resolve import LIN_FRAC, Design, UnitConstants

I64 = NDArray[np.int64]
F64 = NDArray[np.float64]


#: Bits of the firmware's status word (ht_pipeline.h, DEVELOPERS.md "Status word").
STATUS_READY = 0x01
STATUS_UNCALIBRATED = 0x02
STATUS_INPUT_RAIL = 0x04
STATUS_SATURATED = 0x08


@dataclass
class IntegerRun:
    """Outputs of the integer model and what each node saw."""

    output: I64
    peaks: dict[str, int] = field(default_factory=dict)        # largest |value| per node
    saturations: dict[str, int] = field(default_factory=dict)  # clamps per node
    rail: NDArray[np.bool_] = field(default_factory=lambda: np.zeros(0, dtype=bool))
    """Per output: an input code at the ADC's lowest or highest code since the previous one."""
    clamped: NDArray[np.bool_] = field(default_factory=lambda: np.zeros(0, dtype=bool))
    """Per output: a saturation of the static path changed a value on the way to it."""

    def status(self, *, calibrated: bool) -> I64:
        """The firmware's status word of every output (ht_process's return value)."""
        words = np.full(self.output.size, STATUS_READY, dtype=np.int64)
        words |= np.where(self.rail, STATUS_INPUT_RAIL, 0)
        words |= np.where(self.clamped, STATUS_SATURATED, 0)
        return words | (0 if calibrated else STATUS_UNCALIBRATED)


# ----------------------------------------------------------------------------- kernels


@njit(cache=True)
def _clamp32(v: int) -> int:  # pragma: no cover - compiled
    """sat32 of one int64 (explicit comparisons, as in the C firmware)."""
    if v > INT32_MAX:
        return INT32_MAX
    if v < INT32_MIN:
        return INT32_MIN
    return v


@njit(cache=True)
def _fir(x: I64, taps: I64, frac: int,
         decimation: int) -> tuple[I64, int, int]:  # pragma: no cover - compiled
    n_out = x.size // decimation
    y = np.empty(n_out, dtype=np.int64)
    half = (1 << (frac - 1)) if frac > 0 else 0
    saturated = 0
    peak = 0
    for m in range(n_out):
        n = (m + 1) * decimation - 1
        acc = 0
        top = min(taps.size, n + 1)
        for k in range(top):
            acc += taps[k] * x[n - k]
        r = (acc + half) >> frac
        v = _clamp32(r)
        saturated += v != r
        peak = max(peak, abs(v))
        y[m] = v
    return y, saturated, peak


@njit(cache=True)
def _biquad(x: I64, b0: int, b1: int, b2: int, a1: int, a2: int,
            q: int) -> tuple[I64, int, int]:  # pragma: no cover - compiled
    y = np.empty(x.size, dtype=np.int64)
    half = 1 << (q - 1)
    x1 = 0
    x2 = 0
    y1 = 0
    y2 = 0
    e = 0
    saturated = 0
    peak = 0
    for n in range(x.size):
        acc = b0 * x[n] + b1 * x1 + b2 * x2 - a1 * y1 - a2 * y2 + e
        r = (acc + half) >> q
        v = _clamp32(r)
        saturated += v != r
        e = acc - v * (1 << q)
        x2 = x1
        x1 = x[n]
        y2 = y1
        y1 = v
        peak = max(peak, abs(v))
        y[n] = v
    return y, saturated, peak


def _sat(values: I64, name: str, run: IntegerRun) -> I64:
    clipped = np.clip(values, INT32_MIN, INT32_MAX)
    run.saturations[name] = int(np.count_nonzero(clipped != values))
    run.peaks[name] = int(np.max(np.abs(clipped))) if clipped.size else 0
    return clipped


def _static_sat(values: I64, name: str, run: IntegerRun) -> I64:
    """``_sat`` on a step of the static path, noting which outputs it clamped."""
    clipped = _sat(values, name, run)
    run.clamped = run.clamped | (clipped != values)
    return clipped


# ----------------------------------------------------------------------------- inputs


def _inputs(design: Design, codes: ArrayLike, temps_centi: ArrayLike | None
            ) -> tuple[I64, I64 | None]:
    x = np.asarray(codes, dtype=np.int64)
    if x.ndim != 1 or (x.size and (x.min() < design.code_min or x.max() > design.code_max)):
        raise ValueError(f"codes must be a 1-D array of {design.spec.adc.bits}-bit values")
    if temps_centi is None:
        return x, None
    t = np.asarray(temps_centi, dtype=np.int64)
    if t.shape != x.shape:
        raise ValueError("temperatures must pair one to one with codes")
    return x, t


def _output_temps(design: Design, t: I64 | None, n_out: int) -> I64 | None:
    if t is None:
        return None
    d = design.decimation
    return t[d - 1::d][:n_out]


# ----------------------------------------------------------------------------- integer


def _static_int(design: Design, v: I64, temps: I64 | None, run: IntegerRun) -> I64:
    """Scale, linearise and compensate chain words v (int64 array of int32 values)."""
    c = design.constants
    run.clamped = np.zeros(v.shape, dtype=bool)
    s = _static_sat(round_shift_array(v * np.int64(c.scale_mul), design.scale.shift), "scale",
                    run)
    lin = design.linearisation
    if lin is not None:
        w = s * np.int64(1 << (LIN_FRAC - lin.norm_shift))
        acc = np.full(s.shape, c.lin[-1], dtype=np.int64)
        for coeff in reversed(c.lin[:-1]):
            acc = round_shift_array(acc * w, LIN_FRAC) + np.int64(coeff)
        s = _static_sat(round_shift_array(acc, LIN_FRAC - lin.norm_shift), "linearisation",
                        run)
    tc = design.temperature
    if tc is not None:
        t = np.full(s.shape, tc.reference_centi, dtype=np.int64) if temps is None else temps
        dt = np.clip(t, tc.min_centi, tc.max_centi) - np.int64(tc.reference_centi)
        z = round_shift_array(np.int64(c.tc_zero) * dt, tc.zero_shift)
        s1 = s - z
        g = round_shift_array(np.int64(c.tc_span) * dt, tc.span_shift)
        s = _static_sat(s1 + round_shift_array(s1 * g, LIN_FRAC), "temperature", run)
    return s


def _offset_int(design: Design, x: I64, run: IntegerRun) -> I64:
    d = x * np.int64(1 << design.guard_bits) - np.int64(design.constants.offset)
    return _sat(d, "offset", run)


def run_integer(design: Design, codes: ArrayLike,
                temps_centi: ArrayLike | None = None) -> IntegerRun:
    """The bit-exact integer pipeline on a record of raw codes, from reset."""
    x, t = _inputs(design, codes, temps_centi)
    run = IntegerRun(output=np.empty(0, dtype=np.int64))
    v = _offset_int(design, x, run)
    for i, stage in enumerate(design.stages):
        name = f"stage{i + 1}"
        if isinstance(stage, FirStage):
            taps = np.asarray(stage.taps_int, dtype=np.int64)
            v, sat, peak = _fir(v, taps, stage.fmt.frac, stage.decimation)
            run.saturations[name], run.peaks[name] = int(sat), int(peak)
            continue
        for j, sec in enumerate(stage.sections):
            b0, b1, b2 = (int(b) for b in sec.b_int)
            a1, a2 = (int(a) for a in sec.a_int)
            v, sat, peak = _biquad(v, b0, b1, b2, a1, a2, sec.fmt.frac)
            label = f"{name}.section{j + 1}"
            run.saturations[label], run.peaks[label] = int(sat), int(peak)
    run.output = _static_int(design, v, _output_temps(design, t, v.size), run)
    n_out, d = run.output.size, design.decimation
    run.rail = np.asarray(_at_rail(design, x)[:n_out * d].reshape(n_out, d).any(axis=1),
                          dtype=bool)
    return run


def _at_rail(design: Design, x: I64) -> NDArray[np.bool_]:
    """Per code: at either end of the ADC range (an overloaded converter)."""
    limit = 1 << (design.spec.adc.bits - 1)
    return np.asarray((x <= -limit) | (x >= limit - 1), dtype=bool)


def static_integer(design: Design, codes: ArrayLike,
                   temps_centi: ArrayLike | None = None) -> IntegerRun:
    """The static path alone (a settled DC input: every filter's integer DC gain is 1)."""
    x, t = _inputs(design, codes, temps_centi)
    run = IntegerRun(output=np.empty(0, dtype=np.int64))
    run.output = _static_int(design, _offset_int(design, x, run), t, run)
    run.rail = _at_rail(design, x)
    return run


# ----------------------------------------------------------------------------- float


def _static_float(design: Design, v: F64, temps: I64 | None, constants: UnitConstants,
                  ideal: bool) -> F64:
    scale = design.scale.ideal if ideal else design.scale.realised(constants.scale_mul)
    s = v * scale
    lin = design.linearisation
    if lin is not None:
        coeffs = lin.coeffs if ideal else tuple(c / 2.0 ** LIN_FRAC for c in constants.lin)
        w = s / 2.0 ** lin.norm_shift
        s = np.asarray(np.polynomial.polynomial.polyval(w, coeffs), dtype=np.float64) \
            * 2.0 ** lin.norm_shift
    tc = design.temperature
    if tc is not None:
        t = np.full(s.shape, tc.reference_centi, dtype=np.int64) if temps is None else temps
        dt = (np.clip(t, tc.min_centi, tc.max_centi) - tc.reference_centi).astype(np.float64)
        alpha = tc.realised_zero(constants.tc_zero)
        gamma = tc.realised_span(constants.tc_span)
        s = (s - alpha * dt) * (1.0 + gamma * dt)
    return np.clip(s, INT32_MIN, INT32_MAX)


def run_reference(design: Design, codes: ArrayLike, temps_centi: ArrayLike | None = None,
                  *, ideal: bool = False) -> F64:
    """The float64 reference of the same pipeline: realised constants, or the ideal design.

    Realised: the integer coefficients read as real numbers, no rounding anywhere (the
    proven bound ``design.error_bound_lsb`` applies). Ideal: unquantised filter designs,
    scale and linearisation (``design.ideal_error_bound_lsb`` applies).
    """
    x, t = _inputs(design, codes, temps_centi)
    v = x.astype(np.float64) * 2.0 ** design.guard_bits - float(design.constants.offset)
    for stage in design.stages:
        if isinstance(stage, FirStage):
            taps = np.asarray(stage.taps if ideal else stage.taps_realised, dtype=np.float64)
            full = signal.lfilter(taps, [1.0], v)
            v = full[stage.decimation - 1::stage.decimation][: v.size // stage.decimation]
            continue
        for sec in stage.sections:
            b, a = (sec.b, sec.a) if ideal else (sec.b_realised, sec.a_realised)
            v = signal.lfilter(np.asarray(b, dtype=np.float64), np.asarray(a, dtype=np.float64), v)
    return _static_float(design, np.asarray(v, dtype=np.float64),
                         _output_temps(design, t, v.size), design.constants, ideal)


def static_reference(design: Design, codes: ArrayLike, temps_centi: ArrayLike | None = None,
                     *, ideal: bool = False) -> F64:
    """The float64 static path (settled DC input)."""
    x, t = _inputs(design, codes, temps_centi)
    v = x.astype(np.float64) * 2.0 ** design.guard_bits - float(design.constants.offset)
    return _static_float(design, v, t, design.constants, ideal)
