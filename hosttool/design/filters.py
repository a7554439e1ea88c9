"""Float designs of the filter cascade (scipy.signal) and their quantisation.

Each spec stage becomes an FIR stage (moving average, Kaiser-window low-pass) or a cascade of
biquad sections (Butterworth low-pass, notch), holding both the ideal float design and the
integer coefficients of the arithmetic contract (DEVELOPERS.md):

- FIR taps sum to exactly 2^frac, so the integer DC gain is exactly 1; the residual left by
  rounding goes to the centre tap (the two centre taps for an even length), so a symmetric
  design stays symmetric.
- Each biquad section is scaled to DC gain 1 before quantising, and in integers
  b0 + b1 + b2 == 2^q + a1 + a2 is enforced by adjusting b1 only, so b0 == b2 is kept (a
  notch's zeros stay on the unit circle).
- Both structures also keep the int64 accumulator from overflowing for any int32 input and
  state words (see ``_fir_acc_fits`` and ``_biquad_acc_fits``).

Frequencies are in hertz, rates in samples per second; ``rate_hz`` is always the stage's
input rate.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from hosttool.design.fixedpoint import INT32_MAX, INT64_MAX, QFormat, frac_bits_for, quantise
from hosttool.errors import DesignError
from hosttool.spec.schema import FilterChain, FilterStage

#: Longest Kaiser low-pass accepted (taps).
MAX_FIR_TAPS = 1023
#: A quantised pole this close to the unit circle, or outside it, is refused.
UNIT_CIRCLE_MARGIN = 1e-12


@dataclass(frozen=True)
class FirStage:
    """An FIR filter with optional decimation; taps_int has ``fmt.frac`` fraction bits."""

    kind: str  # "moving_average" | "fir_lowpass"
    rate_hz: float  # input rate, samples/s
    decimation: int
    taps: tuple[float, ...]  # ideal design
    taps_int: tuple[int, ...]  # quantised; sum(taps_int) == 2**fmt.frac
    fmt: QFormat

    @property
    def taps_realised(self) -> NDArray[np.float64]:
        """The quantised taps as floats, taps_int / 2^frac."""
        return np.array(self.taps_int, dtype=np.float64) / float(1 << self.fmt.frac)

    @property
    def output_rate_hz(self) -> float:
        """Output rate after decimation, samples/s."""
        return self.rate_hz / self.decimation


@dataclass(frozen=True)
class Biquad:
    """One second-order section, H(z) = (b0 + b1 z^-1 + b2 z^-2) / (1 + a1 z^-1 + a2 z^-2).

    ``b`` and ``a`` are the ideal design scaled to DC gain 1 (``a[0] == 1``); ``b_int`` and
    ``a_int`` (a1, a2) are the quantised coefficients with ``fmt.frac`` fraction bits.
    """

    b: tuple[float, float, float]
    a: tuple[float, float, float]
    b_int: tuple[int, int, int]
    a_int: tuple[int, int]
    fmt: QFormat

    @property
    def b_realised(self) -> NDArray[np.float64]:
        """The quantised numerator as floats, b_int / 2^q."""
        return np.array(self.b_int, dtype=np.float64) / float(1 << self.fmt.frac)

    @property
    def a_realised(self) -> NDArray[np.float64]:
        """The quantised denominator as floats, (1, a1 / 2^q, a2 / 2^q)."""
        return np.array((1 << self.fmt.frac, *self.a_int), dtype=np.float64) / float(
            1 << self.fmt.frac)


@dataclass(frozen=True)
class BiquadStage:
    """A cascade of biquad sections, in the order the firmware runs them."""

    kind: str  # "butterworth_lowpass" | "notch"
    rate_hz: float  # input (and output) rate, samples/s
    sections: tuple[Biquad, ...]
    decimation: int = 1

    @property
    def output_rate_hz(self) -> float:
        """Output rate, samples/s (biquads do not decimate)."""
        return self.rate_hz / self.decimation


Stage = FirStage | BiquadStage


# --------------------------------------------------------------------------- FIR


def _acc_fits(coefficients: list[int], constant: int) -> bool:
    """True when sum c_k x_k + constant fits int64 for every int32 x_k (0 <= constant).

    The extremes are sum|c| * (2^31 - 1) + constant and -sum|c| * 2^31.
    """
    total = sum(abs(c) for c in coefficients)
    return (total * INT32_MAX + constant <= INT64_MAX
            and total * (INT32_MAX + 1) <= INT64_MAX + 1)


def _fir_acc_fits(taps_int: list[int], frac: int) -> bool:
    """No int64 overflow of acc + 2^(frac-1) (the rounding constant) for any int32 input."""
    return _acc_fits(taps_int, 1 << (frac - 1) if frac > 0 else 0)


def _adjust_centre(taps_int: list[int], residual: int) -> None:
    """Add ``residual`` to the centre tap, or split it over the two centre taps."""
    n = len(taps_int)
    if n % 2:
        taps_int[n // 2] += residual
    else:
        half = residual // 2
        taps_int[n // 2 - 1] += half
        taps_int[n // 2] += residual - half


def quantise_fir(taps: tuple[float, ...], word: int) -> tuple[tuple[int, ...], QFormat]:
    """Quantise FIR taps to a ``word``-bit format whose taps sum to exactly 2^frac.

    frac starts at ``frac_bits_for(max |tap|, word)`` and is lowered until the adjusted taps
    fit the word and the accumulator cannot overflow (``_fir_acc_fits``).
    """
    frac = frac_bits_for(max(abs(t) for t in taps), word)
    while True:
        fmt = QFormat(word, frac)
        taps_int = [quantise(t, frac) for t in taps]
        _adjust_centre(taps_int, (1 << frac) - sum(taps_int))
        in_word = all(fmt.min_int <= h <= fmt.max_int for h in taps_int)
        if in_word and _fir_acc_fits(taps_int, frac):
            return tuple(taps_int), fmt
        frac -= 1


def _symmetric(taps: NDArray[np.float64]) -> tuple[float, ...]:
    """Average a linear-phase design with its mirror image so it is exactly symmetric."""
    return tuple(float(t) for t in (taps + taps[::-1]) / 2.0)


def kaiser_taps(stage: FilterStage, *, field: str) -> tuple[float, ...]:
    """Kaiser-window low-pass (type I: odd length) of ``stage``, via kaiserord and firwin."""
    import scipy.signal  # deferred: ~1 s to import; a cached design needs none
    assert stage.cutoff_hz is not None and stage.transition_hz is not None
    attenuation = stage.attenuation_db if stage.attenuation_db is not None else 60.0
    nyquist = stage.sample_rate_hz / 2
    numtaps, beta = scipy.signal.kaiserord(attenuation, stage.transition_hz / nyquist)
    numtaps |= 1
    if numtaps > MAX_FIR_TAPS:
        # kaiserord: numtaps = (A - 7.95) / (2.285 pi width) + 1, width as a fraction of Nyquist
        width = (attenuation - 7.95) / (2.285 * math.pi * (MAX_FIR_TAPS - 1)) * nyquist
        wider = _round_up(width)
        raise DesignError(
            f"{field}.transition_hz: {stage.transition_hz:g} Hz at {attenuation:g} dB and "
            f"{stage.sample_rate_hz:g} samples/s needs {numtaps} taps, more than "
            f"{MAX_FIR_TAPS}; widen the transition to {wider:g} Hz or more, or lower "
            f"attenuation_db")
    taps = scipy.signal.firwin(numtaps, stage.cutoff_hz, window=("kaiser", beta),
                               fs=stage.sample_rate_hz)
    return _symmetric(np.asarray(taps, dtype=np.float64))


def _round_up(value: float) -> float:
    """``value`` rounded up to three significant digits."""
    step = 10.0 ** (math.floor(math.log10(value)) - 2)
    return math.ceil(value / step) * step


# --------------------------------------------------------------------------- biquads


def _biquad_acc_fits(coefficients: list[int], frac: int) -> bool:
    """No int64 overflow of acc + 2^(frac-1) for int32 inputs and outputs.

    acc includes the error-feedback term e, -2^(frac-1) <= e < 2^(frac-1) after an
    unsaturated output, so acc + rounding constant lies in
    [-sum|c| 2^31, sum|c| (2^31 - 1) + 2^frac).
    """
    return _acc_fits(coefficients, 1 << frac)


def _unit_dc(b: NDArray[np.float64], a: NDArray[np.float64]) -> NDArray[np.float64]:
    """Numerator scaled so that B(1) == A(1): DC gain 1."""
    return b * (np.sum(a) / np.sum(b))


def quantise_biquad(b: NDArray[np.float64], a: NDArray[np.float64], word: int) -> Biquad:
    """Scale one section to unit DC gain and quantise it to a ``word``-bit format.

    q starts at ``frac_bits_for(max(|b0|, |b1|, |b2|, |a1|, |a2|), word)`` and is lowered
    until the coefficients (b1 adjusted for exact DC gain) fit the word and the accumulator
    cannot overflow (``_biquad_acc_fits``).
    """
    a = np.asarray(a, dtype=np.float64) / a[0]
    b = _unit_dc(np.asarray(b, dtype=np.float64) / a[0], a)
    q = frac_bits_for(float(max(np.max(np.abs(b)), abs(a[1]), abs(a[2]))), word)
    while True:
        fmt = QFormat(word, q)
        b0, b1, b2 = (quantise(float(v), q) for v in b)
        a1, a2 = quantise(float(a[1]), q), quantise(float(a[2]), q)
        b1 = (1 << q) + a1 + a2 - b0 - b2
        coefficients = [b0, b1, b2, a1, a2]
        in_word = all(fmt.min_int <= c <= fmt.max_int for c in coefficients)
        if in_word and _biquad_acc_fits(coefficients, q):
            return Biquad(b=(float(b[0]), float(b[1]), float(b[2])),
                          a=(1.0, float(a[1]), float(a[2])),
                          b_int=(b0, b1, b2), a_int=(a1, a2), fmt=fmt)
        q -= 1


def dominant_pole(a1: float, a2: float) -> complex:
    """Root of z^2 + a1 z + a2 of largest modulus (upper half-plane for a complex pair)."""
    disc = a1 * a1 - 4.0 * a2
    if disc < 0:
        return complex(-a1 / 2, math.sqrt(-disc) / 2)
    return (-a1 + math.copysign(math.sqrt(disc), -a1)) / 2 + 0j


def realised_pole(section: Biquad) -> complex:
    """dominant_pole of the quantised section, its discriminant computed in exact integers.

    (np.roots loses half the digits for two nearby real roots, as next to z = 1.)
    """
    a1, a2, q = section.a_int[0], section.a_int[1], section.fmt.frac
    disc = a1 * a1 - 4 * a2 * (1 << q)  # (a1^2 - 4 a2) * 2^(2q), exact
    scale = float(1 << (q + 1))
    if disc < 0:
        return complex(-a1 / scale, math.sqrt(-disc) / scale)
    return complex((-a1 + math.copysign(math.sqrt(disc), -a1)) / scale, 0.0)


def _inside_unit_circle(section: Biquad) -> bool:
    """Both poles strictly inside |z| = 1, by the second-order stability triangle (Jury):
    |a2| < 1 and |a1| < 1 + a2, checked in integers."""
    a1, a2, one = section.a_int[0], section.a_int[1], 1 << section.fmt.frac
    return abs(a2) < one and abs(a1) < one + a2


def _check_stable(stage: BiquadStage, word: int, key: str, remedy: str, field: str) -> None:
    """Refuse a quantised section whose poles are on, outside or within
    UNIT_CIRCLE_MARGIN of the unit circle."""
    for j, section in enumerate(stage.sections):
        radius = abs(realised_pole(section))
        if not _inside_unit_circle(section) or radius >= 1.0 - UNIT_CIRCLE_MARGIN:
            cure = remedy if word == 32 else f"filter.coefficient_bits = 32 or {remedy}"
            raise DesignError(
                f"{field}.{key}: section {j + 1} of {len(stage.sections)} quantised to "
                f"{word}-bit {section.fmt.name} has a pole at radius {radius:.12f}, not "
                f"safely inside the unit circle; use {cure}")


def butterworth_sections(stage: FilterStage, word: int) -> tuple[Biquad, ...]:
    """Butterworth low-pass as unit-DC-gain sections, lowest pole radius (lowest Q) first."""
    import scipy.signal  # deferred: ~1 s to import; a cached design needs none
    assert stage.order is not None and stage.cutoff_hz is not None
    sos = scipy.signal.butter(stage.order, stage.cutoff_hz, fs=stage.sample_rate_hz,
                              output="sos")
    rows = sorted(np.asarray(sos, dtype=np.float64),
                  key=lambda row: abs(dominant_pole(row[4], row[5])))
    return tuple(quantise_biquad(row[:3], row[3:], word) for row in rows)


def notch_section(stage: FilterStage, word: int) -> Biquad:
    """Second-order notch of scipy.signal.iirnotch, as one unit-DC-gain section."""
    import scipy.signal  # deferred: ~1 s to import; a cached design needs none
    assert stage.frequency_hz is not None and stage.quality is not None
    b, a = scipy.signal.iirnotch(stage.frequency_hz, stage.quality, fs=stage.sample_rate_hz)
    return quantise_biquad(np.asarray(b), np.asarray(a), word)


# --------------------------------------------------------------------------- entry points


def design_stage(stage: FilterStage, coefficient_bits: int, *, field: str) -> Stage:
    """Float design and quantisation of one spec stage; ``field`` names it in errors.

    Raises DesignError for a Kaiser low-pass longer than MAX_FIR_TAPS or a quantised biquad
    with a pole on, outside or within UNIT_CIRCLE_MARGIN of the unit circle.
    """
    word = coefficient_bits
    if stage.kind == "moving_average":
        assert stage.length is not None
        taps = tuple(1.0 / stage.length for _ in range(stage.length))
        taps_int, fmt = quantise_fir(taps, word)
        return FirStage(stage.kind, stage.sample_rate_hz, stage.decimation, taps, taps_int, fmt)
    if stage.kind == "fir_lowpass":
        taps = kaiser_taps(stage, field=field)
        taps_int, fmt = quantise_fir(taps, word)
        return FirStage(stage.kind, stage.sample_rate_hz, stage.decimation, taps, taps_int, fmt)
    if stage.kind == "butterworth_lowpass":
        result = BiquadStage(stage.kind, stage.sample_rate_hz, butterworth_sections(stage, word))
        _check_stable(result, word, "cutoff_hz", "a higher cutoff", field)
        return result
    if stage.kind == "notch":
        result = BiquadStage(stage.kind, stage.sample_rate_hz, (notch_section(stage, word),))
        _check_stable(result, word, "quality", "a lower quality", field)
        return result
    raise DesignError(f"{field}.kind: no design for filter kind {stage.kind!r}")


def design_chain(chain: FilterChain) -> tuple[Stage, ...]:
    """Design every stage of the cascade at the chain's coefficient width."""
    return tuple(design_stage(stage, chain.coefficient_bits, field=f"filter.stages[{i}]")
                 for i, stage in enumerate(chain.stages))
