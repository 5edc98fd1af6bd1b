"""Tests of the one number rule (tradewise.format) and that every human view follows it."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from tradewise import format as fmt


@pytest.mark.parametrize(
    ("value", "text"),
    [
        (4.50629, "4.506"),
        (120.472, "120.5"),
        (1865.3, "1,865"),
        (123456.7, "123,457"),
        (0.123456, "0.1235"),
        (0.0001, "0.0001"),
        (0.00001, "1e-05"),
        (2.5e10, "2.5e+10"),
        (-3212.7, "-3,213"),
        (0.0, "0"),
        (-0.0, "0"),
        (3, "3"),
        (1234567, "1,234,567"),
        (np.float64(0.25), "0.25"),
        (np.int64(2500), "2,500"),
        (True, "yes"),
        ("stainless 302", "stainless 302"),
        (None, fmt.MISSING),
        (math.nan, fmt.MISSING),
    ],
)
def test_number_reads_as_an_engineer_writes_it(value, text):
    """Four significant digits, thousands separated, exact whole numbers, a dash for missing."""
    assert fmt.number(value) == text


def test_units_shares_and_durations():
    """A unit follows after a space, a share is per cent with one decimal, durations pick their unit."""
    assert fmt.quantity(0.12345, "K/W") == "0.1235 K/W"
    assert fmt.quantity(math.nan, "g") == fmt.MISSING
    assert fmt.share(0.87349) == "87.3 %"
    assert fmt.share(0.5, 2) == "50.00 %"
    assert fmt.seconds(0.0123) == "12.3 ms"
    assert fmt.seconds(754) == "12.6 min"


@given(st.floats(min_value=1e-4, max_value=1e9, allow_nan=False).filter(lambda v: v < 1e9))
def test_the_text_reads_back_within_half_a_unit_of_its_last_digit(value):
    """The printed number differs from the value by at most a rounding of its fourth digit."""
    text = fmt.number(value)
    back = float(text.replace(",", ""))
    allowed = max(0.5 * 10 ** (math.floor(math.log10(value)) - 3), 0.5 if value >= 1e3 else 0)
    assert abs(back - value) <= allowed * (1 + 1e-9) + 1e-12


def test_every_human_view_uses_the_one_rule():
    """No module that prints for people keeps a number formatter of its own."""
    import inspect

    from tradewise import choose, cli, compare, front, picker, plots, repeats, report, search

    for module in (choose, cli, compare, front, picker, plots, repeats, report, search):
        source = inspect.getsource(module)
        assert ":.6g}" not in source and ":.5g}" not in source, module.__name__
        assert "format_float_positional" not in source, module.__name__
