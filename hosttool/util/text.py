"""Text as the tool accepts it in a field and shows it in a message.

One rule for every text field of every input (spec, readings, CAL.json, options): no
control characters. Refused are C0 (U+0000..U+001F; a tab only where a field says so),
DEL (U+007F), C1 (U+0080..U+009F, NEL among them), and the line and paragraph separators
(U+2028, U+2029): each can split a line of a message, a generated C comment or a file name.
"""

from __future__ import annotations

import re

_CONTROL = re.compile("[\x00-\x1f\x7f-\x9f\u2028\u2029]")
_CONTROL_BUT_TAB = re.compile("[\x00-\x08\x0a-\x1f\x7f-\x9f\u2028\u2029]")

#: Longest text quoted whole in a message; longer text is cut with "...".
SHOWN_CHARS = 40


def control_character(text: str, *, tab_ok: bool = False) -> str | None:
    """The first control character of ``text`` as ``U+XXXX``, or None if it has none."""
    found = (_CONTROL_BUT_TAB if tab_ok else _CONTROL).search(text)
    return None if found is None else f"U+{ord(found.group()):04X}"


def shown(text: str) -> str:
    """``text`` quoted for a one-line message: repr (control characters escaped), cut to
    ``SHOWN_CHARS`` characters."""
    if len(text) <= SHOWN_CHARS:
        return repr(text)
    return repr(text[:SHOWN_CHARS - 3]) + "..."
