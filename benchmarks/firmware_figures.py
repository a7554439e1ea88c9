"""Instructions per sample and code size per block of the C reference firmware, for each
example, beside a hand-written chain for hive_scale (benchmarks/hive_scale_by_hand.c).

Instructions per sample: ht_runner on Cortex-M4 (QEMU mps2-an386) and Cortex-M3
(mps2-an385) with -icount shift=0, so each count is the same on every run: SysTick ticks
inside ht_process() minus the timing overhead, 40 instructions per tick, averaged over
random codes (and temperatures); "compact" is the build with PREFIX_COMPACT (a written-out
FIR as a loop over its table). Code size per block: ht_pipeline.c compiled with -O2 and
every step made a function of its own (the design header's PREFIX_STEP set to noinline), as
arm-none-eabi-nm reports each function (literal pools included; "tables" are the const
arrays); "whole" is the text of ht_pipeline.o as it is really built, steps inlined. The
hand-written chain is built and measured the same way (its HW_BLOCK macro), and its outputs
are checked against the Python model before any figure is printed. Needs gcc-arm-none-eabi,
libnewlib-arm-none-eabi and qemu-system-arm. Prints figures; asserts nothing else.

Run: python benchmarks/firmware_figures.py [--samples N]
"""

from __future__ import annotations

import argparse
import re
import shutil
import subprocess
import sys
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from hosttool.codegen.csyntax import c_prefix
from hosttool.codegen.render import firmware_defines, render_headers, write_headers
from hosttool.design.model import run_integer
from hosttool.design.resolve import Design, make_design
from hosttool.firmware import build as cbuild
from hosttool.firmware.run import HT_RUNNER, run_runner
from hosttool.spec.schema import load_spec
from hosttool.util.resources import firmware_sources

HERE = Path(__file__).resolve().parent
EXAMPLES = HERE.parent / "examples"
BY_HAND = HERE / "hive_scale_by_hand.c"
BY_HAND_RUNNER = cbuild.Program("ht_runner", ("ht_runner.c", BY_HAND.name, "ht_calblock.c",
                                              "ht_crc32.c"))
SIZE_KINDS = (("m4", "M4"), ("m3", "M3"), ("m0plus", "M0+"))
RUN_KINDS = (("m4", "M4"), ("m3", "M3"))
NOINLINE = "static __attribute__((noinline))"


@dataclass(frozen=True)
class Chain:
    """One pipeline to measure: a design and the C file holding its ht_process."""

    label: str
    design: Design
    source: Path | None         # None: firmware_stub/ht_pipeline.c
    block_macro: str            # the storage-class macro that makes each block a function
    block_names: re.Pattern[str]
    defines: tuple[str, ...] = ()   # extra -D options (PREFIX_COMPACT)


def _prepare(design: Design, work: Path, source: Path | None) -> tuple[Path, Path]:
    """Headers into work/gen, firmware sources (and the hand-written file) into work/src."""
    gen, src = work / "gen", work / "src"
    gen.mkdir(parents=True, exist_ok=True)
    src.mkdir(parents=True, exist_ok=True)
    write_headers(render_headers(design), gen, force=True)
    for item in firmware_sources().iterdir():
        if item.name.endswith((".c", ".h")):
            (src / item.name).write_bytes(item.read_bytes())
    if source is not None:
        shutil.copy(source, src / source.name)
    return gen, src


def _compile(chain: Chain, kind: str, work: Path, extra: list[str]) -> Path:
    gen, src = _prepare(chain.design, work, chain.source)
    spec = cbuild.KINDS[kind]
    flags = [*cbuild.COMMON_FLAGS, *(f for f in spec.flags
                                     if f not in ("-nostartfiles", "--specs=rdimon.specs"))]
    name = chain.source.name if chain.source else "ht_pipeline.c"
    obj = work / f"{kind}-{name}.o"
    defines = (*firmware_defines(chain.design), *chain.defines)
    subprocess.run([spec.compiler, *flags, *(f"-D{d}" for d in defines), *extra,
                    f"-I{src}", f"-I{gen}", "-c", str(src / name), "-o", str(obj)],
                   check=True)
    return obj


def _sizes(chain: Chain, kind: str, work: Path) -> dict[str, int]:
    """Bytes of each block (functions and tables) and of the whole pipeline object."""
    obj = _compile(chain, kind, work, [f"-D{chain.block_macro}={NOINLINE}"])
    listing = subprocess.run(["arm-none-eabi-nm", "-S", "--size-sort", str(obj)], check=True,
                             capture_output=True, text=True).stdout
    sizes: dict[str, int] = {}
    for line in listing.splitlines():
        _, size, kind_letter, symbol = line.split()
        found = chain.block_names.match(symbol)
        if kind_letter.lower() == "t" and found:
            block = found.group(1)
            sizes[block] = sizes.get(block, 0) + int(size, 16)
        elif kind_letter.lower() == "r":
            sizes["tables"] = sizes.get("tables", 0) + int(size, 16)
    whole = _compile(chain, kind, work, [])
    text = subprocess.run(["arm-none-eabi-size", str(whole)], check=True, capture_output=True,
                          text=True).stdout.splitlines()[-1].split()
    sizes["whole"] = int(text[0])
    return sizes


def _vectors(design: Design, samples: int) -> tuple[np.ndarray, np.ndarray | None]:
    rng = np.random.default_rng(0)
    limit = 1 << (design.spec.adc.bits - 1)
    codes = rng.integers(-limit, limit, samples)
    temps = rng.integers(-2000, 5000, samples) if design.temperature else None
    return codes, temps


def _instructions(chain: Chain, kind: str, work: Path, samples: int) -> float:
    """Mean instructions per input sample on ``kind`` under QEMU, after a bit-exact check."""
    gen, _ = _prepare(chain.design, work, chain.source)
    program = HT_RUNNER if chain.source is None else BY_HAND_RUNNER
    exe = cbuild.build(program, kind, work / "run", include_dirs=[gen],
                       defines=(*firmware_defines(chain.design), *chain.defines),
                       extra_sources=[] if chain.source is None else [chain.source])
    codes, temps = _vectors(chain.design, samples)
    result = run_runner(exe, kind, codes, temps)
    model = run_integer(chain.design, codes, temps)
    if not np.array_equal(result.output, model.output):
        sys.exit(f"firmware_figures: {chain.label} on {kind} differs from the Python model")
    per_sample = result.instructions_per_sample
    assert per_sample is not None
    return per_sample


def _chains() -> list[Chain]:
    chains = []
    for path in sorted(EXAMPLES.glob("*.toml")):
        design = make_design(load_spec(path))
        prefix = c_prefix(design.spec.name)
        names = re.compile(rf"^(?:{prefix}_)?(\w+?)(?:\.\w+)*$")
        chains.append(Chain(design.spec.name, design, None, f"{prefix}_STEP", names))
        if f"{prefix}_COMPACT" in render_headers(design)[0].text:
            chains.append(Chain(f"{design.spec.name} compact", design, None, f"{prefix}_STEP",
                                names, (f"{prefix}_COMPACT",)))
        if design.spec.name == "hive_scale":
            chains.append(Chain("hive_scale by hand", design, BY_HAND, "HW_BLOCK",
                                re.compile(r"^(?:hw_)?(\w+?)(?:\.\w+)*$")))
    return chains


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=20_000)
    args = parser.parse_args()
    for tool in ("arm-none-eabi-gcc", "arm-none-eabi-nm", "arm-none-eabi-size", cbuild.QEMU):
        if shutil.which(tool) is None:
            sys.exit(f"firmware_figures: {tool} not found on PATH")
    chains = _chains()
    ips: dict[tuple[str, str], float] = {}
    sizes: dict[tuple[str, str], dict[str, int]] = {}
    with tempfile.TemporaryDirectory() as tmp:
        for n, chain in enumerate(chains):
            for kind, _ in SIZE_KINDS:
                sizes[chain.label, kind] = _sizes(chain, kind, Path(tmp) / f"s{n}{kind}")
            for kind, _ in RUN_KINDS:
                ips[chain.label, kind] = _instructions(chain, kind, Path(tmp) / f"r{n}{kind}",
                                                       args.samples)
    print("code size per block, bytes (-O2; each block compiled as a function of its own)")
    print(f"{'chain':<24} {'block':<14} " + " ".join(f"{label:>6}" for _, label in SIZE_KINDS))
    for chain in chains:
        blocks = sorted({b for kind, _ in SIZE_KINDS for b in sizes[chain.label, kind]},
                        key=lambda b: (b == "whole", b == "ht_process", b))
        for block in blocks:
            row = " ".join(f"{sizes[chain.label, kind].get(block, 0):>6}"
                           for kind, _ in SIZE_KINDS)
            print(f"{chain.label:<24} {block:<14} {row}")
    print(f"\ninstructions per input sample (QEMU -icount shift=0, {args.samples} random samples,"
          " outputs bit-exact with the Python model)")
    print(f"{'chain':<24} " + " ".join(f"{label:>8}" for _, label in RUN_KINDS)
          + "   decimation")
    for chain in chains:
        row = " ".join(f"{ips[chain.label, kind]:8.1f}" for kind, _ in RUN_KINDS)
        print(f"{chain.label:<24} {row}   {chain.design.decimation}")
    if ("hive_scale by hand", "m4") in ips:
        print("\nhive_scale, generated / hand-written:")
        for kind, label in RUN_KINDS:
            ratio = ips["hive_scale", kind] / ips["hive_scale by hand", kind]
            print(f"  {label}: {ratio:.3f}x instructions per sample")
        for kind, label in SIZE_KINDS:
            ratio = sizes["hive_scale", kind]["whole"] / sizes["hive_scale by hand", kind]["whole"]
            print(f"  {label}: {ratio:.3f}x code size (whole pipeline object)")


if __name__ == "__main__":
    main()
