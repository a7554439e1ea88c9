"""Speed of the static path over every ADC code and of both models through each example chain.

Prints figures; asserts nothing. Run: python benchmarks/model_speed.py [--samples N]
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

import numpy as np

from hosttool.design.model import run_integer, run_reference, static_integer, static_reference
from hosttool.design.resolve import make_design
from hosttool.spec.schema import load_spec

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"


def _best(func, repeat: int = 3) -> float:
    """Best wall time of ``repeat`` calls, seconds (the first call also warms caches)."""
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        func()
        times.append(time.perf_counter() - start)
    return min(times)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--samples", type=int, default=1_000_000)
    args = parser.parse_args()
    rng = np.random.default_rng(1)
    for path in sorted(EXAMPLES.glob("*.toml")):
        _example(path, args.samples, rng)


def _example(path: Path, samples: int, rng: np.random.Generator) -> None:
    """Print the figures of one example spec."""
    start = time.perf_counter()
    design = make_design(load_spec(path))
    design_s = time.perf_counter() - start
    bits = design.spec.adc.bits
    codes = np.arange(-(1 << (bits - 1)), 1 << (bits - 1), dtype=np.int64)
    temps = None
    if design.temperature is not None:
        temps = np.full(codes.size, design.temperature.max_centi, dtype=np.int64)
    t_static_int = _best(lambda: static_integer(design, codes, temps))
    t_static_ref = _best(lambda: static_reference(design, codes, temps))
    x = rng.integers(-(1 << (bits - 1)), 1 << (bits - 1), samples)
    tx = None if temps is None else temps[: samples]
    run_integer(design, x[:1000], None if tx is None else tx[:1000])  # compile once
    t_int = _best(lambda: run_integer(design, x, tx))
    t_ref = _best(lambda: run_reference(design, x, tx))
    print(f"{design.spec.name}:")
    print(f"  make_design                         {design_s * 1e3:8.1f} ms")
    print(f"  static path, all 2^{bits} codes, integer  {t_static_int:8.3f} s")
    print(f"  static path, all 2^{bits} codes, float64  {t_static_ref:8.3f} s")
    print(f"  chain, {samples} samples, integer     {t_int:8.3f} s  "
          f"({samples / t_int / 1e6:.1f} M samples/s)")
    print(f"  chain, {samples} samples, float64     {t_ref:8.3f} s  "
          f"({samples / t_ref / 1e6:.1f} M samples/s)")


if __name__ == "__main__":
    main()
