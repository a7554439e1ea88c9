"""Speed of the integer model through the whole dynamic chain, alone: the dynamic-chain
part of speed.py (run_integer against the firmware's ht_process driven in memory, built
-O2 on the fly), without the static pass, verify, check and batch, for quick runs.

Ratios are Python / C (1.0: as fast as C), medians of ``--repeat`` interleaved runs; the
load average is printed before and after. Asserts nothing.

Run: python benchmarks/chain_speed.py [--repeat 9] [--samples 1000000]
                                      [--specs hive_scale,fatigue_coupon]
"""

from __future__ import annotations

import argparse
import os
import tempfile
from pathlib import Path

from speed import EXAMPLES, bench_chain, build_bare

from hosttool.design.cached import cached_design
from hosttool.spec.schema import load_spec


def main() -> None:
    parser = argparse.ArgumentParser(description=(__doc__ or "").splitlines()[0])
    parser.add_argument("--repeat", type=int, default=9)
    parser.add_argument("--samples", type=int, default=1_000_000)
    parser.add_argument("--specs", default="hive_scale,fatigue_coupon")
    args = parser.parse_args()
    print(f"load average before: {os.getloadavg()[0]:.2f} ({os.cpu_count()} cores)")
    for name in args.specs.split(","):
        design = cached_design(load_spec(EXAMPLES / f"{name}.toml"))
        with tempfile.TemporaryDirectory() as tmp:
            print(name)
            bench_chain(design, build_bare(design, Path(tmp)), args)
    print(f"load average after: {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
