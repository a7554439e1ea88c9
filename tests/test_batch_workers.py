"""hosttool batch with worker processes: what the main process does before the fork, and
what no process of a batch loads.

Source: Python's gc.freeze moves every object tracked so far out of the collector's
generations (Python library reference, gc module), and gc.unfreeze puts them back; a worker
forked after it inherits the frozen objects (fork(2): the child gets a copy of the
parent's memory). numba is never imported by a batch (its import and kernel loading cost
a process about 0.5 s): the static path of a stack is numpy (design/static_stack.py).
"""

from __future__ import annotations

import gc
import subprocess
import sys
from pathlib import Path

import numpy as np

from hosttool.design.resolve import make_design
from hosttool.production.batch import CHUNK
from hosttool.production.synthetic_lot import lot_csv, random_truth
from hosttool.spec.schema import parse_spec

SPEC = Path(__file__).resolve().parent.parent / "examples" / "hive_scale.toml"

#: Runs a batch with two workers in a fresh process; each chunk logs its worker and whether
#: numba is imported there, the parent the collector's frozen count while the workers run
#: (the record is opened after the fork) and after the batch, and whether it has numba.
_SCRIPT = """
import gc, os, sys
from pathlib import Path
from hosttool.production import batch

spec, readings, out, log = map(Path, sys.argv[1:5])
real_work = batch._work

def work(units):
    done = real_work(units)
    with open(log, "a") as file:
        file.write(f"worker {os.getpid()}\\nnumba {int('numba' in sys.modules)}\\n")
    return done

batch._work = work
real_open = batch.open_record

def open_record(where):
    with open(log, "a") as file:
        file.write(f"frozen {gc.get_freeze_count()}\\n")
    return real_open(where)

batch.open_record = open_record
summary = batch.run_batch(spec, readings, out=out, db=None, station="t", recalibrate=False,
                          cal_time=None, jobs=2)
with open(log, "a") as file:
    file.write(f"parent {os.getpid()}\\nafter {gc.get_freeze_count()}\\n"
               f"numba {int('numba' in sys.modules)}\\n"
               f"passed {sum(o.status == 'pass' for o in summary.outcomes)}\\n")
"""


def test_workers_inherit_a_frozen_heap_and_no_process_imports_numba(tmp_path: Path) -> None:
    design = make_design(parse_spec(SPEC.read_text(), str(SPEC)))
    rng = np.random.default_rng(7)
    n = 2 * CHUNK + 3                            # enough units for the worker processes
    readings = tmp_path / "lot.csv"
    readings.write_text(lot_csv(design, [random_truth(f"WK{i:04d}", rng) for i in range(n)],
                                seed=7, start_utc=1_741_075_200))
    log = tmp_path / "log.txt"
    subprocess.run([sys.executable, "-c", _SCRIPT, str(SPEC), str(readings),
                    str(tmp_path / "out"), str(log)], check=True, timeout=300)
    lines = [line.split() for line in log.read_text().splitlines()]
    found = {key: [int(v) for k, v in lines if k == key] for key in
             ("worker", "numba", "frozen", "parent", "after", "passed")}
    assert found["passed"] == [n]
    # every chunk was prepared by a worker, not by the parent; numba nowhere
    assert len(found["worker"]) == 3 and found["parent"][0] not in found["worker"]
    assert found["numba"] == [0, 0, 0, 0]
    assert found["frozen"][0] > 0 and found["after"] == [0]


def test_the_collector_runs_less_often_during_a_batch_only(tmp_path: Path) -> None:
    # Source: gc.set_threshold / gc.get_threshold (Python library reference, gc module).
    from hosttool.production import batch
    design = make_design(parse_spec(SPEC.read_text(), str(SPEC)))
    readings = tmp_path / "lot.csv"
    readings.write_text(lot_csv(design, [random_truth(f"GC{i:04d}", np.random.default_rng(i))
                                         for i in range(3)], seed=3, start_utc=1_741_075_200))
    before = gc.get_threshold()
    during = []

    def progress(stream, count):
        during.append(gc.get_threshold())
        return stream

    summary = batch.run_batch(SPEC, readings, out=tmp_path / "out", db=None, station="t",
                              recalibrate=False, cal_time=None, progress=progress)
    assert len(summary.outcomes) == 3
    assert during == [(batch.GC_YOUNG, *before[1:])] and before[0] < batch.GC_YOUNG
    assert gc.get_threshold() == before


def test_the_collector_pauses_while_the_readings_file_is_split(tmp_path: Path,
                                                               monkeypatch) -> None:
    # Source: gc.isenabled / gc.disable (Python library reference, gc module). The split
    # runs with the collector off; before and after the batch it is on; a batch started
    # with it off (by the calling program) leaves it off.
    from hosttool.production import batch
    design = make_design(parse_spec(SPEC.read_text(), str(SPEC)))
    readings = tmp_path / "lot.csv"
    readings.write_text(lot_csv(design, [random_truth(f"GS{i:04d}", np.random.default_rng(i))
                                         for i in range(2)], seed=4, start_utc=1_741_075_200))
    seen = []
    real_split = batch.split_readings

    def split(*args, **kwargs):
        seen.append(gc.isenabled())
        return real_split(*args, **kwargs)

    monkeypatch.setattr(batch, "split_readings", split)
    for run, start_enabled in enumerate((True, False)):
        (gc.enable if start_enabled else gc.disable)()
        try:
            summary = batch.run_batch(SPEC, readings, out=tmp_path / f"out{run}", db=None,
                                      station="t", recalibrate=False, cal_time=None)
            assert gc.isenabled() is start_enabled
        finally:
            gc.enable()
        assert len(summary.outcomes) == 2
    assert seen == [False, False]
