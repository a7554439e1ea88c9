"""``hosttool verify``: load, choose engines, verify, write the report; one call for the CLI."""


from __future__ import annotations

import json
import os
import time
from pathlib import Path
from typing import Any

from hosttool import __version__
from hosttool.design.cached import cached_design
from hosttool.design.resolve import Design
from hosttool.errors import InputError, OutputError
from hosttool.spec.schema import load_spec
from hosttool.util.tables import Row, sections, table
from hosttool.verify.endtoend import EndToEnd
from hosttool.verify.limit_cycles import report_json as limit_cycles_json
from hosttool.verify.proof import Engine, Verification, verify_design
from hosttool.verify.sweep import SettledEngine


def _fmt(value: float | None, digits: int = 4) -> str:
    return "-" if value is None else f"{value:.{digits}g}"


def end_to_end_json(e: EndToEnd) -> dict[str, Any]:
    """The ``end_to_end`` object of ``verify --json`` (output units)."""
    return {"max_error": e.worst, "at": e.worst_at, "at_temperature_c": e.worst_temperature_c,
            "model_error": e.worst_model, "arithmetic_error": e.worst_arithmetic,
            "bridge_nonlinearity": e.sensor_nonlinearity, "budget": e.budget,
            "passed": e.passed, "points": int(e.measurand.size),
            "temperatures_c": list(e.temperatures_c),
            "suggested_order": e.suggested_order, "suggested_max_error": e.suggested_worst,
            "rail_from": e.rail_from}


def verify_json(v: Verification) -> dict[str, Any]:
    """The stable JSON object of ``hosttool verify --json`` (keys documented in the README)."""
    d = v.design
    s = v.static
    return {
        "tool_version": __version__, "kind": "verification",
        "spec_name": d.spec.name, "spec_sha256": d.spec.sha256,
        "passed": v.passed, "reasons": list(v.reasons), "engines": list(v.engines),
        "seed": v.seed, "output_lsb": d.spec.output.resolution, "unit": d.spec.sensor.unit,
        "error_bound_lsb": d.error_bound_lsb, "error_rms_predicted_lsb": d.error_rms_lsb,
        "ideal_error_bound_lsb": d.ideal_error_bound_lsb,
        "budget": v.budget_units, "budget_used": v.budget_used,
        "end_to_end": None if v.accuracy is None else end_to_end_json(v.accuracy),
        "static": {"codes": s.codes, "temperatures_c": list(s.temperatures_c),
                   "evaluations": s.evaluations,
                   "max_error_lsb": s.max_error_lsb, "mean_abs_error_lsb": s.mean_abs_error_lsb,
                   "bound_lsb": s.bound_lsb, "saturations": s.saturations,
                   "monotonic": s.monotonic, "engines_agree": s.engines_agree,
                   "passed": s.passed},
        "tests": [{"name": t.name, "description": t.description, "samples": t.samples,
                   "outputs": t.outputs, "max_error_lsb": t.max_error_lsb,
                   "rms_error_lsb": t.rms_error_lsb,
                   "max_error": d.to_units(t.max_error_lsb),
                   "rms_error": d.to_units(t.rms_error_lsb),
                   "bound_lsb": t.bound_lsb, "sqnr_db": t.sqnr_db, "enob_bits": t.enob_bits,
                   "saturations": t.saturations, "peaks": t.peaks,
                   "engines_agree": t.engines_agree, "figures": t.figures,
                   "passed": t.passed} for t in v.tests],
        "headroom": [{"name": n.name, "bound": n.bound, "word": n.word,
                      "headroom_bits": n.headroom_bits} for n in d.all_nodes],
        "limit_cycles": limit_cycles_json(v.limit_cycles),
    }


def verify_text(v: Verification) -> str:
    """The verdict and one row per test."""
    d = v.design
    unit = d.spec.sensor.unit
    s = v.static
    temps = ", ".join(f"{t:g}" for t in s.temperatures_c) or "none"
    static_rows: list[Row] = [
        ("codes", f"{s.codes}", f"every code; temperatures (C): {temps}"),
        ("max error", f"{s.max_error_lsb:.4g} LSB", f"bound {s.bound_lsb:.4g} LSB"),
        ("mean |error|", f"{s.mean_abs_error_lsb:.4g} LSB", ""),
        ("saturations", f"{s.saturations}", ""),
        ("monotonic", "yes" if s.monotonic else "NO", ""),
        ("verdict", "pass" if s.passed else "FAIL", ""),
    ]
    test_rows: list[Row] = []
    for t in v.tests:
        agree = "" if t.engines_agree is None else (
            ", engines agree" if t.engines_agree else ", ENGINES DIFFER")
        sat = sum(t.saturations.values())
        extra = "".join(f", {k} {val:.4g}" for k, val in t.figures.items()
                        if k != "step_output_index")
        test_rows.append((t.name, f"{t.max_error_lsb:.4g} / {t.bound_lsb:.4g} LSB",
                          f"{'pass' if t.passed else 'FAIL'}; RMS {t.rms_error_lsb:.3g} LSB, "
                          f"SQNR {_fmt(t.sqnr_db, 4)} dB, {t.outputs} outputs, "
                          f"{sat} saturations{agree}{extra}"))
    summary: list[Row] = [
        ("engines", ", ".join(v.engines), "must agree bit for bit"),
        ("proven bound", f"{d.error_bound_lsb:.4g} LSB",
         f"= {d.to_units(d.error_bound_lsb):.4g} {unit}"),
        ("against the ideal design", f"{d.ideal_error_bound_lsb:.4g} LSB",
         f"= {d.to_units(d.ideal_error_bound_lsb):.4g} {unit}"),
        ("error budget", "-" if v.budget_units is None else f"{v.budget_units:g} {unit}",
         "" if v.budget_used is None else
         f"{v.budget_used:.1%} used by the reading against the measurand"),
        ("VERDICT", "PASS" if v.passed else "FAIL", "; ".join(v.reasons)),
    ]
    e = v.accuracy
    accuracy_rows: list[Row] = [] if e is None else [
        ("largest error", f"{e.worst:.4g} {unit}",
         f"at {e.worst_at:.6g} {unit}" + ("" if e.worst_temperature_c is None
                                          else f", {e.worst_temperature_c:g} C")),
        ("model part", f"{e.worst_model:.4g} {unit}",
         "float64 pipeline on the exact bridge voltage: linearisation residual"),
        ("arithmetic part", f"{e.worst_arithmetic:.4g} {unit}",
         "ADC code and integer rounding"),
        ("bridge nonlinearity", f"{e.sensor_nonlinearity:.4g} {unit}",
         "of a linear reading, before linearisation"),
        ("verdict", "-" if e.passed is None else ("pass" if e.passed else "FAIL"),
         f"{e.measurand.size} measurands x {max(1, len(e.temperatures_c))} temperatures"),
    ]
    cycle_rows: list[Row] = [(sec.name, sec.method, f"{sec.statement}; region {sec.region}, "
                              f"{sec.rounds} rounds") for sec in v.limit_cycles.sections]
    cycle_rows.append(("all sections", "", v.limit_cycles.statement))
    return sections([f"{d.spec.name}: verification (seed {v.seed})",
                     table("End to end: reading against the measurand", accuracy_rows),
                     table("Static path, exhaustive", static_rows),
                     table("Dynamic tests (max error / proven bound)", test_rows),
                     table("Limit cycles and dead band (chain LSB)", cycle_rows),
                     table("Verdict", summary)])


ENGINES = ("python", "c", "both")
#: Phases of ``timings`` in the JSON, seconds of wall time each.
TIMING_KEYS = ("import", "design", "static", "dynamic", "report")


def _engines(design: Design, engine: str
             ) -> tuple[dict[str, Engine], dict[str, SettledEngine]]:
    """The compiled engines (dynamic records, settled codes) besides the Python model."""
    if engine not in ENGINES:
        raise InputError(f"--engine: {engine!r} is not one of {', '.join(ENGINES)}")
    if engine == "python":
        return {}, {}
    from hosttool.firmware.compiled_model import host_engine  # deferred: only with a C engine

    c = host_engine(design)
    return {"c": c.record}, {"c": c.settled}


def _check_report_path(report: Path) -> None:
    folder = report.parent if str(report.parent) else Path(".")
    if not folder.is_dir():
        raise OutputError(f"--report: folder {folder} does not exist")
    if not os.access(folder, os.W_OK) or (report.exists() and not os.access(report, os.W_OK)):
        raise OutputError(f"--report: {report} cannot be written")


def run_verify(spec_path: Path, *, calibration: Path | None, samples: int, seed: int,
               engine: str, as_json: bool, report: Path | None,
               started: float | None = None) -> tuple[Verification, str]:
    """Verify a spec (or one unit of it); return the verification and the text to print.

    ``started``: the ``time.perf_counter()`` at which the process began importing, for
    the ``import`` figure of ``timings`` (JSON).
    """
    clock = time.perf_counter()
    timings = {"import": clock - started if started is not None else 0.0}
    if report is not None:
        _check_report_path(report)
    design = cached_design(load_spec(spec_path))
    if calibration is not None:
        # deferred on purpose: the CAL.json reader and the block layout, only for one unit
        from hosttool.formats.caljson import load_calibration

        design = design.with_constants(load_calibration(calibration, design))
    engines, static_engines = _engines(design, engine)
    timings["design"] = time.perf_counter() - clock
    verification = verify_design(design, samples=samples, seed=seed, engines=engines,
                                 static_engines=static_engines, timings=timings)
    clock = time.perf_counter()
    if report is not None:
        from hosttool.verify.report import write_report  # deferred: matplotlib, only for --report

        write_report(verification, report)
    data = verify_json(verification)
    timings["report"] = time.perf_counter() - clock
    data["timings"] = {k: round(timings[k], 4) for k in TIMING_KEYS}
    text = json.dumps(data, indent=2) + "\n" if as_json else verify_text(verification)
    return verification, text
