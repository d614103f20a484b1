"""Formatting for generated C: validated identifiers, escaped text, exact number literals.

User text (feature, target and class names, units) only ever reaches the C files through
:func:`c_string` (inside a string literal) or :func:`c_comment` (inside a block comment); neither
output can end its literal or comment, form a trigraph, splice a line or hold a non-ASCII byte.
Identifiers come only from the validated prefix and from indices.
"""

from __future__ import annotations

import re

import numpy as np

from nodecast.compiler.errors import NodecastError

PREFIX_PATTERN = re.compile(r"[a-z_][a-z0-9_]*\Z")
MAX_PREFIX = 32
# ISO C99 6.4.1 keywords, plus the C++ keywords a C++ build would trip on (from memory).
_KEYWORDS = frozenset("""
auto break case char const continue default do double else enum extern float for goto if inline int
long register restrict return short signed sizeof static struct switch typedef union unsigned void
volatile while bool catch class const_cast delete dynamic_cast explicit export false friend mutable
namespace new operator private protected public reinterpret_cast static_cast template this throw
true try typeid typename using virtual wchar_t and and_eq bitand bitor compl not not_eq or or_eq xor
xor_eq alignas alignof char16_t char32_t constexpr decltype noexcept nullptr static_assert
thread_local
""".split())
# Standard C headers (ISO C99 7.1.2): a prefix with one of these names would shadow the header.
_HEADERS = frozenset("""
assert complex ctype errno fenv float inttypes iso646 limits locale math setjmp signal stdarg
stdbool stddef stdint stdio stdlib string tgmath time wchar wctype
""".split())
# Files nodecast writes or builds beside <prefix>.c: the board start-up code (--bare-metal), the
# verify harness, and the user's own main.c that docs/c-backend.md tells them to add.
_TAKEN_FILES = {"startup": "the start-up code startup.c that --bare-metal writes",
                "harness": "the verify harness harness.c (and its harness_* functions)",
                "main": "your own main.c beside the model"}
# Upper-case macro families the C library reserves (ISO C99 7.26: <locale.h>, <signal.h>, <fenv.h>).
_RESERVED_MACRO_PREFIXES = {"lc": "LC_", "sig": "SIG_", "fe": "FE_"}
_NAMED_ESCAPES = {"\n": "\\n", "\t": "\\t", "\r": "\\r", '"': '\\"', "\\": "\\\\", "?": "\\?"}


def check_prefix(prefix) -> str:
    """Return ``prefix`` if it can name the files and identifiers, else raise NodecastError."""
    if not isinstance(prefix, str) or not PREFIX_PATTERN.match(prefix):
        raise NodecastError(f"--prefix must match [a-z_][a-z0-9_]* (lower-case letters, digits, "
                            f"underscores; not starting with a digit), got {prefix!r}")
    if len(prefix) > MAX_PREFIX:
        raise NodecastError(f"--prefix is at most {MAX_PREFIX} characters, got {len(prefix)}")
    if prefix in _KEYWORDS:
        raise NodecastError(f"--prefix {prefix!r} is a C or C++ keyword; choose another name")
    if prefix.startswith("_") or prefix.endswith("_") or "__" in prefix:
        raise NodecastError(f"--prefix {prefix!r} would make reserved identifiers (a leading "
                            "underscore, or two in a row, as in __tanh: ISO C 7.1.3, C++ "
                            "[lex.name]); start with a letter and do not end with '_'")
    if prefix in _TAKEN_FILES:
        raise NodecastError(f"--prefix {prefix!r} would clash with {_TAKEN_FILES[prefix]}; "
                            "choose another name")
    if prefix in _RESERVED_MACRO_PREFIXES:
        raise NodecastError(f"--prefix {prefix!r} would define macros {prefix.upper()}_..., a "
                            f"family the C library reserves ({_RESERVED_MACRO_PREFIXES[prefix]}); "
                            "choose another name")
    if prefix in _HEADERS:
        raise NodecastError(f"--prefix {prefix!r} would shadow the standard header <{prefix}.h>; "
                            "choose another name")
    return prefix


def _escape_char(char: str, in_comment: bool) -> str:
    if char in _NAMED_ESCAPES:
        return _NAMED_ESCAPES[char]
    if " " <= char <= "~":
        return char
    if in_comment:  # readable code points; a comment gives them no meaning
        return f"\\u{ord(char):04x}" if ord(char) <= 0xFFFF else f"\\U{ord(char):08x}"
    return "".join(f"\\{byte:03o}" for byte in char.encode("utf-8"))


def c_string(text: str) -> str:
    """A C string literal (with its quotes) holding the UTF-8 bytes of ``text``."""
    return '"' + "".join(_escape_char(char, False) for char in str(text)) + '"'


def c_comment(text: str) -> str:
    """``text`` quoted and escaped so that it can sit inside a /* */ comment and end nothing."""
    body = "".join(_escape_char(char, True) for char in str(text))
    return '"' + body.replace("*/", "*\\/").replace("/*", "/\\*") + '"'


def float_literal(value: float) -> str:
    """A float (binary32) literal that reads back as float32(value); raise if it would overflow."""
    with np.errstate(over="ignore"):
        single = np.float32(value)
    if not np.isfinite(single):
        raise NodecastError(f"value {float(value):.17g} does not fit float32; emit float64 instead")
    return _with_point(f"{float(single):.9g}") + "f"


def double_literal(value: float) -> str:
    """A double literal that reads back as exactly ``value``."""
    return _with_point(f"{float(value):.17g}")


def _with_point(text: str) -> str:
    return text if any(c in text for c in ".e") else text + ".0"


def int_literal(value: int, bits: int) -> str:
    """An integer literal for an int16/int32 (plain) or int64 (INT64_C) table entry."""
    value = int(value)
    if not -(2 ** (bits - 1)) < value < 2 ** (bits - 1):
        raise NodecastError(f"internal: {value} does not fit int{bits}_t")
    return f"INT64_C({value})" if bits == 64 else str(value)


def array_body(literals: list[str], indent: int = 4, width: int = 100) -> str:
    """Comma-separated literals wrapped into lines of at most ``width`` characters."""
    lines, line = [], ""
    for item in literals:
        piece = item + ","
        if line and len(line) + 1 + len(piece) + indent > width:
            lines.append(line)
            line = piece
        else:
            line = f"{line} {piece}" if line else piece
    if line:
        lines.append(line)
    return "\n".join(" " * indent + text for text in lines)


def array_rows(rows, indent: int = 4, width: int = 100) -> str:
    """Rows of a two-dimensional initialiser: one line per row when it fits, wrapped otherwise."""
    lines = []
    for row in rows:
        single = " " * indent + "{ " + ", ".join(row) + " },"
        if len(single) <= width:
            lines.append(single)
        else:
            lines += [" " * indent + "{", array_body(list(row), indent + 4, width),
                      " " * indent + "},"]
    return "\n".join(lines)
