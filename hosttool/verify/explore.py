"""The design space of one spec: a grid of variants, each through check and design.

A variant is the spec's TOML with some keys replaced (dotted paths with list indices, such
as ``adc.data_rate_sps`` or ``filter.stages[1].cutoff_hz``). Each variant runs through the
budget (``check``) and the resolved design (``design``), in worker processes, and yields
four figures to compare:

- noise-free divisions over the span (budget; more is better),
- settling time to one output LSB after a full-scale step (design; less is better),
- the end-to-end error: the largest |reading - measurand| over the range and temperatures,
  through the exact bridge, an ideal ADC and the bit-exact pipeline (verify.endtoend, the
  same figure as `verify`'s end_to_end.max_error; less is better),
- cost: Cortex-M4 instructions per ADC sample measured under QEMU when asked for and the
  tools are present, otherwise the multiplications per ADC sample that the design's
  pipeline performs (taps / decimation, 5 per biquad section at its rate, the static path).

A variant is Pareto-optimal when no other valid variant is at least as good in all four
figures and better in one. A variant whose spec is invalid keeps its row, with the message.
"""

from __future__ import annotations

import math
import multiprocessing
import re
import tomllib
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from hosttool.design.budget import compute_budget
from hosttool.design.filters import BiquadStage, FirStage
from hosttool.design.resolve import Design, make_design
from hosttool.errors import HostToolError, InputError
from hosttool.spec.schema import parse_spec
from hosttool.verify.endtoend import end_to_end
from hosttool.verify.limit_cycles import analyse_design

#: The figures, their direction (+1: larger is better, -1: smaller is better) and units.
FIGURES: dict[str, tuple[int, str]] = {
    "divisions": (+1, "noise-free divisions over the span"),
    "settling_s": (-1, "settling to 1 LSB after a full-scale step, s"),
    "error": (-1, "largest end-to-end error of the reading against the measurand, output "
                  "units"),
    "cost": (-1, "multiplications per ADC sample, or Cortex-M4 instructions per ADC sample"),
}
#: Shown beside the four, not part of the Pareto comparison (direction only for --sort).
EXTRA: dict[str, tuple[int, str]] = {
    "error_bound": (-1, "proven error bound of the arithmetic against the ideal design, "
                        "output units"),
    "mains_rejection_db": (+1, "worst rejection of 50 and 60 Hz with the ADC's sinc, dB"),
    "output_rate_hz": (+1, "output samples per second"),
    "limit_cycle_lsb": (-1, "largest zero- or constant-input limit cycle of a biquad "
                            "section, chain LSB (0: proven none; inf: not proven)"),
}
#: Most variants one exploration evaluates.
MAX_VARIANTS = 4096

Path_ = tuple[str | int, ...]


@dataclass(frozen=True)
class Axis:
    """One ``--vary KEY=V1,V2,...``: the key's path and its values."""

    key: str
    path: Path_
    values: tuple[Any, ...]


@dataclass
class Variant:
    """One point of the grid and what check and design said of it."""

    index: int                       # 1-based, in grid order
    keys: dict[str, Any]             # key -> value of this variant
    text: str                        # the variant's spec as TOML
    figures: dict[str, float] = field(default_factory=dict)
    error: str | None = None         # why the spec or design was refused
    pareto: bool = False

    @property
    def valid(self) -> bool:
        """The spec was accepted and designed."""
        return self.error is None


# ----------------------------------------------------------------------------- keys


_PART = re.compile(r"([A-Za-z_][A-Za-z0-9_]*)((?:\[\d+\])*)")


def parse_path(key: str) -> Path_:
    """``filter.stages[1].cutoff_hz`` -> ("filter", "stages", 1, "cutoff_hz")."""
    path: list[str | int] = []
    for part in key.split("."):
        m = _PART.fullmatch(part)
        if m is None:
            raise InputError(f"--vary: {key!r} is not a dotted spec key "
                             "(like adc.data_rate_sps or filter.stages[1].cutoff_hz)")
        path.append(m.group(1))
        path += [int(i) for i in re.findall(r"\[(\d+)\]", m.group(2))]
    return tuple(path)


def _value(token: str) -> Any:
    """A TOML value (number, boolean, quoted string, array), or else the bare word."""
    try:
        return tomllib.loads(f"v = {token}")["v"]
    except tomllib.TOMLDecodeError:
        return token


def _split_values(text: str) -> list[str]:
    """Split on commas outside brackets and quotes."""
    out, depth, quote, current = [], 0, "", ""
    for ch in text:
        if quote:
            quote = "" if ch == quote else quote
        elif ch in "\"'":
            quote = ch
        elif ch in "[{":
            depth += 1
        elif ch in "]}":
            depth -= 1
        elif ch == "," and depth == 0:
            out.append(current.strip())
            current = ""
            continue
        current += ch
    out.append(current.strip())
    return out


def parse_vary(option: str) -> Axis:
    """``KEY=V1,V2,...`` as an Axis (values as TOML values)."""
    key, sep, values = option.partition("=")
    key = key.strip()
    if not sep or not key or not values.strip():
        raise InputError(f"--vary: {option!r} is not KEY=V1,V2,...")
    tokens = _split_values(values)
    if any(not t for t in tokens):
        raise InputError(f"--vary: {option!r} has an empty value")
    return Axis(key, parse_path(key), tuple(_value(t) for t in tokens))


def set_path(data: dict[str, Any], path: Path_, value: Any, key: str) -> None:
    """Set ``value`` at ``path`` in the TOML data, creating missing tables."""
    node: Any = data
    for i, part in enumerate(path[:-1]):
        nxt = path[i + 1]
        if isinstance(part, int):
            if not isinstance(node, list) or part >= len(node):
                raise InputError(f"--vary: {key}: the spec has no element [{part}] there")
            node = node[part]
            continue
        if not isinstance(node, dict):
            raise InputError(f"--vary: {key}: {part!r} is not inside a table")
        if part not in node:
            if isinstance(nxt, int):
                raise InputError(f"--vary: {key}: the spec has no list {part!r}")
            node[part] = {}
        node = node[part]
    last = path[-1]
    if isinstance(last, int):
        if not isinstance(node, list) or last >= len(node):
            raise InputError(f"--vary: {key}: the spec has no element [{last}] there")
        node[last] = value
    elif isinstance(node, dict):
        node[last] = value
    else:
        raise InputError(f"--vary: {key}: {last!r} is not inside a table")


# ----------------------------------------------------------------------------- TOML out


def _scalar(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isinf(value) or math.isnan(value):
            return ("-inf" if value < 0 else "inf") if math.isinf(value) else "nan"
        return repr(value)
    if isinstance(value, str):
        escaped = value.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n")
        return f'"{escaped}"'
    if isinstance(value, list):
        return "[" + ", ".join(_scalar(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{k} = {_scalar(v)}" for k, v in value.items()) + " }"
    raise TypeError(f"no TOML form for {type(value).__name__}")


def to_toml(data: dict[str, Any], header: str = "") -> str:
    """TOML text of spec data: top-level keys, then one [table] per table (nested ones as
    [a.b]); arrays of tables are written inline."""
    lines = [f"# {line}" for line in header.splitlines()]

    def table(prefix: str, node: dict[str, Any]) -> None:
        plain = [(k, v) for k, v in node.items() if not isinstance(v, dict)]
        tables = [(k, v) for k, v in node.items() if isinstance(v, dict)]
        if prefix:
            lines.append("")
            lines.append(f"[{prefix}]")
        lines.extend(f"{k} = {_scalar(v)}" for k, v in plain)
        for k, v in tables:
            table(f"{prefix}.{k}" if prefix else k, v)

    table("", data)
    return "\n".join(lines) + "\n"


# ----------------------------------------------------------------------------- grid


def grid(spec_text: str, spec_name: str, axes: tuple[Axis, ...]) -> list[Variant]:
    """Every combination of the axes' values, in order (the last axis varies fastest)."""
    base = tomllib.loads(spec_text)
    count = math.prod(len(a.values) for a in axes)
    if count > MAX_VARIANTS:
        raise InputError(f"--vary: {count} variants, more than {MAX_VARIANTS}")
    seen = [a.key for a in axes]
    if len(set(seen)) != len(seen):
        raise InputError("--vary: the same key is given twice")
    variants: list[Variant] = []
    for n in range(count):
        data = tomllib.loads(spec_text) if n else base
        keys: dict[str, Any] = {}
        rest = n
        for axis in reversed(axes):
            rest, i = divmod(rest, len(axis.values))
            keys[axis.key] = axis.values[i]
        keys = {a.key: keys[a.key] for a in axes}
        for axis in axes:
            set_path(data, axis.path, keys[axis.key], axis.key)
        label = ", ".join(f"{k} = {_scalar(v)}" for k, v in keys.items())
        text = to_toml(data, f"variant {n + 1} of {spec_name}: {label}")
        variants.append(Variant(n + 1, keys, text))
    return variants


def multiplications_per_sample(design: Design) -> float:
    """Multiplications of the pipeline per ADC sample, counted from the design.

    FIR: its taps once per output (taps / decimation per input of the stage); biquad
    section: 5 per sample at its rate; static path: 1 (scale) + linearisation order +
    4 (temperature), once per output sample.
    """
    rate = 1.0   # samples of this stage per ADC sample
    total = 0.0
    for stage in design.stages:
        if isinstance(stage, FirStage):
            total += len(stage.taps_int) * rate / stage.decimation
            rate /= stage.decimation
        elif isinstance(stage, BiquadStage):
            total += 5 * len(stage.sections) * rate
    static = 1 + (len(design.constants.lin) - 1 if design.linearisation else 0)
    static += 4 if design.temperature is not None else 0
    return total + static * rate


def figures_of(design: Design) -> dict[str, float]:
    """The figures of one design that need no firmware run (cost as multiplications)."""
    budget = design.budget
    report = design.filter_report.realised
    cycles = analyse_design(design)
    largest = max((c.amplitude for s in cycles.sections for c in s.cycles if c.period > 1),
                  default=0)
    return {
        "divisions": budget.noise_free_divisions,
        "settling_s": report.settling_1lsb_s,
        "error": end_to_end(design).worst,
        "error_bound": design.to_units(design.ideal_error_bound_lsb),
        "cost": multiplications_per_sample(design),
        "mains_rejection_db": min(report.rejection_50hz_with_sinc_db,
                                  report.rejection_60hz_with_sinc_db),
        "output_rate_hz": design.output_rate_hz,
        "limit_cycle_lsb": float(largest) if cycles.proven else math.inf,
    }


def m4_instructions(design: Design, work: Path, samples: int = 2000) -> float:
    """Cortex-M4 instructions per ADC sample of the firmware under QEMU (-icount)."""
    import numpy as np  # deferred: only with --m4

    from hosttool.firmware.run import build_runner, run_runner

    exe = build_runner(design, "m4", work)
    rng = np.random.default_rng(0)
    limit = 1 << (design.spec.adc.bits - 1)
    codes = rng.integers(-limit, limit, samples)
    temps = rng.integers(-2000, 5000, samples) if design.temperature else None
    per_sample = run_runner(exe, "m4", codes, temps).instructions_per_sample
    if per_sample is None:
        raise InputError("--m4: the Cortex-M4 run gave no instruction count")
    return float(per_sample)


def evaluate(text: str, source: str, m4_dir: str | None = None
             ) -> tuple[dict[str, float], str | None]:
    """(figures, None) of one variant's spec text, or ({}, the one-line refusal)."""
    try:
        spec = parse_spec(text, source)
        compute_budget(spec)   # what `check` runs: its refusals count as the variant's
        design = make_design(spec)
        figures = figures_of(design)
        if m4_dir is not None:
            figures["cost"] = m4_instructions(design, Path(m4_dir))
        return figures, None
    except HostToolError as exc:
        return {}, str(exc)


def _evaluate_one(job: tuple[str, str, str | None]) -> tuple[dict[str, float], str | None]:
    return evaluate(*job)


def dominates(a: dict[str, float], b: dict[str, float]) -> bool:
    """a is at least as good as b in every Pareto figure and better in one."""
    better = False
    for name, (sign, _) in FIGURES.items():
        x, y = sign * a[name], sign * b[name]
        if x < y:
            return False
        better |= x > y
    return better


def mark_pareto(variants: list[Variant]) -> None:
    """Set ``pareto`` on every valid variant no other valid variant dominates."""
    valid = [v for v in variants if v.valid]
    for v in valid:
        v.pareto = not any(dominates(o.figures, v.figures) for o in valid if o is not v)


def sort_key(figure: str) -> Any:
    """Best first by ``figure``; invalid variants last, in grid order."""
    if figure not in FIGURES and figure not in EXTRA:
        raise InputError(f"--sort: {figure!r} is not one of "
                         f"{', '.join((*FIGURES, *EXTRA))}")
    sign = (FIGURES | EXTRA)[figure][0]

    def key(v: Variant) -> tuple[int, float, int]:
        if not v.valid:
            return (1, 0.0, v.index)
        value = v.figures[figure]
        return (0, -sign * value if math.isfinite(value) else math.inf, v.index)
    return key


def explore(spec_text: str, spec_name: str, source: str, axes: tuple[Axis, ...], *,
            jobs: int, m4_dir: Path | None = None) -> list[Variant]:
    """Evaluate every variant (in ``jobs`` processes) and mark the Pareto front."""
    if not axes:
        raise InputError("--vary: give at least one KEY=V1,V2,...")
    variants = grid(spec_text, spec_name, axes)
    jobs_list = [(v.text, f"{source} (variant {v.index})",
                  None if m4_dir is None else str(m4_dir / f"v{v.index}")) for v in variants]
    # The first variant runs here: it imports scipy and loads the compiled kernels once, and
    # forked workers inherit them instead of paying for them each (about 1 s per worker).
    results = [_evaluate_one(jobs_list[0])]
    rest = jobs_list[1:]
    if jobs <= 1 or len(rest) <= 1:
        results += [_evaluate_one(j) for j in rest]
    else:
        methods = multiprocessing.get_all_start_methods()
        context = multiprocessing.get_context("fork" if "fork" in methods else None)
        chunk = max(1, len(rest) // (4 * jobs))
        with ProcessPoolExecutor(max_workers=jobs, mp_context=context) as pool:
            results += list(pool.map(_evaluate_one, rest, chunksize=chunk))
    for v, (figures, error) in zip(variants, results, strict=True):
        v.figures, v.error = figures, error
    mark_pareto(variants)
    return variants
