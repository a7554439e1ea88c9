"""The compiled kernels give the figures of plain numpy and scipy, bit for bit.

Outside references:
- the arithmetic contract (DEVELOPERS.md) written out again here in plain numpy int64
  (``_contract_static``), for the exhaustive static sweep;
- numpy.polynomial.polynomial.polyval and numpy's own pairwise float sum, for the float64
  reference and the mean |error| of the sweep;
- scipy.signal.lfilter (FIR and biquad sections) and scipy.signal.chirp, which the float64
  reference and the sine-sweep stimulus computed before they were compiled: the compiled
  versions must give the same bits, so no verification figure moves;
- the C reference firmware (gcc host build), which must agree with the model on every code.
"""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from conftest import require_tools
from scipy import signal

from hosttool.cli import main
from hosttool.design.filters import FirStage
from hosttool.design.model import run_integer, run_reference
from hosttool.design.resolve import Design, UnitConstants, make_design
from hosttool.spec.schema import load_spec
from hosttool.verify.proof import _linear_chirp, static_temperatures
from hosttool.verify.sweep import HISTOGRAM_BINS, STATIC_BINS, sweep_static

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
DESIGNS = {name: make_design(load_spec(EXAMPLES / f"{name}.toml"))
           for name in ("hive_scale", "fatigue_coupon")}


def _rs(x: np.ndarray, k: int) -> np.ndarray:
    return x if k == 0 else (x + (1 << (k - 1))) >> k


def _contract_static(d: Design, x: np.ndarray, temp: int | None
                     ) -> tuple[np.ndarray, np.ndarray, int]:
    """(integer outputs, float64 reference, saturations) of the static path, in numpy."""
    c = d.constants
    v = x * (1 << d.guard_bits) - c.offset
    cv = np.clip(v, -2 ** 31, 2 ** 31 - 1)
    s, sat = _contract_words(d, cv, temp)
    ref = (x.astype(np.float64) * 2.0 ** d.guard_bits - float(c.offset)) \
        * d.scale.realised(c.scale_mul)
    lin = d.linearisation
    if lin is not None:
        ref = np.polynomial.polynomial.polyval(ref / 2.0 ** lin.norm_shift,
                                               [q / 2.0 ** 30 for q in c.lin]) \
            * 2.0 ** lin.norm_shift
    tc = d.temperature
    if tc is not None and temp is not None:
        dt = min(max(temp, tc.min_centi), tc.max_centi) - tc.reference_centi
        alpha = c.tc_zero / 2.0 ** tc.zero_shift
        gamma = c.tc_span / 2.0 ** tc.span_shift / 2.0 ** 30
        ref = (ref - alpha * float(dt)) * (1.0 + gamma * float(dt))
    return s, np.clip(ref, -2.0 ** 31, 2.0 ** 31 - 1), sat + int(np.count_nonzero(cv != v))


def _contract_words(d: Design, v: np.ndarray, temp: int | None) -> tuple[np.ndarray, int]:
    """Scale, linearisation and temperature of chain words v: (outputs, saturations)."""
    c = d.constants
    sat = 0
    r = _rs(v * c.scale_mul, d.scale.shift)
    s = np.clip(r, -2 ** 31, 2 ** 31 - 1)
    sat += int(np.count_nonzero(s != r))
    lin = d.linearisation
    if lin is not None:
        k = 30 - lin.norm_shift
        w = s * (1 << k)
        acc = np.full(s.shape, c.lin[-1], dtype=np.int64)
        for coeff in reversed(c.lin[:-1]):
            acc = _rs(acc * w, 30) + coeff
        r = _rs(acc, k)
        s = np.clip(r, -2 ** 31, 2 ** 31 - 1)
        sat += int(np.count_nonzero(s != r))
    tc = d.temperature
    if tc is not None and temp is not None:
        dt = min(max(temp, tc.min_centi), tc.max_centi) - tc.reference_centi
        s1 = s - _rs(np.int64(c.tc_zero * dt), tc.zero_shift)
        g = _rs(np.int64(c.tc_span * dt), tc.span_shift)
        r = s1 + _rs(s1 * g, 30)
        s = np.clip(r, -2 ** 31, 2 ** 31 - 1)
        sat += int(np.count_nonzero(s != r))
    return s, sat


@pytest.mark.parametrize("name", list(DESIGNS))
def test_sweep_gives_the_figures_of_plain_numpy(name: str) -> None:
    d = DESIGNS[name]
    temps = static_temperatures(d)[:2]          # the reference and the coldest step
    bound = d.static_error_bound_lsb
    got = sweep_static(d, temps, bound=bound, threads=2)
    x = np.arange(d.code_min, d.code_max + 1, dtype=np.int64)
    max_err, abs_sum, sats, mono = 0.0, 0.0, 0, True
    sign = 1 if d.constants.scale_mul >= 0 else -1
    for i, temp in enumerate(temps):
        out, ref, sat = _contract_static(d, x, temp)
        err = out - ref
        a = np.abs(err)
        max_err = max(max_err, float(a.max()))
        for start in range(0, x.size, 1 << 18):      # numpy's pairwise sum per chunk
            abs_sum += float(a[start:start + (1 << 18)].sum())
        sats += sat
        mono &= bool(np.all(np.diff(out) * sign >= 0))
        if i == 0:
            by_bin = a.reshape(STATIC_BINS, -1).max(axis=1)
            edges = np.linspace(-bound, bound, HISTOGRAM_BINS + 1)
            hist, _ = np.histogram(np.clip(err, -bound, bound), bins=edges)
    assert got.evaluations == x.size * len(temps)
    assert got.max_error_lsb == max_err
    assert got.mean_abs_error_lsb == abs_sum / got.evaluations
    assert got.saturations == sats
    assert got.monotonic == mono
    np.testing.assert_array_equal(got.max_error_by_bin, by_bin)
    # np.histogram puts an error on an inner edge in the upper bin, as the kernel does;
    # the totals are exact
    assert got.error_histogram[1].sum() == x.size
    assert np.abs(got.error_histogram[1] - hist).sum() <= 2 * HISTOGRAM_BINS


def _edge_constants(d: Design, sign: int) -> UnitConstants:
    """Constants at the edges of what the calibration loader accepts (tests/test_firmware.py
    runs the same edges through the C firmware): the offset at the ADC range, the span
    multiplier at its limit, linearisation coefficients of 2^31 - 1, both temperature
    coefficients at 2^31 - 1."""
    top = (1 << 31) - 1
    n = len(d.nominal.lin)
    lin = tuple(([0] * n + [-sign * top, sign * top])[-n:]) if n else ()
    unit = UnitConstants(offset=-sign * (1 << (d.spec.adc.bits - 1 + d.guard_bits)),
                         scale_mul=sign * d.scale.multiplier_limit, lin=lin,
                         tc_zero=sign * top if d.temperature else 0,
                         tc_span=sign * top if d.temperature else 0)
    d.check_unit(unit, "test")
    return unit


@pytest.mark.parametrize("name", list(DESIGNS))
@pytest.mark.parametrize("case", ["edge+", "edge-", "beyond"])
def test_sweep_at_the_loader_edges_gives_the_figures_of_plain_numpy(name: str,
                                                                     case: str) -> None:
    # constants at the loader's edges, and beyond them (an offset of 2^31 the loader
    # refuses, set here without its check, so that half the codes saturate the offset
    # step), at a temperature beyond the compensated range (clamped): every output,
    # reference and saturation is the contract's
    d = DESIGNS[name]
    unit = _edge_constants(d, -1 if case == "edge-" else 1)
    if case == "beyond":
        d = dataclasses.replace(d, constants=dataclasses.replace(unit, offset=1 << 31))
    else:
        d = d.with_constants(unit)
    temp = None if d.temperature is None else d.temperature.max_centi + 3000
    got = sweep_static(d, [temp], bound=4.0, threads=2)
    x = np.arange(d.code_min, d.code_max + 1, dtype=np.int64)
    out, ref, sat = _contract_static(d, x, temp)
    a = np.abs(out - ref)
    assert (sat > 0) == (case == "beyond")
    assert got.saturations == sat
    assert got.max_error_lsb == float(a.max())
    assert got.mean_abs_error_lsb == sum(float(a[i:i + (1 << 18)].sum())
                                         for i in range(0, x.size, 1 << 18)) / x.size
    sign = 1 if d.constants.scale_mul >= 0 else -1
    assert got.monotonic == bool(np.all(np.diff(out) * sign >= 0))
    np.testing.assert_array_equal(got.max_error_by_bin, a.reshape(STATIC_BINS, -1).max(axis=1))


def test_figures_do_not_depend_on_the_thread_count() -> None:
    d = DESIGNS["hive_scale"]
    temps = static_temperatures(d)[:2]
    one = sweep_static(d, temps, bound=0.5, threads=1)
    three = sweep_static(d, temps, bound=0.5, threads=3)
    assert (one.max_error_lsb, one.mean_abs_error_lsb, one.saturations, one.monotonic) == \
        (three.max_error_lsb, three.mean_abs_error_lsb, three.saturations, three.monotonic)
    np.testing.assert_array_equal(one.max_error_by_bin, three.max_error_by_bin)


def test_an_engine_off_by_one_on_one_code_is_found() -> None:
    d = DESIGNS["fatigue_coupon"]
    bad_code = 1234567

    def engine(first: int, temp: int, out: np.ndarray) -> None:
        x = np.arange(first, first + out.size, dtype=np.int64)
        out[:] = _contract_static(d, x, None)[0]
        if first <= bad_code < first + out.size:
            out[bad_code - first] += 1

    got = sweep_static(d, [None], bound=2.0, engines={"fake": engine})
    assert got.mismatches == {"fake": 1}
    assert got.first_mismatch == {"fake": (bad_code, 0)}


@pytest.mark.parametrize("name", list(DESIGNS))
def test_reference_is_scipy_lfilter_bit_for_bit(name: str) -> None:
    d = DESIGNS[name]
    rng = np.random.default_rng(11)
    codes = rng.integers(d.code_min, d.code_max + 1, 30000)
    for ideal in (False, True):
        v = codes * 2.0 ** d.guard_bits - float(d.constants.offset)
        for stage in d.stages:
            if isinstance(stage, FirStage):
                taps = stage.taps if ideal else stage.taps_realised
                full = signal.lfilter(np.asarray(taps, dtype=np.float64), [1.0], v)
                v = full[stage.decimation - 1::stage.decimation][: v.size // stage.decimation]
                continue
            for sec in stage.sections:
                b, a = (sec.b, sec.a) if ideal else (sec.b_realised, sec.a_realised)
                v = signal.lfilter(np.asarray(b, dtype=np.float64),
                                   np.asarray(a, dtype=np.float64), v)
        got = run_reference(d, codes, ideal=ideal)
        scale = d.scale.ideal if ideal else d.scale.realised(d.constants.scale_mul)
        s = v * scale
        lin = d.linearisation
        if lin is not None:
            coeffs = lin.coeffs if ideal else tuple(c / 2.0 ** 30 for c in d.constants.lin)
            s = np.polynomial.polynomial.polyval(s / 2.0 ** lin.norm_shift, coeffs) \
                * 2.0 ** lin.norm_shift
        np.testing.assert_array_equal(got, np.clip(s, -2.0 ** 31, 2.0 ** 31 - 1))


def test_sine_sweep_stimulus_is_scipy_chirp_bit_for_bit() -> None:
    t = np.arange(250000) / 1000.0
    np.testing.assert_array_equal(_linear_chirp(t, 4.5, t[-1], 450.0),
                                  signal.chirp(t, f0=4.5, t1=t[-1], f1=450.0))


def _chain_by_hand(d: Design, codes: np.ndarray) -> np.ndarray:
    """The filter cascade of the arithmetic contract in plain Python integers."""
    v = [int(c) * (1 << d.guard_bits) - d.constants.offset for c in codes]
    for stage in d.stages:
        if isinstance(stage, FirStage):
            taps, f, dec = stage.taps_int, stage.fmt.frac, stage.decimation
            out = []
            for n in range(dec - 1, len(v), dec):
                acc = sum(h * v[n - k] for k, h in enumerate(taps) if n - k >= 0)
                out.append(max(-2 ** 31, min(2 ** 31 - 1, (acc + (1 << (f - 1))) >> f)))
            v = out
            continue
        for sec in stage.sections:
            (b0, b1, b2), (a1, a2), q = sec.b_int, sec.a_int, sec.fmt.frac
            x1 = x2 = y1 = y2 = e = 0
            out = []
            for x in v:
                acc = b0 * x + b1 * x1 + b2 * x2 - a1 * y1 - a2 * y2 + e
                y = max(-2 ** 31, min(2 ** 31 - 1, (acc + (1 << (q - 1))) >> q))
                e = acc - y * (1 << q)
                x1, x2, y1, y2 = x, x1, y, y1
                out.append(y)
            v = out
    return np.array(v, dtype=np.int64)


@pytest.mark.parametrize("name", list(DESIGNS))
def test_compiled_chain_follows_the_contract(name: str) -> None:
    d = DESIGNS[name]
    rng = np.random.default_rng(5)
    codes = rng.integers(d.code_min, d.code_max + 1, 3000)
    temps = None if d.temperature is None else rng.integers(
        d.temperature.min_centi - 500, d.temperature.max_centi + 500, codes.size)
    words = np.clip(_chain_by_hand(d, codes), -2 ** 31, 2 ** 31 - 1)
    run = run_integer(d, codes, temps)
    assert run.output.size == words.size
    dec = d.decimation
    for m in range(0, words.size, 97):
        temp = None if temps is None else int(temps[(m + 1) * dec - 1])
        assert run.output[m] == _contract_words(d, words[m:m + 1], temp)[0][0]
    assert run.peaks["offset"] == int(np.max(np.abs(
        codes * (1 << d.guard_bits) - d.constants.offset)))


@pytest.mark.slow
@pytest.mark.parametrize("name", list(DESIGNS))
def test_three_way_exhaustive_proof_with_the_c_firmware(name: str) -> None:
    require_tools("host", run=True)
    result = CliRunner().invoke(main, ["verify", str(EXAMPLES / f"{name}.toml"),
                                       "--engine", "both", "--json", "--samples", "20000"])
    data = json.loads(result.output)
    # the coupon's notches have limit cycles (test_limit_cycles.py): its only reasons to fail
    assert result.exit_code == (0 if data["limit_cycles"]["passed"] else 1), result.output
    assert all("limit cycle" in r for r in data["reasons"]), data["reasons"]
    assert data["engines"] == ["python", "c"]
    assert data["static"]["engines_agree"] is True
    assert data["static"]["evaluations"] == data["static"]["codes"] * max(
        1, len(data["static"]["temperatures_c"]))
    assert all(t["engines_agree"] for t in data["tests"])
    assert set(data["timings"]) == {"import", "design", "static", "dynamic", "report"}


@pytest.mark.parametrize("name", list(DESIGNS))
def test_chain_compiled_for_its_shape_equals_the_generic_loop(
        name: str, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # the generic loop is itself held to the contract above; the specialised one must give
    # every output, flag, peak and saturation count it gives, on records with rail codes
    d = DESIGNS[name]
    rng = np.random.default_rng(9)
    codes = rng.integers(d.code_min, d.code_max + 1, 50000)
    codes[::701] = d.code_min
    codes[3::907] = d.code_max
    temps = None if d.temperature is None else rng.integers(
        d.temperature.min_centi - 500, d.temperature.max_centi + 500, codes.size)
    monkeypatch.setenv("HOSTTOOL_CACHE_DIR", "off")
    generic = run_integer(d, codes, temps)
    monkeypatch.setenv("HOSTTOOL_CACHE_DIR", str(tmp_path))
    special = run_integer(d, codes, temps)
    from hosttool.design.model import _specialised_chain, cascade_arrays

    assert _specialised_chain(cascade_arrays(d)) is not None
    np.testing.assert_array_equal(special.output, generic.output)
    np.testing.assert_array_equal(special.rail, generic.rail)
    np.testing.assert_array_equal(special.clamped, generic.clamped)
    assert special.peaks == generic.peaks and special.saturations == generic.saturations


def test_an_edited_kernel_file_is_rewritten_not_run(tmp_path: Path) -> None:
    from hosttool.design import chain

    shape = (("fir", 3, 2), ("biquad", 0, 1))
    folder = tmp_path / "kernels"
    first = chain.compiled_chain(shape, folder)
    path = next(folder.glob("chain_*.py"))
    good = path.read_bytes()
    path.write_text("raise SystemExit('edited kernel ran')\n")
    chain._LOADED.clear()
    again = chain.compiled_chain(shape, folder)
    assert path.read_bytes() == good
    assert callable(first) and callable(again)


def test_sweep_kernel_calls_no_compiled_function_of_another_module() -> None:
    # numba keys a cached kernel on its own source file alone: a compiled helper of
    # another module, once edited, would stay stale inside the cached sweep
    from numba.core.registry import CPUDispatcher

    from hosttool.verify import sweep

    def called(kernel: CPUDispatcher) -> set[str]:
        names = set()
        for name in kernel.py_func.__code__.co_names:
            target = kernel.py_func.__globals__.get(name)
            if isinstance(target, CPUDispatcher):
                names.add(f"{target.py_func.__module__}.{name}")
                names |= called(target)
        return names

    found = called(sweep._sweep)
    assert found and all(n.startswith("hosttool.verify.sweep.") for n in found), found
