"""Shared test helpers: tool checks for the C build and emulator tests."""

from __future__ import annotations

import os
import shutil
import socket
import subprocess
import tempfile
from collections.abc import Iterator
from pathlib import Path

import pytest

from hosttool.firmware import build as cbuild


def require_tools(kind: str, *, run: bool) -> None:
    """Skip the test when ``kind`` lacks its compiler (or, with ``run``, its emulator).

    With the environment variable CI=true a missing tool fails the test instead: CI must
    never pass by skipping the layer it exists to run.
    """
    missing = cbuild.missing_tools(kind, run=run)
    if not missing:
        return
    reason = f"{kind} needs {', '.join(missing)} on PATH"
    if os.environ.get("CI") == "true":
        pytest.fail(f"{reason} (CI=true: missing tools fail instead of skipping)")
    pytest.skip(reason)


def require_programs(*names: str) -> None:
    """Skip the test when a program it runs (make, cmake ...) is not on PATH; fail under CI."""
    missing = [n for n in names if shutil.which(n) is None]
    if not missing:
        return
    reason = f"needs {', '.join(missing)} on PATH"
    if os.environ.get("CI") == "true":
        pytest.fail(f"{reason} (CI=true: missing tools fail instead of skipping)")
    pytest.skip(reason)


# ----------------------------------------------------------------------------- PostgreSQL


def _postgres_bin() -> Path | None:
    """The folder of initdb and pg_ctl: on PATH, else Debian's /usr/lib/postgresql/N/bin."""
    found = shutil.which("initdb")
    if found is not None and shutil.which("pg_ctl") is not None:
        return Path(found).parent
    candidates = sorted(Path("/usr/lib/postgresql").glob("*/bin/initdb"),
                        key=lambda p: int(p.parent.parent.name)
                        if p.parent.parent.name.isdigit() else 0)
    return candidates[-1].parent if candidates else None


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


class PostgresServer:
    """A throwaway PostgreSQL server on 127.0.0.1 (trust authentication, loopback only)."""

    def __init__(self, bindir: Path):
        self.bindir = bindir
        self.root = Path(tempfile.mkdtemp(prefix="hosttool-pg-"))
        self.as_user: list[str] = []
        if os.geteuid() == 0:
            # the server refuses to run as root: initdb and pg_ctl run as the postgres user
            shutil.chown(self.root, user="postgres")
            self.as_user = ["runuser", "-u", "postgres", "--"]
        self.data = self.root / "data"
        self.port = _free_port()
        self._run("initdb", "-D", str(self.data), "--auth=trust", "--username=postgres",
                  "--encoding=UTF8", "--no-sync")
        self._run("pg_ctl", "-D", str(self.data), "-l", str(self.root / "log"), "-w",
                  "-o", f"-p {self.port} -k {self.root} -c listen_addresses=127.0.0.1 "
                  "-c fsync=off -c max_connections=50", "start")
        self.count = 0

    def _run(self, tool: str, *args: str) -> None:
        subprocess.run([*self.as_user, str(self.bindir / tool), *args], check=True,
                       capture_output=True, timeout=120)

    def uri(self, name: str = "postgres") -> str:
        return f"postgresql://postgres@127.0.0.1:{self.port}/{name}"

    def new_database(self) -> str:
        """A fresh empty database on the server; returns its URI."""
        import psycopg

        self.count += 1
        name = f"line{self.count}"
        with psycopg.connect(self.uri(), autocommit=True) as db:
            db.execute(f"CREATE DATABASE {name}")
        return self.uri(name)

    def stop(self) -> None:
        self._run("pg_ctl", "-D", str(self.data), "-m", "immediate", "-w", "stop")
        shutil.rmtree(self.root, ignore_errors=True)


@pytest.fixture(scope="session")
def postgres_server() -> Iterator[PostgresServer]:
    """A real PostgreSQL server the suite starts (skipped outside CI without one)."""
    bindir = _postgres_bin()
    if bindir is None:
        reason = "PostgreSQL server binaries (initdb, pg_ctl) not found"
        if os.environ.get("CI") == "true":
            pytest.fail(f"{reason} (CI=true: apt-get install postgresql)")
        pytest.skip(reason)
    server = PostgresServer(bindir)
    try:
        yield server
    finally:
        server.stop()


@pytest.fixture
def postgres_uri(postgres_server: PostgresServer) -> str:
    """The URI of a fresh database on the suite's server."""
    return postgres_server.new_database()
