"""The self-contained HTML report of a verification: plots inline as PNG, tables, cautions."""

from __future__ import annotations

import base64
import html
import io
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from hosttool import __version__  # noqa: E402
from hosttool.design.response import magnitude_response  # noqa: E402
from hosttool.physics.adc import adc_sinc_magnitude, alias_hz  # noqa: E402
from hosttool.util.atomic import write_atomic  # noqa: E402
from hosttool.util.cautions import ARITHMETIC_SCOPE, SAFETY  # noqa: E402
from hosttool.verify.proof import Verification  # noqa: E402

REALISED = "#1b6f8a"
IDEAL = "#8c8c8c"
SINC = "#b5651d"
MAINS = "#aa3355"
BOUND = "#5a8f29"

CAUTIONS = (ARITHMETIC_SCOPE, *SAFETY)


def _png(fig: plt.Figure) -> str:
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=96, bbox_inches="tight")
    plt.close(fig)
    data = base64.b64encode(buffer.getvalue()).decode("ascii")
    return f'<img alt="plot" src="data:image/png;base64,{data}">'


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
    return _png(fig)


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
    return _png(fig)


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
    return _png(fig)


def _headroom(v: Verification) -> str:
    nodes = v.design.all_nodes
    fig, ax = plt.subplots(figsize=(8, 0.45 * len(nodes) + 1))
    bits = [n.headroom_bits for n in nodes]
    ax.barh([n.name for n in nodes], bits, color=[REALISED if n.word == 32 else SINC
                                                  for n in nodes])
    ax.set_xlabel("headroom above the proven worst case, bits (teal int32, brown int64)")
    ax.invert_yaxis()
    return _png(fig)


def _table(headers: list[str], rows: list[list[str]]) -> str:
    head = "".join(f"<th>{html.escape(h)}</th>" for h in headers)
    body = "".join("<tr>" + "".join(f"<td>{html.escape(c)}</td>" for c in r) + "</tr>"
                   for r in rows)
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def report_html(v: Verification) -> str:
    """The whole report as one HTML document."""
    d = v.design
    lsb, unit = d.spec.output.resolution, d.spec.sensor.unit
    verdict = "PASS" if v.passed else "FAIL"
    tests = [[t.name, t.description, f"{t.max_error_lsb:.4g}", f"{t.bound_lsb:.4g}",
              f"{t.rms_error_lsb:.3g}", f"{t.max_error_lsb * lsb:.4g}",
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
    reasons = "".join(f"<li>{html.escape(r)}</li>" for r in v.reasons) or "<li>none</li>"
    budget = ("no error budget in the spec" if v.budget_units is None else
              f"budget {v.budget_units:g} {unit}; the arithmetic uses at most "
              f"{v.budget_used:.1%} of it")
    cautions = "".join(f"<li>{html.escape(c)}</li>" for c in CAUTIONS)
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<title>hosttool verification: {html.escape(d.spec.name)}</title>
<style>
body {{ font-family: sans-serif; margin: 2em; max-width: 70em; color: #222; }}
h1 {{ font-size: 1.4em; }} h2 {{ font-size: 1.1em; margin-top: 1.6em; }}
table {{ border-collapse: collapse; font-size: 0.85em; }}
td, th {{ border: 1px solid #ccc; padding: 0.25em 0.5em; text-align: left; }}
.verdict {{ font-size: 1.3em; font-weight: bold; padding: 0.3em 0.6em; display: inline-block;
           border: 2px solid {'#2e7d32' if v.passed else '#b00020'}; }}
.small {{ color: #555; font-size: 0.85em; }}
</style></head><body>
<h1>Verification of {html.escape(d.spec.name)}</h1>
<p class="small">hosttool {__version__}; spec SHA-256 {d.spec.sha256}; seed {v.seed};
engines: {html.escape(", ".join(v.engines))}</p>
<p><span class="verdict" id="verdict">{verdict}</span></p>
<p>Proven error bound {d.error_bound_lsb:.4g} LSB ({d.error_bound_lsb * lsb:.4g} {unit})
against the float64 reference with the realised constants; {d.ideal_error_bound_lsb:.4g} LSB
against the ideal design; predicted RMS {d.error_rms_lsb:.3g} LSB. {html.escape(budget)}.</p>
<h2>Reasons for failure</h2><ul>{reasons}</ul>
<h2>Static path</h2>
{_table(["inputs", "max |error| LSB", "bound LSB", "mean |error| LSB", "saturations",
         "monotonic", "verdict"], static)}
{_static_error(v)}
<h2>Dynamic tests</h2>
{_table(["test", "stimulus", "max |error| LSB", "bound LSB", "RMS LSB", f"max |error| {unit}",
         "SQNR dB", "saturations", "engines agree", "verdict"], tests)}
<h2>Magnitude response</h2>
{_magnitude(v)}
<h2>Step response</h2>
{_step(v)}
<h2>Headroom per node</h2>
{_headroom(v)}
<h2>Cautions</h2><ul>{cautions}</ul>
</body></html>
"""


def write_report(v: Verification, path: Path) -> Path:
    """Write the report atomically."""
    return write_atomic(path, report_html(v))
