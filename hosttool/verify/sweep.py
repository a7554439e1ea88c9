"""The exhaustive static sweep: every ADC code at every temperature step, in one compiled loop.

For each code the loop computes the bit-exact integer static path and its float64 reference
(the operations of ``model.static_word`` and ``model.static_value``, in their order) and the
error statistics, with no array larger than one chunk's by-bin maxima: largest and summed
|error|, saturations, monotonicity, and, at the first temperature, the largest error per
code bin and the error histogram of the report. With a compiled engine (the C firmware),
its settled outputs of the chunk are compared code by code in the same loop: a three-way
proof (reference, model, firmware) over every code.

The loop is written in the form a sweep at one temperature allows, so that the compiler
vectorises it: the temperature step's terms computed once, clamps as min and max, each
rounding shift with its half computed once; an identity of the same integers and floats,
not an approximation (tests/test_static_sweep.py holds it to the contract on every code,
at the calibration loader's edges and beyond them).

The codes are cut into chunks of ``CHUNK`` codes, computed by threads (the kernel releases
the GIL) a few chunks at a time and combined in chunk order, so the figures do not depend
on the number of threads. The sum of |error| of each chunk follows numpy's pairwise
summation (blocks of 128 with 8 partial sums, halves added recursively), so the mean is
the one the earlier numpy version gave. A ``StaticSweep`` starts its threads at once and
lets the caller do other work before it joins them (``verify`` runs its dynamic tests
meanwhile).
"""

from __future__ import annotations

import itertools
import os
import threading
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from hosttool.design.compiled import njit
from hosttool.design.fixedpoint import INT32_MAX, INT32_MIN
from hosttool.design.model import (
    F_ALPHA,
    F_GAMMA,
    F_GUARD,
    F_NORM,
    F_OFFSET,
    F_SCALE,
    P_GUARD,
    P_HAS_LIN,
    P_HAS_TC,
    P_KS,
    P_KZ,
    P_LIN_SHIFT,
    P_MUL,
    P_OFFSET,
    P_SHIFT,
    P_SS,
    P_SZ,
    P_TMAX,
    P_TMIN,
    P_TREF,
    Floats,
    Ints,
    static_params,
)
from hosttool.design.resolve import LIN_FRAC, Design

I32 = NDArray[np.int32]
I64 = NDArray[np.int64]
F64 = NDArray[np.float64]

#: A compiled engine's settled outputs: fill out with codes first.. at temp_centi.
SettledEngine = Callable[[int, int, I32], None]

#: Codes per chunk (a power of two: chunks hold whole bins and whole pairwise blocks).
CHUNK = 1 << 18
#: Chunks per task of a thread (a task of hive_scale takes a few milliseconds).
TASK_CHUNKS = 4
#: Bins of the error-against-code plot.
STATIC_BINS = 512
#: Bins of the error histogram over [-bound, bound].
HISTOGRAM_BINS = 40
_BLOCK = 128
_NO_EXPECTED = np.zeros(1, dtype=np.int32)

# Per-chunk integer results, by index.
_I_SAT, _I_MONO, _I_FIRST, _I_LAST, _I_MISMATCH, _I_FIRST_MISMATCH = range(6)


# The kernel calls no compiled function of another module: numba keys a cached kernel on
# its own file alone, so an edit of model.py could otherwise leave a stale kernel here.


@njit(cache=True, nogil=True)
def _sat32(v: int) -> int:  # pragma: no cover - compiled
    """sat32: v clamped to the int32 range."""
    return min(max(v, INT32_MIN), INT32_MAX)


@njit(cache=True, nogil=True)
def _round_shift(x: int, k: int) -> int:  # pragma: no cover - compiled
    """(x + 2^(k-1)) >> k, arithmetic; (2^k) >> 1 is the half, 0 for k = 0."""
    return (x + ((1 << k) >> 1)) >> k


# error_model="numpy": no test for a zero divisor in the loop (2^K and the histogram's bin
# width are never zero); no other operation changes
@njit(cache=True, nogil=True, error_model="numpy")
def _sweep(first: int, chunks: int, chunk: int, t: int, ip: Ints, lin: Ints, fp: Floats,
           flin: Floats, sign: int, bound: float, width: float, per_bin: int, bins: F64,
           hist: I64, expected: I32, compare: bool, ints: I64,
           sums: F64) -> float:  # pragma: no cover - compiled
    """``chunks`` chunks of ``chunk`` codes from ``first`` on, at temperature ``t`` (0.01 C).

    The static path of every code (DEVELOPERS.md, "Arithmetic contract", steps 1 and 3 to
    5) and its float64 reference (``model.static_value``'s operations, in its order), in
    blocks of ``_BLOCK`` codes: a block's outputs and errors in one loop with no branch that
    depends on the code (the temperature step's terms computed once for the sweep, clamps
    as min and max, a rounding shift as (x + (2^k >> 1)) >> k, the half 0 for k = 0), so
    the compiler can vectorise it; then the block's statistics. ``lin`` is empty without
    linearisation. Returns the largest |error|; fills ``sums`` (each chunk's pairwise sum
    of |error|), ``ints`` (see ``_I_*``) and, when ``per_bin`` > 0, ``bins`` (largest
    |error| per bin of ``per_bin`` codes, a multiple of ``_BLOCK``) and ``hist`` (error
    counts over [-bound, bound] in bins of ``width``).
    """
    outs = np.empty(_BLOCK, dtype=np.int64)
    errs = np.empty(_BLOCK, dtype=np.float64)
    slots = np.empty(_BLOCK, dtype=np.int64)
    counts = np.zeros((hist.size, 4), dtype=np.int64)
    stack = np.zeros(64, dtype=np.float64)
    levels = np.zeros(64, dtype=np.int64)
    # the temperature step's terms at t; without one, terms that leave every value as it is
    z, g, alpha_dt, gain = 0, 0, 0.0, 1.0
    if ip[P_HAS_TC]:
        dt = min(max(t, ip[P_TMIN]), ip[P_TMAX]) - ip[P_TREF]
        z = _round_shift(ip[P_KZ] * dt, ip[P_SZ])
        g = _round_shift(ip[P_KS] * dt, ip[P_SS])
        alpha_dt = fp[F_ALPHA] * float(dt)
        gain = 1.0 + fp[F_GAMMA] * float(dt)
    guard, offset, mul, shift = ip[P_GUARD], ip[P_OFFSET], ip[P_MUL], ip[P_SHIFT]
    half = (1 << shift) >> 1
    k = ip[P_LIN_SHIFT]
    k_half = (1 << k) >> 1
    lin_half = 1 << (LIN_FRAC - 1)
    f_guard, f_offset, f_scale, f_norm = fp[F_GUARD], fp[F_OFFSET], fp[F_SCALE], fp[F_NORM]
    n_lin = len(lin)
    max_err = 0.0
    sat_count = 0
    breaks = 0
    mismatches = 0
    first_mismatch = -1
    previous = 0
    bin_max = 0.0
    top = hist.size - 1
    for c in range(chunks):
        depth = 0
        for base in range(c * chunk, (c + 1) * chunk, _BLOCK):
            sats = 0
            for j in range(_BLOCK):
                x = first + base + j
                r = x * (1 << guard) - offset
                v = _sat32(r)
                sats += v != r
                r = (v * mul + half) >> shift
                s = _sat32(r)
                sats += s != r
                ref = (float(x) * f_guard - f_offset) * f_scale
                if n_lin > 0:
                    w = s * (1 << k)
                    acc = lin[n_lin - 1]
                    for i in range(n_lin - 2, -1, -1):
                        acc = ((acc * w + lin_half) >> LIN_FRAC) + lin[i]
                    r = (acc + k_half) >> k
                    s = _sat32(r)
                    sats += s != r
                    wf = ref / f_norm
                    c0 = flin[n_lin - 1] + wf * 0.0
                    for i in range(n_lin - 2, -1, -1):
                        c0 = flin[i] + c0 * wf
                    ref = c0 * f_norm
                s1 = s - z
                r = s1 + ((s1 * g + lin_half) >> LIN_FRAC)
                s = _sat32(r)
                sats += s != r
                ref = min(max((ref - alpha_dt) * gain, float(INT32_MIN)), float(INT32_MAX))
                outs[j] = s
                errs[j] = float(s) - ref
            sat_count += sats
            # numpy's pairwise summation: 8 partial sums over the block, then a tree; the
            # largest |error| in the same 8 lanes (max is exact in any order)
            p0, p1, p2, p3 = abs(errs[0]), abs(errs[1]), abs(errs[2]), abs(errs[3])
            p4, p5, p6, p7 = abs(errs[4]), abs(errs[5]), abs(errs[6]), abs(errs[7])
            m0, m1, m2, m3, m4, m5, m6, m7 = p0, p1, p2, p3, p4, p5, p6, p7
            for j in range(8, _BLOCK, 8):
                a0, a1, a2, a3 = abs(errs[j]), abs(errs[j + 1]), abs(errs[j + 2]), \
                    abs(errs[j + 3])
                a4, a5, a6, a7 = abs(errs[j + 4]), abs(errs[j + 5]), abs(errs[j + 6]), \
                    abs(errs[j + 7])
                p0 += a0
                p1 += a1
                p2 += a2
                p3 += a3
                p4 += a4
                p5 += a5
                p6 += a6
                p7 += a7
                m0 = max(m0, a0)
                m1 = max(m1, a1)
                m2 = max(m2, a2)
                m3 = max(m3, a3)
                m4 = max(m4, a4)
                m5 = max(m5, a5)
                m6 = max(m6, a6)
                m7 = max(m7, a7)
            total = ((p0 + p1) + (p2 + p3)) + ((p4 + p5) + (p6 + p7))
            level = 0
            while depth > 0 and levels[depth - 1] == level:
                depth -= 1
                total = stack[depth] + total
                level += 1
            stack[depth] = total
            levels[depth] = level
            depth += 1
            block_max = max(max(max(m0, m1), max(m2, m3)), max(max(m4, m5), max(m6, m7)))
            max_err = max(max_err, block_max)
            # a fall (rise, with a negative span multiplier) between neighbouring codes
            falls = 0
            rises = 0
            if base == 0:
                ints[_I_FIRST] = outs[0]
            else:
                falls += outs[0] < previous
                rises += outs[0] > previous
            for j in range(1, _BLOCK):
                falls += outs[j] < outs[j - 1]
                rises += outs[j] > outs[j - 1]
            breaks += falls if sign > 0 else rises
            previous = outs[_BLOCK - 1]
            if compare:
                for j in range(_BLOCK):
                    if expected[base + j] != outs[j]:
                        mismatches += 1
                        if first_mismatch < 0:
                            first_mismatch = base + j
            if per_bin > 0:
                bin_max = block_max if block_max > bin_max else bin_max
                if (base + _BLOCK) % per_bin == 0:
                    bins[base // per_bin] = bin_max
                    bin_max = 0.0
                for j in range(_BLOCK):
                    e = min(max(errs[j], -bound), bound)
                    slots[j] = min(int((e + bound) / width), top)
                # four counts per bin, so that neighbouring codes in one bin do not wait
                # on each other
                for j in range(0, _BLOCK, 4):
                    counts[slots[j], 0] += 1
                    counts[slots[j + 1], 1] += 1
                    counts[slots[j + 2], 2] += 1
                    counts[slots[j + 3], 3] += 1
        # a chunk is a power of two of blocks: one sum is left
        sums[c] = stack[0]
    for b in range(hist.size):
        hist[b] += counts[b, 0] + counts[b, 1] + counts[b, 2] + counts[b, 3]
    ints[_I_SAT] = sat_count
    ints[_I_MONO] = 1 if breaks == 0 else 0
    ints[_I_LAST] = previous
    ints[_I_MISMATCH] = mismatches
    ints[_I_FIRST_MISMATCH] = first_mismatch
    return max_err


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


@dataclass(frozen=True)
class _Task:
    """Chunks ``chunks`` of ``first`` .. at the sweep's temperature ``k``."""

    k: int
    temp: int | None
    start: int          # first code's index in the ADC's range
    chunks: int


@dataclass
class _Done:
    """A task's figures: largest |error|, each chunk's sum, the kernel's integers, bins,
    histogram, and per engine (mismatches, index of the first or -1)."""

    max_err: float
    sums: F64
    ints: I64
    bins: F64
    hist: I64
    engines: dict[str, tuple[int, int]]


class StaticSweep:
    """A sweep under way: ``threads - 1`` threads start at once; ``result()`` joins them
    with the calling thread, so a caller can do other work in between (the sweep then
    keeps ``threads - 1`` cores busy and the caller the last one) and never runs more
    than ``threads`` at a time."""

    def __init__(self, design: Design, temperatures_centi: Sequence[int | None], *,
                 bound: float, engines: dict[str, SettledEngine] | None = None,
                 threads: int | None = None):
        self.design = design
        self.temperatures = list(temperatures_centi)
        self.bound = bound
        self.engines = engines or {}
        self.params = static_params(design)
        p = self.params
        self.lin = p.lin if p.ints[P_HAS_LIN] else ()
        self.tref = int(p.ints[P_TREF])
        n_codes = design.code_max - design.code_min + 1
        if n_codes & (n_codes - 1) or n_codes < STATIC_BINS * _BLOCK:
            raise ValueError("the code range must be a power of two of at least "
                             f"{STATIC_BINS * _BLOCK} codes")
        self.n_codes = n_codes
        self.chunk = min(CHUNK, n_codes)
        self.per_bin = n_codes // STATIC_BINS
        self.width = float(np.linspace(-bound, bound, HISTOGRAM_BINS + 1)[1] + bound)
        self.sign = 1 if design.constants.scale_mul >= 0 else -1
        per_temp = n_codes // self.chunk
        step = min(TASK_CHUNKS, per_temp)
        self.tasks = [_Task(k, temp, c * self.chunk, min(step, per_temp - c))
                      for k, temp in enumerate(self.temperatures)
                      for c in range(0, per_temp, step)]
        self.done: list[_Done | None] = [None] * len(self.tasks)
        self.failure: BaseException | None = None
        self.cancelled = False
        self._next = itertools.count()
        self.helpers = [threading.Thread(target=self._work, name=f"static-sweep-{i}",
                                         daemon=True)
                        for i in range((threads or _workers()) - 1)]
        for helper in self.helpers:
            helper.start()

    def _work(self) -> None:
        """Take tasks in order until none is left (next() on a count is atomic)."""
        try:
            for i in self._next:
                if i >= len(self.tasks) or self.failure is not None or self.cancelled:
                    return
                self.done[i] = self._run(self.tasks[i])
        except BaseException as exc:  # handed to the caller of result()
            self.failure = exc

    def _run(self, task: _Task) -> _Done:
        p = self.params
        first = self.design.code_min + task.start
        count = task.chunks * self.chunk
        want = task.k == 0
        bins = np.zeros(count // self.per_bin if want else 1)
        hist = np.zeros(HISTOGRAM_BINS, dtype=np.int64)
        t = self.tref if task.temp is None else int(task.temp)
        ints = np.zeros(6, dtype=np.int64)
        sums = np.zeros(task.chunks)
        engine_ints: dict[str, tuple[int, int]] = {}
        expected = _NO_EXPECTED
        for j, (name, engine) in enumerate(self.engines.items()):
            buffer = np.empty(count, dtype=np.int32)
            engine(first, t, buffer)
            if j == 0:
                expected = buffer
            elif not np.array_equal(buffer, expected):
                # compared with the first engine; the kernel compares that one with the model
                differ = buffer != expected
                engine_ints[name] = (int(np.count_nonzero(differ)), int(np.argmax(differ)))
        m = _sweep(first, task.chunks, self.chunk, t, p.ints, self.lin, p.floats, p.flin,
                   self.sign, self.bound, self.width, self.per_bin if want else 0, bins, hist,
                   expected, bool(self.engines), ints, sums)
        for j, name in enumerate(self.engines):
            if j == 0 or name not in engine_ints:
                engine_ints[name] = (int(ints[_I_MISMATCH]), int(ints[_I_FIRST_MISMATCH]))
        return _Done(m, sums, ints, bins, hist, engine_ints)

    def cancel(self) -> None:
        """Let the threads stop after their current task (the caller gave up)."""
        self.cancelled = True

    def result(self) -> SweepResult:
        """Work on the tasks left, wait for the threads, and combine in task order."""
        self._work()
        for helper in self.helpers:
            helper.join()
        if self.failure is not None:
            raise self.failure
        return self._combine()

    def _combine(self) -> SweepResult:
        lo = self.design.code_min
        max_err, abs_sum, saturations, monotonic = 0.0, 0.0, 0, True
        by_bin = np.zeros(STATIC_BINS)
        hist_total = np.zeros(HISTOGRAM_BINS)
        mismatches = dict.fromkeys(self.engines, 0)
        first_bad: dict[str, tuple[int, int] | None] = dict.fromkeys(self.engines)
        previous: tuple[int, int] | None = None     # (sweep, last output)
        for task, done in zip(self.tasks, self.done, strict=True):
            assert done is not None
            max_err = max(max_err, done.max_err)
            for s in done.sums:                     # chunk by chunk, in order
                abs_sum += float(s)
            ints = done.ints
            saturations += int(ints[_I_SAT])
            monotonic &= bool(ints[_I_MONO])
            if previous is not None and previous[0] == task.k:
                monotonic &= (int(ints[_I_FIRST]) - previous[1]) * self.sign >= 0
            previous = (task.k, int(ints[_I_LAST]))
            if task.k == 0:
                first_bin = task.start // self.per_bin
                by_bin[first_bin:first_bin + done.bins.size] = done.bins
                hist_total += done.hist
            for name, (bad, at) in done.engines.items():
                mismatches[name] += bad
                if at >= 0 and first_bad[name] is None:
                    first_bad[name] = (lo + task.start + at,
                                       0 if task.temp is None else int(task.temp))
        temps = tuple(int(t) for t in self.temperatures if t is not None)
        evaluations = self.n_codes * len(self.temperatures)
        return SweepResult(
            codes=self.n_codes, temperatures_centi=temps, evaluations=evaluations,
            max_error_lsb=max_err, mean_abs_error_lsb=abs_sum / evaluations,
            saturations=saturations, monotonic=monotonic, mismatches=mismatches,
            first_mismatch=first_bad, max_error_by_bin=by_bin,
            error_histogram=(np.linspace(-self.bound, self.bound, HISTOGRAM_BINS + 1),
                             hist_total))


def sweep_static(design: Design, temperatures_centi: Sequence[int | None], *,
                 bound: float, engines: dict[str, SettledEngine] | None = None,
                 threads: int | None = None) -> SweepResult:
    """Every code of the ADC at each temperature (None: no temperature input).

    ``bound`` sets the histogram's range; ``engines`` are compared on every code.
    """
    return StaticSweep(design, temperatures_centi, bound=bound, engines=engines,
                       threads=threads).result()
