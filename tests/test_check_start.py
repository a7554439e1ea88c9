"""``hosttool check`` starts light: no numpy, scipy or numba in its process, and the plain
float arithmetic that replaced numpy on its path gives the bits numpy gave.

Outside sources: numpy (linspace, float64 array arithmetic, round half to even) and Python's
fractions module (exact rational arithmetic, for the correctly rounded sinc^k power).
"""

from __future__ import annotations

import json
import subprocess
import sys
from fractions import Fraction

import numpy as np
import pytest

from hosttool.physics.adc import adc_sinc_magnitude, adc_sinc_peak, alias_hz, sinc_magnitude
from hosttool.physics.bridge import bridge_of
from hosttool.physics.grid import even_points
from hosttool.spec.schema import Adc, StrainBridge, Transducer
from hosttool.util.resources import example_names, example_text

HEAVY = ("numpy", "scipy", "numba", "matplotlib")

# runs the command line in a fresh interpreter, then lists what it imported (on stderr)
PROBE = """
import json, sys
from hosttool.cli import main
try:
    main(sys.argv[1:], prog_name="hosttool")
finally:
    sys.stderr.write("\\nMODULES " + json.dumps(sorted(sys.modules)) + "\\n")
"""


@pytest.mark.parametrize("name", example_names())
@pytest.mark.parametrize("as_json", [False, True])
def test_check_imports_no_numpy_scipy_or_numba(name, as_json, tmp_path):
    spec = tmp_path / f"{name}.toml"
    spec.write_text(example_text(name), encoding="utf-8")
    args = ["check", str(spec), *(["--json"] if as_json else [])]
    done = subprocess.run([sys.executable, "-c", PROBE, *args], cwd=tmp_path,
                          capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    modules = json.loads(done.stderr.rpartition("MODULES ")[2])
    heavy = [m for m in modules if m.split(".")[0] in HEAVY]
    assert heavy == []
    if as_json:
        assert json.loads(done.stdout)["kind"] == "budget"
    else:
        assert "sensor and ADC budget" in done.stdout


@pytest.mark.parametrize("low, high, count", [(49.5, 50.5, 2001), (59.4, 60.6, 2001),
                                              (-5000.0, 5000.0, 2001), (0.0, 200.0, 2001),
                                              (-1e-3, 7.25, 17), (3.0, 3.0, 5), (1.0, 2.0, 2)])
def test_even_points_are_numpys_linspace_bit_for_bit(low, high, count):
    ours = even_points(low, high, count)
    assert ours == np.linspace(low, high, count).tolist()


def test_even_points_random_ranges_bit_for_bit():
    rng = np.random.default_rng(13)
    for low, width in zip(rng.uniform(-1e4, 1e4, 200), rng.uniform(1e-6, 1e4, 200),
                          strict=True):
        assert even_points(low, low + width, 2001) == np.linspace(low, low + width,
                                                                  2001).tolist()


SENSORS = [
    Transducer(capacity=200.0, unit="kg", rated_output_mv_per_v=2.0, zero_balance_mv_per_v=0.1,
               cells_in_parallel=4, cell_resistance_ohm=350.0, bipolar=False,
               nonlinearity_pct_fs=0.02),
    *(StrainBridge(topology=t, gauge_factor=2.1, gauge_resistance_ohm=120.0, poisson_ratio=0.3,
                   wiring=w, lead_resistance_ohm=0.8, strain_range_ue=5000.0,
                   zero_balance_mv_per_v=0.05)
      for t, w in [("quarter", "two_wire"), ("quarter", "three_wire"),
                   ("half_poisson", "three_wire"), ("full_poisson", "four_wire")]),
]


@pytest.mark.parametrize("sensor", SENSORS, ids=lambda s: getattr(s, "topology", s.kind))
def test_bridge_numbers_and_float64_arrays_give_the_same_bits(sensor):
    bridge = bridge_of(sensor)
    m = np.linspace(bridge.m_min, bridge.m_max, 1001)
    for method in (bridge.ratio, bridge.tangent_reading, bridge.ratio_linear):
        assert [method(x) for x in m.tolist()] == np.asarray(method(m)).tolist()
    r = np.asarray(bridge.ratio(m))
    assert [bridge.measurand(x) for x in r.tolist()] == np.asarray(bridge.measurand(r)).tolist()
    # the nonlinearity as numpy computes it over the same grid
    grid = np.linspace(bridge.m_min, bridge.m_max, 2001)
    deviation = np.max(np.abs(np.asarray(bridge.ratio(grid))
                              - np.asarray(bridge.ratio_linear(grid))))
    full_scale = max(abs(bridge.m_min), abs(bridge.m_max)) * abs(bridge.sensitivity)
    assert bridge.nonlinearity_pct_fs() == float(100.0 * deviation / full_scale)


@pytest.mark.parametrize("order", [1, 2, 3, 4, 5])
@pytest.mark.parametrize("decimation", [None, 64.0, 1000.0])
def test_sinc_power_is_correctly_rounded(order, decimation):
    """sinc^k is the exact k-th power of |sinc| rounded once (fractions.Fraction), the same
    bits on every machine; the array form gives the bits of the scalar one."""
    freqs = np.linspace(0.0, 130.0, 1301).tolist() + [49.5, 50.0, 50.5, 59.4, 60.0, 60.6]
    for f in freqs:
        base = sinc_magnitude(f, 10.0, 1, decimation)
        assert sinc_magnitude(f, 10.0, order, decimation) == float(Fraction(base) ** order)
    assert sinc_magnitude(np.array(freqs), 10.0, order, decimation).tolist() == [
        sinc_magnitude(f, 10.0, order, decimation) for f in freqs]


@pytest.mark.parametrize("order", [1, 2, 3, 4, 5])
@pytest.mark.parametrize("rate, modulator", [(10.0, None), (400.0, None), (50.0, 64000.0),
                                             (7.5, None), (1000.0, 256000.0), (13.0, 6500.0)])
def test_sinc_peak_is_the_largest_magnitude(order, rate, modulator):
    """One power of the largest single-stage |H| has the bits of the largest k-th power."""
    adc = Adc(bits=24, pga_gain=None, pga_gains=(1,), reference_max_v=5.0, data_rate_sps=rate,
              noise_uv_rms=0.1, sinc_order=order, modulator_rate_hz=modulator,
              overload_margin_pct=10.0)
    for f in (50.0, 60.0):
        sweep = even_points(f * 0.99, f * 1.01, 2001)
        assert adc_sinc_peak(adc, sweep) == max(adc_sinc_magnitude(adc, x) for x in sweep)


def test_alias_rounds_to_the_nearest_multiple_like_numpy():
    sweep = np.concatenate([np.linspace(49.5, 50.5, 2001), np.linspace(59.4, 60.6, 2001),
                            [5.0, 15.0, 25.0, 35.0]])      # ties: round half to even
    for fs in (10.0, 7.5, 13.0, 16.6, 20.0, 400.0, 1000.0):
        expected = np.abs(sweep - fs * np.round(sweep / fs))
        assert [alias_hz(f, fs) for f in sweep.tolist()] == expected.tolist()
