"""``hosttool new``: a commented starter spec from a bundled example."""

from __future__ import annotations

from pathlib import Path

from hosttool.errors import OutputError
from hosttool.util.atomic import write_atomic
from hosttool.util.resources import example_text


def write_starter(path: Path, example: str, *, force: bool = False) -> Path:
    """Write the example's commented TOML to ``path``; refuse to overwrite unless ``force``."""
    text = example_text(example)
    if path.exists() and not force:
        raise OutputError(f"{path}: already exists (use --force to overwrite)")
    return write_atomic(path, text)
