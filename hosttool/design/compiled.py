"""numba, started for our kernels: take ``njit`` from here, not from numba directly.

numba asks for scipy twice while it is imported, and our kernels need neither answer:
``import numba`` imports scipy's package (about 10 ms, subprocess and sysconfig with it) only
to check its version, and numba.np.arraymath imports scipy.linalg.cython_blas, only to
learn whether np.dot and friends can be compiled (about 0.75 s, more than all of
``verify``'s own work on a cached design). None of our kernels calls BLAS, so numba is
imported here with scipy hidden for that moment (it answers "no scipy, no BLAS"); scipy
stays importable as usual afterwards (the filter design imports it when it runs). When
scipy.linalg is loaded already, numba is imported as it is.
"""

from __future__ import annotations

import sys


def _start_numba() -> None:
    """Import numba and its array math with scipy hidden for that moment."""
    if "numba.np.arraymath" in sys.modules or "scipy.linalg" in sys.modules:
        return
    hidden = [name for name in ("scipy", "scipy.linalg") if name not in sys.modules]
    for name in hidden:
        sys.modules[name] = None  # type: ignore[assignment]
    try:
        import numba.np.arraymath  # noqa: F401  # deferred on purpose: see above
    except ImportError:
        pass
    finally:
        for name in hidden:
            del sys.modules[name]


_start_numba()

from numba import njit  # noqa: E402  # only after the start above

__all__ = ["njit"]
