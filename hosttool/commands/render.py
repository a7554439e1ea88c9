"""``hosttool render``: a spec's C headers, optionally with one unit's constants compiled in."""

from __future__ import annotations

from pathlib import Path

from hosttool.codegen.render import render_headers, write_headers
from hosttool.design.resolve import make_design
from hosttool.formats.caljson import read_passed
from hosttool.spec.schema import load_spec
from hosttool.util.utctime import format_time_utc


def render_spec(spec_path: Path, folder: Path, *, calibration: Path | None = None,
                force: bool = False) -> list[tuple[Path, bool]]:
    """``hosttool render``: the headers of a spec file into ``folder``.

    With ``calibration`` (a passed unit's CAL.json for this spec), that unit's constants
    become the compiled-in defaults and the banner names the unit.
    """
    design = make_design(load_spec(spec_path))
    note = None
    if calibration is not None:
        record = read_passed(calibration, design)
        design = design.with_constants(record.constants)
        note = (f"constants of unit {record.serial}, calibrated "
                f"{format_time_utc(record.cal_time_utc)} ({calibration.name})")
    return write_headers(render_headers(design, constants_note=note), folder, force=force)
