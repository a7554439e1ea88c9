"""Synthetic readings of a production lot, from a spec's own bridge and ADC model.

For demos, tests and benchmarks only: every number is invented. Each simulated unit has a
known zero, span error, nonlinearity (a bow, largest mid-range), hysteresis, zero and span
temperature coefficients and noise; its readings are what the ADC would report, averaged:

    ratio(m, T) = zero + zt dT + (1 + span) (1 + st dT) (r(m) + bow(m)) [+ hyst(m) if down]

with r(m) the nominal bridge's change of output ratio (exact for strain bridges), converted
to counts with the budget's gain and reference, plus Gaussian noise of the ADC's RMS noise
over sqrt(samples).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from hosttool.design.resolve import Design
from hosttool.formats.readings import reference_column
from hosttool.util.utctime import format_time_utc

HEADER_NOTE = "# synthetic readings: invented numbers for a demonstration, not from real units"


@dataclass(frozen=True)
class UnitTruth:
    """The invented properties of one simulated unit."""

    serial: str
    zero_mv_per_v: float = 0.0        # output at no load, mV/V
    span_error_pct: float = 0.0       # sensitivity against nominal, %
    bow_pct_fs: float = 0.0           # nonlinearity at mid-range, % of full-scale output
    hysteresis_pct_fs: float = 0.0    # down minus up at mid-range, % of full-scale output
    zero_tc_ppm_fs_per_c: float = 0.0
    span_tc_ppm_per_c: float = 0.0
    noise_factor: float = 1.0         # raw_std over the ADC's noise


def random_truth(serial: str, rng: np.random.Generator) -> UnitTruth:
    """A unit with spreads typical of a good lot (all well inside the example's limits)."""
    return UnitTruth(serial=serial, zero_mv_per_v=float(rng.normal(0.0, 0.03)),
                     span_error_pct=float(rng.normal(0.0, 1.0)),
                     bow_pct_fs=float(rng.normal(0.0, 0.003)),
                     hysteresis_pct_fs=float(abs(rng.normal(0.0, 0.002))),
                     zero_tc_ppm_fs_per_c=float(rng.normal(0.0, 8.0)),
                     span_tc_ppm_per_c=float(rng.normal(0.0, 8.0)),
                     noise_factor=float(rng.uniform(0.9, 1.3)))


def _bow(x: np.ndarray, bipolar: bool) -> np.ndarray:
    """1 at mid-range, 0 at zero and at full scale (odd in x for a bipolar range)."""
    if bipolar:
        return x * (1 - x * x) * (3 * math.sqrt(3) / 2)
    return 4 * x * (1 - x)


@dataclass(frozen=True)
class Plan:
    """Which readings each unit gets: a sweep up and down at the reference temperature
    (``cycles`` times), and zero plus the largest reference at each other temperature."""

    reference_c: float
    other_c: tuple[float, ...]
    samples: int = 32
    cycles: int = 1

    @classmethod
    def of(cls, design: Design) -> Plan:
        """Two extra temperatures inside the compensated range when the spec has one."""
        t = design.spec.temperature
        if t is None:
            return cls(reference_c=20.0, other_c=())
        low, high = t.min_c + 0.25 * (t.reference_c - t.min_c), t.max_c - 0.1 * (
            t.max_c - t.reference_c)
        return cls(reference_c=t.reference_c, other_c=(round(low, 1), round(high, 1)))


def unit_rows(design: Design, truth: UnitTruth, plan: Plan, rng: np.random.Generator,
              start_utc: int) -> list[str]:
    """CSV rows (without header) of one simulated unit."""
    spec = design.spec
    assert spec.calibration is not None
    points = sorted(set(spec.calibration.points))
    top = max(points, key=abs)
    rows: list[tuple[float, float, bool]] = []
    for _ in range(plan.cycles):
        rows += [(p, plan.reference_c, True) for p in points]
        rows += [(p, plan.reference_c, False) for p in reversed(points[:-1])]
    for t in plan.other_c:
        rows += [(0.0, t, True), (top, t, True)]
    bridge = design.bridge
    full = max(abs(bridge.m_min), abs(bridge.m_max))
    fs_ratio = abs(float(bridge.ratio(full)) - bridge.zero_ratio)
    m = np.array([r[0] for r in rows])
    temps = np.array([r[1] for r in rows]) + rng.uniform(-0.1, 0.1, len(rows))
    up = np.array([r[2] for r in rows])
    dt = temps - plan.reference_c
    x = m / full
    change = np.asarray(bridge.ratio(m)) - bridge.zero_ratio \
        + truth.bow_pct_fs / 100 * fs_ratio * _bow(x, spec.sensor.bipolar)
    ratio = (truth.zero_mv_per_v * 1e-3 + truth.zero_tc_ppm_fs_per_c * 1e-6 * fs_ratio * dt
             + (1 + truth.span_error_pct / 100) * (1 + truth.span_tc_ppm_per_c * 1e-6 * dt)
             * change
             + np.where(up, 0.0, truth.hysteresis_pct_fs / 100 * fs_ratio
                        * np.abs(_bow(np.abs(x), False))))
    counts = ratio / design.ratio_per_count
    std = design.budget.noise_counts_rms * truth.noise_factor * rng.uniform(0.95, 1.05,
                                                                              len(rows))
    mean = counts + rng.normal(0.0, 1.0, len(rows)) * std / math.sqrt(plan.samples)
    return [f"{truth.serial},{p:g},{t:.2f},{mu:.3f},{s:.3f},{plan.samples},"
            f"{'up' if u else 'down'},{format_time_utc(start_utc + 20 * i)}"
            for i, ((p, _, u), t, mu, s) in enumerate(zip(rows, temps, mean, std, strict=True))]


def header(design: Design) -> str:
    """The CSV header line for this spec."""
    return (f"serial,{reference_column(design.spec)},temperature_c,raw_mean_counts,"
            "raw_std_counts,samples,direction,time_utc")


def lot_csv(design: Design, truths: list[UnitTruth], *, seed: int, start_utc: int,
            plan: Plan | None = None) -> str:
    """A readings file for the whole lot, deterministic for a given seed."""
    plan = Plan.of(design) if plan is None else plan
    lines = [HEADER_NOTE, header(design)]
    for i, truth in enumerate(truths):
        rng = np.random.default_rng([seed, i])
        lines += unit_rows(design, truth, plan, rng, start_utc + 600 * i)
    return "\n".join(lines) + "\n"
