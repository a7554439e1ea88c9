"""A worker process that ends with the process that forked it.

A batch's workers stage images into a folder whose lock (flock, shared with the workers
by the fork) tells the next batch whether it may clear that folder. Should the batch be
killed, its workers must not outlive it by a chunk or two, holding the lock and writing
images no one will record: Linux's prctl(PR_SET_PDEATHSIG) has the kernel kill a worker
when the thread that forked it ends (prctl(2)). Elsewhere a worker still ends when it next
reads its work from the gone batch (end of file).
"""

from __future__ import annotations

import ctypes
import os
import signal

#: prctl(2) option: the signal sent to this process when its parent thread ends.
PR_SET_PDEATHSIG = 1


def end_with_parent(parent: int) -> None:
    """Have this process killed (SIGKILL) when the thread that forked it ends (Linux; a
    no-op elsewhere); end at once if ``parent`` (its pid) is gone already."""
    try:
        prctl = ctypes.CDLL(None, use_errno=True).prctl
    except (OSError, AttributeError):
        return
    prctl(PR_SET_PDEATHSIG, signal.SIGKILL, 0, 0, 0)
    if os.getppid() != parent:
        os._exit(1)
