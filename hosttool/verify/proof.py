"""Proof of the fixed-point error against the float64 reference, with a verdict.

``verify_design`` runs the static path over every ADC code at every temperature step
(sweep.py, one compiled loop; the compiled firmware, when given, on every code too), then
a set of dynamic tests through the whole chain, on the bit-exact Python model and, when
given, on other engines (the compiled C firmware) that must agree with it bit for bit. A
test passes when its largest error against the float64 reference (realised constants) is
within the design's proven bound and no node saturated.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

from hosttool.design.model import run_integer, run_reference
from hosttool.design.resolve import Design
from hosttool.errors import InputError
from hosttool.verify.endtoend import EndToEnd, end_to_end, error_budget
from hosttool.verify.limit_cycles import LimitCycleReport, analyse_design
from hosttool.verify.sweep import STATIC_BINS, SettledEngine, StaticSweep, SweepResult

I64 = NDArray[np.int64]
#: An engine runs the integer pipeline on (codes, temperatures or None) from reset.
Engine = Callable[[I64, I64 | None], I64]

#: Amplitude of the mains hum test, as a fraction of the ADC's input range.
HUM_FRACTION = 0.01
#: Temperatures of the static path's temperature sweep (besides the reference); every
#: code is evaluated at each.
TEMPERATURE_STEPS = 5
LONG_RUN_MIN = 1_000_000
#: Tests whose stimulus carries no signal (SQNR and effective bits are not reported).
NO_SIGNAL_TESTS = ("adc_noise", "mains_", "worst_case_", "temperature_ramp")
#: The most samples of the long random run (about 2 GB of arrays held at once beyond it).
MAX_SAMPLES = 100_000_000


@dataclass(frozen=True)
class TestResult:
    """One dynamic test: error statistics against the reference and the proven bound."""

    name: str
    description: str
    samples: int
    outputs: int
    max_error_lsb: float
    rms_error_lsb: float
    bound_lsb: float
    sqnr_db: float | None
    enob_bits: float | None
    saturations: dict[str, int]
    peaks: dict[str, int]
    engines_agree: bool | None          # None when only the Python model ran
    figures: dict[str, float] = field(default_factory=dict)
    passed: bool = False
    trace: tuple[I64, NDArray[np.float64]] | None = None   # (integer, reference), step test


@dataclass(frozen=True)
class StaticResult:
    """The static path over every code at the reference and at each temperature step."""

    codes: int
    temperatures_c: tuple[float, ...]
    evaluations: int                     # codes x temperatures, each code at each one
    max_error_lsb: float
    mean_abs_error_lsb: float
    bound_lsb: float
    saturations: int
    monotonic: bool
    engines_agree: bool | None
    mismatches: dict[str, int]           # per compiled engine, codes where it differs
    first_mismatch: dict[str, tuple[int, int] | None]   # (code, 0.01 C) of the first
    code_bins: NDArray[np.float64]       # bin centres (codes) for the error-against-code plot
    max_error_by_bin: NDArray[np.float64]
    error_histogram: tuple[NDArray[np.float64], NDArray[np.float64]]
    passed: bool


@dataclass(frozen=True)
class Verification:
    """Everything ``hosttool verify`` found, and its verdict."""

    design: Design
    static: StaticResult
    tests: tuple[TestResult, ...]
    engines: tuple[str, ...]
    budget_units: float | None           # the spec's error budget, output units
    budget_used: float | None            # end-to-end worst error / budget
    seed: int
    reasons: tuple[str, ...]
    accuracy: EndToEnd | None = None     # end to end against the physical truth (layer 4)
    limit_cycles: LimitCycleReport = LimitCycleReport(())   # every biquad section

    @property
    def passed(self) -> bool:
        """The verdict: every test within its bound, engines agree, budget respected."""
        return not self.reasons


class _Codes:
    """Codes for loads in output units, from the design's constants (inverse of the scale)."""

    def __init__(self, design: Design):
        c = design.constants
        self.limit = 1 << (design.spec.adc.bits - 1)
        self.offset_counts = c.offset / 2 ** design.guard_bits
        self.counts_per_lsb = 1 / (design.scale.realised(c.scale_mul) * 2 ** design.guard_bits)
        self.res = design.spec.output.resolution
        self.low = design.budget.range_min
        self.high = design.budget.range_max

    def of(self, load: NDArray[np.float64] | float) -> I64:
        counts = np.asarray(load, dtype=np.float64) / self.res * self.counts_per_lsb
        return np.clip(np.rint(counts + self.offset_counts), -self.limit,
                       self.limit - 1).astype(np.int64)


def _settling_samples(design: Design) -> int:
    settle = design.filter_report.realised.settling_1lsb_s
    if not math.isfinite(settle):
        settle = 0.0
    return max(64, int(math.ceil(settle * design.spec.adc.data_rate_sps)) * 2)


def minimum_samples(design: Design) -> int:
    """The fewest samples a verification can run with (its longest fixed-length test)."""
    return max(4 * _settling_samples(design), 4096)


def _stimuli(design: Design, samples: int, rng: np.random.Generator
             ) -> list[tuple[str, str, I64, I64 | None]]:
    """(name, description, codes, temperatures) of every dynamic test."""
    codes = _Codes(design)
    fs = design.spec.adc.data_rate_sps
    settle = _settling_samples(design)
    t_ref = design.temperature.reference_centi if design.temperature else None
    lo, hi = codes.low, codes.high
    span = hi - lo
    out: list[tuple[str, str, I64, I64 | None]] = []
    n = 2 * settle
    step = np.where(np.arange(n) < settle, 0.0 if lo >= 0 else lo, hi)
    out.append(("step_full_scale", f"step from {step[0]:g} to {hi:g} {design.spec.sensor.unit}",
                codes.of(step), None))
    levels = np.repeat(np.arange(40) * codes.res + 0.5 * (lo + hi), max(settle // 4, 16))
    out.append(("lsb_steps", "40 steps of one output LSB around mid-range", codes.of(levels),
                None))
    ramp = np.linspace(lo, hi, max(samples // 4, n))
    out.append(("slow_ramp", f"ramp {lo:g} .. {hi:g} over {ramp.size} samples", codes.of(ramp),
                None))
    band = design.budget.signal_band_hz
    t = np.arange(max(samples // 4, n)) / fs
    sweep = 0.5 * (lo + hi) + 0.45 * span * _linear_chirp(t, band / 100, t[-1], band)
    out.append(("sine_sweep", f"sine sweep {band / 100:.3g} .. {band:.3g} Hz at 90 % of span",
                codes.of(sweep), None))
    # a constant load's codes: one code, repeated
    noise = np.full(max(samples // 4, n), codes.of(0.5 * (lo + hi))) + np.rint(
        rng.normal(0.0, design.budget.noise_counts_rms, max(samples // 4, n))).astype(np.int64)
    out.append(("adc_noise", f"mid-range with Gaussian ADC noise of "
                f"{design.budget.noise_counts_rms:.3g} counts RMS", noise, None))
    for i, node in enumerate(design.cascade.nodes):
        worst = design.cascade.worst_case_codes(i, codes.limit - 1)
        out.append((f"worst_case_{node.name}", f"+-full-scale pattern that drives {node.name} "
                    "to its bound", worst, None))
    for f in (50.0, 60.0):
        amplitude = HUM_FRACTION * codes.limit
        tt = np.arange(max(samples // 8, n)) / fs
        hum = np.full(tt.size, codes.of(0.5 * (lo + hi))) + np.rint(
            amplitude * np.sin(2 * np.pi * f * tt)).astype(np.int64)
        out.append((f"mains_{f:g}hz", f"mid-range plus {f:g} Hz hum of {HUM_FRACTION:.0%} of the "
                    "ADC range", hum, None))
    if design.temperature is not None:
        tc = design.temperature
        m = max(samples // 8, n)
        temps = np.linspace(tc.min_centi, tc.max_centi, m).astype(np.int64)
        out.append(("temperature_ramp", f"75 % load, temperature {tc.min_centi / 100:g} .. "
                    f"{tc.max_centi / 100:g} C", np.full(m, codes.of(lo + 0.75 * span)), temps))
    long = rng.integers(-codes.limit, codes.limit, max(samples, LONG_RUN_MIN))
    out.append(("long_run", f"{long.size} uniformly random codes over the whole ADC range",
                long, None))
    if t_ref is not None:
        out = [(a, b, c, d if d is not None else np.full(c.size, t_ref, dtype=np.int64))
               for a, b, c, d in out]
    return out


def _linear_chirp(t: NDArray[np.float64], f0: float, t1: float, f1: float
                  ) -> NDArray[np.float64]:
    """cos of the phase 2 pi (f0 t + beta t^2 / 2), beta = (f1 - f0) / t1: a linear sweep
    from f0 at t = 0 to f1 at t1 (scipy.signal.chirp's 'linear' method, operation for
    operation, so the stimulus is the same without importing scipy)."""
    beta = (f1 - f0) / t1
    phase = 2 * np.pi * (f0 * t + 0.5 * beta * t * t)
    return np.asarray(np.cos(phase + 0.0), dtype=np.float64)


def _sqnr(reference: NDArray[np.float64], noise_power: float) -> float | None:
    """Signal to quantisation noise (dB) of a reference and the mean square of its error."""
    signal_power = float(np.mean((reference - reference.mean()) ** 2))
    if signal_power == 0 or noise_power == 0:
        return None
    return 10 * math.log10(signal_power / noise_power)


def _settled_after(values: I64, start: int, band: float) -> int | None:
    """Samples after ``start`` until ``values`` stay within ``band`` of their final value."""
    final = values[-1]
    outside = np.nonzero(np.abs(values[start:] - final) > band)[0]
    return 0 if outside.size == 0 else int(outside[-1]) + 1


def _dynamic(design: Design, name: str, description: str, codes: I64, temps: I64 | None,
             engines: dict[str, Engine]) -> TestResult:
    run = run_integer(design, codes, temps)
    ref = run_reference(design, codes, temps)
    err = run.output - ref
    agree = None
    for engine in engines.values():
        same = np.array_equal(engine(codes, temps), run.output)
        agree = same if agree is None else (agree and same)
    # SQNR and effective bits need a signal: a constant load with noise, hum or a
    # temperature sweep on it, or a worst-case pattern, has none to compare the error with
    mean_square = float(np.mean(err ** 2)) if err.size else math.nan
    sqnr = None if name.startswith(NO_SIGNAL_TESTS) else _sqnr(ref, mean_square)
    figures: dict[str, float] = {}
    trace = None
    if name == "step_full_scale":
        trace = (run.output, ref)
        d = design.decimation
        start = (codes.size // 2) // d
        figures["step_output_index"] = float(start)
        settled = _settled_after(run.output, start, 1.0 + design.error_bound_lsb)
        if settled is not None:
            figures["settling_measured_s"] = settled / design.output_rate_hz
        figures["settling_designed_s"] = design.filter_report.realised.settling_1lsb_s
    if name == "adc_noise":
        tail = run.output[run.output.size // 4:]
        figures["output_noise_rms_lsb"] = float(np.std(tail))
        figures["output_noise_predicted_lsb"] = design.output_noise_rms_lsb
    if name.startswith("mains_"):
        tail = run.output[run.output.size // 2:]
        figures["hum_residual_pp_lsb"] = float(tail.max() - tail.min())
    max_err = float(np.max(np.abs(err))) if err.size else 0.0
    bound = design.error_bound_lsb
    passed = max_err <= bound and sum(run.saturations.values()) == 0 and agree is not False
    return TestResult(
        name=name, description=description, samples=int(codes.size), outputs=int(err.size),
        max_error_lsb=max_err, rms_error_lsb=math.sqrt(mean_square) if err.size else 0,
        bound_lsb=bound, sqnr_db=sqnr,
        enob_bits=None if sqnr is None else (sqnr - 1.76) / 6.02,
        saturations=dict(run.saturations), peaks=dict(run.peaks), engines_agree=agree,
        figures=figures, passed=passed, trace=trace)


def static_temperatures(design: Design) -> list[int | None]:
    """Temperatures (0.01 C) of the static sweep: the reference, then TEMPERATURE_STEPS
    evenly over the compensated range; [None] without temperature compensation."""
    tc = design.temperature
    if tc is None:
        return [None]
    return [tc.reference_centi, *(int(round(t)) for t in
                                  np.linspace(tc.min_centi, tc.max_centi, TEMPERATURE_STEPS))]


def _static(design: Design, sweep: SweepResult, with_engines: bool) -> StaticResult:
    bound = design.static_error_bound_lsb
    agree = None if not with_engines else not any(sweep.mismatches.values())
    passed = (sweep.max_error_lsb <= bound and sweep.saturations == 0 and sweep.monotonic
              and agree is not False)
    bins = np.linspace(design.code_min, design.code_max + 1, STATIC_BINS + 1)
    return StaticResult(
        codes=sweep.codes, temperatures_c=tuple(t / 100 for t in sweep.temperatures_centi),
        evaluations=sweep.evaluations, max_error_lsb=sweep.max_error_lsb,
        mean_abs_error_lsb=sweep.mean_abs_error_lsb, bound_lsb=bound,
        saturations=sweep.saturations, monotonic=sweep.monotonic, engines_agree=agree,
        mismatches=dict(sweep.mismatches), first_mismatch=dict(sweep.first_mismatch),
        code_bins=0.5 * (bins[1:] + bins[:-1]), max_error_by_bin=sweep.max_error_by_bin,
        error_histogram=sweep.error_histogram, passed=passed)


def verify_design(design: Design, *, samples: int = LONG_RUN_MIN, seed: int = 0,
                  engines: dict[str, Engine] | None = None,
                  static_engines: dict[str, SettledEngine] | None = None,
                  timings: dict[str, float] | None = None) -> Verification:
    """Run every check; ``engines`` (by name) must match the Python model bit for bit on the
    dynamic tests, ``static_engines`` on every code of the static sweep.

    ``timings``, when given, receives the seconds spent in the ``static`` and ``dynamic``
    phases.
    """
    need = minimum_samples(design)
    if samples < need:
        raise InputError(f"--samples: {samples} is fewer than the {need} samples the step "
                         "and settling tests of this design need")
    if samples > MAX_SAMPLES:
        shown = f"{samples}" if samples < 10 ** 30 else f"a {len(str(samples))}-digit number"
        raise InputError(f"--samples: {shown} is more than the {MAX_SAMPLES} this tool runs "
                         "(the codes and outputs of each test are held in memory)")
    if seed < 0:
        raise InputError(f"--seed: {seed} is negative; give 0 or more")
    engines = engines or {}
    static_engines = static_engines or {}
    rng = np.random.default_rng(seed)
    clock = time.perf_counter()
    # the sweep's threads start now; this thread runs the dynamic tests and the other
    # checks meanwhile, then joins the sweep (threads never outnumber the cores)
    sweep = StaticSweep(design, static_temperatures(design),
                        bound=design.static_error_bound_lsb, engines=static_engines)
    try:
        tests = tuple(_dynamic(design, name, text, codes, temps, engines)
                      for name, text, codes, temps in _stimuli(design, samples, rng))
        lap = time.perf_counter()
        budget = error_budget(design)
        accuracy = end_to_end(design)
        cycles = analyse_design(design)
    except BaseException:
        sweep.cancel()
        raise
    static = _static(design, sweep.result(), bool(static_engines))
    if timings is not None:
        timings["static"] = time.perf_counter() - clock
        timings["dynamic"] = lap - clock
    reasons: list[str] = []
    why = accuracy.reason(design.spec.sensor.unit, design.spec.linearisation.mode)
    if why is not None:
        reasons.append(why)
    if budget is not None and design.to_units(design.ideal_error_bound_lsb) > budget:
        reasons.append(f"the arithmetic alone may err by "
                       f"{design.to_units(design.ideal_error_bound_lsb):.4g} "
                       f"{design.spec.sensor.unit} (proven bound over every code), more than "
                       f"the budget {budget:g}")
    if not static.passed:
        reasons.append(_static_reason(static))
    for test in tests:
        if not test.passed:
            reasons.append(_test_reason(test))
    reasons += [sec.failure for sec in cycles.sections if sec.limit_cycle]
    return Verification(design=design, static=static, tests=tests,
                        engines=("python", *engines), budget_units=budget,
                        budget_used=accuracy.budget_used, seed=seed, reasons=tuple(reasons),
                        accuracy=accuracy, limit_cycles=cycles)


def _static_reason(s: StaticResult) -> str:
    if s.engines_agree is False:
        return "static path: the engines disagree"
    if s.saturations:
        return f"static path: {s.saturations} saturations"
    if not s.monotonic:
        return "static path: output not monotonic in the code"
    return f"static path: error {s.max_error_lsb:.4g} LSB above the bound {s.bound_lsb:.4g}"


def _test_reason(t: TestResult) -> str:
    if t.engines_agree is False:
        return f"{t.name}: the engines disagree"
    if sum(t.saturations.values()):
        nodes = ", ".join(k for k, v in t.saturations.items() if v)
        return f"{t.name}: saturation at {nodes}"
    return f"{t.name}: error {t.max_error_lsb:.4g} LSB above the bound {t.bound_lsb:.4g}"
