"""``hosttool demo``: the whole flow that exists so far, on a bundled example, into a folder."""


from __future__ import annotations

import json
from collections.abc import Iterator
from pathlib import Path

import numpy as np

from hosttool.codegen.render import render_headers, write_headers
from hosttool.commands.check import budget_json, budget_text
from hosttool.commands.design import design_json, design_text
from hosttool.commands.inspect import run_inspect
from hosttool.commands.verify import verify_text
from hosttool.design.budget import compute_budget
from hosttool.design.model import run_integer
from hosttool.design.resolve import Design, make_design
from hosttool.errors import OutputError
from hosttool.firmware import build as cbuild
from hosttool.firmware.export import write_firmware
from hosttool.firmware.run import build_runner, demo_vectors, run_runner
from hosttool.production.batch import run_batch
from hosttool.production.synthetic_lot import UnitTruth, lot_csv, random_truth
from hosttool.spec.schema import parse_spec
from hosttool.util.atomic import write_atomic
from hosttool.util.resources import example_text
from hosttool.verify.proof import LONG_RUN_MIN, verify_design
from hosttool.verify.report import write_report

#: Units in the demo lot; the one at FAILING is made with too much span error.
LOT_SIZE = 8
FAILING = 5
#: 2025-03-04T08:00:00Z, when the invented lot was "measured".
START_UTC = 1_741_075_200


def run_lot(design: Design, spec_path: Path, folder: Path) -> Iterator[str]:
    """Simulate a lot, run the batch into ``folder/lot``, inspect the first image."""
    assert design.spec.calibration is not None
    lot = folder / "lot"
    images = lot / "images"
    try:
        images.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"{images}: cannot create: {exc.strerror}") from None
    prefix = design.spec.name[:2].upper()
    rng = np.random.default_rng(0)
    truths = [random_truth(f"{prefix}-{i:04d}", rng) for i in range(LOT_SIZE)]
    too_far = 1.5 * design.spec.calibration.span_tolerance_pct
    truths[FAILING] = UnitTruth(truths[FAILING].serial, span_error_pct=too_far)
    readings = write_atomic(lot / "readings.csv",
                            lot_csv(design, truths, seed=1, start_utc=START_UTC))
    yield (f"lot     {readings}  ({LOT_SIZE} invented units, synthetic readings; "
           f"{truths[FAILING].serial} made {too_far:g} % off span to fail)")
    summary = run_batch(spec_path, readings, out=images, db=lot / "production.sqlite",
                        station="demo", recalibrate=False, cal_time=None)
    passed = [o for o in summary.outcomes if o.status == "pass"]
    failed = [o for o in summary.outcomes if o.status != "pass"]
    yield (f"batch   {images}, {lot / 'production.sqlite'}  ({len(passed)} passed, "
           f"{len(failed)} failed: " + "; ".join(f"{o.serial}: {o.reason}" for o in failed)
           + ")")
    first = images / str(passed[0].hex_file)
    data, text = run_inspect(spec_path, first, as_json=False)
    write_atomic(lot / "inspect.txt", text)
    yield (f"inspect {lot / 'inspect.txt'}  ({first.name}: serial {data['serial']}, CRC-32 "
           f"{data['crc32']} ok, format identity {data['format_id']} matches)")


def _new_folder(base: Path) -> Path:
    """``base``, or ``base-2``, ``base-3`` ... whichever does not exist yet."""
    candidate, n = base, 1
    while candidate.exists():
        n += 1
        candidate = base.with_name(f"{base.name}-{n}")
    return candidate


def run_demo(folder: Path | None, example: str) -> Iterator[str]:
    """Run every step on the example into ``folder``; yield one line per thing done."""
    text = example_text(example)
    folder = _new_folder(Path.cwd() / "hosttool-demo") if folder is None else folder
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"{folder}: cannot create: {exc.strerror}") from None
    spec_path = write_atomic(folder / f"{example}.toml", text)
    spec = parse_spec(text, source=str(spec_path))
    yield f"spec    {spec_path}  (bundled example {example!r}, sha256 {spec.sha256[:16]}...)"

    budget = compute_budget(spec)
    write_atomic(folder / "budget.txt", budget_text(budget))
    write_atomic(folder / "budget.json", json.dumps(budget_json(budget), indent=2) + "\n")
    yield (f"check   {folder / 'budget.txt'}, budget.json  (PGA {budget.pga_gain}, "
           f"{budget.range_used_pct:.1f} % of range, {budget.noise_free_bits:.1f} noise-free "
           f"bits, {len(budget.warnings)} warnings)")
    design = make_design(spec)
    write_atomic(folder / "design.txt", design_text(design))
    write_atomic(folder / "design.json", json.dumps(design_json(design), indent=2) + "\n")
    yield (f"design  {folder / 'design.txt'}, design.json  (G = {design.guard_bits} guard bits, "
           f"proven error bound {design.error_bound_lsb:.3g} output LSB)")

    verification = verify_design(design, samples=LONG_RUN_MIN, seed=0)
    write_atomic(folder / "verify.txt", verify_text(verification))
    write_report(verification, folder / "report.html")
    yield (f"verify  {folder / 'report.html'}, verify.txt  "
           f"({'PASS' if verification.passed else 'FAIL'}: static path over "
           f"{verification.static.codes} codes, {len(verification.tests)} dynamic tests)")
    yield from _firmware(design, folder)
    yield from run_lot(design, spec_path, folder)
    yield f"done: everything is in {folder}"


def _firmware(design: Design, folder: Path) -> Iterator[str]:
    """Render the headers; where gcc is present, run the host runner against the model."""

    include = folder / "include"
    include.mkdir(exist_ok=True)
    paths = [path for path, _ in write_headers(render_headers(design), include, force=False)]
    yield f"render  {', '.join(str(p) for p in paths)}"
    sources = folder / "firmware"
    write_firmware(sources, design)
    yield (f"sources {sources}  (reference firmware, Makefile, CMakeLists.txt, headers and check "
           f"vectors; build and check it with: make -C {sources} host check-host)")
    if cbuild.missing_tools("host", run=True):
        yield "firmware: no host C compiler (gcc) found; skipped building the host runner"
        return
    codes, temps = demo_vectors(design)
    exe = build_runner(design, "host", folder / "firmware-build")
    same = np.array_equal(run_runner(exe, "host", codes, temps, timeout_s=60.0).output,
                          run_integer(design, codes, temps).output)
    yield (f"firmware {exe}: {codes.size} samples, "
           + ("matched the Python model bit for bit" if same else
              "DID NOT match the Python model: please report this as a bug"))
