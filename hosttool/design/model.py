"""One Design run two ways: a float64 reference and the bit-exact integer model.

The integer model follows DEVELOPERS.md "Arithmetic contract" operation by operation; the C
reference firmware must give the same integers. The whole integer chain (offset, filter
cascade, scale, linearisation, temperature) runs as one compiled function (numba) per
record, in exact integer arithmetic (the design proves nothing overflows): the one compiled
for the cascade's shape (chain.py: stage by stage over blocks of inputs, vectorised but for
the biquad recursion), or without a cache folder the generic loop
``_chain_run``, which gives the same integers. The static path is one compiled function
(``static_word``); the exhaustive sweep (verify/sweep.py) runs the same operations in the
form a sweep at one temperature allows, held to them by its tests.

Both run a record from reset (all filter state zero). Inputs: raw codes (sign-extended ADC
codes) and optionally temperatures in 0.01 C, one per code; outputs: one value per output
sample (after decimation), in output LSB. The temperature paired with an output is the one
given with the code that completed it.

The float64 reference computes what it always did, in the same order of operations: an FIR
as ``numpy.convolve`` of the taps with the record (what ``scipy.signal.lfilter`` does for an
FIR), a biquad as the transposed direct form II recursion of ``scipy.signal.lfilter``
(``_iir_reference``; the tests hold it bit for bit to scipy), then the static path. scipy is
not imported here: verifying a cached design needs no filter design.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from hosttool.design.cached import cache_folder
from hosttool.design.chain import compiled_chain
from hosttool.design.compiled import njit
from hosttool.design.filters import FirStage
from hosttool.design.fixedpoint import INT32_MAX, INT32_MIN
from hosttool.design.resolve import LIN_FRAC, Design, UnitConstants
from hosttool.design.static_stack import checked_inputs, record_arrays
from hosttool.errors import HostToolError

I64 = NDArray[np.int64]
F64 = NDArray[np.float64]
Ints = tuple[int, ...]
Floats = tuple[float, ...]

# Integer parameters of the static path (StaticParams.ints), by index.
P_GUARD, P_OFFSET, P_MUL, P_SHIFT, P_HAS_LIN, P_LIN_SHIFT = 0, 1, 2, 3, 4, 5
P_HAS_TC, P_TREF, P_TMIN, P_TMAX, P_KZ, P_SZ, P_KS, P_SS = 6, 7, 8, 9, 10, 11, 12, 13
P_CODE_LOW, P_CODE_HIGH = 14, 15
# The integer parameters that are a unit's constants (field of UnitConstants and of
# ConstantsStack), the temperature coefficients only with temperature compensation.
UNIT_INTS = ((P_OFFSET, "offset"), (P_MUL, "scale_mul"))
UNIT_TC_INTS = ((P_KZ, "tc_zero"), (P_KS, "tc_span"))
# Float parameters of the static reference (StaticParams.floats), by index.
F_GUARD, F_OFFSET, F_SCALE, F_NORM, F_ALPHA, F_GAMMA = 0, 1, 2, 3, 4, 5
# Cascade blocks: one per FIR stage or biquad section.
BLOCK_FIR, BLOCK_BIQUAD = 0, 1


#: Bits of the firmware's status word (ht_pipeline.h, DEVELOPERS.md "Status word").
STATUS_READY = 0x01
STATUS_UNCALIBRATED = 0x02
STATUS_INPUT_RAIL = 0x04
STATUS_SATURATED = 0x08
# Per-output flags of the compiled kernels.
_FLAG_RAIL, _FLAG_CLAMPED = 1, 2


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


@dataclass(frozen=True)
class StaticParams:
    """The static path's constants as the compiled kernels take them (tuples: values, so
    passing them to a compiled helper per code costs no reference counting).

    ``ints``: guard bits, offset, scale multiplier and shift, linearisation flag and
    30 - K, temperature flag, reference, clamp range (0.01 C), Kz, Sz, Ks, Ss, lowest and
    highest ADC code (indices ``P_*``); ``lin``: C_0 .. C_n (Q30 integers; one zero
    without linearisation); ``floats``: 2^G, offset, the scale (realised or ideal), 2^K,
    alpha and gamma of the temperature step (indices ``F_*``); ``flin``: the reference's
    polynomial coefficients (realised C_k / 2^30, or ideal).
    """

    ints: tuple[int, ...]
    lin: tuple[int, ...]
    floats: tuple[float, ...]
    flin: tuple[float, ...]


def static_params(design: Design, *, ideal: bool = False,
                  constants: UnitConstants | None = None) -> StaticParams:
    """The kernels' parameters for ``design``'s constants in force, or for ``constants``
    (checked by the caller: ``Design.check_in_force``); ``ideal``: reference of the
    unquantised scale and linearisation."""
    c = design.constants if constants is None else constants
    lin, tc = design.linearisation, design.temperature
    ints = [0] * 16
    ints[P_CODE_LOW], ints[P_CODE_HIGH] = design.code_min, design.code_max
    floats = [0.0] * 6
    ints[P_GUARD], ints[P_SHIFT] = design.guard_bits, design.scale.shift
    for i, name in UNIT_INTS + (UNIT_TC_INTS if tc is not None else ()):
        ints[i] = getattr(c, name)
    floats[F_GUARD], floats[F_OFFSET] = 2.0 ** design.guard_bits, float(c.offset)
    floats[F_SCALE] = design.scale.ideal if ideal else design.scale.realised(c.scale_mul)
    lin_int: tuple[int, ...] = (0,)
    flin: tuple[float, ...] = (0.0,)
    if lin is not None:
        ints[P_HAS_LIN], ints[P_LIN_SHIFT] = 1, LIN_FRAC - lin.norm_shift
        floats[F_NORM] = 2.0 ** lin.norm_shift
        lin_int = tuple(map(int, c.lin))
        flin = tuple(map(float, lin.coeffs)) if ideal else tuple(
            k / 2.0 ** LIN_FRAC for k in c.lin)
    if tc is not None:
        ints[P_HAS_TC], ints[P_TREF] = 1, tc.reference_centi
        ints[P_TMIN], ints[P_TMAX] = tc.min_centi, tc.max_centi
        ints[P_SZ], ints[P_SS] = tc.zero_shift, tc.span_shift
        floats[F_ALPHA] = tc.realised_zero(c.tc_zero)
        floats[F_GAMMA] = tc.realised_span(c.tc_span)
    return StaticParams(tuple(map(int, ints)), lin_int, tuple(map(float, floats)), flin)


# ----------------------------------------------------------------------------- kernels


@njit(cache=True, nogil=True)
def clamp32(v: int) -> int:  # pragma: no cover - compiled
    """sat32 of one int64 (explicit comparisons, as in the C firmware)."""
    if v > INT32_MAX:
        return INT32_MAX
    if v < INT32_MIN:
        return INT32_MIN
    return v


@njit(cache=True, nogil=True)
def round_shift(x: int, k: int) -> int:  # pragma: no cover - compiled
    """(x + 2^(k-1)) >> k with an arithmetic shift; the identity for k = 0.

    Written without a branch: (2^k) >> 1 is 2^(k-1), and 0 for k = 0 (x + 0) >> 0 = x."""
    return int((x + ((np.int64(1) << k) >> 1)) >> k)


@njit(cache=True, nogil=True)
def offset_word(x: int, ip: Ints) -> int:  # pragma: no cover - compiled
    """Step 1 before its saturation: x * 2^G - offset (int64)."""
    return int(x * (np.int64(1) << ip[P_GUARD]) - ip[P_OFFSET])


@njit(cache=True, nogil=True)
def static_word(v: int, t: int, ip: Ints,
                lin: Ints) -> tuple[int, int, int, int]:  # pragma: no cover - compiled
    """Steps 3 to 5 on one chain word v at temperature t (0.01 C).

    Returns (output, value after the scale, value after the linearisation, saturations)
    where saturations has bit 0 for the scale, 1 for the linearisation, 2 for the
    temperature step.
    """
    r = round_shift(v * ip[P_MUL], ip[P_SHIFT])
    s = clamp32(r)
    sat = 1 if s != r else 0
    scaled = s
    if ip[P_HAS_LIN]:
        k = ip[P_LIN_SHIFT]
        w = s * (1 << k)
        acc = int(lin[len(lin) - 1])
        for i in range(len(lin) - 2, -1, -1):
            acc = round_shift(acc * w, LIN_FRAC) + lin[i]
        r = round_shift(acc, k)
        s = clamp32(r)
        if s != r:
            sat |= 2
    linearised = s
    if ip[P_HAS_TC]:
        tt = min(max(t, ip[P_TMIN]), ip[P_TMAX])
        dt = tt - ip[P_TREF]
        z = round_shift(ip[P_KZ] * dt, ip[P_SZ])
        s1 = s - z
        g = round_shift(ip[P_KS] * dt, ip[P_SS])
        r = s1 + round_shift(s1 * g, LIN_FRAC)
        s = clamp32(r)
        if s != r:
            sat |= 4
    return s, scaled, linearised, sat


@njit(cache=True, nogil=True)
def static_value(v: float, t: int, ip: Ints, fp: Floats,
                 flin: Floats) -> float:  # pragma: no cover - compiled
    """The float64 static path of chain value v, in the order numpy computed it before:
    v * scale, numpy.polynomial.polynomial.polyval's Horner loop, (s - alpha dT)(1 + gamma
    dT), clipped to the int32 range."""
    s = v * fp[F_SCALE]
    if ip[P_HAS_LIN]:
        w = s / fp[F_NORM]
        c0 = flin[len(flin) - 1] + w * 0.0
        for i in range(len(flin) - 2, -1, -1):
            c0 = flin[i] + c0 * w
        s = c0 * fp[F_NORM]
    if ip[P_HAS_TC]:
        dt = float(min(max(t, ip[P_TMIN]), ip[P_TMAX]) - ip[P_TREF])
        s = (s - fp[F_ALPHA] * dt) * (1.0 + fp[F_GAMMA] * dt)
    if s > INT32_MAX:
        return float(INT32_MAX)
    if s < INT32_MIN:
        return float(INT32_MIN)
    return s


@njit(cache=True, nogil=True)
def _static_run(x: I64, t: I64, has_t: bool, ip: Ints,
                lin: Ints) -> tuple[I64, I64, I64, NDArray[np.int8]]:  # pragma: no cover
    """Offset and static path on every code; per-node peaks and saturations
    (offset, scale, linearisation, temperature); per code its flags (rail, clamped)."""
    out = np.empty(x.size, dtype=np.int64)
    flags = np.zeros(x.size, dtype=np.int8)
    p0 = p1 = p2 = p3 = s0 = s1 = s2 = s3 = 0
    for n in range(x.size):
        r = offset_word(x[n], ip)
        v = clamp32(r)
        s0 += v != r
        p0 = max(p0, abs(v))
        s, scaled, linearised, sat = static_word(v, t[n] if has_t else ip[P_TREF], ip, lin)
        p1 = max(p1, abs(scaled))
        p2 = max(p2, abs(linearised))
        p3 = max(p3, abs(s))
        s1 += sat & 1
        s2 += (sat >> 1) & 1
        s3 += (sat >> 2) & 1
        out[n] = s
        flags[n] = (_FLAG_RAIL if x[n] <= ip[P_CODE_LOW] or x[n] >= ip[P_CODE_HIGH] else 0) \
            | (_FLAG_CLAMPED if sat else 0)
    peaks = np.array([p0, p1, p2, p3], dtype=np.int64)
    sats = np.array([s0, s1, s2, s3], dtype=np.int64)
    return out, peaks, sats, flags


@njit(cache=True, nogil=True)
def _chain_run(x: I64, t: I64, has_t: bool, ip: Ints, lin: Ints, kinds: I64, blocks: I64,
               taps: I64, decimation: int
               ) -> tuple[I64, I64, I64, NDArray[np.int8]]:  # pragma: no cover
    """The whole integer chain, sample by sample, from reset.

    ``kinds[b]`` is BLOCK_FIR or BLOCK_BIQUAD; ``blocks[b]`` holds (first tap, taps, frac,
    decimation) of an FIR or (b0, b1, b2, a1, a2, q) of a biquad section. Node statistics:
    offset, one per block, scale, linearisation, temperature; per output its flags (an
    input at the rail since the previous output, a clamp of the static path).
    """
    nb = kinds.size
    out = np.empty(x.size // decimation, dtype=np.int64)
    flags = np.zeros(x.size // decimation, dtype=np.int8)
    rail = 0
    peaks = np.zeros(nb + 4, dtype=np.int64)
    sats = np.zeros(nb + 4, dtype=np.int64)
    # FIR delay lines stored twice (line[pos + k] is x[n - k] without wrapping)
    line = np.zeros(2 * max(taps.size, 1), dtype=np.int64)
    pos = np.zeros(nb, dtype=np.int64)
    phase = np.zeros(nb, dtype=np.int64)
    state = np.zeros((nb, 5), dtype=np.int64)     # x1, x2, y1, y2, e of each section
    m = 0
    p0 = p1 = p2 = p3 = s0 = s1 = s2 = s3 = 0
    for n in range(x.size):
        r = offset_word(x[n], ip)
        v = clamp32(r)
        s0 += v != r
        p0 = max(p0, abs(v))
        if x[n] <= ip[P_CODE_LOW] or x[n] >= ip[P_CODE_HIGH]:
            rail = _FLAG_RAIL
        ready = True
        for b in range(nb):
            if kinds[b] == BLOCK_FIR:
                first, length = blocks[b, 0], blocks[b, 1]
                at = pos[b] - 1 if pos[b] > 0 else length - 1
                base = 2 * first + at
                line[base] = v
                line[base + length] = v
                pos[b] = at
                phase[b] += 1
                if phase[b] < blocks[b, 3]:
                    ready = False
                    break
                phase[b] = 0
                acc = 0
                for k in range(length):
                    acc += taps[first + k] * line[base + k]
                r = round_shift(acc, blocks[b, 2])
            else:
                q = blocks[b, 5]
                x1, x2, y1, y2 = state[b, 0], state[b, 1], state[b, 2], state[b, 3]
                acc = (blocks[b, 0] * v + blocks[b, 1] * x1 + blocks[b, 2] * x2
                       - blocks[b, 3] * y1 - blocks[b, 4] * y2 + state[b, 4])
                r = round_shift(acc, q)
                y = clamp32(r)
                state[b, 4] = acc - y * (np.int64(1) << q)
                state[b, 0], state[b, 1], state[b, 2], state[b, 3] = v, x1, y, y1
            v = clamp32(r)
            sats[b + 1] += v != r
            peaks[b + 1] = max(peaks[b + 1], abs(v))
        if not ready:
            continue
        s, scaled, linearised, sat = static_word(v, t[n] if has_t else ip[P_TREF], ip, lin)
        p1 = max(p1, abs(scaled))
        p2 = max(p2, abs(linearised))
        p3 = max(p3, abs(s))
        s1 += sat & 1
        s2 += (sat >> 1) & 1
        s3 += (sat >> 2) & 1
        out[m] = s
        flags[m] = rail | (_FLAG_CLAMPED if sat else 0)
        rail = 0
        m += 1
    peaks[0], sats[0] = p0, s0
    peaks[nb + 1], peaks[nb + 2], peaks[nb + 3] = p1, p2, p3
    sats[nb + 1], sats[nb + 2], sats[nb + 3] = s1, s2, s3
    return out, peaks, sats, flags


@njit(cache=True, nogil=True)
def _static_values(v: F64, t: I64, has_t: bool, ip: Ints, fp: Floats,
                   flin: Floats) -> F64:  # pragma: no cover - compiled
    out = np.empty(v.size, dtype=np.float64)
    for n in range(v.size):
        out[n] = static_value(v[n], t[n] if has_t else ip[P_TREF], ip, fp, flin)
    return out


@njit(cache=True, nogil=True)
def _iir_reference(b: F64, a: F64, x: F64) -> F64:  # pragma: no cover - compiled
    """scipy.signal.lfilter's recursion (transposed direct form II, a[0] == 1), in its
    order of operations, from zero state."""
    n = b.size
    z = np.zeros(n, dtype=np.float64)
    y = np.empty(x.size, dtype=np.float64)
    for k in range(x.size):
        xn = x[k]
        yn = z[0] + b[0] * xn
        for i in range(n - 2):
            z[i] = z[i + 1] + xn * b[i + 1] - yn * a[i + 1]
        z[n - 2] = xn * b[n - 1] - yn * a[n - 1]
        y[k] = yn
    return y


# ----------------------------------------------------------------------------- inputs


def _output_temps(design: Design, t: I64 | None, n_out: int) -> I64 | None:
    if t is None:
        return None
    d = design.decimation
    return np.ascontiguousarray(t[d - 1::d][:n_out])


_NO_TEMPS = np.zeros(0, dtype=np.int64)


def _static_names(design: Design) -> list[tuple[int, str]]:
    """(index in the kernels' static statistics, node name) of the nodes present."""
    names = [(1, "scale")]
    if design.linearisation is not None:
        names.append((2, "linearisation"))
    if design.temperature is not None:
        names.append((3, "temperature"))
    return names


@dataclass(frozen=True)
class Cascade:
    """The filter cascade as the compiled chain takes it (see ``_chain_run``)."""

    kinds: I64
    blocks: I64
    taps: I64
    names: tuple[str, ...]


def cascade_arrays(design: Design) -> Cascade:
    """The design's FIR stages and biquad sections as flat integer arrays, in order."""
    kinds: list[int] = []
    blocks: list[list[int]] = []
    taps: list[int] = []
    names: list[str] = []
    for i, stage in enumerate(design.stages):
        name = f"stage{i + 1}"
        if isinstance(stage, FirStage):
            kinds.append(BLOCK_FIR)
            blocks.append([len(taps), len(stage.taps_int), stage.fmt.frac, stage.decimation,
                           0, 0])
            taps.extend(int(h) for h in stage.taps_int)
            names.append(name)
            continue
        for j, sec in enumerate(stage.sections):
            kinds.append(BLOCK_BIQUAD)
            blocks.append([*(int(b) for b in sec.b_int), *(int(a) for a in sec.a_int),
                           sec.fmt.frac])
            names.append(f"{name}.section{j + 1}")
    return Cascade(np.asarray(kinds, dtype=np.int64),
                   np.asarray(blocks, dtype=np.int64).reshape(len(blocks), 6),
                   np.asarray(taps, dtype=np.int64), tuple(names))


# ----------------------------------------------------------------------------- integer


def _specialised_chain(c: Cascade) -> Callable[..., Any] | None:
    """The chain compiled for this cascade's shape (chain.py), or None without a cache
    folder to keep it in (the generic loop then runs: same arithmetic, slower)."""
    folder = cache_folder()
    if folder is None:
        return None
    shape = tuple(("fir", int(b[1]), int(b[3])) if k == BLOCK_FIR else ("biquad", 0, 1)
                  for k, b in zip(c.kinds, c.blocks, strict=True))
    try:
        return compiled_chain(shape, folder.parent / "kernels")
    except (OSError, HostToolError):
        return None


def run_integer(design: Design, codes: ArrayLike,
                temps_centi: ArrayLike | None = None) -> IntegerRun:
    """The bit-exact integer pipeline on a record of raw codes, from reset."""
    c = cascade_arrays(design)
    specialised = _specialised_chain(c)
    taps32 = c.taps.astype(np.int32)
    if specialised is None or not np.array_equal(taps32, c.taps):
        return _run_generic(design, c, codes, temps_centi)
    x, t = record_arrays(design, codes, temps_centi)
    p = static_params(design)
    shifts = tuple(int(b[2]) if k == BLOCK_FIR else int(b[5])
                   for k, b in zip(c.kinds, c.blocks, strict=True))
    coeffs = tuple(int(v) for k, b in zip(c.kinds, c.blocks, strict=True)
                   if k == BLOCK_BIQUAD for v in b[:5]) or (0,)
    # the kernel finds the lowest and highest code in passing (a record outside the ADC's
    # range is refused all the same, its figures never returned)
    out, rail, clamped, peaks, sats, low, high = specialised(
        x, _NO_TEMPS if t is None else t, t is not None, p.ints, p.lin, taps32,
        shifts or (0,), coeffs)
    if x.size and (low < design.code_min or high > design.code_max):
        checked_inputs(design, x, t)          # raises its ValueError
    return _named(design, c, IntegerRun(output=out, rail=rail, clamped=clamped), peaks, sats)


def _run_generic(design: Design, c: Cascade, codes: ArrayLike,
                 temps_centi: ArrayLike | None) -> IntegerRun:
    """run_integer through the generic loop (``_chain_run``)."""
    x, t = checked_inputs(design, codes, temps_centi)
    p = static_params(design)
    out, peaks, sats, flags = _chain_run(x, _NO_TEMPS if t is None else t, t is not None,
                                         p.ints, p.lin, c.kinds, c.blocks, c.taps,
                                         design.decimation)
    run = IntegerRun(output=out, rail=(flags & _FLAG_RAIL) != 0,
                     clamped=(flags & _FLAG_CLAMPED) != 0)
    return _named(design, c, run, peaks, sats)


def _named(design: Design, c: Cascade, run: IntegerRun, peaks: I64, sats: I64
           ) -> IntegerRun:
    """``run`` with the kernels' per-node peaks and saturation counts under node names."""
    nb = len(c.names)
    names = [(0, "offset"), *((b + 1, name) for b, name in enumerate(c.names)),
             *((nb + i, name) for i, name in _static_names(design))]
    for i, name in names:
        run.saturations[name], run.peaks[name] = int(sats[i]), int(peaks[i])
    return run


def static_integer(design: Design, codes: ArrayLike, temps_centi: ArrayLike | None = None,
                   *, constants: UnitConstants | None = None) -> IntegerRun:
    """The static path alone (a settled DC input: every filter's integer DC gain is 1),
    with the design's constants in force or with ``constants`` (one unit's, checked by the
    caller with ``Design.check_in_force``: the same outputs as ``static_integer`` of
    ``design.with_constants(constants)``, without building that design)."""
    x, t = checked_inputs(design, codes, temps_centi)
    p = static_params(design, constants=constants)
    out, peaks, sats, flags = _static_run(x, _NO_TEMPS if t is None else t, t is not None,
                                          p.ints, p.lin)
    run = IntegerRun(output=out, rail=(flags & _FLAG_RAIL) != 0,
                     clamped=(flags & _FLAG_CLAMPED) != 0)
    sat_list, peak_list = sats.tolist(), peaks.tolist()
    for i, name in [(0, "offset"), *_static_names(design)]:
        run.saturations[name], run.peaks[name] = sat_list[i], peak_list[i]
    return run


# ----------------------------------------------------------------------------- float


def _static_float(design: Design, v: F64, temps: I64 | None, ideal: bool) -> F64:
    p = static_params(design, ideal=ideal)
    return _static_values(np.ascontiguousarray(v, dtype=np.float64),
                          _NO_TEMPS if temps is None else temps, temps is not None,
                          p.ints, p.floats, p.flin)


def _chain_input(design: Design, x: I64) -> F64:
    return x.astype(np.float64) * 2.0 ** design.guard_bits - float(design.constants.offset)


def run_reference(design: Design, codes: ArrayLike, temps_centi: ArrayLike | None = None,
                  *, ideal: bool = False) -> F64:
    """The float64 reference of the same pipeline: realised constants, or the ideal design.

    Realised: the integer coefficients read as real numbers, no rounding anywhere (the
    proven bound ``design.error_bound_lsb`` applies). Ideal: unquantised filter designs,
    scale and linearisation (``design.ideal_error_bound_lsb`` applies).
    """
    x, t = checked_inputs(design, codes, temps_centi)
    v = _chain_input(design, x)
    for stage in design.stages:
        if isinstance(stage, FirStage):
            taps = np.asarray(stage.taps if ideal else stage.taps_realised, dtype=np.float64)
            full = np.convolve(taps, v)[: v.size]
            v = full[stage.decimation - 1::stage.decimation][: v.size // stage.decimation]
            continue
        for sec in stage.sections:
            b, a = (sec.b, sec.a) if ideal else (sec.b_realised, sec.a_realised)
            a0 = float(a[0])
            v = _iir_reference(np.asarray(b, dtype=np.float64) / a0,
                               np.asarray(a, dtype=np.float64) / a0,
                               np.ascontiguousarray(v, dtype=np.float64))
    return _static_float(design, v, _output_temps(design, t, v.size), ideal)


def static_reference(design: Design, codes: ArrayLike, temps_centi: ArrayLike | None = None,
                     *, ideal: bool = False) -> F64:
    """The float64 static path (settled DC input)."""
    x, t = checked_inputs(design, codes, temps_centi)
    return _static_float(design, _chain_input(design, x), t, ideal)


def static_reference_real(design: Design, codes: ArrayLike,
                          temps_centi: ArrayLike | None = None) -> F64:
    """The float64 static path of real-valued codes: what the pipeline, with the constants
    in force and no rounding anywhere, reads from an exact (unquantised) ADC input."""
    x = np.asarray(codes, dtype=np.float64)
    t = None if temps_centi is None else np.asarray(temps_centi, dtype=np.int64)
    v = x * 2.0 ** design.guard_bits - float(design.constants.offset)
    return _static_float(design, v, t, False)
