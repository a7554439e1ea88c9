"""Units of a lot side by side, and the refusals of their readings before the fit.

A production line calibrates units of one plan: the same references, temperatures and
directions in the same order. ``UnitStack`` holds U units of n readings each as (U, n)
arrays, so that each rule of the calibration is one numpy expression over every unit at
once instead of a loop per unit. Units whose readings group into the same points (the
same ``PointPlan``: temperature groups, references and directions per reading) share the
plan's index lists.

The refusals here are those of one unit's readings taken alone, in this order: saturated or
unsettled rows (``refuse_rows``), then per plan: a missing reference of
calibration.points, too few references, readings of one point that disagree, a response
that is not monotonic, too few temperatures, no point for a hysteresis or repeatability
limit (``refuse_points``). Each refusal is the unit's own ``InputError`` naming the file,
its line and serial; the other units go on. Every expression keeps the order of the
arithmetic of a plain loop over one unit's readings (sums from zero, left to right; the
first of equal extremes), so that a unit gives the same bits alone or in a stack.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from hosttool.errors import InputError
from hosttool.formats.readings import UnitReadings

F64 = NDArray[np.float64]
I64 = NDArray[np.int64]
Bools = NDArray[np.bool_]

#: A reading whose mean lies within this many standard deviations of a code limit may have
#: clipped samples: refused as saturated (our choice).
SATURATION_SIGMA = 3.0
#: raw_std above this many times (calibration.max_noise_ratio x the ADC noise) is refused as
#: an unsettled measurement; between 1 and this factor the unit fails its noise limit.
NOISE_REFUSE_FACTOR = 5.0
#: Temperatures that chain together in steps of at most this are one temperature, C.
TEMP_GROUP_C = 1.0
#: Readings of one point (reference and temperature) differing by more than this share of
#: the nominal span are refused as disagreeing duplicates (our choice; hysteresis and
#: repeatability are orders of magnitude smaller).
DISAGREE_PCT_SPAN = 1.0


@dataclass(frozen=True)
class UnitStack:
    """U units of n readings each: (U, n) arrays in each unit's file order."""

    units: tuple[UnitReadings, ...]
    mean: F64                  # raw_mean, counts
    std: F64                   # raw_std, counts
    reference: F64             # output units
    temperature_c: F64         # C
    up: Bools                  # True: direction "up"

    @classmethod
    def of(cls, units: Sequence[UnitReadings]) -> UnitStack:
        """Stack units that have the same number of readings."""
        return cls(tuple(units), np.stack([u.raw_mean for u in units]),
                   np.stack([u.raw_std for u in units]),
                   np.stack([u.reference for u in units]),
                   np.stack([u.temperature_c for u in units]),
                   np.stack([u.up for u in units]))

    def take(self, rows: Sequence[int]) -> UnitStack:
        """The stack of the units at ``rows``."""
        index = np.asarray(rows, dtype=np.intp)
        return UnitStack(tuple(self.units[r] for r in rows), self.mean[index],
                         self.std[index], self.reference[index], self.temperature_c[index],
                         self.up[index])

    def __len__(self) -> int:
        return len(self.units)


def unit_where(u: UnitReadings) -> str:
    """``file:line: serial S`` of a unit, at its first reading (for refusals of the unit)."""
    return f"{u.where(0)}: serial {u.serial}"


def sum_columns(values: F64, columns: Sequence[int]) -> F64:
    """Per row, the sum of ``values[:, columns]`` from zero, left to right (as ``sum`` of a
    list of floats)."""
    total = np.zeros(values.shape[0])
    for c in columns:
        total = total + values[:, c]
    return total


def running_max(acc: F64 | None, value: F64) -> F64:
    """``max(acc, value)`` per element as Python's ``max`` takes it (the first unless the
    second is greater); ``acc`` None: 0.0, as ``max(x or 0.0, value)``."""
    base = np.zeros_like(value) if acc is None else acc
    return np.where(value > base, value, base)


@dataclass(frozen=True)
class PointPlan:
    """How one unit's readings group into points: (temperature group, reference in LSB) ->
    the readings' indices, in file order; shared by every unit with the same grouping."""

    points: dict[tuple[int, int], list[int]]
    split: list[tuple[list[int], list[int]]]       # each point's readings: (up, down)
    steps: list[tuple[list[int], list[int]]]       # neighbouring references within a
                                                   # temperature: (before, after) readings

    @classmethod
    def of(cls, group: list[int], lsb: list[int], up: list[bool]) -> PointPlan:
        """The plan of one unit: each reading's temperature group, reference in LSB and
        direction."""
        points: dict[tuple[int, int], list[int]] = {}
        for i, key in enumerate(zip(group, lsb, strict=True)):
            points.setdefault(key, []).append(i)
        split = [([i for i in idx if up[i]], [i for i in idx if not up[i]])
                 for idx in points.values()]
        steps: list[tuple[list[int], list[int]]] = []
        last: tuple[int, list[int]] | None = None
        for (g, _), idx in sorted(points.items()):
            if last is not None and last[0] == g:
                steps.append((last[1], idx))
            last = (g, idx)
        return cls(points, split, steps)

    @property
    def references(self) -> set[int]:
        """The distinct references read, in LSB."""
        return {key for _, key in self.points}


def plans(stack: UnitStack, resolution: float) -> list[tuple[PointPlan, list[int]]]:
    """The stack's units grouped by their ``PointPlan``: (plan, rows), rows ascending.

    Temperatures are grouped per unit: sorted (stable), a new group wherever the next is
    more than ``TEMP_GROUP_C`` above the one before it."""
    order = np.argsort(stack.temperature_c, axis=1, kind="stable")
    ordered = np.take_along_axis(stack.temperature_c, order, axis=1)
    sorted_group = np.zeros(order.shape, dtype=np.int64)
    sorted_group[:, 1:] = np.cumsum(ordered[:, 1:] - ordered[:, :-1] > TEMP_GROUP_C, axis=1)
    group = np.empty_like(sorted_group)
    np.put_along_axis(group, order, sorted_group, axis=1)
    lsb = np.rint(stack.reference / resolution).astype(np.int64)
    keys = np.concatenate([group, lsb, stack.up.astype(np.int64)], axis=1)
    found: dict[bytes, list[int]] = {}
    for r, key in enumerate(keys):
        found.setdefault(key.tobytes(), []).append(r)
    return [(PointPlan.of(group[rows[0]].tolist(), lsb[rows[0]].tolist(),
                          stack.up[rows[0]].tolist()), rows) for rows in found.values()]


def refuse_rows(stack: UnitStack, *, code_min: int, code_max: int, adc_bits: int,
                noise_counts: float, max_noise_ratio: float) -> dict[int, InputError]:
    """Rows refused, per unit (row of the stack -> refusal): a reading within
    ``SATURATION_SIGMA`` standard deviations of a code limit (the first in file order), else
    one far noisier than the ADC (``NOISE_REFUSE_FACTOR`` x max_noise_ratio x its noise)."""
    mean, std = stack.mean, stack.std
    high = mean + SATURATION_SIGMA * std >= code_max
    saturated = high | (mean - SATURATION_SIGMA * std <= code_min)
    far = NOISE_REFUSE_FACTOR * max_noise_ratio * noise_counts
    noisy = std > far
    refused: dict[int, InputError] = {}
    for r in np.flatnonzero(saturated.any(axis=1) | noisy.any(axis=1)).tolist():
        u = stack.units[r]
        if saturated[r].any():
            i = int(saturated[r].argmax())
            m, s = float(mean[r, i]), float(std[r, i])
            limit = code_max if high[r, i] else code_min
            refused[r] = InputError(
                f"{u.where(i)}: raw_mean_counts: {m:.1f} counts (std {s:.1f}) reaches the "
                f"{adc_bits}-bit limit {limit}: the ADC saturated; check the gain, the "
                "wiring and the load")
            continue
        i = int(noisy[r].argmax())
        s = float(std[r, i])
        refused[r] = InputError(
            f"{u.where(i)}: raw_std_counts: {s:.4g} counts is {s / noise_counts:.3g} x the "
            f"ADC noise ({noise_counts:.4g} counts RMS), far above "
            f"calibration.max_noise_ratio = {max_noise_ratio:g}: the reading was not settled "
            "(vibration, draught, loose wiring?); measure again")
    return refused


@dataclass(frozen=True)
class PointRules:
    """What ``refuse_points`` checks a plan against (from the spec and its design)."""

    resolution: float                 # output units per LSB
    unit: str                         # output unit
    calibration_points: tuple[float, ...]
    needed_references: int
    tolerance: float                  # counts: DISAGREE_PCT_SPAN of the nominal span
    temperature: bool                 # compensated: two temperatures needed
    hysteresis: bool                  # calibration.max_hysteresis is set
    repeatability: bool               # calibration.max_repeatability is set


def refuse_points(stack: UnitStack, plan: PointPlan, rules: PointRules
                  ) -> dict[int, InputError]:
    """Units of one plan refused (row -> refusal), each for the first of: a reference of
    calibration.points not read, fewer distinct references than the fit needs, readings of
    one point that disagree, a response that is not monotonic, fewer than two usable
    temperatures, no point for a hysteresis or a repeatability limit."""
    everyone = range(len(stack))
    refs = plan.references
    for p in rules.calibration_points:
        if round(p / rules.resolution) not in refs:
            return {r: InputError(f"{unit_where(stack.units[r])}: no reading at the reference "
                                  f"{p:g} {rules.unit} that calibration.points asks for")
                    for r in everyone}
    if len(refs) < rules.needed_references:
        return {r: InputError(f"{unit_where(stack.units[r])}: {len(refs)} distinct reference "
                              f"values; the fit needs at least {rules.needed_references}")
                for r in everyone}
    refused: dict[int, InputError] = {}
    for idx in plan.points.values():
        values = stack.mean[:, idx]
        for r in np.flatnonzero(values.max(axis=1) - values.min(axis=1)
                                > rules.tolerance).tolist():
            if r not in refused:
                refused[r] = _disagree(stack.units[r], rules, idx[int(values[r].argmax())],
                                       idx[int(values[r].argmin())])
    _refuse_non_monotonic(stack, plan, refused)
    if rules.temperature:
        per_group: dict[int, int] = {}
        for g, _ in plan.points:
            per_group[g] = per_group.get(g, 0) + 1
        usable = sum(count >= 2 for count in per_group.values())
        if usable < 2:
            return refused | {r: InputError(
                f"{unit_where(stack.units[r])}: temperature compensation needs readings at "
                f"two or more temperatures (more than {TEMP_GROUP_C:g} C apart), each with "
                f"at least two reference values; found {usable}")
                for r in everyone if r not in refused}
    if rules.hysteresis and not any(up and down for up, down in plan.split):
        return refused | {r: InputError(
            f"{unit_where(stack.units[r])}: calibration.max_hysteresis is set but no "
            "reference has both 'up' and 'down' readings") for r in everyone if r not in refused}
    if rules.repeatability and not any(len(up) >= 2 or len(down) >= 2
                                       for up, down in plan.split):
        return refused | {r: InputError(
            f"{unit_where(stack.units[r])}: calibration.max_repeatability is set but no point "
            "is repeated (two readings, same reference, temperature and direction)")
            for r in everyone if r not in refused}
    return refused


def _disagree(u: UnitReadings, rules: PointRules, hi: int, lo: int) -> InputError:
    return InputError(f"{u.where(hi)}: raw_mean_counts: {float(u.raw_mean[hi]):.1f} and line "
                      f"{u.lines[lo]} ({float(u.raw_mean[lo]):.1f}) read the same reference "
                      f"{u.reference[hi]:g} {rules.unit} at the same temperature but differ "
                      f"by more than {DISAGREE_PCT_SPAN:g} % of the span: duplicate points "
                      "that disagree")


def _refuse_non_monotonic(stack: UnitStack, plan: PointPlan,
                          refused: dict[int, InputError]) -> None:
    """Add the units (not refused yet) whose mean response does not keep one direction
    between neighbouring references at each temperature."""
    if not plan.steps:
        return
    steps = [sum_columns(stack.mean, after) / len(after)
             - sum_columns(stack.mean, before) / len(before) for before, after in plan.steps]
    total = np.zeros(len(stack))
    for step in steps:
        total = total + step
    direction = np.copysign(1.0, total)
    wrong = np.stack([step * direction <= 0 for step in steps], axis=1)
    for r in np.flatnonzero(wrong.any(axis=1)).tolist():
        if r in refused:
            continue
        before, after = plan.steps[int(wrong[r].argmax())]
        u = stack.units[r]
        refused[r] = InputError(
            f"{u.where(after[0])}: raw_mean_counts: the response at "
            f"{u.reference[after[0]]:g} is not beyond the one at {u.reference[before[0]]:g} "
            f"(line {u.lines[before[0]]}): the response is not monotonic (reading "
            "mislabelled, load shunted or cell damaged?)")
