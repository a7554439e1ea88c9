"""``hosttool render``: a spec's C headers, optionally with one unit's constants compiled in."""

from __future__ import annotations

from pathlib import Path

from hosttool.codegen.render import check_replaced_blocks, render_headers, write_headers
from hosttool.design.cached import cached_design
from hosttool.formats.caljson import read_passed
from hosttool.spec.schema import load_spec
from hosttool.util.utctime import format_time_utc


def render_spec(spec_path: Path, folder: Path, *, calibration: Path | None = None,
                force: bool = False) -> list[str]:
    """``hosttool render``: the headers of a spec file into ``folder``; the lines to print.

    With ``calibration`` (a passed unit's CAL.json for this spec), that unit's constants
    become the compiled-in defaults and the banner names the unit. When the folder holds
    headers render wrote before, one line says whether calibration blocks made for them stay
    valid; a change of the blocks' meaning is refused (exit 2) unless ``force``.
    """
    design = cached_design(load_spec(spec_path))
    note = None
    if calibration is not None:
        record = read_passed(calibration, design)
        design = design.with_constants(record.constants)
        note = (f"constants of unit {record.serial}, calibrated "
                f"{format_time_utc(record.cal_time_utc)} ({calibration.name})")
    headers = render_headers(design, constants_note=note)
    blocks = check_replaced_blocks(folder, design, force=force) if folder.is_dir() else None
    written = write_headers(headers, folder, force=force)
    lines = [f"{'wrote' if changed else 'unchanged'} {path}" for path, changed in written]
    return lines + ([blocks] if blocks else [])
