"""CAL.json: one unit's calibration as a versioned JSON file, and reading it back.

Top-level keys (format_version 1): format ("hosttool-calibration"), format_version,
tool_version, spec {name, sha256}, serial, cal_time_utc (ISO 8601, Z), readings {file,
sha256}, unit (output unit), formats {guard_bits, scale_shift, lin_norm_shift,
tc_zero_shift, tc_span_shift}, identity {format_id, items} (the design's format identity,
formats/calblock.py; files without it are bound to spec.sha256),
constants {offset, scale_mul, lin, tc_zero, tc_span},
verdict ("pass"/"fail"), reasons, criteria, figures, rounding, points, cautions,
content_sha256. The same readings give the same bytes (no wall-clock time inside).

``content_sha256`` is the SHA-256 (hex) of the file's canonical content: every other key,
as JSON with sorted keys, no spaces and ASCII escapes (``canonical``). Every reader
(``image``, ``render --calibration``, ``verify --calibration``) recomputes it and refuses
a file whose content no longer matches. It catches accidents and careless edits (a verdict
changed to "pass", a constant typed over), not a determined forger: anyone can recompute
an unkeyed hash. Against that, the production record (which names each image's SHA-256)
or a signature with a key the forger does not hold would be needed.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from hosttool.design.identity import differences
from hosttool.design.resolve import Design, UnitConstants
from hosttool.errors import InputError
from hosttool.formats.calblock import format_identity
from hosttool.formats.readings import SERIAL_RE
from hosttool.util.utctime import parse_time_utc

FORMAT = "hosttool-calibration"
FORMAT_VERSION = 1
HASH_KEY = "content_sha256"

@dataclass(frozen=True)
class CalRecord:
    """What a CAL.json holds that the image and the firmware need."""

    serial: str
    cal_time_utc: int
    constants: UnitConstants
    verdict: str


def formats(design: Design) -> dict[str, int | None]:
    """The fixed-point formats the constants are written in (must match on reading)."""
    tc, lin = design.temperature, design.linearisation
    return {"guard_bits": design.guard_bits, "scale_shift": design.scale.shift,
            "lin_norm_shift": lin.norm_shift if lin else None,
            "tc_zero_shift": tc.zero_shift if tc else None,
            "tc_span_shift": tc.span_shift if tc else None}


def identity_json(design: Design) -> dict[str, Any]:
    """The design's format identity as CAL.json keeps it: digest and items."""
    ident = format_identity(design)
    return {"format_id": ident.hex, "items": ident.as_dict()}


def _check_binding(data: dict[str, Any], design: Design, where: str) -> None:
    """A file with an identity must match the design's item by item (spec edits that leave
    the constants' meaning alone are fine); one without is bound to the spec's SHA-256."""
    if "identity" in data:
        ident = _get(data, "identity", dict, where)
        items = _get(ident, "items", dict, f"{where}: identity")
        changed = differences({str(k): str(v) for k, v in items.items()},
                              format_identity(design).as_dict())
        if changed:
            name = data["spec"].get("name") if isinstance(data.get("spec"), dict) else None
            raise InputError(f"{where}: identity: made for spec {name!r}, another design "
                             f"({'; '.join(changed)}); calibrate again")
        return
    spec = _get(data, "spec", dict, where)
    sha = _get(spec, "sha256", str, f"{where}: spec")
    if sha != design.spec.sha256:
        raise InputError(f"{where}: spec.sha256: made for spec {spec.get('name')!r} "
                         f"({sha[:16]}...), not {design.spec.source} "
                         f"({design.spec.sha256[:16]}...)")


def constants_json(c: UnitConstants) -> dict[str, Any]:
    """The constants as a JSON object (integers)."""
    return {"offset": c.offset, "scale_mul": c.scale_mul, "lin": list(c.lin),
            "tc_zero": c.tc_zero, "tc_span": c.tc_span}


def canonical(data: dict[str, Any]) -> str:
    """The canonical text of a CAL.json's content: every key but ``HASH_KEY``, sorted, no
    spaces, ASCII (floats as Python's shortest repr, which reads back to the same value)."""
    return json.dumps({k: v for k, v in data.items() if k != HASH_KEY}, sort_keys=True,
                      separators=(",", ":"), ensure_ascii=True)


def seal(data: dict[str, Any]) -> dict[str, Any]:
    """``data`` with its ``content_sha256`` (last key)."""
    digest = hashlib.sha256(canonical(data).encode("ascii")).hexdigest()
    return {**{k: v for k, v in data.items() if k != HASH_KEY}, HASH_KEY: digest}


def _check_seal(data: dict[str, Any], where: str) -> None:
    found = data.get(HASH_KEY)
    if not isinstance(found, str):
        raise InputError(f"{where}: {HASH_KEY}: missing: not written by this tool's "
                         "calibrate, or edited; calibrate the unit again")
    if found != seal(data)[HASH_KEY]:
        raise InputError(f"{where}: {HASH_KEY}: does not match the file's content (edited "
                         "since calibrate wrote it?); calibrate the unit again")


def _get(data: dict[str, Any], key: str, kind: type | tuple[type, ...], where: str) -> Any:
    if key not in data:
        raise InputError(f"{where}: {key}: missing")
    value = data[key]
    if isinstance(value, bool) and kind is not bool or not isinstance(value, kind):
        raise InputError(f"{where}: {key}: expected {getattr(kind, '__name__', kind)}, got "
                         f"{type(value).__name__}")
    return value


def _int(data: dict[str, Any], key: str, where: str) -> int:
    value = _get(data, key, int, where)
    if not -(1 << 31) <= value < 1 << 31:
        raise InputError(f"{where}: {key}: {value} does not fit an int32")
    return int(value)


def read_calfile(path: Path, design: Design) -> CalRecord:
    """Read CAL.json made for ``design``'s spec; ``InputError`` on anything else."""
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError(f"{path}: no such file") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read: {exc}") from None
    except json.JSONDecodeError as exc:
        raise InputError(f"{path}:{exc.lineno}: not valid JSON: {exc.msg}") from None
    except ValueError as exc:            # e.g. an integer of more digits than Python reads
        raise InputError(f"{path}: not valid JSON: {exc}") from None
    except RecursionError:
        raise InputError(f"{path}: not a hosttool calibration file: nested too deeply") \
            from None
    where = str(path)
    if not isinstance(data, dict) or data.get("format") != FORMAT:
        raise InputError(f"{where}: format: not a hosttool calibration file")
    _check_seal(data, where)
    if _get(data, "format_version", int, where) != FORMAT_VERSION:
        raise InputError(f"{where}: format_version: {data['format_version']}, this tool reads "
                         f"{FORMAT_VERSION}")
    _get(_get(data, "spec", dict, where), "sha256", str, f"{where}: spec")
    _check_binding(data, design, where)
    found = _get(data, "formats", dict, where)
    if found != formats(design):
        raise InputError(f"{where}: formats: {found} differ from this design's "
                         f"{formats(design)}: the design changed since calibration; "
                         "calibrate again")
    serial = _get(data, "serial", str, where)
    if not SERIAL_RE.fullmatch(serial):
        raise InputError(f"{where}: serial: {serial!r} is not a valid serial")
    cal_time = parse_time_utc(_get(data, "cal_time_utc", str, where), f"{where}: cal_time_utc")
    c = _get(data, "constants", dict, where)
    cw = f"{where}: constants"
    lin = _get(c, "lin", list, cw)
    lin_values = tuple(_int({"lin": v}, "lin", cw) for v in lin)
    constants = UnitConstants(offset=_int(c, "offset", cw), scale_mul=_int(c, "scale_mul", cw),
                              lin=lin_values, tc_zero=_int(c, "tc_zero", cw),
                              tc_span=_int(c, "tc_span", cw))
    verdict = _get(data, "verdict", str, where)
    if verdict not in ("pass", "fail"):
        raise InputError(f"{where}: verdict: {verdict!r} is not 'pass' or 'fail'")
    return CalRecord(serial=serial, cal_time_utc=cal_time, constants=constants,
                     verdict=verdict)


def read_passed(path: Path, design: Design) -> CalRecord:
    """A CAL.json for ``design``'s spec whose unit passed, its constants checked against the
    design's formats; anything else is refused (exit status 2)."""
    record = read_calfile(path, design)
    if record.verdict != "pass":
        raise InputError(f"{path}: verdict: the unit {record.serial} failed its limits; its "
                         "constants must not go into a unit")
    design.check_unit(record.constants, str(path))
    return record


def load_calibration(path: Path, design: Design) -> UnitConstants:
    """The constants of a passed unit's CAL.json made for ``design``'s spec.

    Refuses (``InputError``/``DesignError``, exit status 2) a file for another spec (spec
    hash), other fixed-point formats, a failed unit, or constants outside the formats.
    """
    return read_passed(path, design).constants
