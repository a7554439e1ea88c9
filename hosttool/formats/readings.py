"""The readings file of the production line: one CSV row per settled reading of one unit.

Columns (any order; header names are exact, the reference column carries the spec's
output unit so a file for another product is refused):

    serial            unit serial: letters, digits, '.', '_', '-', at most 16, starting
                      with a letter or digit (it names files and fills the block's field)
    reference_<unit>  applied reference in output units (reference_kg, reference_ue); 0 = zero
    temperature_c     sensor temperature during the reading, C
    raw_mean_counts   mean of the averaged raw ADC codes, counts
    raw_std_counts    standard deviation of those codes, counts
    samples           number of codes averaged (>= 1)
    direction         "up" (load increasing) or "down" (decreasing), for hysteresis
    time_utc          optional: when the reading was taken, ISO 8601 in UTC
                      (2025-03-04T08:15:00Z); the unit's calibration time is its latest one

Lines starting with '#' are comments. Every error names the file, line and column.
"""

from __future__ import annotations

import csv
import difflib
import hashlib
import math
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from hosttool.errors import InputError
from hosttool.physics.adc import code_range
from hosttool.spec.schema import Spec
from hosttool.util.utctime import parse_time_utc

SERIAL_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]{0,15}$")
DIRECTIONS = ("up", "down")
REQUIRED = ("serial", "temperature_c", "raw_mean_counts", "raw_std_counts", "samples",
            "direction")
OPTIONAL = ("time_utc",)


def reference_column(spec: Spec) -> str:
    """The header of the reference column for this spec: ``reference_<output unit>``."""
    return f"reference_{spec.sensor.unit}"


@dataclass(frozen=True)
class UnitReadings:
    """The readings of one unit, as arrays in file order; ``lines`` are 1-based line numbers."""

    serial: str
    source: str
    lines: NDArray[np.int64]
    reference: NDArray[np.float64]      # output units
    temperature_c: NDArray[np.float64]  # C
    raw_mean: NDArray[np.float64]       # counts
    raw_std: NDArray[np.float64]        # counts
    samples: NDArray[np.int64]
    up: NDArray[np.bool_]               # True: direction "up"
    cal_time_utc: int | None            # latest time_utc of its rows, s since 1970 UTC

    def where(self, index: int) -> str:
        """``file:line`` of reading ``index``."""
        return f"{self.source}:{int(self.lines[index])}"


@dataclass(frozen=True)
class ReadingsFile:
    """A parsed readings file: every unit in it, in order of first appearance."""

    source: str
    sha256: str
    units: dict[str, UnitReadings]


def _columns(header: list[str], spec: Spec, source: str, line: int) -> dict[str, int]:
    ref = reference_column(spec)
    known = (REQUIRED[0], ref) + REQUIRED[1:] + OPTIONAL
    index: dict[str, int] = {}
    for i, name in enumerate(h.strip() for h in header):
        if name in index:
            raise InputError(f"{source}:{line}: {name}: column given twice")
        if name not in known:
            if name.startswith("reference_"):
                raise InputError(f"{source}:{line}: {name}: the spec's output unit is "
                                 f"{spec.sensor.unit!r}; expected the column {ref}")
            near = difflib.get_close_matches(name, known, n=1, cutoff=0.6)
            hint = f" (did you mean {near[0]!r}?)" if near else ""
            raise InputError(f"{source}:{line}: {name}: unknown column{hint}")
        index[name] = i
    for name in (REQUIRED[0], ref) + REQUIRED[1:]:
        if name not in index:
            raise InputError(f"{source}:{line}: {name}: missing column (the header needs "
                             f"{', '.join((REQUIRED[0], ref) + REQUIRED[1:])}; time_utc "
                             "optional)")
    return index


class _Row:
    """Typed access to one CSV row, errors naming file, line and column."""

    def __init__(self, cells: list[str], index: dict[str, int], source: str, line: int):
        self.cells, self.index, self.where = cells, index, f"{source}:{line}"

    def text(self, name: str) -> str:
        return self.cells[self.index[name]].strip()

    def fail(self, name: str, message: str) -> InputError:
        return InputError(f"{self.where}: {name}: {message}")

    def number(self, name: str) -> float:
        raw = self.text(name)
        try:
            value = float(raw)
        except ValueError:
            raise self.fail(name, f"{raw!r} is not a number") from None
        if not math.isfinite(value):
            raise self.fail(name, f"{raw!r} is not a finite number")
        return value


@dataclass(frozen=True)
class _Rules:
    """What a valid row must satisfy for one spec."""

    ref_name: str
    low: float
    high: float
    code_min: int
    code_max: int
    t_low: float
    t_high: float
    t_span: str

    @classmethod
    def of(cls, spec: Spec) -> _Rules:
        full = spec.sensor.full_scale
        t_low, t_high, t_span = -273.15, 1000.0, "the plausible range"
        if spec.temperature is not None:
            t_low, t_high = spec.temperature.min_c, spec.temperature.max_c
            t_span = (f"the compensated range {t_low:g} .. {t_high:g} C (temperature.min_c, "
                      "temperature.max_c)")
        return cls(reference_column(spec), -full if spec.sensor.bipolar else 0.0, full,
                   *code_range(spec.adc.bits),
                   t_low, t_high, t_span)

    def reference_ok(self, value: float) -> bool:
        """Within the sensor range (a relative 1e-9 of slack for decimal round-off)."""
        return self.low - 1e-9 * self.high <= value <= self.high * (1 + 1e-9)


_TIME_RE = re.compile(r"^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ$")


def _check_row(row: _Row, rules: _Rules, has_time: bool) -> None:
    """Every check of one row, raising the first problem with file, line and column."""
    serial = row.text("serial")
    if not SERIAL_RE.match(serial):
        raise row.fail("serial", f"{serial!r} must be 1 to 16 letters, digits, '.', '_' or "
                                 "'-', starting with a letter or digit")
    reference = row.number(rules.ref_name)
    if not rules.reference_ok(reference):
        raise row.fail(rules.ref_name, f"{reference:g} lies outside the sensor range "
                                       f"{rules.low:g} .. {rules.high:g}")
    temperature = row.number("temperature_c")
    if not rules.t_low <= temperature <= rules.t_high:
        raise row.fail("temperature_c", f"{temperature:g} C lies outside {rules.t_span}")
    mean = row.number("raw_mean_counts")
    if not rules.code_min <= mean <= rules.code_max:
        raise row.fail("raw_mean_counts", f"{mean:g} lies outside the code range "
                                          f"{rules.code_min} .. {rules.code_max}")
    std = row.number("raw_std_counts")
    if std < 0:
        raise row.fail("raw_std_counts", f"{std:g} is negative")
    raw_samples = row.text("samples")
    if not raw_samples.isdigit() or int(raw_samples) < 1:
        raise row.fail("samples", f"{raw_samples!r} is not a whole number of at least 1")
    if row.text("direction").lower() not in DIRECTIONS:
        raise row.fail("direction", f"{row.text('direction')!r} is not 'up' or 'down'")
    if has_time:
        parse_time_utc(row.text("time_utc"), f"{row.where}: time_utc")


def _fast_columns(rows: list[list[str]], index: dict[str, int], rules: _Rules,
                  has_time: bool) -> dict[str, np.ndarray] | None:
    """The columns as arrays if every row passes every check, else None (then
    ``_check_row`` row by row finds and reports the first problem). Same rules, in bulk."""
    def col(name: str) -> list[str]:
        i = index[name]
        return [r[i].strip() for r in rows]

    try:
        numbers = {name: np.array([float(x) for x in col(name)]) for name in (
            rules.ref_name, "temperature_c", "raw_mean_counts", "raw_std_counts")}
    except ValueError:
        return None
    samples_text = col("samples")
    directions = [d.lower() for d in col("direction")]
    serials = col("serial")
    if not all(np.isfinite(v).all() for v in numbers.values()) \
            or not all(x.isdigit() for x in samples_text) \
            or not set(directions) <= set(DIRECTIONS) \
            or not all(SERIAL_RE.match(x) for x in set(serials)):
        return None
    ref, temp = numbers[rules.ref_name], numbers["temperature_c"]
    mean, std = numbers["raw_mean_counts"], numbers["raw_std_counts"]
    samples = np.array([int(x) for x in samples_text], dtype=np.int64)
    if not ((ref >= rules.low - 1e-9 * rules.high) & (ref <= rules.high * (1 + 1e-9))).all() \
            or not ((temp >= rules.t_low) & (temp <= rules.t_high)).all() \
            or not ((mean >= rules.code_min) & (mean <= rules.code_max)).all() \
            or (std < 0).any() or (samples < 1).any():
        return None
    out = {"serial": np.array(serials, dtype=object), "reference": ref, "temperature_c": temp,
           "raw_mean": mean, "raw_std": std, "samples": samples,
           "up": np.array([d == "up" for d in directions])}
    if has_time:
        stamps = col("time_utc")
        if not all(_TIME_RE.match(x) for x in stamps):
            return None
        try:
            out["time"] = np.array([x[:-1] for x in stamps],
                                   dtype="datetime64[s]").astype(np.int64)
        except ValueError:
            return None
    return out


def parse_readings(text: str, spec: Spec, source: str) -> ReadingsFile:
    """Validate the CSV text of a readings file for ``spec``; ``source`` names it in errors."""
    body = [(n, ln) for n, ln in enumerate(text.splitlines(), start=1)
            if ln.strip() and not ln.lstrip().startswith("#")]
    if not body:
        raise InputError(f"{source}: no header and no readings")
    header_line, header_text = body[0]
    header = next(csv.reader([header_text]))
    index = _columns(header, spec, source, header_line)
    if len(body) == 1:
        raise InputError(f"{source}: the header is there but no readings follow")
    rules = _Rules.of(spec)
    has_time = "time_utc" in index
    lines = [n for n, _ in body[1:]]
    rows = [next(csv.reader([t])) if '"' in t else t.split(",") for _, t in body[1:]]
    for line, cells in zip(lines, rows, strict=True):
        if len(cells) != len(header):
            raise InputError(f"{source}:{line}: {len(cells)} fields, the header has "
                             f"{len(header)}")
    cols = _fast_columns(rows, index, rules, has_time)
    if cols is None:
        for line, cells in zip(lines, rows, strict=True):
            _check_row(_Row(cells, index, source, line), rules, has_time)
        raise AssertionError("the bulk and the row-by-row readings checks disagree")
    members: dict[str, list[int]] = {}
    for i, serial in enumerate(cols["serial"].tolist()):
        members.setdefault(serial, []).append(i)
    line_numbers = np.array(lines, dtype=np.int64)
    units = {}
    for serial, idx_list in members.items():
        idx = np.array(idx_list)
        units[serial] = UnitReadings(
            serial=serial, source=source, lines=line_numbers[idx],
            reference=cols["reference"][idx], temperature_c=cols["temperature_c"][idx],
            raw_mean=cols["raw_mean"][idx], raw_std=cols["raw_std"][idx],
            samples=cols["samples"][idx], up=cols["up"][idx],
            cal_time_utc=int(cols["time"][idx].max()) if has_time else None)
    digest = hashlib.sha256(text.encode("utf-8")).hexdigest()
    return ReadingsFile(source=source, sha256=digest, units=units)


def load_readings(path: Path, spec: Spec) -> ReadingsFile:
    """Read and validate a readings file; any problem is a one-line ``InputError``."""
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputError(f"{path}: no such file") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read: {exc.__class__.__name__}: {exc}") from None
    return parse_readings(text, spec, source=str(path))


def unit_cal_time(unit: UnitReadings, override: int | None) -> int:
    """The unit's calibration time, s since 1970 UTC: ``override`` (--cal-time), else the
    latest time_utc of its readings; never the clock, so a re-run gives the same bytes."""
    if override is not None:
        return override
    if unit.cal_time_utc is None:
        raise InputError(f"{unit.source}: time_utc: no such column and no --cal-time: the "
                         "calibration time must come from the readings or the option")
    return unit.cal_time_utc
