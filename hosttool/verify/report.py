"""The self-contained HTML report of a verification: plots inline as PNG, tables, cautions.

The page is templates/verify_report.html.j2 (jinja2, autoescape on); this module builds its
plots and tables from a Verification.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from hosttool import __version__  # noqa: E402
from hosttool.design.response import magnitude_response  # noqa: E402
from hosttool.physics.adc import adc_sinc_magnitude, alias_hz  # noqa: E402
from hosttool.util.atomic import write_atomic  # noqa: E402
from hosttool.util.cautions import ARITHMETIC_SCOPE, SAFETY  # noqa: E402
from hosttool.util.pages import png_data_uri, render_page  # noqa: E402
from hosttool.verify.proof import Verification  # noqa: E402

REALISED = "#1b6f8a"
IDEAL = "#8c8c8c"
SINC = "#b5651d"
MAINS = "#aa3355"
BOUND = "#5a8f29"

CAUTIONS = (ARITHMETIC_SCOPE, *SAFETY)


def _magnitude(v: Verification) -> str:
    d = v.design
    fs = d.spec.adc.data_rate_sps
    f = np.linspace(fs / 20000, fs / 2, 4000)
    fig, ax = plt.subplots(figsize=(8, 3.6))
    sinc = adc_sinc_magnitude(d.spec.adc, f)
    if d.stages:
        real = magnitude_response(d.stages, f, realised=True)
        ideal = magnitude_response(d.stages, f, realised=False)
        ax.plot(f, 20 * np.log10(np.maximum(ideal, 1e-15)), color=IDEAL, ls="--",
                label="filters, ideal")
        ax.plot(f, 20 * np.log10(np.maximum(real, 1e-15)), color=REALISED,
                label="filters, quantised")
        ax.plot(f, 20 * np.log10(np.maximum(real * sinc, 1e-15)), color=SINC, lw=0.8,
                label="with the ADC's sinc")
    else:
        ax.plot(f, 20 * np.log10(np.maximum(sinc, 1e-15)), color=SINC, label="ADC's sinc")
    for mains in (50.0, 60.0):
        landing = alias_hz(mains, fs)
        if landing > 0:  # at 0 Hz it sits in a sinc notch, off this log axis
            ax.axvline(landing, color=MAINS, ls=":", lw=1)
    ax.set_ylim(-180, 10)
    ax.set_xscale("log")
    ax.set_xlabel("frequency at the ADC output, Hz "
                  "(dotted: where 50 and 60 Hz land, unless at 0 Hz)")
    ax.set_ylabel("dB")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(loc="lower left", fontsize=8)
    return png_data_uri(fig)


def _step(v: Verification) -> str:
    d = v.design
    step = next(t for t in v.tests if t.name == "step_full_scale")
    assert step.trace is not None
    out, ref = step.trace
    t = np.arange(out.size) / d.output_rate_hz
    start = int(step.figures["step_output_index"])
    fig, (ax1, ax2) = plt.subplots(2, 1, figsize=(8, 4.6), sharex=True)
    ax1.plot(t, out, color=REALISED, drawstyle="steps-post", label="integer model")
    ax1.plot(t, ref, color=IDEAL, ls="--", label="float64 reference")
    ax1.set_ylabel("output, LSB")
    ax1.legend(fontsize=8)
    ax2.plot(t[start:], out[start:] - out[-1], color=REALISED, drawstyle="steps-post")
    ax2.axhspan(-1, 1, color=BOUND, alpha=0.2, label="+-1 LSB")
    settle = d.filter_report.realised.settling_1lsb_s
    ax2.axvline(t[start] + settle, color=MAINS, ls=":", label="designed settling")
    ax2.set_ylim(-8, 8)
    ax2.set_ylabel("distance to final, LSB")
    ax2.set_xlabel("time, s")
    ax2.legend(fontsize=8)
    return png_data_uri(fig)


def _static_error(v: Verification) -> str:
    s = v.static
    fig, (ax1, ax2) = plt.subplots(1, 2, figsize=(9, 3.4))
    ax1.plot(s.code_bins, s.max_error_by_bin, color=REALISED, lw=0.8)
    ax1.axhline(s.bound_lsb, color=MAINS, ls="--", label="proven bound")
    ax1.ticklabel_format(axis="y", useOffset=False)
    ax1.set_xlabel("ADC code")
    ax1.set_ylabel("largest |error| in bin, LSB")
    ax1.legend(fontsize=8)
    edges, counts = s.error_histogram
    ax2.bar(0.5 * (edges[1:] + edges[:-1]), counts, width=np.diff(edges), color=REALISED,
            edgecolor="white", linewidth=0.5)
    ax2.set_xlabel("error, LSB (static path, every code)")
    ax2.set_ylabel("codes")
    return png_data_uri(fig)


def _end_to_end(v: Verification) -> str:
    """Reading minus measurand against the measurand, the budget drawn as two lines."""
    e = v.accuracy
    assert e is not None
    unit = v.design.spec.sensor.unit
    fig, ax = plt.subplots(figsize=(8, 3.6))
    labels = [f"{t:g} C" for t in e.temperatures_c] or ["total"]
    for row, label in zip(e.total, labels, strict=True):
        ax.plot(e.measurand, row, lw=0.8, label=f"total, {label}" if e.temperatures_c
                else "total (reading - measurand)")
    ax.plot(e.measurand, e.model.max(axis=0), color=IDEAL, ls="--", lw=1,
            label="model part (largest over temperature)")
    if e.budget is not None:
        for sign in (1, -1):
            ax.axhline(sign * e.budget, color=MAINS, ls=":",
                       label="error budget" if sign > 0 else None)
    ax.ticklabel_format(axis="y", useOffset=False)
    ax.set_xlabel(f"measurand, {unit}")
    ax.set_ylabel(f"error, {unit}")
    ax.legend(fontsize=7)
    return png_data_uri(fig)


def _headroom(v: Verification) -> str:
    nodes = v.design.all_nodes
    fig, ax = plt.subplots(figsize=(8, 0.45 * len(nodes) + 1))
    bits = [n.headroom_bits for n in nodes]
    ax.barh([n.name for n in nodes], bits, color=[REALISED if n.word == 32 else SINC
                                                  for n in nodes])
    ax.set_xlabel("headroom above the proven worst case, bits (teal int32, brown int64)")
    ax.invert_yaxis()
    return png_data_uri(fig)


def _section(title: str, *, headers: list[str] | None = None,
             rows: list[list[str]] | None = None, plots: tuple[tuple[str, str], ...] = ()
             ) -> dict[str, Any]:
    table = {"headers": headers, "rows": rows} if headers is not None else None
    return {"title": title, "table": table,
            "plots": [{"alt": alt, "uri": uri} for alt, uri in plots]}


def report_html(v: Verification) -> str:
    """The whole report as one HTML document (templates/verify_report.html.j2)."""
    d = v.design
    unit = d.spec.sensor.unit
    tests = [[t.name, t.description, f"{t.max_error_lsb:.4g}", f"{t.bound_lsb:.4g}",
              f"{t.rms_error_lsb:.3g}", f"{d.to_units(t.max_error_lsb):.4g}",
              "-" if t.sqnr_db is None else f"{t.sqnr_db:.1f}",
              str(sum(t.saturations.values())),
              "-" if t.engines_agree is None else ("yes" if t.engines_agree else "NO"),
              "pass" if t.passed else "FAIL"] for t in v.tests]
    s = v.static
    static = [["every code, " + (", ".join(f"{t:g} C" for t in s.temperatures_c) or
                                 "no temperature input"),
               f"{s.max_error_lsb:.4g}", f"{s.bound_lsb:.4g}", f"{s.mean_abs_error_lsb:.4g}",
               str(s.saturations), "yes" if s.monotonic else "NO",
               "pass" if s.passed else "FAIL"]]
    e = v.accuracy
    budget = ("no error budget in the spec" if v.budget_units is None or v.budget_used is None
              else f"budget {v.budget_units:g} {unit}; the reading against the measurand "
              f"uses {v.budget_used:.1%} of it")
    accuracy = [] if e is None else [[
        f"{e.worst:.4g}", f"{e.worst_at:.6g}",
        "-" if e.worst_temperature_c is None else f"{e.worst_temperature_c:g}",
        f"{e.worst_model:.4g}", f"{e.worst_arithmetic:.4g}", f"{e.sensor_nonlinearity:.4g}",
        "-" if e.budget is None else f"{e.budget:g}",
        "-" if e.passed is None else ("pass" if e.passed else "FAIL")]]
    summary = (f"Proven error bound {d.error_bound_lsb:.4g} LSB "
               f"({d.to_units(d.error_bound_lsb):.4g} {unit}) against the float64 reference "
               f"with the realised constants; {d.ideal_error_bound_lsb:.4g} LSB against the "
               f"ideal design; predicted RMS {d.error_rms_lsb:.3g} LSB. {budget}.")
    sections = [] if e is None else [
        _section("End to end: reading against the measurand",
                 headers=[f"largest |error| {unit}", f"at {unit}", "at C",
                          f"model {unit}", f"arithmetic {unit}",
                          f"bridge nonlinearity {unit}", f"budget {unit}", "verdict"],
                 rows=accuracy, plots=(("error against measurand", _end_to_end(v)),))]
    sections += [
        _section("Static path", headers=["inputs", "max |error| LSB", "bound LSB",
                                         "mean |error| LSB", "saturations", "monotonic",
                                         "verdict"], rows=static,
                 plots=(("static error against code", _static_error(v)),)),
        _section("Dynamic tests", headers=["test", "stimulus", "max |error| LSB", "bound LSB",
                                           "RMS LSB", f"max |error| {unit}", "SQNR dB",
                                           "saturations", "engines agree", "verdict"],
                 rows=tests),
        _section("Limit cycles and dead band (zero and constant input, chain LSB)",
                 headers=["section", "method", "region searched", "outcome"],
                 rows=[[c.name, c.method, c.region, c.statement]
                       for c in v.limit_cycles.sections]
                 + [["all sections", "", "", v.limit_cycles.statement]]),
        _section("Magnitude response", plots=(("magnitude response", _magnitude(v)),)),
        _section("Step response", plots=(("step response", _step(v)),)),
        _section("Headroom per node", plots=(("headroom per node", _headroom(v)),)),
    ]
    return render_page("verify_report.html.j2", name=d.spec.name, version=__version__,
                       sha256=d.spec.sha256, seed=v.seed, engines=", ".join(v.engines),
                       passed=v.passed, summary=summary, reasons=list(v.reasons),
                       sections=sections, cautions=list(CAUTIONS))


def write_report(v: Verification, path: Path) -> Path:
    """Write the report atomically."""
    return write_atomic(path, report_html(v))
