"""The lot report: one self-contained HTML page from the production record (statistics in
lot.py, layout in templates/lot_report.html.j2, plots inline as PNG)."""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import numpy as np

from hosttool import __version__
from hosttool.errors import InputError
from hosttool.production.lot import OUTLIER_SCORE, QUANTITIES, TWO_SIDED, LotStats, lot_stats
from hosttool.util.atomic import write_atomic
from hosttool.util.cautions import SAFETY
from hosttool.util.pages import png_data_uri, render_page

BARS = "#3f7f9c"
FLAGGED = "#1f3b4d"
LIMIT = "#a3162a"
#: Cpk below this is marked in the table (a common target; common practice, no published
#: source).
CPK_FLOOR = 1.33


def _n(value: float | None, digits: int = 4) -> str:
    return "-" if value is None or not math.isfinite(value) else f"{value:.{digits}g}"


def _limits(stats: LotStats, criterion: str) -> tuple[float, ...]:
    limit = stats.limits.get(criterion)
    if limit is None:
        return ()
    return (-limit, limit) if criterion in TWO_SIDED else (limit,)


def _histograms(stats: LotStats) -> list[dict[str, str]]:
    import matplotlib  # deferred: matplotlib only where a page has plots

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    flagged = {(o.serial, o.quantity) for o in stats.outliers}
    plots = []
    for key, label, unit, criterion in QUANTITIES:
        data = stats.values[key]
        finite = data[np.isfinite(data)]
        if finite.size == 0:
            continue
        unit = unit or stats.units_of.get(criterion, "")
        limits = _limits(stats, criterion)
        fig, ax = plt.subplots(figsize=(4.6, 2.5))
        low = min([float(finite.min()), *limits])
        high = max([float(finite.max()), *limits])
        pad = (high - low) * 0.05 or 1.0
        bins = np.linspace(low - pad, high + pad, 31).tolist()
        serials = [s for s, v in zip(stats.serials, data, strict=True) if math.isfinite(v)]
        marked = np.array([(s, label) in flagged for s in serials], dtype=bool)
        ax.hist([finite[~marked], finite[marked]], bins=bins, stacked=True,
                color=[BARS, FLAGGED], label=["units", "flagged"])
        for limit in limits:
            ax.axvline(limit, color=LIMIT, lw=1.4)
        ax.set_xlabel(f"{label} ({unit})" if unit else label)
        ax.set_ylabel("units")
        ax.grid(alpha=0.3)
        plots.append({"title": f"{label}: {finite.size} units", "uri": png_data_uri(fig)})
    return plots


def lot_report_html(stats: LotStats, *, record: str) -> str:
    """The page of one lot."""
    capability = [{"label": c.label, "count": c.count, "mean": _n(c.mean), "std": _n(c.std),
                   "lsl": _n(c.lsl), "usl": _n(c.usl), "cpk": _n(c.cpk, 3),
                   "low": c.cpk is not None and c.cpk < CPK_FLOOR} for c in stats.capability]
    outliers = [{"serial": o.serial, "quantity": o.quantity, "value": _n(o.value),
                 "median": _n(o.median), "score": f"{o.score:+.1f}",
                 "verdict": "passed" if o.passed else "failed"} for o in stats.outliers]
    stations = [{"station": s.station, "units": s.units, "passed": s.passed,
                 "yield_pct": _pct(s.passed, s.units), "first_tries": s.first_tries,
                 "first_pct": _pct(s.first_passed, s.first_tries)} for s in stats.stations]
    return render_page(
        "lot_report.html.j2", lot=stats.lot, specs=", ".join(stats.spec_names),
        units=stats.units, passed=stats.passed, yield_pct=_pct(stats.passed, stats.units),
        record=record, version=__version__, plots=_histograms(stats), capability=capability,
        cpk_floor=CPK_FLOOR, outliers=outliers, threshold=OUTLIER_SCORE, stations=stations,
        cautions=list(SAFETY))


def _pct(part: int, whole: int) -> str:
    return "-" if whole == 0 else f"{100 * part / whole:.1f} %"


def write_lot_report(lot: str, rows: list[dict[str, Any]], path: Path, *,
                     record: str) -> LotStats:
    """Write the report of ``lot`` from its rows (every revision, JSON decoded)."""
    if not rows:
        raise InputError(f"{lot}: no such lot in the record {record}")
    stats = lot_stats(lot, rows)
    write_atomic(path, lot_report_html(stats, record=record))
    return stats
