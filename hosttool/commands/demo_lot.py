"""The production-line step of ``hosttool demo``: an invented lot through batch and inspect."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import numpy as np

from hosttool.commands.image import run_inspect
from hosttool.design.resolve import Design
from hosttool.errors import OutputError
from hosttool.production.batch import run_batch
from hosttool.production.synthetic_lot import UnitTruth, lot_csv, random_truth
from hosttool.util.atomic import write_atomic

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
           f"{data['crc32']} ok, spec hash matches)")
