"""Per-unit cost of the production line: ``batch.prepare_units`` on one core.

``prepare_units`` is the work a batch does for every unit before recording it, on a chunk
of ``batch.PART`` units at a time: calibrate the units' readings side by side (fit,
constants, the bit-exact static path, verdict), encode each block, build its Intel HEX
image and the JSON texts its record row holds. This script times it
over an invented lot (hosttool/production/synthetic_lot.py) of each example spec, in one
process on one core, and prints the median over ``--repeat`` passes of milliseconds per
unit (the first pass over the lot warms every cache and is not counted), in wall time
and in the CPU time of this process (less sensitive to other work on the machine).
Interleaved: each pass runs every spec once, so a change of load hits both alike. The load
average is printed before and after: figures taken on a busy machine are not worth much.
Asserts nothing.

Run: python benchmarks/unit_speed.py [--units 1000] [--repeat 5] [--profile]
"""

from __future__ import annotations

import argparse
import cProfile
import os
import pstats
import statistics
import time
from pathlib import Path

import numpy as np

from hosttool.design.cached import cached_design
from hosttool.formats.readings import UnitReadings, parse_readings
from hosttool.production.batch import PART, prepare_units
from hosttool.production.fit import CalibrationContext
from hosttool.production.synthetic_lot import lot_csv, random_truth
from hosttool.spec.schema import load_spec

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
START_UTC = 1_741_075_200
SPECS = ("hive_scale", "fatigue_coupon")


def lot(name: str, units: int) -> tuple[CalibrationContext, list[UnitReadings]]:
    """The context of an example spec and an invented lot of ``units`` units."""
    design = cached_design(load_spec(EXAMPLES / f"{name}.toml"))
    rng = np.random.default_rng(1)
    truths = [random_truth(f"U{i:06d}", rng) for i in range(units)]
    text = lot_csv(design, truths, seed=units, start_utc=START_UTC)
    readings = parse_readings(text, design.spec, f"{name}.csv")
    return CalibrationContext.of(design), list(readings.units.values())


def one_pass(ctx: CalibrationContext, units: list[UnitReadings]) -> tuple[float, float]:
    """Seconds per unit of one pass of ``prepare_units`` over the lot: wall and CPU time."""
    t0, c0 = time.perf_counter(), time.process_time()
    for first in range(0, len(units), PART):
        prepare_units(ctx, units[first:first + PART], None)
    return (time.perf_counter() - t0) / len(units), (time.process_time() - c0) / len(units)


def main() -> None:
    parser = argparse.ArgumentParser(description=(__doc__ or "").splitlines()[0])
    parser.add_argument("--units", type=int, default=1000)
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--specs", default=",".join(SPECS))
    parser.add_argument("--profile", action="store_true",
                        help="also print a cProfile of one pass per spec")
    args = parser.parse_args()
    print(f"load average before: {os.getloadavg()[0]:.2f} ({os.cpu_count()} cores)")
    lots = {name: lot(name, args.units) for name in args.specs.split(",")}
    for ctx, units in lots.values():
        one_pass(ctx, units)                       # warm: compiled kernels, caches
    times: dict[str, list[tuple[float, float]]] = {name: [] for name in lots}
    for _ in range(args.repeat):
        for name, (ctx, units) in lots.items():
            times[name].append(one_pass(ctx, units))
    print(f"batch.prepare_units, chunks of {PART}, one core, {args.units} invented units, "
          f"median of {args.repeat}, ms per unit")
    print(f"  {'spec':16s} {'readings':>8s} {'wall':>7s} {'cpu':>7s} {'min wall':>8s}")
    for name, (_, units) in lots.items():
        readings = sum(u.reference.size for u in units) / len(units)
        wall = [w for w, _ in times[name]]
        cpu = [c for _, c in times[name]]
        print(f"  {name:16s} {readings:8.0f} {statistics.median(wall) * 1e3:7.3f} "
              f"{statistics.median(cpu) * 1e3:7.3f} {min(wall) * 1e3:8.3f}")
    print(f"load average after: {os.getloadavg()[0]:.2f}")
    if args.profile:
        for name, (ctx, units) in lots.items():
            profile = cProfile.Profile()
            profile.runcall(one_pass, ctx, units)
            print(f"--- {name}")
            pstats.Stats(profile).sort_stats("tottime").print_stats(25)


if __name__ == "__main__":
    main()
