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
                      (2025-03-04T08:15:00Z or 2025-03-04T08:15:00+00:00, nothing else:
                      util/utctime.py); the unit's calibration time is its latest one
    standards         optional: the ids (in the register of reference standards, separated
                      by spaces) of the standards this reading was taken with

Lines starting with '#' are comments. Every error names the file, line and column.
"""

from __future__ import annotations

import csv
import difflib
import hashlib
import math
import re
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from hosttool.errors import InputError
from hosttool.physics.adc import code_range
from hosttool.spec.schema import Spec
from hosttool.util.text import control_character, shown
from hosttool.util.utctime import parse_times_utc

#: A serial (full match): it names files and fills the block's 16-byte field.
SERIAL_RE = re.compile(r"[A-Za-z0-9][A-Za-z0-9._-]{0,15}")
DIRECTIONS = ("up", "down")
REQUIRED = ("serial", "temperature_c", "raw_mean_counts", "raw_std_counts", "samples",
            "direction")
OPTIONAL = ("time_utc", "standards")


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
    times_utc: NDArray[np.int64] | None = None    # time_utc of each row, when given
    standards: tuple[tuple[str, ...], ...] = ()   # ids each row names (standards column)

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
    for i, name in enumerate(h.strip(CELL_PADDING) for h in header):
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
                             "and standards optional)")
    return index


_NUMBER_RE = re.compile(r"[+-]?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?")
#: The characters of such numbers. Over them, what Python's float() reads is exactly what
#: ``_NUMBER_RE`` matches (its other forms, inf, nan and digits with '_', need other
#: characters; Python language reference, "Floating-point literals", and float()): a
#: column whose cells are all of these characters and all read by float() is valid,
#: checked with one match of the whole column instead of one per cell.
_NUMBER_CHARS_RE = re.compile(r"[0-9.eE+-]*")
#: Stripped from both ends of a cell (and of a header name): only spaces and tabs, so any
#: other control character stays in the cell and is refused by its column's check.
CELL_PADDING = " \t"
#: The largest ``samples`` accepted (codes averaged into one reading).
SAMPLES_MAX = 1_000_000_000


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
        t_low, t_high, t_span = -273.15, 1000.0, "the plausible range -273.15 .. 1000 C"
        if spec.temperature is not None:
            t_low, t_high = spec.temperature.min_c, spec.temperature.max_c
            t_span = (f"the compensated range {t_low:g} .. {t_high:g} C (temperature.min_c, "
                      "temperature.max_c)")
        return cls(reference_column(spec), -full if spec.sensor.bipolar else 0.0, full,
                   *code_range(spec.adc.bits),
                   t_low, t_high, t_span)


@dataclass
class _Check:
    """One column checked for every row at once: its values and the rows it refuses.

    ``bad`` marks refused rows; ``message(i)`` says why row ``i`` is refused."""

    name: str
    values: np.ndarray
    bad: NDArray[np.bool_]
    message: Callable[[int], str]


def _numbers(name: str, cells: list[str], low: float, high: float, span: str,
             unit: str = "") -> _Check:
    """A column of decimal numbers (ASCII, plain or exponent notation) within low .. high."""
    try:
        parsed = list(map(float, cells)) if _NUMBER_CHARS_RE.fullmatch("".join(cells)) \
            else None
    except ValueError:
        parsed = None
    if parsed is None:
        parsed = [float(c) if _NUMBER_RE.fullmatch(c) else math.nan for c in cells]
    values = np.array(parsed, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        bad = ~((values >= low) & (values <= high))

    def message(i: int) -> str:
        cell, value = cells[i], values[i]
        if not _NUMBER_RE.fullmatch(cell):
            return f"{shown(cell)} is not a number (decimal notation, e.g. 12.5 or 1.25e3)"
        if not math.isfinite(value):
            return f"{shown(cell)} is not a finite number"
        return f"{value:g}{unit} lies outside {span}"

    return _Check(name, values, bad, message)


def _checks(cells: dict[str, list[str]], rules: _Rules, has_time: bool) -> list[_Check]:
    """Every check of every row, in the order a row's problems are reported."""
    codes = rules.code_max - rules.code_min
    slack = 1e-9 * rules.high             # decimal round-off at the ends of the range
    samples_text = cells["samples"]
    samples_ok = [t.isascii() and t.isdigit() and len(t) <= 10 for t in samples_text]
    samples = np.array([int(t) if ok else 0 for t, ok in zip(samples_text, samples_ok,
                                                             strict=True)], dtype=np.int64)
    column = "\n".join(cells["direction"])
    directions = column.lower().split("\n") if column.isascii() else \
        [d.lower() if d.isascii() else d for d in cells["direction"]]
    checks = [
        _numbers(rules.ref_name, cells[rules.ref_name], rules.low - slack, rules.high + slack,
                 f"the sensor range {rules.low:g} .. {rules.high:g}"),
        _numbers("temperature_c", cells["temperature_c"], rules.t_low, rules.t_high,
                 rules.t_span, " C"),
        _numbers("raw_mean_counts", cells["raw_mean_counts"], rules.code_min, rules.code_max,
                 f"the code range {rules.code_min} .. {rules.code_max}"),
        _numbers("raw_std_counts", cells["raw_std_counts"], 0.0, float(codes),
                 f"0 .. {codes} counts"),
        _Check("samples", samples, (samples < 1) | (samples > SAMPLES_MAX),
               lambda i: f"{shown(samples_text[i])} is not a whole number from 1 to "
                         f"{SAMPLES_MAX}"),
        _Check("direction", np.array([d == "up" for d in directions]),
               np.array([d not in DIRECTIONS for d in directions], dtype=bool),
               lambda i: f"{shown(cells['direction'][i])} is not 'up' or 'down'"),
    ]
    if has_time:
        seconds, refused = parse_times_utc(cells["time_utc"])
        bad = np.zeros(len(seconds), dtype=bool)
        bad[list(refused)] = True
        checks.append(_Check("time_utc", np.array(seconds, dtype=np.int64), bad,
                             refused.__getitem__))
    return checks


def _split(line: str, source: str, number: int) -> list[str]:
    """The cells of a line with quotes (csv module); a line it cannot split is refused."""
    try:
        return next(csv.reader([line]))
    except csv.Error as exc:
        raise InputError(f"{source}:{number}: not a CSV line: {exc}") from None


@dataclass(frozen=True)
class UnitRows:
    """One unit's rows as found in the file, in file order, not yet checked: 1-based line
    numbers and the text of each line (of the header's width)."""

    serial: str
    lines: list[int]
    texts: list[str]



def _columns_of(units: Sequence[UnitRows], index: dict[str, int], source: str
                ) -> dict[str, list[str]]:
    """The cells of every row of these units by column (name -> cells in row order),
    padding stripped. Rows without quotes (all of a usual file) are split together: every
    row has the header's width (``split_readings`` checked it), so column ``i`` is every
    width-th cell from ``i``."""
    texts = [t for u in units for t in u.texts]
    joined = ",".join(texts)
    if '"' not in joined:
        flat = joined.split(",")
        if " " in joined or "\t" in joined:
            flat = [c.strip(CELL_PADDING) for c in flat]
        width = len(flat) // len(texts)
        return {name: flat[i::width] for name, i in index.items()}
    rows = [[c.strip(CELL_PADDING) for c in (_split(t, source, n) if '"' in t
                                             else t.split(","))]
            for u in units for n, t in zip(u.lines, u.texts, strict=True)]
    return {name: [r[i] for r in rows] for name, i in index.items()}


@dataclass(frozen=True)
class RefusedRows:
    """A unit whose readings were refused: its first refused row and why."""

    serial: str
    line: int
    reason: str                      # file:line: column: reason


@dataclass(frozen=True)
class ReadingsLayout:
    """What every row of one readings file is checked against: the file's name, its
    columns (name -> position) and the spec's rules. Small: it travels to worker processes."""

    source: str
    index: dict[str, int]
    rules: _Rules

    def check(self, units: Sequence[UnitRows]) -> list[UnitReadings | RefusedRows]:
        """Check the rows of these units (all at once) and give, for each unit in order,
        its readings or its first refused row (in file order; within the row, the first
        refused column in the order of ``_checks``)."""
        lines = [n for u in units for n in u.lines]
        if not lines:
            return []
        columns = _columns_of(units, self.index, self.source)
        checks = _checks(columns, self.rules, "time_utc" in self.index)
        bad_rows = np.zeros(len(lines), dtype=bool)
        for check in checks:
            bad_rows |= check.bad
        cols = {check.name: check.values for check in checks}
        line_numbers = np.array(lines, dtype=np.int64)
        has_time = "time_utc" in self.index
        standards = columns.get("standards")
        any_bad = bool(bad_rows.any())
        sizes = [len(u.lines) for u in units]
        # each unit's latest time_utc, all at once (a unit has at least one row)
        latest = np.maximum.reduceat(cols["time_utc"], np.cumsum([0, *sizes[:-1]])).tolist() \
            if has_time else [None] * len(units)
        out: list[UnitReadings | RefusedRows] = []
        first = 0
        for unit, size, cal_time in zip(units, sizes, latest, strict=True):
            stop = first + size
            bad = np.flatnonzero(bad_rows[first:stop]) if any_bad else _NONE_BAD
            if bad.size:
                i = first + int(bad[0])
                out.append(RefusedRows(unit.serial, lines[i],
                                       _problem(checks, lines, i, self.source)))
            else:
                idx = slice(first, stop)
                out.append(UnitReadings(
                    serial=unit.serial, source=self.source, lines=line_numbers[idx],
                    reference=cols[self.rules.ref_name][idx],
                    temperature_c=cols["temperature_c"][idx],
                    raw_mean=cols["raw_mean_counts"][idx], raw_std=cols["raw_std_counts"][idx],
                    samples=cols["samples"][idx], up=cols["direction"][idx],
                    cal_time_utc=cal_time,
                    times_utc=cols["time_utc"][idx] if has_time else None,
                    standards=tuple(tuple(cell.split()) for cell in standards[idx])
                    if standards is not None else ()))
            first = stop
        return out


_NONE_BAD = np.zeros(0, dtype=np.intp)


def _problem(checks: list[_Check], lines: list[int], i: int, source: str) -> str:
    """``file:line: column: reason`` for the first check refusing row ``i``."""
    check = next(c for c in checks if c.bad[i])
    return f"{source}:{lines[i]}: {check.name}: {check.message(i)}"


@dataclass(frozen=True)
class SplitReadings:
    """A readings file checked as a whole (header, widths, serials) and split by unit; the
    rows themselves are checked by ``layout.check``, in worker processes for ``batch``."""

    layout: ReadingsLayout
    sha256: str
    units: list[UnitRows]            # in order of first appearance


def split_readings(text: str, spec: Spec, source: str) -> SplitReadings:
    """Check what refuses a whole readings file and split its rows by unit.

    Refused here, for the whole file, in this order: no header or no rows, a control
    character in the header, a bad header, a row of the wrong width (the first in file
    order), a bad serial (its first row in file order)."""
    numbers: list[int] = []
    texts: list[str] = []
    for n, line_text in enumerate(text.split("\n"), start=1):
        if line_text.strip() and not line_text.lstrip().startswith("#"):
            numbers.append(n)
            texts.append(line_text.removesuffix("\r"))
    if not texts:
        raise InputError(f"{source}: no header and no readings")
    header_line, header_text = numbers[0], texts[0]
    bad_char = control_character(header_text)
    if bad_char is not None:
        raise InputError(f"{source}:{header_line}: header: control character {bad_char}")
    header = _split(header_text, source, header_line)
    index = _columns(header, spec, source, header_line)
    if len(texts) == 1:
        raise InputError(f"{source}: the header is there but no readings follow")
    width = len(header)
    quoted = {i: _split(texts[i], source, numbers[i]) for i in range(1, len(texts))
              if '"' in texts[i]}
    for i in range(1, len(texts)):
        found = len(quoted[i]) if i in quoted else texts[i].count(",") + 1
        if found != width:
            raise InputError(f"{source}:{numbers[i]}: {found} fields, the header has {width}")
    serial_at = index["serial"]
    units: dict[str, UnitRows] = {}
    for i in range(1, len(texts)):
        cells = quoted[i] if i in quoted else texts[i].split(",", serial_at + 1)
        serial = cells[serial_at].strip(CELL_PADDING)
        unit = units.get(serial)
        if unit is None:
            unit = units[serial] = UnitRows(serial, [], [])
        unit.lines.append(numbers[i])
        unit.texts.append(texts[i])
    bad = [u for u in units.values() if SERIAL_RE.fullmatch(u.serial) is None]
    if bad:
        first = min(bad, key=lambda u: u.lines[0])
        raise InputError(f"{source}:{first.lines[0]}: serial: {shown(first.serial)} must be "
                         "1 to 16 letters, digits, '.', '_' or '-', starting with a letter "
                         "or digit")
    layout = ReadingsLayout(source, index, _Rules.of(spec))
    digest = hashlib.sha256(text.encode("utf-8")).hexdigest()
    return SplitReadings(layout, digest, list(units.values()))


def parse_readings(text: str, spec: Spec, source: str) -> ReadingsFile:
    """Validate the CSV text of a readings file for ``spec``; ``source`` names it in errors.

    One check, for all rows at once: each column is validated as a whole, and the first
    refused row (in file order; within it, the first refused column in the order of
    ``_checks``) refuses the whole file as ``file:line: column: reason``. (``batch`` instead
    refuses such a unit alone: ``split_readings`` and ``ReadingsLayout.check``.)"""
    split = split_readings(text, spec, source)
    checked = split.layout.check(split.units)
    refusals = [r for r in checked if isinstance(r, RefusedRows)]
    if refusals:
        raise InputError(min(refusals, key=lambda r: r.line).reason)
    return ReadingsFile(source=source, sha256=split.sha256,
                        units={r.serial: r for r in checked if isinstance(r, UnitReadings)})


def read_readings(path: Path) -> str:
    """The text of a readings file (a byte-order mark dropped); one-line ``InputError``."""
    try:
        return path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputError(f"{path}: no such file") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read: {exc.__class__.__name__}: {exc}") from None


def load_readings(path: Path, spec: Spec) -> ReadingsFile:
    """Read and validate a readings file; any problem is a one-line ``InputError``."""
    return parse_readings(read_readings(path), spec, source=str(path))


def unit_cal_time(unit: UnitReadings, override: int | None) -> int:
    """The unit's calibration time, s since 1970 UTC: ``override`` (--cal-time), else the
    latest time_utc of its readings; never the clock, so a re-run gives the same bytes."""
    if override is not None:
        return override
    if unit.cal_time_utc is None:
        raise InputError(f"{unit.source}: time_utc: no such column and no --cal-time: the "
                         "calibration time must come from the readings or the option")
    return unit.cal_time_utc
