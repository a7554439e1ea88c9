"""Responses of the designed filter cascade: ideal against quantised (realised) coefficients.

Multirate: every stage is evaluated at its own input rate, H_k(e^{j 2 pi f / rate_k}). A tone
of frequency f stays one tone through a decimator (at f folded into the new band, with
unchanged amplitude), so the cascade's gain for a tone f is the product of the stage gains
at f; that is what ``magnitude_response`` returns, for any f, also above a stage's Nyquist
frequency (H_k is periodic in rate_k). Frequencies are in hertz, times in seconds.
"""

from __future__ import annotations

import cmath
import dataclasses
import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from hosttool.design.filters import BiquadStage, FirStage, Stage, dominant_pole, realised_pole
from hosttool.physics.adc import rejection_db, sinc_magnitude

#: A quantised pole may move by this fraction of (1 - r) in radius, and by this fraction of
#: its design angle, before a warning.
POLE_TOLERANCE = 0.01
#: Largest |realised - ideal| magnitude in the passband before a warning, dB.
RESPONSE_TOLERANCE_DB = 0.01
#: The realised-against-ideal comparison skips frequencies where the ideal is below this, dB.
DEVIATION_FLOOR_DB = -100.0
#: Largest loss of stopband attenuation by quantisation before a warning, dB.
STOPBAND_TOLERANCE_DB = 1.0
#: Largest droop inside the declared signal band before a warning, dB: more than half the
#: amplitude lost (a lowpass whose corner is the band edge droops 3 dB there; two such
#: sections about 6 dB).
DROOP_WARNING_DB = 20.0 * math.log10(2.0)
#: Frequency grid sizes of the passband and the stopband.
PASSBAND_POINTS = 2048
STOPBAND_POINTS = 16384
#: Longest step simulation, input samples; a cascade not settled by then reports inf.
MAX_STEP_SAMPLES = 1 << 22
#: Settling bands of a unit step: 0.1 % of the step.
SETTLE_FRACTION = 1e-3


@dataclass(frozen=True)
class PoleReport:
    """The dominant pole of one biquad section, designed and quantised."""

    section: int
    design_radius: float
    realised_radius: float
    design_angle_hz: float
    realised_angle_hz: float
    radius_error_of_margin: float  # (r_realised - r_design) / (1 - r_design)
    angle_error_fraction: float  # (angle_realised - angle_design) / angle_design


@dataclass(frozen=True)
class StageReport:
    """One stage of the cascade, quantised."""

    index: int
    kind: str
    rate_hz: float
    output_rate_hz: float
    coefficient_formats: tuple[str, ...]  # Qm.n of the taps, or of each section
    coefficient_count: int  # taps, or 5 per section
    group_delay_dc_s: float
    max_passband_deviation_db: float  # |realised - ideal| over the passband
    poles: tuple[PoleReport, ...]


@dataclass(frozen=True)
class ResponseFigures:
    """Figures of the whole cascade for one set of coefficients (ideal or realised)."""

    passband_droop_db: float  # largest loss below the DC gain over 0 .. passband edge
    passband_peak_db: float  # largest gain above the DC gain over the same band
    stopband_attenuation_db: float | None  # least attenuation, stopband edge .. input
    #                                       Nyquist; None when the spec defines no stopband
    rejection_50hz_db: float  # digital filters alone
    rejection_60hz_db: float
    rejection_50hz_with_sinc_db: float  # digital filters and the ADC's sinc^k
    rejection_60hz_with_sinc_db: float
    group_delay_dc_s: float
    settling_0p1pct_s: float  # unit step, to within 0.1 % for good
    settling_1lsb_s: float  # full-scale step, to within one output LSB for good


@dataclass(frozen=True)
class ChainReport:
    """Ideal and realised figures of the cascade, per-stage details and warnings."""

    passband_edge_hz: float
    stopband_edge_hz: float | None   # None: no stopband (no lowpass, or the band reaches it)
    ideal: ResponseFigures
    realised: ResponseFigures
    max_passband_deviation_db: float
    stages: tuple[StageReport, ...]
    warnings: tuple[str, ...]


# --------------------------------------------------------------------------- responses


def _sos(stage: BiquadStage, realised: bool) -> NDArray[np.float64]:
    """Second-order sections [b0 b1 b2 1 a1 a2] of a biquad stage."""
    if realised:
        rows = [np.concatenate((s.b_realised, s.a_realised)) for s in stage.sections]
    else:
        rows = [np.array(s.b + s.a, dtype=np.float64) for s in stage.sections]
    return np.array(rows, dtype=np.float64)


def _taps(stage: FirStage, realised: bool) -> NDArray[np.float64]:
    return stage.taps_realised if realised else np.array(stage.taps, dtype=np.float64)


def frequency_response(stage: Stage, freqs_hz: ArrayLike, *, realised: bool
                       ) -> NDArray[np.complex128]:
    """Complex H(e^{j 2 pi f / rate}) of one stage at its input rate."""
    import scipy.signal  # deferred: ~1 s to import; a cached design needs none
    f = np.atleast_1d(np.asarray(freqs_hz, dtype=np.float64))
    if isinstance(stage, FirStage):
        _, h = scipy.signal.freqz(_taps(stage, realised), [1.0], worN=f, fs=stage.rate_hz)
    else:
        _, h = scipy.signal.sosfreqz(_sos(stage, realised), worN=f, fs=stage.rate_hz)
    return np.asarray(h, dtype=np.complex128)


def magnitude_response(stages: tuple[Stage, ...], freqs_hz: ArrayLike, *, realised: bool
                       ) -> NDArray[np.float64]:
    """|H(f)| of the multirate cascade: the product of the stage gains at f."""
    h = np.ones(np.atleast_1d(np.asarray(freqs_hz)).shape, dtype=np.float64)
    for stage in stages:
        h *= np.abs(frequency_response(stage, freqs_hz, realised=realised))
    return h


def impulse_response(stage: Stage, n: int, *, realised: bool = True) -> NDArray[np.float64]:
    """First n samples of a stage's impulse response at its input rate (before decimation)."""
    delta = np.zeros(n, dtype=np.float64)
    delta[0] = 1.0
    return _filter(stage, delta, realised)


def _filter(stage: Stage, x: NDArray[np.float64], realised: bool) -> NDArray[np.float64]:
    import scipy.signal  # deferred: ~1 s to import; a cached design needs none
    if isinstance(stage, FirStage):
        return np.asarray(scipy.signal.lfilter(_taps(stage, realised), [1.0], x), np.float64)
    return np.asarray(scipy.signal.sosfilt(_sos(stage, realised), x), np.float64)


def group_delay_dc_s(stage: Stage, *, realised: bool) -> float:
    """Group delay at DC, seconds: sum(k c_k) / sum(c_k) of numerator minus denominator."""
    def centroid(c: NDArray[np.float64]) -> float:
        return float(np.dot(np.arange(len(c)), c) / np.sum(c))

    if isinstance(stage, FirStage):
        samples = centroid(_taps(stage, realised))
    else:
        samples = sum(centroid(row[:3]) - centroid(row[3:]) for row in _sos(stage, realised))
    return samples / stage.rate_hz


# --------------------------------------------------------------------------- step response


def step_response(stages: tuple[Stage, ...], n: int, input_rate_hz: float, *, realised: bool
                  ) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Output times (s) and values of the cascade for a unit step of n input samples at t = 0.

    A stage decimating by D keeps outputs D-1, 2D-1, ... (inputs 1..D give output 1).
    """
    y = np.ones(n, dtype=np.float64)
    t = np.arange(n, dtype=np.float64) / input_rate_hz
    for stage in stages:
        y = _filter(stage, y, realised)[stage.decimation - 1::stage.decimation]
        t = t[stage.decimation - 1::stage.decimation]
    return t, y


def _last_outside(y: NDArray[np.float64], band: float) -> int:
    """Index of the last sample with |y - 1| > band, or -1."""
    outside = np.flatnonzero(np.abs(y - 1.0) > band)
    return int(outside[-1]) if outside.size else -1


def _step_length(stages: tuple[Stage, ...], band: float) -> int:
    """A first guess of the input samples a step needs to settle within ``band``."""
    n, scale = 64, 1
    for stage in stages:
        if isinstance(stage, FirStage):
            n += len(stage.taps) * scale
        else:
            for section in stage.sections:
                r = abs(realised_pole(section))
                if r > 0:
                    n += int(math.log(band) / math.log(r)) * scale
        scale *= stage.decimation
    return 2 * n


def settling_times(stages: tuple[Stage, ...], input_rate_hz: float, bands: tuple[float, ...],
                   *, realised: bool) -> tuple[float, ...]:
    """Seconds after a unit step until the output stays within each band of 1 for good.

    The step is simulated until the last excursion of the narrowest band lies in the first
    half of the record (doubling the length, up to MAX_STEP_SAMPLES); inf if it never does.
    """
    n = _step_length(stages, min(bands))
    while n <= MAX_STEP_SAMPLES:
        t, y = step_response(stages, n, input_rate_hz, realised=realised)
        last = [_last_outside(y, band) for band in bands]
        if max(last) < len(y) // 2:
            return tuple(float(t[k + 1]) for k in last)
        n *= 2
    return tuple(math.inf for _ in bands)


# --------------------------------------------------------------------------- poles


def pole_reports(stage: BiquadStage) -> tuple[PoleReport, ...]:
    """Designed against quantised dominant pole of every section of a biquad stage."""
    reports = []
    to_hz = stage.rate_hz / (2 * math.pi)
    for j, section in enumerate(stage.sections):
        design = dominant_pole(section.a[1], section.a[2])
        real = realised_pole(section)
        r_d, r_q = abs(design), abs(real)
        w_d, w_q = abs(cmath.phase(design)), abs(cmath.phase(real))
        reports.append(PoleReport(
            section=j, design_radius=r_d, realised_radius=r_q,
            design_angle_hz=w_d * to_hz, realised_angle_hz=w_q * to_hz,
            radius_error_of_margin=(r_q - r_d) / (1.0 - r_d),
            angle_error_fraction=(w_q - w_d) / w_d if w_d > 0 else w_q))
    return tuple(reports)


# --------------------------------------------------------------------------- the chain


def _db(h: NDArray[np.float64]) -> NDArray[np.float64]:
    """Magnitude in dB, an exact null capped at -300 dB (as rejection_db caps it)."""
    return 20.0 * np.log10(np.maximum(h, 1e-15))


def _deviation_db(real: NDArray[np.float64], ideal: NDArray[np.float64]) -> float:
    """Largest |realised - ideal| in dB where the ideal response is above DEVIATION_FLOOR_DB
    (near a null a relative figure says nothing: any rounding moves it by tens of dB)."""
    ideal_db = _db(ideal)
    keep = ideal_db > DEVIATION_FLOOR_DB
    if not np.any(keep):
        return 0.0
    return float(np.max(np.abs(_db(real)[keep] - ideal_db[keep])))


def _figures(stages: tuple[Stage, ...], *, realised: bool, passband: NDArray[np.float64],
             stopband: NDArray[np.float64] | None, adc_rate_hz: float, sinc_order: int,
             sinc_decimation: float | None, lsb_band: float) -> ResponseFigures:
    mains = np.array([50.0, 60.0])
    pass_db = _db(magnitude_response(stages, passband, realised=realised))
    dc_db = float(_db(magnitude_response(stages, np.zeros(1), realised=realised))[0])
    stop = None if stopband is None else magnitude_response(stages, stopband, realised=realised)
    at_mains = magnitude_response(stages, mains, realised=realised)
    with_sinc = at_mains * sinc_magnitude(mains, adc_rate_hz, sinc_order, sinc_decimation)
    settle = settling_times(stages, adc_rate_hz, (SETTLE_FRACTION, lsb_band), realised=realised)
    return ResponseFigures(
        passband_droop_db=max(0.0, dc_db - float(np.min(pass_db))),
        passband_peak_db=max(0.0, float(np.max(pass_db)) - dc_db),
        stopband_attenuation_db=None if stop is None else rejection_db(float(np.max(stop))),
        rejection_50hz_db=rejection_db(float(at_mains[0])),
        rejection_60hz_db=rejection_db(float(at_mains[1])),
        rejection_50hz_with_sinc_db=rejection_db(float(with_sinc[0])),
        rejection_60hz_with_sinc_db=rejection_db(float(with_sinc[1])),
        group_delay_dc_s=sum(group_delay_dc_s(s, realised=realised) for s in stages),
        settling_0p1pct_s=settle[0], settling_1lsb_s=settle[1])


def _stage_report(i: int, stage: Stage, passband: NDArray[np.float64]) -> StageReport:
    deviation = _deviation_db(np.abs(frequency_response(stage, passband, realised=True)),
                              np.abs(frequency_response(stage, passband, realised=False)))
    formats: tuple[str, ...]
    poles: tuple[PoleReport, ...]
    if isinstance(stage, FirStage):
        formats, count, poles = (stage.fmt.name,), len(stage.taps_int), ()
    else:
        formats = tuple(s.fmt.name for s in stage.sections)
        count, poles = 5 * len(stage.sections), pole_reports(stage)
    return StageReport(index=i, kind=stage.kind, rate_hz=stage.rate_hz,
                       output_rate_hz=stage.rate_hz / stage.decimation,
                       coefficient_formats=formats, coefficient_count=count,
                       group_delay_dc_s=group_delay_dc_s(stage, realised=True),
                       max_passband_deviation_db=deviation, poles=poles)


def _warnings(report: ChainReport) -> tuple[str, ...]:
    found = []
    for stage in report.stages:
        for p in stage.poles:
            if (abs(p.radius_error_of_margin) > POLE_TOLERANCE
                    or abs(p.angle_error_fraction) > POLE_TOLERANCE):
                found.append(
                    f"filter.stages[{stage.index}]: section {p.section + 1}: the quantised "
                    f"pole moved {p.radius_error_of_margin:+.2%} of (1 - r) in radius and "
                    f"{p.angle_error_fraction:+.2%} in angle ({p.design_angle_hz:.6g} -> "
                    f"{p.realised_angle_hz:.6g} Hz), beyond {POLE_TOLERANCE:.0%}")
    if report.max_passband_deviation_db > RESPONSE_TOLERANCE_DB:
        found.append(f"filter: the quantised cascade departs from the ideal by "
                     f"{report.max_passband_deviation_db:.3g} dB in the passband 0 .. "
                     f"{report.passband_edge_hz:g} Hz, beyond {RESPONSE_TOLERANCE_DB:g} dB")
    ideal_stop, real_stop = (report.ideal.stopband_attenuation_db,
                             report.realised.stopband_attenuation_db)
    if ideal_stop is not None and real_stop is not None \
            and ideal_stop - real_stop > STOPBAND_TOLERANCE_DB:
        found.append(f"filter: quantisation costs {ideal_stop - real_stop:.3g} dB of stopband "
                     f"attenuation ({real_stop:.1f} dB left), beyond "
                     f"{STOPBAND_TOLERANCE_DB:g} dB")
    droop = report.realised.passband_droop_db
    if droop > DROOP_WARNING_DB:
        found.append(f"filter: the response droops {droop:.3g} dB inside the declared signal "
                     f"band 0 .. {report.passband_edge_hz:g} Hz (more than half the amplitude "
                     "lost): narrow output.bandwidth_hz or raise the filter corners")
    if math.isinf(report.realised.settling_1lsb_s):
        found.append(f"filter: the step response does not settle to one output LSB within "
                     f"{MAX_STEP_SAMPLES} input samples")
    return tuple(found)


def analyse_chain(stages: tuple[Stage, ...], *, passband_edge_hz: float,
                  stopband_edge_hz: float | None, adc_rate_hz: float, sinc_order: int,
                  full_scale_lsb: float, sinc_decimation: float | None = None) -> ChainReport:
    """Ideal and realised response figures of the cascade, with warnings.

    ``adc_rate_hz`` is the cascade's input rate (the ADC data rate); the passband runs to
    ``passband_edge_hz`` (at most half the rate), the stopband, if there is one, from
    ``stopband_edge_hz`` to half the rate. ``full_scale_lsb`` is a full-scale step in output
    LSB (settling to one LSB means within 1 / full_scale_lsb of the step).
    ``sinc_decimation`` is the ADC's modulator rate over its data rate, if known.
    """
    nyquist = adc_rate_hz / 2
    if not 0 < passband_edge_hz <= nyquist:
        raise ValueError("need 0 < passband_edge_hz <= adc_rate_hz / 2")
    if stopband_edge_hz is not None and not passband_edge_hz < stopband_edge_hz < nyquist:
        raise ValueError("need passband_edge_hz < stopband_edge_hz < adc_rate_hz / 2")
    passband = np.linspace(0.0, passband_edge_hz, PASSBAND_POINTS)
    stopband = None if stopband_edge_hz is None else np.linspace(stopband_edge_hz, nyquist,
                                                                 STOPBAND_POINTS)

    def figures(realised: bool) -> ResponseFigures:
        return _figures(stages, realised=realised, passband=passband, stopband=stopband,
                        adc_rate_hz=adc_rate_hz, sinc_order=sinc_order,
                        sinc_decimation=sinc_decimation, lsb_band=1.0 / full_scale_lsb)

    deviation = _deviation_db(magnitude_response(stages, passband, realised=True),
                              magnitude_response(stages, passband, realised=False))
    report = ChainReport(
        passband_edge_hz=passband_edge_hz, stopband_edge_hz=stopband_edge_hz,
        ideal=figures(False), realised=figures(True),
        max_passband_deviation_db=deviation,
        stages=tuple(_stage_report(i, s, passband) for i, s in enumerate(stages)), warnings=())
    return dataclasses.replace(report, warnings=_warnings(report))
