"""Images made durable where they are made (util/staging.py), published by the recorder.

Source: POSIX fsync(2) makes one file's data durable and fsync of a folder its names;
sync(2) flushes every pending write of the system, which a batch must not wait for;
flock(2) locks are released when their holder dies.
"""

from __future__ import annotations

import fcntl
import os
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pytest

from hosttool.design.resolve import make_design
from hosttool.production import batch
from hosttool.production.synthetic_lot import lot_csv, random_truth
from hosttool.spec.schema import parse_spec
from hosttool.util import staging

SPEC = Path(__file__).resolve().parent.parent / "examples" / "hive_scale.toml"


def _lot(path: Path, n: int) -> Path:
    design = make_design(parse_spec(SPEC.read_text(), str(SPEC)))
    rng = np.random.default_rng(5)
    truths = [random_truth(f"ST{i:04d}", rng) for i in range(n)]
    path.write_text(lot_csv(design, truths, seed=5, start_utc=1_741_075_200))
    return path


def test_every_image_and_the_folder_are_fsynced_never_the_machine(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    synced: list[str] = []
    real_fsync = os.fsync

    def counting_fsync(fd: int) -> None:
        synced.append(os.readlink(f"/proc/self/fd/{fd}"))
        real_fsync(fd)

    def no_sync() -> None:
        raise AssertionError("os.sync() waits for the whole machine")

    monkeypatch.setattr(staging.os, "fsync", counting_fsync)
    monkeypatch.setattr(staging.os, "sync", no_sync)
    monkeypatch.setattr(batch, "GROUP", 16)
    out = tmp_path / "out"
    summary = batch.run_batch(SPEC, _lot(tmp_path / "lot.csv", 40), out=out, db=None,
                              station="t", recalibrate=False, cal_time=None, jobs=1)
    images = sorted(p.name for p in out.glob("*.hex"))
    assert len(images) == sum(o.status == "pass" for o in summary.outcomes) > 30
    staged = [Path(s).name for s in synced if staging.STAGING_PREFIX in s]
    assert sorted(f"{n.split('.r')[0]}.hex" for n in images) == sorted(staged)
    # the folder once per group that published images (40 units in groups of 16: 3)
    assert synced.count(str(out.resolve())) == 3
    # nothing of the staging is left
    assert [p.name for p in out.iterdir() if p.name.startswith(".hosttool-staging")] == []


def test_a_chunk_returns_only_when_all_its_images_are_on_disk(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # A chunk's parts are flushed while the next part is calibrated: slow fsyncs (10 ms)
    # must all have completed when the chunk returns its units to the recorder.
    completed: list[str] = []
    real_fsync = os.fsync

    def slow_fsync(fd: int) -> None:
        name = os.readlink(f"/proc/self/fd/{fd}")
        time.sleep(0.01)
        real_fsync(fd)
        completed.append(name)

    chunk = batch._Work.chunk
    returned: list[tuple[int, int]] = []

    def checked_chunk(self: batch._Work, units: list) -> list:
        done = chunk(self, units)
        staged = [p for p in done if p.staged is not None]
        returned.append((len(staged), sum(1 for p in staged if any(
            c.endswith(f"/{p.staged}") for c in completed))))
        return done

    monkeypatch.setattr(staging.os, "fsync", slow_fsync)
    monkeypatch.setattr(batch._Work, "chunk", checked_chunk)
    batch.run_batch(SPEC, _lot(tmp_path / "lot.csv", 2 * batch.PART + 10),
                    out=tmp_path / "out", db=None, station="t", recalibrate=False,
                    cal_time=None, jobs=1)
    assert returned and all(staged == durable > 0 for staged, durable in returned)


def test_each_process_stages_into_a_subfolder_of_its_own(tmp_path: Path) -> None:
    # Creating a file, or renaming one out, takes its folder's lock (Linux VFS: the parent
    # inode's lock); a worker staging into its own subfolder never waits for another's.
    # The recording process publishes from every subfolder.
    stage = staging.Staging(tmp_path)
    mine = stage.name("P.hex")
    stage.start({mine: b"parent\n"}).wait()
    read, write = os.pipe()
    pid = os.fork()
    if pid == 0:                                       # a worker: stages its own image
        try:
            theirs = stage.name("C.hex")
            stage.start({theirs: b"child\n"}).wait()
            os.write(write, theirs.encode())
        finally:
            os._exit(0)
    os.close(write)
    theirs = os.read(read, 4096).decode()
    os.close(read)
    assert os.waitpid(pid, 0)[1] == 0
    assert (mine, theirs) == (f"{os.getpid()}{os.sep}P.hex", f"{pid}{os.sep}C.hex")
    assert (stage.path / mine).read_bytes() == b"parent\n"
    assert (stage.path / theirs).read_bytes() == b"child\n"
    assert stage.publish_new(theirs, str(tmp_path / "C.r1.hex"))
    assert stage.publish_new(mine, str(tmp_path / "P.r1.hex"))
    assert (tmp_path / "C.r1.hex").read_bytes() == b"child\n"
    stage.close()
    assert not stage.path.exists()


def test_the_workers_of_a_batch_stage_apart_and_the_recorder_publishes_all(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    published: list[str] = []
    real = staging.Staging.publish_new

    def publish_new(self: staging.Staging, name: str, final: str) -> bool:
        published.append(name)
        return real(self, name, final)

    monkeypatch.setattr(staging.Staging, "publish_new", publish_new)
    out = tmp_path / "out"
    summary = batch.run_batch(SPEC, _lot(tmp_path / "lot.csv", 2 * batch.CHUNK + 10),
                              out=out, db=None, station="t", recalibrate=False,
                              cal_time=None, jobs=2)
    passed = sorted(o.serial for o in summary.outcomes if o.status == "pass")
    folders = {name.split(os.sep)[0] for name in published}
    assert sorted(name.split(os.sep)[1].removesuffix(".hex") for name in published) == passed
    assert folders and str(os.getpid()) not in folders     # staged by the workers
    assert sorted(p.name.split(".r")[0] for p in out.glob("*.hex")) == passed


def test_a_failed_fsync_is_one_line_and_every_file_is_closed(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    real_fsync = os.fsync
    calls: list[int] = []

    def failing_fsync(fd: int) -> None:
        calls.append(fd)
        if len(calls) == 2:
            raise OSError(5, "Input/output error")
        real_fsync(fd)

    monkeypatch.setattr(staging.os, "fsync", failing_fsync)
    stage = staging.Staging(tmp_path)
    open_before = len(os.listdir("/proc/self/fd"))
    flushing = stage.start({stage.name(f"U{i}.hex"): b":00000001FF\n" for i in range(5)})
    with pytest.raises(staging.OutputError, match=r"cannot write an image: Input/output error$"):
        flushing.wait()
    assert len(calls) == 5 and len(os.listdir("/proc/self/fd")) == open_before
    stage.close()


def test_a_part_is_flushed_by_one_thread_write_back_started_before_the_first_fsync(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # Source: posix_fadvise(2) POSIX_FADV_DONTNEED starts write-back of a file's dirty pages
    # (Linux) and only advises; fsync(2) still makes each file durable.
    events: list[tuple[str, int, int]] = []
    real_fsync = os.fsync

    def hint(fd: int, offset: int, length: int, advice: int) -> None:
        assert advice == os.POSIX_FADV_DONTNEED
        events.append(("hint", fd, threading.get_ident()))

    def fsync(fd: int) -> None:
        events.append(("fsync", fd, threading.get_ident()))
        real_fsync(fd)

    monkeypatch.setattr(staging, "_START_WRITEBACK", hint)
    monkeypatch.setattr(staging.os, "fsync", fsync)
    stage = staging.Staging(tmp_path)
    files = {stage.name(f"U{i}.hex"): b":00000001FF\n" for i in range(8)}
    stage.start(files).wait()
    stage.start(files).wait()
    assert [e[0] for e in events] == (["hint"] * 8 + ["fsync"] * 8) * 2
    assert len({e[2] for e in events}) == 1 and events[0][2] != threading.get_ident()
    assert sorted(e[1] for e in events[:8]) == sorted(e[1] for e in events[8:16])
    stage.close()


@pytest.mark.parametrize("one_call", [True, False])
def test_publish_new_never_replaces_a_file(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                           one_call: bool) -> None:
    # Source: renameat2(2), RENAME_NOREPLACE: "Don't overwrite newpath of the rename. Return
    # an error if newpath already exists" (Linux 3.15, ext4 among the first file systems);
    # without it, a look for the name before rename(2).
    if one_call:
        assert staging._RENAMEAT2 is not None or not sys.platform.startswith("linux")
    else:
        monkeypatch.setattr(staging, "_RENAMEAT2", None)
    stage = staging.Staging(tmp_path)
    a, b = stage.name("A.hex"), stage.name("B.hex")
    stage.start({a: b"new A\n", b: b"new B\n"}).wait()
    (tmp_path / "B.r1.hex").write_bytes(b"a killed run's\n")
    assert stage.publish_new(a, str(tmp_path / "A.r1.hex")) is True
    assert stage.publish_new(b, str(tmp_path / "B.r1.hex")) is False
    assert (tmp_path / "A.r1.hex").read_bytes() == b"new A\n"
    assert (tmp_path / "B.r1.hex").read_bytes() == b"a killed run's\n"
    assert sorted(str(p.relative_to(stage.path)) for p in stage.path.rglob("*")
                  if p.is_file()) == [staging.OWNER, b]
    stage.close()


def _hold(folder: Path) -> subprocess.Popen[bytes]:
    """A live process holding a staging folder of its own in ``folder``."""
    code = ("import sys, time; from pathlib import Path; from hosttool.util.staging import "
            "Staging; s = Staging(Path(sys.argv[1])); print(s.path, flush=True); "
            "time.sleep(60)")
    return subprocess.Popen([sys.executable, "-c", code, str(folder)], stdout=subprocess.PIPE)


def test_stale_staging_is_cleared_and_a_live_one_kept(tmp_path: Path) -> None:
    live = _hold(tmp_path)
    assert live.stdout is not None
    live_path = Path(live.stdout.readline().decode().strip())
    dead = _hold(tmp_path)
    assert dead.stdout is not None
    dead_path = Path(dead.stdout.readline().decode().strip())
    (dead_path / "HS0001.hex").write_bytes(b":00000001FF\n")
    dead.kill()
    dead.wait()
    # a folder just made, its lock file not yet created, is another batch's: kept
    young = tmp_path / f"{staging.STAGING_PREFIX}1-young"
    young.mkdir()
    # the same, an hour old: a batch killed right after making it
    old = tmp_path / f"{staging.STAGING_PREFIX}2-old"
    old.mkdir()
    hour_ago = time.time() - 3600
    os.utime(old, (hour_ago, hour_ago))
    try:
        assert staging.clear_stale(tmp_path) == 2
        assert live_path.is_dir() and young.is_dir()
        assert not dead_path.exists() and not old.exists()
        fd = os.open(live_path / staging.OWNER, os.O_RDWR)
        with pytest.raises(BlockingIOError):
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        os.close(fd)
    finally:
        live.kill()
        live.wait()
