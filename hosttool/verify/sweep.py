"""The exhaustive static sweep: every ADC code at every temperature step, in one compiled loop.

For each code the loop computes the bit-exact integer static path (``model.static_word``,
the same compiled code as the integer model), the float64 reference (``model.static_value``)
and the error statistics, with no array larger than one chunk's by-bin maxima: largest and
summed |error|, saturations, monotonicity, and, at the first temperature, the largest error
per code bin and the error histogram of the report. With a compiled engine (the C firmware),
its settled outputs of the chunk are compared code by code in the same loop: a three-way
proof (reference, model, firmware) over every code.

The codes are cut into chunks of ``CHUNK`` codes, computed by a pool of threads (the kernel
releases the GIL) and combined in chunk order, so the figures do not depend on the number
of threads. The sum of |error| of each chunk follows numpy's pairwise summation (blocks of
128 with 8 partial sums, halves added recursively), so the mean is the one the earlier
numpy version gave.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from hosttool.design.compiled import njit
from hosttool.design.model import (
    F_GUARD,
    F_OFFSET,
    P_TREF,
    Floats,
    Ints,
    clamp32,
    offset_word,
    static_params,
    static_value,
    static_word,
)
from hosttool.design.resolve import Design

I32 = NDArray[np.int32]
I64 = NDArray[np.int64]
F64 = NDArray[np.float64]

#: A compiled engine's settled outputs: fill out with codes first.. at temp_centi.
SettledEngine = Callable[[int, int, I32], None]

#: Codes per chunk (a power of two: chunks hold whole bins and whole pairwise blocks).
CHUNK = 1 << 18
#: Bins of the error-against-code plot.
STATIC_BINS = 512
#: Bins of the error histogram over [-bound, bound].
HISTOGRAM_BINS = 40
_BLOCK = 128

# Per-chunk integer results, by index.
_I_SAT, _I_MONO, _I_FIRST, _I_LAST, _I_MISMATCH, _I_FIRST_MISMATCH = range(6)


@njit(cache=True, nogil=True)
def _chunk(first: int, count: int, temp: int, has_t: bool, ip: Ints, lin: Ints, fp: Floats,
           flin: Floats, sign: int, bound: float, width: float, per_bin: int, bins: F64,
           hist: I64, expected: I32, compare: bool,
           ints: I64) -> tuple[float, float]:  # pragma: no cover - compiled
    """One chunk of codes first .. first + count - 1 at one temperature.

    Returns (largest |error|, pairwise sum of |error|); fills ``ints`` (saturations,
    monotonic, first and last output, mismatches against ``expected``, index of the first
    mismatch or -1) and, when ``per_bin`` > 0, ``bins`` (largest |error| per bin) and
    ``hist`` (error counts).
    """
    t = temp if has_t else ip[P_TREF]
    max_err = 0.0
    sat_count = 0
    monotonic = True
    mismatches = 0
    first_mismatch = -1
    previous = 0
    first_out = 0
    stack = np.zeros(64, dtype=np.float64)
    levels = np.zeros(64, dtype=np.int64)
    depth = 0
    part = np.zeros(8, dtype=np.float64)
    bin_max = 0.0
    for i in range(count):
        x = first + i
        r = offset_word(x, ip)
        v = clamp32(r)
        out, _scaled, _linearised, sat = static_word(v, t, ip, lin)
        sat_count += (v != r) + (sat & 1) + ((sat >> 1) & 1) + ((sat >> 2) & 1)
        ref = static_value(float(x) * fp[F_GUARD] - fp[F_OFFSET], t, ip, fp, flin)
        err = float(out) - ref
        a = abs(err)
        if a > max_err:
            max_err = a
        # numpy's pairwise summation: 8 partial sums per block of 128
        j = i % _BLOCK
        if j < 8:
            part[j] = a
        else:
            part[j % 8] += a
        if j == _BLOCK - 1:
            s = ((part[0] + part[1]) + (part[2] + part[3])) + \
                ((part[4] + part[5]) + (part[6] + part[7]))
            level = 0
            while depth > 0 and levels[depth - 1] == level:
                depth -= 1
                s = stack[depth] + s
                level += 1
            stack[depth] = s
            levels[depth] = level
            depth += 1
        if i == 0:
            first_out = out
        elif (out - previous) * sign < 0:
            monotonic = False
        previous = out
        if compare and expected[i] != out:
            mismatches += 1
            if first_mismatch < 0:
                first_mismatch = i
        if per_bin > 0:
            if a > bin_max:
                bin_max = a
            if (i + 1) % per_bin == 0:
                bins[i // per_bin] = bin_max
                bin_max = 0.0
            e = min(max(err, -bound), bound)
            k = int((e + bound) / width)
            hist[min(k, hist.size - 1)] += 1
    # a power-of-two count leaves one sum; otherwise add what is left, last first
    total = stack[depth - 1] if depth > 0 else 0.0
    for d in range(depth - 2, -1, -1):
        total = stack[d] + total
    ints[_I_SAT] = sat_count
    ints[_I_MONO] = 1 if monotonic else 0
    ints[_I_FIRST] = first_out
    ints[_I_LAST] = previous
    ints[_I_MISMATCH] = mismatches
    ints[_I_FIRST_MISMATCH] = first_mismatch
    return max_err, total


@dataclass(frozen=True)
class SweepResult:
    """Figures of the sweep over every code at every temperature."""

    codes: int
    temperatures_centi: tuple[int, ...]
    evaluations: int                     # codes x temperatures
    max_error_lsb: float
    mean_abs_error_lsb: float
    saturations: int
    monotonic: bool
    mismatches: dict[str, int]           # per compiled engine: codes where it differs
    first_mismatch: dict[str, tuple[int, int] | None]   # (code, temp_centi)
    max_error_by_bin: F64                # at the first temperature
    error_histogram: tuple[F64, F64]     # (edges, counts) at the first temperature


def _workers() -> int:
    return max(1, len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity")
               else (os.cpu_count() or 1))


def sweep_static(design: Design, temperatures_centi: Sequence[int | None], *,
                 bound: float, engines: dict[str, SettledEngine] | None = None,
                 threads: int | None = None) -> SweepResult:
    """Every code of the ADC at each temperature (None: no temperature input).

    ``bound`` sets the histogram's range; ``engines`` are compared on every code.
    """
    engines = engines or {}
    p = static_params(design)
    lo, hi = design.code_min, design.code_max
    n_codes = hi - lo + 1
    chunk = min(CHUNK, n_codes)
    if n_codes & (n_codes - 1) or n_codes < _BLOCK:
        raise ValueError("the code range must be a power of two of at least 128 codes")
    per_bin = max(1, n_codes // STATIC_BINS)
    width = float(np.linspace(-bound, bound, HISTOGRAM_BINS + 1)[1] + bound)
    sign = 1 if design.constants.scale_mul >= 0 else -1
    by_bin = np.zeros(STATIC_BINS)
    tasks = [(k, temp, start) for k, temp in enumerate(temperatures_centi)
             for start in range(0, n_codes, chunk)]
    no_expected = np.zeros(1, dtype=np.int32)

    def run(task: tuple[int, int | None, int]) -> tuple[float, float, I64, F64, I64,
                                                        dict[str, tuple[int, int]]]:
        k, temp, start = task
        first = lo + start
        count = min(chunk, n_codes - start)
        want = k == 0
        bins = np.zeros(count // per_bin if want else 1)
        hist = np.zeros(HISTOGRAM_BINS, dtype=np.int64)
        t = 0 if temp is None else int(temp)
        ints = np.zeros(6, dtype=np.int64)
        engine_ints: dict[str, tuple[int, int]] = {}
        expected = no_expected
        tref = int(p.ints[P_TREF])
        for j, (name, engine) in enumerate(engines.items()):
            buffer = np.empty(count, dtype=np.int32)
            engine(first, t if temp is not None else tref, buffer)
            if j == 0:
                expected = buffer
            elif not np.array_equal(buffer, expected):
                # compared with the first engine; the kernel compares that one with the model
                at = int(np.flatnonzero(buffer != expected)[0])
                engine_ints[name] = (int(np.count_nonzero(buffer != expected)), at)
        m, s = _chunk(first, count, t, temp is not None, p.ints, p.lin, p.floats, p.flin,
                      sign, bound, width, per_bin if want else 0, bins, hist, expected,
                      bool(engines), ints)
        for j, name in enumerate(engines):
            if j == 0 or name not in engine_ints:
                engine_ints[name] = (int(ints[_I_MISMATCH]), int(ints[_I_FIRST_MISMATCH]))
        return m, s, ints.copy(), bins, hist, engine_ints

    with ThreadPoolExecutor(max_workers=threads or _workers()) as pool:
        results = list(pool.map(run, tasks))

    max_err, abs_sum, saturations, monotonic = 0.0, 0.0, 0, True
    hist_total = np.zeros(HISTOGRAM_BINS)
    mismatches = dict.fromkeys(engines, 0)
    first_bad: dict[str, tuple[int, int] | None] = dict.fromkeys(engines)
    previous: tuple[int, int] | None = None     # (sweep, last output)
    for (k, temp, start), (m, s, ints, bins, hist, engine_ints) in zip(tasks, results,
                                                                      strict=True):
        max_err = max(max_err, m)
        abs_sum += s
        saturations += int(ints[_I_SAT])
        monotonic &= bool(ints[_I_MONO])
        if previous is not None and previous[0] == k:
            monotonic &= (int(ints[_I_FIRST]) - previous[1]) * sign >= 0
        previous = (k, int(ints[_I_LAST]))
        if k == 0:
            first_bin = start // per_bin
            by_bin[first_bin:first_bin + bins.size] = bins
            hist_total += hist
        for name, (bad, at) in engine_ints.items():
            mismatches[name] += bad
            if at >= 0 and first_bad[name] is None:
                first_bad[name] = (lo + start + at, 0 if temp is None else int(temp))
    temps = tuple(int(t) for t in temperatures_centi if t is not None)
    evaluations = n_codes * len(temperatures_centi)
    return SweepResult(
        codes=n_codes, temperatures_centi=temps, evaluations=evaluations,
        max_error_lsb=max_err, mean_abs_error_lsb=abs_sum / evaluations,
        saturations=saturations, monotonic=monotonic, mismatches=mismatches,
        first_mismatch=first_bad, max_error_by_bin=by_bin,
        error_histogram=(np.linspace(-bound, bound, HISTOGRAM_BINS + 1), hist_total))
