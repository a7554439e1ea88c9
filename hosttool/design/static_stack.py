"""The static path of a stack of units in numpy, and the checks of a record's arrays.

A production line runs the static path (offset, scale, linearisation, temperature: steps
1 and 3 to 5 of DEVELOPERS.md "Arithmetic contract") on a few readings of each unit, many
units at a time, and needs nothing else of the integer model. Here it runs as whole-array
int64 operations over the (units, readings) stack, one operation of ``model.static_word``
after the other in its order, so that ``batch`` never imports numba (about 0.5 s of a
process's start: its import and the loading of the compiled kernels).
The same integers as ``model.static_integer`` of each unit with its constants:
tests/test_static_many.py holds them to it over random constants at and beyond every
limit, codes at the ADC's rails and temperatures beyond the clamp range, for every
linearisation mode with and without temperature compensation; the compiled model is held
to the C firmware.

int64 products wrap in numpy as in the compiled model, but the constants in force
(``Design.check_in_force_many``) keep every value in range: the design's proof.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike, NDArray

from hosttool.design.fixedpoint import INT32_MAX, INT32_MIN, round_shift_array
from hosttool.design.resolve import LIN_FRAC, ConstantsStack, Design, UnitConstants

I64 = NDArray[np.int64]


def codes_text(design: Design, ndim: int) -> str:
    """What codes must be: a record (1-D) or a stack of records (2-D, one per unit)."""
    shape = "1-D array" if ndim == 1 else "2-D array (units, readings)"
    return f"codes must be a {shape} of {design.spec.adc.bits}-bit values"


def record_arrays(design: Design, codes: ArrayLike, temps_centi: ArrayLike | None, *,
                  ndim: int = 1) -> tuple[I64, I64 | None]:
    """Codes and temperatures (0.01 C) as int64 arrays, shapes checked (``ndim``: 1 for a
    record, 2 for a stack of them; the code range is checked by whoever runs them)."""
    x = np.ascontiguousarray(codes, dtype=np.int64)
    if x.ndim != ndim:
        raise ValueError(codes_text(design, ndim))
    if temps_centi is None:
        return x, None
    t = np.ascontiguousarray(temps_centi, dtype=np.int64)
    if t.shape != x.shape:
        raise ValueError("temperatures must pair one to one with codes")
    return x, t


def checked_inputs(design: Design, codes: ArrayLike, temps_centi: ArrayLike | None, *,
                   ndim: int = 1) -> tuple[I64, I64 | None]:
    """``record_arrays``, the codes checked against the ADC's range."""
    x, t = record_arrays(design, codes, temps_centi, ndim=ndim)
    if x.size and (x.min() < design.code_min or x.max() > design.code_max):
        raise ValueError(codes_text(design, ndim))
    return x, t


def _clamp32(x: I64) -> I64:
    """sat32 of every value (``model.clamp32``)."""
    return np.minimum(np.maximum(x, INT32_MIN), INT32_MAX)


def static_outputs_many(design: Design, codes: ArrayLike, temps_centi: ArrayLike | None,
                        constants: Sequence[UnitConstants]) -> I64:
    """The outputs of ``model.static_integer`` for a stack of U units (without the per-node
    figures: a production line's verdicts), in output LSB: row i of the (U, n) outputs is
    ``static_integer(design, codes[i], temps_centi[i], constants=constants[i]).output``.
    ``codes`` (ADC codes) and ``temps_centi`` (0.01 C, or None: the reference temperature)
    are (U, n); each unit's constants are checked by the caller
    (``Design.check_in_force_many``)."""
    x, t = checked_inputs(design, codes, temps_centi, ndim=2)
    if len(constants) != x.shape[0]:
        raise ValueError(f"{len(constants)} units' constants for {x.shape[0]} rows of codes")
    c = ConstantsStack.of(constants, design.lin_count)
    # step 1: offset, the chain word (filters pass a settled value unchanged)
    s = _clamp32(x * (1 << design.guard_bits) - c.offset[:, None])
    # step 3: scale
    s = _clamp32(round_shift_array(s * c.scale_mul[:, None], design.scale.shift))
    lin = design.linearisation
    if lin is not None:                                  # step 4: Horner in Q30
        w = s * (1 << (LIN_FRAC - lin.norm_shift))
        acc = c.lin[:, -1:]
        for i in range(c.lin.shape[1] - 2, -1, -1):
            acc = round_shift_array(acc * w, LIN_FRAC) + c.lin[:, i:i + 1]
        s = _clamp32(round_shift_array(acc + np.zeros_like(w), LIN_FRAC - lin.norm_shift))
    tc = design.temperature
    if tc is not None:                                   # step 5: temperature
        tt = np.full_like(x, tc.reference_centi) if t is None else t
        dt = np.minimum(np.maximum(tt, tc.min_centi), tc.max_centi) - tc.reference_centi
        s1 = s - round_shift_array(c.tc_zero[:, None] * dt, tc.zero_shift)
        g = round_shift_array(c.tc_span[:, None] * dt, tc.span_shift)
        s = _clamp32(s1 + round_shift_array(s1 * g, LIN_FRAC))
    out: I64 = np.ascontiguousarray(s, dtype=np.int64)
    return out
