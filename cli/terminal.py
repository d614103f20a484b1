"""What reaches a terminal: text from data or a bundle is printed with its control characters escaped.

A feature name, unit, class label or metadata text can hold an escape sequence (``ESC]0;..BEL``
retitles the terminal, ``ESC[2J`` clears it) or a bidirectional override that makes text read
otherwise than it is. The CLI writes stdout and stderr through :class:`EscapingStream`, so every
printed line (tables, ``inspect``, messages, the CSV ``predict`` prints) shows such characters as
``\\x1b``, ``\\u202e``. Files written with ``-o`` keep the exact bytes.
"""

from __future__ import annotations

import re

# C0 controls but tab, newline and carriage return; DEL and the C1 controls; the Unicode line and
# paragraph separators and the bidirectional embedding, override and isolate controls; surrogates.
_UNSAFE = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f\u061c\u200e\u200f\u2028-\u202e"
                     "\u2066-\u2069\ud800-\udfff]")


def _escape(match: re.Match) -> str:
    code = ord(match.group())
    return f"\\x{code:02x}" if code < 0x100 else f"\\u{code:04x}"


def printable(text: str) -> str:
    """``text`` with every character that could steer a terminal written as an escape."""
    return _UNSAFE.sub(_escape, text)


class EscapingStream:
    """A text stream that passes everything written through :func:`printable`."""

    def __init__(self, stream) -> None:
        self._stream = stream

    def write(self, text: str) -> int:
        self._stream.write(printable(text))
        return len(text)

    def writelines(self, lines) -> None:
        for line in lines:
            self.write(line)

    def __getattr__(self, name: str):
        return getattr(self._stream, name)
