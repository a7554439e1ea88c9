"""Code size and instructions per sample of the C reference firmware, for each example.

Sizes: ht_pipeline.c (with the design's tables) and ht_calblock.c + ht_crc32.c (the loader)
compiled alone with -O2 for Cortex-M0+ and Cortex-M4, as arm-none-eabi-size reports them
(text includes the read-only tables). Instructions per sample: ht_runner on Cortex-M4
(QEMU mps2-an386, -icount shift=0, so the count is the same on every run): SysTick ticks
inside ht_process() minus the timing overhead, 40 instructions per tick, averaged over
random codes (and temperatures). Needs gcc-arm-none-eabi, libnewlib-arm-none-eabi and
qemu-system-arm. Prints figures; asserts nothing.

Run: python benchmarks/firmware_figures.py [--samples N]
"""

from __future__ import annotations

import argparse
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np

from hosttool.codegen.render import firmware_defines, render_headers, write_headers
from hosttool.design.resolve import Design, make_design
from hosttool.firmware import build as cbuild
from hosttool.firmware.run import build_runner, run_runner
from hosttool.spec.schema import load_spec
from hosttool.util.resources import firmware_sources

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
PARTS = {"pipeline": ("ht_pipeline.c",), "loader": ("ht_calblock.c", "ht_crc32.c")}


def _sizes(design: Design, kind: str, work: Path) -> dict[str, tuple[int, int, int]]:
    """(text, data, bss) bytes of each part, compiled alone for build kind ``kind``."""
    gen, local = work / "gen", work / "src"
    gen.mkdir(parents=True, exist_ok=True)
    local.mkdir(parents=True, exist_ok=True)
    write_headers(render_headers(design), gen, force=True)
    for item in firmware_sources().iterdir():
        if item.name.endswith((".c", ".h")):
            (local / item.name).write_bytes(item.read_bytes())
    spec = cbuild.KINDS[kind]
    flags = [*cbuild.COMMON_FLAGS, *(f for f in spec.flags
                                     if f not in ("-nostartfiles", "--specs=rdimon.specs"))]
    defines = [f"-D{d}" for d in firmware_defines(design)]
    out: dict[str, tuple[int, int, int]] = {}
    for part, sources in PARTS.items():
        objects = []
        for name in sources:
            obj = work / f"{kind}-{name}.o"
            subprocess.run([spec.compiler, *flags, *defines, f"-I{local}", f"-I{gen}", "-c",
                            str(local / name), "-o", str(obj)], check=True)
            objects.append(str(obj))
        done = subprocess.run(["arm-none-eabi-size", "-t", *objects], check=True,
                              capture_output=True, text=True)
        total = done.stdout.strip().splitlines()[-1].split()
        out[part] = (int(total[0]), int(total[1]), int(total[2]))
    return out


def _instructions(design: Design, work: Path, samples: int) -> tuple[float, float]:
    """Mean instructions per input sample and per output sample on Cortex-M4 (QEMU)."""
    exe = build_runner(design, "m4", work / "run")
    rng = np.random.default_rng(0)
    limit = 1 << (design.spec.adc.bits - 1)
    codes = rng.integers(-limit, limit, samples)
    temps = rng.integers(-2000, 5000, samples) if design.temperature else None
    result = run_runner(exe, "m4", codes, temps)
    per_sample = result.instructions_per_sample
    assert per_sample is not None
    return per_sample, per_sample * design.decimation


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=20_000)
    args = parser.parse_args()
    for tool in ("arm-none-eabi-gcc", "arm-none-eabi-size", cbuild.QEMU):
        if shutil.which(tool) is None:
            sys.exit(f"firmware_figures: {tool} not found on PATH")
    print("example          part       target    text   data    bss")
    figures = []
    for path in sorted(EXAMPLES.glob("*.toml")):
        design = make_design(load_spec(path))
        with tempfile.TemporaryDirectory() as tmp:
            for kind, label in (("m0plus", "M0+"), ("m4", "M4")):
                for part, (text, data, bss) in _sizes(design, kind, Path(tmp)).items():
                    print(f"{design.spec.name:<16} {part:<10} {label:<7} {text:>6} {data:>6} "
                          f"{bss:>6}")
            figures.append((design, *_instructions(design, Path(tmp), args.samples)))
    print(f"\ninstructions per sample, Cortex-M4 (QEMU mps2-an386, -icount shift=0, "
          f"{args.samples} random samples)")
    for design, per_sample, per_output in figures:
        print(f"{design.spec.name:<16} {per_sample:8.1f} per input sample, "
              f"{per_output:8.1f} per output (decimation {design.decimation})")


if __name__ == "__main__":
    main()
