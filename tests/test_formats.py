"""The one formatting module: what readers see for numbers, p-values, years and lags.

Common practice with no single source: p-values below 0.001 are written '< 0.001' (as in
most journals' style guides); runs of consecutive years are written as spans.
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd

from lagsieve.formats import is_missing, lag_range, number, p_text, short_number, text, year_spans


def test_missing_values_of_every_kind():
    for v in (None, float("nan"), np.nan, pd.NA, pd.NaT):
        assert is_missing(v) and number(v) == "" and p_text(v) == "" and text(v) == ""
    assert not is_missing("x") and not is_missing(0.0)


def test_numbers_and_p_values():
    assert number(0.12345) == "0.123" and number(2, "{:.1f}") == "2.0"
    assert number("n/a") == "n/a"  # a value that is not a number is shown as given
    assert p_text(0.0004) == "< 0.001" and p_text(0.001) == "0.001" and p_text(0.0456) == "0.046"
    assert short_number(math.pi) == "3.14159" and short_number(1234567.0) == "1.23457e+06"


def test_year_spans_and_lag_ranges():
    assert year_spans([1995, 1990, 1991, 1992]) == "1990-1992, 1995"
    assert year_spans([2001]) == "2001" and year_spans([]) == ""
    assert lag_range([3, 0, 1, 2]) == "0\u20133"
    assert lag_range([0, 1]) == "0, 1" and lag_range([0, 2, 3]) == "0, 2, 3"
