"""numba, started for our kernels: take ``njit`` from here, not from numba directly.

numba.np.arraymath imports scipy.linalg.cython_blas when it is first loaded, only to learn
whether np.dot and friends can be compiled; that costs about 0.75 s, more than all of
``verify``'s own work on a cached design. None of our kernels calls BLAS, so that probe is
run once here with scipy.linalg hidden (it answers "no BLAS"); scipy.linalg stays
importable as usual afterwards (the filter design imports it when it runs).
"""

from __future__ import annotations

import sys


def _start_numba() -> None:
    """Import numba's array math with scipy.linalg hidden for that moment."""
    if "numba.np.arraymath" in sys.modules or "scipy.linalg" in sys.modules:
        return
    sys.modules["scipy.linalg"] = None  # type: ignore[assignment]
    try:
        import numba.np.arraymath  # noqa: F401  # deferred on purpose: see above
    except ImportError:
        pass
    finally:
        del sys.modules["scipy.linalg"]


_start_numba()

from numba import njit  # noqa: E402  # only after the start above

__all__ = ["njit"]
