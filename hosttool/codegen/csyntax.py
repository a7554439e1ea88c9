"""C spelling of generated names, numbers and free text (for render.py and the templates).

Every generated name starts with one prefix made from the spec name by ``c_prefix``; free
text goes into a comment through ``comment_text`` or into a string literal through
``c_string``, and neither can end the comment, start a new one, splice a line or form a
trigraph (trigraphs are on under ``-std=c99``).
"""

from __future__ import annotations

import re

from hosttool.errors import DesignError

#: Keywords and alternative tokens of C (C99 to C23) and C++ (to C++23).
RESERVED_WORDS = frozenset("""
auto break case char const continue default do double else enum extern float for goto if
inline int long register restrict return short signed sizeof static struct switch typedef
union unsigned void volatile while alignas alignof bool constexpr false nullptr
static_assert thread_local true typeof typeof_unqual and and_eq asm bitand bitor catch
char8_t char16_t char32_t class compl concept const_cast consteval constinit co_await
co_return co_yield decltype delete dynamic_cast explicit export friend mutable namespace new
noexcept not not_eq operator or or_eq private protected public reinterpret_cast requires
static_cast template this throw try typeid typename using virtual wchar_t xor xor_eq
""".split())

#: Macro name spaces the C standard library reserves (C11 7.31, "future library
#: directions"): a prefix starting like this could collide once the header is included.
_RESERVED_MACRO_SPACES = (
    (re.compile(r"^E[0-9A-Z]"), "E and a digit or capital letter (<errno.h>)"),
    (re.compile(r"^LC_[A-Z]"), "LC_ and a capital letter (<locale.h>)"),
    (re.compile(r"^SIG[A-Z_]"), "SIG and a capital letter or _ (<signal.h>)"),
    (re.compile(r"^(PRI|SCN)X"), "PRIX or SCNX (<inttypes.h>)"),
    (re.compile(r"^FE_[A-Z]"), "FE_ and a capital letter (<fenv.h>)"),
    (re.compile(r"^(ATOMIC|MEMORY_ORDER|TIME)_[A-Z]"), "ATOMIC_, MEMORY_ORDER_ or TIME_ "
     "and a capital letter (<stdatomic.h>, <time.h>)"),
)

_IDENTIFIER = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")

INT32_MIN = -(1 << 31)
INT32_MAX = (1 << 31) - 1


def c_prefix(name: str, *, field: str = "name") -> str:
    """The upper-case C prefix of spec name ``name`` (``hive_scale`` -> ``HIVE_SCALE``).

    Refuses (DesignError naming ``field``) a name that is not a C identifier, is a C or C++
    reserved word, holds ``__`` or ends in ``_`` (reserved in C++ or forming ``__`` before a
    suffix), or whose prefix falls in a name space the C library reserves.
    """
    if not _IDENTIFIER.fullmatch(name) or name.startswith("_"):
        raise DesignError(f"{field}: {name!r} is not a C identifier starting with a letter")
    if name.lower() in RESERVED_WORDS:
        raise DesignError(f"{field}: {name!r} is a C or C++ reserved word; choose another "
                          "spec name (it prefixes every generated C name)")
    if "__" in name or name.endswith("_"):
        raise DesignError(f"{field}: {name!r} holds '__' or ends in '_'; such C names are "
                          "reserved")
    prefix = name.upper()
    for pattern, what in _RESERVED_MACRO_SPACES:
        if pattern.match(prefix):
            raise DesignError(f"{field}: prefix {prefix}_ starts with {what}, a name space "
                              "the C standard reserves; choose another spec name")
    return prefix


def c_identifier(text: str) -> str:
    """``text`` if it is a valid C identifier that is no reserved word (AssertionError else).

    For names the tool itself composes (struct members, suffixes): a failure is a bug.
    """
    if not _IDENTIFIER.fullmatch(text) or text in RESERVED_WORDS or "__" in text:
        raise AssertionError(f"not a usable C identifier: {text!r}")
    return text


def _visible(ch: str) -> str:
    """A character as printable ASCII without backslash: itself, or <U+XXXX>."""
    if " " <= ch <= "~" and ch != "\\":
        return ch
    return f"<U+{ord(ch):04X}>"


def comment_text(text: str) -> str:
    """``text`` made safe inside a ``/* ... */`` comment on one line.

    Non-printable, non-ASCII characters and backslashes become ``<U+XXXX>``; ``*/``, ``/*``
    and ``//`` are broken by a space; ``??`` (a trigraph's start) becomes ``? ?``.
    """
    out = "".join(_visible(ch) for ch in text)
    while True:
        fixed = (out.replace("*/", "* /").replace("/*", "/ *").replace("//", "/ /")
                 .replace("??", "? ?"))
        if fixed == out:
            return out
        out = fixed


def c_string(text: str) -> str:
    """A C string literal (quotes included) holding the UTF-8 bytes of ``text`` exactly.

    Printable ASCII stays, except ``"``, ``\\`` and ``?`` (escaped, so no trigraph forms);
    every other byte is a three-digit octal escape (octal, unlike hex, cannot swallow a
    following digit).
    """
    parts = []
    for byte in text.encode("utf-8"):
        ch = chr(byte)
        if ch in '"\\?':
            parts.append("\\" + ch)
        elif 0x20 <= byte <= 0x7E:
            parts.append(ch)
        else:
            parts.append(f"\\{byte:03o}")
    return '"' + "".join(parts) + '"'


def c_int(value: int, *, bits: int = 32) -> str:
    """A signed integer constant of at most ``bits`` (32 or 64) bits as C source.

    Negative values are parenthesised; the most negative value is written as
    ``(-MAX - 1)`` because its magnitude has no type of that width.
    """
    low, high = -(1 << (bits - 1)), (1 << (bits - 1)) - 1
    if not low <= value <= high:
        raise AssertionError(f"{value} does not fit int{bits}_t")
    suffix = "" if bits == 32 else "LL"
    if value == low:
        return f"(-{high}{suffix} - 1{suffix})"
    return f"({value}{suffix})" if value < 0 else f"{value}{suffix}"


def c_hex32(value: int) -> str:
    """The 32-bit two's-complement bit pattern of ``value`` as 0xXXXXXXXX."""
    if not INT32_MIN <= value <= 0xFFFFFFFF:
        raise AssertionError(f"{value} does not fit 32 bits")
    return f"0x{value & 0xFFFFFFFF:08X}"
