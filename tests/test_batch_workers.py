"""hosttool batch with worker processes: what the main process does once before the fork.

Source: fork(2) gives the child a copy of the parent's memory, so a numba kernel loaded
(or compiled) by the parent before the fork is there in every worker; Python's gc.freeze
moves every object tracked so far out of the collector's generations (Python library
reference, gc module), and gc.unfreeze puts them back.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np

from hosttool.design.resolve import make_design
from hosttool.production.batch import CHUNK
from hosttool.production.synthetic_lot import lot_csv, random_truth
from hosttool.spec.schema import parse_spec

SPEC = Path(__file__).resolve().parent.parent / "examples" / "hive_scale.toml"

#: Runs a batch with two workers in a fresh process; every numba kernel loaded or compiled
#: is logged with the process that did it, and the collector's frozen count while the
#: workers run (the record is opened after the fork) and after the batch.
_SCRIPT = """
import gc, os, sys
from pathlib import Path
from numba.core import dispatcher
from hosttool.production import batch

spec, readings, out, log = map(Path, sys.argv[1:5])
real_compile = dispatcher.Dispatcher.compile

def compile(self, sig):
    with open(log, "a") as file:
        file.write(f"load {os.getpid()}\\n")
    return real_compile(self, sig)

dispatcher.Dispatcher.compile = compile
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
               f"passed {sum(o.status == 'pass' for o in summary.outcomes)}\\n")
"""


def test_workers_inherit_the_loaded_kernels_and_a_frozen_heap(tmp_path: Path) -> None:
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
             ("load", "frozen", "parent", "after", "passed")}
    assert found["passed"] == [n]
    # the kernels were loaded, by the parent alone: no worker loaded one again
    assert found["load"] and set(found["load"]) == set(found["parent"])
    assert found["frozen"][0] > 0 and found["after"] == [0]
