"""Wall time of `hosttool explore` over 3 keys x 4 values (64 variants) of hive_scale.

Each variant runs through check and design (cost counted from the design, no firmware run),
in --jobs worker processes. Prints the time and the time per variant; asserts nothing.

Run: python benchmarks/explore_speed.py [--jobs N]
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

from hosttool.commands.explore import run_explore

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
VARY = ("adc.data_rate_sps=5,10,20,40", "adc.pga_gain=16,32,64,128",
        "filter.stages[1].cutoff_hz=0.25,0.5,1,1.5")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--jobs", type=int, default=2)
    args = parser.parse_args()
    start = time.perf_counter()
    variants, _ = run_explore(EXAMPLES / "hive_scale.toml", vary=VARY, sort="error",
                              jobs=args.jobs, m4=False, as_json=True, html=None, save=())
    took = time.perf_counter() - start
    one = time.perf_counter()
    run_explore(EXAMPLES / "hive_scale.toml", vary=(VARY[0].split(",")[0],), sort="cost",
                jobs=1, m4=False, as_json=True, html=None, save=())
    single = time.perf_counter() - one
    print(f"explore, 3 keys x 4 values = {len(variants)} variants, {args.jobs} jobs: "
          f"{took:.1f} s ({took / len(variants) * 1000:.0f} ms per variant); "
          f"one variant alone: {single:.2f} s; ratio {took / single:.1f} x")


if __name__ == "__main__":
    main()
