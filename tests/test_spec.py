"""Spec reader: defaults, the canonical hash, and where errors point (field path and line)."""

from __future__ import annotations

import hashlib
import json
import tomllib

import pytest

from hosttool.errors import SpecError
from hosttool.spec.schema import DEFAULT_PGA_GAINS, load_spec, parse_spec
from hosttool.util.resources import example_names, example_text

MINIMAL_GAUGE = """\
schema = 1
name = "coupon"

[sensor]
kind = "strain_bridge"
topology = "quarter"
gauge_factor = 2.0
gauge_resistance_ohm = 350.0
strain_range_ue = 3000.0

[excitation]
voltage_v = 2.5

[adc]
data_rate_sps = 100.0
noise_uv_rms = 0.1

[output]
resolution = 1.0
"""

MINIMAL_CELL = """\
schema = 1
name = "cell"

[sensor]
kind = "transducer"
capacity = 50.0
unit = "kg"
rated_output_mv_per_v = 2.0

[excitation]
voltage_v = 5.0

[adc]
data_rate_sps = 10
noise_uv_rms = 0.05

[output]
resolution = 0.01
"""


def error_of(text: str) -> SpecError:
    with pytest.raises(SpecError) as info:
        parse_spec(text, "s.toml")
    return info.value


def test_defaults_of_a_minimal_strain_bridge():
    spec = parse_spec(MINIMAL_GAUGE, "s.toml")
    s = spec.sensor
    assert s.kind == "strain_bridge" and s.unit == "ue"
    assert s.wiring == "three_wire"              # quarter: two_wire or three_wire (default)
    assert s.poisson_ratio == 0.3 and s.lead_resistance_ohm == 0.0
    assert s.zero_balance_mv_per_v == 0.0
    assert spec.excitation.ratiometric and spec.excitation.reference_v == 2.5
    a = spec.adc
    assert (a.bits, a.pga_gain, a.pga_gains, a.sinc_order) == (24, None, DEFAULT_PGA_GAINS, 3)
    assert a.reference_max_v == 5.0 and a.overload_margin_pct == 10.0
    assert a.modulator_rate_hz is None
    assert spec.output.bandwidth_hz is None
    assert spec.filter.stages == () and spec.filter.coefficient_bits == 32
    assert spec.linearisation.mode == "none"
    assert spec.temperature is None and spec.calibration is None and spec.target is None
    assert spec.source == "s.toml"


def test_defaults_of_a_minimal_transducer():
    s = parse_spec(MINIMAL_CELL, "c.toml").sensor
    assert s.kind == "transducer"
    assert (s.cells_in_parallel, s.cell_resistance_ohm, s.bipolar) == (1, 350.0, False)
    assert s.full_scale == 50.0 and s.bridge_resistance_ohm == 350.0


@pytest.mark.parametrize("topology, default", [("quarter", "three_wire"),
                                               ("half_opposing", "three_wire"),
                                               ("half_poisson", "three_wire"),
                                               ("full_bending", "six_wire"),
                                               ("full_poisson", "six_wire")])
def test_default_wiring_by_topology(topology, default):
    text = MINIMAL_GAUGE.replace('"quarter"', f'"{topology}"')
    assert parse_spec(text).sensor.wiring == default


def test_filter_stage_rates_follow_decimation():
    text = MINIMAL_GAUGE + """
[filter]
stages = [
  { kind = "fir_lowpass", cutoff_hz = 10.0, transition_hz = 4.0, decimation = 4 },
  { kind = "notch", frequency_hz = 5.0 },
  { kind = "moving_average", length = 3 },
]
"""
    stages = parse_spec(text).filter.stages
    assert [s.sample_rate_hz for s in stages] == [100.0, 25.0, 25.0]
    assert stages[0].attenuation_db == 60.0 and stages[1].quality == 5.0


def test_bundled_examples_load_and_hash_is_sha256_of_canonical_json():
    assert set(example_names()) >= {"hive_scale", "fatigue_coupon"}
    for name in example_names():
        spec = parse_spec(example_text(name), f"{name}.toml")
        assert spec.name == name
        # hashlib over the canonical JSON, recomputed from the canonical data with json
        canonical = json.dumps(spec.canonical(), sort_keys=True, separators=(",", ":"))
        assert spec.sha256 == hashlib.sha256(canonical.encode()).hexdigest()


def test_hash_ignores_comments_order_and_integer_spelling_but_not_values():
    base = parse_spec(MINIMAL_CELL)
    data = tomllib.loads(MINIMAL_CELL)
    reordered = "\n".join([
        "# a comment", 'name = "cell"', "schema = 1",
        "[output]", "resolution = 0.01",
        "[adc]", "noise_uv_rms = 0.05  # uV", "data_rate_sps = 10.0",
        "[excitation]", "voltage_v = 5",
        "[sensor]", 'unit = "kg"', "rated_output_mv_per_v = 2.0", "capacity = 50.0",
        'kind = "transducer"', "cells_in_parallel = 1", ""])
    assert tomllib.loads(reordered)["sensor"]["capacity"] == data["sensor"]["capacity"]
    assert parse_spec(reordered).sha256 == base.sha256
    # writing out a default changes nothing; changing a value changes the hash
    assert parse_spec(MINIMAL_CELL.replace("[adc]", "[adc]\nbits = 24")).sha256 == base.sha256
    assert parse_spec(MINIMAL_CELL.replace("capacity = 50.0", "capacity = 50.5")).sha256 \
        != base.sha256
    # the source path is not part of the identity
    assert parse_spec(MINIMAL_CELL, "elsewhere.toml").sha256 == base.sha256


def test_load_spec_reads_a_file(tmp_path):
    path = tmp_path / "cell.toml"
    path.write_text(MINIMAL_CELL, encoding="utf-8")
    assert load_spec(path).source == str(path)
    with pytest.raises(SpecError, match=r"missing\.toml: no such file$"):
        load_spec(tmp_path / "missing.toml")


# --------------------------------------------------------------------------- error location


def line_of(text: str, needle: str) -> int:
    """1-based number of the first line containing needle."""
    return next(i for i, ln in enumerate(text.splitlines(), 1) if needle in ln)


def test_syntax_error_has_file_and_line():
    text = MINIMAL_GAUGE.replace("voltage_v = 2.5", "voltage_v = 2.5 V")
    err = error_of(text)
    assert err.line == line_of(text, "voltage_v = 2.5 V")
    assert str(err).startswith(f"s.toml:{err.line}: TOML syntax error: ")


@pytest.mark.parametrize("old, new, field, needle, reason", [
    ("gauge_factor = 2.0", "gauge_factor = 0", "sensor.gauge_factor", "gauge_factor",
     "must be at least 0.5, got 0 (metal foil and wire gauges lie near 2)"),
    ("gauge_resistance_ohm = 350.0", "gauge_resistance_ohm = -1", "sensor.gauge_resistance_ohm",
     "gauge_resistance_ohm",
     "must be at least 10, got -1 (gauges are made from 60 ohm to 10 kohm)"),
    ("strain_range_ue = 3000.0", 'strain_range_ue = "3000"', "sensor.strain_range_ue",
     "strain_range_ue", "expected a number, got a string ('3000')"),
    ("noise_uv_rms = 0.1", "noise_uv_rms = 0.1\nsinc_order = 2.5", "adc.sinc_order",
     "sinc_order", "expected an integer, got a number (2.5)"),
    ('topology = "quarter"', 'topology = "quarter"\nwiring = "four_wire"', "sensor.wiring",
     "wiring", "'four_wire' is not one of two_wire, three_wire (did you mean 'two_wire'?)"),
    ("noise_uv_rms = 0.1", "noise_uv_rms = 0.1\nnoise_uv_rsm = 0.2", "adc.noise_uv_rsm",
     "noise_uv_rsm", "unknown key (did you mean 'noise_uv_rms'?)"),
])
def test_field_errors_name_the_path_and_line(old, new, field, needle, reason):
    text = MINIMAL_GAUGE.replace(old, new)
    err = error_of(text)
    assert (err.field, err.reason, err.line) == (field, reason, line_of(text, needle))
    assert str(err) == f"s.toml:{err.line}: {field}: {reason}"


def test_missing_key_points_at_its_table_and_suggests_a_misspelling():
    text = MINIMAL_GAUGE.replace("gauge_factor = 2.0", "guage_factor = 2.0")
    err = error_of(text)
    assert err.field == "sensor.gauge_factor"
    assert err.line == line_of(text, "[sensor]")
    assert err.reason == "missing required key (is 'guage_factor' a misspelling of it?)"


def test_missing_table_and_unknown_table():
    err = error_of(MINIMAL_GAUGE.replace("[output]\nresolution = 1.0\n", ""))
    assert str(err) == "s.toml: output: missing required key"
    text = MINIMAL_GAUGE + "\n[ouput]\nresolution = 2.0\n"
    err = error_of(text)
    assert (err.field, err.line) == ("ouput", line_of(text, "[ouput]"))
    assert err.reason == "unknown key (did you mean 'output'?)"


def test_errors_inside_an_array_of_tables_point_at_the_item():
    text = MINIMAL_GAUGE + """
[[filter.stages]]
kind = "moving_average"
length = 4

[[filter.stages]]
kind = "butterworth_lowpass"
order = 3
cutoff_hz = 5.0
"""
    err = error_of(text)
    assert err.field == "filter.stages[1].order"
    assert err.line == line_of(text, "order = 3")
    assert err.reason == "must be one of 2, 4, 6, got 3"


def test_errors_inside_inline_stages_point_at_the_item():
    text = MINIMAL_GAUGE + """
[filter]
stages = [
  { kind = "moving_average", length = 4 },
  { kind = "butterworth_lowpass", order = 2, cutoff_hz = 50.0 },
]
"""
    err = error_of(text)
    assert err.field == "filter.stages[1].cutoff_hz"
    assert err.line == line_of(text, "cutoff_hz = 50.0")
    assert err.reason == ("50 Hz is at or above the Nyquist frequency 50 Hz of this stage's "
                          "100 samples/s")


@pytest.mark.parametrize("section, field, reason", [
    ("[linearisation]\nmode = \"bridge_inverse\"\n", "linearisation.mode",
     "bridge_inverse needs a strain_bridge sensor; use \"polynomial\" for a transducer's "
     "measured nonlinearity"),
    ("[calibration]\npoints = [0.0, 60.0]\n", "calibration.points",
     "60 lies outside the range 0 .. 50 kg"),
    ("[calibration]\npoints = [10.0, 10.0]\n", "calibration.points",
     "needs at least two distinct reference values"),
    ("[target]\ncalblock_address = 0x1002\n", "target.calblock_address",
     "0x00001002 is not 4-byte aligned"),
    ("[temperature]\nmin_c = 30.0\nmax_c = 60.0\n", "temperature.reference_c",
     "must be at least 30, got 20"),
])
def test_optional_sections_are_validated(section, field, reason):
    err = error_of(MINIMAL_CELL + "\n" + section)
    assert (err.field, err.reason) == (field, reason)
