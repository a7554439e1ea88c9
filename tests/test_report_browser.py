"""The HTML report renders in a real headless browser (Debian's chromium) with its plots.

Slow test: it starts chromium. Outside CI it skips when chromium is missing; with CI=true
it fails instead (.ci/run installs chromium).
"""

from __future__ import annotations

import os
import shutil
import subprocess
import tempfile
from pathlib import Path

import numpy as np
import pytest
from matplotlib import image as mpimg

from hosttool.design.resolve import make_design
from hosttool.spec.schema import load_spec
from hosttool.verify.proof import verify_design
from hosttool.verify.report import REALISED, write_report

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync"]


def _chromium() -> str:
    found = shutil.which("chromium") or shutil.which("chromium-browser")
    if found is None:
        if os.environ.get("CI") == "true":
            pytest.fail("chromium is required under CI (apt-get install chromium)")
        pytest.skip("chromium not installed (apt-get install chromium)")
    return found


@pytest.mark.slow
def test_report_renders_with_plots_in_headless_chromium(tmp_path: Path) -> None:
    browser = _chromium()
    design = make_design(load_spec(EXAMPLES / "hive_scale.toml"))
    report = write_report(verify_design(design, samples=20000), tmp_path / "report.html")
    shot = tmp_path / "shot.png"
    with tempfile.TemporaryDirectory() as profile:
        subprocess.run([browser, *FLAGS, f"--user-data-dir={profile}", "--window-size=1200,2600",
                        f"--screenshot={shot}", report.as_uri()], check=True, timeout=120,
                       capture_output=True)
        dom = subprocess.run([browser, *FLAGS, f"--user-data-dir={profile}", "--dump-dom",
                              report.as_uri()], check=True, timeout=120, capture_output=True,
                             text=True).stdout
    assert 'id="verdict">PASS<' in dom
    assert dom.count("<img") == 5         # end to end, static, magnitude, step, headroom
    pixels = mpimg.imread(shot)[..., :3]
    teal = np.array([int(REALISED[i:i + 2], 16) / 255 for i in (1, 3, 5)])
    # the plots' line and bar colour is painted: the PNGs decoded and were drawn
    painted = np.sum(np.all(np.abs(pixels - teal) < 0.02, axis=-1))
    assert painted > 5000
