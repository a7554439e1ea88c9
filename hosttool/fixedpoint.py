"""Fixed-point primitives shared by the design, the integer model and the C firmware.

Qm.n: a signed word of 1 + m + n bits with n fraction bits (m may be negative for small
values). See DEVELOPERS.md, "Arithmetic contract", for how they compose.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

INT32_MIN = -(1 << 31)
INT32_MAX = (1 << 31) - 1
INT64_MAX = (1 << 63) - 1


@dataclass(frozen=True)
class QFormat:
    """A signed fixed-point format: ``word`` bits in all, ``frac`` of them fraction bits."""

    word: int
    frac: int

    @property
    def int_bits(self) -> int:
        """m of Qm.n: integer bits, sign not counted (negative for small-value formats)."""
        return self.word - 1 - self.frac

    @property
    def name(self) -> str:
        """The Qm.n notation."""
        return f"Q{self.int_bits}.{self.frac}"

    @property
    def max_int(self) -> int:
        """Largest stored integer, 2^(word-1) - 1."""
        return (1 << (self.word - 1)) - 1

    @property
    def min_int(self) -> int:
        """Smallest stored integer, -2^(word-1)."""
        return -(1 << (self.word - 1))

    @property
    def step(self) -> float:
        """Value of one LSB, 2^-frac."""
        return math.ldexp(1.0, -self.frac)


def round_shift(x: int, k: int) -> int:
    """(x + 2^(k-1)) >> k with floor shift (round half up); identity for k = 0."""
    if k < 0:
        raise ValueError("shift must be >= 0")
    return x if k == 0 else (x + (1 << (k - 1))) >> k


def round_shift_array(x: NDArray[np.int64], k: int) -> NDArray[np.int64]:
    """Element-wise round_shift of an int64 array (numpy's >> is arithmetic)."""
    if k < 0:
        raise ValueError("shift must be >= 0")
    return x if k == 0 else (x + np.int64(1 << (k - 1))) >> np.int64(k)


def sat32(x: int) -> int:
    """Clamp to the int32 range."""
    return INT32_MIN if x < INT32_MIN else INT32_MAX if x > INT32_MAX else x


def sat32_array(x: NDArray[np.int64]) -> NDArray[np.int64]:
    """Element-wise sat32 of an int64 array."""
    return np.clip(x, INT32_MIN, INT32_MAX)


def quantise(value: float, frac: int) -> int:
    """round(value * 2^frac), ties to even (as fxpmath's 'around' and numpy.rint)."""
    return int(round(math.ldexp(value, frac)))


def bits_for(magnitude: float) -> int:
    """Smallest b with magnitude < 2^b (b may be negative); magnitude must be > 0."""
    if magnitude <= 0:
        raise ValueError("magnitude must be positive")
    b = math.frexp(magnitude)[1]  # magnitude = f * 2^b with 0.5 <= f < 1
    return b


def frac_bits_for(max_magnitude: float, word: int) -> int:
    """Most fraction bits such that round(max_magnitude * 2^frac) fits a signed ``word``.

    The rounded value must stay within [-(2^(word-1)), 2^(word-1) - 1].
    """
    frac = word - 1 - bits_for(max_magnitude)
    while quantise(max_magnitude, frac) > (1 << (word - 1)) - 1:
        frac -= 1
    return frac


def headroom_bits(bound: float, word: int = 32) -> float:
    """log2 of (largest magnitude of a signed ``word``) / bound: spare bits above the bound."""
    if bound <= 0:
        return float(word - 1)
    return math.log2(((1 << (word - 1)) - 1) / bound)
