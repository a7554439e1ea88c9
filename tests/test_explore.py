"""hosttool explore: the grid, its figures against separate check and design runs, the
Pareto front against a brute-force check, invalid variants, JSON, the page, saved specs.

Outside references: the Pareto front is checked against the definition of
non-domination (V. Pareto; any multi-objective optimisation text) evaluated by brute force
over every pair with numpy; the figures against the `check --json` and `design --json`
commands run separately on each saved variant.
"""

from __future__ import annotations

import json
import subprocess
import tempfile
import tomllib
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from conftest import require_tools
from matplotlib import image as mpimg

from hosttool.cli import main
from hosttool.spec.schema import load_spec, parse_spec
from hosttool.verify.explore import (
    FIGURES,
    Variant,
    mark_pareto,
    parse_path,
    parse_vary,
    to_toml,
)

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
HIVE = str(EXAMPLES / "hive_scale.toml")


def run(*args: str) -> tuple[int, str, str]:
    result = CliRunner().invoke(main, list(args))
    return result.exit_code, result.stdout, result.stderr


# --------------------------------------------------------------------------- Pareto


def brute_force_front(points: np.ndarray) -> set[int]:
    """Rows of ``points`` (every column: larger is better) that no other row dominates."""
    ge = np.all(points[:, None, :] >= points[None, :, :], axis=2)  # i at least as good as j
    gt = np.any(points[:, None, :] > points[None, :, :], axis=2)
    dominated_by = ge & gt                                          # i dominates j
    return {j for j in range(len(points)) if not dominated_by[:, j].any()}


@pytest.mark.parametrize("seed", range(6))
def test_pareto_front_equals_brute_force(seed: int) -> None:
    rng = np.random.default_rng(seed)
    n = 60
    # few distinct values so that ties are common
    raw = rng.integers(0, 5, size=(n, len(FIGURES))).astype(float)
    variants = [Variant(i + 1, {}, "", figures=dict(zip(FIGURES, row, strict=True)))
                for i, row in enumerate(raw)]
    variants.append(Variant(n + 1, {}, "", error="refused"))
    mark_pareto(variants)
    signs = np.array([sign for sign, _ in FIGURES.values()], dtype=float)
    expected = brute_force_front(raw * signs)
    assert {v.index - 1 for v in variants if v.pareto} == expected
    assert not variants[-1].pareto


def test_pareto_by_hand() -> None:
    # divisions up, settling down, bound down, cost down
    a = {"divisions": 100.0, "settling_s": 1.0, "error": 0.1, "cost": 10.0}
    b = {"divisions": 100.0, "settling_s": 2.0, "error": 0.1, "cost": 10.0}  # a wins
    c = {"divisions": 200.0, "settling_s": 3.0, "error": 0.1, "cost": 10.0}  # trade-off
    d = dict(a)                                                                     # a's twin
    variants = [Variant(i, {}, "", figures=f) for i, f in enumerate((a, b, c, d), 1)]
    mark_pareto(variants)
    assert [v.pareto for v in variants] == [True, False, True, True]


# --------------------------------------------------------------------------- keys


def test_keys_and_values_parse() -> None:
    assert parse_path("filter.stages[1].cutoff_hz") == ("filter", "stages", 1, "cutoff_hz")
    axis = parse_vary('adc.pga_gain="auto",64,128')
    assert axis.values == ("auto", 64, 128)
    assert parse_vary("adc.pga_gain=auto,8").values == ("auto", 8)
    assert parse_vary("calibration.points=[0, 1.5],[2]").values == ([0, 1.5], [2])


def test_toml_written_reads_back_the_same() -> None:
    data = tomllib.loads((EXAMPLES / "fatigue_coupon.toml").read_text())
    assert tomllib.loads(to_toml(data, "header\nsecond line")) == data


# --------------------------------------------------------------------------- the command


def test_figures_equal_separate_check_and_design_runs(tmp_path: Path) -> None:
    code, out, err = run("explore", HIVE, "--vary", "adc.data_rate_sps=10,20",
                         "--vary", "filter.stages[1].cutoff_hz=0.5,1.5", "--json",
                         "--jobs", "2",
                         *[a for i in range(1, 5) for a in ("--save", str(i),
                                                            str(tmp_path / f"v{i}.toml"))])
    assert code == 0, err
    data = json.loads(out)
    assert data["kind"] == "exploration" and len(data["variants"]) == 4
    for variant in data["variants"]:
        path = tmp_path / f"v{variant['index']}.toml"
        spec = load_spec(path)
        assert spec.adc.data_rate_sps == variant["keys"]["adc.data_rate_sps"]
        assert spec.filter.stages[1].cutoff_hz == variant["keys"]["filter.stages[1].cutoff_hz"]
        c_code, c_out, _ = run("check", str(path), "--json")
        d_code, d_out, _ = run("design", str(path), "--json")
        v_code, v_out, _ = run("verify", str(path), "--json", "--samples", "20000")
        assert c_code == 0 and d_code == 0 and v_code in (0, 1)
        check, design, verify = json.loads(c_out), json.loads(d_out), json.loads(v_out)
        f = variant["figures"]
        assert f["divisions"] == check["noise_free_divisions"]
        assert f["settling_s"] == design["response"]["realised"]["settling_1lsb_s"]
        assert f["error_bound"] == pytest.approx(
            design["ideal_error_bound_lsb"] * design["output_lsb"], rel=1e-12)
        assert f["output_rate_hz"] == design["output_rate_hz"]
        assert f["error"] == verify["end_to_end"]["max_error"]
        # cost: the moving average's 5 taps, one biquad (5), the scale and the 4
        # multiplications of the temperature step, per ADC sample (no decimation)
        assert f["cost"] == 5 + 5 + 1 + 4
        assert set(variant) == {"index", "keys", "valid", "error", "figures", "pareto"}
    assert any(v["pareto"] for v in data["variants"])


def test_invalid_variant_is_a_row_not_a_crash() -> None:
    code, out, err = run("explore", HIVE, "--vary", "filter.coefficient_bits=16,20",
                         "--jobs", "1")
    assert code == 0, err
    lines = out.splitlines()
    bad = next(line for line in lines if line.startswith("2 "))
    assert "invalid:" in bad and "filter.coefficient_bits: must be one of 16, 32, got 20" in bad
    assert "2 variants, 1 valid, 1 Pareto-optimal" in out


@pytest.mark.parametrize("args, message", [
    (["--vary", "nonsense"], "--vary: 'nonsense' is not KEY=V1,V2,..."),
    (["--vary", "filter.stages[7].cutoff_hz=1,2"], "--vary: filter.stages[7].cutoff_hz: the "
                                                   "spec has no element [7] there"),
    (["--vary", "adc.pga_gain=8", "--sort", "speed"], "--sort: 'speed' is not one of"),
    (["--vary", "adc.pga_gain=8", "--save", "3", "x.toml"], "--save: no variant 3 (1..1)"),
])
def test_bad_options_one_line_exit_2(args: list[str], message: str) -> None:
    code, _, err = run("explore", HIVE, *args)
    assert code == 2
    assert err.count("\n") == 1 and message in err


def test_page_has_the_plot_and_escapes(tmp_path: Path) -> None:
    page = tmp_path / "space.html"
    code, _, err = run("explore", HIVE, "--vary", "filter.stages[1].cutoff_hz=0.5,1",
                       "--vary", 'description="<b>x</b>"', "--html", str(page), "--jobs", "1")
    assert code == 0, err
    text = page.read_text()
    assert text.count("data:image/png;base64,") == 1
    assert "&lt;b&gt;x&lt;/b&gt;" in text and "<b>x</b>" not in text
    assert "legal-metrology authority" in text


def test_limit_cycle_figure_equals_the_verify_analysis(tmp_path: Path) -> None:
    # the coupon's 50 Hz notch: quality 1 is free of limit cycles, 10 cycles
    # (test_limit_cycles.py checks the search against a hand-built section and brute force)
    fatigue = str(EXAMPLES / "fatigue_coupon.toml")
    code, out, err = run("explore", fatigue, "--vary", "filter.stages[1].quality=1,10",
                         "--vary", "filter.stages[2].quality=1", "--json", "--jobs", "1",
                         "--save", "2", str(tmp_path / "q10.toml"))
    assert code == 0, err
    q1, q10 = json.loads(out)["variants"]
    assert q1["figures"]["limit_cycle_lsb"] == 0
    assert q10["figures"]["limit_cycle_lsb"] > 0
    from hosttool.design.resolve import make_design
    from hosttool.verify.limit_cycles import analyse_design

    report = analyse_design(make_design(load_spec(tmp_path / "q10.toml")))
    assert q10["figures"]["limit_cycle_lsb"] == max(
        c.amplitude for s in report.sections for c in s.cycles)


@pytest.mark.slow
def test_m4_cost_is_the_instruction_count_under_qemu() -> None:
    # the firmware runner on Cortex-M4 under QEMU (-icount shift=0: a deterministic count),
    # run separately here on the same codes, must give the same figure
    require_tools("m4", run=True)
    code, out, err = run("explore", HIVE, "--vary", "filter.stages[1].cutoff_hz=0.5,1",
                         "--m4", "--json", "--jobs", "2")
    assert code == 0, err
    data = json.loads(out)
    assert data["cost"].startswith("Cortex-M4 instructions")
    from hosttool.design.resolve import make_design
    from hosttool.firmware.run import build_runner, run_runner

    for variant in data["variants"]:
        text = Path(HIVE).read_text().replace(
            "cutoff_hz = 0.5 }", f"cutoff_hz = {variant['keys']['filter.stages[1].cutoff_hz']} }}")
        design = make_design(parse_spec(text, "v.toml"))
        with tempfile.TemporaryDirectory() as work:
            exe = build_runner(design, "m4", Path(work))
            rng = np.random.default_rng(0)
            codes = rng.integers(-(1 << 23), 1 << 23, 2000)
            temps = rng.integers(-2000, 5000, 2000)
            count = run_runner(exe, "m4", codes, temps).instructions_per_sample
        assert variant["figures"]["cost"] == count
        assert count is not None and count > 5 + 5 + 1 + 4   # more than its multiplications


@pytest.mark.slow
def test_page_renders_in_headless_chromium(tmp_path: Path) -> None:
    # the page in Debian's chromium: the plot decodes and every variant is a table row
    from test_report_browser import FLAGS, _chromium

    browser = _chromium()
    page = tmp_path / "space.html"
    code, _, err = run("explore", HIVE, "--vary", "filter.stages[1].cutoff_hz=0.5,1,1.5",
                       "--vary", "filter.coefficient_bits=16,20", "--html", str(page),
                       "--jobs", "1")
    assert code == 0, err
    with tempfile.TemporaryDirectory() as profile:
        dom = subprocess.run([browser, *FLAGS, f"--user-data-dir={profile}", "--dump-dom",
                              page.as_uri()], check=True, timeout=120, capture_output=True,
                             text=True).stdout
        shot = tmp_path / "shot.png"
        subprocess.run([browser, *FLAGS, f"--user-data-dir={profile}", "--window-size=1200,1400",
                        f"--screenshot={shot}", page.as_uri()], check=True, timeout=120,
                       capture_output=True)
    assert dom.count("<img") == 1 and dom.count("<tr") == 1 + 6
    assert dom.count('class="front"') >= 1
    assert "must be one of 16, 32, got 20" in dom
    pixels = mpimg.imread(shot)[..., :3]
    teal = np.array([0x1b, 0x6f, 0x8a]) / 255   # the Pareto points' colour
    assert np.sum(np.all(np.abs(pixels - teal) < 0.02, axis=-1)) > 20
