"""Start-up cost of ``hosttool check``: a fresh process each time, against a bare Python start.

For each spec (both examples unless named), runs in turn ``python -c pass``,
``python -m hosttool check SPEC`` and the installed console script ``hosttool check SPEC``
(when it sits beside this Python), ``--repeat`` rounds, and prints the median wall time of
each, its median CPU time (user + system of the child: less moved by other processes than
the wall time) and what ``check`` costs above the bare start. The load average is printed
before and after: other processes on the machine move these figures. Asserts nothing.

Python reads the package's bytecode from __pycache__ when it is there (an installed wheel
has it); with PYTHONDONTWRITEBYTECODE set and none written, every run compiles the package
from source, which costs more. The script says which it measured.

Run: python benchmarks/check_start.py [--repeat 21] [SPEC ...]
"""

from __future__ import annotations

import argparse
import importlib.util
import os
import resource
import statistics
import subprocess
import sys
import time
from pathlib import Path

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"


def _run(args: list[str]) -> tuple[float, float]:
    """Wall and CPU time (user + system) of one run, seconds; the command must succeed."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    subprocess.run(args, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    wall = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    return wall, (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)


def _bytecode_cached() -> bool:
    """Whether hosttool.cli's bytecode sits in its __pycache__."""
    spec = importlib.util.find_spec("hosttool.cli")
    return bool(spec and spec.cached and Path(spec.cached).is_file())


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
    print("hosttool's bytecode: " + ("cached in __pycache__" if _bytecode_cached() else
                                     "not cached: every run compiles the package"))
    for spec in args.specs:
        runs = {"bare python -c pass": [sys.executable, "-c", "pass"],
                "python -m hosttool check": [sys.executable, "-m", "hosttool", "check",
                                             str(spec)]}
        if script.is_file():
            runs["hosttool check (console script)"] = [str(script), "check", str(spec)]
        for cmd in runs.values():        # warm the file cache once
            _run(cmd)
        times: dict[str, list[tuple[float, float]]] = {name: [] for name in runs}
        for _ in range(args.repeat):
            for name, cmd in runs.items():
                times[name].append(_run(cmd))
        wall = {name: statistics.median(w for w, _ in t) for name, t in times.items()}
        cpu = {name: statistics.median(c for _, c in t) for name, t in times.items()}
        bare = "bare python -c pass"
        print(f"{spec.name}: medians of {args.repeat} interleaved runs")
        print(f"  {'':32s} {'wall':>9s} {'above bare':>11s} {'CPU':>9s} {'above bare':>11s}")
        for name in runs:
            print(f"  {name:32s} {wall[name] * 1e3:6.1f} ms "
                  f"{(wall[name] - wall[bare]) * 1e3:+8.1f} ms {cpu[name] * 1e3:6.1f} ms "
                  f"{(cpu[name] - cpu[bare]) * 1e3:+8.1f} ms")
    print(f"load average after:  {_load()}")


if __name__ == "__main__":
    main()
