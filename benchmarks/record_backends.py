"""Record back ends: one lot recorded into SQLite and into a PostgreSQL server.

Times ``run_batch`` (one process) on an invented lot of the hive_scale example into a fresh
SQLite file, then into a fresh database on a PostgreSQL server, and prints seconds, units
per second and the ratio. The server is the one ``--db`` names (a database the role may
create tables in: use a throwaway one, the script adds rows), or, with ``--start``, a
throwaway server this script starts on a free port of 127.0.0.1 (initdb and pg_ctl from
PATH or /usr/lib/postgresql/N/bin; as root they run as the postgres user) and removes.
Figures depend on the disk and the server's settings (a started server runs with
fsync on, as a line's would); asserts nothing.

Run: python benchmarks/record_backends.py --start [--units 2000]
     python benchmarks/record_backends.py --db postgresql://USER@HOST:PORT/DBNAME
"""

from __future__ import annotations

import argparse
import os
import shutil
import socket
import subprocess
import tempfile
import time
from pathlib import Path

import numpy as np

from hosttool.design.resolve import make_design
from hosttool.production.batch import GROUP, run_batch
from hosttool.production.synthetic_lot import lot_csv, random_truth
from hosttool.spec.schema import load_spec

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
START = 1_741_075_200


def _bindir() -> Path:
    found = shutil.which("initdb")
    if found:
        return Path(found).parent
    candidates = sorted(Path("/usr/lib/postgresql").glob("*/bin/initdb"))
    if not candidates:
        raise SystemExit("no initdb found: install postgresql or give --db")
    return candidates[-1].parent


def _start_server(root: Path) -> tuple[str, list[str], Path]:
    bindir = _bindir()
    as_user = []
    if os.geteuid() == 0:
        shutil.chown(root, user="postgres")
        as_user = ["runuser", "-u", "postgres", "--"]
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    data = root / "data"
    subprocess.run([*as_user, str(bindir / "initdb"), "-D", str(data), "--auth=trust",
                    "--username=postgres"], check=True, capture_output=True)
    subprocess.run([*as_user, str(bindir / "pg_ctl"), "-D", str(data), "-l",
                    str(root / "log"), "-w", "-o",
                    f"-p {port} -k {root} -c listen_addresses=127.0.0.1", "start"],
                   check=True, capture_output=True)
    return f"postgresql://postgres@127.0.0.1:{port}/postgres", as_user, bindir


def _time(spec: Path, readings: Path, out: Path, db: str) -> float:
    out.mkdir()
    began = time.perf_counter()
    run_batch(spec, readings, out=out, db=db, station="bench", recalibrate=False,
              cal_time=None, jobs=1)
    return time.perf_counter() - began


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--units", type=int, default=2000, help="lot size (default 2000)")
    parser.add_argument("--db", help="postgresql:// URI of a throwaway database")
    parser.add_argument("--start", action="store_true", help="start a throwaway server")
    args = parser.parse_args()
    if not args.db and not args.start:
        raise SystemExit("give --db URI or --start")
    spec = EXAMPLES / "hive_scale.toml"
    design = make_design(load_spec(spec))
    rng = np.random.default_rng(1)
    truths = [random_truth(f"BK{i:05d}", rng) for i in range(args.units)]
    with tempfile.TemporaryDirectory(prefix="hosttool-bench-") as tmp:
        root = Path(tmp)
        readings = root / "lot.csv"
        readings.write_text(lot_csv(design, truths, seed=1, start_utc=START))
        server = Path(tempfile.mkdtemp(prefix="hosttool-bench-pg-"))
        uri, as_user, bindir = (args.db, [], None) if args.db else _start_server(server)
        try:
            lite = _time(spec, readings, root / "a", str(root / "line.sqlite"))
            pg = _time(spec, readings, root / "b", uri)
        finally:
            if bindir is not None:
                subprocess.run([*as_user, str(bindir / "pg_ctl"), "-D",
                                str(server / "data"), "-m", "fast", "-w", "stop"],
                               check=False, capture_output=True)
            shutil.rmtree(server, ignore_errors=True)
    print(f"{args.units} units, one process, {GROUP} units per transaction")
    print(f"  SQLite      {lite:6.2f} s  {args.units / lite:7.0f} units/s")
    print(f"  PostgreSQL  {pg:6.2f} s  {args.units / pg:7.0f} units/s  "
          f"({pg / lite:.2f} x the SQLite time)")


if __name__ == "__main__":
    main()
