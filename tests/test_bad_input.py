"""A corpus of bad input across every command: each case is answered by exactly one line on
stderr naming the file, line and field, exit status 2, no traceback, and nothing written.

Source of the rules: the project's bad-input contract (README "Exit statuses"); the
accepted time forms are ISO 8601 extended format in UTC (ISO 8601-1:2019, 5.4.2: basic
format and a space instead of T are other forms, refused on purpose); control characters
are the C0 and C1 sets of ISO/IEC 6429 plus DEL and Unicode's U+2028/U+2029 (from
memory). The expected messages are the tool's own words, fixed here so a change is seen.
"""

from __future__ import annotations

import json
import os
import shutil
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from hosttool.cli import main
from hosttool.design.resolve import make_design
from hosttool.production.synthetic_lot import lot_csv, random_truth
from hosttool.spec.schema import parse_spec

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
HIVE_TEXT = (EXAMPLES / "hive_scale.toml").read_text()
GAUGE_TEXT = (EXAMPLES / "fatigue_coupon.toml").read_text()
START = 1_741_075_200

Edit = Callable[[str], str]
Content = Edit | str | bytes


def sub(old: str, new: str) -> Edit:
    """Replace the first ``old`` by ``new`` (the case fails if ``old`` is missing)."""
    def edit(text: str) -> str:
        assert old in text, old
        return text.replace(old, new, 1)
    return edit


def json_edit(change: Callable[[dict], None]) -> Edit:
    def edit(text: str) -> str:
        data = json.loads(text)
        change(data)
        return json.dumps(data, indent=2)
    return edit


@dataclass(frozen=True)
class Case:
    """One bad input: edits of the good files, the command line, the one expected line."""

    id: str
    argv: tuple[str, ...]
    message: str
    edits: dict[str, Content] = field(default_factory=dict)
    code: int = 2
    absent: tuple[str, ...] = ()        # files that must not exist afterwards


@pytest.fixture(scope="module")
def good(tmp_path_factory: pytest.TempPathFactory) -> dict[str, bytes]:
    """The good files every case starts from: two specs, a lot, a CAL.json, images."""
    folder = tmp_path_factory.mktemp("good")
    (folder / "spec.toml").write_text(HIVE_TEXT)
    (folder / "gauge.toml").write_text(GAUGE_TEXT)
    design = make_design(parse_spec(HIVE_TEXT, "spec.toml"))
    rng = np.random.default_rng(11)
    (folder / "lot.csv").write_text(lot_csv(design, [random_truth(f"HV-{i:04d}", rng)
                                                     for i in range(2)],
                                            seed=5, start_utc=START))
    cwd = os.getcwd()
    os.chdir(folder)
    try:
        runner = CliRunner()
        for argv in (["calibrate", "spec.toml", "lot.csv", "--serial", "HV-0000", "-o",
                      "cal.json"],
                     ["image", "spec.toml", "cal.json", "-o", "unit.hex"],
                     ["image", "spec.toml", "cal.json", "-o", "unit.bin", "--bin"]):
            done = runner.invoke(main, argv)
            assert done.exit_code == 0, done.output
    finally:
        os.chdir(cwd)
    return {p.name: p.read_bytes() for p in folder.iterdir()}


S, G = "spec.toml", "gauge.toml"
LOT, CAL = "lot.csv", "cal.json"
TIME_FORMS = "YYYY-MM-DDThh:mm:ssZ or YYYY-MM-DDThh:mm:ss+00:00 (e.g. 2025-03-04T08:15:00Z)"
CAL_AGAIN = "calibrate the unit again"
#: A register of reference standards (invented), for the batch --register cases.
REGISTER = """[[standard]]
id = "M20-03"
kind = "mass"
nominal = 20.0
unit = "kg"
uncertainty = 0.0004
certificate = "LAB-26-0412"
due = 2027-03-01
"""

CASES: list[Case] = [
    # ------------------------------------------------------------------ spec: numbers
    Case("gauge_factor-denormal", ("check", G),
         "gauge.toml:11: sensor.gauge_factor: must be at least 0.5, got 4.94066e-324 (metal "
         "foil and wire gauges lie near 2)",
         {G: sub("gauge_factor = 2.1", "gauge_factor = 5e-324")}),
    Case("gauge_resistance-tiny", ("check", G),
         "gauge.toml:12: sensor.gauge_resistance_ohm: must be at least 10, got 1e-300 (gauges "
         "are made from 60 ohm to 10 kohm)",
         {G: sub("gauge_resistance_ohm = 120.0", "gauge_resistance_ohm = 1e-300")}),
    Case("lead_resistance-huge", ("design", G),
         "gauge.toml:14: sensor.lead_resistance_ohm: must be at most 1000, got 1e+300 (each "
         "lead)", {G: sub("lead_resistance_ohm = 0.8", "lead_resistance_ohm = 1e300")}),
    Case("max_zero_tc-tiny", ("render", S, "-o", "out"),
         "spec.toml:49: temperature.max_zero_tc_ppm_fs_per_c: must be at least 0.1, got "
         "1e-300 (sets the format of the zero coefficient; finer than 0.1 ppm/C is below any "
         "bridge's drift)",
         {S: sub("max_zero_tc_ppm_fs_per_c = 50.0", "max_zero_tc_ppm_fs_per_c = 1e-300")},
         absent=("out",)),
    Case("capacity-nan", ("check", S),
         "spec.toml:10: sensor.capacity: must be finite, got nan",
         {S: sub("capacity = 200.0", "capacity = nan")}),
    Case("capacity-inf", ("check", S),
         "spec.toml:10: sensor.capacity: must be finite, got inf",
         {S: sub("capacity = 200.0", "capacity = inf")}),
    Case("voltage-huge-integer", ("check", S),
         "spec.toml:19: excitation.voltage_v: an integer (70 bits) is too large",
         {S: sub("voltage_v = 3.3", "voltage_v = 1000000000000000000000")}),
    Case("integer-5000-digits", ("check", S),
         "spec.toml: TOML value not readable: Exceeds the limit (4300 digits) for integer "
         "string conversion: value has 5000 digits; use sys.set_int_max_str_digits() to "
         "increase the limit",
         {S: sub("voltage_v = 3.3", "voltage_v = " + "7" * 5000)}),
    Case("data_rate-zero", ("check", S),
         "spec.toml:27: adc.data_rate_sps: must be at least 0.01, got 0 (delta-sigma output "
         "data rates)", {S: sub("data_rate_sps = 10.0", "data_rate_sps = 0")}),
    Case("noise-negative", ("check", S),
         "spec.toml:28: adc.noise_uv_rms: must be at least 0.0001, got -0.03 (input-referred "
         "noise)", {S: sub("noise_uv_rms = 0.03", "noise_uv_rms = -0.03")}),
    Case("bits-string", ("check", S),
         "spec.toml:23: adc.bits: expected an integer, got a string ('24')",
         {S: sub("bits = 24", 'bits = "24"')}),
    Case("pga-gain-huge", ("check", S),
         "spec.toml:25: adc.pga_gains: expected a non-empty array of integers from 1 to 1024",
         {S: sub("pga_gains = [1, 2, 4, 8, 16, 32, 64, 128]", "pga_gains = [1, 2, 4096]")}),
    Case("cutoff-denormal", ("check", S),
         "spec.toml:39: filter.stages[1].cutoff_hz: must be greater than 0, got 0 (below the "
         "stage's Nyquist frequency)", {S: sub("cutoff_hz = 0.5 }", "cutoff_hz = 0.0 }")}),
    Case("cutoff-below-rate-share", ("check", S),
         "spec.toml:39: filter.stages[1].cutoff_hz: 1e-06 Hz is below 1e-05 of this stage's "
         "10 samples/s: its poles would sit closer to z = 1 than the coefficient words resolve",
         {S: sub("cutoff_hz = 0.5 }", "cutoff_hz = 1e-6 }")}),
    Case("notch-denormal", ("design", G),
         "gauge.toml:43: filter.stages[1].frequency_hz: 4.94066e-324 Hz is below 1e-05 of this "
         "stage's 250 samples/s: its poles would sit closer to z = 1 than the coefficient "
         "words resolve",
         {G: sub("frequency_hz = 50.0", "frequency_hz = 5e-324")}),
    Case("span-tolerance-zero", ("check", S),
         "spec.toml:56: calibration.span_tolerance_pct: must be at least 0.01, got 0 (sets "
         "the span multiplier's format)",
         {S: sub("span_tolerance_pct = 10.0", "span_tolerance_pct = 0.0")}),
    Case("calblock-size-odd", ("check", S),
         "spec.toml:61: target.calblock_size: must be at most 4096, got 1000000 (a flash page "
         "holding the block)", {S: sub("calblock_size = 128", "calblock_size = 1000000")}),
    Case("temperature-reference-outside", ("check", S),
         "spec.toml:44: temperature.reference_c: must be at most 45, got 60",
         {S: sub("reference_c = 20.0", "reference_c = 60.0")}),
    # ------------------------------------------------------------------ spec: text
    Case("name-trailing-newline", ("check", S),
         "spec.toml:5: name: control character U+000A in 'hive_scale\\n'",
         {S: sub('name = "hive_scale"', 'name = "hive_scale\\n"')}),
    Case("name-capitals", ("check", S),
         "spec.toml:5: name: 'Hive' must be lower case letters, digits and _, starting with a "
         "letter, at most 40 characters (it prefixes C names)",
         {S: sub('name = "hive_scale"', 'name = "Hive"')}),
    Case("unit-trailing-newline", ("check", S),
         "spec.toml:11: sensor.unit: control character U+000A in 'kg\\n'",
         {S: sub('unit = "kg"', 'unit = "kg\\n"')}),
    Case("unit-space", ("check", S),
         "spec.toml:11: sensor.unit: 'k g' is not a short unit name (letters, digits, _ / % .)",
         {S: sub('unit = "kg"', 'unit = "k g"')}),
    Case("description-del", ("check", S),
         "spec.toml:6: description: control character U+007F in 'Beehive\\x7f'",
         {S: sub('description = "Beehive scale, 4 x 50 kg shear beams, 10 g steps"',
                 'description = "Beehive\\u007f"')}),
    Case("description-nel", ("check", S),
         "spec.toml:6: description: control character U+0085 in 'Beehive\\x85'",
         {S: sub('description = "Beehive scale, 4 x 50 kg shear beams, 10 g steps"',
                 'description = "Beehive\\u0085"')}),
    Case("description-line-separator", ("check", S),
         "spec.toml:6: description: control character U+2028 in 'Bee\\u2028hive'",
         {S: sub('description = "Beehive scale, 4 x 50 kg shear beams, 10 g steps"',
                 'description = "Bee\\u2028hive"')}),
    Case("description-tab", ("check", S),
         "spec.toml:6: description: control character U+0009 in 'Bee\\thive'",
         {S: sub('description = "Beehive scale, 4 x 50 kg shear beams, 10 g steps"',
                 'description = "Bee\\thive"')}),
    Case("kind-c1", ("check", S),
         "spec.toml:9: sensor.kind: control character U+009B in 'transducer\\x9b'",
         {S: sub('kind = "transducer"', 'kind = "transducer\\u009b"')}),
    Case("unknown-key-control", ("check", S),
         "spec.toml: sensor.'a\\x85b': unknown key",
         {S: sub('unit = "kg"', 'unit = "kg"\n"a\\u0085b" = 1')}),
    # ------------------------------------------------------------------ spec: structure
    Case("deep-nesting", ("check", S), "spec.toml: TOML nested too deeply",
         {S: HIVE_TEXT + "\nx = " + "[" * 5000 + "]" * 5000 + "\n"}),
    Case("not-utf8", ("check", S),
         "spec.toml: cannot read: UnicodeDecodeError: 'utf-8' codec can't decode byte 0xff "
         "in position 0: invalid start byte", {S: b"\xff\xfe"}),
    Case("syntax", ("check", S),
         "spec.toml:10: TOML syntax error: Expected newline or end of document after a "
         "statement", {S: sub("capacity = 200.0", "capacity = 200.0 kg")}),
    Case("spec-is-folder", ("check", "."),
         "check: Invalid value for 'SPEC': File '.' is a directory. (see hosttool check "
         "--help)"),
    Case("spec-missing", ("check", "nope.toml"), "nope.toml: no such file"),
    # ------------------------------------------------------------------ usage
    Case("unknown-command", ("calibrat",),
         "No such command 'calibrat'. Did you mean 'calibrate'? (see hosttool --help)"),
    Case("jobs-abc", ("batch", S, LOT, "--out", "lot", "--jobs", "abc"),
         "batch: Invalid value for '--jobs': 'abc' is not a valid integer range. (see hosttool "
         "batch --help)", absent=("lot",)),
    Case("jobs-zero", ("batch", S, LOT, "--out", "lot", "--jobs", "0"),
         "batch: Invalid value for '--jobs': 0 is not in the range 1<=x<=64. (see hosttool "
         "batch --help)", absent=("lot",)),
    Case("image-o-folder", ("image", S, CAL, "-o", "."),
         "image: Invalid value for '-o' / '--output': File '.' is a directory. (see hosttool "
         "image --help)"),
    Case("unknown-option", ("check", "--bogus", S),
         "check: No such option '--bogus'. (see hosttool check --help)"),
    Case("missing-argument", ("check",),
         "check: Missing argument 'SPEC'. (see hosttool check --help)"),
    Case("station-nel", ("batch", S, LOT, "--out", "lot", "--station", "bench\x852"),
         "--station: 'bench\\x852' must be a name without control characters",
         absent=("lot",)),
    Case("lot-line-separator", ("batch", S, LOT, "--out", "lot", "--lot", "A\u2028B"),
         "--lot: 'A\\u2028B' must be a name without control characters", absent=("lot",)),
    Case("operator-escape", ("batch", S, LOT, "--out", "lot", "--operator", "\x1b[31mX"),
         "--operator: '\\x1b[31mX' must be a name without control characters",
         absent=("lot",)),
    Case("register-id-newline", ("batch", S, LOT, "--out", "lot", "--register", "reg.toml"),
         "reg.toml: standard[0]: id: control character U+000A in 'M20-03\\n'",
         {"reg.toml": REGISTER.replace('"M20-03"', '"M20-03\\n"')}, absent=("lot",)),
    Case("register-certificate-del", ("batch", S, LOT, "--out", "lot", "--register",
                                      "reg.toml"),
         "reg.toml: standard[0]: certificate: control character U+007F in 'LAB\\x7f'",
         {"reg.toml": REGISTER.replace('"LAB-26-0412"', '"LAB\\u007f"')}, absent=("lot",)),
    Case("register-nominal-inf", ("batch", S, LOT, "--out", "lot", "--register", "reg.toml"),
         "reg.toml: standard[0]: nominal: expected a finite number",
         {"reg.toml": REGISTER.replace("nominal = 20.0", "nominal = inf")}, absent=("lot",)),
    Case("verify-samples-huge", ("verify", S, "--samples", "99999999999999999999999"),
         "--samples: 99999999999999999999999 is more than the 100000000 this tool runs (the "
         "codes and outputs of each test are held in memory)"),
    Case("verify-samples-few", ("verify", S, "--samples", "10"),
         "--samples: 10 is fewer than the 4096 samples the step and settling tests of this "
         "design need"),
    Case("verify-seed-negative", ("verify", S, "--seed", "-1"),
         "--seed: -1 is negative; give 0 or more"),
    Case("verify-engine", ("verify", S, "--engine", "fpga"),
         "--engine: 'fpga' is not one of python, c, both"),
    Case("cal-time-basic", ("calibrate", S, LOT, "--serial", "HV-0000", "-o", "x.json",
                            "--cal-time", "20250304T080000Z"),
         f"--cal-time: '20250304T080000Z' is not a UTC time of the form {TIME_FORMS}",
         absent=("x.json",)),
    Case("cal-time-offset", ("calibrate", S, LOT, "--serial", "HV-0000", "-o", "x.json",
                             "--cal-time", "2025-03-04T08:00:00+01:00"),
         f"--cal-time: '2025-03-04T08:00:00+01:00' is not a UTC time of the form {TIME_FORMS}",
         absent=("x.json",)),
    Case("cal-time-1969", ("calibrate", S, LOT, "--serial", "HV-0000", "-o", "x.json",
                           "--cal-time", "1969-12-31T23:59:59Z"),
         "--cal-time: -1 s since 1970 lies outside the times this tool accepts "
         "(1970-01-01T00:00:00Z .. 9999-12-31T23:59:59Z)", absent=("x.json",)),
    # ------------------------------------------------------------------ readings
    Case("time-space", ("calibrate", S, LOT, "--serial", "HV-0000", "-o", "x.json"),
         f"lot.csv:3: time_utc: '2025-03-04 08:00:00Z' is not a UTC time of the form "
         f"{TIME_FORMS}", {LOT: sub("2025-03-04T08:00:00Z", "2025-03-04 08:00:00Z")},
         absent=("x.json",)),
    Case("time-basic", ("calibrate", S, LOT, "--serial", "HV-0000", "-o", "x.json"),
         f"lot.csv:3: time_utc: '20250304T080000Z' is not a UTC time of the form {TIME_FORMS}",
         {LOT: sub("2025-03-04T08:00:00Z", "20250304T080000Z")}, absent=("x.json",)),
    Case("time-fraction", ("calibrate", S, LOT, "--serial", "HV-0000", "-o", "x.json"),
         f"lot.csv:3: time_utc: '2025-03-04T08:00:00.5Z' is not a UTC time of the form "
         f"{TIME_FORMS}", {LOT: sub("2025-03-04T08:00:00Z", "2025-03-04T08:00:00.5Z")},
         absent=("x.json",)),
    Case("time-year-0", ("calibrate", S, LOT, "--serial", "HV-0000", "-o", "x.json"),
         "lot.csv:3: time_utc: '0000-03-04T08:00:00Z' is not a valid time: year 0 is out of "
         "range", {LOT: sub("2025-03-04T08:00:00Z", "0000-03-04T08:00:00Z")},
         absent=("x.json",)),
    Case("time-feb-30", ("calibrate", S, LOT, "--serial", "HV-0000", "-o", "x.json"),
         "lot.csv:3: time_utc: '2025-02-30T08:00:00Z' is not a valid time: day is out of "
         "range for month", {LOT: sub("2025-03-04T08:00:00Z", "2025-02-30T08:00:00Z")},
         absent=("x.json",)),
    Case("time-leap-second", ("calibrate", S, LOT, "--serial", "HV-0000", "-o", "x.json"),
         "lot.csv:3: time_utc: '2016-12-31T23:59:60Z' is not a valid time: second must be in "
         "0..59", {LOT: sub("2025-03-04T08:00:00Z", "2016-12-31T23:59:60Z")},
         absent=("x.json",)),
    Case("samples-superscript", ("calibrate", S, LOT, "--serial", "HV-0000", "-o", "x.json"),
         "lot.csv:3: samples: '²' is not a whole number from 1 to 1000000000",
         {LOT: sub(",32,up,2025-03-04T08:00:00Z", ",²,up,2025-03-04T08:00:00Z")},
         absent=("x.json",)),
    Case("samples-1e30", ("calibrate", S, LOT, "--serial", "HV-0000", "-o", "x.json"),
         "lot.csv:3: samples: '1000000000000000000000000000000' is not a whole number from 1 "
         "to 1000000000", {LOT: sub(",32,up,2025-03-04T08:00:00Z",
                                    ",1" + "0" * 30 + ",up,2025-03-04T08:00:00Z")},
         absent=("x.json",)),
    Case("mean-fullwidth-digits", ("calibrate", S, LOT, "--serial", "HV-0000", "-o", "x.json"),
         "lot.csv:3: raw_mean_counts: '１０９８.358' is not a number (decimal notation, e.g. "
         "12.5 or 1.25e3)", {LOT: sub("1098.358", "１０９８.358")}, absent=("x.json",)),
    Case("mean-nan", ("calibrate", S, LOT, "--serial", "HV-0000", "-o", "x.json"),
         "lot.csv:3: raw_mean_counts: 'nan' is not a number (decimal notation, e.g. 12.5 or "
         "1.25e3)", {LOT: sub("1098.358", "nan")}, absent=("x.json",)),
    Case("mean-overflow", ("calibrate", S, LOT, "--serial", "HV-0000", "-o", "x.json"),
         "lot.csv:3: raw_mean_counts: '1e999' is not a finite number",
         {LOT: sub("1098.358", "1e999")}, absent=("x.json",)),
    Case("mean-outside-codes", ("calibrate", S, LOT, "--serial", "HV-0000", "-o", "x.json"),
         "lot.csv:3: raw_mean_counts: 9e+06 lies outside the code range -8388608 .. 8388607",
         {LOT: sub("1098.358", "9000000")}, absent=("x.json",)),
    Case("std-negative", ("calibrate", S, LOT, "--serial", "HV-0000", "-o", "x.json"),
         "lot.csv:3: raw_std_counts: -9.49 lies outside 0 .. 16777215 counts",
         {LOT: sub("9.490", "-9.490")}, absent=("x.json",)),
    Case("reference-outside", ("calibrate", S, LOT, "--serial", "HV-0000", "-o", "x.json"),
         "lot.csv:4: reference_kg: 500 lies outside the sensor range 0 .. 200",
         {LOT: sub("HV-0000,50,", "HV-0000,500,")}, absent=("x.json",)),
    Case("temperature-outside", ("calibrate", S, LOT, "--serial", "HV-0000", "-o", "x.json"),
         "lot.csv:3: temperature_c: 90 C lies outside the compensated range -20 .. 45 C "
         "(temperature.min_c, temperature.max_c)",
         {LOT: sub("HV-0000,0,20.06,", "HV-0000,0,90,")}, absent=("x.json",)),
    Case("direction-sideways", ("calibrate", S, LOT, "--serial", "HV-0000", "-o", "x.json"),
         "lot.csv:3: direction: 'sideways' is not 'up' or 'down'",
         {LOT: sub(",32,up,2025-03-04T08:00:00Z", ",32,sideways,2025-03-04T08:00:00Z")},
         absent=("x.json",)),
    Case("serial-trailing-space-inside", ("calibrate", S, LOT, "--serial", "HV-0000", "-o",
                                          "x.json"),
         "lot.csv:3: serial: 'HV 0000' must be 1 to 16 letters, digits, '.', '_' or '-', "
         "starting with a letter or digit", {LOT: sub("HV-0000,0,", "HV 0000,0,")},
         absent=("x.json",)),
    Case("serial-nel", ("calibrate", S, LOT, "--serial", "HV-0000", "-o", "x.json"),
         "lot.csv:3: serial: 'HV-0000\\x85' must be 1 to 16 letters, digits, '.', '_' or '-', "
         "starting with a letter or digit", {LOT: sub("HV-0000,0,", "HV-0000\x85,0,")},
         absent=("x.json",)),
    Case("row-too-short", ("calibrate", S, LOT, "--serial", "HV-0000", "-o", "x.json"),
         "lot.csv:3: 7 fields, the header has 8",
         {LOT: sub(",up,2025-03-04T08:00:00Z", ",2025-03-04T08:00:00Z")}, absent=("x.json",)),
    Case("header-unknown-column", ("calibrate", S, LOT, "--serial", "HV-0000", "-o", "x.json"),
         "lot.csv:2: raw_mean: unknown column (did you mean 'raw_mean_counts'?)",
         {LOT: sub("raw_mean_counts", "raw_mean")}, absent=("x.json",)),
    Case("header-other-unit", ("calibrate", S, LOT, "--serial", "HV-0000", "-o", "x.json"),
         "lot.csv:2: reference_lb: the spec's output unit is 'kg'; expected the column "
         "reference_kg", {LOT: sub("reference_kg", "reference_lb")}, absent=("x.json",)),
    Case("cell-beyond-csv-limit", ("calibrate", S, LOT, "--serial", "HV-0000", "-o",
                                   "x.json"),
         "lot.csv:3: not a CSV line: field larger than field limit (131072)",
         {LOT: sub("HV-0000,0,", '"' + "H" * 200_000 + '",0,')}, absent=("x.json",)),
    Case("readings-empty", ("calibrate", S, LOT, "--serial", "HV-0000", "-o", "x.json"),
         "lot.csv: no header and no readings", {LOT: "# nothing\n"}, absent=("x.json",)),
    Case("serial-not-in-file", ("calibrate", S, LOT, "--serial", "HV-9", "-o", "x.json"),
         "lot.csv: serial: no readings for 'HV-9' (the file has 2 serials: HV-0000, HV-0001)",
         absent=("x.json",)),
    Case("unit-slope-tiny", ("calibrate", S, LOT, "--serial", "HV-0000", "-o", "x.json"),
         "lot.csv:3: serial HV-0000: the fitted response over the range is 2e-298 counts, "
         "outside what the bridge can give (9.761, the ADC's noise, .. 16777215, the code "
         "range; nominal 2.147e+06): not a working unit or mislabelled readings",
         {LOT: lambda t: "\n".join(
             ",".join(c[:3] + [repr(1e-300 * (1 + float(c[1])))] + c[4:])
             if (c := ln.split(","))[0] == "HV-0000" else ln for ln in t.splitlines()) + "\n"},
         absent=("x.json",)),
    # ------------------------------------------------------------------ CAL.json
    Case("cal-constant-edited", ("image", S, CAL, "-o", "x.hex"),
         f"cal.json: content_sha256: does not match the file's content (edited since "
         f"calibrate wrote it?); {CAL_AGAIN}",
         {CAL: json_edit(lambda d: d["constants"].update(offset=d["constants"]["offset"]
                                                         + 1))},
         absent=("x.hex",)),
    Case("cal-hash-removed", ("render", S, "-o", "out", "--calibration", CAL),
         f"cal.json: content_sha256: missing: not written by this tool's calibrate, or "
         f"edited; {CAL_AGAIN}", {CAL: json_edit(lambda d: d.pop("content_sha256"))},
         absent=("out",)),
    Case("cal-serial-newline", ("verify", S, "--calibration", CAL),
         f"cal.json: content_sha256: does not match the file's content (edited since "
         f"calibrate wrote it?); {CAL_AGAIN}", {CAL: json_edit(
             lambda d: d.update(serial="HV-0000\n"))}),
    Case("cal-deep-nesting", ("image", S, CAL, "-o", "x.hex"),
         "cal.json: not a hosttool calibration file: nested too deeply",
         {CAL: "[" * 100000 + "]" * 100000}, absent=("x.hex",)),
    Case("cal-not-json", ("image", S, CAL, "-o", "x.hex"),
         "cal.json:1: not valid JSON: Expecting value", {CAL: "not json"}, absent=("x.hex",)),
    Case("cal-huge-integer", ("image", S, CAL, "-o", "x.hex"),
         "cal.json: not valid JSON: Exceeds the limit (4300 digits) for integer string "
         "conversion: value has 5000 digits; use sys.set_int_max_str_digits() to increase "
         "the limit", {CAL: '{"offset": ' + "9" * 5000 + "}"}, absent=("x.hex",)),
    Case("cal-not-object", ("image", S, CAL, "-o", "x.hex"),
         "cal.json: format: not a hosttool calibration file", {CAL: "[1, 2]"},
         absent=("x.hex",)),
    Case("cal-other-spec", ("image", G, CAL, "-o", "x.hex"),
         "cal.json: identity: made for spec 'hive_scale', another design", absent=("x.hex",)),
    # ------------------------------------------------------------------ images
    Case("bin-200-bytes", ("inspect", S, "unit.bin"),
         "unit.bin: 200 bytes; a .bin image is the block's whole area, 128 bytes "
         "(target.calblock_size), or a flash readback: give its start address with "
         "--base", {"unit.bin": "x" * 200}),
    Case("bin-short", ("inspect", S, "unit.bin"),
         "unit.bin: 3 bytes; a .bin image is the block's whole area, 128 bytes "
         "(target.calblock_size), or a flash readback: give its start address with "
         "--base", {"unit.bin": "abc"}),
    Case("hex-garbage", ("inspect", S, "unit.hex"),
         "unit.hex: not a valid Intel HEX file: Hex file contains invalid record at line 1",
         {"unit.hex": "hello\n"}),
    Case("hex-missing", ("inspect", S, "none.hex"), "none.hex: no such file"),
]


def _write(folder: Path, good: dict[str, bytes], edits: dict[str, Content]) -> None:
    for name, data in good.items():
        (folder / name).write_bytes(data)
    for name, edit in edits.items():
        if isinstance(edit, bytes):
            (folder / name).write_bytes(edit)
        elif isinstance(edit, str):
            (folder / name).write_text(edit, encoding="utf-8")
        else:
            (folder / name).write_text(edit((folder / name).read_text(encoding="utf-8")),
                                       encoding="utf-8")


@pytest.mark.parametrize("case", CASES, ids=[c.id for c in CASES])
def test_bad_input_is_one_line(case: Case, good: dict[str, bytes], tmp_path: Path,
                               monkeypatch: pytest.MonkeyPatch) -> None:
    _write(tmp_path, good, case.edits)
    monkeypatch.chdir(tmp_path)
    before = sorted(p.name for p in tmp_path.iterdir())
    done = CliRunner().invoke(main, list(case.argv), prog_name="hosttool")
    assert done.exception is None or isinstance(done.exception, SystemExit), done.exc_info
    assert done.exit_code == case.code, done.output
    assert done.stderr.startswith("hosttool: error: ") and done.stderr.count("\n") == 1, \
        done.stderr
    got = done.stderr[len("hosttool: error: "):-1]
    assert got == case.message or (case.id == "cal-other-spec" and got.startswith(
        case.message)), got
    assert "Traceback" not in done.output
    for name in case.absent:
        assert not (tmp_path / name).exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == before   # nothing written


def test_corpus_covers_every_command_and_60_cases() -> None:
    commands = {c.argv[0] for c in CASES if not c.argv[0].startswith("-")}
    assert len(CASES) >= 60
    assert {"check", "design", "render", "verify", "calibrate", "image", "inspect",
            "batch"} <= commands


def test_batch_bad_file_leaves_nothing(good: dict[str, bytes], tmp_path: Path,
                                       monkeypatch: pytest.MonkeyPatch) -> None:
    """A readings file that cannot be read as readings leaves no record, lock or image."""
    _write(tmp_path, good, {LOT: sub("HV-0000,0,", "HV 0000,0,")})
    (tmp_path / "out").mkdir()
    monkeypatch.chdir(tmp_path)
    done = CliRunner().invoke(main, ["batch", S, LOT, "--out", "out"])
    assert done.exit_code == 2
    assert done.stderr == ("hosttool: error: lot.csv:3: serial: 'HV 0000' must be 1 to 16 "
                           "letters, digits, '.', '_' or '-', starting with a letter or "
                           "digit\n")
    assert list((tmp_path / "out").iterdir()) == []


def test_record_lacking_a_column_is_one_line(good: dict[str, bytes], tmp_path: Path,
                                             monkeypatch: pytest.MonkeyPatch) -> None:
    """Source: sqlite3 (standard library) makes the record without hex_sha256."""
    import sqlite3

    from hosttool.production.record import COLUMNS, SCHEMA_VERSION

    _write(tmp_path, good, {})
    (tmp_path / "out").mkdir()
    db = sqlite3.connect(tmp_path / "old.sqlite")
    db.execute("CREATE TABLE calibrations (id INTEGER PRIMARY KEY, serial TEXT, revision "
               "INTEGER, current INTEGER, station TEXT, recorded_utc TEXT, cal_time_utc TEXT, "
               "spec_name TEXT, spec_sha256 TEXT, readings_file TEXT, readings_sha256 TEXT, "
               "constants TEXT, figures TEXT, verdict TEXT, reasons TEXT, hex_file TEXT)")
    db.commit()
    db.close()
    monkeypatch.chdir(tmp_path)
    done = CliRunner().invoke(main, ["batch", S, LOT, "--out", "out", "--db", "old.sqlite"])
    assert done.exit_code == 2
    made = ("id", "serial", "revision", "current", "station", "recorded_utc", "cal_time_utc",
            "spec_name", "spec_sha256", "readings_file", "readings_sha256", "constants",
            "figures", "verdict", "reasons", "hex_file")
    lacking = next(c for c in COLUMNS if c not in made)
    assert done.stderr == (f"hosttool: error: old.sqlite: calibrations.{lacking}: no such "
                           f"column: not a production record of schema {SCHEMA_VERSION}\n")
    assert not any(p.suffix == ".hex" for p in (tmp_path / "out").iterdir())


def test_usage_help_is_unchanged() -> None:
    """--help stays click's own page (several lines, exit 0)."""
    done = CliRunner().invoke(main, ["check", "--help"], prog_name="hosttool")
    assert done.exit_code == 0 and done.stdout.startswith("Usage: hosttool check [OPTIONS] SPEC")


def test_bare_command_still_shows_its_help() -> None:
    """``hosttool`` and ``hosttool record`` without a command print click's help page."""
    for argv in ([], ["record"]):
        done = CliRunner().invoke(main, argv, prog_name="hosttool")
        assert done.output.startswith("Usage: hosttool"), done.output
        assert "Commands:" in done.output and "hosttool: error" not in done.output


def test_python_dash_m_usage_error_is_one_line(tmp_path: Path) -> None:
    """The real process: click's own usage errors become one line and exit 2."""
    import subprocess
    import sys

    done = subprocess.run([sys.executable, "-m", "hosttool", "batch", "x.toml", "y.csv",
                           "--out", str(tmp_path), "--jobs", "abc"], capture_output=True,
                          text=True, timeout=120, check=False)
    assert done.returncode == 2 and done.stdout == ""
    assert done.stderr == ("hosttool: error: batch: Invalid value for '--jobs': 'abc' is not "
                           "a valid integer range. (see hosttool batch --help)\n")


def test_edited_verdict_is_refused_by_every_reader(good: dict[str, bytes], tmp_path: Path,
                                                   monkeypatch: pytest.MonkeyPatch) -> None:
    """A failed unit's CAL.json with its verdict set to "pass" goes nowhere."""
    edit = json_edit(lambda d: d.update(verdict="pass" if d["verdict"] == "fail" else "fail"))
    _write(tmp_path, good, {CAL: edit})
    monkeypatch.chdir(tmp_path)
    for argv in (["image", S, CAL, "-o", "x.hex"],
                 ["render", S, "-o", "out", "--calibration", CAL],
                 ["verify", S, "--calibration", CAL]):
        done = CliRunner().invoke(main, argv)
        assert done.exit_code == 2
        assert done.stderr == ("hosttool: error: cal.json: content_sha256: does not match "
                               "the file's content (edited since calibrate wrote it?); "
                               f"{CAL_AGAIN}\n")
    assert not (tmp_path / "x.hex").exists() and not (tmp_path / "out").exists()
    shutil.rmtree(tmp_path, ignore_errors=True)


@pytest.mark.slow
def test_postgres_record_lacking_a_column_is_one_line(good: dict[str, bytes], tmp_path: Path,
                                                      monkeypatch: pytest.MonkeyPatch,
                                                      postgres_uri: str) -> None:
    """Source: a table made with psycopg on the suite's real PostgreSQL server."""
    import psycopg

    from hosttool.production.record import COLUMNS, SCHEMA_VERSION

    with psycopg.connect(postgres_uri, autocommit=True) as db:
        db.execute("CREATE TABLE calibrations (id BIGINT PRIMARY KEY, serial TEXT)")
    _write(tmp_path, good, {})
    monkeypatch.chdir(tmp_path)
    done = CliRunner().invoke(main, ["batch", S, LOT, "--out", "out", "--db", postgres_uri])
    assert done.exit_code == 2, done.output
    lacking = next(c for c in COLUMNS if c != "serial")
    assert done.stderr.startswith("hosttool: error: ") and done.stderr.count("\n") == 1
    assert done.stderr.endswith(f": calibrations.{lacking}: no such column: not a production "
                                f"record of schema {SCHEMA_VERSION}\n"), done.stderr
    assert not any(p.suffix == ".hex" for p in (tmp_path / "out").iterdir())
