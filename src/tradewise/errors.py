"""The one exception tree of tradewise; every user mistake is a TradewiseError."""

from __future__ import annotations

import re
from typing import Any

__all__ = [
    "TradewiseError",
    "CaseError",
    "ModelError",
    "DataError",
    "StoreError",
    "quote",
    "one_line",
    "undecodable",
]

#: The most characters of the user's own content (a cell, a line of a file) an error message quotes.
QUOTE_LIMIT = 80
#: The longest error line printed; longer ones are cut with an ellipsis.
LINE_LIMIT = 400
_CONTROL = re.compile(r"[\x00-\x1f\x7f]+")
_QUOTED = re.compile(rf"'([^']{{{QUOTE_LIMIT + 1},}})'|\"([^\"]{{{QUOTE_LIMIT + 1},}})\"")


def quote(value: Any, limit: int = QUOTE_LIMIT) -> str:
    """``repr(value)`` for an error message, cut to ``limit`` characters with an ellipsis.

    Examples
    --------
    >>> quote("x" * 100, limit=10)
    "'xxxxxxx…'"
    """
    text = repr(value)
    return text if len(text) <= limit else text[: limit - 2] + "…" + text[0]


def undecodable(data: bytes, exc: UnicodeDecodeError) -> str:
    """Where ``data`` stops being UTF-8, said for a person: the 1-based line and the byte.

    Examples
    --------
    >>> data = b"a,b\\n1,\\xff\\n"
    >>> try:
    ...     data.decode("utf-8")
    ... except UnicodeDecodeError as exc:
    ...     print(undecodable(data, exc))
    line 2 holds the byte 0xff, which is not UTF-8 text
    """
    line = data.count(b"\n", 0, exc.start) + 1
    return f"line {line} holds the byte 0x{data[exc.start]:02x}, which is not UTF-8 text"


def one_line(message: str) -> str:
    """An error message as one readable line.

    Line breaks and other control characters become single spaces, quoted
    content longer than :data:`QUOTE_LIMIT` characters is shortened with an
    ellipsis, and the whole is cut at :data:`LINE_LIMIT` characters.

    Examples
    --------
    >>> one_line("bad value\\n  in row 3")
    'bad value in row 3'
    """
    text = _CONTROL.sub(" ", str(message))
    text = re.sub(" {2,}", " ", text).strip()

    def shorten(match: re.Match) -> str:
        mark = "'" if match.group(1) is not None else '"'
        inner = match.group(1) if match.group(1) is not None else match.group(2)
        return f"{mark}{inner[: QUOTE_LIMIT - 3]}…{mark}"

    text = _QUOTED.sub(shorten, text)
    return text if len(text) <= LINE_LIMIT else text[: LINE_LIMIT - 1] + "…"


class TradewiseError(Exception):
    """Root of every error that tradewise raises on purpose.

    The message is one sentence naming the item, what was received, what is
    allowed and where (file, table, key or row). The command line prints it as
    one ``Error: ...`` line and exits with status 2.
    """

    exit_code = 2


class CaseError(TradewiseError, ValueError):
    """A case file or case folder is wrong: syntax, schema or a missing model."""


class ModelError(TradewiseError, RuntimeError):
    """The designer's model cannot be used at all (not one failed design: those are recorded)."""


class DataError(TradewiseError, ValueError):
    """A table of designs or a front file is unusable: missing columns, bad values, bad metadata."""


class StoreError(TradewiseError, OSError):
    """The SQLite archive is missing, unreadable, or belongs to another case."""
