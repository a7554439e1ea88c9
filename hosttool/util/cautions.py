"""The safety cautions every output that judges an instrument carries (one text, one place)."""

from __future__ import annotations

#: Printed by calibrate and batch, written into CAL.json, shown in reports and certificates.
SAFETY = (
    "Weighing for trade needs type approval and verification by the competent "
    "legal-metrology authority; these figures are no such verification.",
    "Lifting equipment and pressure systems follow local codes and licensed practice; the "
    "tool's figures do not replace them.",
)

#: What a proof of the arithmetic covers, for the verify report.
ARITHMETIC_SCOPE = (
    "These figures prove the arithmetic of the firmware against its own float64 reference "
    "and the bridge model; they say nothing of the real sensor, its mounting, creep, drift or "
    "the installation."
)
