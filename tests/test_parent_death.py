"""A batch's worker ends with the batch (util/parent_death.py).

Source: prctl(2), PR_SET_PDEATHSIG: the signal is sent to the process when the thread that
forked it ends; a process killed with -9 runs no code of its own, so only the kernel can
end its workers at that moment. proc(5): /proc/<pid>/stat, field 3 is the state (Z: ended,
not yet reaped).
"""

from __future__ import annotations

import subprocess
import sys
import time
from pathlib import Path

import pytest

#: A "batch" that forks a "worker" (which asks to end with it), prints the worker's pid and
#: waits; the worker waits far longer.
_BATCH = """
import os, time
from hosttool.util.parent_death import end_with_parent
parent = os.getpid()
pid = os.fork()
if pid == 0:
    end_with_parent(parent)
    time.sleep(120)
    os._exit(0)
print(pid, flush=True)
time.sleep(120)
"""


def _ended(pid: int) -> bool:
    try:
        return Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0] == "Z"
    except FileNotFoundError:
        return True


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="prctl is Linux's")
def test_a_worker_ends_when_its_batch_is_killed() -> None:
    batch = subprocess.Popen([sys.executable, "-c", _BATCH], stdout=subprocess.PIPE, text=True)
    assert batch.stdout is not None
    worker = int(batch.stdout.readline())
    time.sleep(0.3)                      # the worker has long asked to end with its parent
    assert not _ended(worker)
    batch.kill()
    batch.wait(timeout=30)
    deadline = time.monotonic() + 10
    while not _ended(worker) and time.monotonic() < deadline:
        time.sleep(0.01)
    assert _ended(worker)
