"""Evenly spaced points of a range, in plain floats (no numpy: ``check`` uses them)."""

from __future__ import annotations


def even_points(low: float, high: float, count: int) -> list[float]:
    """``count`` >= 2 points from ``low`` to ``high``, both included: ``low + i * step`` with
    ``step = (high - low) / (count - 1)``, the last point exactly ``high``.

    The same arithmetic as numpy.linspace, so the points have the same bits (the tests
    compare them).
    """
    step = (high - low) / (count - 1)
    return [i * step + low for i in range(count - 1)] + [high]
