"""Wall time of `hosttool explore` over 3 keys x 4 values (64 variants) of hive_scale.

Each variant runs through check and design (cost counted from the design, no firmware run),
in --jobs worker processes, in a fresh process (imports and compiled kernels included).
Prints the time and the time per variant; asserts nothing. There is no C loop doing the
same work to compare with: the figure is the whole command's wall time.

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
    print(f"explore, 3 keys x 4 values = {len(variants)} variants, {args.jobs} jobs, "
          f"cold process: {took:.1f} s ({took / len(variants) * 1000:.0f} ms per variant)")


if __name__ == "__main__":
    main()
