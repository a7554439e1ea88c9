"""Per-unit calibration: one unit's readings to its integer constants, figures and verdict.

The unit is modelled in raw counts as a straight line in the design's shape variable u,
with the zero and the span drifting linearly with temperature:

    raw = a + z dT + b (1 + k dT) u(m)          dT = T - temperature.reference_c

u(m) = m for "none" and "polynomial" linearisation; for "bridge_inverse" u is the nominal
bridge's exact output normalised to its tangent slope, so the design's nominal inverse
polynomial still applies and only zero and span are fitted. The fit is ordinary least
squares (numpy.linalg.lstsq) over every reading, in [1, u] or [1, dT, u, u dT]. The
"polynomial" mode then fits the per-unit C_0 .. C_n in the design's normalised variable
w = s / 2^K to what the firmware must output. Every constant is rounded into the design's
format and checked (``Design.check_in_force_many``: what ``Design.with_constants``
refuses); the verdict comes from the unit's readings run through the bit-exact static path
(``static_stack.static_outputs_many``) with those constants: what the firmware will output.

A production line calibrates thousands of units of a dozen readings each. They are
calibrated side by side (``calibrate_units``): units with the same number of readings form
a ``stack.UnitStack`` and every step is one numpy expression over all of them, in the
order of a loop over one unit (a unit gives the same bits alone as in a stack; only the
"polynomial" mode's C_n are fitted unit by unit). The fit stays numpy's (its ``lstsq``
kernel over the stack, and the SVD ``numpy.linalg.cond`` takes for the condition number):
a closed form or one decomposition for both changes the last bits of the fitted zero and
span, which the record keeps.

Refused (``InputError``, exit status 2): saturated readings, non-monotonic response,
readings of one point that disagree, too few points, noise far above the ADC's, missing
readings for a limit the spec sets, a fit the readings do not determine (condition number
above ``MAX_CONDITION``), a fit that is not finite or lies outside what the spec's bridge
and ADC can give (``_refuse_fit``). Each names the file, the unit's line and serial. A
unit that misses its limits is not refused: its verdict is "fail" with the reasons.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from typing import Any, NamedTuple

import numpy as np
from numpy.linalg import _umath_linalg
from numpy.typing import NDArray

from hosttool import __version__
from hosttool.design.resolve import LIN_FRAC, Design, UnitConstants
from hosttool.design.static_stack import static_outputs_many
from hosttool.errors import InputError
from hosttool.formats.calblock import BlockFormat
from hosttool.formats.caljson import (
    FORMAT,
    FORMAT_VERSION,
    constants_json,
    formats,
    identity_json,
    seal,
)
from hosttool.formats.readings import UnitReadings
from hosttool.physics.oiml import max_intervals, mpe_intervals
from hosttool.production.stack import (
    DISAGREE_PCT_SPAN,
    PointPlan,
    PointRules,
    UnitStack,
    plans,
    refuse_points,
    refuse_rows,
    running_max,
    sum_columns,
    unit_where,
)
from hosttool.util.cautions import SAFETY
from hosttool.util.utctime import format_time_utc

F64 = NDArray[np.float64]

#: Largest condition number of the fit's design matrix (columns scaled to 1) accepted: the
#: readings must determine zero, span and their drifts (our choice; a lot spread as the
#: README asks is below 1e3).
MAX_CONDITION = 1e8
#: numpy's least-squares generalised ufunc over a stack (numpy 2); None: one call per unit.
_STACKED_LSTSQ = getattr(_umath_linalg, "lstsq", None)


class Criterion(NamedTuple):
    """One row of the pass/fail table; ``limit`` None means reported, not judged (a named
    tuple: a dozen per unit, made faster than frozen dataclasses)."""

    key: str                # stable name (JSON, record)
    label: str
    value: float | None     # None: could not be evaluated (constants outside their formats)
    limit: float | None
    unit: str
    source: str             # the spec key of the limit
    passed: bool


class Rounding(NamedTuple):
    """What rounding one constant into its format adds to the output, worst case (a named
    tuple, as ``Criterion``)."""

    constant: str
    integer: int
    exact: float            # the value before rounding, in the integer's units
    adds: float             # output units, worst over the measuring and temperature range


@dataclass(frozen=True)
class Point:
    """One reading through the bit-exact static path."""

    line: int
    reference: float
    temperature_c: float
    up: bool
    output: float | None    # firmware output, output units
    error: float | None     # output - reference
    linearity: float        # residual of the straight-line fit, output units


@dataclass(frozen=True)
class UnitCalibration:
    """The outcome for one unit."""

    serial: str
    cal_time_utc: int
    constants: UnitConstants
    formats_ok: bool
    formats_reason: str
    figures: dict[str, float | None]
    criteria: tuple[Criterion, ...]
    readings: UnitReadings
    output: F64 | None            # firmware output per reading, output units
    linearity: F64                # straight-line residual per reading, output units
    exact: dict[str, float] = field(repr=False)     # each constant before its rounding
    context: CalibrationContext = field(repr=False, compare=False)

    @property
    def rounding(self) -> tuple[Rounding, ...]:
        """What rounding each constant into its format adds to the output (CAL.json and
        the calibrate table; computed when asked: a batch records none of it)."""
        return _rounding(self.context, self.constants, self.exact)

    @property
    def points(self) -> tuple[Point, ...]:
        """Every reading with its firmware output and error (for the table and CAL.json)."""
        u, out = self.readings, self.output
        return tuple(Point(int(u.lines[i]), float(u.reference[i]), float(u.temperature_c[i]),
                           bool(u.up[i]), None if out is None else float(out[i]),
                           None if out is None else float(out[i] - u.reference[i]),
                           float(self.linearity[i]))
                     for i in range(u.reference.size))

    @property
    def passed(self) -> bool:
        """True when the constants fit their formats and every judged criterion passes."""
        return self.formats_ok and all(c.passed for c in self.criteria)

    @property
    def verdict(self) -> str:
        """"pass" or "fail"."""
        return "pass" if self.passed else "fail"

    @property
    def reasons(self) -> tuple[str, ...]:
        """One line per failed criterion."""
        out = [] if self.formats_ok else [self.formats_reason]
        for c in self.criteria:
            if not c.passed:
                shown = "not evaluated" if c.value is None else f"{c.value:.4g} {c.unit}"
                out.append(f"{c.label}: {shown} exceeds {c.limit:.4g} {c.unit} ({c.source})")
        return tuple(out)


@dataclass(frozen=True)
class CalibrationContext:
    """Everything about the spec a unit's calibration needs, computed once per spec."""

    design: Design
    resolution: float          # output units per LSB
    full_scale: float          # output units
    span_range: float          # m_max - m_min, output units
    nominal_b: float           # counts per unit of u, signed
    noise_counts: float        # ADC noise, counts RMS (budget)
    ratio_per_count: float     # bridge output ratio (V/V) per count
    code_min: int
    code_max: int
    block: BlockFormat         # what every unit's calibration block holds alike

    @classmethod
    def of(cls, design: Design) -> CalibrationContext:
        """Build once per spec; refuses a spec without a [calibration] section."""
        spec = design.spec
        if spec.calibration is None:
            raise InputError(f"{spec.source}: calibration: the spec has no [calibration] "
                             "section (reference points and limits)")
        cal = spec.calibration
        if cal.oiml_class is not None:
            n = spec.sensor.full_scale / spec.output.resolution
            if n > max_intervals(cal.oiml_class) * (1 + 1e-9):
                raise InputError(f"{spec.source}: calibration.oiml_class: class "
                                 f"{cal.oiml_class} covers at most "
                                 f"{max_intervals(cal.oiml_class):g} e; the range is {n:g} e "
                                 f"at output.resolution = {spec.output.resolution:g}")
        bridge = design.bridge
        return cls(
            design=design, resolution=design.output_step,
            full_scale=spec.sensor.full_scale, span_range=bridge.m_max - bridge.m_min,
            nominal_b=bridge.sensitivity / design.ratio_per_count,
            noise_counts=design.budget.noise_counts_rms,
            ratio_per_count=design.ratio_per_count,
            code_min=design.code_min, code_max=design.code_max, block=BlockFormat.of(design))

    def shape(self, reference: F64) -> F64:
        """u(m): the reference in the unit's fitted variable (output units)."""
        lin = self.design.linearisation
        if lin is None or lin.mode != "bridge_inverse":
            return reference
        return np.asarray(self.design.bridge.tangent_reading(reference))


# ----------------------------------------------------------------------------- fit

#: What stops one unit: its readings refused, or arithmetic that failed on them.
UnitFailure = InputError | ArithmeticError | ValueError


@dataclass(frozen=True)
class _Fits:
    """The straight-line fits of a stack's units, one value per unit."""

    a: F64                    # zero, counts
    b: F64                    # counts per unit of u
    z: F64                    # zero drift, counts per C
    k: F64                    # relative span drift, per C
    residual: F64             # (U, n) straight-line residuals, counts


def _point_rules(ctx: CalibrationContext) -> PointRules:
    spec = ctx.design.spec
    cal = spec.calibration
    assert cal is not None
    lin = ctx.design.linearisation
    return PointRules(
        resolution=ctx.resolution, unit=spec.sensor.unit,
        calibration_points=tuple(cal.points),
        needed_references=spec.linearisation.order + 1
        if lin is not None and lin.mode == "polynomial" else 2,
        tolerance=DISAGREE_PCT_SPAN / 100 * abs(ctx.nominal_b) * ctx.span_range,
        temperature=spec.temperature is not None,
        hysteresis=cal.max_hysteresis is not None,
        repeatability=cal.max_repeatability is not None)


def _design_matrix(ctx: CalibrationContext, st: UnitStack) -> F64:
    """(U, n, 2) columns [1, u] or (U, n, 4) [1, dT, u, u dT]."""
    shape = ctx.shape(st.reference)
    temp = ctx.design.spec.temperature
    x = np.ones(shape.shape + (2 if temp is None else 4,))
    if temp is None:
        x[..., 1] = shape
    else:
        dt = st.temperature_c - temp.reference_c
        x[..., 1], x[..., 2], x[..., 3] = dt, shape, shape * dt
    return x


def _lstsq(x: F64, y: F64) -> F64:
    """numpy.linalg.lstsq(x[i], y[i], rcond=None)[0] for every i, bit for bit: numpy's
    own least-squares kernel (the generalised ufunc behind ``lstsq``, LAPACK's gelsd) over
    the stack; a unit whose solution is not finite is solved again alone, so that a failure
    of the decomposition raises for that unit as ``lstsq`` does."""
    if _STACKED_LSTSQ is None:
        return np.stack([np.linalg.lstsq(a, b, rcond=None)[0] for a, b in zip(x, y,
                                                                             strict=True)])
    m, n = x.shape[-2:]
    with np.errstate(all="ignore"):
        beta = _STACKED_LSTSQ(x, y[..., None], np.finfo(np.float64).eps * max(m, n),
                              signature="ddd->ddid")[0][..., 0]
    for r in np.flatnonzero(~np.isfinite(beta).all(axis=1)).tolist():
        beta[r] = np.linalg.lstsq(x[r], y[r], rcond=None)[0]
    return np.asarray(beta, dtype=np.float64)


def _fit(ctx: CalibrationContext, st: UnitStack, refused: dict[int, InputError]
         ) -> _Fits:
    """The least-squares fits, guarded (refusals added to ``refused``, by row): the
    readings must determine every parameter (the design matrix, columns scaled to 1, has
    condition number at most ``MAX_CONDITION``), and the result must be finite and inside
    the physics range (``_refuse_fit``). Rows refused keep values that mean nothing."""
    x = _design_matrix(ctx, st)
    with np.errstate(all="ignore"):
        norms = np.abs(x).max(axis=1)
        usable = np.isfinite(x).all(axis=(1, 2)) & (norms > 0).all(axis=1)
        for r in np.flatnonzero(~usable).tolist():
            refused[r] = InputError(f"{unit_where(st.units[r])}: the readings do not "
                                    "determine the fit (a column of the straight-line model "
                                    "is zero or not finite)")
        scaled = np.where(usable[:, None, None], x / np.where(norms > 0, norms, 1.0)[:, None],
                          np.eye(x.shape[1], x.shape[2]))
        # numpy.linalg.cond(x / norms) without its checks: the ratio of the extreme
        # singular values
        singular = np.linalg.svd(scaled, compute_uv=False)
        condition = singular[:, 0] / singular[:, -1]
    for r in np.flatnonzero(~(condition <= MAX_CONDITION)).tolist():
        refused.setdefault(r, InputError(
            f"{unit_where(st.units[r])}: the readings do not determine the fit (condition "
            f"number {float(condition[r]):.3g} above {MAX_CONDITION:g}): spread the "
            "references and temperatures"))
    live = np.array([r not in refused for r in range(len(st))])
    beta = np.zeros((len(st), x.shape[2]))
    if live.any():
        beta[live] = _lstsq(x[live], st.mean[live])
    residual = np.zeros_like(st.mean)
    for r in np.flatnonzero(live).tolist():
        residual[r] = st.mean[r] - x[r] @ beta[r]
    _refuse_fit(ctx, st, beta, live, refused)
    if ctx.design.spec.temperature is None:
        zeros = np.zeros(len(st))
        return _Fits(beta[:, 0], beta[:, 1], zeros, zeros, residual)
    with np.errstate(all="ignore"):
        k = beta[:, 3] / beta[:, 2]
    return _Fits(beta[:, 0], beta[:, 2], beta[:, 1], k, residual)


def _refuse_fit(ctx: CalibrationContext, st: UnitStack, beta: F64, live: NDArray[np.bool_],
                refused: dict[int, InputError]) -> None:
    """Refuse fits (zero first, span at index 1, or 2 with temperature) that are not finite
    or that no bridge of this spec could give: a zero outside the ADC's code range, or a
    response over the whole measuring range smaller than the ADC's own noise (nothing was
    measured) or larger than the code range."""
    codes = ctx.code_max - ctx.code_min
    zero = beta[:, 0]
    with np.errstate(all="ignore"):
        response = np.abs(beta[:, 1 if beta.shape[1] == 2 else 2]) * ctx.span_range
    finite = np.asarray(np.isfinite(beta).all(axis=1))
    zero_ok = (ctx.code_min <= zero) & (zero <= ctx.code_max)
    response_ok = (ctx.noise_counts <= response) & (response <= codes)
    for r in np.flatnonzero(live & ~(finite & zero_ok & response_ok)).tolist():
        where = unit_where(st.units[r])
        if not finite[r]:
            refused[r] = InputError(f"{where}: the fit of the readings is not finite")
        elif not zero_ok[r]:
            refused[r] = InputError(f"{where}: the fitted zero {float(zero[r]):.4g} counts "
                                    f"lies outside the code range {ctx.code_min} .. "
                                    f"{ctx.code_max}")
        else:
            refused[r] = InputError(
                f"{where}: the fitted response over the range is {float(response[r]):.4g} "
                f"counts, outside what the bridge can give ({ctx.noise_counts:.4g}, the "
                f"ADC's noise, .. {codes}, the code range; nominal "
                f"{abs(ctx.nominal_b) * ctx.span_range:.4g}): not a working unit or "
                "mislabelled readings")


def _constants(ctx: CalibrationContext, st: UnitStack, fits: _Fits, rows: list[int],
               refused: dict[int, InputError]
               ) -> dict[int, tuple[UnitConstants, dict[str, float]]]:
    """Round the fits of ``rows`` into the design's formats (row -> constants and their
    unrounded values); a constant that is not finite refuses its unit."""
    d = ctx.design
    g, s = d.guard_bits, d.scale.shift
    index = np.asarray(rows, dtype=np.intp)
    exact: dict[str, F64] = {}
    with np.errstate(all="ignore"):
        exact["offset"] = np.ldexp(fits.a[index], g)
        exact["scale_mul"] = np.ldexp(1.0 / (fits.b[index] * ctx.resolution), s - g)
        scale_mul = np.rint(exact["scale_mul"])
        realised = np.ldexp(scale_mul, -s)
        tc = d.temperature
        if tc is not None:
            exact["tc_zero"] = np.ldexp(fits.z[index] * realised / 100, g + tc.zero_shift)
            exact["tc_span"] = np.ldexp(-fits.k[index] / 100, LIN_FRAC + tc.span_shift)
    finite = {name: np.isfinite(values).tolist() for name, values in exact.items()}
    values = {name: v.tolist() for name, v in exact.items()}
    integers = {name: [round(v) if ok else 0 for v, ok in zip(v_list, finite[name],
                                                               strict=True)]
                for name, v_list in values.items()}
    lin_mode = d.linearisation.mode if d.linearisation is not None else None
    shared_lin: tuple[int, ...] = d.nominal.lin if lin_mode == "bridge_inverse" else ()
    shared_exact = ({f"lin[{k}]": math.ldexp(c, LIN_FRAC)
                     for k, c in enumerate(d.linearisation.coeffs)}
                    if d.linearisation is not None and lin_mode == "bridge_inverse" else {})
    out: dict[int, tuple[UnitConstants, dict[str, float]]] = {}
    for j, r in enumerate(rows):
        bad = next((name for name in exact if not finite[name][j]), None)
        if bad is not None:
            refused[r] = InputError(f"{unit_where(st.units[r])}: the constant {bad} of this "
                                    "fit is not finite")
            continue
        unit_exact = {name: values[name][j] for name in exact}
        c = UnitConstants(offset=integers["offset"][j], scale_mul=integers["scale_mul"][j],
                          lin=shared_lin,
                          tc_zero=integers["tc_zero"][j] if tc is not None else 0,
                          tc_span=integers["tc_span"][j] if tc is not None else 0)
        if lin_mode == "polynomial":
            try:
                c = replace(c, lin=_polynomial(ctx, st.units[r], c, unit_exact))
            except InputError as exc:
                refused[r] = exc
                continue
        else:
            unit_exact.update(shared_exact)
        out[r] = (c, unit_exact)
    return out


def _polynomial(ctx: CalibrationContext, u: UnitReadings, c: UnitConstants,
                exact: dict[str, float]) -> tuple[int, ...]:
    """The "polynomial" mode's per-unit C_0 .. C_n: a fit in the design's normalised
    variable w = s / 2^K to what the firmware must output (their unrounded values added to
    ``exact``)."""
    d = ctx.design
    assert d.linearisation is not None
    realised = math.ldexp(c.scale_mul, -d.scale.shift)
    k_norm = d.linearisation.norm_shift
    w = (np.ldexp(u.raw_mean, d.guard_bits) - c.offset) * realised / 2.0 ** k_norm
    target = u.reference / ctx.resolution
    tc = d.temperature
    if tc is not None:
        dt = np.clip(np.rint(u.temperature_c * 100), tc.min_centi, tc.max_centi) \
            - tc.reference_centi
        gamma = c.tc_span / 2.0 ** (tc.span_shift + LIN_FRAC)
        target = target / (1 + gamma * dt) + c.tc_zero / 2.0 ** tc.zero_shift * dt
    if not (np.all(np.isfinite(w)) and np.all(np.isfinite(target))):
        raise InputError(f"{unit_where(u)}: the linearisation fit of this unit is not finite")
    coeffs = np.polynomial.polynomial.polyfit(w, target / 2.0 ** k_norm,
                                              d.spec.linearisation.order)
    lin = []
    for k, coeff in enumerate(coeffs.tolist()):
        try:
            value = math.ldexp(coeff, LIN_FRAC)
        except OverflowError:
            value = math.inf
        if not math.isfinite(value):
            raise InputError(f"{unit_where(u)}: the constant lin[{k}] of this fit is not "
                             "finite")
        exact[f"lin[{k}]"] = value
        lin.append(round(value))
    return tuple(lin)


def _rounding(ctx: CalibrationContext, c: UnitConstants,
              exact: dict[str, float]) -> tuple[Rounding, ...]:
    d = ctx.design
    res, fs = ctx.resolution, ctx.full_scale
    realised = d.scale.realised(c.scale_mul)
    out = [Rounding("offset", c.offset, exact["offset"],
                    abs(c.offset - exact["offset"]) * abs(realised) * res),
           Rounding("scale_mul", c.scale_mul, exact["scale_mul"],
                    abs(c.scale_mul / exact["scale_mul"] - 1) * fs)]
    if d.linearisation is not None:
        k_norm = d.linearisation.norm_shift
        reach = fs / res / 2.0 ** k_norm          # |w| over the measuring range
        for k, value in enumerate(c.lin):
            ideal = exact[f"lin[{k}]"]
            out.append(Rounding(f"lin[{k}]", value, ideal, abs(value - ideal) / 2.0 ** LIN_FRAC
                                * 2.0 ** k_norm * reach ** k * res))
    tc = d.temperature
    if tc is not None:
        out.append(Rounding("tc_zero", c.tc_zero, exact["tc_zero"],
                            abs(c.tc_zero - exact["tc_zero"]) / 2.0 ** tc.zero_shift
                            * tc.dt_max * res))
        out.append(Rounding("tc_span", c.tc_span, exact["tc_span"],
                            abs(c.tc_span - exact["tc_span"])
                            / 2.0 ** (tc.span_shift + LIN_FRAC) * tc.dt_max * fs))
    return tuple(out)


# ----------------------------------------------------------------------------- judging


def _figures(ctx: CalibrationContext, fits: _Fits, plan: PointPlan, st: UnitStack,
             error: F64) -> dict[str, list[float | None]]:
    """Each figure per unit of the stack (a list over its rows); ``error`` (U, n) with NaN
    rows for units whose constants are not in force (no max_error for them)."""
    u_count = len(st)
    b = np.abs(fits.b)
    hysteresis: F64 | None = None
    repeatability: F64 | None = None
    with np.errstate(all="ignore"):
        for up, down in plan.split:
            if up and down:
                hysteresis = running_max(hysteresis, np.abs(
                    sum_columns(st.mean, up) / len(up)
                    - sum_columns(st.mean, down) / len(down)) / b)
            for same in (up, down):
                if len(same) >= 2:
                    values = st.mean[:, same]
                    repeatability = running_max(
                        repeatability, (values.max(axis=1) - values.min(axis=1)) / b)
        figures: dict[str, list[float | None]] = {
            "zero_counts": fits.a.tolist(),
            "zero_mv_per_v": (fits.a * ctx.ratio_per_count * 1e3).tolist(),
            "span_counts_per_unit": fits.b.tolist(),
            "span_deviation_pct": ((fits.b / ctx.nominal_b - 1) * 100).tolist(),
            "nonlinearity": (np.abs(fits.residual).max(axis=1) / b).tolist(),
            "hysteresis": [None] * u_count if hysteresis is None else hysteresis.tolist(),
            "repeatability": ([None] * u_count if repeatability is None
                              else repeatability.tolist()),
            "noise_ratio": (st.std.max(axis=1) / ctx.noise_counts).tolist(),
        }
        if ctx.design.temperature is not None:
            figures["zero_tc_ppm_fs_per_c"] = (fits.z / fits.b / ctx.full_scale
                                               * 1e6).tolist()
            figures["span_tc_ppm_per_c"] = (fits.k * 1e6).tolist()
        figures["max_error"] = np.abs(error).max(axis=1).tolist()
    return figures


#: Each criterion: key, label, figure (or how it is derived), spec limit, its unit.
def _criteria_rows(ctx: CalibrationContext, figures: dict[str, list[float | None]],
                   st: UnitStack, error: F64
                   ) -> list[tuple[str, str, list[float | None], float | None, str, str]]:
    """The pass/fail table's rows, each value per unit (None where not evaluated)."""
    spec = ctx.design.spec
    cal = spec.calibration
    assert cal is not None
    unit = spec.sensor.unit
    judged: list[bool] = np.asarray(np.isfinite(error).all(axis=1)).tolist()
    worst = [w if ok else None for w, ok in zip(figures["max_error"], judged, strict=True)]

    def size(key: str) -> list[float | None]:
        return [None if v is None else abs(v) for v in figures[key]]

    rows: list[tuple[str, str, list[float | None], float | None, str, str]] = [
        ("max_error", "error", worst, cal.max_error, unit, "calibration.max_error")]
    if cal.max_error_pct_span is not None:
        rows.append(("max_error_pct_span", "error, % of span",
                     [None if w is None else w / ctx.span_range * 100 for w in worst],
                     cal.max_error_pct_span, "%", "calibration.max_error_pct_span"))
    if cal.oiml_class is not None:
        mpe: dict[float, float] = {}
        for r in np.unique(st.reference).tolist():
            mpe[r] = mpe_intervals(cal.oiml_class, r / ctx.resolution) * ctx.resolution
        allowed = np.vectorize(mpe.__getitem__, otypes=[np.float64])(st.reference)
        with np.errstate(all="ignore"):
            ratios = (np.abs(error) / allowed).max(axis=1).tolist()
        rows.append(("oiml_mpe_ratio", f"error / mpe of class {cal.oiml_class}",
                     [v if ok else None for v, ok in zip(ratios, judged, strict=True)], 1.0,
                     "", "calibration.oiml_class (OIML R 76-1)"))
    rows += [
        ("zero_offset", "zero offset", size("zero_mv_per_v"),
         cal.max_zero_offset_mv_per_v, "mV/V", "calibration.max_zero_offset_mv_per_v"),
        ("span_deviation", "span against nominal", size("span_deviation_pct"),
         cal.span_tolerance_pct, "%", "calibration.span_tolerance_pct"),
        ("noise_ratio", "noise / ADC noise", figures["noise_ratio"], cal.max_noise_ratio, "",
         "calibration.max_noise_ratio"),
        ("hysteresis", "hysteresis", figures["hysteresis"], cal.max_hysteresis, unit,
         "calibration.max_hysteresis"),
        ("repeatability", "repeatability", figures["repeatability"], cal.max_repeatability,
         unit, "calibration.max_repeatability"),
        ("nonlinearity", "nonlinearity before correction", figures["nonlinearity"], None,
         unit, "straight-line fit"),
    ]
    temp = spec.temperature
    if temp is not None:
        rows += [
            # signed, as the unit drifts (its limit bounds the magnitude)
            ("zero_tc", "zero temperature coefficient", figures["zero_tc_ppm_fs_per_c"],
             temp.max_zero_tc_ppm_fs_per_c, "ppm FS/C", "temperature.max_zero_tc_ppm_fs_per_c"),
            ("span_tc", "span temperature coefficient", figures["span_tc_ppm_per_c"],
             temp.max_span_tc_ppm_per_c, "ppm/C", "temperature.max_span_tc_ppm_per_c")]
    return rows


def _criterion(key: str, label: str, value: float | None, limit: float | None, unit: str,
               source: str) -> Criterion:
    """One row of the table: passed when no limit is set or |value| is within it."""
    return Criterion(key, label, value, limit, unit, source,
                     limit is None or (value is not None and abs(value) <= limit))


def point_limits(ctx: CalibrationContext, reference: F64) -> F64:
    """The error each reading may have, output units (inf where the spec sets no limit): the
    smallest of calibration.max_error, max_error_pct_span of the span and, with an OIML
    class, the class's maximum permissible error at that load (the rules of ``_criteria``,
    per reading, for tables and certificates)."""
    cal = ctx.design.spec.calibration
    assert cal is not None
    limit = np.full(reference.shape, math.inf)
    if cal.max_error is not None:
        limit = np.minimum(limit, cal.max_error)
    if cal.max_error_pct_span is not None:
        limit = np.minimum(limit, cal.max_error_pct_span / 100 * ctx.span_range)
    if cal.oiml_class is not None:
        mpe = np.array([mpe_intervals(cal.oiml_class, r / ctx.resolution) for r in reference])
        limit = np.minimum(limit, mpe * ctx.resolution)
    return limit


def calibrate_unit(ctx: CalibrationContext, u: UnitReadings, *,
                   cal_time_utc: int) -> UnitCalibration:
    """Fit, encode, judge one unit (``InputError`` if its readings are refused)."""
    result = calibrate_units(ctx, [u], [cal_time_utc])[0]
    if isinstance(result, UnitCalibration):
        return result
    raise result


def calibrate_units(ctx: CalibrationContext, units: Sequence[UnitReadings],
                    cal_times_utc: Sequence[int]) -> list[UnitCalibration | UnitFailure]:
    """Fit, encode and judge each unit: its calibration, or what stopped it (the
    ``InputError`` refusing its readings, or an arithmetic failure of its own). Units with
    the same number of readings are calibrated side by side, each with the same result as
    alone."""
    out: list[UnitCalibration | UnitFailure | None] = [None] * len(units)
    sizes: dict[int, list[int]] = {}
    for i, u in enumerate(units):
        sizes.setdefault(u.reference.size, []).append(i)
    for members in sizes.values():
        for row, result in _calibrate_alone_if_failed(
                ctx, [units[i] for i in members], [cal_times_utc[i] for i in members]).items():
            out[members[row]] = result
    return [r for r in out if r is not None]


def _calibrate_alone_if_failed(ctx: CalibrationContext, units: list[UnitReadings],
                               cal_times: list[int]
                               ) -> dict[int, UnitCalibration | UnitFailure]:
    """A stack's units side by side; should the arithmetic fail (``ArithmeticError``,
    ``ValueError``: a decomposition that does not converge), each unit again alone, so that
    the failure is only its unit's."""
    try:
        return dict(_calibrate_stack(ctx, UnitStack.of(units), cal_times))
    except (ArithmeticError, ValueError):
        if len(units) == 1:
            raise
    done: dict[int, UnitCalibration | UnitFailure] = {}
    for i, (u, t) in enumerate(zip(units, cal_times, strict=True)):
        try:
            done[i] = _calibrate_stack(ctx, UnitStack.of([u]), [t])[0]
        except (ArithmeticError, ValueError) as exc:
            done[i] = exc
    return done


def _calibrate_stack(ctx: CalibrationContext, stack: UnitStack, cal_times: list[int]
                     ) -> dict[int, UnitCalibration | InputError]:
    """Every unit of a stack: row -> calibration or refusal."""
    cal = ctx.design.spec.calibration
    assert cal is not None
    done: dict[int, UnitCalibration | InputError] = dict(refuse_rows(
        stack, code_min=ctx.code_min, code_max=ctx.code_max,
        adc_bits=ctx.design.spec.adc.bits, noise_counts=ctx.noise_counts,
        max_noise_ratio=cal.max_noise_ratio))
    rows = [r for r in range(len(stack)) if r not in done]
    if not rows:
        return done
    rules = _point_rules(ctx)
    kept = stack.take(rows)
    for plan, members in plans(kept, ctx.resolution):
        st = kept.take(members)
        results = _calibrate_plan(ctx, st, plan, rules,
                                  [cal_times[rows[m]] for m in members])
        for j, result in results.items():
            done[rows[members[j]]] = result
    return done


def _calibrate_plan(ctx: CalibrationContext, st: UnitStack, plan: PointPlan,
                    rules: PointRules, cal_times: list[int]
                    ) -> dict[int, UnitCalibration | InputError]:
    """The units of one stack and point plan: row -> calibration or refusal."""
    refused = refuse_points(st, plan, rules)
    fits = _fit(ctx, st, refused)
    rows = [r for r in range(len(st)) if r not in refused]
    constants = _constants(ctx, st, fits, rows, refused)
    u_count, n = st.mean.shape
    output = np.full((u_count, n), np.nan)
    rows = list(constants)
    reasons = ctx.design.check_in_force_many([constants[r][0] for r in rows])
    in_force = {r: reason.split(": ", 1)[-1] for r, reason in zip(rows, reasons, strict=True)
                if reason is not None}      # what with_constants refuses
    run = [r for r in rows if r not in in_force]
    if run:
        index = np.asarray(run, dtype=np.intp)
        firmware = static_outputs_many(
            ctx.design, np.rint(st.mean[index]).astype(np.int64),
            np.rint(st.temperature_c[index] * 100).astype(np.int64),
            [constants[r][0] for r in run])
        output[index] = np.multiply(firmware, ctx.resolution, dtype=np.float64)
    error = output - st.reference
    figures = _figures(ctx, fits, plan, st, error)
    criteria = _criteria_rows(ctx, figures, st, error)
    with np.errstate(all="ignore"):
        linearity = fits.residual / np.abs(fits.b)[:, None]
    done: dict[int, UnitCalibration | InputError] = dict(refused)
    judged_keys = list(figures)
    for r, (c, exact) in constants.items():
        ok = r not in in_force
        unit_figures = {key: figures[key][r] for key in judged_keys
                        if key != "max_error" or ok}
        done[r] = UnitCalibration(
            serial=st.units[r].serial, cal_time_utc=cal_times[r], constants=c,
            formats_ok=ok, formats_reason=in_force.get(r, ""), figures=unit_figures,
            criteria=tuple([_criterion(key, label, values[r], limit, unit_, source)
                            for key, label, values, limit, unit_, source in criteria]),
            readings=st.units[r], output=output[r] if ok else None,
            linearity=linearity[r], exact=exact, context=ctx)
    return done


# ----------------------------------------------------------------------------- CAL.json


def calibration_json(result: UnitCalibration, design: Design, *, readings_file: str,
                     readings_sha256: str) -> dict[str, Any]:
    """The CAL.json object of one unit."""
    spec = design.spec
    return seal({
        "format": FORMAT, "format_version": FORMAT_VERSION, "tool_version": __version__,
        "spec": {"name": spec.name, "sha256": spec.sha256},
        "serial": result.serial, "cal_time_utc": format_time_utc(result.cal_time_utc),
        "readings": {"file": readings_file, "sha256": readings_sha256},
        "unit": spec.sensor.unit, "formats": formats(design),
        "identity": identity_json(design),
        "constants": constants_json(result.constants),
        "verdict": result.verdict, "reasons": list(result.reasons),
        "criteria": [{"key": c.key, "label": c.label, "value": c.value, "limit": c.limit,
                      "unit": c.unit, "source": c.source, "pass": c.passed}
                     for c in result.criteria],
        "figures": result.figures,
        "rounding": [{"constant": r.constant, "integer": r.integer, "exact": r.exact,
                      "adds": r.adds} for r in result.rounding],
        "points": [{"line": p.line, "reference": p.reference, "temperature_c": p.temperature_c,
                    "direction": "up" if p.up else "down", "output": p.output,
                    "error": p.error, "linearity": p.linearity} for p in result.points],
        "cautions": list(SAFETY),
    })
