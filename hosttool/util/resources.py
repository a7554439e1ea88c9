"""Files shipped inside the package: example specs, C header templates, firmware sources."""

from __future__ import annotations

from importlib import resources
from importlib.abc import Traversable

from hosttool.errors import InputError


def _folder(package: str) -> Traversable:
    return resources.files(package)


def example_names() -> list[str]:
    """Names of the bundled example specs, sorted."""
    return sorted(p.name[:-5] for p in _folder("hosttool.examples").iterdir()
                  if p.name.endswith(".toml"))


def example_text(name: str) -> str:
    """The commented TOML of a bundled example."""
    if name not in example_names():
        raise InputError(f"--example: no bundled example {name!r}; choose one of "
                         f"{', '.join(example_names())}")
    return _folder("hosttool.examples").joinpath(f"{name}.toml").read_text(encoding="utf-8")


def templates() -> Traversable:
    """The folder of jinja2 templates of the C headers."""
    return _folder("hosttool.templates")


def firmware_sources() -> Traversable:
    """The folder of the C reference firmware."""
    return _folder("hosttool.firmware_stub")
