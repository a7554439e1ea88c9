"""``hosttool check``: the sensor/ADC budget of a spec as readable tables or one JSON object."""

from __future__ import annotations

from dataclasses import asdict
from pathlib import Path

from hosttool import __version__
from hosttool.design.budget import Budget, compute_budget
from hosttool.spec.schema import load_spec
from hosttool.util.tables import Row, num, sections, table


def run_check(spec_path: Path) -> Budget:
    """The budget of the spec file at ``spec_path``."""
    return compute_budget(load_spec(spec_path))


def budget_json(b: Budget) -> dict[str, object]:
    """The stable JSON object of ``hosttool check --json``."""
    data = asdict(b)
    data["mains"] = [asdict(m) | {"alias_band_hz": list(m.alias_band_hz)} for m in b.mains]
    data["warnings"] = list(b.warnings)
    return {"tool_version": __version__, "kind": "budget", **data}


def budget_text(b: Budget, *, with_warnings: bool = True) -> str:
    """The budget as the readable tables of ``hosttool check`` (warnings last, if asked)."""
    u = b.unit
    sensor_rows: list[Row] = [
        ("measuring range", f"{num(b.range_min)} .. {num(b.range_max)} {u}", ""),
        ("output step", f"{num(b.resolution)} {u}", f"{b.requested_divisions:,.0f} steps"),
        ("bridge resistance", f"{num(b.bridge_resistance_ohm)} ohm",
         "seen by the excitation, leads included"),
        ("excitation", f"{num(b.excitation_v)} V",
         f"{num(b.excitation_current_ma, 4)} mA, {num(b.excitation_power_mw, 4)} mW"),
        ("full-scale output", f"{num(b.full_scale_mv_per_v)} mV/V",
         f"{num(b.full_scale_output_mv)} mV"),
        ("zero offset (worst)", f"{num(b.zero_offset_mv_per_v)} mV/V", ""),
        ("sensitivity", f"{num(b.sensitivity_uv_per_v_per_unit)} uV/V per {u}", ""),
        ("bridge nonlinearity", f"{num(b.nonlinearity_pct_fs, 4)} % FS",
         "exact bridge vs its tangent, % of the tangent's full scale"),
        *([("sensor nonlinearity", f"{num(b.sensor_nonlinearity_pct_fs, 4)} % FS",
            "datasheet figure, informative")] if b.sensor_nonlinearity_pct_fs is not None
          else []),
        ("lead desensitisation", f"{b.lead_desensitisation:.6f}", "sensitivity factor"),
    ]
    adc_rows: list[Row] = [
        ("PGA gain", f"{b.pga_gain}", "chosen (auto)" if b.pga_auto else "from spec"),
        ("input range", f"+-{num(b.input_range_mv)} mV", f"1 LSB = {num(b.lsb_nv)} nV"),
        ("peak input", f"{num(b.peak_input_mv)} mV", f"{b.range_used_pct:.1f} % of range"),
        ("counts per unit", f"{num(b.counts_per_unit)} /{u}",
         f"{num(b.counts_per_lsb)} per output step"),
        ("noise", f"{num(b.noise_counts_rms, 4)} counts RMS",
         f"{num(b.total_noise_counts_rms, 4)} with the code rounding; "
         f"{b.effective_bits:.2f} effective bits"),
        ("noise-free", f"{b.noise_free_bits:.2f} bits",
         f"{num(b.noise_free_counts, 4)} counts p-p (6.6 x RMS)"),
        ("noise-free resolution", f"{num(b.noise_free_resolution, 4)} {u}",
         f"{b.noise_free_divisions:,.0f} divisions over the span"),
    ]
    mains_rows: list[Row] = []
    for m in b.mains:
        notch = "at a sinc notch" if m.rejection_db >= 300 else f"{m.rejection_db:.1f} dB"
        mains_rows.append((f"{m.frequency_hz:g} Hz", notch,
                           f"worst {m.worst_rejection_db:.1f} dB within +-1 %, lands at "
                           f"{m.alias_band_hz[0]:.3g}..{m.alias_band_hz[1]:.3g} Hz"
                           + (" (in band)" if m.in_band else "")))
    mains_rows.append(("signal band", f"0 .. {num(b.signal_band_hz)} Hz", ""))
    parts = [f"{b.spec_name}: sensor and ADC budget",
             table("Bridge", sensor_rows), table("ADC", adc_rows),
             table("Mains through the ADC's sinc filter", mains_rows)]
    if with_warnings and b.warnings:
        parts.append("\n".join(f"warning: {w}" for w in b.warnings))
    return sections(parts)
