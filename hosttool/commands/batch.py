"""``hosttool batch``: a lot from one readings file to images and the production record."""

from __future__ import annotations

from pathlib import Path

from hosttool.production.batch import BatchSummary
from hosttool.util.cautions import SAFETY


def batch_text(summary: BatchSummary, *, readings: str, out: Path) -> str:
    """The summary of a batch: counts, then one line per unit that did not pass."""
    counts = {s: sum(o.status == s for o in summary.outcomes) for s in ("pass", "fail",
                                                                          "refused")}
    new = sum(o.new for o in summary.outcomes)
    lines = [f"{summary.spec_name}: batch of {len(summary.outcomes)} units from {readings}",
             f"  passed   {counts['pass']:6d}  (images in {out})",
             f"  failed   {counts['fail']:6d}  (no image)",
             f"  refused  {counts['refused']:6d}  (not recorded: fix the readings or the "
             "record)",
             f"  {new} rows added to the record; "
             f"{len(summary.outcomes) - new - counts['refused']} units were already recorded"]
    for o in summary.outcomes:
        if o.status != "pass":
            lines.append(f"  {o.serial}: {o.status.upper()}: {o.reason}")
    if summary.certificates:
        lines.append(f"  {len(summary.certificates)} certificates written in {out}")
    lines += [""] + [f"caution: {text}" for text in SAFETY]
    return "\n".join(lines) + "\n"


def batch_json(summary: BatchSummary, *, readings: str, out: Path) -> dict[str, object]:
    """The object ``batch --json`` prints (docs/json.md)."""
    counts = {s: sum(o.status == s for o in summary.outcomes) for s in ("pass", "fail",
                                                                          "refused")}
    return {"spec": summary.spec_name, "readings": readings, "lot": summary.lot,
            "out": str(out), "record": summary.record,
            "counts": {"units": len(summary.outcomes), "passed": counts["pass"],
                       "failed": counts["fail"], "refused": counts["refused"],
                       "recorded_now": sum(o.new for o in summary.outcomes)},
            "exit_code": summary.exit_code,
            "units": [{**o.json(), "certificate": summary.certificates.get(o.serial)}
                      for o in summary.outcomes],
            "cautions": list(SAFETY)}
