"""Limit cycles and dead bands of the biquad sections, proven absent or found.

The section (DEVELOPERS.md, "Arithmetic contract") is direct form I with first-order error
feedback and round half up: ``acc = b.x - a1 y1 - a2 y2 + e``, ``y = (acc + 2^(q-1)) >> q``,
``e = acc - y 2^q``. With a constant input c (x1 = x2 = c) and the exact DC gain
b0 + b1 + b2 = 2^q + a1 + a2, the deviation u = y - c obeys

    w = -a1 u1 - a2 u2 + e,   u = (w + 2^(q-1)) >> q,   e' = w - u 2^q,

which does not contain c: constant-input limit cycles are exactly the zero-input ones, for
every input level the headroom proof admits (no saturation). The state is (u1, u2, e) with
e in [-2^(q-1), 2^(q-1)).

Two published methods, used together, settle a section:

1. Amplitude bound. Writing eps = e / 2^q (|eps| <= 1/2), the recursion is
   A(z) u = -(1 - z^-1) eps, so on any periodic orbit u = -g * eps with g the impulse
   response of (1 - z^-1) / A(z), and |u| <= (1/2) sum |g| (the absolute bound of
   J. L. Long and T. N. Trick, "An absolute bound on limit cycles due to roundoff errors in
   digital filters", IEEE Trans. Audio Electroacoust. AU-21 (1973) 27-30, applied to the
   error-to-output response of this structure; volume and pages from memory). For this
   structure g[0] = 1 and sum g = 0, so sum |g| >= 2: the bound alone never reaches zero,
   it only bounds the region that method 2 searches.
2. Exhaustive search of the bounded state region (the idea of P. H. Bauer and L.-J.
   Leclerc, "A computer-aided test for the absence of limit cycles in fixed-point digital
   filters", IEEE Trans. Signal Process. 39 (1991) 2400-2410, and K. Premaratne et al., "An
   exhaustive search algorithm for checking limit cycle behavior of digital filters",
   IEEE Trans. Signal Process. 44 (1996); pages from memory). Every periodic orbit lies in
   the box |u1|, |u2| <= U (U from method 1) times the 2^q values of e. For fixed (u1, u2)
   the map moves e by the constant -a1 u1 - a2 u2 modulo 2^q, the carry being u, so the
   search runs on intervals of e instead of 2^q single states, exactly: X0 is the whole box,
   X(k+1) = F(X(k)) restricted to the box. The sets shrink; once one repeats, every state in
   it lies on a periodic orbit (each has a predecessor in a finite set), so the fixed set is
   the union of all periodic orbits in the box. If it holds only u1 = u2 = 0 (where e
   stays put and the output equals c), no limit cycle exists; otherwise one is followed
   exactly from a state of it.

Dead band: a constant output y = c + u* needs u* (2^q + a1 + a2) = 0 (sum the recursion),
and 2^q + a1 + a2 = A(1) 2^q > 0 for a stable section, so a settled output equals its input
exactly. Once no limit cycle exists every state ends on such a fixed point, and the FIR
stages pass a constant exactly (taps sum to 2^f): the settled chain output equals the chain
input word, a dead band of 0 LSB in the filters.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from hosttool.design import impulse
from hosttool.design.compiled import njit
from hosttool.design.filters import Biquad, BiquadStage
from hosttool.design.resolve import Design

#: The interval search gives up ("not proven") beyond this many rounds ...
MAX_ROUNDS = 20_000
#: ... or this many intervals of e held at once.
MAX_INTERVALS = 400_000
#: Cycles listed per section in JSON (largest amplitude first).
JSON_CYCLES = 8
#: Step inputs tried from reset to find an input that starts a cycle that was found.
STEP_LEVELS = 2048

Intervals = list[tuple[int, int]]   # inclusive integer intervals of e, sorted, disjoint
StateSet = dict[tuple[int, int], Intervals]   # (u1, u2) -> intervals of e


@dataclass(frozen=True)
class Cycle:
    """One periodic orbit of the deviation u = y - c (chain LSB)."""

    outputs: tuple[int, ...]    # u over one period, starting at the reported state
    start: tuple[int, int, int]  # (u1, u2, e) just before the first output

    @property
    def period(self) -> int:
        """Samples per period."""
        return len(self.outputs)

    @property
    def amplitude(self) -> int:
        """Largest |u| on the orbit, chain LSB."""
        return max(abs(u) for u in self.outputs)


@dataclass(frozen=True)
class StepStart:
    """A step input from reset (0 -> level, chain LSB) that ends in a limit cycle."""

    level: int
    period: int
    amplitude: int


@dataclass(frozen=True)
class SectionResult:
    """What was proven or found for one biquad section."""

    name: str                  # "stage2.section1"
    a_int: tuple[int, int]
    frac: int
    noise_l1: float            # proven upper bound of sum |g|, g = (1 - z^-1)/A(z)
    box: int                   # U: every periodic orbit has |u| <= U
    method: str                # "exhaustive search" | "not proven"
    region: str                # the size of the region the method covered
    proven: bool               # the outcome is a proof (of absence, or of a cycle found)
    cycles: tuple[Cycle, ...]  # periodic orbits other than u = 0, largest amplitude first
    dead_band_lsb: int         # largest |u| of a constant settled output (chain LSB)
    rounds: int                # search rounds until the region stopped shrinking
    reason: str                # why not proven, or ""
    started_by: StepStart | None   # a step from reset that ends in a cycle, if one was found
    output_gain: float = 0.0   # bound of output LSB per chain LSB from here to the output

    @property
    def amplitude_output_lsb(self) -> float:
        """The largest cycle's amplitude carried to the output (upper bound), output LSB."""
        return self.cycles[0].amplitude * self.output_gain if self.cycles else 0.0

    @property
    def limit_cycle(self) -> bool:
        """A limit cycle (period above one) was found."""
        return any(c.period > 1 for c in self.cycles)

    @property
    def failure(self) -> str:
        """The verdict's reason when a limit cycle was found."""
        c = self.cycles[0]
        return (f"{self.name}: limit cycle with a constant input, period {c.period}, "
                f"amplitude {c.amplitude} chain LSB (<= {self.amplitude_output_lsb:.2g} "
                "output LSB)")

    @property
    def statement(self) -> str:
        """One line: the proof, the cycle found, or why nothing is proven."""
        if not self.proven:
            return f"not proven: {self.reason}"
        if self.limit_cycle:
            c = self.cycles[0]
            text = (f"LIMIT CYCLE: period {c.period}, amplitude {c.amplitude} chain LSB "
                    f"(<= {self.amplitude_output_lsb:.2g} output LSB), from the state "
                    f"y1 = c{c.start[0]:+d}, y2 = c{c.start[1]:+d}, e = {c.start[2]} under any "
                    "constant input c")
            s = self.started_by
            if s is not None:
                text += (f"; from reset a step to {s.level} chain LSB at the section's input "
                         f"ends in a period {s.period}, amplitude {s.amplitude} cycle")
            return text
        return f"no limit cycle, dead band <= {self.dead_band_lsb} LSB"


@dataclass(frozen=True)
class LimitCycleReport:
    """Every recursive section of a design."""

    sections: tuple[SectionResult, ...]

    @property
    def passed(self) -> bool:
        """No limit cycle found (sections not proven are reported, not failed)."""
        return not any(s.limit_cycle for s in self.sections)

    @property
    def proven(self) -> bool:
        """Every section settled by a proof."""
        return all(s.proven for s in self.sections)

    @property
    def dead_band_lsb(self) -> int:
        """Largest dead band of any section, chain LSB."""
        return max((s.dead_band_lsb for s in self.sections), default=0)

    @property
    def statement(self) -> str:
        """The one-line summary ``verify`` prints for the whole chain."""
        if not self.sections:
            return "no recursive section: no limit cycle, dead band <= 0 LSB"
        found = [s for s in self.sections if s.limit_cycle]
        if found:
            return "LIMIT CYCLE in " + ", ".join(
                f"{s.name} (period {s.cycles[0].period}, amplitude {s.cycles[0].amplitude} "
                f"chain LSB)" for s in found)
        open_ = [s for s in self.sections if not s.proven]
        if open_:
            return "; ".join(f"{s.name}: {s.statement}" for s in open_)
        return f"no limit cycle, dead band <= {self.dead_band_lsb} LSB"


# ----------------------------------------------------------------------------- the map


def step(a1: int, a2: int, q: int, u1: int, u2: int, e: int) -> tuple[int, int]:
    """One sample of the deviation recursion: (u, e') from (u1, u2, e)."""
    w = -a1 * u1 - a2 * u2 + e
    u = (w + (1 << (q - 1))) >> q
    return u, w - (u << q)


@njit(cache=True, nogil=True)
def _impulse(b: NDArray[np.float64], a: NDArray[np.float64],
             n: int) -> NDArray[np.float64]:  # pragma: no cover - compiled
    """The first n samples of B(z)/A(z)'s impulse response (a[0] == 1), float64."""
    h = np.zeros(n)
    y1 = 0.0
    y2 = 0.0
    for k in range(n):
        x = b[k] if k < 3 else 0.0
        y = x - a[1] * y1 - a[2] * y2
        h[k] = y
        y2 = y1
        y1 = y
    return h


def section_l1(b: tuple[float, float, float], a: tuple[float, float, float]) -> float:
    """Proven upper bound of sum |h| of a stable section B(z)/A(z): its response to the
    length ``impulse.biquad_span`` gives, plus that span's tail bound (no scipy: verifying
    a cached design imports no filter design)."""
    n, tail = impulse.biquad_span(b, a)
    h = _impulse(np.asarray(b, dtype=np.float64), np.asarray(a, dtype=np.float64), n)
    return float(np.sum(np.abs(h))) * (1 + impulse.FLOAT_MARGIN) + tail


def noise_l1(a_int: tuple[int, int], q: int) -> float:
    """Proven upper bound of sum |g| for g = (1 - z^-1)/A(z), realised coefficients."""
    one = float(1 << q)
    return section_l1((1.0, -1.0, 0.0), (1.0, a_int[0] / one, a_int[1] / one))


def _merge(intervals: Intervals) -> Intervals:
    intervals.sort()
    out: Intervals = []
    for lo, hi in intervals:
        if out and lo <= out[-1][1] + 1:
            if hi > out[-1][1]:
                out[-1] = (out[-1][0], hi)
        else:
            out.append((lo, hi))
    return out


def _image(states: StateSet, a1: int, a2: int, q: int, box: int) -> StateSet:
    """F(states) restricted to |u| <= box, exactly, on intervals of e."""
    size, half = 1 << q, 1 << (q - 1)
    out: dict[tuple[int, int], Intervals] = {}
    for (u1, u2), intervals in states.items():
        k = -a1 * u1 - a2 * u2
        for lo, hi in intervals:
            w_lo, w_hi = lo + k, hi + k
            for u in range(max((w_lo + half) >> q, -box), min((w_hi + half) >> q, box) + 1):
                piece_lo = max(w_lo, u * size - half) - u * size
                piece_hi = min(w_hi, (u + 1) * size - half - 1) - u * size
                out.setdefault((u, u1), []).append((piece_lo, piece_hi))
    return {s: _merge(iv) for s, iv in out.items()}


def _follow(a1: int, a2: int, q: int, start: tuple[int, int, int]) -> Cycle:
    """The periodic orbit through ``start`` (which lies on one), followed exactly."""
    u1, u2, e = start
    outputs: list[int] = []
    state = start
    while True:
        u, e = step(a1, a2, q, u1, u2, e)
        outputs.append(u)
        u1, u2 = u, u1
        if (u1, u2, e) == state:
            return Cycle(tuple(outputs), start)
        if len(outputs) > 1 << 20:  # pragma: no cover - the start lies on an orbit
            raise RuntimeError("orbit did not close")


def search(a1: int, a2: int, q: int, box: int) -> tuple[StateSet | None, int, str]:
    """The union of the periodic orbits within |u| <= box, or None with the reason."""
    half = 1 << (q - 1)
    states: StateSet = {(p, r): [(-half, half - 1)]
                        for p in range(-box, box + 1) for r in range(-box, box + 1)}
    for rounds in range(1, MAX_ROUNDS + 1):
        nxt = _image(states, a1, a2, q, box)
        if nxt == states:
            return states, rounds, ""
        held = sum(len(iv) for iv in nxt.values())
        if held > MAX_INTERVALS:
            return None, rounds, (f"the search of the {2 * box + 1}^2 x 2^{q} state region "
                                  f"grew past {MAX_INTERVALS} intervals of e")
        states = nxt
    return None, MAX_ROUNDS, (f"the search of the {2 * box + 1}^2 x 2^{q} state region did "
                              f"not settle in {MAX_ROUNDS} rounds")


def _cycles(states: StateSet, a1: int, a2: int, q: int) -> tuple[Cycle, ...]:
    """Distinct orbits through the non-zero states of the invariant set, largest first."""
    seen: set[tuple[int, int, int]] = set()
    found: list[Cycle] = []
    for (u1, u2), intervals in sorted(states.items()):
        if (u1, u2) == (0, 0):
            continue
        for lo, _ in intervals:
            if (u1, u2, lo) in seen:
                continue
            cycle = _follow(a1, a2, q, (u1, u2, lo))
            p1, p2, e = u1, u2, lo
            for u in cycle.outputs:
                seen.add((p1, p2, e))
                u, e = step(a1, a2, q, p1, p2, e)
                p1, p2 = u, p1
            found.append(cycle)
    return tuple(sorted(found, key=lambda c: (-c.amplitude, c.period)))


def _tail_period(y: NDArray[np.int64], longest: int) -> int | None:
    """The period (2..longest) with which the last samples of ``y`` repeat while varying."""
    tail = y[-2 * longest:]
    if np.ptp(tail) == 0:
        return None
    for p in range(2, longest + 1):
        if np.array_equal(tail[p:], tail[:-p]):
            return p
    return None


def starting_step(section: Biquad, longest: int, settle: int) -> StepStart | None:
    """The smallest step level c (0 -> c from reset, c in 1..STEP_LEVELS) after which the
    section's integer output still oscillates ``settle`` samples later, or None.

    The section runs exactly as the arithmetic contract states, vectorised over c."""
    b0, b1, b2 = section.b_int
    a1, a2 = section.a_int
    q = section.fmt.frac
    c = np.arange(1, STEP_LEVELS + 1, dtype=np.int64)
    x1 = np.zeros_like(c)
    x2 = np.zeros_like(c)
    y1 = np.zeros_like(c)
    y2 = np.zeros_like(c)
    e = np.zeros_like(c)
    n = settle + 2 * longest + 2
    history = np.empty((n, c.size), dtype=np.int64)
    for i in range(n):
        acc = b0 * c + b1 * x1 + b2 * x2 - a1 * y1 - a2 * y2 + e
        y = (acc + (1 << (q - 1))) >> q
        e = acc - (y << q)
        x2, x1, y2, y1 = x1, c, y1, y
        history[i] = y
    for j in range(c.size):
        period = _tail_period(history[:, j], longest)
        if period is not None:
            tail = history[-period:, j] - c[j]
            return StepStart(int(c[j]), period, int(np.max(np.abs(tail))))
    return None


def _settle_samples(a_int: tuple[int, int], q: int, box: int) -> int:
    """Samples for the linear part of a transient from the int32 range to fall below box."""
    rho = impulse.pole_radius(a_int[0] / (1 << q), a_int[1] / (1 << q))
    return int(math.ceil(math.log(0.5 / (1 << 33)) / math.log(rho))) + 4 * (box + 1)


def analyse_section(name: str, section: Biquad, output_gain: float = 0.0) -> SectionResult:
    """Prove the absence of limit cycles in one section, or find them.

    ``output_gain``: output LSB per chain LSB from this section's output to the pipeline's
    output (an upper bound), to state a cycle's size where the user sees it."""
    a1, a2 = section.a_int
    q = section.fmt.frac
    l1 = noise_l1(section.a_int, q)
    box = math.floor(0.5 * l1)
    region = f"{2 * box + 1}^2 output pairs x 2^{q} error words"
    states, rounds, reason = search(a1, a2, q, box)
    if states is None:
        return SectionResult(name, section.a_int, q, l1, box, "not proven", region, False,
                             (), 0, rounds, reason, None, output_gain)
    cycles = _cycles(states, a1, a2, q)
    dead = max((c.amplitude for c in cycles if c.period == 1), default=0)
    started = None
    oscillating = [c for c in cycles if c.period > 1]
    if oscillating:
        longest = max(c.period for c in oscillating)
        started = starting_step(section, longest, _settle_samples(section.a_int, q, box))
    return SectionResult(name, section.a_int, q, l1, box, "exhaustive search", region, True,
                         cycles, dead, rounds, "", started, output_gain)


def _gains_after(design: Design) -> list[float]:
    """Per biquad section, in firmware order: an upper bound of output LSB per chain LSB
    from its output to the pipeline's output (L1 of the sections and stages after it times
    the scale; the linearisation and temperature steps taken at slope 1)."""
    parts: list[tuple[bool, float]] = []   # (is a biquad section, L1 of its realised response)
    for stage in design.stages:
        if isinstance(stage, BiquadStage):
            parts += [(True, section_l1(tuple(s.b_realised), tuple(s.a_realised)))
                      for s in stage.sections]
        else:
            parts.append((False, impulse.fir(stage.taps_realised).l1))
    scale = abs(design.scale.realised(design.constants.scale_mul))
    gains = []
    for i, (is_section, _) in enumerate(parts):
        if is_section:
            gains.append(scale * math.prod(l1 for _, l1 in parts[i + 1:]))
    return gains


def analyse_design(design: Design) -> LimitCycleReport:
    """Every biquad section of the design's cascade, in firmware order."""
    gains = iter(_gains_after(design))
    results: list[SectionResult] = []
    for i, stage in enumerate(design.stages):
        if isinstance(stage, BiquadStage):
            for j, section in enumerate(stage.sections):
                results.append(analyse_section(f"stage{i + 1}.section{j + 1}", section,
                                               next(gains)))
    return LimitCycleReport(tuple(results))


def report_json(report: LimitCycleReport) -> dict[str, Any]:
    """The ``limit_cycles`` object of ``verify --json`` (docs/json.md)."""
    return {
        "statement": report.statement, "passed": report.passed, "proven": report.proven,
        "dead_band_lsb": report.dead_band_lsb,
        "sections": [{
            "name": s.name, "a1": s.a_int[0], "a2": s.a_int[1], "frac_bits": s.frac,
            "method": s.method, "region": s.region, "box_lsb": s.box,
            "noise_l1": s.noise_l1, "rounds": s.rounds, "proven": s.proven,
            "limit_cycle": s.limit_cycle, "dead_band_lsb": s.dead_band_lsb,
            "statement": s.statement, "reason_not_proven": s.reason or None,
            "amplitude_output_lsb": s.amplitude_output_lsb,
            "cycles_found": len(s.cycles),
            "cycles": [{"period": c.period, "amplitude_lsb": c.amplitude,
                        "outputs_lsb": list(c.outputs),
                        "start": {"u1": c.start[0], "u2": c.start[1], "e": c.start[2]}}
                       for c in s.cycles[:JSON_CYCLES]],
            "started_by_step": None if s.started_by is None else {
                "level_lsb": s.started_by.level, "period": s.started_by.period,
                "amplitude_lsb": s.started_by.amplitude},
        } for s in report.sections],
    }
