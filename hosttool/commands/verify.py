"""``hosttool verify``: load, choose engines, verify, write the report; one call for the CLI."""

from __future__ import annotations

import json
import os
from pathlib import Path

from hosttool.commands.verify_text import verify_json, verify_text
from hosttool.design.resolve import Design, make_design
from hosttool.errors import InputError, OutputError
from hosttool.spec.schema import load_spec
from hosttool.verify.proof import Engine, Verification, verify_design

ENGINES = ("python", "c", "both")


def _engines(design: Design, engine: str) -> dict[str, Engine]:
    if engine not in ENGINES:
        raise InputError(f"--engine: {engine!r} is not one of {', '.join(ENGINES)}")
    if engine == "python":
        return {}
    from hosttool.firmware.compiled_model import host_engine

    return {"c": host_engine(design)}


def _check_report_path(report: Path) -> None:
    folder = report.parent if str(report.parent) else Path(".")
    if not folder.is_dir():
        raise OutputError(f"--report: folder {folder} does not exist")
    if not os.access(folder, os.W_OK) or (report.exists() and not os.access(report, os.W_OK)):
        raise OutputError(f"--report: {report} cannot be written")


def run_verify(spec_path: Path, *, calibration: Path | None, samples: int, seed: int,
               engine: str, as_json: bool, report: Path | None) -> tuple[Verification, str]:
    """Verify a spec (or one unit of it); return the verification and the text to print."""
    if report is not None:
        _check_report_path(report)
    design = make_design(load_spec(spec_path))
    if calibration is not None:
        from hosttool.production.fit import load_calibration

        design = design.with_constants(load_calibration(calibration, design))
    engines = _engines(design, engine)
    verification = verify_design(design, samples=samples, seed=seed, engines=engines)
    if report is not None:
        from hosttool.verify.report import write_report

        write_report(verification, report)
    text = (json.dumps(verify_json(verification), indent=2) + "\n" if as_json
            else verify_text(verification))
    return verification, text
