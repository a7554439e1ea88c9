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
import re
from pathlib import Path

import numpy as np
import pytest
from conftest import require_tools

from hosttool import __version__
from hosttool.codegen.render import DESIGN_HEADER_FORMAT, firmware_defines, render_headers
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


def test_older_headers_are_kept() -> None:
    # The compatibility test below must meet headers of an earlier version, not only its own.
    older = [p.name for p in _kept_versions() if p.name != f"v{__version__}"]
    assert "v0.1.0" in older


_DEFINE = re.compile(r"^#define (\w+) (\(?-?\d+\)?)u?$", re.M)
_ARRAY = re.compile(r"static const int32_t (\w+)\[[^]]*\] = \{(.*?)\};", re.S)


def _constants(text: str) -> dict[str, str]:
    """Every integer #define and int32 table of a header (comments dropped), by name."""
    code = re.sub(r"/\*.*?\*/", "", text, flags=re.S)
    out = {m[1]: m[2] for m in _DEFINE.finditer(code)}
    out |= {m[1]: " ".join(m[2].split()) for m in _ARRAY.finditer(code)}
    return out


def _header_format(header: Path) -> int:
    found = re.search(r"^#define \w+_DESIGN_HEADER_FORMAT (\d+)$", header.read_text(), re.M)
    assert found is not None, header
    return int(found.group(1))


@pytest.mark.parametrize("name", NAMES)
@pytest.mark.parametrize("kept", _kept_versions(), ids=lambda p: p.name)
def test_current_firmware_builds_and_runs_with_kept_headers(name: str, kept: Path,
                                                            tmp_path: Path) -> None:
    """Headers of a kept version either build and run with today's firmware, or are
    refused by the firmware's header-format #error; never built into wrong numbers."""
    require_tools("host", run=True)
    design = make_design(load_spec(EXAMPLES / f"{name}.toml"))
    header = kept / f"{name}_design.h"
    if _header_format(header) != DESIGN_HEADER_FORMAT:
        with pytest.raises(cbuild.BuildFailed) as refused:
            cbuild.build(HT_RUNNER, "host", tmp_path, include_dirs=[kept],
                         defines=firmware_defines(design))
        assert "#error" in str(refused.value) and "format" in str(refused.value)
        return
    exe = cbuild.build(HT_RUNNER, "host", tmp_path, include_dirs=[kept],
                       defines=firmware_defines(design))
    rng = np.random.default_rng(8)
    codes = rng.integers(-(1 << 23), 1 << 23, 3000)
    temps = None
    if design.temperature is not None:
        temps = rng.integers(design.temperature.min_centi, design.temperature.max_centi,
                             codes.size)
    out = run_runner(exe, "host", codes, temps, timeout_s=60).output
    old = _constants(header.read_text())
    now = _constants(render_headers(design)[0].text)
    if all(now.get(k) == v for k, v in old.items()):
        # every constant of the kept header is today's: the same numbers as the model
        np.testing.assert_array_equal(out, run_integer(design, codes, temps).output)
    else:
        assert out.size == codes.size // design.decimation


def test_firmware_refuses_a_header_of_another_format(tmp_path: Path) -> None:
    """A kept header whose format number differs from the firmware's stops the build with
    the firmware's #error (gcc is the judge), instead of building wrong numbers."""
    require_tools("host", run=True)
    design = make_design(load_spec(EXAMPLES / "hive_scale.toml"))
    kept = tmp_path / "kept"
    kept.mkdir()
    for header in (GOLDEN / "v0.1.0").glob("hive_scale_*.h"):
        text = header.read_text()
        if header.name.endswith("_design.h"):
            text, n = re.subn(r"^(#define HIVE_SCALE_DESIGN_HEADER_FORMAT) \d+$",
                              rf"\g<1> {DESIGN_HEADER_FORMAT + 1}", text, flags=re.M)
            assert n == 1
        (kept / header.name).write_text(text)
    with pytest.raises(cbuild.BuildFailed) as refused:
        cbuild.build(HT_RUNNER, "host", tmp_path / "build", include_dirs=[kept],
                     defines=firmware_defines(design))
    assert "#error" in str(refused.value) and "format" in str(refused.value)
