"""Reading a TOML table with typed getters that name the field path and line on error.

``Context`` is the file being read (its name and lines, to locate a field for the message);
``Table`` wraps one TOML table and records which keys were read, so that ``finish`` can
refuse the rest with the nearest valid key as a hint. Every error is a one-line SpecError.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from typing import Any

from hosttool.errors import SpecError
from hosttool.spec.limits import check_limit
from hosttool.util.text import SHOWN_CHARS, control_character, shown

#: Largest magnitude of a TOML integer read (int64; anything larger is a typo).
MAX_INTEGER = (1 << 63) - 1


class Table:
    """A TOML table being validated: typed getters that record what was read."""

    def __init__(self, data: dict[str, Any], path: str, ctx: Context):
        self.data = data
        self.path = path
        self.ctx = ctx
        self.used: set[str] = set()

    def _field(self, key: str) -> str:
        return f"{self.path}.{key}" if self.path else key

    def fail(self, key: str, message: str) -> SpecError:
        return self.ctx.error(self._field(key), message)

    def has(self, key: str) -> bool:
        return key in self.data

    def _raw(self, key: str, default: Any, required: bool) -> Any:
        self.used.add(key)
        if key in self.data:
            return self.data[key]
        if required:
            # a misspelt required key would otherwise never reach the unknown-key check
            near = _nearest(key, [k for k in self.data if k not in self.used], cutoff=0.8)
            hint = f" (is {near[0]!r} a misspelling of it?)" if near else ""
            raise self.ctx.error(self._field(key), f"missing required key{hint}",
                                 locate=self.path)
        return default

    def number(self, key: str, default: float | None = None, *, required: bool = False,
               minimum: float | None = None, maximum: float | None = None,
               exclusive_min: bool = False, exclusive_max: bool = False) -> float | None:
        """A float (an integer is accepted); range limits inclusive unless exclusive_*."""
        value = self._raw(key, default, required)
        if value is None:
            return None
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise self.fail(key, f"expected a number, got {describe(value)}")
        if isinstance(value, int) and abs(value) > MAX_INTEGER:
            raise self.fail(key, f"{describe(value)} is too large")
        value = float(value)
        problem = check_limit(self._field(key), value)
        if problem is not None:
            raise self.fail(key, problem)
        if minimum is not None and (value <= minimum if exclusive_min else value < minimum):
            relation = "greater than" if exclusive_min else "at least"
            raise self.fail(key, f"must be {relation} {minimum:g}, got {value:g}")
        if maximum is not None and (value >= maximum if exclusive_max else value > maximum):
            relation = "less than" if exclusive_max else "at most"
            raise self.fail(key, f"must be {relation} {maximum:g}, got {value:g}")
        return value

    def req_number(self, key: str, **limits: Any) -> float:
        """A required float."""
        value = self.number(key, required=True, **limits)
        assert value is not None
        return value

    def integer(self, key: str, default: int | None = None, *, required: bool = False,
                minimum: int | None = None, maximum: int | None = None,
                choices: tuple[int, ...] | None = None) -> int | None:
        """An integer, optionally from a fixed set."""
        value = self._raw(key, default, required)
        if value is None:
            return None
        if isinstance(value, bool) or not isinstance(value, int):
            raise self.fail(key, f"expected an integer, got {describe(value)}")
        if abs(value) > MAX_INTEGER:
            raise self.fail(key, f"{describe(value)} is too large")
        if choices is not None and value not in choices:
            raise self.fail(key, f"must be one of {', '.join(map(str, choices))}, got {value}")
        problem = check_limit(self._field(key), value)
        if problem is not None:
            raise self.fail(key, problem)
        if minimum is not None and value < minimum:
            raise self.fail(key, f"must be at least {minimum}, got {value}")
        if maximum is not None and value > maximum:
            raise self.fail(key, f"must be at most {maximum}, got {value}")
        return value

    def req_integer(self, key: str, **limits: Any) -> int:
        """A required integer."""
        value = self.integer(key, required=True, **limits)
        assert value is not None
        return value

    def string(self, key: str, default: str | None = None, *, required: bool = False,
               choices: tuple[str, ...] | None = None) -> str | None:
        """A string, optionally from a fixed set (the nearest choice is suggested)."""
        value = self._raw(key, default, required)
        if value is None:
            return None
        if not isinstance(value, str):
            raise self.fail(key, f"expected a string, got {describe(value)}")
        bad = control_character(value)
        if bad is not None:
            raise self.fail(key, f"control character {bad} in {shown(value)}")
        if choices is not None and value not in choices:
            near = _nearest(value, choices)
            hint = f" (did you mean {near[0]!r}?)" if near else ""
            raise self.fail(key, f"{shown(value)} is not one of {', '.join(choices)}{hint}")
        return value

    def req_string(self, key: str, **kw: Any) -> str:
        """A required string."""
        value = self.string(key, required=True, **kw)
        assert value is not None
        return value

    def boolean(self, key: str, default: bool) -> bool:
        """A true/false value."""
        value = self._raw(key, default, False)
        if not isinstance(value, bool):
            raise self.fail(key, f"expected true or false, got {describe(value)}")
        return value

    def table(self, key: str, *, required: bool = False) -> Table | None:
        """A sub-table."""
        value = self._raw(key, None, required)
        if value is None:
            return None
        if not isinstance(value, dict):
            raise self.fail(key, f"expected a table, got {describe(value)}")
        return Table(value, self._field(key), self.ctx)

    def array(self, key: str, *, required: bool = False) -> list[Any] | None:
        """An array."""
        value = self._raw(key, None, required)
        if value is None:
            return None
        if not isinstance(value, list):
            raise self.fail(key, f"expected an array, got {describe(value)}")
        return value

    def finish(self) -> None:
        """Refuse keys that were never read, suggesting the nearest valid one."""
        for key in self.data:
            if key not in self.used:
                near = _nearest(key, sorted(self.used), cutoff=0.5)
                hint = f" (did you mean {near[0]!r}?)" if near else ""
                safe = key if key.isprintable() and len(key) <= SHOWN_CHARS else shown(key)
                raise self.ctx.error(self._field(safe), f"unknown key{hint}")


def _nearest(word: str, candidates: Sequence[str], cutoff: float = 0.6) -> list[str]:
    """The candidate nearest ``word`` (difflib's ratio at least ``cutoff``), as a list of at
    most one, for the hint of an error message."""
    import difflib  # deferred on purpose: only a bad spec needs it, check starts without it

    return difflib.get_close_matches(word, candidates, n=1, cutoff=cutoff)


def describe(value: Any) -> str:
    kinds = {bool: "a boolean", str: "a string", int: "an integer", float: "a number",
             list: "an array", dict: "a table"}
    if isinstance(value, str):
        shown_value = shown(value)
    elif isinstance(value, int) and value.bit_length() > 64:
        shown_value = f"{value.bit_length()} bits"
    else:
        shown_value = repr(value)
    return kinds.get(type(value), type(value).__name__) + (
        f" ({shown_value})" if isinstance(value, (str, int, float)) else "")


class Context:
    """The file being read: names it in errors and finds the line of a field."""

    def __init__(self, source: str, text: str):
        self.source = source
        self.lines = text.splitlines()

    def error(self, field_path: str, message: str, *, locate: str | None = None) -> SpecError:
        line = self.find_line(locate if locate is not None else field_path)
        return SpecError(message, file=self.source, field=field_path, line=line)

    def find_line(self, field_path: str) -> int | None:
        """Best-effort 1-based line of a dotted field path (tables, keys, array items)."""
        parts = [p for p in re.split(r"\.|\[(\d+)\]", field_path) if p]
        if not parts:
            return None
        table_parts: list[str] = []
        key = parts[-1] if not parts[-1].isdigit() else None
        prefix = parts[:-1] if key is not None else parts
        for part in prefix:
            if not part.isdigit():
                table_parts.append(part)
        start = 0
        index = _array_index(parts)
        if table_parts:
            header = self._header(table_parts)
            headers = [i for i, ln in enumerate(self.lines) if header.match(ln)]
            found = headers[0] if headers else None
            if (index is not None and len(headers) > index
                    and self.lines[headers[index]].lstrip().startswith("[[")):
                # an array of tables: item `index` is the index-th [[...]] block
                found, index = headers[index], None
            if found is None:
                # keys of a table written inline (e.g. an array of inline tables)
                found = next((i for i, ln in enumerate(self.lines)
                              if re.match(r"^\s*" + re.escape(table_parts[-1]) + r"\s*=", ln)),
                             None)
                if found is None:
                    return None
                if key is None:
                    return found + 1
            start = found
            if key is None:
                return found + 1
        if key is None:
            return None
        pattern = re.compile(r"(^|[{,\s])" + re.escape(key) + r"\s*=")
        hits = [i for i in range(start, len(self.lines)) if pattern.search(self.lines[i])
                and (i == start or not table_parts or not self._is_header(self.lines[i]))]
        end = next((i for i in range(start + 1 if table_parts else 0, len(self.lines))
                    if self._is_header(self.lines[i])), len(self.lines))
        hits = [i for i in hits if i < end]
        if index is not None and len(hits) > index:
            return hits[index] + 1
        if hits:
            return hits[0] + 1
        # not a key: perhaps a table of its own ([sensor], [filter.x])
        whole = self._header(table_parts + [key])
        return next((i + 1 for i, ln in enumerate(self.lines) if whole.match(ln)), None)

    @staticmethod
    def _header(parts: list[str]) -> re.Pattern[str]:
        return re.compile(r"^\s*\[+\s*" + r"\s*\.\s*".join(map(re.escape, parts)) + r"\s*\]+")

    @staticmethod
    def _is_header(line: str) -> bool:
        return bool(re.match(r"^\s*\[", line))


def _array_index(parts: list[str]) -> int | None:
    digits = [int(p) for p in parts if p.isdigit()]
    return digits[-1] if digits else None
