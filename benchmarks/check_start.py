"""Start-up cost of ``hosttool check``: a fresh process each time, against a bare Python start.

For each spec (both examples unless named), runs in turn ``python -c pass``,
``python -m hosttool check SPEC`` and the installed console script ``hosttool check SPEC``
(when it sits beside this Python), ``--repeat`` rounds, and prints the median wall time of
each and what ``check`` costs above the bare start. The load average is printed before and
after: other processes on the machine move these figures. Asserts nothing.

Run: python benchmarks/check_start.py [--repeat 21] [SPEC ...]
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import time
from pathlib import Path

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"


def _wall(args: list[str]) -> float:
    """Wall time of one run, seconds; the command must succeed."""
    t0 = time.perf_counter()
    subprocess.run(args, check=True, stdout=subprocess.DEVNULL)
    return time.perf_counter() - t0


def _load() -> str:
    return " ".join(f"{x:.2f}" for x in os.getloadavg())


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("specs", nargs="*", type=Path,
                        default=[EXAMPLES / "hive_scale.toml", EXAMPLES / "fatigue_coupon.toml"])
    parser.add_argument("--repeat", type=int, default=21)
    args = parser.parse_args()
    script = Path(sys.executable).parent / "hosttool"
    print(f"load average before: {_load()}")
    for spec in args.specs:
        runs = {"bare python -c pass": [sys.executable, "-c", "pass"],
                "python -m hosttool check": [sys.executable, "-m", "hosttool", "check",
                                             str(spec)]}
        if script.is_file():
            runs["hosttool check (console script)"] = [str(script), "check", str(spec)]
        for cmd in runs.values():        # warm the file cache once
            _wall(cmd)
        times: dict[str, list[float]] = {name: [] for name in runs}
        for _ in range(args.repeat):
            for name, cmd in runs.items():
                times[name].append(_wall(cmd))
        median = {name: statistics.median(t) for name, t in times.items()}
        bare = median["bare python -c pass"]
        print(f"{spec.name}: medians of {args.repeat} interleaved runs")
        for name, t in median.items():
            above = "" if t is bare else f"   = bare + {(t - bare) * 1e3:5.1f} ms"
            print(f"  {name:32s} {t * 1e3:6.1f} ms{above}")
    print(f"load average after:  {_load()}")


if __name__ == "__main__":
    main()
