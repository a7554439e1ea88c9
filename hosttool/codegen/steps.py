"""What templates/design_steps.h.j2 prints: the pipeline's C steps, specialised by the proofs.

Each step takes the form its exact ranges (``hosttool.design.ranges``) allow: 32-bit words
where every value fits, 32 x 32 -> 64 products where both operands are 32-bit, no saturation
where the result cannot leave int32, a moving average as a running sum, a symmetric FIR
folded, a biquad's a1 and a2 negated so every term is a multiply-accumulate and its error
feedback held with the rounding constant in 32 bits. Each choice carries the ranges that
justify it, printed beside the code. A step the ranges cannot prove safe keeps the
contract's general form (64-bit words, saturation).
"""

from __future__ import annotations

from collections import Counter
from typing import Any

from hosttool.design.filters import Biquad, FirStage
from hosttool.design.fixedpoint import INT32_MAX, INT32_MIN
from hosttool.design.ranges import BiquadRanges, FirmwareRanges, FirRanges, Span, firmware_ranges
from hosttool.design.resolve import LIN_FRAC, Design
from hosttool.errors import DesignError

#: Most taps differing from the common one for which a moving average runs as a running sum.
MAX_CORRECTIONS = 2
#: Tap pairs per round of a folded FIR's loop (the remainder follows the loop unrolled).
UNROLL = 4
#: A folded FIR of at most this many tap pairs is written out in full, each tap a constant in
#: the code: about 20 bytes of Thumb-2 per pair instead of a 4-byte table entry, for five
#: instructions per pair instead of about seven.
FULL_UNROLL_PAIRS = 64


def _fits32(value: int) -> bool:
    return INT32_MIN <= value <= INT32_MAX


def _half(k: int) -> int:
    """The rounding constant of round_shift(x, k) (0 for k = 0)."""
    return 1 << (k - 1) if k else 0


def _fir(block: FirRanges, stage: FirStage, index: int) -> dict[str, Any]:
    taps = list(stage.taps_int)
    n = len(taps)
    common, _ = Counter(taps).most_common(1)[0]
    corrections = [(k, t - common) for k, t in enumerate(taps) if t != common]
    out: dict[str, Any] = {
        "fir": True, "name": f"stage{index}", "index": index, "kind": stage.kind,
        "length": n, "frac": stage.fmt.frac, "half": _half(stage.fmt.frac),
        "decimation": stage.decimation, "x": block.x.text(), "acc": block.acc.text(),
        "y": block.y.text()}
    if not block.y.fits32 or not block.acc.fits64:
        raise DesignError(f"stage{index}: the exact output range {block.y.text()} leaves "
                          "int32 (the design's proof should have refused this cascade)")
    csum = block.running_sum.times(common) + Span(out["half"], out["half"])
    if (n >= 3 and len(corrections) <= MAX_CORRECTIONS and csum.fits64
            and (block.x - block.x).fits32 and _fits32(common)):
        out |= {"form": "running_sum", "common": common, "corrections": corrections,
                "sum": block.running_sum.text(), "csum": csum.text(),
                "diff": (block.x - block.x).text()}
    elif n >= 2 and taps == taps[::-1] and block.pair_sum.fits32:
        pairs = n // 2
        out |= {"form": "folded", "half_taps": taps[:pairs],
                "centre": taps[pairs] if n % 2 else None, "pairs": pairs,
                "full": pairs <= FULL_UNROLL_PAIRS,
                "unroll": UNROLL, "rounds": pairs // UNROLL,
                "tail": list(range(pairs - pairs % UNROLL, pairs)),
                "pair_sum": block.pair_sum.text()}
    else:
        out |= {"form": "direct"}
    return out


def _biquad(block: BiquadRanges, sec: Biquad, index: int, section: int) -> dict[str, Any]:
    q = sec.fmt.frac
    b0, b1, b2 = sec.b_int
    a1, a2 = sec.a_int
    if not block.y.fits32 or not block.x.fits32:
        raise DesignError(f"stage{index}.section{section}: output bound {block.y.text()} "
                          "leaves int32 (the design's proof should have refused it)")
    if not (1 <= q <= 32 and _fits32(-a1) and _fits32(-a2)):
        raise DesignError(f"stage{index}.section{section}: Q{q} coefficients or a1, a2 at "
                          "-2^31 are outside what the firmware's biquad step handles")
    return {"fir": False, "name": f"stage{index}_sec{section}", "index": index,
            "section": section, "q": q, "half": _half(q), "mask": (1 << q) - 1,
            "b": (b0, b1, b2), "na": (-a1, -a2), "a": (a1, a2),
            "x": block.x.text(), "y": block.y.text()}


def _word(span: Span) -> str:
    return "int32_t" if span.fits32 else "int64_t"


def _static(d: Design, r: FirmwareRanges) -> dict[str, Any]:
    scale = {"shift": d.scale.shift, "half": _half(d.scale.shift),
             "limit": d.scale.multiplier_limit, "input": r.chain.text(),
             "product": r.scale_product.text(), "out": r.scale.text(),
             "sat": not r.scale.fits32}
    if not r.scale_product.fits64:
        raise DesignError(f"{d.spec.source}: the scale product can reach "
                          f"{r.scale_product.text()}, beyond int64")
    out: dict[str, Any] = {"scale": scale, "lin": None, "temp": None}
    lin = d.linearisation
    if lin is not None and r.lin_w is not None and r.lin is not None:
        k = lin.norm_shift
        steps = [{"coeff": i, "acc_in": r.lin_acc[j].text(), "acc_in32": r.lin_acc[j].fits32}
                 for j, i in enumerate(range(len(lin.coeffs) - 2, -1, -1))]
        out["lin"] = {"count": len(lin.coeffs), "top": len(lin.coeffs) - 1, "norm": k,
                      "w_mul": 1 << (LIN_FRAC - k), "w": r.lin_w.text(), "steps": steps,
                      "frac": LIN_FRAC, "half": _half(LIN_FRAC), "out_shift": LIN_FRAC - k,
                      "out_half": _half(LIN_FRAC - k), "acc": r.lin_acc[-1].text(),
                      "out": r.lin.text(), "sat": not r.lin.fits32}
    t = d.temperature
    if (t is not None and r.temp_dt is not None and r.temp_z is not None and r.temp_s1 is not None
            and r.temp_g is not None and r.temp_product is not None
            and r.temperature is not None):
        if not (r.temp_dt.fits32 and r.temp_product.fits64):
            raise DesignError(f"{d.spec.source}: temperature: the clamped range or the gain "
                              "product leaves the firmware's words")
        out["temp"] = {
            "low": t.min_centi, "high": t.max_centi, "ref": t.reference_centi,
            "zero_shift": t.zero_shift, "zero_half": _half(t.zero_shift),
            "span_shift": t.span_shift, "span_half": _half(t.span_shift),
            "frac": LIN_FRAC, "half": _half(LIN_FRAC),
            "dt": r.temp_dt.text(), "z": r.temp_z.text(), "z_type": _word(r.temp_z),
            "s1": r.temp_s1.text(), "s1_type": _word(r.temp_s1),
            "g": r.temp_g.text(), "g_type": _word(r.temp_g),
            "product": r.temp_product.text(), "out": r.temperature.text(),
            "sat": not r.temperature.fits32}
    return out


def steps_context(d: Design) -> dict[str, Any]:
    """Everything design_steps.h.j2 prints for ``d``."""
    r = firmware_ranges(d)
    if not r.offset.fits32 or not r.offset_scaled_code.fits32:
        raise DesignError(f"{d.spec.source}: the offset step's range {r.offset.text()} leaves "
                          "int32")
    blocks: list[dict[str, Any]] = []
    it = iter(r.stages)
    for i, stage in enumerate(d.stages, start=1):
        if isinstance(stage, FirStage):
            fir = next(it)
            assert isinstance(fir, FirRanges)
            blocks.append(_fir(fir, stage, i))
            continue
        for j, sec in enumerate(stage.sections, start=1):
            bq = next(it)
            assert isinstance(bq, BiquadRanges)
            blocks.append(_biquad(bq, sec, i, j))
    static = _static(d, r)
    saturating = [name for name in ("scale", "lin", "temp")
                  if static[name] is not None and static[name]["sat"]]
    return {"offset": {"mul": 1 << d.guard_bits, "code": r.code.text(),
                       "scaled": r.offset_scaled_code.text(), "out": r.offset.text()},
            "blocks": blocks, "decimating": any(b["fir"] and b["decimation"] > 1
                                                 for b in blocks),
            "saturating": saturating, **static}
