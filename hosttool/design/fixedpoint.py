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



def round_shift_array(x: NDArray[np.int64], k: int) -> NDArray[np.int64]:
    """Element-wise round_shift of an int64 array (numpy's >> is arithmetic)."""
    if k < 0:
        raise ValueError("shift must be >= 0")
    return x if k == 0 else (x + np.int64(1 << (k - 1))) >> np.int64(k)


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
