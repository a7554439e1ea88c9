"""Certificates and the lot report, rendered by a real headless browser (Debian's chromium).

Slow tests: they start chromium. Outside CI they skip when chromium is missing; with
CI=true they fail instead. Sources: the DOM as chromium built it (--dump-dom), the pixels
of its screenshot (matplotlib's PNG reader), and the page count of the PDF chromium prints
(each page is one ``/Type /Page`` object: PDF 1.7, ISO 32000-1, 7.7.3.3).
"""

from __future__ import annotations

import json
import re
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
import pytest
from matplotlib import image as mpimg
from test_production import HIVE, SPEC, START, _lot, _truths
from test_report_browser import FLAGS, _chromium

from hosttool.production.synthetic_lot import UnitTruth, lot_csv

pytestmark = pytest.mark.slow

REGISTER = """
[[standard]]
id = "M10-A"
kind = "mass"
nominal = 10.0
unit = "kg"
uncertainty = 0.0002
certificate = "CAL-<7>-0001"
due = 2030-01-31

[[standard]]
id = "M50-B"
kind = "mass"
nominal = 50.0
unit = "kg"
uncertainty = 0.0008
certificate = "CAL-2026-0002"
due = 2030-01-31
"""


def _tool(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "hosttool", *args], capture_output=True,
                          text=True, timeout=300, check=False)


def _browse(page: Path, tmp_path: Path, height: int) -> tuple[str, np.ndarray, int]:
    """The DOM, the screenshot's pixels and the number of A4 pages chromium prints."""
    browser = _chromium()
    shot, pdf = tmp_path / f"{page.stem}.png", tmp_path / f"{page.stem}.pdf"
    with tempfile.TemporaryDirectory() as profile:
        run = [browser, *FLAGS, f"--user-data-dir={profile}"]
        subprocess.run([*run, f"--window-size=1000,{height}", f"--screenshot={shot}",
                        page.as_uri()], check=True, timeout=120, capture_output=True)
        dom = subprocess.run([*run, "--dump-dom", page.as_uri()], check=True, timeout=120,
                             capture_output=True, text=True).stdout
        subprocess.run([*run, "--no-pdf-header-footer", f"--print-to-pdf={pdf}",
                        page.as_uri()], check=True, timeout=120, capture_output=True)
    pages = len(re.findall(rb"/Type\s*/Page[^s]", pdf.read_bytes()))
    return dom, mpimg.imread(shot)[..., :3], pages


def _painted(pixels: np.ndarray, colour: str) -> int:
    rgb = np.array([int(colour[i:i + 2], 16) / 255 for i in (1, 3, 5)])
    return int(np.sum(np.all(np.abs(pixels - rgb) < 0.08, axis=-1)))


def test_certificates_of_a_batch_render_and_print_on_at_most_two_a4_pages(
        tmp_path: Path) -> None:
    """batch --certificates: one page per passed unit; the page names the standards and
    their certificates, every reading with its limit, the cautions; it prints on one or
    two A4 pages; `record certificate` writes the same page for one recorded serial."""
    register = tmp_path / "standards.toml"
    register.write_text(REGISTER)
    readings = _lot(tmp_path / "lot.csv", _truths(3, failing=1))
    out = tmp_path / "out"
    done = _tool("batch", str(SPEC), str(readings), "--out", str(out), "--register",
                 str(register), "--standard", "M10-A", "--standard", "M50-B", "--operator",
                 "ana", "--certificates", "--json")
    assert done.returncode == 1, done.stderr
    units = json.loads(done.stdout)["units"]
    pages = sorted(p.name for p in out.glob("*.html"))
    assert pages == ["HV0000.r1.html", "HV0002.r1.html"]
    assert [u["certificate"] for u in units] == ["HV0000.r1.html", None, "HV0002.r1.html"]
    dom, pixels, count = _browse(out / "HV0000.r1.html", tmp_path, 2400)
    assert 'id="verdict">PASSED<' in dom
    assert "CAL-&lt;7&gt;-0001" in dom                      # escaped, not markup
    readings_rows = re.search(r'<table id="readings">(.*?)</table>', dom, re.S)
    assert readings_rows is not None
    rows = readings_rows.group(1).count("<tr>") - 1
    assert rows == sum(1 for ln in readings.read_text().splitlines()
                       if ln.startswith("HV0000,"))
    assert "legal-metrology authority" in dom and ">ana<" in dom
    assert dom.count("<img") == 1
    assert _painted(pixels, "#a3162a") > 300               # the limit lines are drawn
    assert 1 <= count <= 2
    one = tmp_path / "one.html"
    again = _tool("record", "certificate", "HV0000", "--db", str(out / "production.sqlite"),
                  "-o", str(one))
    assert again.returncode == 0, again.stderr
    assert one.read_bytes() == (out / "HV0000.r1.html").read_bytes()
    refused = _tool("record", "certificate", "HV0001", "--db", str(out / "production.sqlite"),
                    "-o", str(tmp_path / "no.html"))
    assert refused.returncode == 2 and "passed unit only" in refused.stderr


def test_lot_report_renders_its_histograms_and_flags_a_passed_outlier(tmp_path: Path) -> None:
    """Two stations, one lot; one unit passes with a zero far from the rest: the report
    flags it, shows six histograms, Cpk per criterion and the yield of both stations."""
    rng = np.random.default_rng(11)
    truths = [UnitTruth(f"HV{i:04d}", zero_mv_per_v=float(rng.normal(0, 0.01)),
                        span_error_pct=float(rng.normal(0, 0.3)),
                        zero_tc_ppm_fs_per_c=float(rng.normal(0, 3)),
                        span_tc_ppm_per_c=float(rng.normal(0, 3))) for i in range(40)]
    truths[13] = UnitTruth("HV0013", zero_mv_per_v=0.12)  # within 0.2 mV/V, far from the lot
    text = lot_csv(HIVE, truths, seed=5, start_utc=START).splitlines()
    head, body = text[:2], text[2:]
    for name, keep in (("a", lambda s: int(s[2:6]) % 2 == 0), ("b", lambda s: int(s[2:6]) % 2)):
        (tmp_path / f"{name}.csv").write_text("\n".join(head + [ln for ln in body
                                                                if keep(ln)]) + "\n")
    db = str(tmp_path / "line.sqlite")
    for name in ("a", "b"):
        done = _tool("batch", str(SPEC), str(tmp_path / f"{name}.csv"), "--out",
                     str(tmp_path / name), "--db", db, "--lot", "LOT9", "--station",
                     f"bench-{name}")
        assert done.returncode == 0, done.stdout + done.stderr
    report = tmp_path / "lot9.html"
    made = _tool("record", "report", "LOT9", "--db", db, "-o", str(report))
    assert made.returncode == 0, made.stderr
    dom, pixels, _ = _browse(report, tmp_path, 3400)
    assert dom.count("<img") == 6
    outliers = re.search(r'<table id="outliers">(.*?)</table>', dom, re.S)
    assert outliers is not None and "HV0013" in outliers.group(1)
    assert "passed" in outliers.group(1)
    assert re.search(r'id="yield">100.0 %<', dom)
    stations = re.search(r'<table id="stations">(.*?)</table>', dom, re.S)
    assert stations is not None
    assert "bench-a" in stations.group(1) and "bench-b" in stations.group(1)
    assert "Cpk" in dom and "zero offset" in dom
    assert _painted(pixels, "#3f7f9c") > 3000               # the histogram bars are drawn
    assert "legal-metrology authority" in dom
