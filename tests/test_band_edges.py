"""Signal bands up to the ADC's Nyquist frequency: a design, and figures that say what they can.

Every case used to end in a traceback (or, later, a refusal) from the response analysis:
no [filter] and no bandwidth_hz, a moving average alone, bandwidth_hz 4.5 or 5 at 10 samples/s,
a Butterworth corner of 4.5 Hz at 10 samples/s. Each now designs, verifies and renders.

Outside references: scipy.signal (freqz on the same frequency grid, butter) for the droop and
the band-edge magnitude; a Butterworth lowpass is 3.01 dB down at its corner (|H| = 1/sqrt 2,
from memory).
"""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pytest
import scipy.signal
from click.testing import CliRunner

from hosttool.cli import main
from hosttool.design.resolve import Design, make_design
from hosttool.design.response import PASSBAND_POINTS
from hosttool.spec.schema import parse_spec

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
HIVE = (EXAMPLES / "hive_scale.toml").read_text(encoding="utf-8")
FILTER = re.search(r"\[filter\].*?coefficient_bits = 32\n", HIVE, re.S)
assert FILTER is not None
MA = '  { kind = "moving_average", length = 5 },\n'
BW = '  { kind = "butterworth_lowpass", order = 2, cutoff_hz = 0.5 },\n'


def _edit(*pairs: tuple[str, str]) -> str:
    text = HIVE
    for old, new in pairs:
        assert old in text, old
        text = text.replace(old, new, 1)
    return text


CASES = {
    "no filter, no bandwidth": _edit((FILTER.group(0), ""), ("bandwidth_hz = 0.5\n", "")),
    "moving average alone": _edit((BW, ""), ("bandwidth_hz = 0.5\n", "")),
    "bandwidth 4.5 Hz": _edit(("bandwidth_hz = 0.5", "bandwidth_hz = 4.5")),
    "bandwidth 5 Hz": _edit(("bandwidth_hz = 0.5", "bandwidth_hz = 5.0")),
    "Butterworth 4.5 Hz alone": _edit((MA, ""), ("cutoff_hz = 0.5 }", "cutoff_hz = 4.5 }"),
                                      ("bandwidth_hz = 0.5\n", "")),
}


def _design(text: str) -> Design:
    return make_design(parse_spec(text, "spec.toml"))


def _scipy_droop(d: Design) -> float:
    """-min dB of the realised cascade over the same passband grid, by scipy.signal.freqz."""
    f = np.linspace(0.0, d.filter_report.passband_edge_hz, PASSBAND_POINTS)
    h = np.ones(f.size, dtype=complex)
    for stage in d.stages:
        if hasattr(stage, "taps_realised"):
            h *= scipy.signal.freqz(stage.taps_realised, [1.0], worN=f, fs=stage.rate_hz)[1]
        else:
            for sec in stage.sections:
                h *= scipy.signal.freqz(sec.b_realised, sec.a_realised, worN=f,
                                        fs=stage.rate_hz)[1]
    return float(-np.min(20 * np.log10(np.maximum(np.abs(h), 1e-15))))


@pytest.mark.parametrize("label", list(CASES))
def test_a_band_to_nyquist_designs_verifies_and_renders(label: str, tmp_path: Path) -> None:
    spec = tmp_path / "spec.toml"
    spec.write_text(CASES[label])
    for args in (["design", str(spec)], ["render", str(spec), "-o", str(tmp_path / "inc")],
                 ["verify", str(spec), "--samples", "20000"]):
        result = CliRunner().invoke(main, args)
        # a Butterworth corner next to Nyquist has a period-2 limit cycle (poles near
        # z = -1; test_limit_cycles.py): verify fails on it and on nothing else
        cycles = args[0] == "verify" and "LIMIT CYCLE in stage1.section1" in result.output
        assert result.exit_code == (1 if cycles else 0), (args[0], result.output)
        assert "Traceback" not in result.output
    d = _design(CASES[label])
    r = d.filter_report
    assert r.stopband_edge_hz is None            # nothing in these specs defines one
    assert r.realised.stopband_attenuation_db is None
    assert r.passband_edge_hz <= d.spec.adc.data_rate_sps / 2
    if d.stages:
        assert r.realised.passband_droop_db == pytest.approx(min(_scipy_droop(d), 300.0),
                                                             abs=1e-6)
    else:
        assert r.realised.passband_droop_db == 0.0 and r.realised.passband_peak_db == 0.0


def test_butterworth_droop_at_its_corner_is_3_db() -> None:
    # a band edge at the corner: 3.01 dB down, droop not ripple, and no droop warning
    d = _design(_edit((MA, ""), ("cutoff_hz = 0.5 }", "cutoff_hz = 2.0 }"),
                      ("bandwidth_hz = 0.5", "bandwidth_hz = 2.0")))
    assert d.filter_report.realised.passband_droop_db == pytest.approx(
        20 * math.log10(math.sqrt(2.0)), abs=1e-3)
    assert d.filter_report.realised.passband_peak_db == pytest.approx(0.0, abs=1e-9)
    assert not any("droops" in w for w in d.warnings)
    b, a = scipy.signal.butter(2, 2.0, fs=10.0)
    _, h = scipy.signal.freqz(b, a, worN=[2.0], fs=10.0)
    assert d.filter_report.ideal.passband_droop_db == pytest.approx(
        -20 * math.log10(abs(h[0])), abs=1e-6)


def test_droop_inside_the_declared_band_is_warned() -> None:
    # the case: 8 to 15 dB lost inside the band the spec declares
    d = _design(_edit(("bandwidth_hz = 0.5", "bandwidth_hz = 1.5")))
    droop = d.filter_report.realised.passband_droop_db
    assert 8.0 < droop < 60.0
    assert any(w.startswith(f"filter: the response droops {droop:.3g} dB inside the declared "
                            "signal band 0 .. 1.5 Hz") for w in d.warnings)
    hive = _design(HIVE)        # 3.9 dB at its band edge: below half the amplitude, no warning
    assert 3.0 < hive.filter_report.realised.passband_droop_db < 6.0
    assert not any("droops" in w for w in hive.warnings)


def test_a_notch_alone_reports_no_stopband() -> None:
    d = _design(_edit((MA, '  { kind = "notch", frequency_hz = 2.0, quality = 5.0 },\n'),
                      (BW, "")))
    assert d.filter_report.stopband_edge_hz is None
    assert d.filter_report.realised.stopband_attenuation_db is None
    result = CliRunner().invoke(main, ["design", str(EXAMPLES / "hive_scale.toml")])
    assert "stopband from 4 Hz" in result.output  # a lowpass defines one
