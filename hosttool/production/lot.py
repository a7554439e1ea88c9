"""Statistics of a lot from the production record: capability, robust outliers, yield.

- Process capability of each judged criterion against its limit (Montgomery, Introduction
  to Statistical Quality Control, the Cpk index; from memory):
  Cpk = min(USL - mean, mean - LSL) / (3 s), s the sample standard deviation (n - 1).
  A two-sided limit (zero, span deviation, the temperature coefficients: the spec limits
  their size) uses the signed figure with LSL = -limit, USL = +limit; a one-sided limit
  (largest error, hysteresis, repeatability, noise) is the upper index
  (USL - mean) / (3 s).
- Robust outliers: the modified z-score M = 0.6745 (x - median) / MAD, MAD the median
  absolute deviation, flagged when |M| > 3.5 (Iglewicz and Hoaglin, How to Detect and
  Handle Outliers, 1993). Computed on passed units too: a unit that passes but stands far
  from its lot is an early sign of an assembly fault.
- Yield by station: units whose current row passed, over units, and the first-pass yield
  (revision 1 rows that passed, over revision 1 rows).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

#: Modified z-score above which a unit is flagged (Iglewicz and Hoaglin 1993).
OUTLIER_SCORE = 3.5
#: 0.6745: the 0.75 quantile of the standard normal, so M is a z-score for normal data.
MAD_FACTOR = 0.6745

#: Criteria judged on the size of a signed figure: criterion key -> figure key.
TWO_SIDED = {"zero_offset": "zero_mv_per_v", "span_deviation": "span_deviation_pct",
             "zero_tc": "zero_tc_ppm_fs_per_c", "span_tc": "span_tc_ppm_per_c"}
#: The figures shown as histograms and scored for outliers, with their criterion (if any).
QUANTITIES = (("zero_mv_per_v", "zero", "mV/V", "zero_offset"),
              ("span_deviation_pct", "span against nominal", "%", "span_deviation"),
              ("zero_tc_ppm_fs_per_c", "zero temperature coefficient", "ppm FS/C", "zero_tc"),
              ("span_tc_ppm_per_c", "span temperature coefficient", "ppm/C", "span_tc"),
              ("nonlinearity", "nonlinearity before correction", "", "nonlinearity"),
              ("max_error", "largest error", "", "max_error"))


def cpk(values: np.ndarray, lsl: float | None, usl: float | None) -> float | None:
    """Cpk of ``values`` against the limits given (None: that side has no limit); None
    when fewer than 2 values or no spread."""
    if values.size < 2:
        return None
    mean = float(np.mean(values))
    s = float(np.std(values, ddof=1))
    if s == 0.0:
        return None
    sides = [x for x in ((usl - mean) if usl is not None else None,
                         (mean - lsl) if lsl is not None else None) if x is not None]
    return min(sides) / (3 * s) if sides else None


def modified_z(values: np.ndarray) -> np.ndarray | None:
    """The modified z-score of each value (None when the MAD is zero)."""
    median = float(np.median(values))
    mad = float(np.median(np.abs(values - median)))
    if mad == 0.0:
        return None
    return MAD_FACTOR * (values - median) / mad


@dataclass(frozen=True)
class Capability:
    """One criterion across the lot."""

    key: str
    label: str
    unit: str
    count: int
    mean: float
    std: float
    lsl: float | None
    usl: float | None
    cpk: float | None


@dataclass(frozen=True)
class Outlier:
    """A unit far from its lot in one quantity."""

    serial: str
    quantity: str
    value: float
    median: float
    score: float
    passed: bool


@dataclass(frozen=True)
class StationYield:
    """Yield of one station in the lot."""

    station: str
    units: int
    passed: int
    first_tries: int
    first_passed: int


@dataclass(frozen=True)
class LotStats:
    """Everything the lot report shows, computed from the lot's rows."""

    lot: str
    spec_names: tuple[str, ...]
    units: int
    passed: int
    serials: tuple[str, ...]                # the current rows, in record order
    values: dict[str, np.ndarray]           # figure key -> one value per current row
    limits: dict[str, float | None]         # criterion key -> limit
    units_of: dict[str, str]                # criterion key -> unit
    capability: tuple[Capability, ...]
    outliers: tuple[Outlier, ...]
    stations: tuple[StationYield, ...]


def _figure(row: dict[str, Any], key: str) -> float:
    value = row["figures"].get(key)
    return math.nan if value is None else float(value)


def lot_stats(lot: str, rows: list[dict[str, Any]]) -> LotStats:
    """The statistics of a lot from all its rows (every revision, JSON columns decoded)."""
    current = [r for r in rows if r["current"]]
    limits: dict[str, float | None] = {}
    labels: dict[str, str] = {}
    units_of: dict[str, str] = {}
    for r in current:
        for c in r["criteria"]:
            limits.setdefault(c["key"], c["limit"])
            labels.setdefault(c["key"], c["label"])
            units_of.setdefault(c["key"], c["unit"])
    values = {key: np.array([_figure(r, key) for r in current]) for key, *_ in QUANTITIES}
    capability = []
    for key, limit in limits.items():
        if limit is None:
            continue
        if key in TWO_SIDED:
            data = values[TWO_SIDED[key]] if TWO_SIDED[key] in values else np.array([])
            lsl: float | None = -limit
        else:
            data = np.array([next((c["value"] for c in r["criteria"] if c["key"] == key),
                                  None) for r in current], dtype=float)
            lsl = None
        data = data[np.isfinite(data)]
        capability.append(Capability(
            key=key, label=labels[key], unit=units_of[key], count=int(data.size),
            mean=float(np.mean(data)) if data.size else math.nan,
            std=float(np.std(data, ddof=1)) if data.size > 1 else math.nan,
            lsl=lsl, usl=limit, cpk=cpk(data, lsl, limit)))
    outliers = []
    for key, label, _, _ in QUANTITIES:
        data = values[key]
        finite = np.isfinite(data)
        if finite.sum() < 5:
            continue
        scores = modified_z(data[finite])
        if scores is None:
            continue
        median = float(np.median(data[finite]))
        chosen = [r for r, ok in zip(current, finite, strict=True) if ok]
        for r, value, score in zip(chosen, data[finite], scores, strict=True):
            if abs(score) > OUTLIER_SCORE:
                outliers.append(Outlier(r["serial"], label, float(value), median,
                                        float(score), r["verdict"] == "pass"))
    stations = []
    for name in sorted({r["station"] for r in rows}):
        mine = [r for r in current if r["station"] == name]
        first = [r for r in rows if r["station"] == name and r["revision"] == 1]
        stations.append(StationYield(name, len(mine), sum(r["verdict"] == "pass" for r in mine),
                                     len(first), sum(r["verdict"] == "pass" for r in first)))
    return LotStats(lot=lot, spec_names=tuple(sorted({r["spec_name"] for r in current})),
                    units=len(current), passed=sum(r["verdict"] == "pass" for r in current),
                    serials=tuple(r["serial"] for r in current), values=values,
                    limits=limits, units_of=units_of,
                    capability=tuple(capability),
                    outliers=tuple(sorted(outliers, key=lambda o: -abs(o.score))),
                    stations=tuple(stations))
