"""Range and rounding analysis of the filter cascade, in chain words (counts * 2^G).

For every node (each stage output and each biquad section output) the worst case over every
input sequence bounded by X is L1(h_node) * X plus the worst rounding error reaching it; each
accumulator's bound follows from its inputs' bounds and the integer coefficients. Rounding
sources (an FIR output, a biquad section with error feedback) inject at most 1/2 chain LSB;
their worst case at the chain output is 1/2 * L1 of the response from source to output, and
their RMS (uniform rounding, variance 1/12, Widrow's model) is L2 / sqrt(12).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from hosttool.design import impulse
from hosttool.design.filters import FirStage, Stage
from hosttool.design.impulse import Response

INT32_LIMIT = (1 << 31) - 1
INT64_LIMIT = (1 << 63) - 1


@dataclass(frozen=True)
class NodeBound:
    """One node of the cascade: worst-case magnitude against its word."""

    name: str
    gain_l1: float        # L1 norm from the chain input to this node (0 for accumulators)
    rounding: float       # worst rounding error reaching the node, chain LSB
    bound: float          # worst-case magnitude, in the node's integer units
    word: int             # 32 or 64 bits
    rate_hz: float

    @property
    def headroom_bits(self) -> float:
        """Spare bits between the bound and the word's largest magnitude."""
        limit = INT32_LIMIT if self.word == 32 else INT64_LIMIT
        return math.log2(limit / self.bound) if self.bound > 0 else float(self.word - 1)


@dataclass(frozen=True)
class RoundingSource:
    """A rounding point and its response to the chain output (at its own rate)."""

    name: str
    to_output: Response
    rate_hz: float

    @property
    def worst(self) -> float:
        """Worst-case contribution at the chain output, chain LSB."""
        return 0.5 * self.to_output.l1

    @property
    def rms(self) -> float:
        """Predicted RMS contribution at the chain output, chain LSB."""
        return self.to_output.l2 / math.sqrt(12.0)


@dataclass
class _Walk:
    """State while walking the cascade: the path response and the sources so far."""

    path: Response
    ideal: Response
    decimation: int = 1
    sources: list[tuple[str, Response, int, float]] = field(default_factory=list)

    def extend(self, realised: Response, ideal: Response, rate_decimation: int) -> None:
        """Append a stage response given at a rate ``rate_decimation`` below the input."""
        self.path = self.path.then(realised.upsampled(rate_decimation))
        self.ideal = self.ideal.then(ideal.upsampled(rate_decimation))
        self.sources = [(n, r.then(realised.upsampled(rate_decimation // d)), d, rate)
                        for n, r, d, rate in self.sources]

    def rounding_here(self) -> float:
        return sum(0.5 * r.l1 for _, r, _, _ in self.sources)


@dataclass(frozen=True)
class CascadeAnalysis:
    """Bounds of the whole cascade for a chain input bounded by ``input_bound``."""

    nodes: tuple[NodeBound, ...]
    sources: tuple[RoundingSource, ...]
    total: Response              # realised response, input rate
    ideal_total: Response        # ideal (unquantised) response, input rate
    max_gain_l1: float
    output_rounding: float       # worst rounding at the chain output, chain LSB
    output_rounding_rms: float   # predicted RMS rounding at the chain output, chain LSB
    decimation: int
    node_paths: tuple[Response, ...]   # realised response from the chain input to each node
    node_decimations: tuple[int, ...]  # decimation from the chain input to each node

    def worst_case_codes(self, node: int, code_max: int, repeats: int = 2) -> np.ndarray:
        """Codes of +-full scale that drive node ``node`` to +L1 at its last output.

        The sign pattern is sign(h) time-reversed; it is front-padded to a whole number of
        the node's decimation so that its last code completes an output.
        """
        path = self.node_paths[node]
        signs = path.signs()
        decimation = self.node_decimations[node]
        pad = (-signs.size) % decimation
        pattern = np.concatenate([np.zeros(pad, dtype=np.int64), signs])
        codes = np.where(pattern >= 0, code_max, -code_max - 1)
        return np.tile(codes, repeats)


def _stage_responses(stage: Stage) -> list[tuple[str, Response, Response, Response | None]]:
    """(suffix, realised, ideal, rounding response or None) per section of a stage."""
    if isinstance(stage, FirStage):
        return [("", impulse.fir(stage.taps_realised), impulse.fir(stage.taps), None)]
    parts: list[tuple[str, Response, Response, Response | None]] = []
    for j, sec in enumerate(stage.sections):
        b_r, a_r = sec.b_realised, sec.a_realised
        noise = impulse.biquad((-1.0, 1.0, 0.0), a_r)
        parts.append((f".section{j + 1}", impulse.biquad(b_r, a_r),
                      impulse.biquad(sec.b, sec.a), noise))
    return parts


def analyse_cascade(stages: tuple[Stage, ...], input_rate_hz: float) -> CascadeAnalysis:
    """Gains, rounding sources and responses of the cascade (input bound applied later)."""
    walk = _Walk(impulse.identity(), impulse.identity())
    gains: list[tuple[str, float, float, float, Stage, int]] = []
    paths: list[Response] = []
    for i, stage in enumerate(stages):
        name = f"stage{i + 1}"
        for suffix, realised, ideal, noise in _stage_responses(stage):
            walk.extend(realised, ideal, walk.decimation)
            rate = input_rate_hz / walk.decimation
            if noise is not None:
                walk.sources.append((f"{name}{suffix}", noise, walk.decimation, rate))
            gains.append((f"{name}{suffix}", walk.path.l1, walk.rounding_here(), rate, stage,
                          walk.decimation))
            paths.append(walk.path)
        if isinstance(stage, FirStage):
            walk.decimation *= stage.decimation
            rate = input_rate_hz / walk.decimation
            walk.sources.append((name, impulse.identity(), walk.decimation, rate))
            last = gains[-1]
            gains[-1] = (last[0], last[1], walk.rounding_here(), rate, last[4], walk.decimation)
    sources = tuple(RoundingSource(n, r, rate) for n, r, _, rate in walk.sources)
    nodes = tuple(NodeBound(n, g, e, 0.0, 32, rate) for n, g, e, rate, _, _ in gains)
    return CascadeAnalysis(
        nodes=nodes,
        sources=sources,
        total=walk.path,
        ideal_total=walk.ideal,
        max_gain_l1=max([1.0] + [n.gain_l1 for n in nodes]),
        output_rounding=sum(s.worst for s in sources),
        output_rounding_rms=math.sqrt(sum(s.rms ** 2 for s in sources)),
        decimation=walk.decimation,
        node_paths=tuple(paths),
        node_decimations=tuple(g[5] for g in gains),
    )


def node_bounds(stages: tuple[Stage, ...], analysis: CascadeAnalysis, input_bound: float,
                input_rate_hz: float) -> tuple[NodeBound, ...]:
    """Every node and accumulator bound for chain inputs bounded by ``input_bound``."""
    out: list[NodeBound] = [NodeBound("offset", 1.0, 0.0, input_bound, 32, input_rate_hz)]
    it = iter(analysis.nodes)
    previous = input_bound
    for i, stage in enumerate(stages):
        sections = [None] if isinstance(stage, FirStage) else list(stage.sections)
        for j, sec in enumerate(sections):
            node = next(it)
            bound = node.gain_l1 * input_bound + node.rounding
            if isinstance(stage, FirStage):
                frac = stage.fmt.frac
                acc = sum(abs(t) for t in stage.taps_int) * previous + (1 << max(frac - 1, 0))
                label = f"stage{i + 1}.acc"
            else:
                assert sec is not None
                q = sec.fmt.frac
                acc = (sum(abs(b) for b in sec.b_int) * previous
                       + sum(abs(a) for a in sec.a_int) * bound + 2 * (1 << (q - 1)))
                label = f"stage{i + 1}.section{j + 1}.acc"
            out.append(NodeBound(label, 0.0, 0.0, float(acc), 64, node.rate_hz))
            out.append(NodeBound(node.name, node.gain_l1, node.rounding, bound, 32,
                                 node.rate_hz))
            previous = bound
    return tuple(out)

