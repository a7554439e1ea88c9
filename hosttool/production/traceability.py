"""The reference standards of each unit's readings, checked against the register.

A reading names its standards in the readings file's ``standards`` column, and the batch
may name standards for the whole lot (``--standard``). Each one must be in the register
(formats/standards.py) and within its calibration interval when the reading was taken
(its ``time_utc``, else the unit's calibration time): a reading taken with a standard past
its due date refuses the unit, naming the reading, the standard and its certificate.
"""

from __future__ import annotations

from hosttool.errors import InputError
from hosttool.formats.readings import UnitReadings
from hosttool.formats.standards import Standard
from hosttool.util.utctime import format_time_utc


def check_lot_standards(ids: tuple[str, ...], register: dict[str, Standard] | None,
                        register_name: str) -> None:
    """The lot's ``--standard`` ids must be in the register (refuses the whole batch)."""
    if ids and register is None:
        raise InputError("--standard: needs the register of standards (--register FILE)")
    for standard_id in ids:
        if register is not None and standard_id not in register:
            raise InputError(f"--standard: {standard_id!r} is not in the register "
                             f"{register_name}")


def unit_standards(unit: UnitReadings, register: dict[str, Standard] | None,
                   lot_ids: tuple[str, ...], cal_time_utc: int) -> list[dict[str, object]]:
    """The standards the unit's readings were taken with (as recorded), or ``InputError``
    naming the first reading whose standard is unknown or past its due date."""
    used: dict[str, Standard] = {}
    for i in range(unit.reference.size):
        named = lot_ids + (unit.standards[i] if unit.standards else ())
        if named and register is None:
            raise InputError(f"{unit.where(i)}: standards: the readings name standards; give "
                             "the register of standards (--register FILE)")
        taken = int(unit.times_utc[i]) if unit.times_utc is not None else cal_time_utc
        for standard_id in named:
            assert register is not None
            standard = register.get(standard_id)
            if standard is None:
                raise InputError(f"{unit.where(i)}: standards: {standard_id!r} is not in the "
                                 "register")
            if not standard.valid_at(taken):
                raise InputError(f"{unit.where(i)}: standards: {standard_id} (certificate "
                                 f"{standard.certificate}) was due for recalibration on "
                                 f"{standard.due.isoformat()}; the reading of "
                                 f"{format_time_utc(taken)} is refused")
            used[standard_id] = standard
    return [used[k].json() for k in sorted(used)]
