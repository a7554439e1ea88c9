"""The values the C header templates print, read off a Design (nothing is recomputed).

Every integer is checked to fit the C type the template gives it, and every shift to lie
where the firmware's int64 rounding shift is defined (0 .. MAX_SHIFT); a design that does
not is refused with a DesignError naming the constant.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction
from typing import Any

from hosttool.codegen.steps import steps_context
from hosttool.design.filters import BiquadStage, FirStage
from hosttool.design.fixedpoint import INT32_MAX, INT32_MIN, QFormat
from hosttool.design.identity import IDENTITY_TAG
from hosttool.design.resolve import LIN_FRAC, Design, offset_limit
from hosttool.errors import DesignError
from hosttool.formats import calblock

#: Largest shift of ht_round_shift on int64 (1 << (k - 1) must stay below 2^63).
MAX_SHIFT = 62


#: Sub-steps of a format's step to which a design value is rounded before it is printed: the
#: printed text is then a function of an integer and the exact step, so a few ULPs of noise in
#: the float design (another BLAS kernel, numpy or CPU) cannot change a byte of the header.
DESIGN_SUBSTEPS = 256
#: Decimal places of the error figures in the proof comment, in output LSB.
ERROR_PLACES = 3


def on_grid(value: float, frac: int, substeps: int = DESIGN_SUBSTEPS) -> float:
    """``value`` rounded to the nearest 1/``substeps`` of the step 2^-``frac``.

    The result is an exact dyadic rational (an integer times a power of two), so its decimal
    form is the same on every machine.
    """
    grid = math.ldexp(1.0, -frac) / substeps
    return round(value / grid) * grid


def decimal_places(value: float, places: int) -> str:
    """``value`` rounded to ``places`` decimals, as fixed-point text (never "-0.000")."""
    scaled = round(value * 10 ** places)
    sign = "-" if scaled < 0 else ""
    whole, part = divmod(abs(scaled), 10 ** places)
    return f"{sign}{whole}.{part:0{places}d}" if places else f"{sign}{whole}"


@dataclass(frozen=True)
class Const:
    """One integer constant: value, real value and its Q format name.

    ``design`` is the unquantised design value rounded by ``on_grid`` to 1/256 of the
    format's step, where there is one.
    """

    value: int
    real: float
    q: str
    design: float | None = None

    @property
    def range_log2(self) -> int:
        """m of the Q format: the value lies in [-2^m, 2^m)."""
        return int(self.q[1:].split(".")[0])


def _int32(value: int, what: str, source: str) -> int:
    if not INT32_MIN <= value <= INT32_MAX:
        raise DesignError(f"{source}: {what} = {value} does not fit int32_t")
    return value


def _shift(value: int, what: str, source: str) -> int:
    if not 0 <= value <= MAX_SHIFT:
        raise DesignError(f"{source}: {what} = {value} is outside the shifts 0 .. {MAX_SHIFT} "
                          "the C firmware supports")
    return value


def _const(value: int, frac: int, what: str, source: str, design: float | None = None,
           word: int = 32) -> Const:
    return Const(_int32(value, what, source), math.ldexp(value, -frac),
                 QFormat(word, frac).name, None if design is None else on_grid(design, frac))


def fraction_text(value: Fraction) -> str:
    """An exact fraction as decimal text when it has a finite decimal form, else n/d."""
    den, twos, fives = value.denominator, 0, 0
    while den % 2 == 0:
        den, twos = den // 2, twos + 1
    while den % 5 == 0:
        den, fives = den // 5, fives + 1
    if den != 1:
        return f"{value.numerator}/{value.denominator}"
    places = max(twos, fives)
    return decimal_places_exact(value, places)


def decimal_places_exact(value: Fraction, places: int) -> str:
    """``value`` (a multiple of 10^-places) as fixed-point text."""
    scaled = value * 10 ** places
    assert scaled.denominator == 1
    n = scaled.numerator
    whole, part = divmod(abs(n), 10 ** places)
    sign = "-" if n < 0 else ""
    return f"{sign}{whole}.{part:0{places}d}" if places else f"{sign}{whole}"


def output_context(d: Design) -> dict[str, Any]:
    """The exact meaning of one output integer: LSB, rate and range (design.output)."""
    src, o = d.spec.source, d.output
    low, high = math.floor(o.range_min), math.ceil(o.range_max)
    return {"lsb_num": _int32(o.lsb.numerator, "output LSB numerator", src),
            "lsb_den": _int32(o.lsb.denominator, "output LSB denominator", src),
            "lsb": fraction_text(o.lsb),
            "lsb_fraction": f"{o.lsb.numerator}/{o.lsb.denominator}",
            "rate_num": _int32(o.rate_sps.numerator, "output rate numerator", src),
            "rate_den": _int32(o.rate_sps.denominator, "output rate denominator", src),
            "rate": fraction_text(o.rate_sps),
            "adc_rate": fraction_text(o.rate_sps * d.decimation),
            "range_min": _int32(low, "range minimum (LSB)", src),
            "range_max": _int32(high, "range maximum (LSB)", src),
            "range_whole": low == o.range_min and high == o.range_max,
            "range_min_units": fraction_text(o.range_min * o.lsb),
            "range_max_units": fraction_text(o.range_max * o.lsb)}


def _fir(i: int, stage: FirStage, src: str) -> dict[str, Any]:
    f = stage.fmt
    return {"fir": True, "length": len(stage.taps_int),
            "frac": _shift(f.frac, f"stage{i}.frac", src), "q": f.name,
            "decimation": stage.decimation,
            "taps": [_const(t, f.frac, f"stage{i}.h[{k}]", src, real)
                     for k, (t, real) in enumerate(zip(stage.taps_int, stage.taps, strict=True))]}


def _biquads(i: int, stage: BiquadStage, src: str) -> dict[str, Any]:
    sections = []
    for j, sec in enumerate(stage.sections, start=1):
        q = _shift(sec.fmt.frac, f"stage{i}.section{j}.q", src)
        ideal = (*sec.b, sec.a[1], sec.a[2])
        names = ("b0", "b1", "b2", "a1", "a2")
        coeffs = [(n, _const(v, q, f"stage{i}.section{j}.{n}", src, real))
                  for n, v, real in zip(names, (*sec.b_int, *sec.a_int), ideal, strict=True)]
        sections.append({"index": j, "q": q, "qname": sec.fmt.name, "coeffs": coeffs})
    return {"fir": False, "sections": sections}


def design_context(d: Design) -> dict[str, Any]:
    """Everything design.h.j2 prints."""
    src, c, g = d.spec.source, d.constants, d.guard_bits
    stages = []
    for i, stage in enumerate(d.stages, start=1):
        entry = _fir(i, stage, src) if isinstance(stage, FirStage) else _biquads(i, stage, src)
        entry |= {"index": i, "kind": stage.kind, "rate_hz": stage.rate_hz}
        stages.append(entry)
    bits = d.spec.adc.bits
    lin = d.linearisation
    temp = d.temperature
    rate_millihz = round(d.spec.adc.data_rate_sps * 1000)
    out: dict[str, Any] = {
        "adc": {"bits": bits, "pga_gain": d.budget.pga_gain, "pga_auto": d.budget.pga_auto,
                "rate_sps": d.spec.adc.data_rate_sps, "rate_millihz": rate_millihz,
                "rate_exact": rate_millihz == d.spec.adc.data_rate_sps * 1000,
                "sinc_order": d.spec.adc.sinc_order,
                "code_low": d.code_min, "code_high": d.code_max},
        "guard_bits": _shift(g, "guard_bits", src),
        "input_bound_log2": d.input_bound.bit_length() - 1,
        "offset": _const(c.offset, g, "offset", src),
        "offset_limit": offset_limit(bits, g),
        "stages": stages,
        "fir_count": sum(1 for s in stages if s["fir"]),
        "section_count": sum(len(s["sections"]) for s in stages if not s["fir"]),
        "decimation": d.decimation, "output_rate_hz": d.output_rate_hz,
        "scale": {"mul": _const(c.scale_mul, d.scale.shift, "scale_mul", src, d.scale.ideal),
                  "shift": _shift(d.scale.shift, "scale.shift", src),
                  "limit": d.scale.multiplier_limit},
        "lin": None, "temp": None,
        "lin_frac": LIN_FRAC,
        "output": output_context(d),
        "proof": proof_context(d),
        "steps": steps_context(d),
        "resolution": d.spec.output.resolution, "unit": d.spec.sensor.unit,
        "warnings": d.warnings,
    }
    if lin is not None:
        calblock.check_lin_slots(len(c.lin), src)
        out["lin"] = {"mode": lin.mode, "count": len(c.lin),
                      "norm_shift": _shift(lin.norm_shift, "linearisation.norm_shift", src),
                      "coeffs": [_const(v, LIN_FRAC, f"lin.c{k}", src, real) for k, (v, real)
                                 in enumerate(zip(c.lin, lin.coeffs, strict=True))]}
    if temp is not None:
        out["temp"] = {
            "ref": temp.reference_centi, "low": temp.min_centi, "high": temp.max_centi,
            "zero": _const(c.tc_zero, temp.zero_shift, "tc_zero", src),
            "zero_shift": _shift(temp.zero_shift, "temperature.zero_shift", src),
            "span": _const(c.tc_span, temp.span_shift + LIN_FRAC, "tc_span", src),
            "span_shift": _shift(temp.span_shift, "temperature.span_shift", src),
            "zero_range": f"{temp.zero_range:.6g}", "span_range": f"{temp.span_range:.6g}"}
        for value, what in ((temp.reference_centi, "reference_c"), (temp.min_centi, "min_c"),
                            (temp.max_centi, "max_c")):
            _int32(value, f"temperature.{what} (0.01 C)", src)
    return out


def _node_bound(bound: float, word: int) -> tuple[str, str]:
    """A node's worst case and headroom as text, each rounded on a grid fixed by its word.

    An int32 node holds integers far below 2^53, so its bound is printed as the nearest
    integer; an int64 accumulator's float bound carries noise in its last few integer
    digits, so it is printed to 6 significant digits. The headroom (two decimals) comes from
    the printed value.
    """
    limit = (1 << (word - 1)) - 1
    shown: float = math.floor(bound + 0.5) if word == 32 else float(f"{bound:.6g}")
    headroom = math.log2(limit / shown) if shown > 0 else float(word - 1)
    text = f"{int(shown)}" if word == 32 else f"{shown:.6g}"
    return text, decimal_places(headroom, 2)


def proof_context(d: Design) -> dict[str, Any]:
    """The proof figures of the header comment, each rounded to a grid fixed by its unit.

    Node bounds as ``_node_bound`` prints them, errors in output LSB to ERROR_PLACES
    decimals: the text does not depend on the last bits of the float analysis.
    """
    nodes = [dict(zip(("bound", "headroom"), _node_bound(n.bound, n.word), strict=True))
             | {"name": n.name, "word": n.word} for n in d.all_nodes]
    places = ERROR_PLACES
    errors = [{"name": e.name, "worst": decimal_places(e.worst_lsb, places),
               "rms": decimal_places(e.rms_lsb, places)} for e in d.errors]
    resolution = d.spec.output.resolution
    return {"nodes": nodes, "errors": errors,
            "error_bound": decimal_places(d.error_bound_lsb, places),
            "error_bound_units": decimal_places(d.error_bound_lsb * resolution,
                                                places + _decimals_of(resolution)),
            "ideal_error_bound": decimal_places(d.ideal_error_bound_lsb, places),
            "output_bound": _node_bound(d.output_bound_lsb, 32)[0], "places": places}


def _decimals_of(step: float) -> int:
    """Decimal places needed to write a multiple of ``step`` (0 for steps of 1 or more)."""
    return max(0, -math.floor(math.log10(step))) if step > 0 else 0


def calblock_context(d: Design) -> dict[str, Any]:
    """Everything calblock.h.j2 prints."""
    target = d.spec.target
    src = d.spec.source
    size = target.calblock_size if target else None
    if size is not None:
        calblock.check_area_size(size, src)
    offsets = calblock.offsets()
    fields = [{"name": f.name, "ctype": f.ctype, "count": f.count, "doc": f.doc,
               "offset": offsets[f.name], "size": f.size} for f in calblock.LAYOUT]
    flags = calblock.design_flags(d)
    identity = calblock.format_identity(d)
    return {"identity": identity.items, "format_id": list(identity.digest),
            "identity_tag": IDENTITY_TAG,
            "magic": calblock.MAGIC, "layout_version": calblock.LAYOUT_VERSION,
            "length": calblock.BLOCK_SIZE, "fields": fields,
            "address": target.calblock_address if target else None, "size": size,
            "spec_hash8": list(calblock.spec_hash8(d)), "flags": flags,
            "flag_lin": calblock.FLAG_LINEARISATION, "flag_temp": calblock.FLAG_TEMPERATURE,
            "lin_slots": calblock.LIN_SLOTS, "serial_bytes": calblock.SERIAL_BYTES}
