"""``hosttool explore``: a grid of spec variants, a table, JSON, an HTML page, spec files."""

from __future__ import annotations

import math
import tempfile
from pathlib import Path
from typing import Any

from hosttool import __version__
from hosttool.errors import InputError
from hosttool.firmware.build import missing_tools
from hosttool.spec.schema import load_spec
from hosttool.util.atomic import write_atomic
from hosttool.util.pages import png_data_uri, render_page
from hosttool.verify.explore import EXTRA, FIGURES, Variant, explore, parse_vary, sort_key

HEADINGS = {"divisions": "divisions", "settling_s": "settling s", "error": "error",
            "error_bound": "arith. bound",
            "cost": "cost", "mains_rejection_db": "mains dB", "output_rate_hz": "out/s",
            "limit_cycle_lsb": "cycle LSB"}


def _cell(value: float) -> str:
    if not math.isfinite(value):
        return "inf"
    return f"{value:.4g}"


def _value_text(value: Any) -> str:
    return str(value) if not isinstance(value, str) else value


def explore_text(variants: list[Variant], sort: str, unit: str, cost: str) -> str:
    """The table, best first by ``sort``; '*' marks a Pareto-optimal variant."""
    keys = list(variants[0].keys)
    head = ["#", "P", *keys, *(HEADINGS[f] for f in (*FIGURES, *EXTRA))]
    rows: list[list[str]] = []
    for v in sorted(variants, key=sort_key(sort)):
        cells = [str(v.index), "*" if v.pareto else "", *(_value_text(v.keys[k]) for k in keys)]
        if v.valid:
            cells += [_cell(v.figures[f]) for f in (*FIGURES, *EXTRA)]
        else:
            cells += [f"invalid: {v.error}"]
        rows.append(cells)
    widths = [max(len(r[i]) for r in [head, *rows] if i < len(r) - 1)
              for i in range(len(head) - 1)]
    lines = ["  ".join([*(c.ljust(w) for c, w in zip(r[:-1], widths, strict=False)), r[-1]]
                       ).rstrip() for r in [head, *rows]]
    valid = sum(v.valid for v in variants)
    pareto = sum(v.pareto for v in variants)
    notes = [f"{len(variants)} variants, {valid} valid, {pareto} Pareto-optimal (*); sorted "
             f"by {sort}",
             f"divisions: noise-free over the span; settling: to 1 LSB after a full-scale "
             f"step; error: largest end-to-end error of the reading, {unit}; arith. bound: "
             f"proven error of the arithmetic against the ideal design, {unit}; "
             f"cost: {cost}; mains: worst rejection of 50 and 60 Hz with the ADC's sinc; cycle: "
             "largest limit cycle of a biquad section with a constant input, chain LSB (0: "
             "proven none, inf: not proven)"]
    return "\n".join([*lines, "", *notes]) + "\n"


def explore_json(variants: list[Variant], spec_name: str, sort: str, cost: str
                 ) -> dict[str, Any]:
    """The JSON object of ``hosttool explore --json`` (docs/json.md)."""
    def clean(x: float) -> float | None:
        return x if math.isfinite(x) else None
    return {
        "tool_version": __version__, "kind": "exploration", "spec_name": spec_name,
        "sort": sort, "cost": cost, "figures": {k: d for k, (_, d) in (FIGURES | EXTRA).items()},
        "variants": [{"index": v.index, "keys": v.keys, "valid": v.valid, "error": v.error,
                      "figures": {k: clean(x) for k, x in v.figures.items()},
                      "pareto": v.pareto} for v in variants],
    }


def _pareto_plot(variants: list[Variant], unit: str) -> str:
    import matplotlib  # deferred: only for --html

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    valid = [v for v in variants if v.valid and math.isfinite(v.figures["settling_s"])]
    fig, ax = plt.subplots(figsize=(8, 4.5))
    for front, colour, label in ((False, "#9a9a9a", "dominated"),
                                 (True, "#1b6f8a", "Pareto-optimal")):
        pts = [v for v in valid if v.pareto == front]
        ax.scatter([v.figures["settling_s"] for v in pts],
                   [v.figures["error"] for v in pts],
                   s=[12 + 60 * min(1.0, v.figures["divisions"] / max(
                       1.0, max(w.figures["divisions"] for w in valid))) for v in pts],
                   color=colour, label=label, alpha=1.0 if front else 0.7)
        for v in pts:
            ax.annotate(str(v.index), (v.figures["settling_s"], v.figures["error"]),
                        fontsize=7, xytext=(3, 3), textcoords="offset points")
    ax.set_xlabel("settling to 1 LSB, s")
    ax.set_ylabel(f"largest end-to-end error, {unit}")
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=8, title="marker size: noise-free divisions", title_fontsize=7)
    return png_data_uri(fig)


def explore_html(variants: list[Variant], spec_name: str, sort: str, unit: str, cost: str
                 ) -> str:
    """The page: the Pareto plot and the table (templates/explore.html.j2)."""
    keys = list(variants[0].keys)
    rows = []
    for v in sorted(variants, key=sort_key(sort)):
        figures = ([_cell(v.figures[f]) for f in (*FIGURES, *EXTRA)] if v.valid
                   else [""] * (len(FIGURES) + len(EXTRA)))
        rows.append({"index": v.index, "pareto": v.pareto,
                     "keys": [_value_text(v.keys[k]) for k in keys],
                     "figures": figures, "error": v.error})
    from hosttool.util.cautions import SAFETY

    return render_page("explore.html.j2", name=spec_name, version=__version__, sort=sort,
                       unit=unit, cost=cost, keys=keys,
                       headings=[HEADINGS[f] for f in (*FIGURES, *EXTRA)], rows=rows,
                       plot=_pareto_plot(variants, unit), cautions=list(SAFETY))


def run_explore(spec_path: Path, *, vary: tuple[str, ...], sort: str, jobs: int, m4: bool,
                as_json: bool, html: Path | None, save: tuple[tuple[int, Path], ...]
                ) -> tuple[list[Variant], dict[str, Any] | str]:
    """Evaluate the grid; write the page and chosen variants; return the JSON or text."""
    spec = load_spec(spec_path)   # the base spec must itself be valid
    axes = tuple(parse_vary(v) for v in vary)
    sort_key(sort)  # refuse an unknown figure before the work
    if jobs < 1:
        raise InputError(f"--jobs: {jobs} must be 1 or more")
    if m4:
        missing = missing_tools("m4", run=True)
        if missing:
            raise InputError(f"--m4: needs {', '.join(missing)} (not found)")
    count = math.prod(len(a.values) for a in axes)
    for index, _ in save:
        if not 1 <= index <= count:
            raise InputError(f"--save: no variant {index} (1..{count})")
    text = spec_path.read_text(encoding="utf-8")
    cost = ("Cortex-M4 instructions per ADC sample (QEMU)" if m4
            else "multiplications per ADC sample")
    with tempfile.TemporaryDirectory() as work:
        variants = explore(text, spec.name, str(spec_path), axes, jobs=jobs,
                           m4_dir=Path(work) if m4 else None)
    for index, _ in save:
        if not variants[index - 1].valid:
            raise InputError(f"--save: variant {index} is invalid: {variants[index - 1].error}")
    if html is not None:
        write_atomic(html, explore_html(variants, spec.name, sort, spec.sensor.unit, cost))
    for index, path in save:
        write_atomic(path, variants[index - 1].text)
    if as_json:
        return variants, explore_json(variants, spec.name, sort, cost)
    return variants, explore_text(variants, sort, spec.sensor.unit, cost)
