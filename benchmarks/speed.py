"""Speed of verify and of the production line, against bare C loops of the same work.

For each example spec:

- **static pass**: hosttool's compiled sweep (every ADC code at every temperature step:
  integer path, float64 reference, statistics) against one fused C loop doing the same per
  code (benchmarks/bare_static.c: the firmware's own ht_settled_output compiled -O2 with the
  design's headers, the float64 reference, the statistics), cut into the same chunks and
  run by the same number of threads;
- **dynamic chain**: the integer model through the whole chain (model.run_integer, with
  its peaks and saturation counts) against the firmware's ht_process driven in memory
  (firmware_stub/ht_sweep.c, -O2, no text I/O) on the same random codes;
- **whole verify** (``hosttool verify SPEC --json``, design cached, a fresh process each
  time) and ``hosttool check`` against a bare ``python -c pass``;

then ``hosttool batch`` of invented hive_scale lots (13 readings per unit; its default
``--jobs``, one more than the cores, unless ``--jobs`` is given) into a fresh
folder and record, a fresh process each (its start-up included), after ``os.sync()`` and a
pause (the disk's write-back of earlier runs would otherwise slow the fsyncs of this one),
with the CPU time the batch used (user and system, all its processes) and a CPU probe
taken just before (``python_probe``: a fixed pure-Python loop; the batch's time scales with
it), ``--batch-repeat`` runs of each size, in ``--dir``. Each image is a new file, and on an
ext4 file system without a journal the kernel does not give a new file an inode freed in the
last minute (six while that inode's table block awaits write-back): it steps past every such
inode, looking each up, for every file it creates. A batch started within minutes of
deleting many files (an earlier benchmark's folders: this script deletes its own at the end)
pays seconds of system time for it (seen: 3.4 to 7.4 s instead of 1.2 to 1.6 s for 10,000
units; ``perf`` shows the kernel's inode allocator): a run whose system time exceeds its user
time is marked. Wait six minutes after deleting a large folder, or use ``--dir`` on another
disk (reproduced: 30,000 empty files made and deleted in ``--dir`` just before, a batch of
10,000 units took 5.5 s with 6.7 s of system time). Ratios are Python / C (1.0: as fast as
C). Each figure is the median of ``--repeat`` runs, Python and C interleaved. The load
average is printed before and after (and beside each batch): figures taken on a busy
machine are not worth much. Asserts nothing.

Run: python benchmarks/speed.py [--repeat 5] [--samples 1000000] [--lots 1000,10000,100000]
                                [--jobs N] [--threads N] [--skip-batch] [--batch-repeat 1]
                                [--specs hive_scale,fatigue_coupon]  ("": the batch alone)
                                [--dir FOLDER]
"""

from __future__ import annotations

import argparse
import ctypes
import importlib.util
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np

from hosttool.codegen.render import firmware_defines, render_headers, write_headers
from hosttool.design.cached import cached_design
from hosttool.design.model import run_integer, static_params
from hosttool.design.resolve import Design
from hosttool.spec.schema import load_spec
from hosttool.util.resources import firmware_sources
from hosttool.verify.proof import static_temperatures
from hosttool.verify.sweep import CHUNK, sweep_static

HERE = Path(__file__).resolve().parent
EXAMPLES = HERE.parent / "examples"
START_UTC = 1_741_075_200
#: Seconds to wait after os.sync() before each batch run.
SETTLE_S = 3.0
#: Beside a batch whose system time exceeds its user time (about half of it normally).
SURGE_NOTE = "; system > user: many files deleted minutes before? (see the docstring)"
#: Additions of the CPU probe printed beside each batch run.
PROBE_ADDITIONS = 5_000_000
_P32 = ctypes.POINTER(ctypes.c_int32)
_PD = ctypes.POINTER(ctypes.c_double)
#: The dynamic chain is timed at least this many times (each run a few milliseconds).
CHAIN_REPEAT_MIN = 21


def _median(func: Callable[[], object], repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        func()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def _interleaved(a: Callable[[], object], b: Callable[[], object],
                 repeat: int) -> tuple[float, float]:
    """Medians of a and b, run alternately after one warm-up call each."""
    a()
    b()
    ta, tb = [], []
    for _ in range(repeat):
        ta.append(_median(a, 1))
        tb.append(_median(b, 1))
    return statistics.median(ta), statistics.median(tb)


def build_bare(design: Design, folder: Path) -> ctypes.CDLL:
    """bare_static.c and the firmware (with ht_sweep.c) as one -O2 shared library."""
    gen = folder / "gen"
    gen.mkdir(parents=True, exist_ok=True)
    write_headers(render_headers(design), gen, force=True)
    src = Path(str(firmware_sources()))
    sources = [HERE / "bare_static.c",
               *(src / n for n in ("ht_sweep.c", "ht_pipeline.c", "ht_calblock.c",
                                   "ht_crc32.c"))]
    lib = folder / "libbare.so"
    subprocess.run(["gcc", "-std=c99", "-O2", "-fPIC", "-shared",
                    *(f"-D{d}" for d in firmware_defines(design)), f"-I{src}", f"-I{gen}",
                    *map(str, sources), "-lm", "-o", str(lib)], check=True)
    return ctypes.CDLL(str(lib))


def c_static(lib: ctypes.CDLL, design: Design, temps: list[int | None],
             threads: int) -> tuple[float, float]:
    """The fused C loop over every code at every temperature: (max |error|, mean)."""
    p = static_params(design)
    fp = np.array(p.floats, dtype=np.float64)
    flin = np.array(p.flin, dtype=np.float64)
    tref = p.ints[7] if design.temperature else 0
    tc = design.temperature
    ip = np.array([p.ints[4], p.ints[6], tref, tc.min_centi if tc else 0,
                   tc.max_centi if tc else 0, 1 if design.constants.scale_mul >= 0 else -1],
                  dtype=np.int32)
    n = design.code_max - design.code_min + 1
    tasks = [(t, start) for t in temps for start in range(0, n, CHUNK)]

    def run(task: tuple[int | None, int]) -> tuple[float, float]:
        t, start = task
        out = np.zeros(3, dtype=np.float64)
        lib.bench_static(ctypes.c_int32(design.code_min + start), ctypes.c_uint32(CHUNK),
                         ctypes.c_int32(tref if t is None else t), fp.ctypes.data_as(_PD),
                         flin.ctypes.data_as(_PD), ctypes.c_int32(flin.size),
                         ip.ctypes.data_as(_P32), out.ctypes.data_as(_PD))
        return float(out[0]), float(out[1])

    with ThreadPoolExecutor(max_workers=threads) as pool:
        results = list(pool.map(run, tasks))
    return max(r[0] for r in results), sum(r[1] for r in results) / (n * len(temps))


def _cli(*args: str) -> float:
    """Wall time of a command; exit 1 (a verdict of fail) is a finished run too."""
    t0 = time.perf_counter()
    done = subprocess.run(args, check=False, capture_output=True)
    if done.returncode not in (0, 1):
        raise RuntimeError(f"{' '.join(args)}: exit {done.returncode}: {done.stderr!r}")
    return time.perf_counter() - t0


def bench_spec(name: str, args: argparse.Namespace) -> None:
    spec_path = EXAMPLES / f"{name}.toml"
    design = cached_design(load_spec(spec_path))
    temps = static_temperatures(design)
    with tempfile.TemporaryDirectory() as tmp:
        lib = build_bare(design, Path(tmp))
        bound = design.static_error_bound_lsb
        result: dict[str, tuple[float, float]] = {}

        def py_static() -> None:
            r = sweep_static(design, temps, bound=bound, threads=args.threads)
            result["py"] = (r.max_error_lsb, r.mean_abs_error_lsb)

        def bare_static() -> None:
            result["c"] = c_static(lib, design, temps, args.threads)

        tp, tc = _interleaved(py_static, bare_static, args.repeat)
        evals = (design.code_max - design.code_min + 1) * len(temps)
        same = "same max and mean |error|" if np.allclose(result["py"], result["c"],
                                                           rtol=1e-9) else "FIGURES DIFFER"
        print(f"{name}: static pass, {evals:,} evaluations ({len(temps)} temperatures), "
              f"{args.threads} threads")
        print(f"  ratio {tp / tc:5.2f}x   hosttool {tp:7.3f} s ({tp / evals * 1e9:5.2f} ns/eval)"
              f"   fused C {tc:7.3f} s ({tc / evals * 1e9:5.2f} ns/eval)   {same}")

        bench_chain(design, lib, args)

    exe = [sys.executable, "-m", "hosttool"]
    verify = statistics.median(_cli(*exe, "verify", str(spec_path), "--json")
                               for _ in range(args.repeat))
    check = statistics.median(_cli(*exe, "check", str(spec_path)) for _ in range(args.repeat))
    bare = statistics.median(_cli(sys.executable, "-c", "pass") for _ in range(args.repeat))
    print(f"  whole verify {verify:6.2f} s   check {check * 1e3:5.0f} ms = bare Python start "
          f"{bare * 1e3:4.0f} ms + {(check - bare) * 1e3:4.0f} ms")


def bench_chain(design: Design, lib: ctypes.CDLL, args: argparse.Namespace) -> None:
    """The integer model through the whole chain (run_integer as verify calls it: int64
    codes and temperatures in, a new int64 output, flags, peaks and saturation counts out)
    against ht_sweep_record over int32 arrays prepared beforehand, into a buffer made once;
    the outputs are compared after the timing."""
    rng = np.random.default_rng(1)
    codes = rng.integers(design.code_min, design.code_max + 1, args.samples)
    t_ref = design.temperature.reference_centi if design.temperature else None
    tt = None if t_ref is None else np.full(codes.size, t_ref, dtype=np.int64)
    x32 = codes.astype(np.int32)
    t32 = None if tt is None else tt.astype(np.int32)
    out32 = np.empty(codes.size + 1, dtype=np.int32)
    lib.ht_sweep_record.restype = ctypes.c_uint32
    made = [0]

    def py_chain() -> None:
        run_integer(design, codes, tt)

    def bare_chain() -> None:
        made[0] = lib.ht_sweep_record(x32.ctypes.data_as(_P32),
                                      None if t32 is None else t32.ctypes.data_as(_P32),
                                      ctypes.c_uint32(x32.size), out32.ctypes.data_as(_P32))

    # one run takes some milliseconds: more of them make the medians steadier on a
    # shared machine at almost no cost
    repeat = max(args.repeat, CHAIN_REPEAT_MIN)
    tp, tc = _interleaved(py_chain, bare_chain, repeat)
    n = codes.size
    same = ("same outputs" if np.array_equal(run_integer(design, codes, tt).output,
                                             out32[:made[0]]) else "OUTPUTS DIFFER")
    print(f"  dynamic chain, {n:,} samples, one core, medians of {repeat} runs")
    print(f"  ratio {tp / tc:5.2f}x   hosttool {tp / n * 1e9:6.1f} ns/sample"
          f"   ht_process in memory {tc / n * 1e9:6.1f} ns/sample   {same}")


def python_probe() -> float:
    """Seconds this machine takes right now for a fixed pure-Python loop (5,000,000
    additions): printed beside each batch run, whose time scales with it (the CPU speed of
    a shared virtual machine can change from one minute to the next)."""
    t0 = time.perf_counter()
    total = 0
    for i in range(PROBE_ADDITIONS):
        total += i
    return time.perf_counter() - t0


def bench_batch(args: argparse.Namespace) -> None:
    from hosttool.production.synthetic_lot import lot_csv, random_truth  # only with --lots

    spec_path = EXAMPLES / "hive_scale.toml"
    design = cached_design(load_spec(spec_path))
    sizes = [int(s) for s in args.lots.split(",")]
    rng = np.random.default_rng(1)
    truths = [random_truth(f"HS{i:06d}", rng) for i in range(max(sizes))]
    jobs = [] if args.jobs is None else ["--jobs", str(args.jobs)]
    print(f"batch, {spec_path.name}: `hosttool batch{''.join(' ' + j for j in jobs)}` "
          f"({os.cpu_count()} cores) in a fresh process "
          "(start-up included), 13 readings per unit, a fresh folder and SQLite record")
    cli = importlib.util.find_spec("hosttool.cli")
    print("  hosttool's bytecode: " + (
        "cached in __pycache__" if cli and cli.cached and Path(cli.cached).is_file() else
        "not cached: every run compiles the package (about 0.1 s of its start)"))
    print(f"  {'units':>7}  {'seconds':>8}  {'units/s':>8}  {'ms/unit':>8}  {'cpu s':>6}  "
          f"{'user':>6}  {'sys':>6}  {'probe':>6}  load  result")
    with tempfile.TemporaryDirectory(dir=args.dir) as tmp:
        root = Path(tmp)
        for n, run in ((n, run) for n in sizes for run in range(args.batch_repeat)):
            readings = root / f"lot{n}.csv"
            if run == 0:
                readings.write_text(lot_csv(design, truths[:n], seed=n, start_utc=START_UTC))
            out = root / f"out{n}-{run}"
            os.sync()
            time.sleep(SETTLE_S)
            probe = python_probe()
            before = resource.getrusage(resource.RUSAGE_CHILDREN)
            t0 = time.perf_counter()
            done = subprocess.run([sys.executable, "-m", "hosttool", "batch", str(spec_path),
                                   str(readings), "--out", str(out), "--station", "bench",
                                   *jobs], capture_output=True, text=True,
                                  check=False)
            elapsed = time.perf_counter() - t0
            after = resource.getrusage(resource.RUSAGE_CHILDREN)
            user, system = after.ru_utime - before.ru_utime, after.ru_stime - before.ru_stime
            passed = sum(1 for _ in out.glob("*.hex"))
            print(f"  {n:7d}  {elapsed:8.2f}  {n / elapsed:8.0f}  {elapsed / n * 1e3:8.3f}  "
                  f"{user + system:6.2f}  {user:6.2f}  {system:6.2f}  {probe:6.3f}  "
                  f"{os.getloadavg()[0]:4.1f}  {passed} images, exit {done.returncode}"
                  f"{SURGE_NOTE if system > user else ''}")


def main() -> None:
    parser = argparse.ArgumentParser(description=(__doc__ or "").splitlines()[0])
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--samples", type=int, default=1_000_000)
    parser.add_argument("--threads", type=int, default=len(os.sched_getaffinity(0)))
    parser.add_argument("--jobs", type=int, default=None,
                        help="batch's worker processes (default: the tool's own)")
    parser.add_argument("--lots", default="1000,10000,100000")
    parser.add_argument("--skip-batch", action="store_true")
    parser.add_argument("--batch-repeat", type=int, default=1)
    parser.add_argument("--dir", default=None,
                        help="where the batch's lots and folders go (default: the system's "
                        "temporary folder)")
    parser.add_argument("--specs", default="hive_scale,fatigue_coupon")
    args = parser.parse_args()
    print(f"load average before: {os.getloadavg()[0]:.2f} ({os.cpu_count()} cores)")
    for name in filter(None, args.specs.split(",")):     # --specs "": the batch alone
        bench_spec(name, args)
    if not args.skip_batch:
        bench_batch(args)
    print(f"load average after: {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
