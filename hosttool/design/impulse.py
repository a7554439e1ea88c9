"""Impulse responses with a proven bound on what truncation leaves out.

A ``Response`` is a float64 impulse response truncated to its array, plus ``tail``: an upper
bound on the sum of |h[n]| beyond the array. From it follow upper bounds on the L1 norm (the
worst-case gain for a bounded input, used to prove that no node overflows) and on the L2 norm
(the RMS gain for white rounding noise). Cascades convolve the arrays and combine tails so the
bound stays a bound; a stage after a decimator by D is seen from the input rate as its
impulse response upsampled by D (zeros between taps).

Tail bound of a biquad: the all-pole part 1/A(z) with poles of radius rho < 1 has
|g[n]| = |sum_{k=0..n} p1^k p2^(n-k)| <= (n + 1) rho^n, so a numerator b gives
|h[n]| <= sum|b| (n + 1) rho^(n-2) for n >= 2, and for M = N + 1
sum_{n>=M} (n + 1) rho^n = rho^M ((M + 1) / (1 - rho) + rho / (1 - rho)^2).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from fractions import Fraction

import numpy as np
from numpy.typing import NDArray

#: Float64 rounding in long convolutions is far below this relative margin added to bounds.
FLOAT_MARGIN = 1e-9
MAX_LENGTH = 1 << 22
TAIL_TARGET = 1e-10


@dataclass(frozen=True)
class Response:
    """Truncated impulse response ``h`` and a bound ``tail`` on sum |h[n]| beyond it."""

    h: NDArray[np.float64]
    tail: float = 0.0

    @property
    def l1(self) -> float:
        """Upper bound on sum |h[n]| (worst-case gain for a bounded input)."""
        return float(np.sum(np.abs(self.h))) * (1 + FLOAT_MARGIN) + self.tail

    @property
    def l2(self) -> float:
        """Upper bound on sqrt(sum h[n]^2) (RMS gain for white noise)."""
        return float(np.sqrt(np.sum(self.h ** 2))) * (1 + FLOAT_MARGIN) + self.tail

    def then(self, other: Response) -> Response:
        """This response followed by ``other`` (convolution; tails combined as a bound)."""
        from scipy import signal  # deferred: ~1 s to import; a cached design needs none
        la = float(np.sum(np.abs(self.h)))
        lb = float(np.sum(np.abs(other.h)))
        h = signal.fftconvolve(self.h, other.h) if min(self.h.size, other.h.size) > 64 \
            else np.convolve(self.h, other.h)
        tail = la * other.tail + self.tail * lb + self.tail * other.tail
        return Response(np.asarray(h, dtype=np.float64), tail)

    def upsampled(self, factor: int) -> Response:
        """The same response seen from a rate ``factor`` times higher (zeros inserted)."""
        if factor == 1:
            return self
        h = np.zeros(self.h.size * factor - (factor - 1))
        h[::factor] = self.h
        return Response(h, self.tail)

    def minus(self, other: Response) -> Response:
        """The difference of two responses (for the realised-versus-ideal bound)."""
        n = max(self.h.size, other.h.size)
        a = np.zeros(n)
        b = np.zeros(n)
        a[: self.h.size] = self.h
        b[: other.h.size] = other.h
        return Response(a - b, self.tail + other.tail)

    def signs(self) -> NDArray[np.int64]:
        """sign(h) time-reversed: the input that drives the output to +L1 (worst case)."""
        return np.sign(self.h[::-1]).astype(np.int64)


def identity() -> Response:
    """The unit impulse."""
    return Response(np.ones(1))


def fir(taps: Sequence[float] | NDArray[np.float64]) -> Response:
    """An FIR filter's exact impulse response."""
    return Response(np.asarray(taps, dtype=np.float64))


def _tail_sum(rho: float, m: int) -> float:
    """sum_{n >= m} (n + 1) rho^n for 0 <= rho < 1."""
    if rho == 0.0:
        return 1.0 if m == 0 else 0.0
    return rho ** m * ((m + 1) / (1 - rho) + rho / (1 - rho) ** 2)


def pole_radius(a1: float, a2: float) -> float:
    """Largest pole radius of 1 + a1 z^-1 + a2 z^-2, rounded up (safe for a bound).

    The discriminant is formed exactly (the realised coefficients are dyadic rationals, so
    Fraction holds them exactly); np.roots would lose half the digits for the nearby real
    poles of a low cutoff. A relative margin of 1e-12 covers the final float rounding.
    """
    disc = Fraction(a1) ** 2 - 4 * Fraction(a2)
    if disc < 0:
        rho = math.sqrt(float(Fraction(a2)))
    else:
        rho = (abs(float(a1)) + math.sqrt(float(disc))) / 2
    return rho * (1 + 1e-12)


def biquad_span(b: Sequence[float] | NDArray[np.float64],
                a: Sequence[float] | NDArray[np.float64]) -> tuple[int, float]:
    """(length, proven bound of sum |h[n]| beyond it) of a stable biquad's impulse response,
    the length doubled from 64 until that tail is below TAIL_TARGET (or MAX_LENGTH).

    Raises ValueError for poles on or outside the unit circle.
    """
    rho = pole_radius(a[1], a[2])
    if not rho < 1.0:
        raise ValueError(f"unstable biquad: pole radius {rho}")
    bsum = float(sum(abs(x) for x in b))
    n = 64
    while True:
        scale = bsum / rho ** 2 if rho > 0 else bsum
        tail = scale * _tail_sum(rho, n)
        if tail <= TAIL_TARGET or n >= MAX_LENGTH:
            return n, tail
        n *= 2


def biquad(b: Sequence[float] | NDArray[np.float64], a: Sequence[float] | NDArray[np.float64]
           ) -> Response:
    """A stable biquad's impulse response, long enough that the proven tail is negligible.

    ``a`` is (1, a1, a2). Raises ValueError for poles on or outside the unit circle.
    """
    from scipy import signal  # deferred: ~1 s to import; a cached design needs none
    n, tail = biquad_span(b, a)
    impulse = np.zeros(n)
    impulse[0] = 1.0
    h = signal.lfilter(np.asarray(b, dtype=np.float64), np.asarray(a, dtype=np.float64), impulse)
    return Response(np.asarray(h, dtype=np.float64), tail)


def cascade(parts: Sequence[Response]) -> Response:
    """Responses in series."""
    out = identity()
    for part in parts:
        out = out.then(part)
    return out

