"""Text from outside (file names, feed values) made safe to print in one line of a summary or log.

A file name or a cell may hold any character a file system or a logger allows: a line feed in
a name would split a summary line in two and let a delivery write lines of its own into the log.
"""

from __future__ import annotations

import re

__all__ = ["printable"]

# C0 and C1 control characters, DEL, and the Unicode line and paragraph separators.
_CONTROL = re.compile("[\x00-\x1f\x7f-\x9f\u2028\u2029]")
_NAMED = {"\n": "\\n", "\r": "\\r", "\t": "\\t"}


def printable(text: str) -> str:
    """``text`` with every control character written as an escape (``\\n``, ``\\x1b``,
    ``\\u2028``); a backslash stays as it is."""
    return _CONTROL.sub(lambda m: _NAMED.get(m.group(), m.group().encode("unicode_escape").decode("ascii")), text)
