"""Per-unit calibration certificates: one printable HTML page per passed unit, from its row
in the production record (templates/certificate.html.j2, autoescaped).

The page holds the unit's identity and traceability (spec, readings, station, operator,
tool version, image), the constants written into its block, every reading with its error
against its limit (and a plot of both), the criteria table, the reference standards used
with their certificates, and the safety cautions. Its print CSS sets A4 pages; a unit of
a dozen readings prints on one or two.
"""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path
from typing import Any

from hosttool.errors import InputError
from hosttool.production.record import Filter, Record, decode_row
from hosttool.util.atomic import write_atomic
from hosttool.util.cautions import SAFETY
from hosttool.util.pages import png_data_uri, render_page

WITHIN = "#2c6e3f"
LIMIT = "#a3162a"
DOWN = "#6a4c93"


def _g(value: float | None, digits: int = 5) -> str:
    return "-" if value is None else f"{value:.{digits}g}"


def certificate_name(row: dict[str, Any]) -> str:
    """The page's file name: ``<serial>.r<revision>.html`` (beside the image)."""
    return f"{row['serial']}.r{row['revision']}.html"


def _constants(constants: dict[str, Any]) -> list[tuple[str, int]]:
    rows: list[tuple[str, int]] = [("offset", constants["offset"]),
                                   ("scale_mul", constants["scale_mul"])]
    rows += [(f"lin[{k}]", v) for k, v in enumerate(constants.get("lin", []))]
    return rows + [("tc_zero", constants["tc_zero"]), ("tc_span", constants["tc_span"])]


def _plot(points: list[dict[str, Any]], unit: str) -> str | None:
    """Each reading's error against its limit, as a PNG data URI (None without errors)."""
    shown = [p for p in points if p["error"] is not None]
    if not shown:
        return None
    import matplotlib  # deferred: matplotlib only where a page has plots

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(7.2, 2.6))
    limited = sorted((p["reference"], p["limit"]) for p in shown if p["limit"] is not None)
    if limited:
        ref = [r for r, _ in limited]
        lim = [v for _, v in limited]
        ax.plot(ref, lim, color=LIMIT, lw=2.0, drawstyle="steps-mid", label="limit")
        ax.plot(ref, [-v for v in lim], color=LIMIT, lw=2.0, drawstyle="steps-mid")
    for direction, colour, marker in (("up", WITHIN, "o"), ("down", DOWN, "s")):
        chosen = [p for p in shown if p["direction"] == direction]
        if chosen:
            ax.plot([p["reference"] for p in chosen], [p["error"] for p in chosen],
                    ls="none", marker=marker, ms=4, color=colour, label=f"error, {direction}")
    ax.axhline(0.0, color="#999999", lw=0.6)
    ax.set_xlabel(f"reference ({unit})")
    ax.set_ylabel(f"error ({unit})")
    ax.legend(fontsize=7, loc="upper right", ncols=3)
    ax.grid(alpha=0.3)
    return png_data_uri(fig)


def certificate_html(row: dict[str, Any]) -> str:
    """The certificate of one recorded row (JSON columns decoded) of a passed unit."""
    unit = next((c["unit"] for c in row["criteria"] if c["key"] == "max_error"), "")
    if row["verdict"] != "pass":
        raise InputError(f"{row['serial']}: revision {row['revision']} failed its limits; a "
                         "certificate is written for a passed unit only")
    identity = [
        ("serial", row["serial"]), ("revision", str(row["revision"])),
        ("product spec", row["spec_name"]), ("spec SHA-256", row["spec_sha256"]),
        ("lot", row["lot"] or "-"), ("station", row["station"]),
        ("operator", row["operator"] or "-"), ("calibrated (UTC)", row["cal_time_utc"]),
        ("recorded (UTC)", row["recorded_utc"]),
        ("readings", f"{row['readings_file']} (SHA-256 {row['readings_sha256']})"),
        ("image", f"{row['hex_file']} (SHA-256 {row['hex_sha256']})"),
        ("tool", f"hosttool {row['tool_version'] or '(version not recorded)'}")]
    points = []
    for p in row["points"]:
        share = None if p["error"] is None or not p["limit"] else abs(p["error"]) / p["limit"]
        points.append({"line": p["line"], "reference": _g(p["reference"], 6),
                       "temperature": f"{p['temperature_c']:.2f}", "direction": p["direction"],
                       "output": _g(p["output"], 7), "error": _g(p["error"], 3),
                       "limit": _g(p["limit"], 3),
                       "share": "-" if share is None else f"{share * 100:.0f} %",
                       "over": share is not None and share > 1})
    criteria = [{"label": c["label"],
                 "value": "-" if c["value"] is None else f"{c['value']:.4g} {c['unit']}".strip(),
                 "limit": "-" if c["limit"] is None else f"{c['limit']:.4g} {c['unit']}".strip(),
                 "result": "reported" if c["limit"] is None else "pass" if c["pass"] else "FAIL",
                 "source": c["source"]} for c in row["criteria"]]
    standards = [{**s, "nominal": _g(s["nominal"], 8), "uncertainty": _g(s["uncertainty"], 3)}
                 for s in row["standards"]]
    return render_page("certificate.html.j2", serial=row["serial"], revision=row["revision"],
                       current=bool(row["current"]), identity=identity,
                       constants=_constants(row["constants"]), unit=unit, points=points,
                       plot=_plot(row["points"], unit), criteria=criteria,
                       standards=standards, cautions=list(SAFETY),
                       tool_version=row["tool_version"] or "?")


def write_certificate(row: dict[str, Any], path: Path) -> Path:
    """Write the certificate of one row to ``path`` (atomically)."""
    return write_atomic(path, certificate_html(row))


def recorded_row(record: Record, serial: str, revision: int | None) -> dict[str, Any]:
    """The serial's row (``revision``, else the current one), JSON decoded."""
    rows = record.select(Filter(serial=serial, current_only=revision is None))
    chosen = [r for r in rows if revision is None or r["revision"] == revision]
    if not chosen:
        which = "" if revision is None else f" revision {revision}"
        raise InputError(f"{serial}{which}: not in the record {record.where}")
    return decode_row(chosen[0])


def write_certificates(record: Record, folder: Path,
                       units: Iterable[tuple[str, int | None]]) -> dict[str, str]:
    """The certificate of each (serial, revision) into ``folder``, named as
    ``certificate_name``; returns serial -> file name."""
    written = {}
    for serial, revision in units:
        row = recorded_row(record, serial, revision)
        write_certificate(row, folder / certificate_name(row))
        written[serial] = certificate_name(row)
    return written
