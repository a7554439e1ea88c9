"""Maximum permissible errors of an accuracy class (OIML R 76-1, non-automatic weighing).

For a load m expressed in verification scale intervals e, the maximum permissible error on
initial verification is 0.5 e, 1 e or 1.5 e by band. The bands (from memory; check against
the current edition of OIML R 76-1 before relying on them):

    class I     0.5 e up to 50 000 e    1 e up to 200 000 e   1.5 e above
    class II    0.5 e up to 5 000 e     1 e up to 20 000 e    1.5 e up to 100 000 e
    class III   0.5 e up to 500 e       1 e up to 2 000 e     1.5 e up to 10 000 e
    class IIII  0.5 e up to 50 e        1 e up to 200 e       1.5 e up to 1 000 e

The last bound of each class is the largest number of intervals the class allows.
"""

from __future__ import annotations

import math

#: (upper bound of the band in e, mpe in e), bands in increasing order; from memory.
MPE_BANDS: dict[str, tuple[tuple[float, float], ...]] = {
    "I": ((50_000, 0.5), (200_000, 1.0), (math.inf, 1.5)),
    "II": ((5_000, 0.5), (20_000, 1.0), (100_000, 1.5)),
    "III": ((500, 0.5), (2_000, 1.0), (10_000, 1.5)),
    "IIII": ((50, 0.5), (200, 1.0), (1_000, 1.5)),
}


def max_intervals(accuracy_class: str) -> float:
    """The largest load the class covers, in e."""
    return MPE_BANDS[accuracy_class][-1][0]


def mpe_intervals(accuracy_class: str, load_e: float) -> float:
    """Maximum permissible error, in e, at a load of ``load_e`` intervals (sign ignored)."""
    load = abs(load_e)
    for upper, mpe in MPE_BANDS[accuracy_class]:
        if load <= upper:
            return mpe
    raise ValueError(f"{load_e:g} e is beyond class {accuracy_class}'s "
                     f"{max_intervals(accuracy_class):g} e")
