"""End a finished command's process at once, without the interpreter's teardown.

When the interpreter ends it frees every object one by one; for numba's (its type
registries and compiled kernels) that takes about 0.1 s, more than a tenth of a whole
``verify``, and does nothing a finished command needs. ``quick_exit`` runs the exit handlers
(temporary folders such as the C engine's build folder, logging), writes out what is
buffered on stdout and stderr, and ends the process with the exit status. Only the console
entry point calls it, never a command run in-process (tests, click's CliRunner).
"""

from __future__ import annotations

import atexit
import os
import sys
from typing import NoReturn


def quick_exit(code: int) -> NoReturn:
    """Run the exit handlers, flush stdout and stderr, end the process with ``code``."""
    atexit._run_exitfuncs()
    for stream in (sys.stdout, sys.stderr):
        try:
            stream.flush()
        except (OSError, ValueError):   # a closed pipe or stream: nothing more to write
            pass
    os._exit(code)
