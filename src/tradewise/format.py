"""One rule for printing numbers and units in every human view: terminal, figures, page and notebook.

Files of data (CSV, JSON) keep every digit; what a person reads goes through
here, so one value looks the same wherever it is shown:

- four significant digits (:data:`DIGITS`), never fewer than the whole
  number: ``4.50629`` reads ``4.506``, ``1865.3`` reads ``1,865`` and
  ``123456.7`` reads ``123,457``;
- thousands separated by commas, as engineering tables and price lists do;
- scientific notation only below 0.0001 and from a billion up
  (``1.235e-05``);
- a missing or not-a-number value is a dash, a flag is yes or no, whole
  numbers are exact;
- a unit follows the number after a space (``4.506 g``), a share is given in
  per cent with one decimal (``87.3 %``).

Examples
--------
>>> number(4.50629), number(1865.3), number(0.000012346), number(-0.5)
('4.506', '1,865', '1.235e-05', '-0.5')
>>> quantity(120.472, "N/mm"), share(0.8734), value(True), value(None)
('120.5 N/mm', '87.3 %', 'yes', '\u2014')
"""

from __future__ import annotations

import math
import sys
from collections import Counter
from typing import Any

__all__ = ["DIGITS", "MISSING", "number", "quantity", "share", "value", "seconds", "failures"]

#: Significant digits a person reads (CSV files keep them all).
DIGITS = 4

#: What a missing or not-a-number value reads as.
MISSING = "\u2014"

_SMALL, _LARGE = 1e-4, 1e9


def number(x: Any, digits: int = DIGITS) -> str:
    """A number as a person reads it: ``digits`` significant digits, thousands separated.

    Whole numbers (``int``) keep every digit; floats at least ``10**digits``
    are rounded to the unit, never to tens or hundreds. Text (a choice
    variable's option) is shown as it is.

    Examples
    --------
    >>> number(3.0), number(2500), number(0.1234567), number(float("nan"))
    ('3', '2,500', '0.1235', '\u2014')
    """
    if x is None:
        return MISSING
    x = _item(x)
    if isinstance(x, str):
        return str(x)
    if isinstance(x, bool):
        return "yes" if x else "no"
    if isinstance(x, int):
        return f"{int(x):,}"
    x = float(x)
    if math.isnan(x):
        return MISSING
    if math.isinf(x):
        return "\u221e" if x > 0 else "\u2212\u221e"
    if x == 0:
        return "0"
    size = abs(x)
    if not _SMALL <= size < _LARGE:
        mantissa, exponent = f"{x:.{digits - 1}e}".split("e")
        if "." in mantissa:
            mantissa = mantissa.rstrip("0").rstrip(".")
        return f"{mantissa}e{exponent}"
    decimals = max(0, digits - 1 - math.floor(math.log10(size)))
    text = f"{round(x, decimals):,.{decimals}f}"
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return "0" if text in ("-0", "") else text


def quantity(x: Any, unit: str | None = None, digits: int = DIGITS) -> str:
    """A number with its unit after a space (no unit, no space).

    Examples
    --------
    >>> quantity(0.12345, "K/W"), quantity(12, None)
    ('0.1235 K/W', '12')
    """
    x = _item(x)
    text = number(x, digits) if x is None or isinstance(x, int | float) else str(x)
    return f"{text} {unit}" if unit and text != MISSING else text


def share(fraction: float | None, decimals: int = 1) -> str:
    """A fraction (0.873) as per cent with ``decimals`` decimals ('87.3 %').

    Examples
    --------
    >>> share(1.0), share(0.00042), share(None)
    ('100.0 %', '0.0 %', '\u2014')
    """
    if fraction is None or not math.isfinite(float(fraction)):
        return MISSING
    return f"{100 * float(fraction):.{decimals}f} %"


def seconds(duration: float | None) -> str:
    """A duration: milliseconds below a second, seconds below two minutes, then minutes.

    Examples
    --------
    >>> seconds(0.0123), seconds(42.17), seconds(754)
    ('12.3 ms', '42.17 s', '12.6 min')
    """
    if duration is None or not math.isfinite(float(duration)):
        return MISSING
    duration = float(duration)
    if duration < 1:
        return f"{number(1000 * duration, 3)} ms"
    if duration < 120:
        return f"{number(duration)} s"
    return f"{number(duration / 60, 3)} min"


def value(x: Any) -> str:
    """Any table cell as a person reads it: numbers by :func:`number`, text unchanged.

    Examples
    --------
    >>> import numpy as np
    >>> value(2.0), value("6063"), value(np.int64(7)), value(np.float64(0.25))
    ('2', '6063', '7', '0.25')
    """
    x = _item(x)
    if x is None or isinstance(x, bool | int | float):
        return number(x)
    return str(x)


def _item(x: Any) -> Any:
    """A numpy scalar as the Python value it holds; numpy is not imported here, so that the command
    line starts quickly (a numpy value exists only once numpy is imported)."""
    numpy = sys.modules.get("numpy")
    if numpy is not None and isinstance(x, numpy.generic):
        return x.item()
    return x


def failures(n_timeout: int, messages: list[str]) -> str:
    """What failed, told apart: how many ran past the timeout, how many raised, and the commonest errors.

    ``messages`` holds one message for each evaluation that failed otherwise
    than by the timeout. Empty text when nothing failed.

    Examples
    --------
    >>> failures(2, ["ValueError: x", "ValueError: x", "KeyError: m"])
    '5 evaluation(s) failed: 2 ran past the timeout; 3 with an error (commonest: 2 x ValueError: x, 1 x KeyError: m)'
    >>> failures(0, ["ValueError: x"])
    '1 evaluation(s) failed: 1 with the error ValueError: x'
    """
    kinds = []
    if n_timeout:
        kinds.append(f"{n_timeout} ran past the timeout")
    if messages:
        ranked = Counter(messages).most_common()  # commonest first, ties in order of appearance
        if len(ranked) == 1:
            kinds.append(f"{len(messages)} with the error {ranked[0][0]}")
        else:
            top = ", ".join(f"{n} x {m}" for m, n in ranked[:2])
            more = f"; {len(ranked) - 2} other message(s)" if len(ranked) > 2 else ""
            kinds.append(f"{len(messages)} with an error (commonest: {top}{more})")
    if not kinds:
        return ""
    return f"{n_timeout + len(messages)} evaluation(s) failed: {'; '.join(kinds)}"
