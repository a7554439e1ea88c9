"""A Design as the readable tables and the JSON object of ``hosttool design``."""

from __future__ import annotations

import dataclasses
import math
from typing import Any

from hosttool import __version__
from hosttool.design.filters import BiquadStage, FirStage
from hosttool.design.fixedpoint import QFormat
from hosttool.design.resolve import LIN_FRAC, Design
from hosttool.physics.adc import PEAK_TO_PEAK_OVER_RMS
from hosttool.util.tables import Row, num, sections, table


def _q(word: int, frac: int) -> str:
    return QFormat(word, frac).name


def design_constant_rows(d: Design) -> list[tuple[str, float, int, str, str]]:
    """(name, real value, integer, Q format, note) for every constant the firmware uses."""
    c, g = d.constants, d.guard_bits
    rows: list[tuple[str, float, int, str, str]] = [
        ("offset", c.offset / 2 ** g, c.offset, _q(32, g), "zero, ADC counts"),
        ("scale_mul", d.scale.realised(c.scale_mul), c.scale_mul, _q(32, d.scale.shift),
         f"output LSB per chain LSB (ideal {d.scale.ideal:.10g})"),
    ]
    for i, stage in enumerate(d.stages):
        if isinstance(stage, FirStage):
            f = stage.fmt
            for k, (real, t) in enumerate(zip(stage.taps, stage.taps_int, strict=True)):
                rows.append((f"stage{i + 1}.h[{k}]", t / 2 ** f.frac, t, f.name,
                             f"design {real:.10g}"))
            continue
        for j, sec in enumerate(stage.sections):
            f = sec.fmt
            names = ("b0", "b1", "b2", "a1", "a2")
            ideal = (*sec.b, sec.a[1], sec.a[2])
            for name, real, t in zip(names, ideal, (*sec.b_int, *sec.a_int), strict=True):
                rows.append((f"stage{i + 1}.section{j + 1}.{name}", t / 2 ** f.frac, t, f.name,
                             f"design {real:.10g}"))
    if d.linearisation is not None:
        for k, (real, t) in enumerate(zip(d.linearisation.coeffs, c.lin, strict=True)):
            rows.append((f"lin.c{k}", t / 2 ** LIN_FRAC, t, _q(32, LIN_FRAC),
                         f"design {real:.10g}, variable s / 2^{d.linearisation.norm_shift}"))
    if d.temperature is not None:
        tc = d.temperature
        rows.append(("tc_zero", tc.realised_zero(c.tc_zero), c.tc_zero,
                     _q(32, tc.zero_shift), "output LSB per 0.01 C"))
        rows.append(("tc_span", tc.realised_span(c.tc_span), c.tc_span,
                     _q(32, tc.span_shift + LIN_FRAC), "gain per 0.01 C"))
    return rows


def design_json(d: Design) -> dict[str, Any]:
    """The stable JSON object of ``hosttool design --json`` (keys documented in the README)."""
    stages: list[dict[str, Any]] = []
    for i, stage in enumerate(d.stages):
        entry: dict[str, Any] = {"index": i + 1, "kind": stage.kind, "rate_hz": stage.rate_hz,
                                 "decimation": stage.decimation}
        if isinstance(stage, FirStage):
            entry |= {"format": stage.fmt.name, "frac_bits": stage.fmt.frac,
                      "taps": list(stage.taps), "taps_int": list(stage.taps_int)}
        else:
            assert isinstance(stage, BiquadStage)
            entry["sections"] = [{"format": s.fmt.name, "frac_bits": s.fmt.frac,
                                  "b": list(s.b), "a": list(s.a), "b_int": list(s.b_int),
                                  "a_int": list(s.a_int)} for s in stage.sections]
        stages.append(entry)
    c = d.constants
    out: dict[str, Any] = {
        "tool_version": __version__, "kind": "design",
        "spec_name": d.spec.name, "spec_sha256": d.spec.sha256,
        "guard_bits": d.guard_bits, "input_bound": d.input_bound,
        "decimation": d.decimation, "output_rate_hz": d.output_rate_hz,
        "output_lsb": d.spec.output.resolution, "unit": d.spec.sensor.unit,
        "constants": [{"name": n, "value": v, "integer": i, "format": f, "note": note}
                      for n, v, i, f, note in design_constant_rows(d)],
        "unit_constants": dataclasses.asdict(c) | {"lin": list(c.lin)},
        "stages": stages,
        "scale": {"multiplier": c.scale_mul, "shift": d.scale.shift,
                  "ideal": d.scale.ideal, "realised": d.scale.realised(c.scale_mul),
                  "relative_error": d.scale.realised(c.scale_mul) / d.scale.ideal - 1},
        "linearisation": None if d.linearisation is None else {
            "mode": d.linearisation.mode, "norm_shift": d.linearisation.norm_shift,
            "coeffs": list(d.linearisation.coeffs), "coeffs_int": list(c.lin),
            "fit_residual_lsb": d.linearisation.fit_residual_lsb},
        "temperature": None if d.temperature is None else dataclasses.asdict(d.temperature),
        "nodes": [{"name": n.name, "bound": n.bound, "word": n.word,
                   "headroom_bits": n.headroom_bits, "rate_hz": n.rate_hz} for n in d.all_nodes],
        "errors": [dataclasses.asdict(e) for e in d.errors],
        "error_bound_lsb": d.error_bound_lsb,
        "error_rms_lsb": d.error_rms_lsb,
        "design_errors": [dataclasses.asdict(e) for e in d.design_errors],
        "ideal_error_bound_lsb": d.ideal_error_bound_lsb,
        "output_bound_lsb": d.output_bound_lsb,
        "output_noise_rms_lsb": d.output_noise_rms_lsb,
        "response": dataclasses.asdict(d.filter_report),
        "warnings": list(d.warnings),
    }
    return _finite(out)


def _finite(value: Any) -> Any:
    """JSON has no infinity: +-inf becomes None (documented: "no finite value")."""
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: _finite(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_finite(v) for v in value]
    return value


def design_text(d: Design, *, with_warnings: bool = True) -> str:
    """The readable tables of ``hosttool design`` (warnings last, if asked)."""
    unit = d.spec.sensor.unit
    lsb = d.output_step
    chain: list[Row] = [
        ("ADC codes", f"{d.spec.adc.bits} bits", f"{d.spec.adc.data_rate_sps:g} samples/s"),
        ("guard bits G", f"{d.guard_bits}", f"chain word = counts x 2^{d.guard_bits}, int32"),
        ("input bound", f"2^{int(math.log2(d.input_bound))}", "|code - offset| over the ADC range"),
        ("decimation", f"{d.decimation}", f"output {d.output_rate_hz:g} samples/s"),
        ("output LSB", f"{lsb:g} {unit}", f"bound {d.output_bound_lsb:.4g} LSB before saturation"),
        ("ADC noise at the output", f"{d.output_noise_rms_lsb:.3g} LSB RMS",
         f"noise-free {d.to_units(PEAK_TO_PEAK_OVER_RMS * d.output_noise_rms_lsb):.3g} {unit} "
         f"(6.6 x RMS; at the ADC {d.budget.noise_free_resolution:.3g} {unit})"),
    ]
    consts: list[Row] = [(n, f"{i}", f"{f}  = {v:.10g}  {note}")
                         for n, v, i, f, note in design_constant_rows(d)]
    nodes: list[Row] = [(n.name, f"{n.bound:.4g}", f"int{n.word}, headroom "
                         f"{n.headroom_bits:.2f} bits, {n.rate_hz:g} Hz") for n in d.all_nodes]
    errs: list[Row] = [(e.name, f"{e.worst_lsb:.4g} LSB", f"RMS {e.rms_lsb:.3g} LSB")
                       for e in d.errors]
    errs.append(("total, proven", f"{d.error_bound_lsb:.4g} LSB",
                 f"= {d.to_units(d.error_bound_lsb):.4g} {unit}; predicted RMS "
                 f"{d.error_rms_lsb:.3g} LSB"))
    ideal: list[Row] = [(e.name, f"{e.worst_lsb:.4g} LSB", "") for e in d.design_errors]
    ideal.append(("total against the ideal design", f"{d.ideal_error_bound_lsb:.4g} LSB",
                  f"= {d.to_units(d.ideal_error_bound_lsb):.4g} {unit}"))
    parts = [f"{d.spec.name}: fixed-point design (spec sha256 {d.spec.sha256[:16]}...)",
             table("Chain", chain), table("Constants", consts),
             table("Headroom (worst case over the whole ADC range)", nodes),
             table("Error against the float64 reference (realised constants)", errs),
             table("Realised constants against the ideal design", ideal),
             table("Filter response", response_rows(d))]
    if with_warnings and d.warnings:
        parts.append("\n".join(f"warning: {w}" for w in d.warnings))
    return sections(parts)


def response_rows(d: Design) -> list[Row]:
    """The filter response, realised against ideal, one row per figure."""
    r = d.filter_report
    ideal, real = dataclasses.asdict(r.ideal), dataclasses.asdict(r.realised)
    stop = ("no stopband: the spec has no lowpass stage, or its band reaches it"
            if r.stopband_edge_hz is None else f"stopband from {num(r.stopband_edge_hz)} Hz")
    rows: list[Row] = [("passband", f"0 .. {num(r.passband_edge_hz)} Hz", stop)]
    labels = {"passband_droop_db": "passband droop (at most, below DC)",
              "passband_peak_db": "passband peak (above DC)", "stopband_attenuation_db":
              "stopband attenuation", "rejection_50hz_db": "50 Hz, digital filters",
              "rejection_60hz_db": "60 Hz, digital filters",
              "rejection_50hz_with_sinc_db": "50 Hz, with the ADC's sinc",
              "rejection_60hz_with_sinc_db": "60 Hz, with the ADC's sinc",
              "group_delay_dc_s": "group delay at DC", "settling_0p1pct_s": "settling to 0.1 %",
              "settling_1lsb_s": "settling to 1 LSB"}
    for key, value in real.items():
        if value is None:
            continue
        unit = "dB" if key.endswith("_db") else "s"
        rows.append((labels.get(key, key), f"{value:.5g} {unit}",
                     f"ideal {ideal[key]:.5g} {unit}"))
    rows.append(("passband deviation", f"{num(r.max_passband_deviation_db)} dB",
                 "largest |realised - ideal|"))
    for stage in r.stages:
        for p in stage.poles:
            rows.append((f"stage{stage.index + 1} section{p.section + 1} pole",
                         f"r {p.realised_radius:.9f}",
                         f"design {p.design_radius:.9f}, {p.realised_angle_hz:.5g} Hz "
                         f"(design {p.design_angle_hz:.5g}); radius error "
                         f"{p.radius_error_of_margin:+.2e} of (1 - r)"))
    return rows
