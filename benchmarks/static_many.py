"""A stack of units at once against unit by unit: the constants' check and the static path.

``Design.check_in_force_many`` and ``static_stack.static_outputs_many`` (numpy) do for a
stack of U units what ``Design.check_in_force`` and ``model.static_integer`` do per unit (a
batch's worker calibrates its units in stacks). This script times both ways on hive_scale
with invented constants near the nominal ones and random codes and temperatures, U units of
n readings per stack, and prints the median over ``--repeat`` passes of microseconds per
unit, in the CPU time of this process and in wall time. Interleaved: each pass runs the four timings
one after another, so a change of load hits them alike. The load average is printed before
and after. Asserts nothing.

Run: python benchmarks/static_many.py [--units 64] [--readings 13] [--stacks 50] [--repeat 7]
"""

from __future__ import annotations

import argparse
import os
import statistics
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np

from hosttool.design.cached import cached_design
from hosttool.design.model import static_integer
from hosttool.design.resolve import Design, UnitConstants
from hosttool.design.static_stack import static_outputs_many
from hosttool.spec.schema import load_spec

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
Stack = tuple[list[UnitConstants], np.ndarray, np.ndarray]


def invented_stack(design: Design, rng: np.random.Generator, units: int,
                   readings: int) -> Stack:
    """Constants near the nominal ones (zero within 1,000 counts, span within 5 %, small
    temperature coefficients), codes over the ADC range, temperatures over the clamp range."""
    n = design.nominal
    g = design.guard_bits
    constants = [UnitConstants(offset=n.offset + int(rng.integers(-1000, 1000)) * 2 ** g,
                               scale_mul=int(n.scale_mul * rng.uniform(0.95, 1.05)),
                               lin=n.lin, tc_zero=int(rng.integers(-1000, 1000)),
                               tc_span=int(rng.integers(-1000, 1000)))
                 for _ in range(units)]
    codes = rng.integers(design.code_min, design.code_max + 1, size=(units, readings))
    temps = rng.integers(-2000, 4500, size=(units, readings))
    return constants, codes, temps


def per_unit_check(design: Design, stack: Stack) -> None:
    for c in stack[0]:
        design.check_in_force(c)


def stacked_check(design: Design, stack: Stack) -> None:
    design.check_in_force_many(stack[0])


def per_unit_outputs(design: Design, stack: Stack) -> None:
    constants, codes, temps = stack
    for i, c in enumerate(constants):
        static_integer(design, codes[i], temps[i], constants=c)


def stacked_outputs(design: Design, stack: Stack) -> None:
    static_outputs_many(design, stack[1], stack[2], stack[0])


WAYS: dict[str, Callable[[Design, Stack], None]] = {
    "check_in_force per unit": per_unit_check,
    "check_in_force_many": stacked_check,
    "static_integer per unit": per_unit_outputs,
    "static_outputs_many": stacked_outputs,
}


def one_pass(way: Callable[[Design, Stack], None], design: Design,
             stacks: list[Stack]) -> tuple[float, float]:
    """Seconds per unit of ``way`` over every stack: CPU and wall time."""
    c0, t0 = time.process_time(), time.perf_counter()
    for stack in stacks:
        way(design, stack)
    units = sum(len(s[0]) for s in stacks)
    return (time.process_time() - c0) / units, (time.perf_counter() - t0) / units


def main() -> None:
    parser = argparse.ArgumentParser(description=(__doc__ or "").splitlines()[0])
    parser.add_argument("--units", type=int, default=64, help="units per stack (U)")
    parser.add_argument("--readings", type=int, default=13, help="readings per unit (n)")
    parser.add_argument("--stacks", type=int, default=50, help="stacks per pass")
    parser.add_argument("--repeat", type=int, default=7)
    args = parser.parse_args()
    print(f"load average before: {os.getloadavg()[0]:.2f} ({os.cpu_count()} cores)")
    design = cached_design(load_spec(EXAMPLES / "hive_scale.toml"))
    rng = np.random.default_rng(1)
    stacks = [invented_stack(design, rng, args.units, args.readings)
              for _ in range(args.stacks)]
    for way in WAYS.values():
        one_pass(way, design, stacks[:1])            # warm: compiled kernels
    times: dict[str, list[tuple[float, float]]] = {name: [] for name in WAYS}
    for _ in range(args.repeat):
        for name, way in WAYS.items():
            times[name].append(one_pass(way, design, stacks))
    print(f"hive_scale, one core, stacks of {args.units} units x {args.readings} readings, "
          f"{args.stacks} stacks per pass, median of {args.repeat}, microseconds per unit")
    print(f"  {'':24s} {'cpu':>7s} {'wall':>7s}")
    for name, rows in times.items():
        cpu = statistics.median(c for c, _ in rows) * 1e6
        wall = statistics.median(w for _, w in rows) * 1e6
        print(f"  {name:24s} {cpu:7.2f} {wall:7.2f}")
    print(f"load average after: {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
