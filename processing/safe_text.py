"""Text that came from outside (a file name, a file's header) made safe for a terminal or a log.

A file name on a shared export folder can hold anything but '/' and NUL: escape sequences that
clear the screen or retitle the window, a newline that forges a whole log line, bytes that are
not UTF-8. `safe_text` keeps printable text as it is and writes every control character
(C0, DEL, C1), line or paragraph separator, bidirectional override and undecodable byte as a
visible escape (`\\x1b`, `\\n`, `\\u202e`, `\\xff`), so what reaches the terminal is one line of
plain characters. It is used wherever such text is printed, logged or stored as a message.
"""
from __future__ import annotations

import re
from collections.abc import Iterable

# Control characters, separators that end a line, bidirectional controls and the lone
# surrogates Python uses for undecodable bytes (os.fsdecode's surrogateescape).
_UNSAFE = re.compile(
    "[\x00-\x1f\x7f-\x9f\u2028\u2029\u200e\u200f\u202a-\u202e\u2066-\u2069\ud800-\udfff\ufeff]"
)
_NAMED = {"\n": "\\n", "\r": "\\r", "\t": "\\t"}


def _escape(match: re.Match[str]) -> str:
    char = match.group()
    if char in _NAMED:
        return _NAMED[char]
    code = ord(char)
    if 0xDC80 <= code <= 0xDCFF:  # an undecodable byte kept by surrogateescape
        return f"\\x{code - 0xDC00:02x}"
    if code <= 0xFF:
        return f"\\x{code:02x}"
    return f"\\u{code:04x}"


def safe_text(text: object) -> str:
    """`text` as one line of printable characters: control and invisible direction characters
    escaped (`\\x1b`, `\\n`, `\\u202e`), undecodable bytes as `\\xff`."""
    value = text if isinstance(text, str) else str(text)
    if value.isascii() and value.isprintable():  # nothing to escape (the usual case: fast)
        return value
    return _UNSAFE.sub(_escape, value)



def safe_column(texts: Iterable[str]) -> list[str]:
    """`safe_text` of every cell of a column; a column with nothing to escape (the usual case)
    is checked at once, not cell by cell (a listing of 100,000 runs)."""
    column = list(texts)
    joined = "".join(column)
    if (joined.isascii() and joined.isprintable()) or not _UNSAFE.search(joined):
        return column
    return [safe_text(text) for text in column]
