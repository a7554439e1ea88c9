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
format and checked (``Design.check_in_force``: what ``Design.with_constants`` refuses);
the verdict comes from the unit's readings run through the bit-exact static path
(``model.static_outputs``) with those constants: what the firmware will output.

A production line runs this once per unit, at a dozen readings each, where plain Python
beats numpy's cost per call: the checks and figures work on lists. The fit itself stays
numpy's (``lstsq``, and the SVD ``numpy.linalg.cond`` takes for the condition number): a
closed form or one decomposition for both changes the last bits of the fitted zero and
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
from dataclasses import dataclass
from typing import Any, NamedTuple

import numpy as np
from numpy.typing import NDArray

from hosttool import __version__
from hosttool.design.model import static_outputs
from hosttool.design.resolve import LIN_FRAC, Design, UnitConstants
from hosttool.errors import DesignError, InputError
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
from hosttool.util.cautions import SAFETY
from hosttool.util.utctime import format_time_utc

F64 = NDArray[np.float64]

#: A reading whose mean lies within this many standard deviations of a code limit may have
#: clipped samples: refused as saturated (our choice).
SATURATION_SIGMA = 3.0
#: raw_std above this many times (calibration.max_noise_ratio x the ADC noise) is refused as
#: an unsettled measurement; between 1 and this factor the unit fails its noise limit.
NOISE_REFUSE_FACTOR = 5.0
#: Temperatures that chain together in steps of at most this are one temperature, C.
TEMP_GROUP_C = 1.0
#: Readings of one point (reference and temperature) differing by more than this share of
#: the nominal span are refused as disagreeing duplicates (our choice; hysteresis and
#: repeatability are orders of magnitude smaller).
DISAGREE_PCT_SPAN = 1.0
#: Largest condition number of the fit's design matrix (columns scaled to 1) accepted: the
#: readings must determine zero, span and their drifts (our choice; a lot spread as the
#: README asks is below 1e3).
MAX_CONDITION = 1e8


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
    rounding: tuple[Rounding, ...]
    readings: UnitReadings
    output: F64 | None            # firmware output per reading, output units
    linearity: F64                # straight-line residual per reading, output units

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


# ----------------------------------------------------------------------------- refusals


@dataclass(frozen=True)
class _Layout:
    """The readings as plain lists (faster than numpy at a dozen values), grouped into
    points: (temperature group, reference in LSB) -> indices, in file order."""

    mean: list[float]
    up: list[bool]
    group: list[int]
    points: dict[tuple[int, int], list[int]]
    split: list[tuple[list[float], list[float]]]    # each point's means: (up, down)

    @classmethod
    def of(cls, ctx: CalibrationContext, u: UnitReadings) -> _Layout:
        temps = u.temperature_c.tolist()
        order = sorted(range(len(temps)), key=temps.__getitem__)
        group = [0] * len(temps)
        g = 0
        for before, after in zip(order, order[1:], strict=False):
            g += temps[after] - temps[before] > TEMP_GROUP_C
            group[after] = g
        points: dict[tuple[int, int], list[int]] = {}
        for i, ref in enumerate(u.reference.tolist()):
            points.setdefault((group[i], round(ref / ctx.resolution)), []).append(i)
        mean, up = u.raw_mean.tolist(), u.up.tolist()
        split = [([mean[i] for i in idx if up[i]], [mean[i] for i in idx if not up[i]])
                 for idx in points.values()]
        return cls(mean, up, group, points, split)


def _refuse_rows(ctx: CalibrationContext, u: UnitReadings) -> None:
    spec = ctx.design.spec
    assert spec.calibration is not None
    mean, std = u.raw_mean.tolist(), u.raw_std.tolist()
    for i, (m, s) in enumerate(zip(mean, std, strict=True)):
        top, bottom = m + SATURATION_SIGMA * s, m - SATURATION_SIGMA * s
        if top >= ctx.code_max or bottom <= ctx.code_min:
            limit = ctx.code_max if top >= ctx.code_max else ctx.code_min
            raise InputError(f"{u.where(i)}: raw_mean_counts: {m:.1f} counts (std {s:.1f}) "
                             f"reaches the {spec.adc.bits}-bit limit {limit}: the ADC "
                             "saturated; check the gain, the wiring and the load")
    far = NOISE_REFUSE_FACTOR * spec.calibration.max_noise_ratio * ctx.noise_counts
    noisy = next((i for i, s in enumerate(std) if s > far), None)
    if noisy is not None:
        s = std[noisy]
        raise InputError(f"{u.where(noisy)}: raw_std_counts: {s:.4g} counts is "
                         f"{s / ctx.noise_counts:.3g} x the ADC noise "
                         f"({ctx.noise_counts:.4g} counts RMS), far above "
                         f"calibration.max_noise_ratio = {spec.calibration.max_noise_ratio:g}: "
                         "the reading was not settled (vibration, draught, loose wiring?); "
                         "measure again")


def _refuse_points(ctx: CalibrationContext, u: UnitReadings, lay: _Layout) -> None:
    spec = ctx.design.spec
    cal = spec.calibration
    assert cal is not None
    unit = spec.sensor.unit
    refs = {key for _, key in lay.points}
    for p in cal.points:
        if round(p / ctx.resolution) not in refs:
            raise InputError(f"{_unit_where(u)}: no reading at the reference {p:g} {unit} that "
                             "calibration.points asks for")
    lin = ctx.design.linearisation
    needed = spec.linearisation.order + 1 if lin is not None and lin.mode == "polynomial" \
        else 2
    if len(refs) < needed:
        raise InputError(f"{_unit_where(u)}: {len(refs)} distinct reference values; the fit "
                         f"needs at least {needed}")
    tolerance = DISAGREE_PCT_SPAN / 100 * abs(ctx.nominal_b) * ctx.span_range
    for idx in lay.points.values():
        values = [lay.mean[i] for i in idx]
        if max(values) - min(values) > tolerance:
            hi, lo = idx[values.index(max(values))], idx[values.index(min(values))]
            raise InputError(f"{u.where(hi)}: raw_mean_counts: {lay.mean[hi]:.1f} and line "
                             f"{u.lines[lo]} ({lay.mean[lo]:.1f}) read the same reference "
                             f"{u.reference[hi]:g} {unit} at the same temperature but differ "
                             f"by more than {DISAGREE_PCT_SPAN:g} % of the span: duplicate "
                             "points that disagree")
    _refuse_non_monotonic(u, lay)
    if spec.temperature is not None:
        per_group: dict[int, int] = {}
        for g, _ in lay.points:
            per_group[g] = per_group.get(g, 0) + 1
        usable = sum(count >= 2 for count in per_group.values())
        if usable < 2:
            raise InputError(f"{_unit_where(u)}: temperature compensation needs readings at two or "
                             f"more temperatures (more than {TEMP_GROUP_C:g} C apart), each "
                             f"with at least two reference values; found {usable}")
    split = lay.split
    if cal.max_hysteresis is not None and not any(up and down for up, down in split):
        raise InputError(f"{_unit_where(u)}: calibration.max_hysteresis is set but no "
                         "reference has both 'up' and 'down' readings")
    if cal.max_repeatability is not None and not any(
            len(up) >= 2 or len(down) >= 2 for up, down in split):
        raise InputError(f"{_unit_where(u)}: calibration.max_repeatability is set but no point is "
                         "repeated (two readings, same reference, temperature and direction)")


def _refuse_non_monotonic(u: UnitReadings, lay: _Layout) -> None:
    steps: list[tuple[float, int, int]] = []      # between neighbouring references
    last: tuple[int, float, int] | None = None     # group, mean, first reading of a point
    for (g, _), idx in sorted(lay.points.items()):
        mean = sum(lay.mean[i] for i in idx) / len(idx)
        if last is not None and last[0] == g:
            steps.append((mean - last[1], last[2], idx[0]))
        last = (g, mean, idx[0])
    direction = math.copysign(1.0, sum(step for step, _, _ in steps))
    for step, before, after in steps:
        if step * direction <= 0:
            raise InputError(f"{u.where(after)}: raw_mean_counts: the response at "
                             f"{u.reference[after]:g} is not beyond the one at "
                             f"{u.reference[before]:g} (line {u.lines[before]}): the response "
                             "is not monotonic (reading mislabelled, load shunted or cell "
                             "damaged?)")


# ----------------------------------------------------------------------------- fit


@dataclass(frozen=True)
class _Fit:
    a: float                  # zero, counts
    b: float                  # counts per unit of u
    z: float                  # zero drift, counts per C
    k: float                  # relative span drift, per C
    residual: F64             # straight-line residuals, counts


def _unit_where(u: UnitReadings) -> str:
    """``file:line: serial S`` of a unit, at its first reading (for refusals of the unit)."""
    return f"{u.where(0)}: serial {u.serial}"


def _fit(ctx: CalibrationContext, u: UnitReadings, shape: F64) -> _Fit:
    """The least-squares fit, guarded: the readings must determine every parameter (the
    design matrix, columns scaled to 1, has condition number at most ``MAX_CONDITION``),
    and the result must be finite and inside the physics range (``_refuse_fit``)."""
    temp = ctx.design.spec.temperature
    x = np.ones((shape.size, 2 if temp is None else 4))
    if temp is None:
        x[:, 1] = shape
    else:
        dt = u.temperature_c - temp.reference_c
        x[:, 1], x[:, 2], x[:, 3] = dt, shape, shape * dt
    with np.errstate(all="ignore"):
        norms = np.abs(x).max(axis=0)
        if not np.isfinite(x).all() or not (norms > 0).all():
            raise InputError(f"{_unit_where(u)}: the readings do not determine the fit (a "
                             "column of the straight-line model is zero or not finite)")
        # numpy.linalg.cond(x / norms) without its checks: the ratio of the extreme
        # singular values (x is finite, a column is not zero)
        singular = np.linalg.svd(x / norms, compute_uv=False)
        condition = float(singular[0] / singular[-1])
        if not condition <= MAX_CONDITION:
            raise InputError(f"{_unit_where(u)}: the readings do not determine the fit (condition "
                             f"number {condition:.3g} above {MAX_CONDITION:g}): spread the "
                             "references and temperatures")
        beta = np.linalg.lstsq(x, u.raw_mean, rcond=None)[0]
        residual = u.raw_mean - x @ beta
    fitted: list[float] = beta.tolist()
    _refuse_fit(ctx, u, fitted)
    if temp is None:
        return _Fit(fitted[0], fitted[1], 0.0, 0.0, residual)
    return _Fit(fitted[0], fitted[2], fitted[1], fitted[3] / fitted[2], residual)


def _refuse_fit(ctx: CalibrationContext, u: UnitReadings, beta: list[float]) -> None:
    """Refuse a fit (zero first, span at index 1, or 2 with temperature) that is not
    finite or that no bridge of this spec could give: a zero outside the ADC's code range,
    or a response over the whole measuring range smaller than the ADC's own noise (nothing
    was measured) or larger than the code range."""
    if not all(map(math.isfinite, beta)):
        raise InputError(f"{_unit_where(u)}: the fit of the readings is not finite")
    codes = ctx.code_max - ctx.code_min
    if not ctx.code_min <= beta[0] <= ctx.code_max:
        raise InputError(f"{_unit_where(u)}: the fitted zero {beta[0]:.4g} counts lies "
                         f"outside the code range {ctx.code_min} .. {ctx.code_max}")
    response = abs(beta[1] if len(beta) == 2 else beta[2]) * ctx.span_range
    if not ctx.noise_counts <= response <= codes:
        raise InputError(f"{_unit_where(u)}: the fitted response over the range is {response:.4g} "
                         f"counts, outside what the bridge can give ({ctx.noise_counts:.4g}, "
                         f"the ADC's noise, .. {codes}, the code range; nominal "
                         f"{abs(ctx.nominal_b) * ctx.span_range:.4g}): not a working unit or "
                         "mislabelled readings")


def _constants(ctx: CalibrationContext, u: UnitReadings, fit: _Fit
               ) -> tuple[UnitConstants, dict[str, float]]:
    """Round the fit into the design's formats; also return the unrounded values."""
    d = ctx.design
    g, s = d.guard_bits, d.scale.shift
    exact: dict[str, float] = {}

    def put(name: str, mantissa: float, exponent: int) -> int:
        """exact[name] = mantissa * 2^exponent, rounded; refused when not finite."""
        try:
            value = math.ldexp(mantissa, exponent)
        except OverflowError:
            value = math.inf
        if not math.isfinite(value):
            raise InputError(f"{_unit_where(u)}: the constant {name} of this fit is not "
                             "finite")
        exact[name] = value
        return round(value)

    offset = put("offset", fit.a, g)
    scale_mul = put("scale_mul", 1.0 / (fit.b * ctx.resolution), s - g)
    realised = math.ldexp(scale_mul, -s)
    tc_zero = tc_span = 0
    tc = d.temperature
    if tc is not None:
        tc_zero = put("tc_zero", fit.z * realised / 100, g + tc.zero_shift)
        tc_span = put("tc_span", -fit.k / 100, LIN_FRAC + tc.span_shift)
    lin: tuple[int, ...] = ()
    if d.linearisation is not None and d.linearisation.mode == "bridge_inverse":
        lin = d.nominal.lin
        for k, c in enumerate(d.linearisation.coeffs):
            exact[f"lin[{k}]"] = math.ldexp(c, LIN_FRAC)
    elif d.linearisation is not None:
        k_norm = d.linearisation.norm_shift
        w = (np.ldexp(u.raw_mean, g) - offset) * realised / 2.0 ** k_norm
        target = u.reference / ctx.resolution
        if tc is not None:
            dt = np.clip(np.rint(u.temperature_c * 100), tc.min_centi, tc.max_centi) \
                - tc.reference_centi
            gamma = tc_span / 2.0 ** (tc.span_shift + LIN_FRAC)
            target = target / (1 + gamma * dt) + tc_zero / 2.0 ** tc.zero_shift * dt
        if not (np.all(np.isfinite(w)) and np.all(np.isfinite(target))):
            raise InputError(f"{_unit_where(u)}: the linearisation fit of this unit is not "
                             "finite")
        coeffs = np.polynomial.polynomial.polyfit(w, target / 2.0 ** k_norm,
                                                  d.spec.linearisation.order)
        lin = tuple(put(f"lin[{k}]", float(c), LIN_FRAC) for k, c in enumerate(coeffs))
    return UnitConstants(offset=offset, scale_mul=scale_mul, lin=lin, tc_zero=tc_zero,
                         tc_span=tc_span), exact


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


def _figures(ctx: CalibrationContext, fit: _Fit, lay: _Layout, u: UnitReadings,
             error: F64 | None) -> dict[str, float | None]:
    b = abs(fit.b)
    hysteresis: float | None = None
    repeatability: float | None = None
    for up, down in lay.split:
        if up and down:
            hysteresis = max(hysteresis or 0.0,
                             abs(sum(up) / len(up) - sum(down) / len(down)) / b)
        for same in (up, down):
            if len(same) >= 2:
                repeatability = max(repeatability or 0.0, (max(same) - min(same)) / b)
    figures: dict[str, float | None] = {
        "zero_counts": fit.a,
        "zero_mv_per_v": fit.a * ctx.ratio_per_count * 1e3,
        "span_counts_per_unit": fit.b,
        "span_deviation_pct": (fit.b / ctx.nominal_b - 1) * 100,
        "nonlinearity": max(map(abs, fit.residual.tolist())) / b,
        "hysteresis": hysteresis,             # None: no point read both up and down
        "repeatability": repeatability,       # None: no point repeated
        "noise_ratio": max(u.raw_std.tolist()) / ctx.noise_counts,
    }
    if ctx.design.temperature is not None:
        figures["zero_tc_ppm_fs_per_c"] = fit.z / fit.b / ctx.full_scale * 1e6
        figures["span_tc_ppm_per_c"] = fit.k * 1e6
    if error is not None:
        figures["max_error"] = max(map(abs, error.tolist()))
    return figures


def _criteria(ctx: CalibrationContext, u: UnitReadings, figures: dict[str, float | None],
              error: F64 | None) -> tuple[Criterion, ...]:
    spec = ctx.design.spec
    cal = spec.calibration
    assert cal is not None
    unit = spec.sensor.unit
    worst = figures.get("max_error")

    def size(key: str) -> float:
        value = figures[key]
        assert value is not None            # always measured
        return abs(value)

    rows: list[tuple[str, str, float | None, float | None, str, str]] = [
        ("max_error", "error", worst, cal.max_error, unit, "calibration.max_error")]
    if cal.max_error_pct_span is not None:
        rows.append(("max_error_pct_span", "error, % of span",
                     None if worst is None else worst / ctx.span_range * 100,
                     cal.max_error_pct_span, "%", "calibration.max_error_pct_span"))
    if cal.oiml_class is not None:
        ratio = None
        if error is not None:
            ratio = max(abs(e) / (mpe_intervals(cal.oiml_class, r / ctx.resolution)
                                  * ctx.resolution)
                        for e, r in zip(error.tolist(), u.reference.tolist(), strict=True))
        rows.append(("oiml_mpe_ratio", f"error / mpe of class {cal.oiml_class}", ratio, 1.0,
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
    return tuple([Criterion(key, label, value, limit, unit_, source,
                            limit is None or (value is not None and abs(value) <= limit))
                  for key, label, value, limit, unit_, source in rows])


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
    _refuse_rows(ctx, u)
    lay = _Layout.of(ctx, u)
    _refuse_points(ctx, u, lay)
    fit = _fit(ctx, u, ctx.shape(u.reference))
    constants, exact = _constants(ctx, u, fit)
    output: F64 | None = None
    error: F64 | None = None
    formats_ok, formats_reason = True, ""
    try:
        ctx.design.check_in_force(constants)     # what with_constants(constants) refuses
    except DesignError as exc:
        formats_ok = False
        formats_reason = str(exc).split(": ", 1)[-1]
    else:
        codes = np.rint(u.raw_mean).astype(np.int64)
        temps = np.rint(u.temperature_c * 100).astype(np.int64)
        firmware = static_outputs(ctx.design, codes, temps, constants=constants)
        output = np.multiply(firmware, ctx.resolution, dtype=np.float64)
        error = output - u.reference
    figures = _figures(ctx, fit, lay, u, error)
    return UnitCalibration(
        serial=u.serial, cal_time_utc=cal_time_utc, constants=constants,
        formats_ok=formats_ok, formats_reason=formats_reason, figures=figures,
        criteria=_criteria(ctx, u, figures, error), rounding=_rounding(ctx, constants, exact),
        readings=u, output=output, linearity=fit.residual / abs(fit.b))


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
