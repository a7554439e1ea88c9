"""Golden headers: the rendered bytes are reviewed in the diff, and headers already in the
field keep building and running with the current firmware.

tests/golden/v<version>/ holds the headers of each bundled example as this version renders
them. After an intended change of the generated C, regenerate them with

    HOSTTOOL_UPDATE_GOLDEN=1 python -m pytest tests/test_golden_headers.py

and review the diff. When the tool's version changes, keep the old folder: the
compatibility test below builds the current firmware against every kept folder, so a
change that breaks firmware built from older headers fails here. The source the output is
compared with is the C compiler itself (gcc), and the Python model for the run.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pytest
from conftest import require_tools

from hosttool import __version__
from hosttool.codegen.render import firmware_defines, render_headers
from hosttool.design.model import run_integer
from hosttool.design.resolve import make_design
from hosttool.firmware import build as cbuild
from hosttool.firmware.run import HT_RUNNER, run_runner
from hosttool.spec.schema import load_spec

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
GOLDEN = Path(__file__).resolve().parent / "golden"
NAMES = ["hive_scale", "fatigue_coupon"]


@pytest.mark.parametrize("name", NAMES)
def test_rendered_headers_equal_the_golden_files(name: str) -> None:
    headers = render_headers(make_design(load_spec(EXAMPLES / f"{name}.toml")))
    folder = GOLDEN / f"v{__version__}"
    if os.environ.get("HOSTTOOL_UPDATE_GOLDEN") == "1":
        folder.mkdir(parents=True, exist_ok=True)
        for header in headers:
            (folder / header.name).write_bytes(header.text.encode("utf-8"))
    for header in headers:
        golden = folder / header.name
        assert golden.exists(), f"no golden {golden}; see this file's docstring"
        assert header.text.encode("utf-8") == golden.read_bytes(), header.name


def _kept_versions() -> list[Path]:
    return sorted(p for p in GOLDEN.iterdir() if p.is_dir())


@pytest.mark.parametrize("name", NAMES)
@pytest.mark.parametrize("kept", _kept_versions(), ids=lambda p: p.name)
def test_current_firmware_builds_and_runs_with_kept_headers(name: str, kept: Path,
                                                            tmp_path: Path) -> None:
    require_tools("host", run=True)
    design = make_design(load_spec(EXAMPLES / f"{name}.toml"))
    exe = cbuild.build(HT_RUNNER, "host", tmp_path, include_dirs=[kept],
                       defines=firmware_defines(design))
    rng = np.random.default_rng(8)
    codes = rng.integers(-(1 << 23), 1 << 23, 3000)
    temps = None
    if design.temperature is not None:
        temps = rng.integers(design.temperature.min_centi, design.temperature.max_centi,
                             codes.size)
    out = run_runner(exe, "host", codes, temps, timeout_s=60).output
    if kept.name == f"v{__version__}":
        # the headers of this version describe this design: bit-exact with the model
        np.testing.assert_array_equal(out, run_integer(design, codes, temps).output)
    else:
        assert out.size == codes.size // design.decimation
