"""The bridge specification: a TOML file validated into frozen dataclasses.

Every physical key carries its unit in its name (``voltage_v``, ``cutoff_hz``,
``gauge_resistance_ohm``); output-unit quantities (``capacity``, ``resolution``,
``max_error``) are in the sensor's output unit (``sensor.unit``; microstrain, ``ue``, for a
strain-gauge bridge). ``load_spec`` is the one entry point; every error it raises is a
``SpecError`` naming the file, the line where it could be found, and the field path.
"""

from __future__ import annotations

import dataclasses
import functools
import hashlib
import json
import re
import tomllib
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from hosttool.errors import SpecError
from hosttool.spec.tomlfields import Context, Table, describe

SCHEMA_VERSION = 1

TOPOLOGIES = ("quarter", "half_opposing", "half_poisson", "full_bending", "full_poisson")
WIRING_BY_TOPOLOGY = {
    "quarter": ("two_wire", "three_wire"),
    "half_opposing": ("three_wire",),
    "half_poisson": ("three_wire",),
    "full_bending": ("four_wire", "six_wire"),
    "full_poisson": ("four_wire", "six_wire"),
}
DEFAULT_PGA_GAINS = (1, 2, 4, 8, 16, 32, 64, 128)
FILTER_KINDS = ("moving_average", "fir_lowpass", "butterworth_lowpass", "notch")
BUTTERWORTH_ORDERS = (2, 4, 6)
LINEARISATION_MODES = ("none", "bridge_inverse", "polynomial")
OIML_CLASSES = ("I", "II", "III", "IIII")

_NAME_RE = re.compile(r"[a-z][a-z0-9_]{0,39}")       # full match: a C identifier prefix
_UNIT_RE = re.compile(r"[A-Za-z][A-Za-z0-9_/%.]{0,15}")  # full match: a short unit name
#: Largest PGA gain accepted (converters offer up to 128; our margin).
MAX_PGA_GAIN = 1024
#: Lowest filter frequency (cutoff, notch) as a share of its stage's sample rate.
MIN_RELATIVE_FREQUENCY = 1e-5


# --------------------------------------------------------------------------- dataclasses


@dataclass(frozen=True)
class StrainBridge:
    """Bonded foil gauges in a Wheatstone bridge; output in microstrain (``ue``)."""

    topology: str
    gauge_factor: float
    gauge_resistance_ohm: float
    poisson_ratio: float
    wiring: str
    lead_resistance_ohm: float
    strain_range_ue: float
    zero_balance_mv_per_v: float
    kind: str = "strain_bridge"
    unit: str = "ue"

    @property
    def full_scale(self) -> float:
        """Full-scale magnitude in output units (microstrain); the range is +-full_scale."""
        return self.strain_range_ue

    @property
    def bipolar(self) -> bool:
        """A strain bridge measures tension and compression."""
        return True

    @property
    def bridge_resistance_ohm(self) -> float:
        """Resistance seen by the excitation source, ohms (all arms equal to the gauge)."""
        return self.gauge_resistance_ohm


@dataclass(frozen=True)
class Transducer:
    """A sensor rated in mV/V at capacity: load cell, force or pressure transducer."""

    capacity: float
    unit: str
    rated_output_mv_per_v: float
    zero_balance_mv_per_v: float
    cells_in_parallel: int
    cell_resistance_ohm: float
    bipolar: bool
    nonlinearity_pct_fs: float
    kind: str = "transducer"

    @property
    def full_scale(self) -> float:
        """Full-scale magnitude in output units (the total capacity of all cells)."""
        return self.capacity

    @property
    def bridge_resistance_ohm(self) -> float:
        """Resistance seen by the excitation source, ohms (cells in parallel)."""
        return self.cell_resistance_ohm / self.cells_in_parallel


Sensor = StrainBridge | Transducer


@dataclass(frozen=True)
class Excitation:
    """Bridge excitation; ``reference_v`` is the ADC reference (equal to it when ratiometric)."""

    voltage_v: float
    ratiometric: bool
    reference_v: float


@dataclass(frozen=True)
class Adc:
    """A delta-sigma ADC with a programmable-gain amplifier."""

    bits: int
    pga_gain: int | None  # None: "auto", chosen by the budget
    pga_gains: tuple[int, ...]
    reference_max_v: float
    data_rate_sps: float
    noise_uv_rms: float
    sinc_order: int
    modulator_rate_hz: float | None
    overload_margin_pct: float


@dataclass(frozen=True)
class Output:
    """What one output LSB means and which band the signal occupies."""

    resolution: float
    bandwidth_hz: float | None


@dataclass(frozen=True)
class FilterStage:
    """One filter of the cascade; fields not used by its kind are None."""

    kind: str
    sample_rate_hz: float  # the rate this stage runs at (after earlier decimation)
    length: int | None = None
    cutoff_hz: float | None = None
    transition_hz: float | None = None
    attenuation_db: float | None = None
    decimation: int = 1
    order: int | None = None
    frequency_hz: float | None = None
    quality: float | None = None


@dataclass(frozen=True)
class FilterChain:
    """The filter cascade, in order, and the coefficient word width in bits."""

    stages: tuple[FilterStage, ...]
    coefficient_bits: int


@dataclass(frozen=True)
class Linearisation:
    """Polynomial correction after scaling: the bridge's exact inverse or a per-unit fit."""

    mode: str
    order: int


@dataclass(frozen=True)
class Temperature:
    """Temperature compensation; the firmware's temperature input is in 0.01 C steps."""

    reference_c: float
    min_c: float
    max_c: float
    zero_tc_ppm_fs_per_c: float
    span_tc_ppm_per_c: float
    max_zero_tc_ppm_fs_per_c: float | None
    max_span_tc_ppm_per_c: float | None


@dataclass(frozen=True)
class Calibration:
    """Reference points of the production calibration and the limits each unit must meet."""

    points: tuple[float, ...]
    max_error: float | None
    max_error_pct_span: float | None
    oiml_class: str | None
    max_zero_offset_mv_per_v: float | None
    span_tolerance_pct: float
    max_noise_ratio: float
    max_hysteresis: float | None
    max_repeatability: float | None


@dataclass(frozen=True)
class Target:
    """Where the per-unit calibration block lives in the microcontroller's flash."""

    calblock_address: int
    calblock_size: int


@dataclass(frozen=True)
class Spec:
    """A validated bridge specification."""

    schema: int
    name: str
    description: str
    sensor: Sensor
    excitation: Excitation
    adc: Adc
    output: Output
    filter: FilterChain
    linearisation: Linearisation
    temperature: Temperature | None
    calibration: Calibration | None
    target: Target | None
    source: str = field(default="<memory>", compare=False)

    def canonical(self) -> dict[str, Any]:
        """The validated spec as plain data, without its source path."""
        data = dataclasses.asdict(self)
        del data["source"]
        data["sensor"]["kind"] = self.sensor.kind
        return data

    def canonical_json(self) -> str:
        """Canonical JSON: sorted keys, no spaces, floats as repr; comments and order vanish."""
        return json.dumps(self.canonical(), sort_keys=True, separators=(",", ":"))

    @functools.cached_property
    def sha256(self) -> str:
        """SHA-256 (hex) of the canonical form: the spec hash of headers and calibration blocks.

        Computed once per Spec (the spec is frozen, so it cannot change afterwards).
        """
        return hashlib.sha256(self.canonical_json().encode("utf-8")).hexdigest()


# --------------------------------------------------------------------------- sections


def _read_sensor(t: Table) -> Sensor:
    kind = t.req_string("kind", choices=("strain_bridge", "transducer"))
    zero_balance = t.number("zero_balance_mv_per_v", 0.0)
    assert zero_balance is not None
    if kind == "strain_bridge":
        topology = t.req_string("topology", choices=TOPOLOGIES)
        wirings = WIRING_BY_TOPOLOGY[topology]
        wiring = t.string("wiring", wirings[-1], choices=wirings)
        unit = t.string("unit", "ue", choices=("ue",))
        del unit
        sensor: Sensor = StrainBridge(
            topology=topology,
            gauge_factor=t.req_number("gauge_factor"),
            gauge_resistance_ohm=t.req_number("gauge_resistance_ohm"),
            poisson_ratio=t.number("poisson_ratio", 0.3) or 0.3,
            wiring=wiring or wirings[-1],
            lead_resistance_ohm=t.number("lead_resistance_ohm", 0.0) or 0.0,
            strain_range_ue=t.req_number("strain_range_ue"),
            zero_balance_mv_per_v=zero_balance,
        )
    else:
        sensor = Transducer(
            capacity=t.req_number("capacity"),
            unit=t.req_string("unit"),
            rated_output_mv_per_v=t.req_number("rated_output_mv_per_v"),
            zero_balance_mv_per_v=zero_balance,
            cells_in_parallel=t.integer("cells_in_parallel", 1) or 1,
            cell_resistance_ohm=t.number("cell_resistance_ohm", 350.0) or 350.0,
            bipolar=t.boolean("bipolar", False),
            nonlinearity_pct_fs=t.number("nonlinearity_pct_fs", 0.0) or 0.0,
        )
        if not _UNIT_RE.fullmatch(sensor.unit):
            raise t.fail("unit", f"{sensor.unit!r} is not a short unit name (letters, digits, "
                                 "_ / % .)")
    t.finish()
    return sensor


def _read_excitation(t: Table, adc_table: Table) -> Excitation:
    voltage = t.req_number("voltage_v")
    ratiometric = t.boolean("ratiometric", True)
    reference_max = adc_table.number("reference_max_v", 5.0)
    assert reference_max is not None
    if ratiometric:
        if t.has("reference_v"):
            raise t.fail("reference_v", "a ratiometric ADC takes its reference from the "
                                        "excitation; remove reference_v or set ratiometric = "
                                        "false")
        if voltage > reference_max:
            raise t.fail("voltage_v", f"{voltage:g} V exceeds the ADC's maximum reference "
                                      f"adc.reference_max_v = {reference_max:g} V, which a "
                                      "ratiometric reference must respect")
        reference = voltage
    else:
        reference = t.req_number("reference_v")
        if reference > reference_max:
            raise t.fail("reference_v", f"{reference:g} V exceeds adc.reference_max_v = "
                                        f"{reference_max:g} V")
    t.finish()
    return Excitation(voltage_v=voltage, ratiometric=ratiometric, reference_v=reference)


def _read_adc(t: Table) -> Adc:
    bits = t.integer("bits", 24) or 24
    gains_raw = t.array("pga_gains")
    if gains_raw is None:
        gains = DEFAULT_PGA_GAINS
    else:
        if not gains_raw or any(isinstance(g, bool) or not isinstance(g, int)
                                or not 1 <= g <= MAX_PGA_GAIN for g in gains_raw):
            raise t.fail("pga_gains", "expected a non-empty array of integers from 1 to "
                                      f"{MAX_PGA_GAIN}")
        gains = tuple(sorted(set(gains_raw)))
    gain_value = t._raw("pga_gain", "auto", False)
    if gain_value == "auto":
        gain = None
    elif isinstance(gain_value, bool) or not isinstance(gain_value, int):
        raise t.fail("pga_gain", f"expected an integer or \"auto\", got {describe(gain_value)}")
    elif gain_value not in gains:
        raise t.fail("pga_gain", f"{gain_value} is not in the ADC's gain set "
                                 f"{', '.join(map(str, gains))}")
    else:
        gain = gain_value
    data_rate = t.req_number("data_rate_sps")
    modulator = t.number("modulator_rate_hz", None, minimum=data_rate)
    adc = Adc(
        bits=bits,
        pga_gain=gain,
        pga_gains=gains,
        reference_max_v=t.number("reference_max_v", 5.0) or 5.0,
        data_rate_sps=data_rate,
        noise_uv_rms=t.req_number("noise_uv_rms"),
        sinc_order=t.integer("sinc_order", 3) or 3,
        modulator_rate_hz=modulator,
        overload_margin_pct=t.number("overload_margin_pct", 10.0) or 0.0,
    )
    t.finish()
    return adc


def _read_output(t: Table, sensor: Sensor, data_rate: float) -> Output:
    resolution = t.req_number("resolution")
    if resolution > sensor.full_scale:
        raise t.fail("resolution", f"{resolution:g} is coarser than the whole range "
                                   f"({sensor.full_scale:g} {sensor.unit})")
    bandwidth = t.number("bandwidth_hz", None, maximum=data_rate / 2)
    t.finish()
    return Output(resolution=resolution, bandwidth_hz=bandwidth)


def _read_stage(t: Table, rate: float) -> FilterStage:
    kind = t.req_string("kind", choices=FILTER_KINDS)
    nyquist = rate / 2

    def below_nyquist(key: str, **kw: Any) -> float:
        value = t.req_number(key, **kw)
        if value < rate * MIN_RELATIVE_FREQUENCY:
            raise t.fail(key, f"{value:g} Hz is below {MIN_RELATIVE_FREQUENCY:g} of this "
                              f"stage's {rate:g} samples/s: its poles would sit closer to "
                              "z = 1 than the coefficient words resolve")
        if value >= nyquist:
            raise t.fail(key, f"{value:g} Hz is at or above the Nyquist frequency "
                              f"{nyquist:g} Hz of this stage's {rate:g} samples/s")
        return value

    if kind == "moving_average":
        stage = FilterStage(kind, rate, length=t.req_integer("length"))
    elif kind == "fir_lowpass":
        cutoff = below_nyquist("cutoff_hz")
        transition = t.req_number("transition_hz")
        if cutoff + transition / 2 >= nyquist:
            raise t.fail("transition_hz", f"cutoff {cutoff:g} Hz plus half the transition "
                                          f"{transition:g} Hz reaches Nyquist ({nyquist:g} Hz)")
        decimation = t.integer("decimation", 1) or 1
        if cutoff + transition / 2 > rate / (2 * decimation):
            raise t.fail("decimation", f"{decimation} would alias: the stopband edge "
                                       f"{cutoff + transition / 2:g} Hz is above the new "
                                       f"Nyquist {rate / (2 * decimation):g} Hz")
        stage = FilterStage(kind, rate, cutoff_hz=cutoff, transition_hz=transition,
                            attenuation_db=t.number("attenuation_db", 60.0),
                            decimation=decimation)
    elif kind == "butterworth_lowpass":
        stage = FilterStage(kind, rate, order=t.req_integer("order", choices=BUTTERWORTH_ORDERS),
                            cutoff_hz=below_nyquist("cutoff_hz"))
    else:
        stage = FilterStage(kind, rate, frequency_hz=below_nyquist("frequency_hz"),
                            quality=t.number("quality", 5.0))
    t.finish()
    return stage


def _read_filter(t: Table | None, data_rate: float) -> FilterChain:
    if t is None:
        return FilterChain(stages=(), coefficient_bits=32)
    raw = t.array("stages") or []
    stages: list[FilterStage] = []
    rate = data_rate
    for i, item in enumerate(raw):
        if not isinstance(item, dict):
            raise t.fail(f"stages[{i}]", f"expected a table, got {describe(item)}")
        stage = _read_stage(Table(item, f"{t.path}.stages[{i}]", t.ctx), rate)
        stages.append(stage)
        rate /= stage.decimation
    bits = t.integer("coefficient_bits", 32, choices=(16, 32)) or 32
    t.finish()
    return FilterChain(stages=tuple(stages), coefficient_bits=bits)


def _read_linearisation(t: Table | None, sensor: Sensor) -> Linearisation:
    if t is None:
        return Linearisation(mode="none", order=1)
    mode = t.string("mode", "none", choices=LINEARISATION_MODES) or "none"
    order = t.integer("order", 3) or 3
    if mode == "bridge_inverse" and sensor.kind != "strain_bridge":
        raise t.fail("mode", "bridge_inverse needs a strain_bridge sensor; use \"polynomial\" "
                             "for a transducer's measured nonlinearity")
    if mode == "polynomial" and order < 2:
        raise t.fail("order", "a polynomial correction needs order 2 or more")
    t.finish()
    return Linearisation(mode=mode, order=order)


def _read_temperature(t: Table | None) -> Temperature | None:
    if t is None:
        return None
    low = t.req_number("min_c")
    high = t.req_number("max_c", minimum=low, exclusive_min=True)
    reference = t.number("reference_c", 20.0, minimum=low, maximum=high)
    assert reference is not None
    temperature = Temperature(
        reference_c=reference, min_c=low, max_c=high,
        zero_tc_ppm_fs_per_c=t.number("zero_tc_ppm_fs_per_c", 0.0) or 0.0,
        span_tc_ppm_per_c=t.number("span_tc_ppm_per_c", 0.0) or 0.0,
        max_zero_tc_ppm_fs_per_c=t.number("max_zero_tc_ppm_fs_per_c", None),
        max_span_tc_ppm_per_c=t.number("max_span_tc_ppm_per_c", None),
    )
    t.finish()
    return temperature


def _read_calibration(t: Table | None, sensor: Sensor) -> Calibration | None:
    if t is None:
        return None
    raw = t.array("points", required=True) or []
    if any(isinstance(p, bool) or not isinstance(p, (int, float)) for p in raw):
        raise t.fail("points", "expected an array of numbers (reference values in "
                               f"{sensor.unit})")
    points = tuple(float(p) for p in raw)
    if len(points) < 2 or len(set(points)) < 2:
        raise t.fail("points", "needs at least two distinct reference values")
    low = -sensor.full_scale if sensor.bipolar else 0.0
    for p in points:
        if not low <= p <= sensor.full_scale:
            raise t.fail("points", f"{p:g} lies outside the range {low:g} .. "
                                   f"{sensor.full_scale:g} {sensor.unit}")
    calibration = Calibration(
        points=points,
        max_error=t.number("max_error", None),
        max_error_pct_span=t.number("max_error_pct_span", None),
        oiml_class=t.string("oiml_class", None, choices=OIML_CLASSES),
        max_zero_offset_mv_per_v=t.number("max_zero_offset_mv_per_v", None),
        span_tolerance_pct=t.number("span_tolerance_pct", 20.0) or 20.0,
        max_noise_ratio=t.number("max_noise_ratio", 4.0) or 4.0,
        max_hysteresis=t.number("max_hysteresis", None),
        max_repeatability=t.number("max_repeatability", None),
    )
    t.finish()
    return calibration


def _read_target(t: Table | None) -> Target | None:
    if t is None:
        return None
    address = t.req_integer("calblock_address")
    size = t.integer("calblock_size", 128) or 128
    if address % 4:
        raise t.fail("calblock_address", f"0x{address:08X} is not 4-byte aligned")
    if address + size > 0x1_0000_0000:
        raise t.fail("calblock_size", "the block would run past the 32-bit address space")
    t.finish()
    return Target(calblock_address=address, calblock_size=size)


# --------------------------------------------------------------------------- entry points


def parse_spec(text: str, source: str = "<string>") -> Spec:
    """Validate TOML text into a ``Spec``; ``source`` names the file in error messages."""
    ctx = Context(source, text)
    try:
        data = tomllib.loads(text)
    except RecursionError:
        raise SpecError("TOML nested too deeply", file=source) from None
    except tomllib.TOMLDecodeError as exc:
        message = str(exc)
        match = re.search(r"\(at line (\d+), column \d+\)", message)
        line = int(match.group(1)) if match else None
        reason = re.sub(r"\s*\(at line \d+, column \d+\)", "", message)
        raise SpecError(f"TOML syntax error: {reason}", file=source, line=line) from None
    except ValueError as exc:          # tomllib: an integer of more digits than Python reads
        raise SpecError(f"TOML value not readable: {exc}", file=source) from None
    top = Table(data, "", ctx)
    top.req_integer("schema", choices=(SCHEMA_VERSION,))
    name = top.req_string("name")
    if not _NAME_RE.fullmatch(name):
        raise top.fail("name", f"{name!r} must be lower case letters, digits and _, starting "
                               "with a letter, at most 40 characters (it prefixes C names)")
    description = top.string("description", "") or ""     # control characters refused
    sensor_t = top.table("sensor", required=True)
    excitation_t = top.table("excitation", required=True)
    adc_t = top.table("adc", required=True)
    output_t = top.table("output", required=True)
    assert sensor_t and excitation_t and adc_t and output_t
    sensor = _read_sensor(sensor_t)
    excitation = _read_excitation(excitation_t, adc_t)
    adc = _read_adc(adc_t)
    output = _read_output(output_t, sensor, adc.data_rate_sps)
    readers: dict[str, Callable[[], Any]] = {
        "filter": lambda: _read_filter(top.table("filter"), adc.data_rate_sps),
        "linearisation": lambda: _read_linearisation(top.table("linearisation"), sensor),
        "temperature": lambda: _read_temperature(top.table("temperature")),
        "calibration": lambda: _read_calibration(top.table("calibration"), sensor),
        "target": lambda: _read_target(top.table("target")),
    }
    sections = {key: read() for key, read in readers.items()}
    top.finish()
    return Spec(schema=SCHEMA_VERSION, name=name, description=description, sensor=sensor,
                excitation=excitation, adc=adc, output=output, source=source, **sections)


def load_spec(path: str | Path) -> Spec:
    """Read and validate a spec file; any problem is a one-line ``SpecError``."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise SpecError("no such file", file=str(path)) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise SpecError(f"cannot read: {exc.__class__.__name__}: {exc}", file=str(path)) from None
    return parse_spec(text, source=str(path))
