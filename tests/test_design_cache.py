"""The design cache only ever saves time: same bytes out, and nothing in it is trusted blindly.

Outside references: Python's pickle protocol (an entry naming any other callable must be
refused before anything runs), hashlib's SHA-256 (the entry's digest), and the headers
rendered from a freshly computed design (the cached one must give the same bytes).
"""

from __future__ import annotations

import dataclasses
import hashlib
import os
import pickle
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from hosttool.codegen.render import render_headers
from hosttool.design import cached
from hosttool.design.cached import MAGIC, cache_key, cached_design
from hosttool.design.resolve import make_design
from hosttool.spec.schema import load_spec

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"


@pytest.fixture()
def cache_dir(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    monkeypatch.setenv(cached.CACHE_ENV, str(tmp_path / "cache"))
    return tmp_path / "cache" / "designs"


def _same(a: object, b: object) -> bool:
    """Equal value for value, numpy arrays (dtype, shape, every element) included."""
    if isinstance(a, np.ndarray) or isinstance(b, np.ndarray):
        return (isinstance(a, np.ndarray) and isinstance(b, np.ndarray)
                and a.dtype == b.dtype and np.array_equal(a, b))
    if dataclasses.is_dataclass(a) and not isinstance(a, type):
        return type(a) is type(b) and all(
            _same(getattr(a, f.name), getattr(b, f.name)) for f in dataclasses.fields(a))
    if isinstance(a, (tuple, list)):
        return (type(a) is type(b) and len(a) == len(b)  # type: ignore[arg-type]
                and all(_same(x, y) for x, y in zip(a, b, strict=True)))  # type: ignore[call-overload]
    if isinstance(a, dict):
        return isinstance(b, dict) and a.keys() == b.keys() and all(
            _same(a[k], b[k]) for k in a)
    if isinstance(a, float) and isinstance(b, float) and a != a:
        return b != b                           # NaN where NaN was
    return type(a) is type(b) and a == b


def _entry(folder: Path) -> Path:
    entries = list(folder.glob("*.design"))
    assert len(entries) == 1, entries
    return entries[0]


@pytest.mark.parametrize("name", ["hive_scale", "fatigue_coupon"])
def test_cached_design_renders_the_same_bytes(cache_dir: Path, name: str) -> None:
    spec = load_spec(EXAMPLES / f"{name}.toml")
    fresh = make_design(spec)
    first = cached_design(spec)             # computes and stores
    again = cached_design(spec)             # loads
    assert _entry(cache_dir).exists()
    assert _same(again, fresh)
    assert render_headers(again) == render_headers(fresh) == render_headers(first)


def test_a_corrupt_entry_is_ignored_and_rewritten(cache_dir: Path) -> None:
    spec = load_spec(EXAMPLES / "hive_scale.toml")
    cached_design(spec)
    path = _entry(cache_dir)
    good = path.read_bytes()
    bad = bytearray(good)
    bad[-10] ^= 0xFF                        # payload changed, digest no longer matches
    path.write_bytes(bytes(bad))
    assert _same(cached_design(spec), make_design(spec))
    assert path.read_bytes() == good        # rewritten from a fresh design
    path.write_bytes(b"not an entry at all")
    assert _same(cached_design(spec), make_design(spec))


def test_an_entry_naming_another_callable_never_runs_it(cache_dir: Path,
                                                        tmp_path: Path) -> None:
    spec = load_spec(EXAMPLES / "hive_scale.toml")
    marker = tmp_path / "ran"

    class Exploit:
        def __reduce__(self) -> tuple[object, tuple[str, ...]]:
            return (os.system, (f"touch {marker}",))

    payload = pickle.dumps(Exploit())
    entry = MAGIC + hashlib.sha256(payload).hexdigest().encode("ascii") + b"\n" + payload
    cache_dir.mkdir(parents=True)
    (cache_dir / f"{cache_key(spec)}.design").write_bytes(entry)
    assert _same(cached_design(spec), make_design(spec))
    assert not marker.exists()


def test_an_entry_of_another_spec_is_not_used(cache_dir: Path, tmp_path: Path) -> None:
    spec = load_spec(EXAMPLES / "hive_scale.toml")
    other = load_spec(EXAMPLES / "fatigue_coupon.toml")
    cache_dir.mkdir(parents=True)
    # a valid entry of the other spec filed under this spec's key
    (cache_dir / f"{cache_key(spec)}.design").write_bytes(cached._encode(make_design(other)))
    assert _same(cached_design(spec), make_design(spec))


def test_the_key_follows_version_and_spec(monkeypatch: pytest.MonkeyPatch) -> None:
    spec = load_spec(EXAMPLES / "hive_scale.toml")
    key = cache_key(spec)
    assert cache_key(load_spec(EXAMPLES / "fatigue_coupon.toml")) != key
    monkeypatch.setattr(cached, "__version__", "99.0.0")
    assert cache_key(spec) != key


def test_cache_off_writes_nothing(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv(cached.CACHE_ENV, "off")
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path))
    spec = load_spec(EXAMPLES / "hive_scale.toml")
    assert _same(cached_design(spec), make_design(spec))
    assert not any(tmp_path.iterdir())


def test_verify_of_a_cached_spec_imports_no_filter_design(cache_dir: Path) -> None:
    # with the design cached, verify --json imports no scipy at all (numba is started with
    # it hidden: compiled.py), no report (matplotlib, jinja2) and no CAL.json reader
    spec = EXAMPLES / "hive_scale.toml"
    cached_design(load_spec(spec))
    unwanted = ("scipy", "matplotlib", "jinja2", "hosttool.formats.caljson",
                "hosttool.verify.report")
    code = ("import sys; from hosttool.commands.verify import run_verify; "
            f"run_verify({str(spec)!r}, calibration=None, samples=20000, seed=0, "
            "engine='python', as_json=True, report=None); "
            f"print(sorted(m for m in sys.modules if m.startswith({unwanted!r})))")
    env = dict(os.environ, **{cached.CACHE_ENV: str(cache_dir.parent)})
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          env=env, check=True, timeout=600)
    assert done.stdout.strip() == "[]", done.stdout
