"""Speed of hosttool verify: the exhaustive static pass, the 10^6-sample dynamic verification,
and the same samples through the bare compiled C runner, for each example.

Prints figures; asserts nothing. Run: python benchmarks/verify_speed.py [--samples N]
Targets on a 2-core machine: static pass <= 1 s; 10^6-sample verification <= 2 s and at most
5 x the bare C runner on the same samples.
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np

from hosttool.design.resolve import make_design
from hosttool.firmware.build import missing_tools
from hosttool.firmware.run import build_runner, run_runner
from hosttool.spec.schema import load_spec
from hosttool.verify import proof as verify

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"


def _timed(func, repeat: int = 3):  # type: ignore[no-untyped-def]
    """(result, best wall time in seconds over ``repeat`` calls; the first also warms up)."""
    best, result = float("inf"), None
    for _ in range(repeat):
        start = time.perf_counter()
        result = func()
        best = min(best, time.perf_counter() - start)
    return result, best


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--samples", type=int, default=1_000_000)
    args = parser.parse_args()
    have_gcc = not missing_tools("host", run=True)
    for path in sorted(EXAMPLES.glob("*.toml")):
        _example(path, args.samples, have_gcc)


def _example(path: Path, samples: int, have_gcc: bool) -> None:
    """Print the figures of one example spec."""
    design = make_design(load_spec(path))
    limit = 1 << (design.spec.adc.bits - 1)
    rng = np.random.default_rng(0)
    codes = rng.integers(-limit, limit, samples)
    temps = None
    if design.temperature is not None:
        temps = np.full(codes.size, design.temperature.reference_centi, dtype=np.int64)
    verify._dynamic(design, "warm", "", codes[:2000], None if temps is None else
                    temps[:2000], {})  # compile the kernels once
    _, t_static = _timed(lambda: verify._static(design, {}))
    _, t_long = _timed(lambda: verify._dynamic(design, "long_run", "", codes, temps, {}))
    _, t_all = _timed(lambda: verify.verify_design(design, samples=samples))
    print(f"{design.spec.name}:")
    print(f"  static pass (2^{design.spec.adc.bits} codes"
          f"{' + temperature steps' if design.temperature else ''})   {t_static:7.3f} s")
    print(f"  dynamic verification, {samples} samples        {t_long:7.3f} s")
    print(f"  whole verify (static + every dynamic test)   {t_all:7.3f} s")
    if have_gcc:
        with tempfile.TemporaryDirectory() as folder:
            exe = build_runner(design, "host", Path(folder))
            _, t_c = _timed(lambda: run_runner(exe, "host", codes, temps, timeout_s=600))
        print(f"  bare C runner (host gcc -O2), same samples   {t_c:7.3f} s   "
              f"ratio {t_long / t_c:.2f} x")
    else:
        print("  bare C runner: no host gcc, not measured")


if __name__ == "__main__":
    main()
