"""The compiled C firmware as a verify engine (``hosttool verify --engine c|both``).

``host_engine(design)`` renders the design's headers, builds the firmware with the host gcc
(-O2, the flags of the ``host`` build kind) as a shared library together with
firmware_stub/ht_sweep.c, into a temporary folder that lives as long as the engine, and
drives it in memory through ctypes (no text I/O):

* ``engine.record(codes, temps)`` runs a record from reset through ``ht_process`` and gives
  the outputs, like ``hosttool.design.model.run_integer(...).output``;
* ``engine.settled(first, temp_centi, out)`` fills ``out`` with the settled outputs
  (``ht_settled_output``) of the codes ``first, first + 1, ...`` at one temperature: the
  firmware's side of the exhaustive static proof.

The design's constants in force (nominal or one unit's) are compiled in as the defaults.
ctypes releases the GIL during each call, so several threads may sweep at once.
"""

from __future__ import annotations

import ctypes
import tempfile
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from hosttool.codegen.render import firmware_defines, render_headers, write_headers
from hosttool.design.resolve import Design
from hosttool.firmware import build as cbuild

I32 = NDArray[np.int32]
I64 = NDArray[np.int64]

HT_SWEEP = cbuild.Program("ht_sweep", ("ht_sweep.c", "ht_pipeline.c", "ht_calblock.c",
                                       "ht_crc32.c"))
"""The pipeline driven in memory (firmware_stub/ht_sweep.c), built as a shared library."""

_P32 = ctypes.POINTER(ctypes.c_int32)


def build_sweep_library(design: Design, build_dir: Path) -> Path:
    """Render the design's headers into ``build_dir/gen`` and build libht_sweep.so."""
    gen = build_dir / "gen"
    gen.mkdir(parents=True, exist_ok=True)
    write_headers(render_headers(design), gen, force=True)
    return cbuild.build(HT_SWEEP, "host", build_dir, include_dirs=[gen],
                        defines=firmware_defines(design), shared=True)


class CompiledEngine:
    """The host build of the firmware for one design, loaded in this process."""

    def __init__(self, design: Design, library: Path, folder: object = None):
        self._folder = folder           # keeps a temporary build folder alive
        self._lib = ctypes.CDLL(str(library))
        self._lib.ht_sweep_settled.argtypes = [ctypes.c_int32, ctypes.c_uint32,
                                               ctypes.c_int32, _P32]
        self._lib.ht_sweep_settled.restype = None
        self._lib.ht_sweep_record.argtypes = [_P32, _P32, ctypes.c_uint32, _P32]
        self._lib.ht_sweep_record.restype = ctypes.c_uint32
        self.decimation = design.decimation

    def settled(self, first: int, temp_centi: int, out: I32) -> None:
        """Settled outputs of codes first .. first + out.size - 1 at temp_centi, into out."""
        if out.dtype != np.int32 or not out.flags.c_contiguous:
            raise ValueError("out must be a contiguous int32 array")
        self._lib.ht_sweep_settled(first, out.size, temp_centi, out.ctypes.data_as(_P32))

    def record(self, codes: I64, temps: I64 | None) -> I64:
        """A record from reset through ht_process; one output per decimation inputs."""
        x = np.ascontiguousarray(codes, dtype=np.int32)
        t = None if temps is None else np.ascontiguousarray(temps, dtype=np.int32)
        out = np.empty(x.size // self.decimation + 1, dtype=np.int32)
        n = self._lib.ht_sweep_record(x.ctypes.data_as(_P32),
                                      None if t is None else t.ctypes.data_as(_P32),
                                      x.size, out.ctypes.data_as(_P32))
        return out[:n].astype(np.int64)

    def __call__(self, codes: I64, temps: I64 | None) -> I64:
        return self.record(codes, temps)


def host_engine(design: Design) -> CompiledEngine:
    """The host build of the firmware for ``design`` (ToolchainMissing without gcc)."""
    folder = tempfile.TemporaryDirectory(prefix="hosttool-c-engine-")
    return CompiledEngine(design, build_sweep_library(design, Path(folder.name)), folder)
