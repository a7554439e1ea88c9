"""The command line as a user meets it: check, new, demo, --version, and every bad input.

Bad input must give exactly one line on stderr naming the file (and line) and the field
path, exit status 2 and no traceback. Warnings go to stderr with exit status 0.
"""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest
from click.testing import CliRunner

import hosttool
from hosttool.cli import main
from hosttool.spec.schema import load_spec
from hosttool.util.resources import example_names

REPO = Path(__file__).resolve().parent.parent

CELL = """\
schema = 1
name = "bench_cell"
description = "one 20 kg cell"

[sensor]
kind = "transducer"
capacity = 20.0
unit = "kg"
rated_output_mv_per_v = 2.0
zero_balance_mv_per_v = 0.05
cell_resistance_ohm = 350.0

[excitation]
voltage_v = 3.3
ratiometric = true

[adc]
bits = 24
pga_gain = "auto"
data_rate_sps = 10.0
noise_uv_rms = 0.03
sinc_order = 3

[output]
resolution = 0.01
bandwidth_hz = 1.0

[filter]
stages = [
  { kind = "moving_average", length = 4 },
  { kind = "butterworth_lowpass", order = 2, cutoff_hz = 1.0 },
]
"""

GAUGE = """\
schema = 1
name = "bench_gauge"

[sensor]
kind = "strain_bridge"
topology = "quarter"
gauge_factor = 2.0
gauge_resistance_ohm = 350.0
wiring = "three_wire"
lead_resistance_ohm = 0.5
strain_range_ue = 4000.0

[excitation]
voltage_v = 5.0

[adc]
data_rate_sps = 1000.0
noise_uv_rms = 0.01

[output]
resolution = 10.0

[filter]
stages = [
  { kind = "fir_lowpass", cutoff_hz = 100.0, transition_hz = 50.0, decimation = 4 },
  { kind = "notch", frequency_hz = 50.0 },
]
"""

#: every key of `check --json` (docs/json.md documents each; stable within schema 1)
JSON_KEYS = {
    "tool_version", "kind", "spec_name", "spec_sha256", "unit", "range_min", "range_max",
    "resolution", "bridge_resistance_ohm", "excitation_v", "reference_v",
    "excitation_current_ma", "excitation_power_mw", "full_scale_mv_per_v",
    "full_scale_output_mv", "zero_offset_mv_per_v", "sensitivity_uv_per_v_per_unit",
    "nonlinearity_pct_fs", "sensor_nonlinearity_pct_fs", "lead_desensitisation", "pga_gain",
    "pga_auto", "input_range_mv",
    "lsb_nv", "peak_input_mv", "range_used_pct", "counts_per_unit", "counts_per_lsb",
    "full_scale_counts", "span_counts", "noise_counts_rms", "total_noise_counts_rms",
    "effective_bits",
    "noise_free_bits", "noise_free_counts", "noise_free_resolution", "noise_free_divisions",
    "requested_divisions", "signal_band_hz", "mains", "warnings",
}
MAINS_KEYS = {"frequency_hz", "rejection_db", "worst_rejection_db", "alias_hz",
              "alias_band_hz", "in_band"}


def run(*args: str):
    return CliRunner().invoke(main, list(args))


def line_of(text: str, needle: str) -> int:
    return next(i for i, ln in enumerate(text.splitlines(), 1) if needle in ln)


def write(tmp_path: Path, text: str, name: str = "spec.toml") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def assert_one_line_error(result, expected: str) -> None:
    assert result.exit_code == 2, result.output
    assert result.stdout == ""
    assert "Traceback" not in result.stderr
    assert result.stderr.count("\n") == 1 and result.stderr.endswith("\n")
    assert result.stderr == f"hosttool: error: {expected}\n"


# --------------------------------------------------------------------------- bad input


# (base, old, new, field, line needle, reason)
FIELD_CASES = [
    ("cell", "capacity = 20.0", "capacity = 20.0\ncapacitty = 2.0", "sensor.capacitty",
     "capacitty", "unknown key (did you mean 'capacity'?)"),
    ("cell", "bits = 24", "bitz = 24", "adc.bitz", "bitz",
     "unknown key (did you mean 'bits'?)"),
    ("cell", 'voltage_v = 3.3', 'voltage_v = "3.3"', "excitation.voltage_v", "voltage_v",
     "expected a number, got a string ('3.3')"),
    ("cell", "ratiometric = true", 'ratiometric = "yes"', "excitation.ratiometric",
     "ratiometric", "expected true or false, got a string ('yes')"),
    ("cell", "cell_resistance_ohm = 350.0", "cell_resistance_ohm = -350.0",
     "sensor.cell_resistance_ohm", "cell_resistance_ohm",
     "must be at least 10, got -350 (one cell's bridge)"),
    ("cell", "cell_resistance_ohm = 350.0", "cell_resistance_ohm = 0",
     "sensor.cell_resistance_ohm", "cell_resistance_ohm",
     "must be at least 10, got 0 (one cell's bridge)"),
    ("gauge", "gauge_resistance_ohm = 350.0", "gauge_resistance_ohm = 0.0",
     "sensor.gauge_resistance_ohm", "gauge_resistance_ohm",
     "must be at least 10, got 0 (gauges are made from 60 ohm to 10 kohm)"),
    ("gauge", "lead_resistance_ohm = 0.5", "lead_resistance_ohm = -0.5",
     "sensor.lead_resistance_ohm", "lead_resistance_ohm",
     "must be at least 0, got -0.5 (each lead)"),
    ("gauge", "gauge_factor = 2.0", "gauge_factor = 0.0", "sensor.gauge_factor",
     "gauge_factor", "must be at least 0.5, got 0 (metal foil and wire gauges lie near 2)"),
    ("cell", 'pga_gain = "auto"', "pga_gain = 100", "adc.pga_gain", "pga_gain",
     "100 is not in the ADC's gain set 1, 2, 4, 8, 16, 32, 64, 128"),
    ("cell", 'pga_gain = "auto"', 'pga_gain = "max"', "adc.pga_gain", "pga_gain",
     "expected an integer or \"auto\", got a string ('max')"),
    ("cell", 'pga_gain = "auto"', "pga_gains = [1, 0, 4]", "adc.pga_gains", "pga_gains",
     "expected a non-empty array of integers from 1 to 1024"),
    ("cell", "voltage_v = 3.3", "voltage_v = 10.0", "excitation.voltage_v", "voltage_v",
     "10 V exceeds the ADC's maximum reference adc.reference_max_v = 5 V, which a "
     "ratiometric reference must respect"),
    ("cell", "ratiometric = true", "ratiometric = true\nreference_v = 2.5",
     "excitation.reference_v", "reference_v",
     "a ratiometric ADC takes its reference from the excitation; remove reference_v or set "
     "ratiometric = false"),
    ("cell", "ratiometric = true", "ratiometric = false\nreference_v = 6.0",
     "excitation.reference_v", "reference_v", "6 V exceeds adc.reference_max_v = 5 V"),
    ("cell", "capacity = 20.0", "capacity = 0.0", "sensor.capacity", "capacity",
     "must be at least 1e-06, got 0 (in the output unit; total of all cells)"),
    ("cell", "cutoff_hz = 1.0", "cutoff_hz = 5.0", "filter.stages[1].cutoff_hz", "cutoff_hz",
     "5 Hz is at or above the Nyquist frequency 5 Hz of this stage's 10 samples/s"),
    ("cell", "cutoff_hz = 1.0", "cutoff_hz = 7.5", "filter.stages[1].cutoff_hz", "cutoff_hz",
     "7.5 Hz is at or above the Nyquist frequency 5 Hz of this stage's 10 samples/s"),
    # after decimation by 4 the notch runs at 250 samples/s
    ("gauge", "frequency_hz = 50.0", "frequency_hz = 125.0", "filter.stages[1].frequency_hz",
     "frequency_hz", "125 Hz is at or above the Nyquist frequency 125 Hz of this stage's "
     "250 samples/s"),
    ("cell", '"moving_average"', '"moving_avrage"', "filter.stages[0].kind", "moving_avrage",
     "'moving_avrage' is not one of moving_average, fir_lowpass, butterworth_lowpass, notch "
     "(did you mean 'moving_average'?)"),
    ("gauge", '"quarter"', '"quarterr"', "sensor.topology", "quarterr",
     "'quarterr' is not one of quarter, half_opposing, half_poisson, full_bending, "
     "full_poisson (did you mean 'quarter'?)"),
    ("cell", "bandwidth_hz = 1.0", "bandwidth_hz = 6.0", "output.bandwidth_hz", "bandwidth_hz",
     "must be at most 5, got 6"),
    ("cell", "resolution = 0.01", "resolution = 50.0", "output.resolution", "resolution = 50",
     "50 is coarser than the whole range (20 kg)"),
    ("cell", "schema = 1", "schema = 2", "schema", "schema",
     "must be one of 1, got 2"),
    ("cell", 'name = "bench_cell"', 'name = "Bench Cell"', "name", "name =",
     "'Bench Cell' must be lower case letters, digits and _, starting with a letter, at most "
     "40 characters (it prefixes C names)"),
]


@pytest.mark.parametrize("base, old, new, field, needle, reason", FIELD_CASES,
                         ids=[f"{c[3]}:{c[5][:24]}" for c in FIELD_CASES])
def test_bad_field_is_one_line_with_file_line_and_field(tmp_path, base, old, new, field,
                                                         needle, reason):
    original = CELL if base == "cell" else GAUGE
    assert old in original
    text = original.replace(old, new, 1)
    path = write(tmp_path, text)
    result = run("check", str(path))
    assert_one_line_error(result, f"{path}:{line_of(text, needle)}: {field}: {reason}")


def test_toml_syntax_error_names_file_and_line(tmp_path):
    text = CELL.replace("voltage_v = 3.3", "voltage_v = 3.3 V")
    path = write(tmp_path, text)
    result = run("check", str(path))
    assert_one_line_error(result, f"{path}:{line_of(text, '3.3 V')}: TOML syntax error: "
                                  "Expected newline or end of document after a statement")


def test_missing_key_names_its_table_line(tmp_path):
    text = CELL.replace("noise_uv_rms = 0.03\n", "")
    path = write(tmp_path, text)
    assert_one_line_error(run("check", str(path)),
                          f"{path}:{line_of(text, '[adc]')}: adc.noise_uv_rms: "
                          "missing required key")


def test_misspelt_required_key_is_suggested(tmp_path):
    text = CELL.replace("rated_output_mv_per_v", "rated_ouput_mv_per_v")
    path = write(tmp_path, text)
    assert_one_line_error(run("check", str(path)),
                          f"{path}:{line_of(text, '[sensor]')}: sensor.rated_output_mv_per_v: "
                          "missing required key (is 'rated_ouput_mv_per_v' a misspelling of it?)")


def test_missing_section_and_wrong_section_type(tmp_path):
    path = write(tmp_path, CELL.replace("[output]\nresolution = 0.01\nbandwidth_hz = 1.0\n", ""))
    assert_one_line_error(run("check", str(path)), f"{path}: output: missing required key")
    text = CELL.replace("[excitation]\nvoltage_v = 3.3\nratiometric = true\n", "") \
        .replace('description = "one 20 kg cell"', 'description = "x"\nexcitation = 3.3')
    path = write(tmp_path, text)
    assert_one_line_error(run("check", str(path)),
                          f"{path}:{line_of(text, 'excitation = 3.3')}: excitation: "
                          "expected a table, got a number (3.3)")


def test_missing_file(tmp_path):
    path = tmp_path / "nope.toml"
    assert_one_line_error(run("check", str(path)), f"{path}: no such file")


def test_no_gain_fits_is_one_line(tmp_path):
    text = CELL.replace("ratiometric = true", "ratiometric = false\nreference_v = 0.005")
    path = write(tmp_path, text)
    result = run("check", str(path))
    assert result.exit_code == 2 and result.stderr.count("\n") == 1
    assert result.stderr.startswith(f"hosttool: error: {path}: adc.pga_gains: the peak input "
                                    "6.765 mV plus 10 % margin exceeds the range even at gain 1")


def test_debug_keeps_the_traceback(tmp_path):
    path = write(tmp_path, CELL.replace("bits = 24", "bitz = 24"))
    result = run("--debug", "check", str(path))
    assert result.exit_code == 2
    assert "Traceback" in result.stderr
    assert result.stderr.rstrip().splitlines()[-1].endswith("unknown key (did you mean 'bits'?)")


# --------------------------------------------------------------------------- check


@pytest.mark.parametrize("name", example_names())
def test_check_prints_the_budget_of_each_bundled_example(tmp_path, name):
    path = tmp_path / f"{name}.toml"
    assert run("new", str(path), "--example", name).exit_code == 0
    result = run("check", str(path))
    assert result.exit_code == 0, result.output
    assert result.stdout.startswith(f"{name}: sensor and ADC budget\n")
    for heading in ("Bridge", "ADC", "Mains through the ADC's sinc filter"):
        assert f"\n{heading}\n" in result.stdout
    assert "PGA gain" in result.stdout and "noise-free" in result.stdout
    assert all(line.startswith("warning: ") for line in result.stderr.splitlines())

    as_json = run("check", str(path), "--json")
    assert as_json.exit_code == 0
    data = json.loads(as_json.stdout)
    assert set(data) == JSON_KEYS
    assert data["kind"] == "budget" and data["tool_version"] == hosttool.__version__
    assert data["spec_name"] == name
    assert data["spec_sha256"] == load_spec(path).sha256
    assert [set(m) for m in data["mains"]] == [MAINS_KEYS, MAINS_KEYS]
    assert [m["frequency_hz"] for m in data["mains"]] == [50.0, 60.0]
    # warnings are in the JSON and, one per line, on stderr
    assert as_json.stderr.splitlines() == [f"warning: {w}" for w in data["warnings"]]


def test_docs_document_every_json_key():
    reference = REPO / "docs" / "json.md"
    documented = set(re.findall(r"^\| `([a-z0-9_]+)` \|", reference.read_text(encoding="utf-8"),
                                re.MULTILINE))
    assert JSON_KEYS | MAINS_KEYS <= documented


def warnings_of(tmp_path, text):
    path = write(tmp_path, text)
    result = run("check", str(path))
    assert result.exit_code == 0, result.output
    assert "sensor and ADC budget" in result.stdout
    assert "warning" not in result.stdout
    lines = result.stderr.splitlines()
    assert lines and all(line.startswith("warning: ") for line in lines)
    return lines


def test_no_warning_for_a_sound_spec(tmp_path):
    path = write(tmp_path, CELL)
    result = run("check", str(path))
    assert (result.exit_code, result.stderr) == (0, "")


def test_warning_range_used_below_25_percent(tmp_path):
    # gain fixed at 16: 2.05 mV/V x 3.3 V = 6.765 mV of +-206.25 mV, 3.3 %
    lines = warnings_of(tmp_path, CELL.replace('pga_gain = "auto"', "pga_gain = 16"))
    # gain 16 of a set that goes higher: the advice is the gain
    assert lines == ["warning: range used 3.3 % is below 25 %: resolution is thrown away "
                     "(a higher PGA gain would help)"]


def test_warning_range_used_above_95_percent(tmp_path):
    # 3 mV/V + 0.1 mV/V at 5 V = 15.5 mV on a 2.048 V reference at gain 128 (+-16 mV): 96.9 %
    text = CELL.replace("rated_output_mv_per_v = 2.0", "rated_output_mv_per_v = 3.0") \
        .replace("zero_balance_mv_per_v = 0.05", "zero_balance_mv_per_v = 0.1") \
        .replace("voltage_v = 3.3\nratiometric = true",
                 "voltage_v = 5.0\nratiometric = false\nreference_v = 2.048") \
        .replace('pga_gain = "auto"', "pga_gain = 128")
    assert warnings_of(tmp_path, text) == [
        "warning: range used 96.9 % is above 95 %: little overload margin"]


def test_warning_noise_free_resolution_coarser_than_requested(tmp_path):
    # 6.6 x 0.5 uV / (2 mV/V / 20 kg x 3.3 V) = 0.01 kg: coarser than a 0.005 kg step
    text = CELL.replace("noise_uv_rms = 0.03", "noise_uv_rms = 0.5") \
        .replace("resolution = 0.01", "resolution = 0.005")
    assert warnings_of(tmp_path, text) == [
        "warning: noise-free resolution 0.01 kg at the ADC is coarser than the requested "
        "0.005 kg (before digital filtering)"]


def test_warning_mains_aliased_into_the_band(tmp_path):
    # 40 samples/s: 50 Hz lands at 10 Hz (inside 0..15 Hz) with sinc^3 rejection of
    # -60 log10 |sinc(1.25)| = 44.7 dB at nominal, 60 Hz lands at 20 Hz (outside)
    text = CELL.replace("data_rate_sps = 10.0", "data_rate_sps = 40.0") \
        .replace("bandwidth_hz = 1.0", "bandwidth_hz = 15.0") \
        .replace("cutoff_hz = 1.0", "cutoff_hz = 15.0")
    lines = warnings_of(tmp_path, text)
    assert len(lines) == 1
    assert lines[0].startswith("warning: mains 50 Hz (+-1 %) lands at 9.5..10.5 Hz, inside the "
                               "15 Hz signal band, with only ")
    assert re.search(r"only (4[3-5]\.\d) dB of sinc rejection$", lines[0])


# --------------------------------------------------------------------------- new, demo, version


def test_new_writes_a_spec_that_loads_and_refuses_to_overwrite(tmp_path):
    for name in example_names():
        path = tmp_path / f"{name}.toml"
        result = run("new", str(path), "--example", name)
        assert result.exit_code == 0, result.output
        assert result.stdout == (f"wrote {path} (from example {name!r}); edit it, then: "
                                 f"hosttool check {path}\n")
        assert load_spec(path).name == name
        path.write_text("# mine\n", encoding="utf-8")
        refused = run("new", str(path), "--example", name)
        assert_one_line_error(refused, f"{path}: already exists (use --force to overwrite)")
        assert path.read_text(encoding="utf-8") == "# mine\n"
        forced = run("new", str(path), "--example", name, "--force")
        assert forced.exit_code == 0
        assert load_spec(path).name == name


def test_new_default_example_and_bad_example(tmp_path):
    path = tmp_path / "default.toml"
    assert run("new", str(path)).exit_code == 0
    assert load_spec(path).name == "hive_scale"
    choices = ", ".join(example_names())
    assert_one_line_error(run("new", str(tmp_path / "x.toml"), "--example", "hive"),
                          f"--example: no bundled example 'hive'; choose one of {choices}")


def test_new_into_a_missing_folder(tmp_path):
    path = tmp_path / "no" / "such" / "spec.toml"
    assert_one_line_error(run("new", str(path)),
                          f"{path}: folder {path.parent} does not exist")


def test_demo_writes_its_files(tmp_path):
    folder = tmp_path / "out"
    result = run("demo", str(folder), "--example", "fatigue_coupon")
    assert result.exit_code == 0, result.output
    written = {p.name for p in folder.iterdir()}
    # the budget step is this module's; later steps add their own files
    assert {"fatigue_coupon.toml", "budget.txt", "budget.json"} <= written
    assert load_spec(folder / "fatigue_coupon.toml").name == "fatigue_coupon"
    data = json.loads((folder / "budget.json").read_text(encoding="utf-8"))
    assert set(data) == JSON_KEYS and data["spec_name"] == "fatigue_coupon"
    assert (folder / "budget.txt").read_text(encoding="utf-8").startswith(
        "fatigue_coupon: sensor and ADC budget\n")
    lines = result.stdout.splitlines()
    assert lines[0].startswith(f"spec    {folder / 'fatigue_coupon.toml'}  (bundled example "
                               "'fatigue_coupon', sha256 ")
    assert lines[1].startswith(f"check   {folder / 'budget.txt'}, budget.json  (PGA 128, ")
    assert lines[-1] == f"done: everything is in {folder}"


def test_demo_default_folder_is_new_each_time(tmp_path):
    # `hosttool demo` without FOLDER never writes into an existing demo folder
    from hosttool.commands.demo import _new_folder

    base = tmp_path / "hosttool-demo"
    assert _new_folder(base) == base
    base.mkdir()
    assert _new_folder(base) == tmp_path / "hosttool-demo-2"
    (tmp_path / "hosttool-demo-2").mkdir()
    assert _new_folder(base) == tmp_path / "hosttool-demo-3"


def test_demo_into_an_unwritable_place(tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("x", encoding="utf-8")
    result = run("demo", str(blocker / "sub"))
    assert result.exit_code == 2 and result.stderr.count("\n") == 1
    assert result.stderr.startswith(f"hosttool: error: {blocker / 'sub'}: cannot create: ")


def test_python_dash_m_version(tmp_path):
    env = dict(os.environ)
    package_root = str(Path(hosttool.__file__).resolve().parent.parent)
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [package_root, env.get("PYTHONPATH")]))
    done = subprocess.run([sys.executable, "-m", "hosttool", "--version"], cwd=tmp_path,
                          env=env, capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert done.stdout == f"hosttool, version {hosttool.__version__}\n"


def test_bad_spec_through_python_dash_m(tmp_path):
    # the real process: one line on stderr, status 2, no traceback
    path = write(tmp_path, GAUGE.replace("gauge_factor = 2.0", "gauge_factor = 0"))
    env = dict(os.environ)
    package_root = str(Path(hosttool.__file__).resolve().parent.parent)
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [package_root, env.get("PYTHONPATH")]))
    done = subprocess.run([sys.executable, "-m", "hosttool", "check", str(path)], cwd=tmp_path,
                          env=env, capture_output=True, text=True, timeout=120)
    assert done.returncode == 2
    assert done.stdout == ""
    assert done.stderr == (f"hosttool: error: {path}:{line_of(GAUGE, 'gauge_factor')}: "
                           "sensor.gauge_factor: must be at least 0.5, got 0 (metal foil and wire "
                           "gauges lie near 2)\n")


@pytest.mark.parametrize("command", ["check", "design"])
def test_printing_commands_end_at_once_with_whole_output(tmp_path, command):
    # check and design end without the interpreter's teardown (cli.run, util/quick_exit.py):
    # stdout buffered into a pipe must still arrive whole, with check's warning on stderr
    # and status 0; the same output as the command run in-process
    path = write(tmp_path, CELL.replace("noise_uv_rms = 0.03", "noise_uv_rms = 0.5")
                 .replace("resolution = 0.01", "resolution = 0.005"))   # warned: see below
    env = {k: v for k, v in os.environ.items() if k != "PYTHONUNBUFFERED"}
    package_root = str(Path(hosttool.__file__).resolve().parent.parent)
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [package_root, env.get("PYTHONPATH")]))
    done = subprocess.run([sys.executable, "-m", "hosttool", command, str(path), "--json"],
                          cwd=tmp_path, env=env, capture_output=True, text=True, timeout=300)
    in_process = CliRunner().invoke(main, [command, str(path), "--json"])
    assert (done.returncode, in_process.exit_code) == (0, 0), done.stderr
    assert json.loads(done.stdout) == json.loads(in_process.stdout)
    assert done.stderr == in_process.stderr
    assert done.stderr.startswith("warning: ") or command == "design"  # design: in its JSON


@pytest.mark.parametrize(("given", "expected"), [(None, "1"), ("3", "3")])
def test_console_entry_gives_blas_one_thread_unless_the_user_set_it(given, expected):
    # Source: OpenBLAS reads OPENBLAS_NUM_THREADS when it is loaded (with numpy), so the
    # entry point must set it before any command imports numpy.
    code = ("import os, sys\nfrom hosttool.cli import run\nsys.argv = ['hosttool', 'check', "
            "'--help']\ntry:\n    run()\nexcept SystemExit:\n    pass\n"
            "print(os.environ['OPENBLAS_NUM_THREADS'], 'numpy' in sys.modules)")
    env = {k: v for k, v in os.environ.items() if k != "OPENBLAS_NUM_THREADS"}
    if given is not None:
        env["OPENBLAS_NUM_THREADS"] = given
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          env=env, check=True)
    assert done.stdout.split()[-2:] == [expected, "False"]
