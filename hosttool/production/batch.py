"""``hosttool batch``: a whole lot from one readings file to images and the production record.

The main process checks the readings file as a whole and splits it by unit. Per unit, in
chunks of ``CHUNK`` (in worker processes with ``jobs`` > 1): check its rows, calibrate
(fit.py, ``PART`` units side by side) and, if it passed, encode the block and its Intel HEX
image in memory, name the reference standards used, and stage the image (on disk before
the chunk is handed back). The main process then records units in groups
of ``GROUP``, each group in one transaction of the record (SQLite or PostgreSQL, record.py)
holding the group's serials and the output folder's lock: each unit is decided from the
record, the group's staged images are published (renames, one folder fsync), then the
group's rows are inserted and committed together.

- Idempotent: a serial already recorded with the same spec, constants and calibration time
  is left alone: no new row, its image is not rewritten (only put back if it went missing).
- A serial whose current row passed, recorded with other constants, is refused unless
  ``recalibrate``: then a new revision is recorded and the old row kept (history). A serial
  whose current row failed (a reworked unit measured again) gets a new revision without it.
  Images are named ``<serial>.r<revision>.hex`` and never overwritten once recorded.
- Killed at any moment: an image is complete on disk before the rows naming it commit, so
  no partial image and no row naming a missing one can exist; a kill before the commit
  rolls the group back and leaves unrecorded images, which the re-run adopts (same bytes)
  or replaces. A power cut can at most roll back the group in progress (each commit is
  durable when it returns), whose published images are on disk: the re-run adopts them.
  Images are made durable in the batch's staging folder before they are published
  (util/staging.py); a killed batch's staging folder is removed by the next batch.
- Stations: each group holds its serials in the record (record.py ``lock``), so stations
  recording into one record, each into its own folder (PostgreSQL) or one shared folder,
  neither lose nor duplicate a unit; the folder lock only keeps the image writes of
  batches sharing a folder apart.
"""

from __future__ import annotations

import fcntl
import functools
import gc
import hashlib
import json
import math
import multiprocessing
import os
import re
import socket
from collections.abc import Callable, Iterable, Iterator, Sequence
from concurrent.futures import ProcessPoolExecutor
from contextlib import contextmanager
from dataclasses import dataclass, field
from datetime import UTC, datetime
from itertools import chain
from pathlib import Path
from typing import NamedTuple

import numpy as np

from hosttool import __version__
from hosttool.design.cached import cached_design
from hosttool.errors import HostToolError, InputError, OutputError
from hosttool.formats.caljson import constants_json
from hosttool.formats.hexfile import block_area, block_hex
from hosttool.formats.readings import (
    ReadingsLayout,
    RefusedRows,
    UnitReadings,
    UnitRows,
    read_readings,
    split_readings,
    unit_cal_time,
)
from hosttool.formats.standards import Standard, load_standards
from hosttool.production.fit import (
    CalibrationContext,
    UnitCalibration,
    UnitFailure,
    calibrate_units,
    point_limits,
)
from hosttool.production.record import Record, Row
from hosttool.production.record_open import open_record
from hosttool.production.traceability import check_lot_standards, unit_standards
from hosttool.spec.schema import load_spec
from hosttool.util.atomic import make_folder
from hosttool.util.parent_death import end_with_parent
from hosttool.util.staging import Staging, clear_stale, fsync_folder
from hosttool.util.text import control_character, shown
from hosttool.util.utctime import format_time_utc, parse_time_utc

#: Units calibrated side by side, whose images are then flushed together.
PART = 64
#: Units handed to a worker process at a time (with jobs > 1): parts whose fsyncs run while
#: the next part is calibrated.
CHUNK = 2 * PART
#: Units recorded per hold of the folder lock (their images share one flush).
GROUP = 128
#: Container objects allocated (less those freed) before the garbage collector's youngest
#: generation is walked, while a batch runs: with Python's default of 700 it ran some 250
#: times per 10,000 units (about 3 % of a process's time), nearly always for nothing, a
#: unit's objects being freed with it; at 10,000, a few times a lot.
GC_YOUNG = 10_000
#: The lock file in the output folder that stations take in turn for each group.
LOCK_NAME = ".hosttool-batch.lock"
#: Temporary files version 0.2.0 left when killed: ".<serial>.r<revision>.hex.tmp".
_TEMPORARY = re.compile(r"^\.[A-Za-z0-9][A-Za-z0-9._-]*\.r[0-9]+\.hex\.tmp$")


class Prepared(NamedTuple):
    """One unit calibrated and, if it passed, imaged in memory; or refused (reason). A
    named tuple: one per unit, made, copied and sent back from a worker faster than a
    frozen dataclass."""

    serial: str
    refused: str                  # "" unless refused
    verdict: str                  # "pass" / "fail" ("" when refused)
    reasons: tuple[str, ...]
    cal_time_utc: str             # ISO 8601
    constants: str                # canonical JSON
    figures: str                  # JSON
    image: bytes | None           # Intel HEX bytes when passed
    criteria: str = "[]"          # JSON: the pass/fail table
    points: str = "[]"            # JSON: each reading's firmware output, error and limit
    readings: str = "[]"          # JSON: the unit's readings as read
    standards: str = "[]"         # JSON: the reference standards used (traceability.py)
    staged: str | None = None     # the image's name in the batch's staging folder, on disk


@dataclass(frozen=True)
class Outcome:
    """What happened to one unit: status "pass", "fail" or "refused"."""

    serial: str
    status: str
    reasons: tuple[str, ...]
    hex_file: str | None
    new: bool                     # a row was added by this run
    revision: int | None = None   # the unit's current revision in the record

    @property
    def reason(self) -> str:
        """The reasons on one line."""
        return "; ".join(self.reasons)

    def json(self) -> dict[str, object]:
        """The unit's object in ``batch --json`` (docs/json.md)."""
        return {"serial": self.serial, "verdict": self.status, "image": self.hex_file,
                "revision": self.revision, "reasons": list(self.reasons),
                "recorded_now": self.new}


@dataclass(frozen=True)
class BatchSummary:
    """All units of the batch, in file order."""

    spec_name: str
    outcomes: tuple[Outcome, ...]
    lot: str = ""
    record: str = ""              # where the rows went (a URI without its password)
    certificates: dict[str, str] = field(default_factory=dict)   # serial -> page written

    @property
    def exit_code(self) -> int:
        """2 if some unit was refused, 1 if some failed its limits, else 0."""
        statuses = {o.status for o in self.outcomes}
        return 2 if "refused" in statuses else 1 if "fail" in statuses else 0


def refused(serial: str, reason: str) -> Prepared:
    """A unit refused on its own (the rest of the lot proceeds)."""
    return Prepared(serial, reason, "", (), "", "", "", None)


#: The record's JSON texts of a unit, written as ``json.dumps`` writes them (tests hold them
#: to it): its constants (canonical: sorted keys, no spaces) and figures (sorted keys) by
#: encoders made once; each criterion, reading and point by a template, its strings by
#: json's own escaping, its numbers by ``repr`` (what json writes for a finite float; the
#: reader refuses readings that are not finite).
_CONSTANTS = json.JSONEncoder(sort_keys=True, separators=(",", ":"))
_FIGURES = json.JSONEncoder(sort_keys=True)
_TEXT = json.encoder.encode_basestring_ascii
_CRITERION = ('{"key": %s, "label": %s, "value": %s, "limit": %s, "unit": %s, "source": %s, '
              '"pass": %s}')
#: A reading's object and a point's both start with its line, reference and temperature.
_HEAD = '{"line": %d, "reference": %s, "temperature_c": %s, '
_READING = _HEAD + ('"raw_mean_counts": %r, "raw_std_counts": %r, "samples": %d, '
                    '"direction": "%s"}')
_POINT = _HEAD + '"direction": "%s", "output": %s, "error": %s, "limit": %s}'


def prepare_units(ctx: CalibrationContext, units: Sequence[UnitReadings | RefusedRows],
                  override: int | None) -> list[Prepared]:
    """Calibrate units side by side (``calibrate_units``) and build each one's image bytes
    (pure: no files, no record).

    Anything that goes wrong with one unit alone refuses it, with the reason, and never
    the others: bad input (``HostToolError``), and, should a unit still reach one, an
    arithmetic failure (reported as a fault of the tool)."""
    out: list[Prepared | None] = [None] * len(units)
    readings: list[tuple[int, UnitReadings, int]] = []
    for i, unit in enumerate(units):
        if isinstance(unit, RefusedRows):
            out[i] = refused(unit.serial, unit.reason)
            continue
        try:
            readings.append((i, unit, unit_cal_time(unit, override)))
        except HostToolError as exc:
            out[i] = refused(unit.serial, str(exc))
    results = calibrate_units(ctx, [u for _, u, _ in readings], [t for _, _, t in readings])
    limits = _limit_texts(ctx, [u for _, u, _ in readings])
    for (i, unit, cal_time), result in zip(readings, results, strict=True):
        out[i] = _prepared(ctx, unit, cal_time, result, limits)
    return [p for p in out if p is not None]


def _limit_texts(ctx: CalibrationContext, units: Sequence[UnitReadings]) -> dict[float, str]:
    """The JSON text of ``point_limits`` at each reference the units read ("null": none)."""
    references = sorted({r for u in units for r in u.reference.tolist()})
    values = point_limits(ctx, np.array(references, dtype=np.float64)).tolist()
    return {r: "null" if v == math.inf else repr(v)
            for r, v in zip(references, values, strict=True)}


@functools.lru_cache(maxsize=64, typed=True)
def _criteria_template(rows: tuple[tuple[str, str, float | None, str, str], ...]) -> str:
    """The JSON text of a pass/fail table (key, label, limit, unit, source of each row)
    with each row's value and verdict left as %s: what every unit's table shares."""
    def text(s: str) -> str:
        return _TEXT(s).replace("%", "%%")
    return "[" + ", ".join([_CRITERION % (text(key), text(label), "%s",
                                          _number(limit).replace("%", "%%"), text(unit),
                                          text(source), "%s")
                            for key, label, limit, unit, source in rows]) + "]"


def _prepared(ctx: CalibrationContext, unit: UnitReadings, cal_time: int,
              result: UnitCalibration | UnitFailure, limits: dict[float, str]) -> Prepared:
    """One unit's record texts and, if it passed, its image bytes; or its refusal;
    ``limits``: ``_limit_texts`` of at least this unit."""
    try:
        if not isinstance(result, UnitCalibration):
            raise result
        image = None
        if result.passed:
            block = ctx.block.encode(result.constants, serial=unit.serial,
                                     cal_time_utc=cal_time)
            image = block_hex(ctx.design, block)
    except HostToolError as exc:
        return refused(unit.serial, str(exc))
    except (ArithmeticError, ValueError) as exc:
        return refused(unit.serial, f"{unit.where(0)}: serial {unit.serial}: the tool failed "
                       f"on this unit ({exc.__class__.__name__}: {exc}); please report it "
                       "with the readings")
    criteria = result.criteria
    template = _criteria_template(tuple((c.key, c.label, c.limit, c.unit, c.source)
                                        for c in criteria))
    n = unit.reference.size
    if result.output is None:
        output = error = ["null"] * n
    else:
        output = list(map(repr, result.output.tolist()))
        error = list(map(repr, (result.output - unit.reference).tolist()))
    lines, references = unit.lines.tolist(), unit.reference.tolist()
    shown_references = list(map(repr, references))      # each written twice: made once
    temperatures = list(map(repr, unit.temperature_c.tolist()))
    directions = ["up" if up else "down" for up in unit.up.tolist()]
    points = tuple(chain.from_iterable(zip(lines, shown_references, temperatures, directions,
                                           output, error, [limits[r] for r in references],
                                           strict=True)))
    readings = tuple(chain.from_iterable(zip(lines, shown_references, temperatures,
                                             unit.raw_mean.tolist(), unit.raw_std.tolist(),
                                             unit.samples.tolist(), directions, strict=True)))
    return Prepared(
        serial=unit.serial, refused="", verdict=result.verdict, reasons=result.reasons,
        cal_time_utc=format_time_utc(cal_time),
        constants=_CONSTANTS.encode(constants_json(result.constants)),
        figures=_FIGURES.encode(result.figures), image=image,
        criteria=template % tuple(chain.from_iterable(
            (_number(c.value), "true" if c.passed else "false") for c in criteria)),
        points=_list_template(_POINT, n) % points,
        readings=_list_template(_READING, n) % readings)


def _number(value: float | None) -> str:
    """A number (or None) as json.dumps writes it."""
    if type(value) is float and math.isfinite(value):
        return float.__repr__(value)
    if value is None:
        return "null"
    if type(value) is int:
        return int.__repr__(value)
    return json.dumps(value)


@functools.lru_cache(maxsize=64)
def _list_template(item: str, n: int) -> str:
    """The JSON text of a list of ``n`` objects written by the template ``item``."""
    return "[" + ", ".join([item] * n) + "]"


def _traced(p: Prepared, unit: UnitReadings | RefusedRows, staging: Staging,
            register: dict[str, Standard] | None, lot_ids: tuple[str, ...]) -> Prepared:
    """The unit with the reference standards its readings used (none named: none used) and,
    if it passed, the name its image is staged under; or refused (unknown standard, or one
    past its due date when a reading was taken)."""
    if p.refused or isinstance(unit, RefusedRows):
        return p
    standards = p.standards
    if lot_ids or unit.standards:
        try:
            used = unit_standards(unit, register, lot_ids,
                                  parse_time_utc(p.cal_time_utc, "cal_time_utc"))
        except InputError as exc:
            return refused(p.serial, str(exc))
        standards = json.dumps(used)
    return p._replace(standards=standards,
                      staged=None if p.image is None else staging.name(f"{p.serial}.hex"))


# ----------------------------------------------------------------------------- recording


def _sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


@dataclass(frozen=True)
class Station:
    """Where and how this batch records."""

    record: Record
    folder: Path
    name: str
    recalibrate: bool
    lot: str
    operator: str
    spec_name: str
    spec_sha256: str
    readings_sha256: str
    readings_name: str
    staging: Staging

    @functools.cached_property
    def _inside(self) -> str:
        return f"{self.folder}{os.sep}"

    def file(self, name: str) -> str:
        """The path of a file of the output folder (joined as text: many per lot)."""
        return self._inside + name

    @contextmanager
    def folder_lock(self) -> Iterator[None]:
        """Exclusive use of the output folder (flock on ``LOCK_NAME``) for one group."""
        try:
            fd = os.open(self.folder / LOCK_NAME, os.O_RDWR | os.O_CREAT, 0o666)
        except OSError as exc:
            raise OutputError(f"{self.folder / LOCK_NAME}: cannot open: {exc.strerror}") \
                from None
        try:
            fcntl.flock(fd, fcntl.LOCK_EX)
            yield
        finally:
            os.close(fd)


@dataclass(frozen=True)
class _Plan:
    """What to do for one unit, decided from the record before the group's files."""

    prepared: Prepared
    outcome: Outcome | None       # settled already (refused, or recorded before)
    current_id: int | None        # the current row the new one supersedes
    revision: int
    hex_file: str | None
    write: bool                   # the image file must be (re)written
    fresh: bool = False           # a name no row names: written unless the same is there


def _existing(path: str) -> bytes | None:
    """The bytes of the file at ``path``, None if there is none."""
    try:
        with open(path, "rb") as file:
            return file.read()
    except FileNotFoundError:
        return None
    except OSError as exc:
        raise OutputError(f"{path}: cannot read: {exc.strerror}") from None


def _decide(st: Station, p: Prepared, row: Row | None, last_revision: int) -> _Plan:
    """Inside the group's transaction, with the serial held (record ``lock``): ``row`` is
    its current row, ``last_revision`` its highest revision (0: none)."""
    if p.refused:
        return _Plan(p, Outcome(p.serial, "refused", (p.refused,), None, False), None, 0,
                     None, False)
    if row is not None:
        if (row.spec_sha256, row.constants, row.cal_time_utc) == (
                st.spec_sha256, p.constants, p.cal_time_utc):
            done = Outcome(p.serial, p.verdict, p.reasons, row.hex_file, False, row.revision)
            if row.hex_file is None or p.image is None:
                return _Plan(p, done, row.id, row.revision, None, False)
            existing = _existing(st.file(row.hex_file))
            if existing is not None and existing != p.image:
                return _Plan(p, Outcome(
                    p.serial, "refused", (f"{row.hex_file}: differs from the image its record "
                    f"names (sha256 {_sha256(existing)[:16]}... instead of "
                    f"{_sha256(p.image)[:16]}...): changed outside the tool; not overwritten",),
                    row.hex_file, False, row.revision), row.id, row.revision, None, False)
            return _Plan(p, done, row.id, row.revision, row.hex_file, existing is None)
        if row.verdict == "pass" and not st.recalibrate:
            return _Plan(p, Outcome(
                p.serial, "refused", (f"already recorded as passed (revision {row.revision}, "
                f"station {row.station}, calibrated {row.cal_time_utc}) with other "
                "constants; --recalibrate records a new revision and keeps the history",),
                row.hex_file, False, row.revision), row.id, row.revision, None, False)
    revision = last_revision + 1
    if p.image is None:
        return _Plan(p, None, None if row is None else row.id, revision, None, False)
    # an existing file of that name is a killed run's, never recorded: adopted or replaced
    # when the group publishes (``_publish_fresh``)
    return _Plan(p, None, None if row is None else row.id, revision,
                 f"{p.serial}.r{revision}.hex", True, fresh=True)


def _publish_fresh(st: Station, p: Prepared, hex_file: str) -> bool:
    """Publish the staged image of a new name, unless a killed run left the same bytes
    under it (kept as it is); a file with other bytes is replaced. True if renamed."""
    assert p.staged is not None
    final = st.file(hex_file)
    if st.staging.publish_new(p.staged, final):
        return True
    if _existing(final) == p.image:
        st.staging.discard(p.staged)
        return False
    st.staging.publish(p.staged, final)
    return True


def _row(st: Station, p: Prepared, revision: int, hex_file: str | None,
         recorded_utc: str) -> dict[str, object]:
    return {
        "serial": p.serial, "revision": revision, "current": 1, "station": st.name,
        "recorded_utc": recorded_utc,
        "cal_time_utc": p.cal_time_utc, "spec_name": st.spec_name,
        "spec_sha256": st.spec_sha256, "readings_file": st.readings_name,
        "readings_sha256": st.readings_sha256, "constants": p.constants,
        "figures": p.figures, "verdict": p.verdict,
        "reasons": json.dumps(list(p.reasons)) if p.reasons else "[]",
        "hex_file": hex_file, "hex_sha256": None if p.image is None else _sha256(p.image),
        "lot": st.lot, "operator": st.operator, "tool_version": __version__,
        "readings": p.readings, "standards": p.standards, "criteria": p.criteria,
        "points": p.points,
    }


def _outcome(plan: _Plan) -> Outcome:
    """What happened to the unit: settled before, or recorded now."""
    if plan.outcome is not None:
        return plan.outcome
    p = plan.prepared
    return Outcome(p.serial, p.verdict, p.reasons, plan.hex_file, True, plan.revision)


def commit_group(st: Station, group: list[Prepared]) -> list[Outcome]:
    """Record a group of units in one transaction holding their serials: decide each from
    the record, publish the group's staged images (renames, one folder fsync), insert the
    rows, commit."""
    with st.folder_lock(), st.record.group():
        serials = [p.serial for p in group if not p.refused]
        st.record.lock(serials)
        rows = st.record.currents(serials)
        revisions = st.record.revisions(serials)
        plans = [_decide(st, p, rows.get(p.serial), revisions.get(p.serial, 0))
                 for p in group]
        published = False
        for plan in plans:
            if plan.prepared.staged is None:
                continue
            if plan.fresh and plan.hex_file:
                published = _publish_fresh(st, plan.prepared, plan.hex_file) or published
            elif plan.write and plan.hex_file:
                st.staging.publish(plan.prepared.staged, st.file(plan.hex_file))
                published = True
            else:
                st.staging.discard(plan.prepared.staged)
        if published:
            fsync_folder(st.folder)
        recorded = datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%S.%fZ")   # the group's time
        st.record.add([(_row(st, plan.prepared, plan.revision, plan.hex_file, recorded),
                        plan.current_id) for plan in plans if plan.outcome is None])
    return [_outcome(plan) for plan in plans]


def clear_temporaries(st: Station) -> int:
    """Remove the temporary files a run of version 0.2.0 killed while writing its images
    left in the folder itself; returns how many. Done under the folder lock, which such
    a run held for every image write, so none is in progress. (This version stages its
    images in a folder of its own: util/staging.py.)"""
    with st.folder_lock():
        stale = [e.path for e in os.scandir(st.folder) if _TEMPORARY.fullmatch(e.name)]
        for path in stale:
            Path(path).unlink(missing_ok=True)
    return len(stale)


def _groups(stream: Iterable[Prepared], size: int) -> Iterator[list[Prepared]]:
    group: list[Prepared] = []
    for p in stream:
        group.append(p)
        if len(group) == size:
            yield group
            group = []
    if group:
        yield group


# ----------------------------------------------------------------------------- batch


@dataclass(frozen=True)
class _Work:
    """What every unit of the lot is prepared with (inherited by worker processes)."""

    ctx: CalibrationContext
    layout: ReadingsLayout
    override: int | None                       # --cal-time
    register: dict[str, Standard] | None
    lot_ids: tuple[str, ...]
    staging: Staging

    def chunk(self, units: list[UnitRows]) -> list[Prepared]:
        """Check the rows of these units, then, ``PART`` units at a time, calibrate them side
        by side, image and trace each, and stage their images: a part's fsyncs run while
        the next part is calibrated; all are on disk when this returns."""
        done = []
        flushing = []
        checked = self.layout.check(units)
        for first in range(0, len(checked), PART):
            part = checked[first:first + PART]
            images: dict[str, bytes] = {}
            for unit, prepared in zip(part, prepare_units(self.ctx, part, self.override),
                                      strict=True):
                p = _traced(prepared, unit, self.staging, self.register, self.lot_ids)
                if p.staged is not None and p.image is not None:
                    images[p.staged] = p.image
                done.append(p)
            flushing.append(self.staging.start(images))
        for part_flushing in flushing:
            part_flushing.wait()
        return done


_WORKER: list[_Work] = []  # filled in worker processes only


def _start_worker(work: _Work, parent: int) -> None:
    end_with_parent(parent)
    _WORKER.append(work)


def _work(units: list[UnitRows]) -> list[Prepared]:
    return _WORKER[0].chunk(units)


@contextmanager
def _no_collections() -> Iterator[None]:
    """The cyclic garbage collector paused, then as it was. For the split of a readings
    file, which makes no cycles, only lists it keeps (for 100,000 units, 1.3 million lines
    and 300,000 objects holding them): the collector would walk them again and again as
    they grow (that split took 1.6 to 1.9 s with it, 0.9 to 1.0 s without)."""
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_enabled:
            gc.enable()


@contextmanager
def _fewer_collections() -> Iterator[None]:
    """The collector's youngest generation walked every ``GC_YOUNG`` allocations (in this
    process and the workers forked meanwhile); the thresholds restored after."""
    thresholds = gc.get_threshold()
    gc.set_threshold(GC_YOUNG, *thresholds[1:])
    try:
        yield
    finally:
        gc.set_threshold(*thresholds)


@contextmanager
def _preparer(work: _Work, jobs: int, units: list[UnitRows]) -> Iterator[Iterator[Prepared]]:
    """The lot's units prepared, in file order: the rows checked, calibrated and imaged
    ``CHUNK`` units at a time, in ``jobs`` worker processes if > 1 (and the lot has at least
    two chunks).

    The workers are forked here, before the record is opened (an SQLite connection must not
    cross a fork), and given chunks once the first unit is asked for; they inherit the
    work's context instead of receiving it pickled; each chunk of units travels as its
    rows' text. Before the fork, this process freezes its objects for the garbage collector
    (``gc.freeze``): the workers' collections then skip the objects they inherit, instead of
    walking them (and copying every page they touch) again and again. Nothing a unit runs
    is compiled (the static path of a stack is numpy: design/static_stack.py), so no
    process of a batch imports numba.

    concurrent.futures' process pool, not multiprocessing.Pool: the latter's worker-minding
    thread also waits on the results pipe and so wakes at every piece of a chunk's results
    (about 800 kB through a 64 kB pipe) until the result thread has read it all, thousands of
    times a second; here one thread waits for a result and reads it whole. Leaving early
    (the recording failed) cancels the chunks not yet started."""
    chunks = (units[i:i + CHUNK] for i in range(0, len(units), CHUNK))
    if jobs <= 1 or len(units) < 2 * CHUNK:
        yield (p for c in chunks for p in work.chunk(c))
        return
    gc.freeze()
    try:
        with ProcessPoolExecutor(jobs, mp_context=multiprocessing.get_context("fork"),
                                 initializer=_start_worker, initargs=(work, os.getpid())) as pool:
            def prepared() -> Iterator[Prepared]:
                for part in pool.map(_work, chunks):
                    yield from part

            try:
                pool.submit(os.getpid).result()            # forks the workers now
                yield prepared()                           # chunks sent from the first unit
            finally:
                pool.shutdown(wait=True, cancel_futures=True)
    finally:
        gc.unfreeze()


def run_batch(spec_path: Path, readings_path: Path, *, out: Path, db: str | Path | None,
              station: str | None, recalibrate: bool, cal_time: int | None, jobs: int = 1,
              lot: str | None = None, operator: str = "", register: Path | None = None,
              lot_standards: tuple[str, ...] = (), certificates: bool = False,
              progress: Callable[[Iterable[Prepared], int], Iterable[Prepared]] | None = None
              ) -> BatchSummary:
    """Calibrate, image and record every unit of a readings file."""
    for option, name in (("--station", station), ("--lot", lot), ("--operator", operator)):
        if name and (control_character(name) or not name.strip()):
            raise InputError(f"{option}: {shown(name)} must be a name without control "
                             "characters")
    design = cached_design(load_spec(spec_path))
    ctx = CalibrationContext.of(design)
    block_area(design)
    with _no_collections():
        readings = split_readings(read_readings(readings_path), design.spec,
                                  str(readings_path))
    standards = load_standards(register) if register is not None else None
    check_lot_standards(lot_standards, standards, str(register))
    make_folder(out)
    clear_stale(out)
    staging = Staging(out)
    try:
        work = _Work(ctx, readings.layout, cal_time, standards, lot_standards, staging)
        with _fewer_collections(), _preparer(work, jobs, readings.units) as prepared:
            record = open_record(db if db is not None else out / "production.sqlite")
            st = Station(record=record, folder=out, name=station or socket.gethostname(),
                         recalibrate=recalibrate, lot=lot or readings_path.stem,
                         operator=operator, spec_name=design.spec.name,
                         spec_sha256=design.spec.sha256, readings_sha256=readings.sha256,
                         readings_name=readings_path.name, staging=staging)
            try:
                clear_temporaries(st)
                stream: Iterable[Prepared] = prepared
                if progress is not None:
                    stream = progress(stream, len(readings.units))
                outcomes = tuple(o for group in _groups(stream, GROUP)
                                 for o in commit_group(st, group))
                pages: dict[str, str] = {}
                if certificates:
                    # deferred on purpose: the certificate pages bring jinja2
                    from hosttool.production.certificate import write_certificates
                    pages = write_certificates(record, out, [(o.serial, o.revision)
                                                             for o in outcomes
                                                             if o.status == "pass"])
            finally:
                record.close()
    finally:
        staging.close()
    return BatchSummary(design.spec.name, outcomes, st.lot, record.where, pages)
