"""The compiled C firmware as a verify engine (``hosttool verify --engine c``).

``host_engine(design)`` renders the design's headers, builds ht_runner with the host gcc
into a temporary folder that lives as long as the engine, and returns a function that runs
a record from reset and gives the outputs, like ``hosttool.design.model.run_integer(...).output``.
The design's constants in force (nominal or one unit's) are compiled in as the defaults.
"""

from __future__ import annotations

import tempfile
from collections.abc import Callable
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from hosttool.design.resolve import Design
from hosttool.firmware.run import build_runner, run_runner

I64 = NDArray[np.int64]

#: Longest a verification record may take in the runner, seconds.
RUN_TIMEOUT_S = 600.0


def host_engine(design: Design) -> Callable[[I64, I64 | None], I64]:
    """The host build of the firmware for ``design`` (ToolchainMissing without gcc)."""
    folder = tempfile.TemporaryDirectory(prefix="hosttool-c-engine-")
    exe = build_runner(design, "host", Path(folder.name))

    def engine(codes: I64, temps: I64 | None) -> I64:
        _ = folder   # keeps the build folder alive as long as the engine
        return run_runner(exe, "host", codes, temps, timeout_s=RUN_TIMEOUT_S).output

    return engine
