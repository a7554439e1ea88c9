"""The C reference firmware on a design: render its headers, build ht_runner, run vectors.

Used by ``hosttool demo``, the bit-exact tests and benchmarks/firmware_figures.py. The
runner's line protocol is documented in firmware_stub/ht_runner.c.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.typing import ArrayLike, NDArray

from hosttool.codegen.render import firmware_defines, render_headers, write_headers
from hosttool.design.resolve import Design
from hosttool.firmware import build as cbuild

HT_RUNNER = cbuild.Program("ht_runner", ("ht_runner.c", "ht_pipeline.c", "ht_calblock.c",
                                         "ht_crc32.c"))
"""The pipeline on lines of stdin (firmware_stub/ht_runner.c)."""

_SUMMARY = re.compile(rb"ht_runner: samples (\d+) outputs (\d+)"
                      rb"(?: ticks (\d+) empty_ticks (\d+))?")


@dataclass(frozen=True)
class RunnerOutput:
    """What one run of ht_runner gave: outputs, their status words and, on targets, SysTick
    ticks."""

    output: NDArray[np.int64]
    status: NDArray[np.int64]
    samples: int
    ticks: int | None
    empty_ticks: int | None
    stderr: str

    @property
    def instructions_per_sample(self) -> float | None:
        """Mean instructions per ht_process() call under QEMU -icount shift=0."""
        if self.ticks is None or self.empty_ticks is None or not self.samples:
            return None
        return (self.ticks - self.empty_ticks) * cbuild.QEMU_INSNS_PER_TICK / self.samples


def build_runner(design: Design, kind: str, build_dir: Path) -> Path:
    """Render the design's headers into ``build_dir/gen`` and build ht_runner for ``kind``."""
    gen = build_dir / "gen"
    gen.mkdir(parents=True, exist_ok=True)
    write_headers(render_headers(design), gen, force=True)
    return cbuild.build(HT_RUNNER, kind, build_dir, include_dirs=[gen],
                        defines=firmware_defines(design))


def runner_input(codes: ArrayLike, temps_centi: ArrayLike | None = None, *,
                 calblock: bytes | None = None) -> bytes:
    """The runner's stdin: an optional "cal" line, then one sample per line."""
    x = np.asarray(codes, dtype=np.int64)
    lines = [] if calblock is None else [f"cal {calblock.hex()}"]
    if temps_centi is None:
        lines += [str(int(v)) for v in x]
    else:
        t = np.asarray(temps_centi, dtype=np.int64)
        lines += [f"{int(a)} {int(b)}" for a, b in zip(x, t, strict=True)]
    return ("\n".join(lines) + "\n").encode("ascii")


def parse_run(result: cbuild.RunResult) -> RunnerOutput:
    """Outputs and figures of a finished run (CBuildError if it failed)."""
    stderr = result.stderr.decode("utf-8", errors="replace")
    if result.returncode != 0:
        raise cbuild.CBuildError(f"ht_runner exited with status {result.returncode}: "
                                 f"{stderr.strip()}")
    found = _SUMMARY.search(result.stderr)
    if found is None:
        raise cbuild.CBuildError(f"ht_runner gave no summary line: {stderr.strip()}")
    words = result.stdout.split()
    if len(words) % 2:
        raise cbuild.CBuildError("ht_runner printed an output line without its status word")
    values = np.array([int(v) for v in words[0::2]], dtype=np.int64)
    status = np.array([int(v, 16) for v in words[1::2]], dtype=np.int64)
    ticks, empty = found.group(3), found.group(4)
    return RunnerOutput(values, status, int(found.group(1)), int(ticks) if ticks else None,
                        int(empty) if empty else None, stderr)


def run_runner(executable: Path, kind: str, codes: Sequence[int] | ArrayLike,
               temps_centi: ArrayLike | None = None, *, calblock: bytes | None = None,
               timeout_s: float = 300.0) -> RunnerOutput:
    """Run a built ht_runner on a record (from reset) and parse what it printed."""
    stdin = runner_input(codes, temps_centi, calblock=calblock)
    return parse_run(cbuild.run(executable, kind, stdin, timeout_s=timeout_s))


def demo_vectors(design: Design, samples: int = 4000, seed: int = 0
                 ) -> tuple[NDArray[np.int64], NDArray[np.int64] | None]:
    """A short record for the demo: steps through the ADC range, then random codes."""
    rng = np.random.default_rng(seed)
    low, high = design.code_min, design.code_max
    levels = np.linspace(low, high, 9).astype(np.int64)
    steps = np.repeat(levels, max(1, samples // (2 * levels.size)))
    codes = np.concatenate([steps, rng.integers(low, high + 1, samples - steps.size)])
    temps = None
    if design.temperature is not None:
        t = design.temperature
        temps = rng.integers(t.min_centi - 500, t.max_centi + 500, codes.size)
    return codes, temps
