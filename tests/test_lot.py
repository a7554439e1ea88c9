"""Lot statistics against textbook formulas and a reference library.

Sources: Cpk = min(USL - mean, mean - LSL) / (3 s), s the sample standard deviation
(Montgomery, Introduction to Statistical Quality Control; from memory), computed here with
the standard library's statistics module; the MAD from scipy.stats.median_abs_deviation;
the modified z-score 0.6745 (x - median) / MAD and its 3.5 threshold from Iglewicz and
Hoaglin, How to Detect and Handle Outliers (1993; from memory).
"""

from __future__ import annotations

import statistics

import numpy as np
import pytest
from scipy.stats import median_abs_deviation

from hosttool.production.lot import cpk, lot_stats, modified_z


def test_cpk_two_sided_and_one_sided_against_the_textbook_formula() -> None:
    rng = np.random.default_rng(7)
    x = rng.normal(0.3, 0.2, 50)
    mean, s = statistics.mean(x.tolist()), statistics.stdev(x.tolist())
    assert cpk(x, -1.0, 1.0) == pytest.approx(min(1.0 - mean, mean + 1.0) / (3 * s))
    assert cpk(x, None, 1.0) == pytest.approx((1.0 - mean) / (3 * s))
    assert cpk(x[:1], -1.0, 1.0) is None and cpk(np.ones(5), -1.0, 1.0) is None


def test_modified_z_against_scipy_mad() -> None:
    x = np.array([1.0, 1.2, 0.9, 1.1, 1.05, 0.95, 4.0])
    mad = median_abs_deviation(x)
    expected = 0.6745 * (x - np.median(x)) / mad
    scores = modified_z(x)
    assert scores is not None
    np.testing.assert_allclose(scores, expected)
    assert np.flatnonzero(np.abs(scores) > 3.5).tolist() == [6]


def _row(serial: str, zero: float, station: str, verdict: str = "pass",
         revision: int = 1, current: int = 1) -> dict[str, object]:
    return {"serial": serial, "revision": revision, "current": current, "station": station,
            "verdict": verdict, "spec_name": "s",
            "figures": {"zero_mv_per_v": zero, "span_deviation_pct": 0.0, "max_error": 0.01},
            "criteria": [{"key": "zero_offset", "label": "zero offset", "value": abs(zero),
                          "limit": 0.5, "unit": "mV/V", "source": "x", "pass": True},
                         {"key": "max_error", "label": "error", "value": 0.01,
                          "limit": 0.05, "unit": "kg", "source": "y", "pass": True}]}


def test_lot_stats_flags_a_passed_unit_far_from_its_lot_and_yields_by_station() -> None:
    rng = np.random.default_rng(3)
    zeros = rng.normal(0.0, 0.02, 30)
    rows = [_row(f"U{i:02d}", float(z), "A" if i % 2 else "B") for i, z in enumerate(zeros)]
    rows[5] = _row("U05", 0.3, "A")                       # passes (limit 0.5) but stands out
    rows.append(_row("U07", 0.9, "A", verdict="fail", current=0))
    rows[7] = _row("U07", float(zeros[7]), "A", revision=2)
    stats = lot_stats("L", rows)
    assert stats.units == 30 and stats.passed == 30
    flagged = [(o.serial, o.quantity, o.passed) for o in stats.outliers]
    assert ("U05", "zero", True) in flagged
    zero = next(c for c in stats.capability if c.key == "zero_offset")
    data = [float(r["figures"]["zero_mv_per_v"]) for r in rows if r["current"]]  # type: ignore[index]
    mean, s = statistics.mean(data), statistics.stdev(data)
    assert zero.cpk == pytest.approx(min(0.5 - mean, mean + 0.5) / (3 * s))
    yields = {s.station: (s.units, s.passed, s.first_tries, s.first_passed)
              for s in stats.stations}
    assert yields == {"A": (15, 15, 15, 14), "B": (15, 15, 15, 15)}
