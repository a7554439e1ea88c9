"""The resolved design kept in the user's cache folder, so an unchanged spec skips the design.

Designing the filters needs scipy.signal (about a second to import) and a few hundred
milliseconds of work; ``verify``, ``render`` and ``batch`` of a spec that did not change
load the Design from the cache instead. The cache can only ever save time:

- **Key**: SHA-256 of the cache format, the tool version, the Python and numpy versions,
  the name, size and modification time of every module that computes a design (so an edited
  checkout never reads a stale entry), the spec's canonical SHA-256 and its file name (which
  warnings quote).
- **Entry**: a magic line, the SHA-256 of the payload, the payload (a pickle of the Design).
  It is written atomically (temporary file, fsync, rename).
- **Reading trusts nothing**: a wrong magic or digest, a payload that names anything but
  hosttool's own dataclasses and numpy arrays (a restricted unpickler: no other class or
  function can be reached), or a Design whose spec is not equal, value for value, to the
  spec just read, is ignored and the design computed again (and the entry rewritten).
  Any error reading or writing the cache is ignored the same way.

Folder: ``$HOSTTOOL_CACHE_DIR``, else ``$XDG_CACHE_HOME/hosttool``, else
``~/.cache/hosttool``, subfolder ``designs``; ``HOSTTOOL_CACHE_DIR=off`` turns the cache off.
"""

from __future__ import annotations

import hashlib
import io
import os
import pickle
import sys
from dataclasses import is_dataclass
from pathlib import Path

import numpy as np

from hosttool import __version__
from hosttool.design.resolve import Design, make_design
from hosttool.errors import HostToolError
from hosttool.spec.schema import Spec
from hosttool.util.atomic import write_atomic

#: Version of the entry format; a change gives every entry a new key.
CACHE_FORMAT = 1
MAGIC = b"hosttool-design-cache 1\n"
#: Environment variable naming the cache folder ("off": no cache).
CACHE_ENV = "HOSTTOOL_CACHE_DIR"
#: Packages whose modules compute a design: their files are part of the key.
_DESIGN_PACKAGES = ("design", "physics", "spec")
#: numpy names a pickled array needs (module, name).
_NUMPY_NAMES = {("numpy", "dtype"), ("numpy", "ndarray"),
                ("numpy._core.numeric", "_frombuffer"), ("numpy.core.numeric", "_frombuffer"),
                ("numpy._core.multiarray", "_reconstruct"),
                ("numpy.core.multiarray", "_reconstruct")}


def cache_folder() -> Path | None:
    """Where designs are kept, or None when the cache is turned off."""
    chosen = os.environ.get(CACHE_ENV)
    if chosen is not None:
        return None if chosen.strip().lower() in ("", "off") else Path(chosen) / "designs"
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "hosttool" / "designs"


def _code_stamp() -> str:
    """Name, size and modification time of every module that computes a design."""
    root = Path(__file__).resolve().parent.parent
    parts = []
    for package in _DESIGN_PACKAGES:
        for module in sorted((root / package).glob("*.py")):
            st = module.stat()
            parts.append(f"{package}/{module.name}:{st.st_size}:{st.st_mtime_ns}")
    return ";".join(parts)


def cache_key(spec: Spec) -> str:
    """The entry name of ``spec``'s design (hex SHA-256)."""
    text = "\n".join([f"format {CACHE_FORMAT}", f"hosttool {__version__}",
                      f"python {sys.version}", f"numpy {np.__version__}", _code_stamp(),
                      f"spec {spec.sha256}", f"source {spec.source}"])
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


class _DesignUnpickler(pickle.Unpickler):
    """Unpickles hosttool's dataclasses and numpy arrays, and nothing else."""

    def find_class(self, module: str, name: str) -> type:
        if (module, name) in _NUMPY_NAMES:
            found: type = super().find_class(module, name)
            return found
        if module.startswith("hosttool.") and module.split(".")[1] in _DESIGN_PACKAGES:
            found = super().find_class(module, name)
            if isinstance(found, type) and is_dataclass(found):
                return found
        raise pickle.UnpicklingError(f"{module}.{name} is not allowed in a design entry")


def _encode(design: Design) -> bytes:
    payload = pickle.dumps(design, protocol=pickle.HIGHEST_PROTOCOL)
    return MAGIC + hashlib.sha256(payload).hexdigest().encode("ascii") + b"\n" + payload


def _decode(data: bytes, spec: Spec) -> Design | None:
    """The Design in an entry, or None when anything about it is wrong."""
    if not data.startswith(MAGIC):
        return None
    digest, _, payload = data[len(MAGIC):].partition(b"\n")
    if hashlib.sha256(payload).hexdigest().encode("ascii") != digest:
        return None
    try:
        design = _DesignUnpickler(io.BytesIO(payload)).load()
    except Exception:  # any failure of an untrusted entry means "not cached"
        return None
    if not isinstance(design, Design) or design.spec != spec:
        return None
    return design


def cached_design(spec: Spec) -> Design:
    """``make_design(spec)``, from the cache when an intact entry holds it."""
    folder = cache_folder()
    if folder is None:
        return make_design(spec)
    path = folder / f"{cache_key(spec)}.design"
    try:
        design = _decode(path.read_bytes(), spec)
    except OSError:
        design = None
    if design is not None:
        return design
    design = make_design(spec)
    try:
        folder.mkdir(parents=True, exist_ok=True)
        write_atomic(path, _encode(design))
    except (OSError, HostToolError):  # a cache that cannot be written only costs time
        pass
    return design
