"""Delta-sigma ADC with PGA: volts to codes, noise, gain choice and the sinc^k response.

Conventions: a bipolar differential input range of +-Vref / G; code = round(Vin * G / Vref *
2^(bits-1)) saturated to [-2^(bits-1), 2^(bits-1) - 1]; one LSB at the input is
Vref / (G * 2^(bits-1)) volts. Rounding is to the nearest code (ties to even, numpy.rint).

Everything ``check`` needs here is plain float arithmetic; numpy is imported only by the
functions that take or give arrays, when they are called.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass
from typing import TYPE_CHECKING, overload

from hosttool.spec.schema import Adc

if TYPE_CHECKING:
    import numpy as np
    from numpy.typing import ArrayLike, NDArray

#: Peak-to-peak over RMS for Gaussian noise, the usual "noise-free" convention
#: (common practice, no published source).
PEAK_TO_PEAK_OVER_RMS = 6.6


def code_range(bits: int) -> tuple[int, int]:
    """Lowest and highest code of a ``bits``-bit two's-complement converter."""
    return -(1 << (bits - 1)), (1 << (bits - 1)) - 1


@dataclass(frozen=True)
class Converter:
    """One ADC at one PGA gain and reference."""

    bits: int
    gain: int
    reference_v: float

    @property
    def code_max(self) -> int:
        """Largest code, 2^(bits-1) - 1."""
        return code_range(self.bits)[1]

    @property
    def code_min(self) -> int:
        """Smallest code, -2^(bits-1)."""
        return code_range(self.bits)[0]

    @property
    def input_range_v(self) -> float:
        """Half of the differential input range, volts: inputs span +-this."""
        return self.reference_v / self.gain

    @property
    def lsb_v(self) -> float:
        """One code step referred to the input, volts."""
        return self.input_range_v / (1 << (self.bits - 1))

    def code(self, volts: ArrayLike) -> NDArray[np.int64]:
        """Input volts to codes, rounded to nearest and saturated at the limits."""
        import numpy as np  # deferred on purpose: the scalar figures of check need no numpy

        scaled = np.rint(np.asarray(volts, dtype=np.float64) / self.lsb_v)
        return np.clip(scaled, self.code_min, self.code_max).astype(np.int64)

    def volts(self, code: ArrayLike) -> NDArray[np.float64]:
        """Codes to the input volts at the centre of each code."""
        import numpy as np  # deferred on purpose: the scalar figures of check need no numpy

        return np.asarray(code, dtype=np.float64) * self.lsb_v

    def noise_counts_rms(self, noise_uv_rms: float) -> float:
        """Input-referred RMS noise (microvolts) in code steps."""
        return noise_uv_rms * 1e-6 / self.lsb_v


def best_gain(adc: Adc, peak_input_v: float, reference_v: float) -> int | None:
    """Largest gain of the set whose range holds peak_input_v plus the overload margin.

    None when even the smallest gain is too much.
    """
    need = peak_input_v * (1.0 + adc.overload_margin_pct / 100.0)
    fitting = [g for g in adc.pga_gains if need <= reference_v / g]
    return max(fitting) if fitting else None


def _power(x: float, k: int) -> float:
    """x^k correctly rounded (the exact power of the double x, rounded once): the same bits
    on every machine, whatever its libm or SIMD pow, and monotonic in x. Python's int / int
    is correctly rounded, and a double is an exact ratio of integers."""
    num, den = x.as_integer_ratio()
    num_k: int = num ** k
    den_k: int = den ** k
    return num_k / den_k


def _sinc_base(f: float, data_rate_sps: float, decimation: float | None) -> float:
    """|H(f)| of one sinc stage (k = 1)."""
    u = math.pi * f / data_rate_sps
    if decimation is None:
        h = 1.0 if u == 0 else math.sin(u) / u
    else:
        den = decimation * math.sin(u / decimation)
        h = 1.0 if den == 0 else math.sin(u) / den
    return abs(h)


@overload
def sinc_magnitude(freq_hz: float, data_rate_sps: float, order: int,
                   decimation: float | None = None) -> float: ...


@overload
def sinc_magnitude(freq_hz: NDArray[np.float64], data_rate_sps: float, order: int,
                   decimation: float | None = None) -> NDArray[np.float64]: ...


def sinc_magnitude(freq_hz: float | NDArray[np.float64], data_rate_sps: float, order: int,
                   decimation: float | None = None) -> float | NDArray[np.float64]:
    """|H(f)| of a sinc^k decimation filter whose output rate is data_rate_sps: a float for a
    frequency, an array of the same shape for an array of them.

    With a decimation ratio N: |sin(pi f / fd) / (N sin(pi f / (N fd)))|^k; without one, the
    limit N -> infinity, |sin(pi f / fd) / (pi f / fd)|^k (from memory; the notches at
    multiples of fd are checked numerically in the tests).
    """
    if isinstance(freq_hz, int | float):
        return _power(_sinc_base(float(freq_hz), data_rate_sps, decimation), order)
    import numpy as np  # deferred on purpose: check asks for single frequencies only

    f = np.asarray(freq_hz, dtype=np.float64)
    values = [_power(_sinc_base(x, data_rate_sps, decimation), order)
              for x in f.ravel().tolist()]
    return np.array(values, dtype=np.float64).reshape(f.shape)


def rejection_db(magnitude: float, floor_db: float = 300.0) -> float:
    """Attenuation in dB of a magnitude, capped at floor_db for an exact notch."""
    if magnitude <= 10 ** (-floor_db / 20):
        return floor_db
    return -20.0 * math.log10(magnitude) + 0.0  # + 0.0: no "-0" for a gain of exactly 1


def alias_hz(freq_hz: float, sample_rate: float) -> float:
    """Where a tone lands after sampling at sample_rate: its distance to the nearest multiple
    (ties of the multiple to even)."""
    return abs(freq_hz - sample_rate * round(freq_hz / sample_rate))


def sinc_decimation(adc: Adc) -> float | None:
    """The sinc filter's decimation ratio: modulator rate over data rate (None: ideal limit)."""
    return adc.modulator_rate_hz / adc.data_rate_sps if adc.modulator_rate_hz else None


@overload
def adc_sinc_magnitude(adc: Adc, freq_hz: float) -> float: ...


@overload
def adc_sinc_magnitude(adc: Adc, freq_hz: NDArray[np.float64]) -> NDArray[np.float64]: ...


def adc_sinc_magnitude(adc: Adc, freq_hz: float | NDArray[np.float64]
                       ) -> float | NDArray[np.float64]:
    """|H(f)| of this ADC's own sinc^k filter (its order, data rate and decimation)."""
    return sinc_magnitude(freq_hz, adc.data_rate_sps, adc.sinc_order, sinc_decimation(adc))


def adc_sinc_peak(adc: Adc, freqs: Iterable[float]) -> float:
    """The largest |H(f)| of this ADC's sinc^k over ``freqs``: the k-th power of the largest
    single-stage |H|. The power is correctly rounded, hence monotonic, so this has the bits
    of the largest of the per-frequency magnitudes, for one power instead of one each."""
    rate, decimation = adc.data_rate_sps, sinc_decimation(adc)
    return _power(max(_sinc_base(f, rate, decimation) for f in freqs), adc.sinc_order)
