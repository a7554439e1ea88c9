"""The register of reference standards (TOML): the weights, shunt resistors, calibrators and
thermometers a line measures its units against, with their calibration certificates.

    [[standard]]
    id = "M20-03"                  # letters, digits, '.', '_', '-'; unique in the register
    kind = "mass"                  # free text: mass, shunt resistor, calibrator, ...
    nominal = 20.0                 # nominal value, in `unit`
    unit = "kg"
    uncertainty = 0.0004           # expanded uncertainty of the certificate, in `unit`
    certificate = "LAB-26-0412"    # number of its calibration certificate
    due = 2027-03-01               # TOML date: valid through this day (UTC)

Every error names the file, the entry and the key.
"""

from __future__ import annotations

import datetime as dt
import math
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from hosttool.errors import InputError
from hosttool.util.text import control_character, shown

ID_RE = re.compile(r"[A-Za-z0-9][A-Za-z0-9._-]{0,31}")  # full match
KEYS = ("id", "kind", "nominal", "unit", "uncertainty", "certificate", "due")


@dataclass(frozen=True)
class Standard:
    """One reference standard of the register."""

    id: str
    kind: str
    nominal: float
    unit: str
    uncertainty: float
    certificate: str
    due: dt.date

    def valid_at(self, seconds_utc: int) -> bool:
        """True when a reading at this time (s since 1970 UTC) falls on or before ``due``."""
        return dt.datetime.fromtimestamp(seconds_utc, dt.UTC).date() <= self.due

    def json(self) -> dict[str, Any]:
        """The standard as recorded with each unit that used it."""
        return {"id": self.id, "kind": self.kind, "nominal": self.nominal, "unit": self.unit,
                "uncertainty": self.uncertainty, "certificate": self.certificate,
                "due": self.due.isoformat()}


def _entry(item: Any, where: str) -> Standard:
    if not isinstance(item, dict):
        raise InputError(f"{where}: expected a table")
    for key in item:
        if key not in KEYS:
            raise InputError(f"{where}: {key}: unknown key (keys: {', '.join(KEYS)})")
    for key in KEYS:
        if key not in item:
            raise InputError(f"{where}: {key}: missing")
    for key in ("id", "kind", "unit", "certificate"):
        if not isinstance(item[key], str) or not item[key].strip():
            raise InputError(f"{where}: {key}: expected a non-empty string")
        bad = control_character(item[key])
        if bad is not None:
            raise InputError(f"{where}: {key}: control character {bad} in {shown(item[key])}")
    if not ID_RE.fullmatch(item["id"]):
        raise InputError(f"{where}: id: {item['id']!r} must be 1 to 32 letters, digits, '.', "
                         "'_' or '-', starting with a letter or digit")
    for key in ("nominal", "uncertainty"):
        if isinstance(item[key], bool) or not isinstance(item[key], int | float):
            raise InputError(f"{where}: {key}: expected a number")
        if not (abs(item[key]) <= 1e300 and math.isfinite(item[key])):
            raise InputError(f"{where}: {key}: expected a finite number")
    if item["uncertainty"] < 0:
        raise InputError(f"{where}: uncertainty: {item['uncertainty']} is negative")
    due = item["due"]
    if not isinstance(due, dt.date) or isinstance(due, dt.datetime):
        raise InputError(f"{where}: due: expected a TOML date such as 2027-03-01")
    return Standard(id=item["id"], kind=item["kind"].strip(), nominal=float(item["nominal"]),
                    unit=item["unit"].strip(), uncertainty=float(item["uncertainty"]),
                    certificate=item["certificate"].strip(), due=due)


def load_standards(path: Path) -> dict[str, Standard]:
    """Read and validate a register; ``InputError`` naming file, entry and key."""
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError(f"{path}: no such file") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read: {exc}") from None
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{path}: not valid TOML: {exc}") from None
    except RecursionError:
        raise InputError(f"{path}: not valid TOML: nested too deeply") from None
    except ValueError as exc:          # an integer of more digits than Python reads
        raise InputError(f"{path}: not valid TOML: {exc}") from None
    extra = [k for k in data if k != "standard"]
    if extra:
        raise InputError(f"{path}: {extra[0]}: unknown key (the register holds [[standard]] "
                         "entries)")
    items = data.get("standard", [])
    if not isinstance(items, list) or not items:
        raise InputError(f"{path}: standard: no [[standard]] entries")
    register: dict[str, Standard] = {}
    for n, item in enumerate(items):
        standard = _entry(item, f"{path}: standard[{n}]")
        if standard.id in register:
            raise InputError(f"{path}: standard[{n}]: id: {standard.id!r} given twice")
        register[standard.id] = standard
    return register
