"""The chain compiled for its shape (design/chain.py) gives what the generic loop gives.

The generic loop (``model._chain_run``) is held to the arithmetic contract written out
by hand in test_static_sweep.py, and to the C firmware in test_firmware.py; here the
compiled chain, which visits the record in blocks and takes the statistics and the static
path in separate loops, must give every output, flag, peak and saturation count it gives,
on shapes and record lengths that exercise each path of the generated source: no filter,
short and long FIR stages, decimation in two stages (a record ending between outputs and
between blocks), several biquad sections, temperatures beyond the clamp range, codes at
the rails, and constants that saturate the static path.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from hosttool.design.chain import BLOCK_INPUTS, SHORT_FIR
from hosttool.design.filters import FirStage
from hosttool.design.model import IntegerRun, _specialised_chain, cascade_arrays, run_integer
from hosttool.design.resolve import Design, make_design
from hosttool.spec.schema import parse_spec

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"


def _with_stages(name: str, stages: str) -> str:
    text = (EXAMPLES / f"{name}.toml").read_text(encoding="utf-8")
    start = text.index("stages = [")
    end = text.index("\n]\n", start) + 3
    return text[:start] + stages + "\n" + text[end:]


SPECS = {
    "hive_scale": (EXAMPLES / "hive_scale.toml").read_text(encoding="utf-8"),
    "fatigue_coupon": (EXAMPLES / "fatigue_coupon.toml").read_text(encoding="utf-8"),
    # outputs of 0.2 mg: inputs beyond the sensor range saturate the static path
    "hive_saturating": (EXAMPLES / "hive_scale.toml").read_text(encoding="utf-8")
    .replace("resolution = 0.01  ", "resolution = 0.0000002"),
    "no_filter": _with_stages("fatigue_coupon", "stages = []"),
    "two_decimations": _with_stages("fatigue_coupon", """stages = [
  { kind = "moving_average", length = 3 },
  { kind = "fir_lowpass", cutoff_hz = 60.0, transition_hz = 40.0, decimation = 2 },
  { kind = "fir_lowpass", cutoff_hz = 60.0, transition_hz = 40.0, decimation = 3 },
  { kind = "butterworth_lowpass", order = 4, cutoff_hz = 50.0 },
]"""),
    "long_average": _with_stages("hive_scale", """stages = [
  { kind = "moving_average", length = 16 },
]"""),
}


@pytest.fixture(scope="module")
def designs() -> dict[str, Design]:
    return {name: make_design(parse_spec(text, f"{name}.toml")) for name, text in SPECS.items()}


def _runs(d: Design, codes: np.ndarray, temps: np.ndarray | None,
          cache: Path, monkeypatch: pytest.MonkeyPatch) -> tuple[IntegerRun, IntegerRun]:
    monkeypatch.setenv("HOSTTOOL_CACHE_DIR", "off")
    generic = run_integer(d, codes, temps)
    monkeypatch.setenv("HOSTTOOL_CACHE_DIR", str(cache))
    assert _specialised_chain(cascade_arrays(d)) is not None
    return generic, run_integer(d, codes, temps)


def test_the_shapes_cover_every_path(designs: dict[str, Design]) -> None:
    firs = [s for d in designs.values() for s in d.stages if isinstance(s, FirStage)]
    assert any(len(s.taps_int) <= SHORT_FIR for s in firs)
    assert any(len(s.taps_int) > SHORT_FIR and s.decimation == 1 for s in firs)
    assert designs["two_decimations"].decimation == 6
    assert not designs["no_filter"].stages


@pytest.mark.parametrize("name", list(SPECS))
def test_compiled_chain_equals_the_generic_loop(name: str, designs: dict[str, Design],
                                                tmp_path: Path,
                                                monkeypatch: pytest.MonkeyPatch) -> None:
    d = designs[name]
    rng = np.random.default_rng(13)
    limit = 1 << (d.spec.adc.bits - 1)
    for n in (0, 1, 5, BLOCK_INPUTS - 1, BLOCK_INPUTS + 1, 3 * BLOCK_INPUTS + 7, 9001):
        # whole-range codes, rails, and stretches near full scale for saturations
        codes = rng.integers(d.code_min, d.code_max + 1, n)
        codes[::701] = d.code_min
        codes[3::907] = d.code_max
        codes[n // 2:n // 2 + 300] = rng.integers(limit - 4000, limit, codes[n // 2:][:300].size)
        temps = None if d.temperature is None else rng.integers(
            d.temperature.min_centi - 500, d.temperature.max_centi + 500, n)
        for record_temps in [None] if temps is None else [None, temps]:
            generic, special = _runs(d, codes, record_temps, tmp_path, monkeypatch)
            np.testing.assert_array_equal(special.output, generic.output)
            assert special.output.dtype == generic.output.dtype
            np.testing.assert_array_equal(special.rail, generic.rail)
            np.testing.assert_array_equal(special.clamped, generic.clamped)
            assert special.peaks == generic.peaks
            assert special.saturations == generic.saturations
    if name == "hive_saturating":
        assert generic.clamped.any() and sum(generic.saturations.values()) > 0


def test_codes_outside_the_range_are_refused(designs: dict[str, Design], tmp_path: Path,
                                             monkeypatch: pytest.MonkeyPatch) -> None:
    d = designs["hive_scale"]
    monkeypatch.setenv("HOSTTOOL_CACHE_DIR", str(tmp_path))
    codes = np.zeros(3000, dtype=np.int64)
    for bad in (d.code_max + 1, d.code_min - 1):
        codes[2500] = bad
        with pytest.raises(ValueError, match="24-bit"):
            run_integer(d, codes)
    with pytest.raises(ValueError, match="1-D"):
        run_integer(d, codes.reshape(2, -1))
    with pytest.raises(ValueError, match="pair one to one"):
        run_integer(d, codes[:10], np.zeros(9, dtype=np.int64))


def test_the_kernel_source_changes_with_model_py() -> None:
    # numba keys its cache of the kernel on the kernel's file alone, yet compiles model.py's
    # helpers (round_shift, static_word ...) into it: the source must name model.py's
    # content, so that an edit there makes a new kernel file and a new compilation
    import hashlib

    from hosttool.design import chain, model

    digest = hashlib.sha256(Path(model.__file__).read_bytes()).hexdigest()[:16]
    assert f"model.py {digest}" in chain._source((("fir", 3, 2), ("biquad", 0, 1)))
