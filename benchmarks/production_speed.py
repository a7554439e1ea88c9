"""Production-line speed: synthetic lots calibrated, imaged and recorded by ``run_batch``.

For lots of 1,000, 5,000 and 10,000 invented units of the hive_scale example (each with
13 readings: a sweep up and down at 20 C, zero and full scale at two more temperatures),
times the whole batch (readings parsed, every unit fitted and judged on the bit-exact
static path, its block encoded, its Intel HEX image written, its row recorded in SQLite)
into a fresh folder and record, and prints units per second and the cost per unit, which
should stay flat if the cost grows linearly. The readings are generated first and not
timed. Target: 10,000 units in at most 10 s on a 2-core machine. Figures depend on the
disk (image writes and record commits); asserts nothing.

Run: python benchmarks/production_speed.py [--jobs N] [--sizes 1000,5000,10000]
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np

from hosttool.design.resolve import make_design
from hosttool.production.batch import run_batch
from hosttool.production.synthetic_lot import lot_csv, random_truth
from hosttool.spec.schema import load_spec

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
START = 1_741_075_200


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--jobs", type=int, default=2, help="worker processes (default 2)")
    parser.add_argument("--sizes", default="1000,5000,10000", help="lot sizes, comma separated")
    args = parser.parse_args()
    sizes = [int(s) for s in args.sizes.split(",")]
    spec_path = EXAMPLES / "hive_scale.toml"
    design = make_design(load_spec(spec_path))
    rng = np.random.default_rng(1)
    truths = [random_truth(f"HS{i:05d}", rng) for i in range(max(sizes))]
    print(f"production line, {spec_path.name}, {args.jobs} worker process(es)")
    print(f"{'units':>7}  {'seconds':>8}  {'units/s':>8}  {'ms/unit':>8}  result")
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        for n in sizes:
            readings = root / f"lot{n}.csv"
            readings.write_text(lot_csv(design, truths[:n], seed=n, start_utc=START))
            out = root / f"out{n}"
            out.mkdir()
            t0 = time.perf_counter()
            summary = run_batch(spec_path, readings, out=out, db=None, station="bench",
                                recalibrate=False, cal_time=None, jobs=args.jobs)
            elapsed = time.perf_counter() - t0
            passed = sum(o.status == "pass" for o in summary.outcomes)
            print(f"{n:7d}  {elapsed:8.2f}  {n / elapsed:8.0f}  {elapsed / n * 1e3:8.3f}  "
                  f"{passed} passed, exit {summary.exit_code}")


if __name__ == "__main__":
    main()
