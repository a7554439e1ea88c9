"""The C reference firmware gives exactly hosttool.design.model.run_integer's outputs.

Built by gcc for the host (also with -fsanitize=undefined,address), and by arm-none-eabi-gcc
for Cortex-M4 (QEMU mps2-an386) and Cortex-M3 (mps2-an385); Cortex-M0+ is a build check.
Outside references: the C compilers and the emulated instruction sets produce the numbers
compared with the Python model; zlib.crc32 makes the CRC of every hand-altered calibration
block; the Python decoder (hosttool.formats.calblock) must refuse the same blocks the C loader does.
"""

from __future__ import annotations

import json
import re
import struct
import subprocess
import zlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from conftest import require_tools

from hosttool.cli import main
from hosttool.codegen.render import firmware_defines, render_headers, write_headers
from hosttool.design.fixedpoint import quantise
from hosttool.design.model import (
    STATUS_INPUT_RAIL,
    STATUS_SATURATED,
    STATUS_UNCALIBRATED,
    run_integer,
)
from hosttool.design.resolve import Design, UnitConstants, make_design
from hosttool.errors import HostToolError
from hosttool.firmware import build as cbuild
from hosttool.firmware.compiled_model import host_engine
from hosttool.firmware.run import HT_RUNNER, RunnerOutput, build_runner, parse_run, run_runner
from hosttool.formats import calblock
from hosttool.formats import caljson as calfile
from hosttool.spec.schema import load_spec
from hosttool.util.resources import firmware_sources

EXAMPLES = sorted((Path(__file__).resolve().parent.parent / "examples").glob("*.toml"))
DESIGNS = {p.stem: make_design(load_spec(p)) for p in EXAMPLES}
TIMEOUT_S = 120.0

Vectors = dict[str, tuple[np.ndarray, np.ndarray | None]]


def _temps(d: Design, rng: np.random.Generator, n: int) -> np.ndarray | None:
    """Temperatures inside and beyond the clamping range (None without compensation)."""
    t = d.temperature
    return None if t is None else rng.integers(t.min_centi - 1500, t.max_centi + 1500, n)


def worst_pattern(d: Design) -> np.ndarray:
    """The sign pattern of the whole cascade's response at full scale, ending on an output.

    Response.signs() drives the chain output to +L1 (hosttool.design.impulse); each sign becomes
    the highest or lowest code, zeros in front align its end with a decimated output.
    """
    limit = 1 << (d.spec.adc.bits - 1)
    signs = d.cascade.total.signs()
    codes = np.where(signs > 0, limit - 1, np.where(signs < 0, -limit, 0))
    return np.concatenate([np.zeros((-signs.size) % d.decimation, dtype=np.int64), codes])


def vectors(d: Design, long_run: int, seed: int = 7) -> Vectors:
    """Random codes, steps, both full-scale extremes, the worst case, and a long run."""
    rng = np.random.default_rng(seed)
    limit = 1 << (d.spec.adc.bits - 1)
    hi, lo = limit - 1, -limit
    # limit / 2 settles on exact rounding ties of the scale step (half-up matters)
    steps = np.repeat(np.array([0, hi, lo, hi // 3, lo // 7, limit // 2, -limit // 2, lo, hi,
                                1, -1]), 400)
    extremes = np.concatenate([np.full(800, hi), np.full(800, lo), np.tile([hi, lo], 400),
                               np.tile([hi, hi, lo, lo], 200)])
    worst = worst_pattern(d)
    out: dict[str, np.ndarray] = {
        "random": rng.integers(lo, hi + 1, 5000),
        "steps": steps,
        "extremes": extremes,
        "worst": np.concatenate([worst, -worst - (worst < 0), np.zeros(64, dtype=np.int64)]),
        "long": rng.integers(lo, hi + 1, long_run),
    }
    return {k: (v.astype(np.int64), _temps(d, rng, v.size)) for k, v in out.items()}


def unit_constants(d: Design, *, offset: int | None = None) -> UnitConstants:
    """A plausible unit unlike the nominal one: zero, span, linearity and both TCs moved."""
    c = d.nominal
    lin = tuple(v + (1 << 20) * (k % 2 * 2 - 1) if k >= 2 else v for k, v in enumerate(c.lin))
    tc_zero = tc_span = 0
    if d.temperature is not None:
        t = d.temperature
        tc_zero = quantise(0.6 * t.zero_range, t.zero_shift)
        tc_span = quantise(-0.7 * t.span_range * 2.0 ** 30, t.span_shift)
    unit = UnitConstants(
        offset=c.offset + 12345 * (1 << d.guard_bits) + 17 if offset is None else offset,
        scale_mul=round(c.scale_mul * 1.03), lin=lin, tc_zero=tc_zero, tc_span=tc_span)
    d.with_constants(unit)   # inside the formats the design proved (raises otherwise)
    return unit


def block(d: Design, c: UnitConstants) -> bytes:
    return calblock.encode(d, c, serial="UNIT-0042", cal_time_utc=1_700_000_000)


def patched(data: bytes, name: str, value: int) -> bytes:
    """``data`` with one field replaced and the CRC made again (zlib.crc32)."""
    field = next(f for f in calblock.LAYOUT if f.name == name)
    raw = bytearray(data)
    struct.pack_into("<" + field.code, raw, calblock.offsets()[name], value)
    return bytes(raw[:-4]) + struct.pack("<I", zlib.crc32(bytes(raw[:-4])))


@dataclass(frozen=True)
class Built:
    """ht_runner built for one design and kind; calling it runs a record from reset."""

    exe: Path
    kind: str

    def __call__(self, codes: np.ndarray, temps: np.ndarray | None,
                 cal: bytes | None = None) -> RunnerOutput:
        return run_runner(self.exe, self.kind, codes, temps, calblock=cal, timeout_s=TIMEOUT_S)


def _built(kind: str, factory: pytest.TempPathFactory) -> dict[str, Built]:
    return {n: Built(build_runner(d, kind, factory.mktemp(f"{kind}-{n}")), kind)
            for n, d in DESIGNS.items()}


@pytest.fixture(scope="module", params=["host", "host-san"])
def host_kind(request: pytest.FixtureRequest) -> str:
    kind: str = request.param
    require_tools(kind, run=True)
    return kind


@pytest.fixture(scope="module")
def host_runners(host_kind: str, tmp_path_factory: pytest.TempPathFactory) -> dict[str, Built]:
    return _built(host_kind, tmp_path_factory)


@pytest.mark.parametrize("name", sorted(DESIGNS))
def test_host_bit_exact_nominal(name: str, host_runners: dict[str, Built]) -> None:
    d = DESIGNS[name]
    for label, (codes, temps) in vectors(d, long_run=100_000).items():
        got = host_runners[name](codes, temps)
        model = run_integer(d, codes, temps)
        assert got.output.size == codes.size // d.decimation, label
        assert np.array_equal(got.output, model.output), label
        assert np.array_equal(got.status, model.status(calibrated=False)), label
        assert "calblock" not in got.stderr


@pytest.mark.parametrize("name", sorted(DESIGNS))
def test_host_bit_exact_calibrated(name: str, host_runners: dict[str, Built]) -> None:
    d = DESIGNS[name]
    unit = unit_constants(d)
    for label, (codes, temps) in vectors(d, long_run=100_000, seed=11).items():
        got = host_runners[name](codes, temps, block(d, unit))
        assert "calblock ok, calibrated 1" in got.stderr
        model = run_integer(d.with_constants(unit), codes, temps)
        assert np.array_equal(got.output, model.output), label
        assert np.array_equal(got.status, model.status(calibrated=True)), label


@pytest.mark.parametrize("name", sorted(DESIGNS))
@pytest.mark.parametrize("side", [-1, 1])
def test_host_worst_case_reaches_the_proven_bound(name: str, side: int,
                                                  host_runners: dict[str, Built]) -> None:
    # The zero offset at one end of the ADC range and the worst pattern: the chain input
    # spans [0, 2^(bits+G)] (or its negative), so the chain output reaches 2^(bits+G) times
    # the sum of the positive taps of the cascade's response (at most the proven bound).
    d = DESIGNS[name]
    limit = 1 << (d.spec.adc.bits - 1 + d.guard_bits)
    unit = unit_constants(d, offset=-side * limit)
    pattern = worst_pattern(d)
    codes = pattern if side > 0 else -pattern - (pattern < 0)
    temps = None if d.temperature is None else np.full(codes.size, d.temperature.max_centi)
    model = run_integer(d.with_constants(unit), codes, temps)
    last = [k for k in model.peaks if k.startswith("stage")][-1]
    reachable = float(np.sum(np.clip(d.cascade.total.h, 0.0, None))) * 2.0 * limit
    assert 0.999 * reachable <= model.peaks[last] <= d.nodes[-1].bound
    assert not any(model.saturations.values())
    got = host_runners[name](codes, temps, block(d, unit))
    assert np.array_equal(got.output, model.output)


def edge_units(d: Design) -> list[UnitConstants]:
    """Constants at the edges of what the calibration loader accepts, both signs: offset at
    the ADC range, the span multiplier at its limit, linearisation coefficients summing to
    2^32 - 1 in magnitude (each below 2^31), both temperature coefficients at 2^31 - 1."""
    limit = 1 << (d.spec.adc.bits - 1 + d.guard_bits)
    top = (1 << 31) - 1
    units = []
    for sign in (1, -1):
        lin: tuple[int, ...] = ()
        if d.linearisation is not None:
            n = len(d.nominal.lin)
            ones = [0] + [1] * (n - 3) if n >= 3 else []
            lin = tuple(ones + [-sign * top, sign * top])[-n:]
        unit = UnitConstants(offset=-sign * limit, scale_mul=sign * d.scale.multiplier_limit,
                             lin=lin, tc_zero=sign * top if d.temperature else 0,
                             tc_span=sign * top if d.temperature else 0)
        d.check_unit(unit, "test")
        units.append(unit)
    return units


@pytest.mark.parametrize("name", sorted(DESIGNS))
def test_host_constants_at_the_loader_edges(name: str, host_runners: dict[str, Built]) -> None:
    # The steps leave out saturations and keep 32-bit words by ranges proven for every
    # constant the loader accepts: at its edges, with the worst pattern and the clamped
    # temperature extremes, the firmware still equals the model (and the sanitizer build
    # finds no signed overflow).
    d = DESIGNS[name]
    pattern = worst_pattern(d)
    codes = np.concatenate([pattern, -pattern - (pattern < 0), vectors(d, 10)["extremes"][0]])
    temps = None
    if d.temperature is not None:
        t = d.temperature
        temps = np.resize(np.array([t.min_centi - 3000, t.max_centi + 3000, t.min_centi,
                                    t.max_centi]), codes.size)
    for unit in edge_units(d):
        got = host_runners[name](codes, temps, block(d, unit))
        assert "calblock ok, calibrated 1" in got.stderr
        model = run_integer(d.with_constants(unit), codes, temps)
        assert np.array_equal(got.output, model.output)
        assert np.array_equal(got.status, model.status(calibrated=True))


def _rejected(d: Design, other: Design) -> dict[str, tuple[bytes, str]]:
    """Damaged or foreign blocks and the status the C loader must report."""
    good = block(d, unit_constants(d))
    flipped = bytearray(good)
    flipped[calblock.offsets()["scale_mul"]] ^= 0x04
    limit = 1 << (d.spec.adc.bits - 1 + d.guard_bits)
    return {
        "crc": (bytes(flipped), "bad CRC"),
        "short": (good[:-1], "too short"),
        "magic": (patched(good, "magic", 0xFFFFFFFF), "bad magic"),
        "version": (patched(good, "layout_version", 3), "other layout version"),
        "length": (patched(good, "length", calblock.BLOCK_SIZE - 4), "bad length"),
        "design": (block(other, other.nominal), "made for another design"),
        "shift": (patched(good, "scale_shift", d.scale.shift + 1),
                  "shifts or counts differ from the design"),
        "offset": (patched(good, "offset", limit + 1), "constant out of range"),
    }


@pytest.mark.parametrize("name", sorted(DESIGNS))
def test_loader_falls_back_to_defaults(name: str, host_runners: dict[str, Built]) -> None:
    d = DESIGNS[name]
    other = next(v for k, v in DESIGNS.items() if k != name)
    codes, temps = vectors(d, long_run=10)["random"]
    nominal = run_integer(d, codes, temps).output
    for label, (data, status) in _rejected(d, other).items():
        got = host_runners[name](codes, temps, data)
        assert f"calblock {status}, calibrated 0" in got.stderr, label
        assert np.array_equal(got.output, nominal), label
        assert np.all(got.status & STATUS_UNCALIBRATED), label
        with pytest.raises(HostToolError):   # the Python side refuses it too
            found = calblock.decode(data)
            calblock.check_against(found, d, "test")
            d.with_constants(found.constants)


@pytest.mark.parametrize("name", sorted(DESIGNS))
def test_codes_beyond_the_adc_range_count_as_the_rail(name: str,
                                                      host_runners: dict[str, Built]) -> None:
    # A code the ADC cannot give (a caller that did not sign-extend, say) is taken as the
    # nearest end of the range and flagged; the arithmetic stays defined (sanitizer build).
    d = DESIGNS[name]
    limit = 1 << (d.spec.adc.bits - 1)
    wild = np.array([limit, (1 << 31) - 1, -(1 << 31), -limit - 1, 2 * limit - 1] * 40)
    got = host_runners[name](wild, None)
    model = run_integer(d, np.clip(wild, -limit, limit - 1))
    assert np.array_equal(got.output, model.output)
    assert np.array_equal(got.status, model.status(calibrated=False))
    assert np.all(got.status & STATUS_INPUT_RAIL)


def test_status_word_flags_saturated_outputs(tmp_path: Path) -> None:
    # An output step of 0.2 mg puts inputs beyond the sensor range past the int32 limits
    # (the design warns so); those outputs carry the saturation flag, the others do not.
    require_tools("host", run=True)
    spec = tmp_path / "hive_scale.toml"
    spec.write_text((EXAMPLES[[p.stem for p in EXAMPLES].index("hive_scale")]).read_text()
                    .replace("resolution = 0.01  ", "resolution = 0.0000002"))
    d = make_design(load_spec(spec))
    assert any("saturate at the int32 limits" in w for w in d.warnings)
    limit = 1 << (d.spec.adc.bits - 1)
    codes = np.repeat(np.array([0, limit - 1, limit // 4, -limit, 1000]), 60)
    model = run_integer(d, codes)
    assert model.clamped.any() and not model.clamped.all()
    got = run_runner(build_runner(d, "host", tmp_path), "host", codes, None)
    assert np.array_equal(got.output, model.output)
    assert np.array_equal(got.status, model.status(calibrated=False))
    assert np.array_equal(got.status & STATUS_SATURATED != 0, model.clamped)


def test_runner_rejects_malformed_lines(host_runners: dict[str, Built]) -> None:
    built = host_runners["hive_scale"]
    for text, line in ((b"1\n2\nx\n", 3), (b"1 2 3\n", 1), (b"99999999999\n", 1),
                       (b"cal 0g\n", 1), (b"\n", 1)):
        with pytest.raises(cbuild.CBuildError, match=rf"status 2: ht_runner: line {line}:"):
            parse_run(cbuild.run(built.exe, built.kind, text, timeout_s=TIMEOUT_S))


def test_render_with_calibration_file_compiles_unit_defaults(tmp_path: Path) -> None:
    require_tools("host", run=True)
    spec = EXAMPLES[[p.stem for p in EXAMPLES].index("hive_scale")]
    d = DESIGNS["hive_scale"]
    unit = unit_constants(d)
    cal = tmp_path / "HS-0042.json"
    cal.write_text(json.dumps(calfile.seal({
        "format": calfile.FORMAT, "format_version": calfile.FORMAT_VERSION,
        "spec": {"name": d.spec.name, "sha256": d.spec.sha256}, "serial": "HS-0042",
        "cal_time_utc": "2025-03-04T08:15:00Z", "formats": calfile.formats(d),
        "constants": calfile.constants_json(unit), "verdict": "pass"})))
    gen = tmp_path / "gen"
    gen.mkdir()
    result = CliRunner().invoke(main, ["render", str(spec), "-o", str(gen),
                                       "--calibration", str(cal)])
    assert result.exit_code == 0, result.output
    header = (gen / "hive_scale_design.h").read_text()
    assert "defaults: constants of unit HS-0042, calibrated 2025-03-04T08:15:00Z" in header
    exe = cbuild.build(HT_RUNNER, "host", tmp_path, include_dirs=[gen],
                       defines=firmware_defines(d))
    codes, temps = vectors(d, long_run=10)["random"]
    got = run_runner(exe, "host", codes, temps)
    assert np.array_equal(got.output, run_integer(d.with_constants(unit), codes, temps).output)


# ----------------------------------------------------------------------------- builds


def _gen(d: Design, folder: Path) -> Path:
    gen = folder / "gen"
    gen.mkdir(parents=True, exist_ok=True)
    write_headers(render_headers(d), gen, force=True)
    return gen


@pytest.mark.parametrize("name", sorted(DESIGNS))
def test_firmware_builds_with_conversion_warnings(name: str, tmp_path: Path) -> None:
    # Reference: gcc's -Wconversion -Wsign-conversion on every firmware source.
    require_tools("host", run=False)
    d = DESIGNS[name]
    gen = _gen(d, tmp_path)
    src = Path(str(firmware_sources()))
    done = subprocess.run(
        ["gcc", *cbuild.COMMON_FLAGS, "-O2", "-Wconversion", "-Wsign-conversion", "-Wshadow",
         *(f"-D{x}" for x in firmware_defines(d)), f"-I{src}", f"-I{gen}", "-fsyntax-only",
         *(str(src / s) for s in HT_RUNNER.sources)],
        capture_output=True, text=True, check=False)
    assert done.returncode == 0, done.stderr


@pytest.mark.parametrize("macro, message", [
    ("DESIGN_HEADER_FORMAT 2", "design header's format"),
    ("CALBLOCK_SPEC_ID 0x", "rendered from different specs"),
])
def test_stale_or_mixed_headers_fail_the_build(macro: str, message: str,
                                               tmp_path: Path) -> None:
    require_tools("host", run=False)
    d = DESIGNS["hive_scale"]
    gen = _gen(d, tmp_path)
    for path in gen.iterdir():
        text = path.read_text()
        name = f"#define HIVE_SCALE_{macro}"
        if name in text:
            path.write_text(text.replace(name, name.replace(" 2", " 3").replace("0x", "0x1"), 1))
    with pytest.raises(cbuild.BuildFailed, match=re.escape(message)):
        cbuild.build(HT_RUNNER, "host", tmp_path, include_dirs=[gen],
                     defines=firmware_defines(d))


def test_makefile_lists_the_runner_sources() -> None:
    # firmware_stub/Makefile builds by hand what cbuild builds from Python.
    text = (Path(str(firmware_sources())) / "Makefile"
            ).read_text(encoding="utf-8")
    found = re.search(r"^ht_runner_SRCS := (.*)$", text, re.M)
    assert found is not None and found.group(1).split() == list(HT_RUNNER.sources)


@pytest.mark.parametrize("name", sorted(DESIGNS))
def test_cortex_m0plus_builds(name: str, tmp_path: Path) -> None:
    require_tools("m0plus", run=False)
    elf = build_runner(DESIGNS[name], "m0plus", tmp_path)
    assert elf.read_bytes()[:4] == b"\x7fELF"   # ELF magic (System V ABI, ELF header)


# ----------------------------------------------------------------------------- emulated


@pytest.fixture(scope="module", params=[pytest.param("m4", marks=pytest.mark.slow),
                                        pytest.param("m3", marks=pytest.mark.slow)])
def target_runners(request: pytest.FixtureRequest,
                   tmp_path_factory: pytest.TempPathFactory) -> dict[str, Built]:
    kind: str = request.param
    require_tools(kind, run=True)
    return _built(kind, tmp_path_factory)


@pytest.mark.parametrize("name", sorted(DESIGNS))
def test_cortex_m_bit_exact(name: str, target_runners: dict[str, Built]) -> None:
    d = DESIGNS[name]
    unit = unit_constants(d)
    for label, (codes, temps) in vectors(d, long_run=100_000).items():
        got = target_runners[name](codes, temps)
        model = run_integer(d, codes, temps)
        assert np.array_equal(got.output, model.output), label
        assert np.array_equal(got.status, model.status(calibrated=False)), label
        per_sample = got.instructions_per_sample
        assert per_sample is not None and per_sample > 0
    for edge in edge_units(d):
        codes, temps = vectors(d, long_run=10, seed=5)["worst"]
        got = target_runners[name](codes, temps, block(d, edge))
        assert np.array_equal(got.output, run_integer(d.with_constants(edge), codes,
                                                      temps).output)
    codes, temps = vectors(d, long_run=20_000, seed=3)["long"]
    got = target_runners[name](codes, temps, block(d, unit))
    assert "calblock ok, calibrated 1" in got.stderr
    model = run_integer(d.with_constants(unit), codes, temps)
    assert np.array_equal(got.output, model.output)
    assert np.array_equal(got.status, model.status(calibrated=True))
    other = next(v for k, v in DESIGNS.items() if k != name)
    refused = target_runners[name](codes[:400], temps if temps is None else temps[:400],
                                   block(other, other.nominal))
    assert "calblock made for another design, calibrated 0" in refused.stderr
    assert np.array_equal(refused.status,
                          run_integer(d, codes[:400], None if temps is None else temps[:400])
                          .status(calibrated=False))


@pytest.mark.slow
def test_instruction_count_is_deterministic(tmp_path: Path) -> None:
    # Under qemu -icount shift=0 SysTick counts executed instructions: same input, same count.
    require_tools("m4", run=True)
    d = DESIGNS["hive_scale"]
    exe = build_runner(d, "m4", tmp_path)
    codes, temps = vectors(d, long_run=10)["random"]
    first = run_runner(exe, "m4", codes, temps, timeout_s=TIMEOUT_S)
    second = run_runner(exe, "m4", codes, temps, timeout_s=TIMEOUT_S)
    assert (first.ticks, first.empty_ticks) == (second.ticks, second.empty_ticks)
    assert first.ticks is not None and first.empty_ticks is not None
    assert first.ticks > first.empty_ticks > 0


def test_c_engine_of_verify_is_the_host_build() -> None:
    # hosttool verify --engine c runs this engine; it must be the model, bit for bit.
    require_tools("host", run=True)
    d = DESIGNS["fatigue_coupon"]
    codes, temps = vectors(d, long_run=10)["steps"]
    engine = host_engine(d)
    assert np.array_equal(engine(codes, temps), run_integer(d, codes, temps).output)


def test_demo_builds_and_checks_the_host_firmware(tmp_path: Path) -> None:
    require_tools("host", run=True)
    from hosttool.commands.demo import run_demo

    lines = list(run_demo(tmp_path / "demo", "hive_scale"))
    assert any(line.startswith("render  ") for line in lines)
    assert any("matched the Python model bit for bit" in line for line in lines), lines
    assert (tmp_path / "demo" / "include" / "hive_scale_design.h").is_file()


# ----------------------------------------------------------------------------- two specs

TWO_DESIGNS = Path(__file__).resolve().parent / "c"


@pytest.mark.parametrize("kind", ["host", "host-san"])
def test_two_specs_build_into_one_program(kind: str, tmp_path: Path) -> None:
    # HT_NAME_PREFIX gives each spec's firmware its own public names: the pipeline and loader
    # are compiled once per spec, ht_crc32.c once, and the linker (gcc) must find no
    # duplicate symbol; both pipelines then run interleaved, each bit-exact with the model.
    require_tools(kind, run=True)
    hive, coupon = DESIGNS["hive_scale"], DESIGNS["fatigue_coupon"]
    gen = tmp_path / "gen"
    gen.mkdir()
    for d in (hive, coupon):
        write_headers(render_headers(d), gen, force=True)
    src = Path(str(firmware_sources()))
    flags = [*cbuild.COMMON_FLAGS, "-Wconversion", *cbuild.KINDS[kind].flags,
             f"-I{src}", f"-I{gen}"]
    objects = []
    for d, names in ((hive, "hive_"), (coupon, "coupon_")):
        for source in (src / "ht_pipeline.c", src / "ht_calblock.c", TWO_DESIGNS / "ht_channel.c"):
            obj = tmp_path / f"{names}{source.stem}.o"
            subprocess.run(["gcc", *flags, *(f"-D{x}" for x in firmware_defines(d)),
                            f"-DHT_NAME_PREFIX={names}", "-c", str(source), "-o", str(obj)],
                           check=True)
            objects.append(str(obj))
    exe = tmp_path / "two_designs"
    subprocess.run(["gcc", *flags, str(TWO_DESIGNS / "two_designs.c"), str(src / "ht_crc32.c"),
                    *objects, "-o", str(exe)], check=True)
    symbols = subprocess.run(["nm", str(exe)], capture_output=True, text=True, check=True).stdout
    assert " T hive_process" in symbols and " T coupon_process" in symbols
    assert " T ht_process" not in symbols

    rng = np.random.default_rng(21)
    limit = 1 << 23
    n = 4000
    hc, cc = rng.integers(-limit, limit, n), rng.integers(-limit, limit, n)
    ht = rng.integers(-2500, 5000, n)
    lines = []
    for k in range(n):   # interleaved: one program, two independent pipelines
        lines += [f"h {hc[k]} {ht[k]}", f"c {cc[k]} 2000"]
    done = subprocess.run([str(exe)], input="\n".join(lines) + "\n", capture_output=True,
                          text=True, check=True, timeout=TIMEOUT_S)
    rows = [line.split() for line in done.stdout.splitlines()]
    for tag, d, codes, temps in (("h", hive, hc, ht), ("c", coupon, cc, None)):
        mine = [r for r in rows if r[0] == tag]
        model = run_integer(d, codes, temps)
        assert np.array_equal([int(r[1]) for r in mine], model.output), d.spec.name
        assert np.array_equal([int(r[2], 16) for r in mine],
                              model.status(calibrated=False)), d.spec.name


@pytest.mark.parametrize("kind", ["host", "host-san"])
def test_compact_fir_build_is_the_same_arithmetic(kind: str, tmp_path: Path) -> None:
    # PREFIX_COMPACT swaps a written-out symmetric FIR for the loop over its folded table:
    # smaller code, the same integers (compared with the model by the compiled program).
    require_tools(kind, run=True)
    d = DESIGNS["fatigue_coupon"]
    gen = _gen(d, tmp_path)
    assert "#if !defined(FATIGUE_COUPON_COMPACT)" in (gen / "fatigue_coupon_design.h").read_text()
    exe = cbuild.build(HT_RUNNER, kind, tmp_path, include_dirs=[gen],
                       defines=(*firmware_defines(d), "FATIGUE_COUPON_COMPACT"))
    for label, (codes, temps) in vectors(d, long_run=20_000).items():
        got = run_runner(exe, kind, codes, temps, timeout_s=TIMEOUT_S)
        assert np.array_equal(got.output, run_integer(d, codes, temps).output), label
