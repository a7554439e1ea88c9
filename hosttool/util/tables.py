"""Plain-text tables for the terminal: sections of label / value / note rows."""

from __future__ import annotations

from collections.abc import Iterable, Sequence

Row = tuple[str, str, str]


def table(title: str, rows: Iterable[Row]) -> str:
    """A titled section; each row is (label, value with unit, note). Columns are aligned."""
    rows = list(rows)
    width_label = max((len(r[0]) for r in rows), default=0)
    width_value = max((len(r[1]) for r in rows), default=0)
    lines = [title, "-" * len(title)]
    for label, value, note in rows:
        line = f"  {label:<{width_label}}  {value:>{width_value}}"
        lines.append(f"{line}  {note}".rstrip() if note else line.rstrip())
    return "\n".join(lines)


def sections(parts: Sequence[str]) -> str:
    """Sections separated by blank lines, ending in a newline."""
    return "\n\n".join(parts) + "\n"


def num(value: float, digits: int = 5) -> str:
    """A number in general format with `digits` significant digits."""
    return f"{value:.{digits}g}"
